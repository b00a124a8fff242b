"""The server's request checks and log hygiene, without a server (studykit.app.server_guard).

DNS rebinding: a page of another site re-points its own name at 127.0.0.1; the browser then
sends that name in ``Host`` and ``Origin`` (RFC 9110 section 7.2 for ``Host``, RFC 6454 for
``Origin``, RFC 6455 section 4.1 for the websocket handshake's ``Origin``). The server must
answer only to its own names and only to same-origin requests.
"""

from __future__ import annotations

import logging
import signal
import subprocess
import sys
import textwrap

import pytest
from tornado.httputil import HTTPHeaders, HTTPServerRequest, RequestStartLine

from studykit.app.server_guard import (
    HostPolicy,
    RedactingFilter,
    host_name,
    inject_into_head,
    redact,
    strip_token,
    upload_guard_script,
)
from studykit.cli.serve import check_host_names
from studykit.errors import StudyInputError


def request(uri="/", **headers) -> HTTPServerRequest:
    h = HTTPHeaders()
    for key, value in headers.items():
        h[key.replace("_", "-")] = value
    return HTTPServerRequest(start_line=RequestStartLine("GET", uri, "HTTP/1.1"), headers=h)


@pytest.mark.parametrize(
    "header, name",
    [
        ("127.0.0.1:8866", "127.0.0.1"),
        ("LOCALHOST:8866", "localhost"),
        ("[::1]:8866", "::1"),
        ("::1", "::1"),
        ("example.org.:80", "example.org"),
        ("evil.example", "evil.example"),
    ],
)
def test_host_name_drops_port_brackets_case_and_trailing_dot(header, name):
    assert host_name(header) == name


def test_loopback_bind_answers_only_loopback_names():
    p = HostPolicy("127.0.0.1")
    for ok in ("127.0.0.1:8866", "localhost:8866", "[::1]:8866", "LocalHost"):
        assert p.host_allowed(ok), ok
    for bad in (
        "evil.example:8866",
        "127.0.0.1.evil.example",
        "localhost.evil.example",
        "10.0.0.7:8866",
        "",
        None,
    ):
        assert not p.host_allowed(bad), bad


def test_explicit_address_and_allowed_names_are_accepted():
    p = HostPolicy("192.168.1.20", ["review.example"])
    assert p.host_allowed("192.168.1.20:8866") and p.host_allowed("review.example:8866")
    assert p.host_allowed("localhost:8866")
    assert not p.host_allowed("192.168.1.21:8866") and not p.host_allowed("evil.example")


def test_wide_bind_accepts_ip_addresses_and_the_machine_name_but_no_other_name():
    p = HostPolicy("0.0.0.0", machine_name="qa-bench-3")
    assert p.host_allowed("10.1.2.3:8866") and p.host_allowed("[fe80::1]:8866")
    assert p.host_allowed("qa-bench-3:8866") and p.host_allowed("QA-BENCH-3")
    assert not p.host_allowed("evil.example:8866")


def test_refusal_names_the_reason_for_host_and_origin():
    p = HostPolicy("127.0.0.1")
    assert p.refusal(request(Host="127.0.0.1:8866")) is None
    assert p.refusal(request(Host="127.0.0.1:8866", Origin="http://127.0.0.1:8866")) is None
    # the rebinding case: Host and Origin agree, but the name is not ours
    why = p.refusal(request(Host="evil.example:8866", Origin="http://evil.example:8866"))
    assert "'evil.example:8866' is not one of this server's names" in why
    why = p.refusal(request(Host="127.0.0.1:8866", Origin="http://evil.example"))
    assert "another site ('http://evil.example')" in why
    # a different port is a different origin (RFC 6454 section 4), so is a sandboxed frame
    assert p.refusal(request(Host="127.0.0.1:8866", Origin="http://127.0.0.1:9999"))
    assert p.refusal(request(Host="127.0.0.1:8866", Origin="null"))


def test_redact_hides_the_token_and_any_token_parameter():
    token = "s3cr3t-T0ken_value"
    line = f"403 GET /voila/files/x?token={token}&a=1 (127.0.0.1) referer=/?token={token[:-3]}"
    out = redact(line, token)
    assert token not in out and token[:-3] not in out
    assert out.count("token=[hidden]") == 2 and "&a=1" in out
    assert redact("Authorization: token abc", None) == "Authorization: token [hidden]"


def test_redacting_filter_rewrites_formatted_records_and_tracebacks():
    token = "tok-123456789"
    record = logging.LogRecord(
        "tornado.general",
        logging.WARNING,
        __file__,
        1,
        "%d %s: %s",
        (403, f"POST /x?token={token}", "refused"),
        None,
    )
    try:
        raise ValueError(f"bad {token}")
    except ValueError:
        record.exc_info = sys.exc_info()
    assert RedactingFilter(token).filter(record)
    assert token not in record.getMessage() and "token=[hidden]" in record.getMessage()
    assert token not in record.exc_text and "bad [hidden]" in record.exc_text


def test_strip_token_keeps_the_other_parameters():
    r = request("/voila/render/wb.ipynb?token=abc&theme=light&x=", Host="127.0.0.1")
    strip_token(r)
    assert r.uri == "/voila/render/wb.ipynb?theme=light&x="
    assert "token" not in r.query_arguments and "token" not in r.arguments
    assert r.query_arguments["theme"] == [b"light"]
    r = request("/?token=abc", Host="127.0.0.1")
    strip_token(r)
    assert r.uri == "/" and r.query == ""


def test_upload_guard_is_injected_once_after_head():
    script = upload_guard_script(50 * 1024 * 1024, 101 * 1024 * 1024)
    assert "LIMIT = 52428800," in script and "MESSAGE_CAP = 105906176," in script
    html, done = inject_into_head('<!DOCTYPE html>\n<html>\n<head lang="en">\n<title>', script)
    assert done and html.index(script) > html.index('<head lang="en">') and html.count(script) == 1
    assert inject_into_head("<body>no head</body>", script) == ("<body>no head</body>", False)


def test_allow_host_names_are_checked():
    assert check_host_names(["Review.Example.", "10.0.0.7"]) == ["review.example", "10.0.0.7"]
    for bad in ("http://review.example", "review.example:8866", "", "a b", "x/y"):
        with pytest.raises(StudyInputError, match="--allow-host"):
            check_host_names([bad])


@pytest.mark.parametrize("how", ["ignored", "blocked"])
def test_stop_signals_are_restored_whatever_the_parent_did(how):
    # a child that starts with SIGINT ignored (or SIGINT/SIGTERM blocked) must still stop on
    # them once restore_stop_signals() ran
    code = textwrap.dedent("""
        import os, signal, sys, time
        from studykit.app.server_guard import restore_stop_signals
        restore_stop_signals()
        try:
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(5)
        except KeyboardInterrupt:
            sys.exit(17)
        sys.exit(1)
    """)

    def prepare():
        if how == "ignored":
            signal.signal(signal.SIGINT, signal.SIG_IGN)
        else:
            signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT, signal.SIGTERM})

    done = subprocess.run([sys.executable, "-c", code], preexec_fn=prepare, timeout=60)
    assert done.returncode == 17
