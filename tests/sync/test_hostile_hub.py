"""One odd item at the hub never stops a pull (issue 9): a hostile WebDAV server on 127.0.0.1 lists
junk names, a year folder that is not four digits, an upper-case trip folder, a file that is gone
before its GET, a document nested a thousand levels deep and a file it drips a byte at a time;
the same odd items in a folder hub. Each is skipped or quarantined with a report; the good trip
arrives; nothing ends in a traceback."""

from __future__ import annotations

import hashlib
import json
import os
import threading
import time
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from urllib.parse import quote, unquote, urlsplit

import pytest

import sync
from core.store.atomic import canonical_json_bytes
from sync.layout import revision_name
from sync.session import RetryPolicy, Session
from tests.conftest import run_cli
from tests.sync.conftest import free_port, new_trip, open_store

GHOST_ID = "5e0f6a1b-2c3d-4e5f-8a9b-0c1d2e3f4a5b"
DEEP_ID = "6a7b8c9d-0e1f-4a2b-9c3d-4e5f6a7b8c9d"
DRIP_ID = "7b8c9d0e-1f2a-4b3c-8d4e-5f6a7b8c9d0e"
ODD_YEAR_ID = "8c9d0e1f-2a3b-4c4d-9e5f-6a7b8c9d0e1f"
UPPER_ID = "9D0E1F2A-3B4C-4D5E-8F6A-7B8C9D0E1F2A"


def name_for(revision: int, data: bytes) -> str:
    return revision_name(revision, "sha256:" + hashlib.sha256(data).hexdigest())


def deep_document(trip_id: str, like: dict) -> bytes:
    text = json.dumps(dict(like, id=trip_id, revision=1, audit=[]), sort_keys=True)
    return (text[:-1] + ', "zz": ' + "[" * 1000 + "]" * 1000 + "}\n").encode()


class HostileHub:
    """A WebDAV-speaking server that lists what it is told to (any hrefs, any names), serves
    `files`, answers 404 for `ghosts` and drips `drips` one byte every 0.2 s."""

    def __init__(self) -> None:
        self.files: dict[str, bytes] = {}
        self.extra: list[tuple[str, bool]] = []  # raw hrefs (already quoted) and is-folder
        self.ghosts: set[str] = set()
        self.drips: set[str] = set()
        self.gets: list[str] = []
        hub = self

        class Handler(BaseHTTPRequestHandler):
            protocol_version = "HTTP/1.1"

            def log_message(self, *args):  # quiet
                pass

            def _send(self, code: int, body: bytes, ctype: str = "application/xml; charset=utf-8") -> None:
                self.send_response(code)
                self.send_header("Content-Type", ctype)
                self.send_header("Content-Length", str(len(body)))
                self.end_headers()
                self.wfile.write(body)

            def do_PROPFIND(self):  # noqa: N802
                self.rfile.read(int(self.headers.get("Content-Length", "0")))
                self._send(207, hub.listing())

            def do_GET(self):  # noqa: N802
                rel = unquote(urlsplit(self.path).path)[len("/hub/") :]
                hub.gets.append(rel)
                if rel in hub.ghosts or rel not in hub.files:
                    return self._send(404, b"", "text/plain")
                data = hub.files[rel]
                if rel in hub.drips:
                    self.send_response(200)
                    self.send_header("Content-Length", str(len(data)))
                    self.end_headers()
                    for i in range(min(len(data), 200)):  # bounded: 40 s at most
                        try:
                            self.wfile.write(data[i : i + 1])
                            self.wfile.flush()
                        except OSError:
                            return
                        time.sleep(0.2)
                    return
                self._send(200, data, "application/json")

        self.port = free_port()
        self.server = ThreadingHTTPServer(("127.0.0.1", self.port), Handler)
        self.server.daemon_threads = True
        threading.Thread(target=self.server.serve_forever, daemon=True).start()

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}/hub/"

    def listing(self) -> bytes:
        rows = []

        def row(href: str, folder: bool, size: int | None) -> None:
            rtype = "<D:collection/>" if folder else ""
            length = f"<D:getcontentlength>{size}</D:getcontentlength>" if size is not None else ""
            rows.append(
                f"<D:response><D:href>{href}</D:href><D:propstat><D:prop><D:resourcetype>{rtype}"
                f"</D:resourcetype>{length}</D:prop><D:status>HTTP/1.1 200 OK</D:status>"
                f"</D:propstat></D:response>"
            )

        folders = set()
        for rel in self.files:
            parts = rel.split("/")
            for i in range(1, len(parts)):
                folders.add("/".join(parts[:i]) + "/")
        for f in sorted(folders):
            row("/hub/" + quote(f), True, None)
        for rel, data in sorted(self.files.items()):
            row("/hub/" + quote(rel), False, len(data))
        for href, folder in self.extra:
            row(href, folder, 10)
        return (
            '<?xml version="1.0" encoding="utf-8"?><D:multistatus xmlns:D="DAV:">' + "".join(rows) + "</D:multistatus>"
        ).encode()

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def hostile():
    hub = HostileHub()
    yield hub
    hub.close()


