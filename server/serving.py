"""Start the dashboard server: ``fringebench serve`` calls :func:`serve`.

Without sharing the server binds 127.0.0.1 only and accepts websocket
connections from ``127.0.0.1:PORT`` and ``localhost:PORT`` only.

With ``share=True`` it listens on all interfaces (or the one address given),
prints the URLs that colleagues can open, and lets nobody in without the
password: from ``--password``, ``--password-file`` or generated and printed
once. Every route but the login and sign-out pages answers only to a valid
login (:func:`_guard_every_route`). A login is recorded on the server
(:class:`Logins`) and ends at sign-out, after :data:`LOGIN_HOURS` or when the
server stops; its cookie is signed with a secret drawn anew at every start.
Bokeh session ids are signed with a second such secret, the page's session
token carries no cookie, and a page's session is attached once, by the login
that loaded it (:class:`PageBindings`). Wrong passwords slow their address down
(:class:`LoginBackoff`) without locking it out. Websocket connections are
accepted only from pages served under this machine's own addresses and port.
Every browser gets its own session; the
number of sessions, the size of a websocket message (uploads) and the
computations (:data:`server.sharing.COMPUTE_QUEUE`) are bounded.
"""

from __future__ import annotations

import asyncio
import errno
import fcntl
import hmac
import html
import ipaddress
import logging
import os
import secrets
import socket
import struct
import sys
import threading
import time
import unicodedata
import webbrowser
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import urlencode, urlsplit

import tornado.iostream
import tornado.routing
import tornado.web
import tornado.websocket

from compute import snapshot

__all__ = [
    "ALL_INTERFACES",
    "DEFAULT_MAX_SESSIONS",
    "LOGIN_HOURS",
    "LOOPBACK",
    "MAX_MESSAGE_BYTES",
    "MIN_PASSWORD_CHARS",
    "LoginBackoff",
    "Logins",
    "PageBindings",
    "ServeError",
    "SessionLimit",
    "generate_password",
    "lan_addresses",
    "normal_password",
    "password_matches",
    "resolve_password",
    "safe_next",
    "serve",
    "share_urls",
    "websocket_origins",
]

log = logging.getLogger("fringebench.serving")

LOOPBACK = "127.0.0.1"
ALL_INTERFACES = "0.0.0.0"
MIN_PASSWORD_CHARS = 8
MAX_PASSWORD_CHARS = 512
MAX_PASSWORD_FILE_BYTES = 4096
#: Sessions (browser tabs) served at once; a further one gets a short notice.
DEFAULT_MAX_SESSIONS = 16
#: Largest websocket message. An upload travels base64-encoded (4/3 larger) inside one
#: message; the app refuses files over 5 MB with a message naming the size, so this
#: limit sits well above that (files up to about 24 MB reach the app and get that
#: message) while still bounding what one browser can make the server hold. A larger
#: file closes that browser's connection only; its setup survives in the page address.
MAX_MESSAGE_BYTES = 32 * 1024 * 1024
#: Largest HTTP request body (the login form is a few hundred bytes).
MAX_BODY_BYTES = 64 * 1024
LOGIN_TEMPLATE = Path(__file__).resolve().parent / "assets" / "login.html"
#: How long a login lasts at most: a working day. Signing out, or stopping the
#: server, ends it sooner.
LOGIN_HOURS = 12
_USER = "colleague"  # one shared password, so one user name
_COOKIE = "user"  # the signed login cookie; it holds the login's random id
# Unambiguous characters for a password read off a screen (no 0/O, 1/l/I).
_ALPHABET = "abcdefghjkmnpqrstuvwxyz23456789"
# Unicode categories of characters nobody types into a password box: control and
# format characters, line and paragraph separators, surrogates.
_UNTYPEABLE = frozenset({"Cc", "Cf", "Cs", "Zl", "Zp"})
_SIOCGIFADDR = 0x8915  # Linux ioctl: the IPv4 address of an interface


class ServeError(Exception):
    """The server cannot start as asked; the message says what to change."""


# ------------------------------------------------------------------- passwords


def generate_password(groups: int = 4, size: int = 4) -> str:
    """A random password easy to read aloud: ``groups`` × ``size`` characters (≈ 79 bits)."""
    return "-".join("".join(secrets.choice(_ALPHABET) for _ in range(size)) for _ in range(groups))


