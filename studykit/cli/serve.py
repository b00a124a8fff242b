"""``studykit serve``: open the browser workbook on a study file.

Starts Voila (through :mod:`studykit.app.server`) on ``notebooks/workbook.ipynb``, bound to
127.0.0.1 unless ``--host`` says otherwise. Any other address needs a token: one is generated
(``secrets.token_urlsafe``), handed to the server through its environment (not the command
line, where other users of the machine could read it) and printed in the address. Ctrl-C or
SIGTERM stops the server and its kernels, also when this process was started with those
signals ignored or blocked; the server stops by itself if this process is killed.

The server answers only to its own names (the loopback names, the ``--host`` address and any
``--allow-host`` name) and only to same-origin requests; kernels of closed pages are shut down,
and kernels with no page connected are shut down after ``--kernel-idle-minutes``.
"""

from __future__ import annotations

import ipaddress
import os
import secrets
import signal
import socket
import subprocess
import sys
import tempfile
import time
import webbrowser
from pathlib import Path

from studykit.errors import StudyFileError, StudyInputError

ENV_STUDY = "STUDYKIT_STUDY"  # same name as studykit.app.shell.ENV_STUDY
ENV_TOKEN = "STUDYKIT_SERVE_TOKEN"  # read (and removed) by studykit.app.server
ENV_PARENT_PID = "STUDYKIT_PARENT_PID"  # same name as studykit.app.server.ENV_PARENT_PID
DEFAULT_KERNEL_IDLE_MINUTES = 10.0  # same as studykit.app.server.DEFAULT_KERNEL_IDLE_MINUTES
REPO_ROOT = Path(__file__).resolve().parents[2]
NOTEBOOK = REPO_ROOT / "notebooks" / "workbook.ipynb"
DEMO_DIR = REPO_ROOT / "demo_data"
STARTUP_TIMEOUT = 90.0

_FALLBACK_NOTEBOOK = """{"cells": [{"cell_type": "code", "execution_count": null, "metadata": {},
 "outputs": [], "source": ["from studykit.app import workbook_from_environment\\n",
 "workbook_from_environment()"]}], "metadata": {"kernelspec": {"display_name": "Python 3",
 "language": "python", "name": "python3"}}, "nbformat": 4, "nbformat_minor": 4}"""


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "serve",
        help="open the browser workbook",
        description="Open the browser workbook on a study file (or on the demo study).",
    )
    p.add_argument(
        "study",
        nargs="?",
        metavar="STUDY_FILE",
        help="study file to open (omit to start with no study loaded)",
    )
    p.add_argument("--demo", action="store_true", help="open the demo study from demo_data/")
    p.add_argument("--port", type=int, default=8866, help="port to listen on (default 8866)")
    p.add_argument(
        "--host",
        default="127.0.0.1",
        help="address to bind (default 127.0.0.1, this machine only); any other "
        "address requires the printed token",
    )
    p.add_argument(
        "--allow-host",
        action="append",
        default=[],
        metavar="NAME",
        help="also accept this server name in the address (e.g. the name colleagues "
        "type, or a proxy's name); repeat for more. By default only the loopback "
        "names, the --host address and (for 0.0.0.0) this machine's name and IP "
        "addresses are accepted",
    )
    p.add_argument(
        "--kernel-idle-minutes",
        type=float,
        default=DEFAULT_KERNEL_IDLE_MINUTES,
        metavar="MINUTES",
        help="shut down a page's kernel (its memory) once no page has been "
        f"connected to it for this long (default {DEFAULT_KERNEL_IDLE_MINUTES:g}; "
        "at least 1; 0 keeps them until the server stops); closing a page shuts "
        "its kernel down at once",
    )
    p.add_argument("--no-browser", action="store_true", help="do not open a browser window")
    p.add_argument(
        "--new",
        action="store_true",
        help="STUDY_FILE does not exist yet: create it in the browser from your "
        "measurement files (asked for when the terminal is interactive)",
    )
    p.set_defaults(func=run)


def is_loopback(host: str) -> bool:
    """Whether ``host`` only accepts connections from this machine.

    Examples
    --------
    >>> is_loopback("127.0.0.1"), is_loopback("localhost"), is_loopback("0.0.0.0")
    (True, True, False)
    """
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def demo_working_copy(original: Path) -> Path:
    """A working copy of the demo study, so the workbook never writes into demo_data/.

    The copy lives in ``$STUDYKIT_HOME/demo/`` (default ``~/.studykit/demo/``) and is made once;
    later runs reopen it, so work done in the demo is not lost. Delete it to start afresh.
    """
    import shutil

    home = Path(os.environ.get("STUDYKIT_HOME") or Path.home() / ".studykit")
    folder = home / "demo"
    folder.mkdir(parents=True, exist_ok=True)
    copy = folder / original.name
    if not copy.exists():
        tmp = copy.with_name(copy.name + ".tmp")
        shutil.copyfile(original, tmp)
        os.replace(tmp, copy)
    return copy


