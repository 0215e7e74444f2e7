"""Push and pull against a real WebDAV server (wsgidav on 127.0.0.1), and the server and client
traps measured on wsgidav and requests (RFC 4918 and RFC 9110 semantics; wsgidav behaviour as
observed in its source, util.get_file_etag and request_server)."""

import time
from pathlib import Path

import requests

import sync
from core.store.atomic import canonical_json_bytes
from sync.layout import revision_name
from tests.sync.conftest import DAV_PASSWORD, DAV_USER, dav_session, edit_stop_notes, hub_files, new_trip


def hub_of(dav) -> Path:
    return dav.root / "hub"


def test_first_push_puts_each_trip_once_byte_for_byte(dav, device_a):
    trips = [new_trip(device_a, day=d) for d in (3, 4)]
    report = sync.push(device_a, dav.url, session=dav_session())
    assert (report.pushed, report.unchanged, report.failed) == (2, 0, 0)
    files = hub_files(hub_of(dav))
    for t in trips:
        doc = device_a.trip_document(t.id)
        (only,) = files[t.id]
        assert only.read_bytes() == canonical_json_bytes(doc)
        assert only.name == revision_name(
            doc["revision"], device_a.list_trips()[0].content_hash
        ) or only.name.startswith("r")
        assert only.parent.parent.name == "2026"  # browsable by year, then trip id
    # nothing is left half-way in incoming/
    assert not list((hub_of(dav) / "incoming").rglob("*.part"))


def test_pushing_twice_changes_nothing_and_sends_nothing(dav, device_a):
    new_trip(device_a)
    s = dav_session()
    sync.push(device_a, dav.url, session=s)
    before = {p: p.read_bytes() for ps in hub_files(hub_of(dav)).values() for p in ps}
    s.request_count = 0
    report = sync.push(device_a, dav.url, session=s)
    assert (report.pushed, report.unchanged) == (0, 1)
    assert s.request_count == 0
    after = {p: p.read_bytes() for ps in hub_files(hub_of(dav)).values() for p in ps}
    assert before == after


def test_changed_trip_costs_three_requests_and_keeps_older_revision(dav, device_a):
    t = new_trip(device_a)
    s = dav_session()
    sync.push(device_a, dav.url, session=s)
    edit_stop_notes(device_a, t.id, 0, "cattle in the ford")
    s.request_count = 0
    report = sync.push(device_a, dav.url, session=s)
    assert report.pushed == 1
    # PROPFIND + PUT to incoming/ + MOVE (issue 5's target ≤ 3), + 1 PUT of the push's change log
    # entry (issue 13: each push logs what it added, so a pull need not list every trip)
    assert s.request_count <= 4
    files = hub_files(hub_of(dav))[t.id]
    assert len(files) == 2  # immutable revisions: the older one is never overwritten
    assert files[-1].read_bytes() == canonical_json_bytes(device_a.trip_document(t.id))


def test_lost_outbox_then_push_again_counts_the_412_as_success(dav, device_a):
    # the hub already holds these exact bytes (a write that landed, an outbox lost): MOVE with
    # Overwrite: F answers 412 and the hub copy with the same content hash is success
    new_trip(device_a)
    sync.push(device_a, dav.url, session=dav_session())
    import shutil

    shutil.rmtree(device_a.data_dir / "sync")
    report = sync.push(device_a, dav.url, session=dav_session())
    assert report.failed == 0 and report.pushed + report.unchanged == 1
    assert sum(len(v) for v in hub_files(hub_of(dav)).values()) == 1


def test_412_on_create_with_the_same_hash_is_success_at_the_target_level(dav, device_a):
    t = new_trip(device_a)
    doc = device_a.trip_document(t.id)
    data = canonical_json_bytes(doc)
    from sync.engine import _sha
    from sync.targets import WebDavTarget

    tgt = WebDavTarget(dav.url, dav_session("tablet-A"))
    name = revision_name(doc["revision"], _sha(data))
    first = tgt.write_revision("2026", t.id, name, data, "tablet-A", doc["revision"], _sha(data))
    again = tgt.write_revision("2026", t.id, name, data, "tablet-A", doc["revision"], _sha(data))
    assert first.created and not again.created


def test_pull_brings_every_trip_into_an_office_store(dav, device_a, tmp_path):
    from tests.sync.conftest import open_store

    trips = [new_trip(device_a, day=d, stops=2) for d in (3, 5)]
    sync.push(device_a, dav.url, session=dav_session())
    office = open_store(tmp_path / "office", "office-desk")
    seen = []
    report = sync.pull(
        office, dav.url, session=dav_session(), progress=lambda d, n, tid, r: seen.append((d, n, tid, r))
    )
    assert (report.pulled, report.merged, report.quarantined) == (2, 0, 0)
    for t in trips:
        mine, theirs = device_a.trip_document(t.id), office.trip_document(t.id)
        assert mine["stops"] == theirs["stops"]
    assert [s[0] for s in seen] == [1, 2] and all(s[1] == 2 for s in seen)
    again = sync.pull(office, dav.url, session=dav_session())
    # read from the hub's change log: nothing new, so no trip is even looked at
    assert (again.pulled, again.merged, again.failed, again.listed) == (0, 0, 0, "log")
    whole = sync.pull(office, dav.url, session=dav_session(), full=True)
    assert (whole.pulled, whole.merged, whole.unchanged, whole.listed) == (0, 0, 2, "walk")