def _check_password(password: str, origin: str) -> str:
    if not password:
        raise ServeError(f"{origin}: the password is empty")
    if password != password.strip():
        raise ServeError(
            f"{origin}: the password begins or ends with a space, which the login page "
            "cannot tell apart from none; remove the spaces at its ends"
        )
    if len(password) < MIN_PASSWORD_CHARS:
        raise ServeError(
            f"{origin}: the password has {len(password)} characters; "
            f"use at least {MIN_PASSWORD_CHARS}"
        )
    if len(password) > MAX_PASSWORD_CHARS:
        raise ServeError(f"{origin}: the password is longer than {MAX_PASSWORD_CHARS} characters")
    if any(unicodedata.category(c) in _UNTYPEABLE for c in password):
        raise ServeError(
            f"{origin}: the password contains control characters, which cannot be typed"
        )
    return password


def _read_password_file(path: str) -> str:
    origin = "--password-file"
    p = Path(path)
    try:
        if not p.is_file():
            raise ServeError(f"{origin}: {path!r} is not a file")
        with open(p, "rb") as fh:
            raw = fh.read(MAX_PASSWORD_FILE_BYTES + 1)
    except OSError as exc:
        raise ServeError(f"{origin}: cannot read {path!r} ({exc.strerror or exc})") from None
    if len(raw) > MAX_PASSWORD_FILE_BYTES:
        raise ServeError(
            f"{origin}: {path!r} is over {MAX_PASSWORD_FILE_BYTES} bytes; "
            "it should hold the password on its first line"
        )
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise ServeError(f"{origin}: {path!r} is not UTF-8 text") from None
    # Only a newline ends the line (str.splitlines would also cut at \x1c, \x85, …,
    # which are then refused as control characters instead of silently dropped).
    first = text.removeprefix("\ufeff").split("\n", 1)[0].removesuffix("\r")
    if not text.strip():
        first = ""
    return _check_password(first, f"{origin} {path!r}")


def resolve_password(password: str | None, password_file: str | None) -> tuple[str, bool]:
    """The sharing password and whether it was generated here.

    ``password`` wins over ``password_file`` (the command line allows only one);
    with neither a random one is generated. The first line of the file is the
    password (a final newline is not part of it).

    Raises
    ------
    ServeError
        An empty, short (under :data:`MIN_PASSWORD_CHARS`) or unreadable password.
    """
    if password is not None:
        return _check_password(password, "--password"), False
    if password_file is not None:
        return _read_password_file(password_file), False
    return generate_password(), True


def normal_password(text: str) -> str:
    """The form in which passwords are compared: Unicode NFC (an "é" typed as one
    character or as e + accent is the same password); nothing is stripped."""
    return unicodedata.normalize("NFC", text)


def password_matches(given: str, expected: str) -> bool:
    """Compare in constant time (the time taken does not depend on where they differ).

    Both sides are put in :func:`normal_password` form; a given password with a
    character that cannot be typed (a control character, say a NUL) never matches.
    """
    if any(unicodedata.category(c) in _UNTYPEABLE for c in given):
        return False
    a, b = normal_password(given), normal_password(expected)
    return hmac.compare_digest(a.encode("utf-8"), b.encode("utf-8"))


# ------------------------------------------------------------------- addresses


def _ipv4_of(name: str) -> str | None:
    """The IPv4 address of interface ``name`` (an ioctl; nothing is sent)."""
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        try:
            packed = fcntl.ioctl(s.fileno(), _SIOCGIFADDR, struct.pack("256s", name[:15].encode()))
        except OSError:  # the interface has no IPv4 address, or is down
            return None
    return socket.inet_ntoa(packed[20:24])


def lan_addresses() -> list[tuple[str, str]]:
    """``(interface, IPv4 address)`` of this machine, loopback excluded, sorted.

    Read from the interfaces themselves; no packet is sent anywhere.
    """
    found: set[tuple[str, str]] = set()
    try:
        names = [name for _, name in socket.if_nameindex()]
    except OSError:
        names = []
    for name in names:
        addr = _ipv4_of(name)
        if addr is None:
            continue
        ip = ipaddress.ip_address(addr)
        if ip.is_loopback or ip.is_unspecified:
            continue
        found.add((name, addr))
    return sorted(found, key=lambda na: (ipaddress.ip_address(na[1]).is_link_local, na[0], na[1]))


def websocket_origins(port: int, hosts: Iterable[str]) -> list[str]:
    """The websocket origin allow-list: each host at ``port``, plus this machine's loopback.

    No wildcard: a page served under any other host name or port is refused.
    """
    out: list[str] = []
    for host in [LOOPBACK, "localhost", *hosts]:
        host = host.strip().lower()
        if not host or "*" in host:
            continue
        entry = f"[{host}]:{port}" if ":" in host else f"{host}:{port}"
        if entry not in out:
            out.append(entry)
    return out


def share_urls(port: int, addresses: Iterable[str]) -> list[str]:
    """The page URL under each address."""
    return [f"http://{a}:{port}/" for a in addresses]


