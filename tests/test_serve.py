"""`studykit serve`: arguments, loopback by default, token outside loopback, clean stop.

Every `studykit serve` started here is killed at the end of its test, also on failure: its
process group, and the group of the Voila server it started (which leads its own session).
"""

from __future__ import annotations

import contextlib
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


def children(pid: int) -> list[int]:
    """Process ids whose parent is ``pid`` (Linux /proc)."""
    found = []
    for entry in os.scandir("/proc"):
        if entry.name.isdigit():
            try:
                with open(f"/proc/{entry.name}/stat", "rb") as f:
                    if int(f.read().decode().rsplit(")", 1)[1].split()[1]) == pid:
                        found.append(int(entry.name))
            except (OSError, ValueError, IndexError):
                continue
    return found


def alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat", "rb") as f:
            return f.read().decode().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


def kill_group(pid: int) -> None:
    with contextlib.suppress(ProcessLookupError, PermissionError):
        if os.getpgid(pid) != os.getpgid(0):  # never our own group
            os.killpg(os.getpgid(pid), signal.SIGKILL)


@contextlib.contextmanager
def serving(*args, preexec_fn=None):
    """Start `studykit serve --no-browser ARGS` in its own process group; yield
    (process, printed address, printed lines, Voila server pid). Always killed at the end."""
    proc = subprocess.Popen(
        [sys.executable, "-m", "studykit", "serve", "--no-browser", *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
        start_new_session=preexec_fn is None,
        preexec_fn=preexec_fn,
    )
    server_pids = []
    try:
        lines = []
        deadline = time.monotonic() + 120
        url = None
        while time.monotonic() < deadline:
            line = proc.stdout.readline()
            if not line:
                break
            lines.append(line)
            if line.startswith("studykit workbook: "):
                url = line.split(": ", 1)[1].strip()
                break
        assert url, "serve did not print its address:\n" + "".join(lines)
        server_pids = children(proc.pid)
        assert len(server_pids) == 1, server_pids
        yield proc, url, lines, server_pids[0]
    finally:
        server_pids = server_pids or children(proc.pid)
        if proc.poll() is None:
            kill_group(proc.pid)
            proc.kill()
        proc.wait(timeout=30)
        for pid in server_pids:
            kill_group(pid)


def start_in_new_session_with(*, ignore=(), block=()):
    """A preexec_fn: new session, then the given signals ignored and/or blocked (inherited
    across exec, as a careless parent would leave them)."""

    def prepare():
        os.setsid()
        for sig in ignore:
            signal.signal(sig, signal.SIG_IGN)
        if block:
            signal.pthread_sigmask(signal.SIG_BLOCK, set(block))

    return prepare


def gone(pid: int, timeout: float) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if not alive(pid):
            return True
        time.sleep(0.2)
    return not alive(pid)


def port_closed(port: int, timeout: float = 15.0) -> bool:
    """Whether nothing listens on 127.0.0.1:port (waiting up to ``timeout`` s for it to close)."""
    deadline = time.monotonic() + timeout
    while True:
        with socket.socket() as s:
            if s.connect_ex(("127.0.0.1", port)) != 0:
                return True
        if time.monotonic() > deadline:
            return False
        time.sleep(0.3)


def listener_of(port: int) -> str:
    """Which process listens on ``port`` (for a failure message): pid and command line."""
    inodes = set()
    for table in ("/proc/net/tcp", "/proc/net/tcp6"):
        with contextlib.suppress(OSError), open(table) as f:
            for line in f.readlines()[1:]:
                fields = line.split()
                if int(fields[1].rsplit(":", 1)[1], 16) == port and fields[3] == "0A":
                    inodes.add(fields[9])
    owners = []
    for entry in os.scandir("/proc"):
        if not entry.name.isdigit():
            continue
        with contextlib.suppress(OSError):
            for fd in os.scandir(f"/proc/{entry.name}/fd"):
                link = os.readlink(fd.path)
                if link.startswith("socket:[") and link[8:-1] in inodes:
                    with open(f"/proc/{entry.name}/cmdline", "rb") as f:
                        owners.append(f"{entry.name}: {f.read().replace(bytes(1), b' ')[:200]!r}")
                    break
    return "; ".join(owners) or "unknown"


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
    for bad, msg in (
        (tmp_path / "new.csv", "ending in .study"),
        (tmp_path / "no" / "x.study", "does not either"),
    ):
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
    with serving("--port", str(port)) as (proc, url, _, server):
        assert url == f"http://127.0.0.1:{port}/"
        assert status(url) == 200
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=60) == 0
        assert gone(server, 30)
    assert port_closed(port)