def quick_session(device_id: str) -> Session:
    return Session(
        device_id,
        connect_timeout_s=1.0,
        read_timeout_s=1.0,
        retry=RetryPolicy(attempts=2, backoff_s=0.01, max_backoff_s=0.02),
    )


def plant_everything(put, device_a):  # noqa: ANN001 - put(relpath, bytes)
    good = new_trip(device_a)
    doc = device_a.trip_document(good.id)
    data = canonical_json_bytes(doc)
    put(f"trips/2026/{good.id}/{name_for(doc['revision'], data)}", data)
    odd = canonical_json_bytes(dict(doc, id=ODD_YEAR_ID, revision=1, audit=[]))
    put(f"trips/20x6/{ODD_YEAR_ID}/{name_for(1, odd)}", odd)
    upper = canonical_json_bytes(dict(doc, id=UPPER_ID.lower(), revision=1, audit=[]))
    put(f"trips/2026/{UPPER_ID}/{name_for(1, upper)}", upper)
    put(f"trips/2026/{good.id}/notes.txt", b"crew notes")
    put(f"trips/2026/{good.id}/r000001-zz.json", b"{}")
    deep = deep_document(DEEP_ID, doc)
    put(f"trips/2026/{DEEP_ID}/{name_for(1, deep)}", deep)
    return good


def test_hostile_webdav_hub_odd_items_are_reported_and_the_good_trip_arrives(hostile, device_a, tmp_path):
    good = plant_everything(hostile.files.__setitem__, device_a)
    ghost = canonical_json_bytes(dict(device_a.trip_document(good.id), id=GHOST_ID, revision=1, audit=[]))
    ghost_rel = f"trips/2026/{GHOST_ID}/{name_for(1, ghost)}"
    hostile.files[ghost_rel] = ghost
    hostile.ghosts.add(ghost_rel)
    drip = canonical_json_bytes(dict(device_a.trip_document(good.id), id=DRIP_ID, revision=1, audit=[]))
    drip_rel = f"trips/2026/{DRIP_ID}/{name_for(1, drip)}"
    hostile.files[drip_rel] = drip
    hostile.drips.add(drip_rel)
    hostile.extra += [
        ("/hub/trips/2026/%0A%1Bjunk%2Fname/", True),  # control characters, a slash
        ("/hub/trips/../../etc/passwd", False),  # climbing out
        ("/elsewhere/trips/2026/x.json", False),  # outside the hub
        ("/hub/trips/2026/" + "n" * 300, True),  # a very long name
        ("/hub/trips/%FF%FE/", True),
    ]  # not UTF-8
    office = open_store(tmp_path / "office", "office-desk")
    started = time.monotonic()
    report = sync.pull(office, hostile.url, session=quick_session("office-desk"))
    took = time.monotonic() - started
    by_trip = {t.trip_id: t for t in report.per_trip}
    # the good trip arrives
    assert by_trip[good.id].result == "pulled"
    assert office.trip_document(good.id)["stops"] == device_a.trip_document(good.id)["stops"]
    # each odd entry is one report line; nothing under it is read
    skipped = "\n".join(report.skipped)
    assert "trips/20x6/ skipped: not a year folder" in skipped
    assert f"{UPPER_ID}/ skipped: a trip folder whose name is not in sync's lower-case form" in skipped
    assert "notes.txt skipped: not a revision file" in skipped
    assert "r000001-zz.json skipped" in skipped
    assert "?" in skipped and "…" in skipped  # shown safely, shortened
    assert ODD_YEAR_ID not in by_trip and UPPER_ID.lower() not in by_trip
    assert not any(g.startswith("trips/20x6") or UPPER_ID in g for g in hostile.gets)
    # the deep document is quarantined (no RecursionError), the ghost skipped, the drip cut off
    assert by_trip[DEEP_ID].result == "quarantined" and "nested more than 64" in by_trip[DEEP_ID].message
    assert "gone" in by_trip[GHOST_ID].message and not by_trip[GHOST_ID].retry
    assert by_trip[DRIP_ID].result == "failed" and by_trip[DRIP_ID].retry
    assert took < 20, took  # the drip alone would take 40 s per try
    assert not report.complete