def _local_hostnames() -> list[str]:
    """This machine's own name (and its ``.local`` form); read locally, no lookup."""
    name = socket.gethostname().strip().lower()
    if not name or name == "localhost":
        return []
    return [name] if "." in name else [name, f"{name}.local"]


def _bind_address(share: bool, address: str | None, lan: list[tuple[str, str]]) -> str:
    if not share:
        if address not in (None, LOOPBACK, "localhost"):
            raise ServeError(
                f"address {address!r}: without --share the dashboard binds to {LOOPBACK} only"
            )
        return LOOPBACK
    if address in (None, "", ALL_INTERFACES):
        return ALL_INTERFACES
    if address == "localhost":
        return LOOPBACK
    try:
        ip = ipaddress.ip_address(address)
    except ValueError:
        raise ServeError(f"--address: {address!r} is not an IPv4 address") from None
    if ip.version != 4:
        raise ServeError(f"--address: {address!r}: only IPv4 addresses are served")
    if ip.is_loopback or address in {a for _, a in lan}:
        return str(ip)
    known = ", ".join(a for _, a in lan) or "none found"
    raise ServeError(
        f"--address: {address!r} is not an address of this machine (its addresses: {known}); "
        f"leave --address out to listen on all of them"
    )


def _free_port(address: str) -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((address, 0))
        return int(s.getsockname()[1])


# ----------------------------------------------------------------------- login


def safe_next(value: str | None) -> str:
    """Where to go after logging in: a path on this server, else ``/``."""
    if not value or not value.startswith("/") or value.startswith("//"):
        return "/"
    if "\\" in value or any(ord(c) < 32 for c in value):
        return "/"
    parts = urlsplit(value)
    return "/" if parts.scheme or parts.netloc else value


def render_login(message: str = "", *, refused: bool = False, next_url: str = "/") -> str:
    """The login page with an escaped ``message``."""
    page = LOGIN_TEMPLATE.read_text(encoding="utf-8")
    values = {
        "message": html.escape(message),
        "message_class": "refused" if refused else "notice",
        "next": html.escape(safe_next(next_url), quote=True),
        "action": "",
    }
    for key, value in values.items():
        page = page.replace("{{ " + key + " }}", value)
    return page


class Logins:
    """The server-side record of the logins of this start (nothing is written to disk).

    A login is a random id held in the signed login cookie. It is valid while it
    is recorded here: for at most ``lifetime`` seconds after the password was
    given, until the browser signs out, or until the server stops (a restart, and
    so a new password, ends every login). A copied cookie is worth nothing once
    its login has ended.
    """

    def __init__(self, lifetime: float = LOGIN_HOURS * 3600.0, maximum: int = 4096):
        self.lifetime, self.maximum = float(lifetime), int(maximum)
        self._lock = threading.Lock()
        self._started: dict[str, float] = {}

    def open(self) -> str:
        """Record a new login and return its id."""
        login = secrets.token_urlsafe(24)
        now = time.monotonic()
        with self._lock:
            self._forget_ended(now)
            while len(self._started) >= self.maximum:  # the oldest login ends first
                del self._started[min(self._started, key=self._started.__getitem__)]
            self._started[login] = now
        return login

    def valid(self, login: str | None) -> bool:
        if not login:
            return False
        with self._lock:
            started = self._started.get(login)
            if started is None:
                return False
            if time.monotonic() - started >= self.lifetime:
                del self._started[login]
                return False
            return True

    def close(self, login: str | None) -> None:
        """End ``login`` (signing out); unknown ids are ignored."""
        with self._lock:
            self._started.pop(login or "", None)

    def __len__(self) -> int:
        with self._lock:
            self._forget_ended(time.monotonic())
            return len(self._started)

    def _forget_ended(self, now: float) -> None:
        for login in [k for k, t in self._started.items() if now - t >= self.lifetime]:
            del self._started[login]


