"""A real ``fringebench serve`` on a loopback port, and the Chromium that drives it.

Shared by the browser tests, the sharing tests and the scripts in ``bench/``
(which put this folder on ``sys.path``), so that all start the server and the
browser the same way.
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = "/usr/bin/chromium"
#: The flags every headless Chromium here starts with.
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]
START_SECONDS = 90


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _answers(port: int, probe: str | None) -> bool:
    try:
        if probe is None:
            with socket.create_connection(("127.0.0.1", port), timeout=1):
                return True
        # A first page builds a session and computes it: seconds on a loaded machine.
        with urllib.request.urlopen(f"http://127.0.0.1:{port}{probe}", timeout=20) as r:
            return r.status == 200
    except OSError:
        return False


def start_server(
    port: int, *args: str, probe: str | None = "/", output: bool = True
) -> subprocess.Popen:
    """Start ``fringebench serve --port PORT ARGS`` and wait until it answers.

    ``probe``: the page that must answer 200 (which also opens a first session), or
    None to wait for the port alone (a ``--share`` server answers its login page).
    ``output``: keep the server's output for :func:`stop_server`, or drop it.

    Raises
    ------
    RuntimeError
        When the server exits early (with its output) or does not answer in time.
    """
    env = dict(os.environ, PYTHONPATH=str(ROOT), PYTHONUNBUFFERED="1")
    code = "import sys; from server.cli import main; sys.exit(main())"
    sink = subprocess.PIPE if output else subprocess.DEVNULL
    proc = subprocess.Popen(
        [sys.executable, "-c", code, "serve", "--port", str(port), *args],
        cwd=ROOT,
        env=env,
        stdout=sink,
        stderr=subprocess.STDOUT if output else subprocess.DEVNULL,
        text=True,
    )
    deadline = time.monotonic() + START_SECONDS
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            said = proc.stdout.read() if output else ""
            raise RuntimeError(f"the server exited early:\n{said}")
        if _answers(port, probe):
            return proc
        time.sleep(0.3)
    proc.kill()
    raise RuntimeError(f"the server did not answer within {START_SECONDS} s")


def stop_server(proc: subprocess.Popen) -> str:
    """Stop the server (terminate, then kill after 15 s) and return what it printed."""
    proc.terminate()
    try:
        out, _ = proc.communicate(timeout=15)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, _ = proc.communicate()
    return out or ""