# --- the measured traps -------------------------------------------------------------------------
def test_wsgidav_etag_is_weak_and_if_match_put_creates_missing_files(dav):
    """The trap itself, measured: two same-size writes within one second keep the same ETag
    (inode-mtime-size), and an If-Match PUT to a missing file creates it. The design relies on
    neither: revision files are written once, under names that carry their content hash."""
    auth = (DAV_USER, DAV_PASSWORD)
    url = dav.url + "probe.json"
    for _ in range(5):  # bounded: find two writes inside one wall-clock second
        t0 = int(time.time())
        requests.put(url, data=b'{"v":1}', auth=auth, timeout=5)
        etag1 = requests.head(url, auth=auth, timeout=5).headers.get("ETag")
        requests.put(url, data=b'{"v":2}', auth=auth, timeout=5)
        etag2 = requests.head(url, auth=auth, timeout=5).headers.get("ETag")
        if int(time.time()) == t0:
            break
    assert etag1 and etag1 == etag2  # different content, same ETag: If-Match cannot tell
    missing = requests.put(dav.url + "never-there.json", data=b"{}", auth=auth, timeout=5, headers={"If-Match": etag1})
    assert missing.status_code in (201, 204)  # RFC 9110 §13.1.1 says 412; wsgidav creates it
    assert (hub_of(dav) / "never-there.json").exists()


def test_two_same_size_writes_in_one_second_lose_nothing(dav, device_a, device_b, tmp_path):
    """Two devices push different same-size versions of one trip within a second: both stay at
    the hub as separate immutable files, and a pull merges both changes."""
    from tests.sync.conftest import open_store

    t = new_trip(device_a, stops=2)
    sync.push(device_a, dav.url, session=dav_session())
    sync.pull(device_b, dav.url, session=dav_session())
    edit_stop_notes(device_a, t.id, 0, "AAAA")
    edit_stop_notes(device_b, t.id, 1, "BBBB")
    ra = sync.push(device_a, dav.url, session=dav_session())
    rb = sync.push(device_b, dav.url, session=dav_session())
    assert ra.failed == rb.failed == 0
    office = open_store(tmp_path / "office", "office-desk")
    sync.pull(office, dav.url, session=dav_session())
    notes = [s["notes"] for s in office.trip_document(t.id)["stops"]]
    assert notes == ["AAAA", "BBBB"]


def test_redirect_on_write_is_a_configuration_error_and_nothing_is_emptied(tmp_path, device_a):
    """requests re-sends a PUT without its body after a 301; sync refuses every redirect."""
    import threading
    from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

    from tests.sync.conftest import free_port

    bodies = []

    class Redirect(BaseHTTPRequestHandler):
        protocol_version = "HTTP/1.1"

        def log_message(self, *a):
            pass

        def _any(self):
            n = int(self.headers.get("Content-Length", "0") or 0)
            bodies.append((self.command, self.rfile.read(n) if n else b""))
            if self.path.startswith("/elsewhere/"):
                self.send_response(201)
                self.send_header("Content-Length", "0")
                self.end_headers()
                return
            self.send_response(301)
            self.send_header("Location", f"http://127.0.0.1:{self.server.server_port}/elsewhere/x")
            self.send_header("Content-Length", "0")
            self.end_headers()

        do_PUT = do_MKCOL = do_PROPFIND = do_MOVE = do_GET = _any

    port = free_port()
    srv = ThreadingHTTPServer(("127.0.0.1", port), Redirect)
    threading.Thread(target=srv.serve_forever, daemon=True).start()
    try:
        # the trap: plain requests follows the 301 and re-sends the PUT without a body
        requests.put(f"http://127.0.0.1:{port}/x", data=b"field data", timeout=5)
        assert bodies[-1][1] == b"" and bodies[0][1] == b"field data"
        bodies.clear()
        new_trip(device_a)
        try:
            sync.push(device_a, f"http://127.0.0.1:{port}/hub/", session=dav_session())
            raise AssertionError("a redirect must be refused")
        except sync.errors.RedirectRefused as exc:
            assert "redirect" in str(exc) and "301" in str(exc)
        assert len(bodies) == 1  # the redirect was not followed
    finally:
        srv.shutdown()
        srv.server_close()


def test_bodies_go_with_content_length_never_chunked(intake, device_a):
    new_trip(device_a)
    report = sync.push(device_a, intake.url, session=dav_session())
    assert report.pushed == 1
    assert all(status == 201 for _, status in intake.requests)  # the endpoint answers 411 to chunked


def test_a_truncated_hub_file_is_caught_by_its_content_hash(dav, device_a, tmp_path):
    from tests.sync.conftest import open_store

    t = new_trip(device_a)
    sync.push(device_a, dav.url, session=dav_session())
    (f,) = hub_files(hub_of(dav))[t.id]
    f.write_bytes(f.read_bytes()[:-40])  # what an in-place upload cut mid-way leaves
    office = open_store(tmp_path / "office", "office-desk")
    report = sync.pull(office, dav.url, session=dav_session())
    assert report.quarantined == 1 and report.pulled == 0
    assert "content hash" in report.per_trip[0].message
    assert not office.list_trips()