ENV_NEW_DIR = "STUDYKIT_NEW_DIR"  # same name as studykit.app.steps.newstudy.ENV_NEW_DIR


def offer_new_study(args, study: Path) -> None:
    """``serve NEW.study`` on a file that does not exist: offer to create it in the browser.

    With ``--new``, or a "y" at the question on an interactive terminal, the workbook opens on
    "Bring in data" to make it; otherwise a clear refusal (exit 2).
    """
    refuse = (
        f"the study file '{args.study}' does not exist; check the path, run `studykit "
        "serve` without it, or add --new to create it in the browser"
    )
    if study.suffix.lower() != ".study":
        raise StudyFileError(
            f"the study file '{args.study}' does not exist, and a new one needs "
            "a name ending in .study, e.g. pilot-run-3.study"
        )
    if not study.parent.is_dir():
        raise StudyFileError(
            f"the study file '{args.study}' does not exist, and its folder "
            f"'{study.parent}' does not either: create the folder first"
        )
    if not os.access(study.parent, os.W_OK):
        raise StudyFileError(
            f"the folder '{study.parent}' cannot be written: choose another "
            "place for the new study file"
        )
    if not args.new:
        if not (sys.stdin.isatty() and sys.stdout.isatty()):
            raise StudyFileError(refuse)
        answer = (
            input(
                f"'{args.study}' does not exist. Create it in the browser from your "
                "measurement files? [y/N] "
            )
            .strip()
            .lower()
        )
        if answer not in ("y", "yes"):
            raise StudyFileError(refuse)
    print(
        f"new study file: {study}\n  (not created yet: in the workbook, bring in your "
        "measurement files, fill the specification table and press 'Create study')"
    )


def find_demo_study(demo_dir: Path = DEMO_DIR) -> Path | None:
    """The demo study file (first ``demo_data/*.study``), or None when it is not made yet."""
    found = sorted(demo_dir.glob("*.study")) if demo_dir.is_dir() else []
    return found[0] if found else None


def check_port_free(host: str, port: int) -> None:
    if not 0 < port < 65536:
        raise StudyInputError(f"`--port` ({port}) must be between 1 and 65535")
    with socket.socket(socket.AF_INET6 if ":" in host else socket.AF_INET) as s:
        try:
            s.bind((host, port))
        except OSError as exc:
            raise StudyInputError(
                f"`--port` ({port}) cannot be used on {host}: {exc.strerror}; choose another "
                "port, e.g. --port 8870"
            ) from None


def workbook_notebook() -> Path:
    """The workbook notebook (the repository's, or a generated copy for installed packages)."""
    if NOTEBOOK.is_file():
        return NOTEBOOK
    folder = Path(tempfile.mkdtemp(prefix="studykit-workbook-"))
    path = folder / "workbook.ipynb"
    path.write_text(_FALLBACK_NOTEBOOK, encoding="utf-8")
    return path


def check_host_names(names) -> list[str]:
    """The ``--allow-host`` names, checked: a host name or an IP address, no port or path.

    Examples
    --------
    >>> check_host_names(["review.example", "10.0.0.7", "[::1]"])
    ['review.example', '10.0.0.7', '::1']
    """
    checked = []
    for raw in names:
        name = raw.strip().strip("[]").rstrip(".").lower()
        ok = bool(name)
        try:
            ipaddress.ip_address(name)
        except ValueError:
            ok = (
                ok
                and len(name) <= 253
                and all(
                    part
                    and len(part) <= 63
                    and part.replace("-", "").replace("_", "").isalnum()
                    and part.isascii()
                    for part in name.split(".")
                )
            )
        if not ok:
            raise StudyInputError(
                f"`--allow-host` ({raw!r}) is not a server name or IP address; give the name "
                "alone, without http:// or a port, e.g. --allow-host review.example"
            )
        checked.append(name)
    return checked


def server_command(
    notebook: Path,
    *,
    host: str,
    port: int,
    allow_hosts=(),
    kernel_idle_minutes: float = DEFAULT_KERNEL_IDLE_MINUTES,
) -> list[str]:
    """The command line that starts the Voila server (no secrets in it)."""
    cmd = [
        sys.executable,
        "-m",
        "studykit.app.server",
        str(notebook),
        "--no-browser",
        f"--port={port}",
        f"--Voila.ip={host}",
        "--Voila.port_retries=0",
        # a kernel runs the workbook before anyone asks, so the page opens in about 3 s
        "--VoilaConfiguration.preheat_kernel=True",
        f"--StudykitVoila.kernel_idle_minutes={kernel_idle_minutes:g}",
    ]
    if allow_hosts:
        cmd.append(f"--StudykitVoila.allow_hosts={','.join(allow_hosts)}")
    return cmd