class LoginBackoff:
    """Wrong passwords from one address slow that address down; none locks it out.

    The first ``free`` wrong passwords from an address within ``forget`` seconds
    cost nothing but the usual half-second pause. After that, every further
    password from that address (right or wrong) is compared only ``delay``
    seconds after the last wrong one, the delay doubling from ``base`` with each
    wrong password up to ``cap``. Attempts from one address are compared one at
    a time, so parallel requests do not multiply the rate; at most ``queue``
    wait at once, and more are answered "try again in a few seconds".

    So the right password is never refused because of someone else's guesses on
    the same address (a shared computer, a NAT); it waits at most ``cap`` seconds
    per attempt ahead of it, while guessing from that address is held to one
    password per ``cap`` seconds.
    """

    def __init__(
        self,
        free: int = 10,
        base: float = 1.0,
        cap: float = 30.0,
        forget: float = 900.0,
        queue: int = 8,
    ):
        self.free, self.base, self.cap = int(free), float(base), float(cap)
        self.forget, self.queue = float(forget), int(queue)
        self._lock = threading.Lock()
        self._failures: dict[str, list[float]] = {}
        self._waiting: dict[str, int] = {}
        self._turns: dict[str, asyncio.Lock] = {}

    def _recent(self, client: str, now: float) -> list[float]:
        recent = [t for t in self._failures.get(client, []) if now - t < self.forget]
        if recent:
            self._failures[client] = recent
        else:
            self._failures.pop(client, None)
        return recent

    def delay(self, client: str) -> float:
        """Seconds between the last wrong password from ``client`` and its next comparison."""
        with self._lock:
            n = len(self._recent(client, time.monotonic()))
        if n < self.free:
            return 0.0
        return min(self.cap, self.base * 2.0 ** (n - self.free))

    def wait(self, client: str) -> float:
        """Seconds from now until a password from ``client`` may be compared."""
        delay = self.delay(client)
        with self._lock:
            recent = self._recent(client, time.monotonic())
            if not recent or delay <= 0.0:
                return 0.0
            return max(0.0, recent[-1] + delay - time.monotonic())

    def record(self, client: str) -> None:
        """A wrong password came from ``client``."""
        now = time.monotonic()
        with self._lock:
            if len(self._failures) > 4096:  # many addresses: forget the stale ones
                for other in list(self._failures):
                    self._recent(other, now)
            self._failures.setdefault(client, []).append(now)

    def enter(self, client: str) -> asyncio.Lock | None:
        """Queue an attempt from ``client``: its turn lock, or None when too many wait."""
        with self._lock:
            if self._waiting.get(client, 0) >= self.queue:
                return None
            self._waiting[client] = self._waiting.get(client, 0) + 1
            return self._turns.setdefault(client, asyncio.Lock())

    def leave(self, client: str) -> None:
        with self._lock:
            left = self._waiting.get(client, 1) - 1
            if left > 0:
                self._waiting[client] = left
            else:
                self._waiting.pop(client, None)
                self._turns.pop(client, None)


class PageBindings:
    """Which login opened which Bokeh session, and which sessions have a connection.

    A page's session id (signed by Bokeh with the per-start secret) may be
    attached by one websocket connection, from the login that loaded the page:
    a replayed id, or one used with another login, is refused. Signing out
    closes the connections of that login.
    """

    def __init__(self, unattached_seconds: float = 900.0):
        self.unattached_seconds = float(unattached_seconds)
        self._lock = threading.Lock()
        self._pages: dict[str, tuple[str, float]] = {}  # session id -> (login, issued)
        self._sockets: dict[str, set[Any]] = {}  # login -> open connections

    def bind(self, session_id: str, login: str) -> None:
        now = time.monotonic()
        with self._lock:
            stale = [s for s, (_, t) in self._pages.items() if now - t > self.unattached_seconds]
            for sid in stale:
                del self._pages[sid]
            self._pages[session_id] = (login, now)

    def may_attach(self, session_id: str, login: str) -> bool:
        with self._lock:
            bound = self._pages.get(session_id)
            return bound is not None and hmac.compare_digest(bound[0], login)

    def attach(self, session_id: str, login: str, connection: Any) -> bool:
        """Take the page's one attachment; False when it is gone or not this login's."""
        with self._lock:
            bound = self._pages.get(session_id)
            if bound is None or not hmac.compare_digest(bound[0], login):
                return False
            del self._pages[session_id]
            self._sockets.setdefault(login, set()).add(connection)
            return True

    def detach(self, login: str, connection: Any) -> None:
        with self._lock:
            held = self._sockets.get(login)
            if held is not None:
                held.discard(connection)
                if not held:
                    del self._sockets[login]

    def connections(self, login: str) -> list[Any]:
        with self._lock:
            return list(self._sockets.get(login, ()))


@dataclass
class _LoginConfig:
    password: str
    backoff: LoginBackoff
    logins: Logins
    pages: PageBindings


def _login_of(handler: tornado.web.RequestHandler, logins: Logins) -> str | None:
    """The login id of the request when that login is still valid, else None."""
    raw = handler.get_secure_cookie(_COOKIE, max_age_days=LOGIN_HOURS / 24.0)
    if raw is None:
        return None
    try:
        login = raw.decode("ascii")
    except UnicodeDecodeError:
        return None
    return login if logins.valid(login) else None


def _typed_password(handler: tornado.web.RequestHandler) -> str | None:
    """The password field exactly as sent (Tornado's arguments strip spaces and
    replace control characters, which would let ``password\\x00`` pass)."""
    values = handler.request.body_arguments.get("password")
    if not values:
        return ""
    try:
        return values[0].decode("utf-8")
    except UnicodeDecodeError:
        return None


