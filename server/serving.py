"""Start the dashboard server: ``fringebench serve`` calls :func:`serve`.

Without sharing the server binds 127.0.0.1 only and accepts websocket
connections from ``127.0.0.1:PORT`` and ``localhost:PORT`` only.
"""

from __future__ import annotations

import errno
import socket
import webbrowser
from typing import Any

from compute import snapshot

__all__ = ["LOOPBACK", "ServeError", "serve"]

LOOPBACK = "127.0.0.1"


class ServeError(Exception):
    """The server cannot start as asked; the message says what to change."""


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((LOOPBACK, 0))
        return int(s.getsockname()[1])


def serve(
    *,
    port: int = 5006,
    preset: str | None = None,
    open: bool = False,
    share: bool = False,
    password: str | None = None,
    password_file: str | None = None,
    address: str | None = None,
    **kw: Any,
) -> None:
    """Serve the dashboard until interrupted (Ctrl+C).

    Parameters
    ----------
    port
        TCP port on 127.0.0.1 (0 picks a free one).
    preset
        A preset name (``presets/NAME.json``) or a snapshot file; the default
        preset when None.
    open
        Open the page in the local web browser.
    share, password, password_file, address
        Sharing on the lab network; not available in this version.
    **kw
        Further options for ``panel.serve``.

    Raises
    ------
    ServeError
        For sharing, a non-loopback address, a bad port, a bad preset or a
        port in use.
    """
    if share or password is not None or password_file is not None:
        raise ServeError(
            "sharing arrives in a later version; serve without --share to use the "
            "dashboard on this machine"
        )
    if address not in (None, LOOPBACK, "localhost"):
        raise ServeError(
            f"address {address!r}: without sharing the dashboard binds to {LOOPBACK} only"
        )
    if isinstance(port, bool) or not isinstance(port, int) or not 0 <= port <= 65535:
        raise ServeError(f"port {port!r}: expected a whole number from 0 to 65535")

    import panel as pn

    from server.app import PresetError, create_app, load_preset

    try:
        start = load_preset(preset)
    except PresetError as exc:
        raise ServeError(str(exc)) from None
    text = snapshot.dumps(start)

    def session() -> Any:
        return create_app(snapshot.loads(text))  # each session gets its own setup

    port = port or _free_port()
    origins = [f"{LOOPBACK}:{port}", f"localhost:{port}"]
    try:
        server = pn.serve(
            {"/": session},
            port=port,
            address=LOOPBACK,
            websocket_origin=origins,
            show=False,
            start=False,
            title="fringebench",
            verbose=False,
            **kw,
        )
    except OSError as exc:
        if exc.errno == errno.EADDRINUSE:
            raise ServeError(f"port {port} is in use; choose another with --port") from None
        raise ServeError(f"cannot listen on {LOOPBACK}:{port} ({exc.strerror or exc})") from None
    url = f"http://{LOOPBACK}:{port}/"
    print(f"fringebench is serving at {url}", flush=True)
    print("Press Ctrl+C to stop.", flush=True)
    if open:
        server.io_loop.add_callback(lambda: webbrowser.open(url))
    server.start()
    try:
        server.io_loop.start()
    except KeyboardInterrupt:
        pass
    finally:
        server.stop()
