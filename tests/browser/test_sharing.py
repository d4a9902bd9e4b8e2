"""A shared session in real headless Chromium, on loopback only.

The server is ``fringebench serve --share --address 127.0.0.1 --password ...``:
the login page guards the app, every browser context has its own session,
a follower mirrors the host read-only and detaches into its own copy, and an
oversized upload costs only the connection that sent it. The minute-long load
run with eight sessions is marked slow. Nothing here times a result: the
update delays are printed for the record (the benchmark is bench/share_load.py).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time

import pytest
from conftest import (
    ARTIFACTS,
    VIEWPORT,
    new_page,
    open_dashboard,
    set_number,
    state,
    wait_state,
)
from localserver import CHROMIUM, ROOT, free_port, start_server, stop_server

from compute import snapshot
from server.app import load_preset
from server.controls import to_si

pytestmark = pytest.mark.browser

PASSWORD = "bench-share-7731"  # demo password of the test server


@pytest.fixture(scope="module")
def shared_url():
    port = free_port()
    proc = start_server(port, "--share", "--address", "127.0.0.1", "--password", PASSWORD)
    yield f"http://127.0.0.1:{port}/"
    log = stop_server(proc)
    assert PASSWORD not in log
    assert "Traceback" not in log, log[-4000:]


@pytest.fixture
def contexts(browser):
    """New browser contexts (separate cookies, separate sessions), closed afterwards."""
    made = []

    def new():
        ctx = browser.new_context(viewport=VIEWPORT)
        made.append(ctx)
        return new_page(ctx)

    yield new
    for ctx in made:
        ctx.close()


def log_in(pg, url: str, password: str = PASSWORD) -> dict:
    """Open ``url``, pass the login page and wait for the first result."""
    pg.goto(url)
    pg.locator("#fb-password").fill(password)
    pg.locator("#fb-login-submit").click()
    pg.locator("#fb-state").wait_for(state="attached")
    return wait_state(pg, lambda s: "key" in s, what="the first result")


def _expected_key(**changes) -> str:
    """The physics hash of the default preset with ``path=value`` changes (SI values)."""
    setup = load_preset(None)
    for path, value in changes.items():
        section, name = path.split("__")
        setattr(getattr(setup, section), name, value)
    return snapshot.physics_hash(setup)


def test_the_app_needs_the_password(contexts, shared_url):
    pg = contexts()
    pg.goto(shared_url)
    assert "/login" in pg.url
    assert pg.locator("#fb-login").is_visible()
    assert pg.locator("#fb-state").count() == 0
    pg.locator("#fb-password").fill("not the password")
    pg.locator("#fb-login-submit").click()
    message = pg.locator("#fb-login-message")
    message.wait_for(state="visible")
    assert "not right" in message.inner_text()
    assert pg.locator("#fb-state").count() == 0
    st = log_in(pg, shared_url)
    assert st["key"] == _expected_key()
    assert pg.locator("#fb-share").get_attribute("data-role") == "own"
    # The browser reports the refused login (status 401) as a failed resource; nothing else.
    assert [e for e in pg.console_errors if "status of 401" not in e] == []


def test_two_browsers_each_keep_their_own_settings(contexts, shared_url):
    a, b = contexts(), contexts()
    st_a, st_b = log_in(a, shared_url), log_in(b, shared_url)
    assert st_a["key"] == st_b["key"] == _expected_key()
    set_number(a, "fb-distance", 2.0)
    set_number(b, "fb-source-wavelength", 633)
    want_a = _expected_key(screen__distance=2.0)
    want_b = _expected_key(source__wavelength=to_si(633, "nm"))
    wait_state(a, lambda s: s["key"] == want_a, what="A's distance")
    wait_state(b, lambda s: s["key"] == want_b, what="B's wavelength")
    a.wait_for_timeout(1000)  # give any cross-talk time to show
    assert state(a)["setup-key"] == want_a and state(b)["setup-key"] == want_b
    assert float(a.locator(".fb-distance input").first.input_value()) == 2.0
    assert float(b.locator(".fb-distance input").first.input_value()) == 1.2
    assert float(a.locator(".fb-source-wavelength input").first.input_value()) == 532
    assert a.console_errors == [] and b.console_errors == []


def test_a_follower_mirrors_the_host_read_only_then_detaches(contexts, shared_url):
    host, follower = contexts(), contexts()
    st = log_in(host, shared_url)
    host.locator(".fb-share button").click()
    host.locator('#fb-share[data-role="host"]').wait_for(state="attached")
    link = host.locator(".fb-follow-links a").first.get_attribute("href")
    assert link.startswith(shared_url) and "?follow=" in link

    fst = log_in(follower, link)  # the login page leads on to the follow link
    assert fst["key"] == st["key"]
    assert follower.locator("#fb-share").get_attribute("data-role") == "follower"
    host.locator('#fb-share[data-followers="1"]').wait_for(state="attached")
    assert "shared · 1 following" in host.locator("#fb-share").inner_text()
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    for pg, name in ((host, "sharing-host.png"), (follower, "sharing-follower.png")):
        pg.evaluate("() => window.scrollTo(0, 0)")
        pg.wait_for_timeout(300)
        pg.screenshot(path=str(ARTIFACTS / name))

    # The host changes the distance: the follower shows the same result.
    delays = []
    for k, distance in enumerate((1.6, 0.9)):
        before = state(host)["key"]
        box = host.locator(".fb-distance input").first
        box.fill(str(distance))
        t0 = time.monotonic()
        box.press("Enter")
        hst = wait_state(host, lambda s, b=before: s["key"] != b, what=f"host change {k}")
        fol = wait_state(follower, lambda s, h=hst: s["key"] == h["key"], what="the follower")
        delays.append(time.monotonic() - t0)
        assert fol["key"] == _expected_key(screen__distance=distance)
        assert fol["peak"] == hst["peak"] and fol["sum"] == hst["sum"]
    print(f"follower shows the host's change after {', '.join(f'{d:.2f}' for d in delays)} s")

    # The follower's controls are disabled; forcing one changes nothing anywhere.
    box = follower.locator(".fb-distance input").first
    assert box.is_disabled()
    box.evaluate("e => { e.disabled = false; }")
    box.fill("3.3")
    box.press("Enter")
    follower.locator(".notyf__message", has_text="read-only").first.wait_for(state="visible")
    follower.wait_for_timeout(500)
    host_key = state(host)["setup-key"]
    assert host_key == _expected_key(screen__distance=0.9)
    assert state(follower)["setup-key"] == host_key

    # Detach: an own, editable copy; the host's setup and follower count follow.
    follower.locator(".fb-detach button").click()
    follower.locator('#fb-share[data-role="own"]').wait_for(state="attached")
    host.locator('#fb-share[data-followers="0"]').wait_for(state="attached")
    assert "follow=" not in follower.url
    set_number(follower, "fb-distance", 2.5)
    wait_state(follower, lambda s: s["key"] == _expected_key(screen__distance=2.5), what="own copy")
    assert state(host)["setup-key"] == host_key
    assert host.console_errors == [] and follower.console_errors == []


def test_a_follower_forcing_the_hidden_share_button_gets_a_message(contexts, shared_url):
    host, follower = contexts(), contexts()
    log_in(host, shared_url)
    host.locator(".fb-share button").click()
    host.locator('#fb-share[data-role="host"]').wait_for(state="attached")
    link = host.locator(".fb-follow-links a").first.get_attribute("href")
    log_in(follower, link)
    assert follower.locator("#fb-share").get_attribute("data-role") == "follower"
    hidden = follower.locator(".fb-share button")
    assert not hidden.is_visible()
    hidden.dispatch_event("click")  # what a script in the page could do
    note = follower.locator(".notyf__message", has_text="cannot be shared").first
    note.wait_for(state="visible")
    assert follower.locator("#fb-share").get_attribute("data-role") == "follower"
    host.locator('#fb-share[data-followers="1"]').wait_for(state="attached")
    # (the module's server fixture asserts that no traceback reached the log)
    assert host.console_errors == [] and follower.console_errors == []


def test_scripts_in_the_page_cannot_read_the_login(contexts, shared_url):
    pg = contexts()
    log_in(pg, shared_url)
    login = [c for c in pg.context.cookies() if c["name"] == "user"]
    assert len(login) == 1 and login[0]["httpOnly"]
    assert "user=" not in pg.evaluate("() => document.cookie")
    assert login[0]["value"] not in pg.content()  # nor in the session token in the page


def test_signing_out_closes_the_page_and_the_cookie_stops_working(contexts, shared_url):
    pg = contexts()
    log_in(pg, shared_url)
    saved = [c for c in pg.context.cookies() if c["name"] == "user"]
    other = pg.context.new_page()
    other.goto(shared_url + "logout")
    assert "signed out" in other.inner_text("body")
    other.close()
    # A copied cookie is no login any more: a new browser with it gets the login page.
    thief = contexts()
    thief.context.add_cookies(saved)
    thief.goto(shared_url)
    assert "/login" in thief.url and thief.locator("#fb-state").count() == 0


def test_an_unknown_follow_link_opens_an_own_dashboard(contexts, shared_url):
    pg = contexts()
    st = log_in(pg, f"{shared_url}?follow=" + "A" * 24)
    assert st["key"] == _expected_key()
    assert pg.locator("#fb-share").get_attribute("data-role") == "own"
    pg.locator(".notyf__message", has_text="follow link").first.wait_for(state="visible")


def test_a_large_upload_is_refused_by_name_and_size_and_changes_nothing(
    contexts, shared_url, tmp_path
):
    pg = contexts()
    st = log_in(pg, shared_url)
    big = tmp_path / "large.json"
    big.write_bytes(b"{" + b" " * (12 * 1024 * 1024) + b"}")  # over 5 MB, under the message cap
    pg.locator(".fb-import input[type=file]").set_input_files(str(big))
    msg = pg.locator(".notyf__message", has_text="large.json").first
    msg.wait_for(state="visible")
    assert "a snapshot is at most 5 MB" in msg.inner_text()
    assert wait_state(pg, lambda s: s["busy"] == "0")["key"] == st["key"]


def test_an_oversized_upload_costs_only_its_own_connection(contexts, shared_url, tmp_path):
    sender, other = contexts(), contexts()
    log_in(sender, shared_url)
    st = log_in(other, shared_url)
    big = tmp_path / "huge.json"
    big.write_bytes(b"{" + b" " * (40 * 1024 * 1024) + b"}")  # base64: over the 32 MiB cap
    sender.locator(".fb-import input[type=file]").set_input_files(str(big))
    sender.locator(".notyf__message", has_text="connection").first.wait_for(state="visible")
    set_number(other, "fb-distance", 1.1)
    wait_state(other, lambda s: s["key"] != st["key"], what="the other session's result")
    assert other.console_errors == []


def test_sessions_beyond_the_limit_get_a_notice_until_a_place_frees(contexts):
    port = free_port()
    code = (
        "from server.serving import serve; "
        f"serve(port={port}, max_sessions=2, unused_session_lifetime_milliseconds=500, "
        "check_unused_sessions_milliseconds=300)"
    )
    env = dict(os.environ, PYTHONPATH=str(ROOT), PYTHONUNBUFFERED="1")
    proc = subprocess.Popen(
        [sys.executable, "-c", code],
        cwd=ROOT,
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
    )
    url = f"http://127.0.0.1:{port}/"
    try:
        deadline = time.monotonic() + 90
        while True:  # the port answers; no session is opened by this check
            try:
                socket.create_connection(("127.0.0.1", port), timeout=1).close()
                break
            except OSError:
                assert time.monotonic() < deadline and proc.poll() is None
                time.sleep(0.2)
        first, second, third = contexts(), contexts(), contexts()
        open_dashboard(first, url)
        open_dashboard(second, url)
        third.goto(url)
        third.locator("#fb-full").wait_for(state="visible")
        assert "fringebench is full" in third.locator("#fb-full").inner_text()
        assert third.locator("#fb-state").count() == 0
        first.context.close()  # its session expires and frees a place
        deadline = time.monotonic() + 60
        while True:
            third.goto(url)
            third.wait_for_selector("#fb-full, #fb-state", state="attached")
            if third.locator("#fb-state").count():
                break
            assert time.monotonic() < deadline, "the closed session's place was not freed"
            third.wait_for_timeout(500)
        wait_state(third, lambda s: "key" in s, what="a dashboard in the freed place")
    finally:
        log = stop_server(proc)
    assert "Traceback" not in log, log[-3000:]


@pytest.mark.slow
def test_eight_sessions_changing_settings_for_a_minute_stay_consistent():
    sys.path.insert(0, str(ROOT / "bench"))
    import share_load

    report = share_load.run(sessions=8, seconds=60.0, chromium=CHROMIUM, follower=True)
    print(share_load.summary(report))
    assert report["server_errors"] == [], report["server_errors"]
    assert report["console_errors"] == [], report["console_errors"]
    assert len(report["sessions"]) == 8
    for s in report["sessions"]:
        # Each session ends on the result of its own last change and nothing else.
        assert s["final_setup_key"] == s["expected_key"], s
        assert s["final_key"] == s["expected_key"], s
        assert s["final_error"] == "" and s["changes"] >= 3, s
    keys = [s["expected_key"] for s in report["sessions"]]
    assert len(set(keys)) == 8  # eight different end states: no session saw another's
    assert report["follower"]["final_key"] == report["sessions"][0]["final_key"]