class LoginHandler(tornado.web.RequestHandler):
    """``/login``: our page; the password is compared in constant time, never logged."""

    config: _LoginConfig  # set on the subclass that serve() makes

    def get(self) -> None:
        self.write(render_login(next_url=self.get_argument("next", "/")))

    async def post(self) -> None:
        client = self.request.remote_ip or "?"
        next_url = safe_next(self.get_body_argument("next", "/"))
        backoff = self.config.backoff
        turn = backoff.enter(client)
        if turn is None:
            self.set_status(429)
            self.write(
                render_login(
                    "Many passwords are being tried from this computer right now; "
                    "try again in a few seconds.",
                    refused=True,
                    next_url=next_url,
                )
            )
            return
        try:
            async with turn:
                wait = backoff.wait(client)
                if wait > 0:
                    await asyncio.sleep(wait)  # slows guessing; other requests carry on
                given = _typed_password(self)
                if given is not None and password_matches(given, self.config.password):
                    login = self.config.logins.open()
                    self.set_secure_cookie(
                        _COOKIE,
                        login,
                        expires_days=LOGIN_HOURS / 24.0,
                        httponly=True,
                        samesite="Lax",
                        path="/",
                    )
                    self.redirect(next_url)
                    return
                backoff.record(client)
                log.warning("a wrong password was given from %s", client)  # never the password
                await asyncio.sleep(0.5)
        finally:
            backoff.leave(client)
        self.set_status(401)
        delay = backoff.delay(client)
        later = (
            f" Further attempts from this computer wait {delay:.0f} s each." if delay >= 1 else ""
        )
        self.write(
            render_login(
                "That password is not right. Ask the person who started fringebench for it."
                + later,
                refused=True,
                next_url=next_url,
            )
        )


class LogoutHandler(tornado.web.RequestHandler):
    """``/logout``: end the login on the server, close its pages, show the login page."""

    config: _LoginConfig  # set on the subclass that serve() makes

    def get(self) -> None:
        login = _login_of(self, self.config.logins)
        if login is not None:
            self.config.logins.close(login)
            for connection in self.config.pages.connections(login):
                connection.close(1000, "signed out")
        self.clear_cookie(_COOKIE, path="/")
        self.clear_cookie("id_token", path="/")
        self.write(render_login("You have signed out."))


def _module_name_is_loaded(path: str) -> bool:
    """``/components/<module>/...`` names a module already imported (never a new import)."""
    module = path.split("/", 1)[0]
    parts = module.split(".")
    return all(p.isidentifier() for p in parts) and module in sys.modules


def _guard(handler: type, config: _LoginConfig) -> type:
    """``handler`` made to refuse requests without a valid login before it runs.

    A page (Bokeh's document and root handlers) sends the browser to the login
    page; everything else answers 403. The app page records which login opened
    each session, and the websocket accepts a session only from that login, once.
    """
    from bokeh.server.views.doc_handler import DocHandler
    from bokeh.server.views.root_handler import RootHandler
    from bokeh.util.token import get_session_id
    from panel.io.server import ComponentResourceHandler

    is_page = issubclass(handler, (DocHandler, RootHandler))
    is_socket = issubclass(handler, tornado.websocket.WebSocketHandler)
    members: dict[str, Any] = {}

    async def prepare(self: Any) -> None:
        login = _login_of(self, config.logins)
        if login is None:
            if is_page and self.request.method in ("GET", "HEAD"):
                url = "./login" if self.request.path == "/" else "/login"
                self.redirect(url + "?" + urlencode({"next": self.request.uri}))
                return
            raise tornado.web.HTTPError(403, "log in first")
        if is_socket:
            offered = self.request.headers.get("Sec-WebSocket-Protocol", "")
            parts = [p.strip() for p in offered.split(",")]
            try:
                session_id = get_session_id(parts[1]) if len(parts) == 2 else ""
            except Exception:  # a malformed token: not a session of ours
                session_id = ""
            if not session_id or not config.pages.may_attach(session_id, login):
                raise tornado.web.HTTPError(403, "not a page of this login")
            self._fb_login, self._fb_session = login, session_id
        pending = super(guarded, self).prepare()
        if pending is not None:
            await pending

    members["prepare"] = prepare

    if is_socket:

        def open(self: Any, *args: Any, **kwargs: Any) -> Any:
            if not config.pages.attach(self._fb_session, self._fb_login, self):
                self.close(1008, "this page is already connected")
                return None
            return super(guarded, self).open(*args, **kwargs)

        def on_close(self: Any) -> None:
            config.pages.detach(getattr(self, "_fb_login", ""), self)
            super(guarded, self).on_close()

        members["open"], members["on_close"] = open, on_close

    if issubclass(handler, DocHandler):

        async def get_session(self: Any) -> Any:
            session = await super(guarded, self).get_session()
            login = _login_of(self, config.logins)
            if login is not None:
                config.pages.bind(str(session.id), login)
            return session

        members["get_session"] = get_session

    if issubclass(handler, ComponentResourceHandler):

        def parse_url_path(self: Any, url_path: str) -> str:
            if not _module_name_is_loaded(url_path):
                raise tornado.web.HTTPError(404, "no such component")
            try:
                return super(guarded, self).parse_url_path(url_path)
            except tornado.web.HTTPError:
                raise
            except Exception:  # a malformed path is not found, never a traceback
                raise tornado.web.HTTPError(404, "no such component") from None

        members["parse_url_path"] = parse_url_path

    guarded = type(f"LoginFirst{handler.__name__}", (handler,), members)
    return guarded


