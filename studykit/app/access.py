"""How the workbook server is reached, as the kernels see it (for browser signing).

The server (:mod:`studykit.app.server`) writes ``STUDYKIT_SERVE_ACCESS`` into its environment
before any kernel starts, so every kernel inherits it:

``loopback``
    bound to this machine only (127.0.0.1, ::1, localhost);
``token``
    reachable over the network, every page and kernel call needs the access token;
``open``
    reachable over the network without a token.

A certificate and its passphrase are accepted from the browser only for ``loopback`` and
``token`` (:func:`signing_refusal`). Without the variable (a kernel not started by studykit's
server, e.g. a test or a plain notebook) the workbook is on this machine and signing is allowed.
"""

from __future__ import annotations

import ipaddress
import os

__all__ = ["ENV_ACCESS", "access_kind", "signing_refusal"]

ENV_ACCESS = "STUDYKIT_SERVE_ACCESS"


def access_kind(ip: str | None, has_token: bool) -> str:
    """``loopback``, ``token`` or ``open`` for a server bound to ``ip``.

    Examples
    --------
    >>> access_kind("127.0.0.1", False), access_kind("0.0.0.0", True), access_kind("", False)
    ('loopback', 'token', 'open')
    """
    host = (ip or "").strip().strip("[]")
    loopback = host == "localhost"
    if not loopback and host:
        try:
            loopback = ipaddress.ip_address(host).is_loopback
        except ValueError:
            loopback = False
    if loopback:
        return "loopback"
    return "token" if has_token else "open"


def signing_refusal(environ=None) -> str | None:
    """Why a certificate may not be given in this browser now, or None when it may.

    Examples
    --------
    >>> signing_refusal({ENV_ACCESS: "loopback"}) is None
    True
    >>> "token" in signing_refusal({ENV_ACCESS: "open"})
    True
    """
    env = os.environ if environ is None else environ
    kind = env.get(ENV_ACCESS, "loopback")
    if kind in ("loopback", "token"):
        return None
    return (
        "signing in the browser is refused: this workbook is served on a network address "
        "without an access token, so a certificate and its passphrase could be read by "
        "anyone who reaches the address. Restart it with `studykit serve --host ...` (which "
        "prints an address with a token), or sign on your own machine with "
        "`studykit report STUDY --sign your.p12`"
    )
