"""Every document read from a hub is checked before it touches the store; a bad one is
quarantined with a report and the rest of the pull goes on (issue 5, section 2)."""

import hashlib

import sync
from core.store.atomic import canonical_json_bytes
from sync.layout import revision_name
from tests.sync.conftest import dav_session, hub_files, new_trip, open_store


def plant(hub_root, trip_id, revision, data: bytes, year="2026"):
    """Writes a file at the hub under a name that matches its bytes (so only content checks catch it)."""
    name = revision_name(revision, "sha256:" + hashlib.sha256(data).hexdigest())
    folder = hub_root / "trips" / year / trip_id
    folder.mkdir(parents=True, exist_ok=True)
    (folder / name).write_bytes(data)
    return name


BAD_ID = "7d3c9a52-1b0e-4f43-8a11-2f6b0c5e9d10"
BIG_ID = "0b6f5e8e-3a7d-4c2b-9e61-5d4f3a2b1c00"
WRONG_ID = "a1f2e3d4-c5b6-4a79-8877-665544332211"
INVALID_ID = "c0ffee00-1234-4abc-8def-0123456789ab"


def test_malformed_oversized_and_invalid_documents_are_quarantined_and_the_pull_goes_on(dav, device_a, tmp_path):
    good = [new_trip(device_a, day=d) for d in (3, 4)]
    sync.push(device_a, dav.url, session=dav_session())
    hub = dav.root / "hub"
    plant(hub, BAD_ID, 1, b'{"id": "7d3c9a52-1b0e-4f43-8a11-2f6b0c5e9d10", "revision": 1, "stops": [')
    big = dict(
        device_a.trip_document(good[0].id),
        id=BIG_ID,
        revision=1,
        notes="x" * 3000,
        audit=[],
        extra_padding="y" * 200_000,
    )
    plant(hub, BIG_ID, 1, canonical_json_bytes(big))
    wrong = dict(device_a.trip_document(good[0].id), revision=1)  # another trip's id inside
    plant(hub, WRONG_ID, 1, canonical_json_bytes(wrong))
    invalid = dict(
        device_a.trip_document(good[0].id), id=INVALID_ID, revision=1, audit=[], started_at="yesterday"
    )  # fails the store's validation
    plant(hub, INVALID_ID, 1, canonical_json_bytes(invalid))

    office = open_store(tmp_path / "office", "office-desk")
    session = dav_session("office-desk", max_document_bytes=100_000)
    report = sync.pull(office, dav.url, session=session)
    by_trip = {t.trip_id: t for t in report.per_trip}
    assert report.pulled == 2 and report.quarantined == 4
    assert {t.id for t in good} <= {s.id for s in office.list_trips()}
    assert not ({BAD_ID, BIG_ID, WRONG_ID, INVALID_ID} & {s.id for s in office.list_trips()})
    assert "not valid JSON" in by_trip[BAD_ID].message
    assert "larger than" in by_trip[BIG_ID].message
    assert "carries id" in by_trip[WRONG_ID].message
    assert "store refused" in by_trip[INVALID_ID].message
    qdir = office.data_dir / "sync" / "quarantine"
    reports = sorted(qdir.glob("*.report.txt"))
    assert len(reports) == 4 and all("reason:" in p.read_text() for p in reports)
    assert not report.complete  # the hub holds trips the office did not get: not exit 0
    # a second pull checks the same files again (never blacklisted) and reports them again,
    # without piling up copies; the hub was not touched
    again = sync.pull(office, dav.url, session=session)
    assert again.quarantined == 4 and again.pulled == 0 and not again.complete
    assert all("re-checked on the next sync" in t.message for t in again.per_trip if t.result == "quarantined")
    assert len(sorted(qdir.glob("*.report.txt"))) == 4
    assert len(hub_files(hub)) == 6


def test_hub_document_whose_name_lies_about_its_revision_is_refused(dav, device_a, tmp_path):
    t = new_trip(device_a)
    doc = dict(device_a.trip_document(t.id))
    doc["revision"] = 9
    data = canonical_json_bytes(doc)
    name = revision_name(3, "sha256:" + hashlib.sha256(data).hexdigest())
    folder = dav.root / "hub" / "trips" / "2026" / t.id
    folder.mkdir(parents=True)
    (folder / name).write_bytes(data)
    office = open_store(tmp_path / "office", "office-desk")
    report = sync.pull(office, dav.url, session=dav_session())
    assert report.quarantined == 1 and "revision" in report.per_trip[0].message