def _guard_every_route(app: tornado.web.Application, config: _LoginConfig) -> int:
    """Put every route of ``app`` but the login and logout pages behind the login.

    Returns the number of routes guarded. The routes are those Bokeh and Panel
    registered (pages, websocket, static files, favicon, component resources, …);
    a route added by a later version is guarded the same way.
    """
    open_routes = (LoginHandler, LogoutHandler)
    count = 0
    routers = [app.default_router]
    while routers:
        router = routers.pop()
        for rule in getattr(router, "rules", []):
            target = rule.target
            if isinstance(target, tornado.routing.Router):
                routers.append(target)
            elif isinstance(target, type) and issubclass(target, tornado.web.RequestHandler):
                if issubclass(target, open_routes) or getattr(target, "_fb_guarded", False):
                    continue
                rule.target = _guard(target, config)
                rule.target._fb_guarded = True
                count += 1
    return count


def _auth_provider(config: _LoginConfig) -> Any:
    """Bokeh's auth provider over our login record, login and logout pages."""
    from bokeh.server.auth_provider import AuthProvider

    login_page = type("SharedLoginHandler", (LoginHandler,), {"config": config})
    logout_page = type("SharedLogoutHandler", (LogoutHandler,), {"config": config})

    class PasswordAuthProvider(AuthProvider):
        @property
        def get_user(self) -> Callable[[Any], str | None]:
            return lambda handler: _USER if _login_of(handler, config.logins) else None

        @property
        def login_url(self) -> str:
            return "/login"

        @property
        def login_handler(self) -> type:
            return login_page

        @property
        def logout_url(self) -> str:
            return "/logout"

        @property
        def logout_handler(self) -> type:
            return logout_page

    return PasswordAuthProvider()


# -------------------------------------------------------------------- sessions


class SessionLimit:
    """At most ``maximum`` live dashboards; thread-safe."""

    def __init__(self, maximum: int = DEFAULT_MAX_SESSIONS):
        if maximum < 1:
            raise ValueError("max_sessions: at least one session is needed")
        self.maximum = int(maximum)
        self._live = 0
        self._lock = threading.Lock()

    @property
    def live(self) -> int:
        with self._lock:
            return self._live

    def acquire(self) -> bool:
        with self._lock:
            if self._live >= self.maximum:
                return False
            self._live += 1
            return True

    def release(self) -> None:
        with self._lock:
            self._live = max(0, self._live - 1)


def _full_page(maximum: int) -> Any:
    import panel as pn

    return pn.pane.HTML(
        '<div id="fb-full" style="max-width:36em;margin:3em auto;padding:1.2em 1.5em;'
        "border:1px solid #f5a623;border-radius:8px;background:#161b26;color:#e8ecf3;"
        'font:15px/1.5 system-ui,sans-serif">'
        '<h2 style="color:#f5a623;margin-top:0">fringebench is full</h2>'
        f"<p>This machine already serves {maximum} sessions, the most it takes at once. "
        "Close a tab you no longer use (its place frees within half a minute) and reload "
        "this page, or follow a colleague's shared session instead.</p></div>",
        sizing_mode="stretch_width",
    )


def _query_value(key: str) -> str | None:
    import panel as pn

    args = pn.state.session_args if pn.state.curdoc is not None else {}
    values = args.get(key) if args else None
    if not values:
        return None
    raw = values[0]
    return raw.decode("utf-8", "replace") if isinstance(raw, bytes) else str(raw)


def _remote_ip() -> str | None:
    import panel as pn

    ctx = pn.state.curdoc.session_context if pn.state.curdoc is not None else None
    request = getattr(ctx, "request", None) if ctx is not None else None
    ip = getattr(request, "remote_ip", None) if request is not None else None
    return str(ip) if ip else None


