"""Sharing a session: passwords, origins, addresses, the login, the follow registry,
the compute queue and follow mode on dashboard objects; then a real server on
loopback, driven over plain HTTP and a raw websocket handshake.

Nothing here sends a packet to any address but 127.0.0.1.
"""

from __future__ import annotations

import base64
import email.utils
import hmac
import http.client
import ipaddress
import json
import os
import re
import shutil
import socket
import struct
import subprocess
import threading
import time
import urllib.parse
from pathlib import Path

import pytest
from localserver import free_port, start_server, stop_server

from compute import engine, snapshot
from compute.errors import SetupError
from server import cli, serving, sharing
from server.app import load_preset
from server.dashboard import Dashboard

PASSWORD = "lab-bench-4021"  # demo password for the loopback servers below


# ------------------------------------------------------------------- passwords


def test_a_given_password_is_used_as_it_is():
    assert serving.resolve_password("fringe pattern", None) == ("fringe pattern", False)


@pytest.mark.parametrize(
    ("value", "words"),
    [("", "empty"), ("short", "at least 8"), ("tab\there!", "control characters")],
)
def test_a_bad_password_is_refused_with_a_reason(value, words):
    with pytest.raises(serving.ServeError, match=words) as info:
        serving.resolve_password(value, None)
    assert str(info.value).startswith("--password")


def test_the_password_file_gives_its_first_line(tmp_path):
    f = tmp_path / "pw.txt"
    f.write_text("grating 1200/mm\r\nsecond line is ignored\n", encoding="utf-8")
    assert serving.resolve_password(None, str(f)) == ("grating 1200/mm", False)
    f.write_text("only-line-here\n", encoding="utf-8")
    assert serving.resolve_password(None, str(f))[0] == "only-line-here"


def test_password_file_problems_name_the_option_and_the_file(tmp_path):
    missing = tmp_path / "nope.txt"
    with pytest.raises(serving.ServeError, match=r"--password-file: .*nope\.txt.*not a file"):
        serving.resolve_password(None, str(missing))
    empty = tmp_path / "empty.txt"
    empty.write_text("\n")
    with pytest.raises(serving.ServeError, match="empty"):
        serving.resolve_password(None, str(empty))
    big = tmp_path / "big.txt"
    big.write_bytes(b"x" * 5000)
    with pytest.raises(serving.ServeError, match="over 4096 bytes"):
        serving.resolve_password(None, str(big))
    binary = tmp_path / "bin.txt"
    binary.write_bytes(b"\xff\xfe\x00abcdefgh")
    with pytest.raises(serving.ServeError, match="not UTF-8"):
        serving.resolve_password(None, str(binary))


def test_a_generated_password_is_random_and_readable():
    pw, generated = serving.resolve_password(None, None)
    assert generated
    assert re.fullmatch(r"[a-z2-9]{4}(-[a-z2-9]{4}){3}", pw), pw
    assert not set(pw) & set("01lIoO")
    others = {serving.generate_password() for _ in range(200)}
    assert len(others) == 200  # ~79 bits each: a repeat would mean a broken generator


def test_passwords_are_compared_in_constant_time(monkeypatch):
    calls = []
    real = hmac.compare_digest

    def spy(a, b):
        calls.append((a, b))
        return real(a, b)

    monkeypatch.setattr(serving.hmac, "compare_digest", spy)
    assert serving.password_matches("µ-slit wide", "µ-slit wide")
    assert not serving.password_matches("µ-slit wid", "µ-slit wide")
    assert not serving.password_matches("", "µ-slit wide")
    assert len(calls) == 3 and all(isinstance(a, bytes) for a, _ in calls)


# ------------------------------------------------------- addresses and origins


def test_lan_addresses_are_this_machines_own():
    found = serving.lan_addresses()
    for name, addr in found:
        ip = ipaddress.ip_address(addr)
        assert ip.version == 4 and not ip.is_loopback, (name, addr)
    ip_tool = shutil.which("ip")
    if ip_tool is None:
        return
    # `ip -o -4 addr` reads the same interfaces through netlink: an independent listing.
    listing = subprocess.run([ip_tool, "-o", "-4", "addr"], capture_output=True, text=True)
    expected = set()
    for line in listing.stdout.splitlines():
        parts = line.split()
        addr = parts[3].split("/")[0]
        if not ipaddress.ip_address(addr).is_loopback:
            expected.add((parts[1].split("@")[0], addr))
    assert set(found) == expected


def test_origins_are_the_served_hosts_at_the_port_and_nothing_else():
    origins = serving.websocket_origins(5123, ["192.0.2.7", "Bench-PC", "fe80::1", "*.lab"])
    assert origins == [
        "127.0.0.1:5123",
        "localhost:5123",
        "192.0.2.7:5123",
        "bench-pc:5123",
        "[fe80::1]:5123",
    ]
    assert serving.websocket_origins(80, []) == ["127.0.0.1:80", "localhost:80"]


def test_the_bind_address_is_loopback_unless_shared():
    lan = [("eth0", "192.0.2.7")]
    assert serving._bind_address(False, None, lan) == "127.0.0.1"
    assert serving._bind_address(False, "localhost", lan) == "127.0.0.1"
    with pytest.raises(serving.ServeError, match="without --share"):
        serving._bind_address(False, "0.0.0.0", lan)
    assert serving._bind_address(True, None, lan) == "0.0.0.0"
    assert serving._bind_address(True, "192.0.2.7", lan) == "192.0.2.7"
    assert serving._bind_address(True, "127.0.0.1", lan) == "127.0.0.1"
    with pytest.raises(serving.ServeError, match="not an address of this machine"):
        serving._bind_address(True, "198.51.100.4", lan)
    with pytest.raises(serving.ServeError, match="not an IPv4 address"):
        serving._bind_address(True, "bench.example", lan)