def test_hostile_hub_through_the_cli_reports_and_never_a_traceback(hostile, device_a, tmp_path):
    good = plant_everything(hostile.files.__setitem__, device_a)
    out = run_cli("sync", "pull", "--from", hostile.url, "--timeout", "2", data_dir=tmp_path / "office")
    assert "Traceback" not in out.stderr + out.stdout
    assert out.returncode == 1  # the deep file is re-checked next time
    assert "hub entry trips/20x6/ skipped" in out.stdout and DEEP_ID in out.stdout
    listed = run_cli("trip", "list", "--json", data_dir=tmp_path / "office")
    assert [t["id"] for t in json.loads(listed.stdout)] == [good.id]


def test_folder_hub_odd_items_are_reported_and_the_good_trip_arrives(device_a, tmp_path):
    hub = tmp_path / "hub"

    def put(rel: str, data: bytes) -> None:
        path = hub / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(data)

    good = plant_everything(put, device_a)
    (hub / "trips" / "README.txt").write_text("office notes")
    ghost_dir = hub / "trips" / "2026" / GHOST_ID
    ghost_dir.mkdir(parents=True)
    os.symlink(tmp_path / "nowhere.json", ghost_dir / name_for(1, b"{}"))  # listed, gone on reading
    office = open_store(tmp_path / "office", "office-desk")
    report = sync.pull(office, str(hub))
    by_trip = {t.trip_id: t for t in report.per_trip}
    assert by_trip[good.id].result == "pulled"
    skipped = "\n".join(report.skipped)
    assert "trips/20x6/ skipped" in skipped and "README.txt skipped" in skipped
    assert f"{UPPER_ID}/ skipped" in skipped and "notes.txt skipped" in skipped
    assert by_trip[DEEP_ID].result == "quarantined" and "nested" in by_trip[DEEP_ID].message
    assert "gone" in by_trip[GHOST_ID].message
    assert {s.id for s in office.list_trips()} == {good.id}


def test_hidden_files_a_file_manager_leaves_in_a_folder_hub_are_passed_over_quietly(device_a, tmp_path):
    hub = tmp_path / "hub"
    hub.mkdir()
    good = new_trip(device_a)
    assert sync.push(device_a, str(hub)).pushed == 1
    trip_dir = next((hub / "trips").glob("*/*"))
    for hidden in (
        hub / "trips" / ".DS_Store",
        trip_dir.parent / ".DS_Store",
        trip_dir / ".DS_Store",
        trip_dir / ("._" + next(trip_dir.iterdir()).name),
    ):
        hidden.write_bytes(b"\x00\x05\x16\x07 file manager notes")
    (hub / "trips" / ".Trash" / "2026").mkdir(parents=True)
    (hub / "trips" / "README.txt").write_text("office notes")  # not hidden: still reported
    office = open_store(tmp_path / "office", "office-desk")
    report = sync.pull(office, str(hub))
    assert {t.trip_id: t.result for t in report.per_trip} == {good.id: "pulled"}
    assert report.skipped == ["trips/README.txt skipped: not a year folder (four digits or 'undated')"]