def _session_factory(
    text: str, limit: SessionLimit, owner_addresses: frozenset[str] = frozenset()
) -> Callable[[], Any]:
    """A function that builds one session's dashboard (or the notice that the server is full).

    A session whose browser runs on one of ``owner_addresses`` (this machine, on
    a server shared on the network) is the host's own and goes first in the queues.
    """
    import panel as pn

    from server import sharing
    from server.app import create_app, list_presets
    from server.dashboard import Dashboard

    def session() -> Any:
        doc = pn.state.curdoc
        if not limit.acquire():
            return _full_page(limit.maximum)
        held = [True]

        def release(_context: Any) -> None:  # Bokeh passes the session context
            if held[0]:
                held[0] = False
                limit.release()

        if doc is not None and doc.session_context is not None:
            doc.on_session_destroyed(release)
        try:
            token = _query_value(sharing.FOLLOW_QUERY_KEY)
            pub = sharing.REGISTRY.get(token) if token else None
            state = pub.state() if pub is not None else None
            if pub is not None:
                start = state.setup if state is not None and state.setup is not None else None
                dash = Dashboard(start or snapshot.loads(text), presets=list_presets())
            elif token:
                note = (
                    "This follow link is not shared (any more); "
                    "here is your own dashboard on the starting setup."
                )
                dash = Dashboard(snapshot.loads(text), presets=list_presets(), messages=[note])
            else:
                dash = create_app(snapshot.loads(text))  # each session gets its own setup
            owner = bool(owner_addresses) and _remote_ip() in owner_addresses
            share = sharing.SessionSharing(dash, sharing.REGISTRY, doc=doc, owner=owner)
            if pub is not None:
                try:
                    share.follow(pub)
                except LookupError:
                    dash.notify("warning", "That session stopped being shared just now.")
            return dash
        except Exception:
            release(None)
            raise

    return session


# ----------------------------------------------------------------------- serve


def _closed_connections_are_not_errors(loop: asyncio.AbstractEventLoop, context: dict) -> None:
    """Event-loop exception handler: a browser that closed mid-write is routine.

    Closing a tab while the server sends it an update leaves a finished write task
    whose WebSocketClosedError nobody reads; asyncio would log it with a traceback.
    Everything else goes to the default handler.
    """
    exc = context.get("exception")
    closed = (tornado.websocket.WebSocketClosedError, tornado.iostream.StreamClosedError)
    if isinstance(exc, closed):
        log.debug("a browser closed its connection while an update was being sent")
        return
    loop.default_exception_handler(context)