def wait_until_listening(
    proc: subprocess.Popen, host: str, port: int, timeout: float = STARTUP_TIMEOUT
) -> bool:
    probe = "127.0.0.1" if host in ("0.0.0.0", "") else ("::1" if host == "::" else host)
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            return False
        try:
            with socket.create_connection((probe, port), timeout=1.0):
                return True
        except OSError:
            time.sleep(0.2)
    return False


def stop(proc: subprocess.Popen, timeout: float = 15.0) -> int:
    """Terminate the server's process group (SIGTERM, then SIGKILL after ``timeout`` s)."""
    for sig, wait in ((signal.SIGTERM, timeout), (signal.SIGKILL, None)):
        if proc.poll() is not None:
            break
        try:
            os.killpg(proc.pid, sig)  # the server leads its own session (start_new_session)
        except (ProcessLookupError, PermissionError):
            proc.send_signal(sig)
        try:
            proc.wait(timeout=wait)
        except subprocess.TimeoutExpired:
            continue
    return proc.returncode


def _study_to_serve(args) -> Path | None:
    """The study file the workbook opens: the demo's working copy, the file given (offering
    to make it when missing), or None."""
    if args.demo and args.study:
        raise StudyInputError("give either STUDY_FILE or --demo, not both")
    study = None
    if args.demo:
        study = find_demo_study()
        if study is None:
            print(
                "studykit serve: no demo study yet (demo_data/*.study); the workbook opens "
                "with no study loaded. Run demo_data/make_demo.py to make it.",
                file=sys.stderr,
            )
        else:
            study = demo_working_copy(study)
            print(
                f"demo study: {study}\n  (a working copy: your decisions and sign-offs are "
                "kept there; the original in demo_data/ is never changed)"
            )
    elif args.study:
        study = Path(args.study).expanduser().resolve()
        if not study.is_file():
            offer_new_study(args, study)
    return study


def _announce(host: str, port: int, token: str | None, study: Path | None) -> str:
    """Print the workbook's address (and what it gives access to); returns the address."""
    shown = socket.gethostname() if host in ("0.0.0.0", "::") else host
    if ":" in shown:
        shown = f"[{shown}]"
    url = f"http://{shown}:{port}/" + (f"?token={token}" if token else "")
    print(f"studykit workbook: {url}", flush=True)
    if study:
        print(f"study file: {study}", flush=True)
    if token:
        print(
            "Anyone with this address (including the token) can open and change the "
            "study; share it only with the team.",
            flush=True,
        )
    print("Press Ctrl-C to stop.", flush=True)
    return url


def run(args) -> int:
    # Ctrl-C and SIGTERM must stop us even if the parent started us with them ignored/blocked
    from studykit.app.server_guard import restore_stop_signals

    restore_stop_signals()
    host, port = args.host, args.port
    allow_hosts = check_host_names(args.allow_host)
    idle = args.kernel_idle_minutes
    if not (idle == 0 or 1 <= idle < 1e6):
        # a page must have time to load and connect before its kernel counts as abandoned
        # (ten pages opened at once on 2 cores took up to 2 minutes)
        raise StudyInputError(
            f"`--kernel-idle-minutes` ({idle:g}) must be 0 (never) or at "
            "least 1 minute, e.g. --kernel-idle-minutes 10"
        )
    study = _study_to_serve(args)
    check_port_free(host, port)

    env = dict(os.environ)
    env[ENV_STUDY] = str(study) if study else ""
    env[ENV_PARENT_PID] = str(os.getpid())
    env[ENV_NEW_DIR] = str(study.parent if study else Path.cwd())  # a study made in the page
    token = None
    if not is_loopback(host):
        token = secrets.token_urlsafe(24)
        env[ENV_TOKEN] = token
    else:
        env.pop(ENV_TOKEN, None)

    notebook = workbook_notebook()
    proc = subprocess.Popen(
        server_command(
            notebook, host=host, port=port, allow_hosts=allow_hosts, kernel_idle_minutes=idle
        ),
        env=env,
        cwd=str(notebook.parent),
        start_new_session=True,
    )

    def on_term(_signum, _frame):
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGTERM, on_term)
    try:
        if not wait_until_listening(proc, host, port):
            stop(proc)
            print(
                "studykit serve: the workbook server did not start; see the messages above",
                file=sys.stderr,
            )
            return 1
        url = _announce(host, port, token, study)
        if not args.no_browser:
            webbrowser.open(url)
        return proc.wait()
    except KeyboardInterrupt:
        print("\nstudykit serve: stopping the workbook server", file=sys.stderr, flush=True)
        stop(proc)
        return 0
    finally:
        signal.signal(signal.SIGTERM, previous)
        if proc.poll() is None:
            stop(proc)
