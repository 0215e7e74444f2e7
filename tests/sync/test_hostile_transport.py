"""Sync under hostile transport (issue 9): answers cut inside their headers, a stock server that
refuses PROPFIND Depth: infinity, a real 403, a server that drips its answer, an intake endpoint
that answers 200 with a login page. Real wsgidav and real HTTP servers on 127.0.0.1."""

from __future__ import annotations

import json
import socket
import threading
import time

import pytest

import sync
from core.store.atomic import canonical_json_bytes
from sync import errors
from sync.outbox import Outbox
from sync.session import Credentials, RetryPolicy, Session
from sync.targets import WebDavTarget
from tests.conftest import run_cli
from tests.sync.conftest import (
    DAV_PASSWORD,
    DAV_USER,
    FaultProxy,
    dav_session,
    edit_stop_notes,
    finite_depth_only,
    forbid_everything,
    free_port,
    new_trip,
    open_store,
    start_dav,
)


def one_per_connection(device_id: str, **kw) -> Session:
    """A session whose every request opens its own connection, so the proxy's script applies
    per request."""
    opts = dict(
        credentials=Credentials(DAV_USER, DAV_PASSWORD),
        connect_timeout_s=2.0,
        read_timeout_s=3.0,
        retry=RetryPolicy(attempts=3, backoff_s=0.01, max_backoff_s=0.02),
    )
    opts.update(kw)
    s = Session(device_id, **opts)
    s.http.headers["Connection"] = "close"
    return s


def problem_lines(stderr: str) -> list[str]:
    """What the command said went wrong (notes such as "created a new device store" aside)."""
    return [ln for ln in stderr.splitlines() if ln.strip() and not ln.startswith("streamtab: note:")]


@pytest.fixture
def proxy(dav):
    p = FaultProxy(dav.port)
    yield p
    p.close()


# --- 1. a hash mismatch on a read is a transport problem first ---------------------------------------
def test_get_cut_inside_its_headers_is_read_again_not_blacklisted(dav, proxy, device_a, tmp_path):
    trips = [new_trip(device_a, day=d) for d in (3, 4, 5)]
    assert sync.push(device_a, dav.url, session=dav_session("tablet-A")).pushed == 3
    office = open_store(tmp_path / "office", "office-desk")
    # each file's first GET answer is cut right after "HTTP/1.1 200 OK": it reads as an empty 200
    proxy.script = {"GET": ["cut_headers", "pass"] * 3}
    report = sync.pull(office, proxy.url_for("/hub/"), session=one_per_connection("office-desk"))
    assert proxy.counts.get("cut_headers") == 3
    assert (report.pulled, report.quarantined, report.failed) == (3, 0, 0) and report.complete
    for t in trips:
        assert office.trip_document(t.id)["stops"] == device_a.trip_document(t.id)["stops"]
    assert not list((office.data_dir / "sync").glob("quarantine/*"))


def test_reads_cut_every_time_leave_the_trip_for_the_next_sync_which_gets_it(dav, proxy, device_a, tmp_path):
    t = new_trip(device_a)
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    office = open_store(tmp_path / "office", "office-desk")
    proxy.script = {"GET": ["cut_headers"] * 3}  # as many as the session's tries
    url = proxy.url_for("/hub/")
    first = sync.pull(office, url, session=one_per_connection("office-desk"))
    assert first.failed == 1 and first.quarantined == 0 and not first.complete
    assert "will retry" in first.per_trip[0].message
    entry = Outbox(office.data_dir, WebDavTarget(url, dav_session()).key, url).get(t.id)
    assert entry is None or not entry.bad  # nothing recorded as bad
    second = sync.pull(office, url, session=one_per_connection("office-desk"))
    assert second.pulled == 1 and second.complete
    assert office.trip_document(t.id)["stops"] == device_a.trip_document(t.id)["stops"]