def serve(
    *,
    port: int = 5006,
    preset: str | None = None,
    open: bool = False,
    share: bool = False,
    password: str | None = None,
    password_file: str | None = None,
    address: str | None = None,
    max_sessions: int = DEFAULT_MAX_SESSIONS,
    compute_workers: int | None = None,
    memory_budget: int | None = None,
    max_work: float | None = None,
    out: Any = None,
    **kw: Any,
) -> None:
    """Serve the dashboard until interrupted (Ctrl+C).

    Parameters
    ----------
    port
        TCP port (0 picks a free one).
    preset
        A preset name (``presets/NAME.json``) or a snapshot file; the default
        preset when None.
    open
        Open the page in the local web browser.
    share
        Listen on the lab network behind a password; otherwise on 127.0.0.1 only.
    password, password_file
        The sharing password, or a file whose first line is it; generated and
        printed once when neither is given.
    address
        With sharing, one address of this machine to listen on (all by default).
    max_sessions
        Dashboards served at once.
    compute_workers, memory_budget
        Lanes and working-memory budget (bytes) of the compute queue.
    max_work
        Largest computation started, GFLOP as estimated from its plan
        (:data:`server.sharing.DEFAULT_MAX_WORK_GFLOP` when None).
    out
        Where the start-up lines go (standard output by default).
    **kw
        Further options for ``panel.serve``.

    Raises
    ------
    ServeError
        For a password without sharing, a bad password or password file, a
        foreign address, a bad port, a bad preset or a port in use.
    """
    out = out or sys.stdout
    if not share and (password is not None or password_file is not None):
        option = "--password" if password is not None else "--password-file"
        raise ServeError(f"{option} applies only with --share")
    if isinstance(port, bool) or not isinstance(port, int) or not 0 <= port <= 65535:
        raise ServeError(f"port {port!r}: expected a whole number from 0 to 65535")
    if isinstance(max_sessions, bool) or not isinstance(max_sessions, int) or max_sessions < 1:
        raise ServeError(f"max_sessions {max_sessions!r}: expected a whole number of at least 1")
    lan = lan_addresses() if share else []
    bind = _bind_address(share, address, lan)
    secret: str | None = None
    generated = False
    if share:
        if os.environ.get("BOKEH_ALLOW_WS_ORIGIN"):
            raise ServeError(
                "BOKEH_ALLOW_WS_ORIGIN is set and would replace the websocket origin "
                "allow-list of a shared session; unset it to share"
            )
        secret, generated = resolve_password(password, password_file)

    import panel as pn

    from server import sharing
    from server.app import PresetError, load_preset

    try:
        start = load_preset(preset)
    except PresetError as exc:
        raise ServeError(str(exc)) from None
    text = snapshot.dumps(start)

    try:
        sharing.COMPUTE_QUEUE.configure(
            workers=compute_workers,
            memory_budget=memory_budget,
            max_work=None if max_work is None else max_work * 1e9,
        )
    except (RuntimeError, ValueError) as exc:
        raise ServeError(str(exc)) from None

    port = port or _free_port(bind)
    if bind == ALL_INTERFACES:
        public = [a for _, a in lan]
        hosts = public + _local_hostnames()
    elif bind == LOOPBACK:
        public, hosts = [], []
    else:
        public = [bind]
        hosts = [bind]
    origins = websocket_origins(port, hosts)
    # On the network, this machine's own browser is the host's; on loopback everyone is.
    owners = frozenset() if bind == LOOPBACK else frozenset({LOOPBACK, "::1", *(a for _, a in lan)})
    sharing.REGISTRY.public_urls = share_urls(port, public)
    options: dict[str, Any] = {
        "websocket_max_message_size": MAX_MESSAGE_BYTES,
        "http_server_kwargs": {"max_body_size": MAX_BODY_BYTES},
        "num_procs": 1,
    }
    login_config: _LoginConfig | None = None
    if share:
        login_config = _LoginConfig(secret or "", LoginBackoff(), Logins(), PageBindings())
        options["cookie_secret"] = secrets.token_hex(32)  # new at every start
        options["auth_provider"] = _auth_provider(login_config)
        # Session ids signed with a second per-start secret, so that only pages this
        # server handed out can connect; the page's session token carries neither
        # the cookies nor the Cookie header (the login stays out of reach of scripts).
        options["sign_sessions"] = True
        options["secret_key"] = secrets.token_bytes(32)
        options["include_cookies"] = []
        options["exclude_headers"] = ["Cookie", "Authorization"]
    options.update(kw)
    try:
        server = pn.serve(
            {"/": _session_factory(text, SessionLimit(max_sessions), owners)},
            port=port,
            address=bind,
            websocket_origin=origins,
            show=False,
            start=False,
            title="fringebench",
            verbose=False,
            **options,
        )
    except OSError as exc:
        if exc.errno == errno.EADDRINUSE:
            raise ServeError(f"port {port} is in use; choose another with --port") from None
        raise ServeError(f"cannot listen on {bind}:{port} ({exc.strerror or exc})") from None
    if login_config is not None:
        _guard_every_route(server._tornado, login_config)  # Bokeh's Tornado application
    url = (
        f"http://{LOOPBACK}:{port}/"
        if bind in (ALL_INTERFACES, LOOPBACK)
        else share_urls(port, [bind])[0]
    )

    def say(line: str = "") -> None:
        print(line, file=out, flush=True)

    if share:
        if public:
            say(f"fringebench is shared on the lab network (port {port}). Colleagues can open:")
            names = {a: n for n, a in lan}
            for a in public:
                say(f"  {share_urls(port, [a])[0]}   ({names.get(a, 'this address')})")
        elif bind == LOOPBACK:
            say(f"fringebench is shared on {LOOPBACK} only: reachable from this machine alone.")
        else:
            say("fringebench is shared, but this machine has no network address yet;")
            say("colleagues can open it once it has one.")
        if bind in (ALL_INTERFACES, LOOPBACK):
            say(f"On this machine: {url}")
        if generated:
            say(f"Password for this start (shown once): {secret}")
        else:
            say(
                "Password: the one given with "
                + ("--password." if password else "--password-file.")
            )
    else:
        say(f"fringebench is serving at {url}")
    say("Press Ctrl+C to stop.")
    if share and password is not None:
        print(
            "note: a password on the command line can be seen by other users of this "
            "machine; --password-file keeps it private",
            file=sys.stderr,
            flush=True,
        )
    if open:
        server.io_loop.add_callback(lambda: webbrowser.open(url))
    sharing.APPLY_QUEUE.attach(server.io_loop)
    server.io_loop.asyncio_loop.set_exception_handler(_closed_connections_are_not_errors)
    from compute import fft

    fft.auto_plan(True)  # a long-running server: measure FFT plans for recurring shapes
    server.start()
    try:
        server.io_loop.start()
    except KeyboardInterrupt:
        pass
    finally:
        server.stop()