# ---------------------------------------------------------------- login pieces


@pytest.mark.parametrize(
    ("given", "expected"),
    [
        ("/?follow=abc", "/?follow=abc"),
        ("/", "/"),
        (None, "/"),
        ("//evil.example/x", "/"),
        ("http://evil.example/", "/"),
        ("/\\evil.example", "/"),
        ("relative", "/"),
        ("/a\nb", "/"),
    ],
)
def test_after_login_only_a_local_path_is_followed(given, expected):
    assert serving.safe_next(given) == expected


def test_the_login_page_escapes_what_it_shows():
    page = serving.render_login("<script>x</script>", refused=True, next_url='/?a="b"')
    assert "<script>x</script>" not in page and "&lt;script&gt;" in page
    assert 'value="/?a=&quot;b&quot;"' in page
    assert "{{" not in page
    assert 'type="password"' in page


def test_cli_refuses_a_password_without_share_and_a_short_one(capsys):
    assert cli.main(["serve", "--password", "something-long"]) == 2
    assert capsys.readouterr().err == "error: --password applies only with --share\n"
    assert cli.main(["serve", "--share", "--password", "abc"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: --password: the password has 3 characters")


def test_session_limit_counts_and_refuses():
    limit = serving.SessionLimit(2)
    assert limit.acquire() and limit.acquire()
    assert not limit.acquire()
    limit.release()
    assert limit.live == 1 and limit.acquire()
    with pytest.raises(ValueError):
        serving.SessionLimit(0)


# -------------------------------------------------------------- compute queue


def _queue(**kw) -> sharing.ComputeQueue:
    kw.setdefault("estimate", lambda setup: int(setup))  # the test "setup" is its byte count
    return sharing.ComputeQueue(**kw)


def test_the_queue_runs_jobs_in_arrival_order_and_returns_their_results():
    q = _queue(workers=1, memory_budget=100, spare_after=60)
    order: list[int] = []
    gate = threading.Event()
    futs = [q.submit(0, lambda: gate.wait(10))]
    futs += [q.submit(0, lambda k=k: order.append(k) or k * k) for k in range(5)]
    gate.set()
    assert [f.result(10) for f in futs[1:]] == [0, 1, 4, 9, 16]
    assert order == [0, 1, 2, 3, 4]
    q.close()


def test_the_running_jobs_never_hold_more_than_the_memory_budget():
    q = _queue(workers=3, memory_budget=100, spare_after=60)
    lock = threading.Lock()
    held, peak = [0], [0]

    def job(n: int):
        with lock:
            held[0] += n
            peak[0] = max(peak[0], held[0])
        time.sleep(0.02)
        with lock:
            held[0] -= n
        return n

    sizes = [60, 30, 50, 10, 70, 40, 20, 90, 5, 55]
    futs = [q.submit(n, lambda n=n: job(n)) for n in sizes]
    assert [f.result(20) for f in futs] == sizes
    assert peak[0] <= 100 and q.stats()["peak_bytes"] <= 100
    assert q.stats()["peak_running"] >= 2  # small jobs did run side by side
    q.close()


def test_a_job_over_the_whole_budget_is_refused_and_never_runs():
    q = _queue(workers=1, memory_budget=100)
    ran = []
    fut = q.submit(101, lambda: ran.append(1))
    exc = fut.exception(5)
    assert isinstance(exc, SetupError) and exc.path == "numerics.grid"
    assert "allows" in str(exc) and "all sessions together" in str(exc)
    assert ran == [] and q.stats()["refused"] == 1
    q.close()


def test_the_host_computes_first_then_its_followers_then_the_others():
    q = _queue(workers=1, memory_budget=100, spare_after=60)
    gate = threading.Event()
    order: list[str] = []
    blocker = q.submit(0, lambda: gate.wait(10))
    deadline = time.monotonic() + 10
    while not blocker.running() and time.monotonic() < deadline:  # the lane holds it
        time.sleep(0.01)
    assert blocker.running()
    futs = [
        q.submit(0, lambda n=name: order.append(n), priority=prio)
        for name, prio in [
            ("colleague a", sharing.PRIORITY_OTHER),
            ("follower", sharing.PRIORITY_FOLLOWER),
            ("colleague b", sharing.PRIORITY_OTHER),
            ("host", sharing.PRIORITY_HOST),
        ]
    ]
    gate.set()
    blocker.result(10)
    for f in futs:
        f.result(10)
    assert order == ["host", "follower", "colleague a", "colleague b"]
    q.close()


def test_a_planner_refusal_becomes_the_jobs_failure():
    def estimate(setup):
        raise SetupError("screen.distance", "too large for this demo")

    q = sharing.ComputeQueue(workers=1, memory_budget=100, estimate=estimate)
    fut = q.submit(object(), lambda: 1)
    assert isinstance(fut.exception(5), SetupError)
    q.close()


def test_a_long_job_does_not_block_a_short_one_even_with_one_lane():
    q = _queue(workers=1, memory_budget=100, spare_after=0.2)
    release = threading.Event()
    long_job = q.submit(10, lambda: release.wait(30) and "long")
    short = q.submit(10, lambda: "short")
    assert short.result(15) == "short"  # through the spare lane
    assert not long_job.done()
    release.set()
    assert long_job.result(10) == "long"
    q.close()


def test_the_estimate_of_a_real_setup_is_its_plan_or_zero_when_cached():
    setup = load_preset(None)
    setup.screen.distance = 1.234567  # a distance no other test computes
    engine.RESULT_CACHE.clear()
    expected = engine.check(setup).memory_bytes
    assert expected > 0
    assert sharing.estimate_bytes(setup) == expected
    engine.compute(setup)
    assert sharing.estimate_bytes(setup) == 0


# ------------------------------------------------------------ follow registry


class _Stub:
    """A follower stand-in that records what it is shown."""

    def __init__(self):
        self.shown: list = []

    def show_shared(self, setup, result, preview, view):
        self.shown.append((setup, result, view))


class _Doc:
    """A document stand-in that queues next-tick callbacks (as a served one does)."""

    session_context = object()

    def __init__(self):
        self.callbacks: list = []

    def add_next_tick_callback(self, fn):
        self.callbacks.append(fn)

    def run(self):
        todo, self.callbacks = self.callbacks, []
        for fn in todo:
            fn()


class _Loop:
    """An event-loop stand-in: callbacks and timers run when the test says so."""

    def __init__(self):
        self.calls: list = []
        self.timers: list = []

    def add_callback(self, fn, *args):
        self.calls.append((fn, args))

    def call_later(self, delay, fn, *args):
        self.timers.append((fn, args))

    def run(self):
        while self.calls:
            fn, args = self.calls.pop(0)
            fn(*args)


def test_results_reach_the_screens_one_at_a_time_host_first():
    q = sharing.ApplyQueue()
    loop, doc = _Loop(), _Doc()
    q.attach(loop)
    order: list[str] = []
    q.schedule(doc, lambda: order.append("first"), sharing.PRIORITY_OTHER)
    loop.run()
    assert len(doc.callbacks) == 1  # in flight; the others wait in the queue
    for name, prio in [("colleague a", 2), ("follower", 1), ("colleague b", 2), ("host", 0)]:
        q.schedule(doc, lambda n=name: order.append(n), prio)
    assert len(doc.callbacks) == 1
    while doc.callbacks or loop.calls:
        doc.run()
        loop.run()
    assert order == ["first", "host", "follower", "colleague a", "colleague b"]
    assert q.applied == 5


def test_a_closed_session_does_not_hold_the_screen_queue():
    q = sharing.ApplyQueue(stall_after=3.0)
    loop, gone, live = _Loop(), _Doc(), _Doc()
    q.attach(loop)
    shown: list[str] = []
    q.schedule(gone, lambda: shown.append("never"), sharing.PRIORITY_HOST)
    q.schedule(live, lambda: shown.append("live"), sharing.PRIORITY_OTHER)
    loop.run()
    assert live.callbacks == [] and len(gone.callbacks) == 1  # the gone doc never ticks
    fn, args = loop.timers.pop(0)  # its stall timer fires
    fn(*args)
    loop.run()
    live.run()
    assert shown == ["live"]


def test_registry_tokens_are_random_and_only_open_ones_are_found():
    reg = sharing.FollowRegistry()
    a, b = reg.publish(), reg.publish()
    assert a.token != b.token and re.fullmatch(r"[A-Za-z0-9_-]{24}", a.token)
    assert reg.get(a.token) is a and len(reg) == 2
    assert reg.get("not a token!") is None and reg.get(None) is None
    assert reg.get("x" * 24) is None
    reg.unpublish(a.token)
    assert reg.get(a.token) is None and len(reg) == 1


def test_followers_get_the_newest_state_on_their_own_document_and_are_counted():
    counts: list[int] = []
    reg = sharing.FollowRegistry()
    pub = reg.publish(on_count=counts.append)
    follower, doc = _Stub(), _Doc()
    link = pub.add(follower, doc)
    assert counts == [1] and pub.followers == 1
    setup = load_preset(None)
    for k in range(5):  # a burst of host changes
        pub.update(setup, f"result {k}", None, {"scale": "linear", "k": k})
    assert follower.shown == []  # nothing runs outside the follower's own session tick
    assert len(doc.callbacks) == 1  # one callback for the whole burst
    doc.run()
    assert [(r, v["k"]) for _, r, v in follower.shown] == [("result 4", 4)]
    link.close()
    assert counts == [1, 0] and pub.followers == 0


def test_unpublishing_tells_every_follower_why():
    reg = sharing.FollowRegistry()
    pub = reg.publish()
    told: list[str] = []
    links = [pub.add(_Stub(), None) for _ in range(3)]
    for link in links:
        link.on_end = told.append
    reg.unpublish(pub.token, "the host stopped sharing")
    assert told == ["the host stopped sharing"] * 3
    with pytest.raises(LookupError):
        pub.add(_Stub(), None)


def test_the_registry_stays_consistent_under_threads():
    reg = sharing.FollowRegistry()
    pub = reg.publish()
    errors: list[BaseException] = []

    def churn(n: int) -> None:
        try:
            for _ in range(n):
                other = reg.publish()
                link = pub.add(_Stub(), None)
                pub.update(None, None, None, {})
                link.close()
                reg.unpublish(other.token)
        except BaseException as exc:  # pragma: no cover - reported below
            errors.append(exc)

    threads = [threading.Thread(target=churn, args=(200,)) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    assert len(reg) == 1 and pub.followers == 0


def test_follow_links_use_the_public_urls():
    reg = sharing.FollowRegistry()
    assert reg.follow_links("tok", "http://127.0.0.1:5006/") == [
        "http://127.0.0.1:5006/?follow=tok"
    ]
    reg.public_urls = ["http://192.0.2.7:5006/", "http://192.0.2.8:5006/"]
    assert reg.follow_links("tok") == [
        "http://192.0.2.7:5006/?follow=tok",
        "http://192.0.2.8:5006/?follow=tok",
    ]


# ----------------------------------------------- follow mode on real dashboards


def _pair():
    reg = sharing.FollowRegistry()
    host = Dashboard(load_preset(None), threaded=False)
    host_share = sharing.SessionSharing(host, reg)
    pub = host_share.publish()
    follower = Dashboard(load_preset(None), threaded=False)
    follower_share = sharing.SessionSharing(follower, reg)
    follower_share.follow(reg.get(pub.token))
    return host, host_share, follower, follower_share


def _widgets(dash):
    return list(dash.__panel__().select(sharing.pn.widgets.Widget))


def test_priorities_follow_the_role_of_each_session():
    host, host_share, follower, follower_share = _pair()
    assert host.priority == sharing.PRIORITY_HOST
    assert follower.priority == sharing.PRIORITY_FOLLOWER
    follower_share.detach("own copy")
    host_share.unpublish()
    assert host.priority == follower.priority == sharing.PRIORITY_OTHER
    own = Dashboard(load_preset(None), threaded=False)
    assert sharing.SessionSharing(own, owner=True).dashboard.priority == sharing.PRIORITY_HOST


def test_a_follower_mirrors_the_hosts_setup_and_result_objects():
    host, host_share, follower, _ = _pair()
    assert host_share.followers == 1
    assert "shared · 1 following" in host_share.status.object
    assert follower.result is host.result
    assert host.set_value("screen.distance", 1.7)
    assert follower.result is host.result  # the host's own object, nothing recomputed
    assert snapshot.physics_hash(follower.setup) == snapshot.physics_hash(host.setup)
    assert follower.setup is not host.setup
    host.scale = "log"
    assert follower.scale == "log"


def test_a_follower_cannot_change_anything_until_it_detaches():
    host, host_share, follower, follower_share = _pair()
    before = snapshot.physics_hash(host.setup)
    locked = [w for w in _widgets(follower) if w.disabled]
    distance_box = follower.controls.screen["distance"].widget
    assert distance_box.disabled and len(locked) > 10
    assert follower_share.detach_button.visible and not follower_share.share_button.visible
    assert not follower.set_value("screen.distance", 3.0)
    assert not follower.add_element("circle")
    assert follower.messages[-1] == ("warning", sharing.READ_ONLY_TEXT)
    assert snapshot.physics_hash(follower.setup) == before == snapshot.physics_hash(host.setup)

    follower_share.detach("This is now your own copy.")
    assert host_share.followers == 0 and "shared · 0 following" in host_share.status.object
    assert not distance_box.disabled
    assert follower.set_value("screen.distance", 3.0)
    assert follower.setup.screen.distance == 3.0
    assert snapshot.physics_hash(host.setup) == before  # the host's setup is its own
    host.set_value("screen.distance", 2.2)
    assert follower.setup.screen.distance == 3.0  # detached: no more mirroring


def test_a_follower_pressing_the_hidden_share_button_gets_a_message_not_an_error():
    _host, host_share, follower, follower_share = _pair()
    assert not follower_share.share_button.visible
    follower_share.share_button.clicks += 1  # a forced click on the hidden button
    assert follower.messages[-1][0] == "warning"
    assert "cannot be shared" in follower.messages[-1][1]
    assert follower_share.publication is None and follower_share.link is not None
    assert host_share.followers == 1  # still following, nothing else changed


def test_when_the_host_stops_sharing_followers_keep_an_own_copy():
    _host, host_share, follower, follower_share = _pair()
    host_share.unpublish()
    assert follower.following is None and follower_share.link is None
    assert "own copy" in follower.messages[-1][1]
    assert follower.set_value("screen.distance", 0.8)


def test_a_dashboard_on_the_queue_computes_and_a_huge_setup_is_refused(monkeypatch):
    q = sharing.ComputeQueue(workers=1, memory_budget=8 * 1024**2)
    monkeypatch.setattr(sharing, "COMPUTE_QUEUE", q)
    d = Dashboard(load_preset(None))
    assert d.wait(60) and d.result is not None
    good = d.result.key
    assert d.set_value("screen.samples", 4000)  # valid, but over this queue's budget
    assert d.wait(60)
    assert d.result.key == good  # the last good result stays
    assert "all sessions together" in d.last_error
    assert d.messages[-1][0] == "error"
    q.close()


def test_a_job_with_its_own_memory_estimate_is_admitted_by_it():
    q = sharing.ComputeQueue(workers=1, memory_budget=8 * 1024**2)
    setup = load_preset(None)
    big = q.submit(setup, lambda: "ran", estimate=lambda: 64 * 1024**2)
    assert "all sessions together" in str(big.exception(timeout=5))
    small = q.submit(setup, lambda: "ran", estimate=lambda: 1024)
    assert small.result(timeout=30) == "ran"

    def refuse() -> int:
        raise SetupError("aperture", "unbounded")

    refused = q.submit(setup, lambda: "ran", estimate=refuse)
    assert str(refused.exception(timeout=5)) == "aperture: unbounded"
    q.close()


def test_background_work_waits_for_every_screen_result():
    q = sharing.ComputeQueue(workers=1, spare_after=60)  # no spare lane in this test
    setup = load_preset(None)
    gate, order = threading.Event(), []
    first = q.submit(setup, gate.wait, priority=sharing.PRIORITY_HOST)  # holds the lane
    late = q.submit(
        setup,
        lambda: order.append("host background"),
        priority=sharing.PRIORITY_HOST + sharing.PRIORITY_BACKGROUND,
    )
    other = q.submit(setup, lambda: order.append("other screen"), priority=sharing.PRIORITY_OTHER)
    gate.set()
    for f in (first, late, other):
        f.result(timeout=30)
    assert order == ["other screen", "host background"]
    q.close()


# ----------------------------------------------------- a real server, loopback


def _start(port: int, *args: str):
    return start_server(port, *args, probe=None)  # a --share server answers its login page


def _listening(port: int) -> set[str]:
    """Local addresses listening on ``port``, read from /proc/net/tcp (no traffic)."""
    found = set()
    for line in Path("/proc/net/tcp").read_text().splitlines()[1:]:
        local, state = line.split()[1], line.split()[3]
        hex_addr, hex_port = local.split(":")
        if state == "0A" and int(hex_port, 16) == port:  # 0A: LISTEN
            found.add(socket.inet_ntoa(bytes.fromhex(hex_addr)[::-1]))
    return found


def _request(port, method, path, body=None, headers=None):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    conn.request(method, path, body=body, headers=headers or {})
    resp = conn.getresponse()
    data = resp.read()
    conn.close()
    return resp, data


def _login(port, password):
    body = urllib.parse.urlencode({"password": password, "next": "/"})
    hdrs = {"Content-Type": "application/x-www-form-urlencoded"}
    return _request(port, "POST", "/login", body, hdrs)


def _upgrade(port: int, origin: str, cookie: str | None, token: str | None = None) -> str:
    """The status line of a websocket handshake on /ws."""
    key = base64.b64encode(os.urandom(16)).decode()
    lines = [
        "GET /ws HTTP/1.1",
        f"Host: 127.0.0.1:{port}",
        "Upgrade: websocket",
        "Connection: Upgrade",
        f"Sec-WebSocket-Key: {key}",
        "Sec-WebSocket-Version: 13",
        f"Origin: {origin}",
    ]
    if token:
        lines.append(f"Sec-WebSocket-Protocol: bokeh, {token}")
    if cookie:
        lines.append(f"Cookie: {cookie}")
    with socket.create_connection(("127.0.0.1", port), timeout=30) as s:
        s.sendall(("\r\n".join(lines) + "\r\n\r\n").encode())
        return s.recv(4096).split(b"\r\n")[0].decode()


def _cookie_of(resp) -> str:
    return resp.getheader("Set-Cookie").split(";")[0]


def _page_token(port: int, cookie: str) -> str:
    """The Bokeh session token of a freshly loaded app page."""
    resp, data = _request(port, "GET", "/", headers={"Cookie": cookie})
    assert resp.status == 200
    return re.search(rb'"token":\s*"([^"]+)"', data).group(1).decode()


def _token_payload(token: str) -> dict:
    """What any script in the page can read out of its session token."""
    import json
    import zlib

    def b64(text: str) -> bytes:
        return base64.urlsafe_b64decode(text + "=" * (-len(text) % 4))

    payload = json.loads(b64(token.split(".")[0]))
    if "__bk__zlib_" in payload:
        payload.update(json.loads(zlib.decompress(b64(payload.pop("__bk__zlib_")))))
    return payload


def _open_socket(port: int, cookie: str, token: str) -> socket.socket:
    """An accepted websocket on /ws, left open for the caller."""
    key = base64.b64encode(os.urandom(16)).decode()
    lines = [
        "GET /ws HTTP/1.1",
        f"Host: 127.0.0.1:{port}",
        "Upgrade: websocket",
        "Connection: Upgrade",
        f"Sec-WebSocket-Key: {key}",
        "Sec-WebSocket-Version: 13",
        f"Origin: http://127.0.0.1:{port}",
        f"Sec-WebSocket-Protocol: bokeh, {token}",
        f"Cookie: {cookie}",
    ]
    s = socket.create_connection(("127.0.0.1", port), timeout=30)
    s.sendall(("\r\n".join(lines) + "\r\n\r\n").encode())
    head = b""
    while b"\r\n\r\n" not in head:
        head += s.recv(1)
    assert b" 101 " in head.split(b"\r\n")[0], head
    return s


def _closed_by_server(s: socket.socket, seconds: float = 20.0) -> bool:
    """Read frames until the server sends a close frame (True) or the time is up."""
    s.settimeout(seconds)

    def exactly(n: int) -> bytes:
        got = b""
        while len(got) < n:
            chunk = s.recv(n - len(got))
            if not chunk:
                raise ConnectionError("closed without a close frame")
            got += chunk
        return got

    try:
        while True:
            first, second = exactly(2)
            size = second & 0x7F
            if size == 126:
                size = struct.unpack(">H", exactly(2))[0]
            elif size == 127:
                size = struct.unpack(">Q", exactly(8))[0]
            exactly(size)
            if first & 0x0F == 0x8:
                return True
    except TimeoutError:
        return False
    except ConnectionError:
        return True


@pytest.fixture(scope="module")
def shared_server():
    port = free_port()
    proc = _start(port, "--share", "--address", "127.0.0.1", "--password", PASSWORD)
    yield port, proc
    log = stop_server(proc)
    assert PASSWORD not in log  # never logged or printed
    assert "Traceback" not in log, log[-3000:]
    assert "Beautiful is better than ugly" not in log  # the module `this` was never imported


def test_without_the_password_every_page_is_the_login_page(shared_server):
    port, _ = shared_server
    resp, data = _request(port, "GET", "/?follow=abc")
    assert resp.status == 302
    assert resp.getheader("Location") == "./login?next=%2F%3Ffollow%3Dabc"
    resp, data = _request(port, "GET", "/login?next=%2F%3Ffollow%3Dabc")
    page = data.decode()
    assert resp.status == 200 and 'name="password"' in page
    assert 'value="/?follow=abc"' in page
    assert "fb-state" not in page and "Bokeh" not in page  # not the app
    for path in ("/autoload.js?bokeh-autoload-element=x", "/metadata"):
        resp, data = _request(port, "GET", path)
        assert resp.status in (302, 403, 404), (path, resp.status)
        assert b"fb-state" not in data


def test_a_wrong_password_is_refused_and_the_right_one_opens_the_app(shared_server):
    port, _ = shared_server
    resp, data = _login(port, PASSWORD + "x")
    assert resp.status == 401 and resp.getheader("Set-Cookie") is None
    assert "not right" in data.decode()
    resp, _ = _login(port, PASSWORD)
    assert resp.status == 302 and resp.getheader("Location") == "/"
    cookie_header = resp.getheader("Set-Cookie")
    assert "HttpOnly" in cookie_header and "SameSite=Lax" in cookie_header
    cookie = cookie_header.split(";")[0]
    resp, data = _request(port, "GET", "/", headers={"Cookie": cookie})
    assert resp.status == 200 and b"fringebench" in data and b"bokeh" in data.lower()
    resp, data = _request(port, "GET", "/logout", headers={"Cookie": cookie})
    assert resp.status == 200 and "signed out" in data.decode()
    assert 'user=""' in resp.getheader("Set-Cookie")  # the browser drops its login
    # A forged cookie (signed with another secret) is not a login.
    forged = "user=2|1:0|10:1796148104|4:user|12:Y29sbGVhZ3Vl|" + "0" * 64
    resp, _ = _request(port, "GET", "/", headers={"Cookie": forged})
    assert resp.status == 302


def test_websocket_upgrades_from_a_foreign_origin_are_refused(shared_server):
    port, _ = shared_server
    resp, _ = _login(port, PASSWORD)
    cookie = resp.getheader("Set-Cookie").split(";")[0]
    resp, data = _request(port, "GET", "/", headers={"Cookie": cookie})
    token = re.search(rb'"token":\s*"([^"]+)"', data).group(1).decode()
    for origin in (
        "http://evil.example",
        f"http://evil.example:{port}",
        f"http://127.0.0.1:{port + 1}",
        "null",
    ):
        assert " 403 " in _upgrade(port, origin, cookie, token), origin
    assert " 403 " in _upgrade(port, f"http://127.0.0.1:{port}", None, token)  # no login
    assert " 101 " in _upgrade(port, f"http://127.0.0.1:{port}", cookie, token)
    assert " 101 " in _upgrade(port, f"http://localhost:{port}", cookie, _page_token(port, cookie))


# Defect: routes outside the login (Panel's /components/<module>/… imported any module).
@pytest.mark.parametrize(
    "path",
    [
        "/components/this/x/__css__/y",
        "/components/..%2F..%2Fetc/x/__css__/y",
        "/components/%2e%2e/x/__css__/y",
        "/components/panel/x/__css__/y",
        "/static/js/bokeh.min.js",
        "/static/extensions/panel/css/loading.css",
        "/favicon.ico",
        "/metadata",
        "/autoload.js?bokeh-autoload-element=x",
        "/ws",
    ],
)
def test_nothing_but_the_login_page_answers_without_a_login(shared_server, path):
    port, _ = shared_server
    resp, data = _request(port, "GET", path)
    assert resp.status == 403, (path, resp.status)
    assert len(data) < 200 and b"bokeh" not in data.lower()


def test_the_login_page_needs_nothing_else_from_the_server(shared_server):
    port, _ = shared_server
    for path in ("/login", "/logout"):
        resp, data = _request(port, "GET", path)
        assert resp.status == 200
        page = data.decode()
        # No stylesheet, script or image from this server: the page is self-contained
        # (its icon is inline, so the browser does not ask for /favicon.ico either).
        assert not re.search(r'(src|href)="/', page), path
        assert 'rel="icon" href="data:' in page


def test_a_malformed_component_path_is_not_found_even_logged_in(shared_server):
    port, _ = shared_server
    cookie = _cookie_of(_login(port, PASSWORD)[0])
    for path in ("/components/..%2F..%2Fetc/x/__css__/y", "/components/%2e%2e/x/__css__/y"):
        resp, _ = _request(port, "GET", path, headers={"Cookie": cookie})
        assert resp.status == 404, (path, resp.status)
    # A module the server has not imported is not imported on request.
    resp, _ = _request(port, "GET", "/components/this/x/__css__/y", headers={"Cookie": cookie})
    assert resp.status == 404


# Defect: a copied cookie stayed valid for a day after signing out.
def test_signing_out_ends_the_login_and_closes_its_pages(shared_server):
    port, _ = shared_server
    resp, _ = _login(port, PASSWORD)
    header = resp.getheader("Set-Cookie")
    expires = re.search(r"expires=([^;]+)", header).group(1)
    left = email.utils.parsedate_to_datetime(expires).timestamp() - time.time()
    assert 0 < left <= serving.LOGIN_HOURS * 3600 + 60  # a working day, not more
    cookie, other = header.split(";")[0], _cookie_of(_login(port, PASSWORD)[0])
    assert cookie != other  # every login is its own
    ws = _open_socket(port, cookie, _page_token(port, cookie))
    try:
        resp, data = _request(port, "GET", "/logout", headers={"Cookie": cookie})
        assert resp.status == 200 and "signed out" in data.decode()
        assert _closed_by_server(ws)  # the open page of that login is closed
    finally:
        ws.close()
    for path in ("/", "/static/js/bokeh.min.js"):
        resp, _ = _request(port, "GET", path, headers={"Cookie": cookie})  # the copied cookie
        assert resp.status in (302, 403), (path, resp.status)
    assert " 403 " in _upgrade(port, f"http://127.0.0.1:{port}", cookie, "x")
    resp, _ = _request(port, "GET", "/", headers={"Cookie": other})
    assert resp.status == 200  # another login is untouched


def test_a_restart_ends_every_login():
    port = free_port()
    proc = _start(port, "--share", "--address", "127.0.0.1", "--password", PASSWORD)
    try:
        cookie = _cookie_of(_login(port, PASSWORD)[0])
        assert _request(port, "GET", "/", headers={"Cookie": cookie})[0].status == 200
    finally:
        stop_server(proc)
    proc = _start(port, "--share", "--address", "127.0.0.1", "--password", PASSWORD)
    try:  # the same password, a new start: the old cookie is no login
        assert _request(port, "GET", "/", headers={"Cookie": cookie})[0].status == 302
    finally:
        log = stop_server(proc)
    assert "Traceback" not in log


def test_a_login_ends_after_its_lifetime(monkeypatch):
    now = [5000.0]
    monkeypatch.setattr(serving.time, "monotonic", lambda: now[0])
    logins = serving.Logins(lifetime=3600.0, maximum=3)
    first = logins.open()
    assert logins.valid(first) and not logins.valid("made-up") and not logins.valid(None)
    now[0] += 3599.0
    assert logins.valid(first)
    now[0] += 1.0
    assert not logins.valid(first)
    kept = [logins.open() for _ in range(4)]  # at most 3 recorded: the oldest goes
    assert not logins.valid(kept[0]) and all(logins.valid(k) for k in kept[1:])
    logins.close(kept[1])
    assert not logins.valid(kept[1]) and len(logins) == 2


# Defect: the login cookie was copied into the page's unsigned session token.
def test_the_page_holds_no_login_and_its_session_attaches_once(shared_server):
    port, _ = shared_server
    cookie = _cookie_of(_login(port, PASSWORD)[0])
    _, data = _request(port, "GET", "/", headers={"Cookie": cookie})
    value = cookie.split("=", 1)[1]
    assert value.encode() not in data  # neither the cookie nor any part of it
    token = re.search(rb'"token":\s*"([^"]+)"', data).group(1).decode()
    payload = _token_payload(token)
    assert payload["cookies"] == {}
    assert not {k.lower() for k in payload["headers"]} & {"cookie", "authorization"}
    assert value not in json.dumps(payload)
    assert "." in payload["session_id"]  # a signed session id (id.signature)
    origin = f"http://127.0.0.1:{port}"
    ws = _open_socket(port, cookie, token)
    try:
        assert " 403 " in _upgrade(port, origin, cookie, token)  # a replay of the same page
    finally:
        ws.close()
    assert " 403 " in _upgrade(port, origin, cookie, token)  # not after it closed either
    # Another login cannot take a page it did not load.
    stranger = _cookie_of(_login(port, PASSWORD)[0])
    assert " 403 " in _upgrade(port, origin, stranger, _page_token(port, cookie))
    # A made-up (unsigned) session id is refused.
    forged = (
        base64.urlsafe_b64encode(
            json.dumps({"session_id": "A" * 44, "session_expiry": time.time() + 300}).encode()
        )
        .decode()
        .rstrip("=")
    )
    assert " 403 " in _upgrade(port, origin, cookie, forged)


# Defect: the form stripped spaces and control characters, so "password\x00" logged in.
def test_only_the_exact_password_logs_in(shared_server):
    port, _ = shared_server
    for given in (PASSWORD + "\x00", " " + PASSWORD, PASSWORD + " ", PASSWORD + "\t"):
        resp, _ = _login(port, given)
        assert resp.status == 401, repr(given)
    assert _login(port, PASSWORD)[0].status == 302


@pytest.mark.parametrize(
    ("content", "words"),
    [
        ("  lab-bench-4021\n", "begins or ends with a space"),
        ("lab-bench-4021 \n", "begins or ends with a space"),
        ("lab-bench-4021\x00\n", "control characters"),
        ("lab-bench\x1c4021\n", "control characters"),
        ("lab-bench\u20284021\n", "control characters"),
    ],
)
def test_a_password_file_that_cannot_be_typed_is_refused_at_start(tmp_path, capsys, content, words):
    f = tmp_path / "pw.txt"
    f.write_text(content, encoding="utf-8")
    with pytest.raises(serving.ServeError, match=words):
        serving.resolve_password(None, str(f))
    assert cli.main(["serve", "--share", "--password-file", str(f)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: --password-file") and words in err


def test_passwords_are_compared_in_one_unicode_form():
    composed, decomposed = "caf\u00e9-bench-1", "cafe\u0301-bench-1"
    assert serving.password_matches(decomposed, composed)
    assert serving.password_matches(composed, decomposed)
    assert not serving.password_matches(composed + "\x00", composed)


# Defect: ten wrong passwords locked everyone on that address out.
def test_wrong_passwords_slow_an_address_down_without_locking_it_out(monkeypatch):
    now = [1000.0]
    monkeypatch.setattr(serving.time, "monotonic", lambda: now[0])
    backoff = serving.LoginBackoff(free=3, base=1.0, cap=8.0, forget=600.0)
    delays = []
    for _ in range(8):
        delays.append(backoff.delay("192.0.2.9"))
        backoff.record("192.0.2.9")
    assert delays == [0, 0, 0, 1, 2, 4, 8, 8]  # doubling, then capped
    assert backoff.wait("192.0.2.9") == 8.0 and backoff.wait("192.0.2.10") == 0.0
    now[0] += 5.0
    assert backoff.wait("192.0.2.9") == 3.0  # counted from the last wrong password
    now[0] += 601.0
    assert backoff.delay("192.0.2.9") == 0.0  # forgotten after a while


def test_at_most_a_few_attempts_from_one_address_wait_at_once():
    backoff = serving.LoginBackoff(queue=2)
    assert backoff.enter("192.0.2.9") is backoff.enter("192.0.2.9") is not None
    assert backoff.enter("192.0.2.9") is None and backoff.enter("192.0.2.10") is not None
    backoff.leave("192.0.2.9")
    assert backoff.enter("192.0.2.9") is not None


def test_the_right_password_still_logs_in_after_a_burst_of_wrong_ones():
    port = free_port()
    proc = _start(port, "--share", "--address", "127.0.0.1", "--password", PASSWORD)
    try:
        for _ in range(11):  # over the ten that used to lock the address out
            assert _login(port, "not-" + PASSWORD)[0].status == 401
        resp, data = _login(port, "also-not-" + PASSWORD)
        assert resp.status == 401 and "wait" in data.decode()  # it says that it slows down
        resp, _ = _login(port, PASSWORD)
        assert resp.status == 302 and resp.getheader("Location") == "/"
    finally:
        log = stop_server(proc)
    assert "Traceback" not in log and PASSWORD not in log


def test_plain_serve_listens_on_loopback_only():
    port = free_port()
    proc = _start(port)
    try:
        assert _listening(port) == {"127.0.0.1"}
        resp, _ = _request(port, "GET", "/")
        assert resp.status == 200  # no login without sharing
    finally:
        log = stop_server(proc)
    assert "serving at http://127.0.0.1:" in log


def test_share_listens_on_all_interfaces_and_prints_a_generated_password_once():
    port = free_port()
    proc = _start(port, "--share")
    try:
        assert _listening(port) == {"0.0.0.0"}
    finally:
        log = stop_server(proc)
    found = re.findall(r"Password for this start \(shown once\): (\S+)", log)
    assert len(found) == 1 and log.count(found[0]) == 1
    for _name, addr in serving.lan_addresses():
        assert f"http://{addr}:{port}/" in log  # printed, never connected to


def test_background_work_leaves_a_lane_for_screen_results():
    q = sharing.ComputeQueue(workers=2, spare_after=60)
    setup = load_preset(None)
    release, started = threading.Event(), []
    background = sharing.PRIORITY_OTHER + sharing.PRIORITY_BACKGROUND

    def long_job(name: str):
        started.append(name)
        return release.wait(30)

    first = q.submit(setup, lambda: long_job("along z a"), priority=background)
    second = q.submit(setup, lambda: long_job("along z b"), priority=background)
    screen = q.submit(setup, lambda: "screen", priority=sharing.PRIORITY_OTHER)
    assert screen.result(timeout=30) == "screen"  # the lane background may not take
    deadline = time.monotonic() + 10
    while not started and time.monotonic() < deadline:  # its thread runs it just after
        time.sleep(0.01)
    assert started == ["along z a"] and not second.running()
    release.set()
    assert first.result(timeout=30) and second.result(timeout=30)
    assert started == ["along z a", "along z b"]
    q.close()


def test_a_browser_closing_mid_write_is_not_logged_as_an_error():
    import tornado.iostream
    import tornado.websocket

    seen = []

    class Loop:
        def default_exception_handler(self, context):
            seen.append(context["exception"])

    loop = Loop()
    for exc in (tornado.websocket.WebSocketClosedError(), tornado.iostream.StreamClosedError()):
        serving._closed_connections_are_not_errors(loop, {"exception": exc})
    assert seen == []
    other = ValueError("a real failure")
    serving._closed_connections_are_not_errors(loop, {"exception": other})
    assert seen == [other]
