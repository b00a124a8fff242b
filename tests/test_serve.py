"""`studykit serve`: arguments, loopback by default, token outside loopback, clean stop."""

from __future__ import annotations

import os
import re
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request

import pytest

from studykit.app.server import free_port
from studykit.cli import main
from studykit.cli.serve import find_demo_study, is_loopback, server_command


class NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args, **kwargs):
        return None


def status(url: str) -> int:
    opener = urllib.request.build_opener(NoRedirect)
    try:
        with opener.open(url, timeout=120) as r:
            return r.status
    except urllib.error.HTTPError as exc:
        return exc.code


def start_serve(*args):
    proc = subprocess.Popen([sys.executable, "-m", "studykit", "serve", "--no-browser", *args],
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    lines = []
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        line = proc.stdout.readline()
        if not line:
            break
        lines.append(line)
        if line.startswith("studykit workbook: "):
            return proc, line.split(": ", 1)[1].strip(), lines
    proc.kill()
    raise AssertionError("serve did not print its address:\n" + "".join(lines))


def port_closed(port: int) -> bool:
    with socket.socket() as s:
        return s.connect_ex(("127.0.0.1", port)) != 0


def test_loopback_detection():
    assert is_loopback("127.0.0.1") and is_loopback("::1") and is_loopback("localhost")
    assert not is_loopback("0.0.0.0") and not is_loopback("192.168.1.20")


def test_server_command_carries_no_secret():
    cmd = server_command(__import__("pathlib").Path("wb.ipynb"), host="0.0.0.0", port=9000)
    assert not any("token" in part.lower() for part in cmd)
    assert "--Voila.ip=0.0.0.0" in cmd and "--port=9000" in cmd


def test_demo_study_is_found_or_none(tmp_path):
    assert find_demo_study(tmp_path) is None
    (tmp_path / "b.study").write_bytes(b"")
    (tmp_path / "a.study").write_bytes(b"")
    assert find_demo_study(tmp_path).name == "a.study"


def test_missing_study_file_exits_2(tmp_path, capsys):
    assert main(["serve", "--no-browser", str(tmp_path / "nope.study")]) == 2
    assert "nope.study' does not exist" in capsys.readouterr().err


def test_new_study_file_is_offered_not_assumed(tmp_path, capsys, monkeypatch):
    from studykit.cli.serve import offer_new_study

    class Args:
        study = str(tmp_path / "new.study")
        new = False

    # not interactive, no --new: refused with the way to create it
    monkeypatch.setattr(sys.stdin, "isatty", lambda: False)
    assert main(["serve", "--no-browser", str(tmp_path / "new.study")]) == 2
    assert "add --new to create it in the browser" in capsys.readouterr().err
    # a name that is no study file, a folder that does not exist
    for bad, msg in ((tmp_path / "new.csv", "ending in .study"),
                     (tmp_path / "no" / "x.study", "does not either")):
        assert main(["serve", "--no-browser", "--new", str(bad)]) == 2
        assert msg in capsys.readouterr().err
    # --new: accepted (the page creates it); nothing is written yet
    Args.new = True
    offer_new_study(Args, tmp_path / "new.study")
    assert "not created yet" in capsys.readouterr().out
    assert not (tmp_path / "new.study").exists()


def test_busy_port_exits_2(capsys):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        s.listen()
        port = s.getsockname()[1]
        assert main(["serve", "--no-browser", "--port", str(port)]) == 2
    assert f"`--port` ({port}) cannot be used" in capsys.readouterr().err


def test_loopback_serves_without_token_and_stops_on_sigint():
    port = free_port()
    proc, url, _ = start_serve("--port", str(port))
    try:
        assert url == f"http://127.0.0.1:{port}/"
        assert status(url) == 200
    finally:
        proc.send_signal(signal.SIGINT)
        proc.wait(timeout=30)
    assert proc.returncode == 0
    assert port_closed(port)


@pytest.mark.skipif(os.environ.get("STUDYKIT_NO_WIDE_BIND") == "1",
                    reason="binding 0.0.0.0 disabled on this machine")
def test_wide_host_requires_the_token_and_stops_on_sigterm():
    port = free_port("0.0.0.0")
    proc, url, lines = start_serve("--host", "0.0.0.0", "--port", str(port))
    try:
        match = re.search(r"\?token=([\w-]{20,})$", url)
        assert match, url
        token = match.group(1)
        base = f"http://127.0.0.1:{port}/"
        # without the token the page and the kernel API are refused (login redirect / 403)
        assert status(base) in (302, 401, 403)
        assert status(base + "api/kernels") in (302, 401, 403)
        assert status(base + "?token=wrong" + token[:4]) in (302, 401, 403)
        assert status(f"{base}?token={token}") == 200
        assert any("share it only with the team" in line for line in lines + [proc.stdout.readline()])
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(timeout=30)
    assert proc.returncode == 0
    assert port_closed(port)