def test_a_damaged_hub_copy_is_reported_at_every_pull_and_picked_up_once_repaired(dav, device_a, tmp_path):
    t = new_trip(device_a)
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    f = next((dav.root / "hub" / "trips").glob(f"*/{t.id}/*.json"))
    good = f.read_bytes()
    f.write_bytes(good[: len(good) // 2])  # truncated at the hub itself
    office = open_store(tmp_path / "office", "office-desk")
    for _ in range(2):  # re-checked, reported each time
        r = sync.pull(office, dav.url, session=dav_session("office-desk"))
        assert r.quarantined == 1 and not r.complete
        assert "two fresh reads" in r.per_trip[0].message and "re-checked" in r.per_trip[0].message
    f.write_bytes(good)  # the office restores it
    r = sync.pull(office, dav.url, session=dav_session("office-desk"))
    assert r.pulled == 1 and r.complete


def test_push_merge_read_cut_inside_headers_is_retried_and_merged(dav, proxy, device_a, device_b):
    t = new_trip(device_a, stops=2)
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    sync.pull(device_b, dav.url, session=dav_session("tablet-B"))
    edit_stop_notes(device_a, t.id, 0, "riffle silted")
    edit_stop_notes(device_b, t.id, 1, "beaver dam upstream")
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    proxy.script = {"GET": ["cut_headers"]}
    r = sync.push(device_b, proxy.url_for("/hub/"), session=one_per_connection("tablet-B"))
    assert proxy.counts.get("cut_headers") == 1
    assert r.pushed == 1 and r.failed == 0
    stops = device_b.trip_document(t.id)["stops"]
    assert [s["notes"] for s in stops] == ["riffle silted", "beaver dam upstream"]


def test_listing_cut_mid_answer_is_retried_and_a_lasting_cut_is_exit_1_not_2(dav, proxy, device_a, tmp_path):
    new_trip(device_a)
    sync.push(device_a, dav.url, session=dav_session("tablet-A"))
    office = open_store(tmp_path / "office", "office-desk")
    proxy.script = {"PROPFIND": ["cut_headers", "cut_response"]}
    r = sync.pull(office, proxy.url_for("/hub/"), session=one_per_connection("office-desk"))
    assert r.pulled == 1 and r.complete
    # cut on every try: the command says "will retry" (exit 1), not "bad input" (exit 2)
    proxy.script = {"PROPFIND": ["cut_headers"] * 10}
    cfg = tmp_path / "cred.ini"
    cfg.write_text(f"[hub http://127.0.0.1:{proxy.port}/hub/]\nuser = {DAV_USER}\npassword = {DAV_PASSWORD}\n")
    cfg.chmod(0o600)
    other = tmp_path / "office2"
    open_store(other, "office-2")  # an existing store: the pull's only line is its problem
    out = run_cli(
        "sync", "pull", "--from", proxy.url_for("/hub/"), "--credentials", str(cfg), "--timeout", "3", data_dir=other
    )
    assert out.returncode == 1, (out.stderr, proxy.counts, proxy.script)
    assert "Traceback" not in out.stderr and "will retry" in out.stderr
    assert len(problem_lines(out.stderr)) == 1


# --- 2. two 403s ----------------------------------------------------------------------------------------
def test_stock_server_refusing_infinite_depth_costs_a_walk_not_the_pull(tmp_path, device_a):
    seen: list = []
    server = start_dav(tmp_path / "finite", wrap=lambda app: finite_depth_only(app, seen))
    try:
        trips = [new_trip(device_a, day=d) for d in (3, 4)]
        assert sync.push(device_a, server.url, session=dav_session("tablet-A")).pushed == 2
        office = open_store(tmp_path / "office", "office-desk")
        seen.clear()
        r = sync.pull(office, server.url, session=dav_session("office-desk"))
        assert r.pulled == 2 and r.complete
        assert {t.id for t in trips} == {s.id for s in office.list_trips()}
        assert ("PROPFIND", "infinity") in seen and ("PROPFIND", "1") in seen  # refused, then walked
    finally:
        server.stop()


def test_a_real_403_is_unauthorized(tmp_path, device_a):
    server = start_dav(tmp_path / "denied", wrap=forbid_everything)
    try:
        office = open_store(tmp_path / "office", "office-desk")
        with pytest.raises(errors.Unauthorized) as info:
            sync.pull(office, server.url, session=dav_session("office-desk"))
        assert "403" in str(info.value) and "user name and password" in str(info.value)
    finally:
        server.stop()


# --- a deadline bounds every request ------------------------------------------------------------------
class Drip:
    """A server that sends its answer one byte every `every_s` seconds: in its headers
    ("headers") or in its body ("body")."""

    def __init__(self, where: str, every_s: float = 0.2) -> None:
        self.where, self.every_s = where, every_s
        self.sock = socket.socket()
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(8)
        self.port = self.sock.getsockname()[1]
        self.stop = threading.Event()
        threading.Thread(target=self._accept, daemon=True).start()

    def _accept(self) -> None:
        self.sock.settimeout(0.2)
        while not self.stop.is_set():
            try:
                c, _ = self.sock.accept()
            except OSError:
                continue
            threading.Thread(target=self._serve, args=(c,), daemon=True).start()

    def _serve(self, c: socket.socket) -> None:
        body = b"x" * 200
        head = (
            b"HTTP/1.1 200 OK\r\nX-Padding: "
            + b"p" * 200
            + b"\r\nContent-Length: "
            + str(len(body)).encode()
            + b"\r\n\r\n"
        )
        try:
            c.recv(65536)
            slow, fast = (head, b"") if self.where == "headers" else (body, head)
            c.sendall(fast)
            for i in range(len(slow)):  # bounded: at most ~400 bytes
                if self.stop.is_set():
                    return
                c.sendall(slow[i : i + 1])
                time.sleep(self.every_s)
            if self.where == "headers":
                c.sendall(body)
        except OSError:
            pass
        finally:
            c.close()

    def close(self) -> None:
        self.stop.set()
        self.sock.close()


@pytest.mark.parametrize("where", ["headers", "body"])
def test_a_dripping_server_cannot_hold_a_request_past_the_timeout(where):
    drip = Drip(where)
    s = Session("t", connect_timeout_s=1.0, read_timeout_s=1.0, retry=RetryPolicy(attempts=1))
    url = f"http://127.0.0.1:{drip.port}/hub/x"
    try:
        started = time.monotonic()
        with pytest.raises(errors.TimedOut) as info:
            resp = s.request("GET", url, stream=True)
            try:
                s.read_body(resp, 10_000, "x")
            finally:
                resp.close()
        took = time.monotonic() - started
        # the drip would take 40 s or more; the 1 s deadline ends it (slack for a busy machine)
        assert took < 4.0, took
        assert "limit" in str(info.value)
    finally:
        drip.close()
        s.close()


# --- 4. an intake endpoint must acknowledge ---------------------------------------------------------------
@pytest.mark.parametrize("answer,said", [("html", "text/html"), ("empty", "0 bytes"), ("wrong-hash", "content hash")])
def test_endpoint_answering_200_without_the_acknowledgement_is_not_delivered(intake, device_a, answer, said):
    t = new_trip(device_a)
    intake.answer = answer
    r = sync.push(device_a, intake.url, session=dav_session("tablet-A"))
    assert r.pushed == 0 and r.failed == 1 and not r.complete
    msg = r.per_trip[0].message
    assert said in msg and "not counted as delivered" in msg and "\n" not in msg
    if answer == "html":
        assert "Sign in" in msg
    intake.answer = "ack"  # fixed: the next push delivers it
    again = sync.push(device_a, intake.url, session=dav_session("tablet-A"))
    assert again.pushed == 1 and again.complete
    assert intake.by_trip[t.id][-1][1] == canonical_json_bytes(device_a.trip_document(t.id))
    ack_keys = [k for k, status in intake.requests if status in (200, 201)]
    assert ack_keys and json.loads(intake.by_trip[t.id][-1][1])["id"] == t.id


def test_intake_html_answer_through_the_cli_says_what_came_back(intake, device_a):
    new_trip(device_a)
    intake.answer = "html"
    out = run_cli("sync", "push", "--to", intake.url, data_dir=device_a.data_dir)
    assert out.returncode == 1 and "Traceback" not in out.stderr
    assert "text/html" in out.stdout and "not counted as delivered" in out.stdout


def test_free_port_is_loopback():
    assert 0 < free_port() < 65536


def test_cli_timeout_bounds_a_dripping_hub(tmp_path):
    drip = Drip("headers", every_s=0.5)
    try:
        started = time.monotonic()
        out = run_cli(
            "sync",
            "pull",
            "--from",
            f"http://127.0.0.1:{drip.port}/hub/",
            "--timeout",
            "1",
            data_dir=tmp_path / "office",
        )
        took = time.monotonic() - started
    finally:
        drip.close()
    assert out.returncode == 1 and "Traceback" not in out.stderr
    assert "limit" in out.stderr and len(problem_lines(out.stderr)) == 1
    # 4 tries of at most 1 s each plus 3.5 s of backoff, where the drip alone takes 200 s a try
    assert took < 30, took