@pytest.mark.skipif(
    os.environ.get("STUDYKIT_NO_WIDE_BIND") == "1",
    reason="binding 0.0.0.0 disabled on this machine",
)
def test_wide_host_requires_the_token_and_stops_on_sigterm():
    port = free_port("0.0.0.0")
    with serving("--host", "0.0.0.0", "--port", str(port)) as (proc, url, lines, server):
        match = re.search(r"\?token=([\w-]{20,})$", url)
        assert match, url
        token = match.group(1)
        base = f"http://127.0.0.1:{port}/"
        # without the token the page and the kernel API are refused (login redirect / 403)
        assert status(base) in (302, 401, 403)
        assert status(base + "api/kernels") in (302, 401, 403)
        assert status(base + "?token=wrong" + token[:4]) in (302, 401, 403)
        assert status(f"{base}?token={token}") == 200
        assert any(
            "share it only with the team" in line for line in lines + [proc.stdout.readline()]
        )
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=60) == 0
        assert gone(server, 30)
    assert port_closed(port)


@pytest.mark.slow
def test_stops_on_ctrl_c_when_started_with_sigint_ignored():
    # e.g. started from a shell script as a background job, or by `nohup`: Python then
    # installs no KeyboardInterrupt handler unless serve restores it
    port = free_port()
    with serving(
        "--port", str(port), preexec_fn=start_in_new_session_with(ignore=[signal.SIGINT])
    ) as (proc, url, _, server):
        assert status(url) == 200
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=60) == 0
        assert gone(server, 30)
    assert port_closed(port)


@pytest.mark.slow
def test_stops_on_sigterm_and_sigint_when_started_with_them_blocked():
    port = free_port()
    prepare = start_in_new_session_with(
        ignore=[signal.SIGINT, signal.SIGTERM], block=[signal.SIGINT, signal.SIGTERM]
    )
    with serving("--port", str(port), preexec_fn=prepare) as (proc, url, _, server):
        assert status(url) == 200
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=60) == 0
        assert gone(server, 30)
    assert port_closed(port)


@pytest.mark.slow
def test_server_stops_when_serve_is_killed():
    # SIGKILL cannot be handled: the Voila server notices its parent is gone and stops, and
    # its kernels follow it (ipykernel watches its parent too)
    port = free_port()
    with serving("--port", str(port)) as (proc, url, _, server):
        assert status(url) == 200
        kernels = children(server)
        assert kernels  # the preheated kernel
        proc.kill()
        proc.wait(timeout=30)
        assert gone(server, 30)
        assert all(gone(k, 30) for k in kernels)
    assert port_closed(port), f"port {port} still answered by {listener_of(port)}"


@pytest.mark.parametrize("value", ["-1", "0.5", "nan", "inf"])
def test_bad_kernel_idle_minutes_exits_2(value, capsys):
    assert main(["serve", "--no-browser", "--kernel-idle-minutes", value]) == 2
    assert "`--kernel-idle-minutes`" in capsys.readouterr().err


def test_bad_allow_host_exits_2(capsys):
    assert main(["serve", "--no-browser", "--allow-host", "http://review.example:8866"]) == 2
    assert "`--allow-host` ('http://review.example:8866') is not a server name" in (
        capsys.readouterr().err
    )


def test_server_command_carries_options():
    cmd = server_command(
        __import__("pathlib").Path("wb.ipynb"),
        host="127.0.0.1",
        port=9000,
        allow_hosts=["review.example", "10.0.0.7"],
        kernel_idle_minutes=30,
    )
    assert "--StudykitVoila.allow_hosts=review.example,10.0.0.7" in cmd
    assert "--StudykitVoila.kernel_idle_minutes=30" in cmd
