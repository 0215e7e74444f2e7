"""Device store: the one save path, audit, revisions, put_document, unknown fields, schema versions,
migration, quarantine, index repair, TinyDB layout, sites and settings."""

from __future__ import annotations

import json
import os

import pytest
from tinydb import TinyDB

from core.records.migrations import migrate
from core.records.models import SCHEMA_VERSION, ProgramSettings, Site, Trip, measure
from core.store import (
    AtomicJSONStorage,
    CorruptFile,
    DeviceStore,
    InvalidRecord,
    NewerSchemaError,
    StaleTrip,
    TripNotFound,
)
from core.store.atomic import content_hash
from tests.records.conftest import FakeClock, make_bottle, make_stop, make_trip


def test_save_and_load_round_trip(store):
    trip = store.save_trip(make_trip([make_stop()]), "new trip")
    assert trip.revision == 1
    again = store.load_trip(trip.id)
    assert again == trip
    assert again.stops[0].temp.text == "18.5"


def test_save_derives_with_method_and_core_version(store):
    trip = store.save_trip(make_trip([make_stop(temp="20", pressure="1013.25 hPa", cond=None, do="9.092")]), "x")
    d = trip.stops[0].derived
    # Benson & Krause (1984) check value: 20 °C, S = 0, 1 atm → 9.092 mg/L
    assert d.do_sat_mg_l == pytest.approx(9.092, abs=0.002)
    assert d.percent_saturation == pytest.approx(100.0, abs=0.05)
    assert d.method == "benson-krause" and d.core_version and d.salinity_source == "default"


def test_derive_recomputed_when_inputs_change(store):
    trip = store.save_trip(make_trip([make_stop(temp="20", pressure="1013.25 hPa", cond=None)]), "x")
    stop = trip.stops[0].model_copy(update={"temp": measure("temp", "10")})
    trip = store.save_stop(trip.id, stop)
    # Benson & Krause (1984): 10 °C, S = 0, 1 atm → 11.288 mg/L
    assert trip.stops[0].derived.do_sat_mg_l == pytest.approx(11.288, abs=0.002)


def test_derive_follows_settings_method(store):
    trip = store.save_trip(make_trip([make_stop(temp="20", pressure="1013.25 hPa", cond=None)]), "x")
    store.save_settings(ProgramSettings(method="garcia-gordon"))
    trip = store.save_trip(trip.model_copy(update={"notes": "method changed"}), "notes")
    assert trip.stops[0].derived.method == "garcia-gordon"


def test_each_change_appends_audit_and_bumps_revision(store):
    trip = store.save_trip(make_trip([make_stop()]), "new trip")
    stop = trip.stops[0].model_copy(update={"notes": "riffle"})
    trip = store.save_stop(trip.id, stop, "notes at LK-01")
    assert trip.revision == 2
    assert [a.change for a in trip.audit] == ["new trip", "notes at LK-01"]
    last = trip.audit[-1]
    assert last.device_id == "dev-test-a" and last.revision == 2
    assert last.fields == [f"stops[{stop.id}].notes"]
    assert trip.updated_at == last.at


def test_unchanged_save_writes_nothing(store):
    trip = store.save_trip(make_trip([make_stop()]), "new trip")
    path = store.data_dir / "trips" / f"{trip.id}.json"
    before = path.read_bytes(), path.stat().st_ino
    again = store.save_trip(trip, "nothing changed")
    assert again.revision == 1 and len(again.audit) == 1
    assert (path.read_bytes(), path.stat().st_ino) == before


def test_stale_copy_refused(store):
    first = store.save_trip(make_trip([make_stop()]), "new")
    store.save_trip(first.model_copy(update={"notes": "a"}), "a")
    with pytest.raises(StaleTrip):
        store.save_trip(first.model_copy(update={"notes": "b"}), "b")
    assert store.load_trip(first.id).notes == "a"


def test_invalid_assignment_caught_on_save(store):
    trip = store.save_trip(make_trip([make_stop()]), "new")
    trip.stops[0].temp.value = float("nan")  # bypasses construction-time validation
    with pytest.raises(InvalidRecord) as info:
        store.save_trip(trip, "bad")
    assert "Water temperature" in str(info.value)
    assert store.load_trip(trip.id).stops[0].temp.value == 18.5


def test_put_document_same_path_and_noop_when_equal(store):
    trip = store.save_trip(make_trip([make_stop()]), "new")
    doc = store.trip_document(trip.id)
    same = store.put_document(json.loads(json.dumps(doc)), "pulled", expected_revision=1)
    assert same.revision == 1 and len(same.audit) == 1
    doc["notes"] = "from the hub"
    doc["revision"] = 7
    changed = store.put_document(doc, "pulled from hub", expected_revision=1)
    assert changed.revision == 8 and changed.audit[-1].change == "pulled from hub"
    assert changed.audit[-1].fields == ["notes"]


def test_put_document_rederives_foreign_values(store):
    trip = store.save_trip(make_trip([make_stop(temp="20", pressure="1013.25 hPa", cond=None)]), "new")
    doc = store.trip_document(trip.id)
    doc["stops"][0]["derived"]["do_sat_mg_l"] = 1.0  # a foreign device's wrong value
    doc["stops"][0]["derived"]["basis"] = "forged"
    doc["notes"] = "x"
    got = store.put_document(doc, "import", expected_revision=1)
    assert got.stops[0].derived.do_sat_mg_l == pytest.approx(9.092, abs=0.002)  # Benson & Krause (1984)


def test_put_document_invalid_writes_nothing(store):
    doc = make_trip([make_stop()]).to_document()
    doc["stops"][0]["arrived_at"] = "2026-06-14T09:00:00"  # no zone
    with pytest.raises(InvalidRecord) as info:
        store.put_document(doc, "import", expected_revision=None)
    assert info.value.problems[0].code == "time.naive"
    assert store.list_trips() == []
    assert not list((store.data_dir / "trips").iterdir())


def test_unknown_fields_of_newer_build_survive_an_edit(store):
    doc = make_trip([make_stop()]).to_document()
    doc["tide_gauge"] = {"kept": True}
    doc["stops"][0]["turbidity_ntu"] = 4.2
    trip = store.put_document(doc, "from a newer build", expected_revision=None)
    edited = store.save_trip(trip.model_copy(update={"notes": "edited here"}), "edit")
    stored = store.trip_document(edited.id)
    assert stored["tide_gauge"] == {"kept": True}
    assert stored["stops"][0]["turbidity_ntu"] == 4.2


def test_newer_schema_refused_and_left_untouched(store):
    doc = make_trip([make_stop()]).to_document()
    with pytest.raises(NewerSchemaError) as info:
        store.put_document(dict(doc, schema_version=SCHEMA_VERSION + 1), "import", expected_revision=None)
    assert "newer streamtab" in str(info.value)
    # A newer file already on the device: load refuses, save refuses, bytes unchanged.
    newer = dict(doc, schema_version=SCHEMA_VERSION + 1, revision=3)
    path = store.data_dir / "trips" / f"{doc['id']}.json"
    AtomicJSONStorage(path).write({"trip": {"1": newer}})
    before = path.read_bytes()
    with pytest.raises(NewerSchemaError):
        store.load_trip(doc["id"])
    with pytest.raises(NewerSchemaError):
        store.save_trip(Trip.from_document(dict(doc, revision=3)), "edit")
    assert path.read_bytes() == before
    assert store.quarantined() == []


V1_DOC = {
    "schema_version": 1,
    "id": "0c0ffee0-0000-4000-8000-000000000001",
    "program": "Tamsin Valley Stream Watch",
    "crew": "R.O., J.V.",
    "started_at": "2026-05-02T08:00:00-07:00",
    "stops": [
        {
            "id": "0c0ffee0-0000-4000-8000-0000000000a1",
            "site": "LK-01",
            "time": "2026-05-02T08:30:00-07:00",
            "temp_c": 20.0,
            "pressure_hpa": 1013.25,
            "do_mg_l": 8.5,
            "bottles": [{"bottle_id": "TV-0100", "kind": "bod", "collected_at": "2026-05-02T08:35:00-07:00"}],
        }
    ],
    "audit": [{"at": "2026-05-02T08:31:00-07:00", "device": "tablet-old", "what": "stop saved"}],
}


def test_migration_from_version_1():
    doc = migrate(json.loads(json.dumps(V1_DOC)))
    assert doc["schema_version"] == SCHEMA_VERSION
    trip = Trip.from_document(doc)
    assert trip.crew == ["R.O.", "J.V."]
    stop = trip.stops[0]
    assert stop.site_id == "LK-01" and stop.temp.value == 20.0 and stop.temp.unit == "°C"
    assert stop.bottles[0].label == "TV-0100" and stop.bottles[0].id
    assert trip.audit[0].device_id == "tablet-old" and trip.audit[0].change == "stop saved"
    # Two devices migrating the same document agree on the new ids (sync merges by id).
    again = Trip.from_document(migrate(json.loads(json.dumps(V1_DOC))))
    assert again.stops[0].bottles[0].id == stop.bottles[0].id and again.audit[0].id == trip.audit[0].id


def test_migration_does_not_change_input_and_store_migrates_on_load(store):
    original = json.loads(json.dumps(V1_DOC))
    migrate(original)
    assert original == V1_DOC
    path = store.data_dir / "trips" / f"{V1_DOC['id']}.json"
    AtomicJSONStorage(path).write({"trip": {"1": V1_DOC}})
    trip = store.load_trip(V1_DOC["id"])
    assert trip.schema_version == SCHEMA_VERSION and trip.stops[0].do.value == 8.5
    saved = store.save_trip(trip.model_copy(update={"notes": "upgraded"}), "edit")
    assert store.trip_document(saved.id)["schema_version"] == SCHEMA_VERSION
    assert saved.stops[0].derived is not None


def test_unknown_schema_version_refused():
    with pytest.raises(InvalidRecord):
        migrate({"id": "x"})
    with pytest.raises(InvalidRecord):
        migrate({"id": "x", "schema_version": 0})


def test_corrupt_trip_file_quarantined_rest_keeps_working(store):
    good = store.save_trip(make_trip([make_stop()]), "good")
    bad = store.save_trip(make_trip([make_stop()]), "soon bad")
    path = store.data_dir / "trips" / f"{bad.id}.json"
    path.write_bytes(b'{"trip": {"1": {"id": "')  # torn by some other tool
    with pytest.raises(CorruptFile) as info:
        store.load_trip(bad.id)
    assert path.name in str(info.value) and "quarantine" in str(info.value)
    moved = store.quarantined()
    assert len(moved) == 1 and moved[0].name.startswith(path.name)
    assert moved[0].read_bytes() == b'{"trip": {"1": {"id": "'  # kept as it was, not overwritten
    assert [s.id for s in store.list_trips()] == [good.id]
    assert store.load_trip(good.id) == good
    # The same trip id can be saved afresh; the quarantined copy stays.
    store.put_document(make_trip([make_stop()], id=bad.id).to_document(), "re-import", expected_revision=None)
    assert moved[0].exists()


def test_verify_quarantines_invalid_document(store):
    trip = store.save_trip(make_trip([make_stop()]), "x")
    doc = store.trip_document(trip.id)
    doc["stops"][0]["temp"]["value"] = "warm"
    AtomicJSONStorage(store.data_dir / "trips" / f"{trip.id}.json").write({"trip": {"1": doc}})
    moved = store.verify()
    assert len(moved) == 1 and store.list_trips() == []


def test_reopen_cleans_temp_files_and_repairs_index(store):
    trip = store.save_trip(make_trip([make_stop()]), "x")
    (store.data_dir / "trips" / f".{trip.id}.json.abc.tmp").write_bytes(b"half")
    (store.data_dir / "index" / f"{trip.id}.json").unlink()  # as if killed between the two writes
    reopened = DeviceStore.open(store.data_dir)
    assert reopened.device_id == "dev-test-a"
    assert [s.id for s in reopened.list_trips()] == [trip.id]
    assert not list((store.data_dir / "trips").glob(".*.tmp"))


def test_stale_index_entry_rebuilt_on_open(store):
    trip = store.save_trip(make_trip([make_stop()]), "x")
    ipath = store.data_dir / "index" / f"{trip.id}.json"
    old = ipath.read_bytes()
    trip = store.save_trip(trip.model_copy(update={"notes": "n"}), "y")
    ipath.write_bytes(old)
    os.utime(ipath, ns=(1, 1))  # older than the trip file
    summary = DeviceStore.open(store.data_dir).list_trips()[0]
    assert summary.revision == 2


def test_summary_matches_document(store):
    trip = store.save_trip(make_trip([make_stop(bottles=[make_bottle("TV-9")])]), "x")
    s = store.list_trips()[0]
    doc = store.trip_document(trip.id)
    assert s.content_hash == content_hash(doc)
    assert (s.id, s.revision, s.stop_count, s.status, s.bottle_labels) == (trip.id, 1, 1, "in progress", ["TV-9"])
    assert store.bottle_labels_in_use() == {"TV-9": trip.id}


def test_trip_file_is_a_tinydb_file(store):
    trip = store.save_trip(make_trip([make_stop()]), "x")
    db = TinyDB(store.data_dir / "trips" / f"{trip.id}.json", storage=AtomicJSONStorage)
    assert db.table("trip").get(doc_id=1) == store.trip_document(trip.id)


def test_trip_document_is_a_private_copy(store):
    trip = store.save_trip(make_trip([make_stop()]), "x")
    doc = store.trip_document(trip.id)
    doc["notes"] = "changed by a caller"
    assert store.trip_document(trip.id)["notes"] == ""


def test_unknown_trip(store):
    with pytest.raises(TripNotFound):
        store.load_trip("0c0ffee0-0000-4000-8000-00000000dead")
    with pytest.raises(TripNotFound):
        store.load_trip("../etc/passwd")


def test_sites_and_settings_round_trip(store):
    assert [s.id for s in store.sites()] == ["LK-01", "LK-03", "LK-05"]
    store.save_site(Site(id="LK-01", name="Mill Ford (renamed)", elevation_m=212.0))
    assert store.sites_by_id()["LK-01"].name == "Mill Ford (renamed)" and len(store.sites()) == 3
    s = store.save_settings(ProgramSettings(program="Tamsin Valley Stream Watch", calibration_tolerance_mg_l=0.3))
    assert DeviceStore.open(store.data_dir).settings() == s


def test_corrupt_sites_file_quarantined(store):
    (store.data_dir / "sites.json").write_bytes(b"\x00\x01not json")
    assert store.sites() == []
    assert any(p.name.startswith("sites.json") for p in store.quarantined())


def test_device_id_remembered(tmp_path):
    a = DeviceStore.open(tmp_path / "d")
    b = DeviceStore.open(tmp_path / "d")
    assert a.device_id == b.device_id and a.device_id.startswith("dev-")


def test_location_from_environment(tmp_path, monkeypatch):
    monkeypatch.setenv("STREAMTAB_DATA", str(tmp_path / "env-store"))
    s = DeviceStore.open(None)
    assert s.data_dir == tmp_path / "env-store" and (tmp_path / "env-store" / "trips").is_dir()


def test_audit_times_from_clock(tmp_path):
    clock = FakeClock()
    s = DeviceStore.open(tmp_path / "c", device_id="dev-c", clock=clock)
    trip = s.save_trip(make_trip(), "x")
    assert trip.audit[0].at == clock.now


def test_audit_is_append_only_across_put_document(store):
    trip = store.save_trip(make_trip([make_stop()]), "new")
    old_doc = store.trip_document(trip.id)
    trip = store.save_trip(trip.model_copy(update={"notes": "local edit"}), "local edit")
    old_doc["meter_id"] = "DO-METER-09"  # a copy made before the local edit
    with pytest.raises(StaleTrip):  # based on revision 1, the store holds 2: refused
        store.put_document(old_doc, "pulled", expected_revision=1)
    merged = store.put_document(old_doc, "replaced", expected_revision=2)
    assert [a.change for a in merged.audit] == ["new", "local edit", "replaced"]
    # The same copy again: nothing new, nothing written.
    again = store.put_document(old_doc, "replaced again", expected_revision=merged.revision)
    assert again.revision == merged.revision


def test_save_stop_adds_and_replaces_by_id(store):
    trip = store.save_trip(make_trip(), "new")
    stop = make_stop()
    trip = store.save_stop(trip.id, stop)
    trip = store.save_stop(trip.id, stop.model_copy(update={"notes": "second look"}))
    assert len(trip.stops) == 1 and trip.stops[0].notes == "second look" and trip.revision == 3


def test_index_entry_checked_against_trip_file(store):
    trip = store.save_trip(make_trip([make_stop()]), "x")
    ipath = store.data_dir / "index" / f"{trip.id}.json"
    ipath.write_bytes(b"garbage")
    assert store.list_trips()[0].revision == 1  # rebuilt from the trip file
    # Another program replaces the trip file (a new version): the summary follows.
    doc = store.trip_document(trip.id)
    doc["revision"] = 5
    AtomicJSONStorage(store.data_dir / "trips" / f"{trip.id}.json").write({"trip": {"1": doc}})
    assert store.list_trips()[0].revision == 5
    assert json.loads(ipath.read_bytes())["summary"]["revision"] == 5


def test_conflicts_make_the_trip_need_attention(store):
    trip = store.save_trip(make_trip([make_stop()]), "x")
    doc = store.trip_document(trip.id)
    doc["conflicts"] = [
        {
            "id": "c0ffee00-0000-4000-8000-000000000001",
            "path": f"stops[{trip.stops[0].id}].notes",
            "detected_at": "2026-06-14T18:00:00Z",
            "sides": [{"device_id": "dev-test-a", "value": "riffle"}, {"device_id": "dev-b", "value": "pool"}],
        }
    ]
    merged = store.put_document(doc, "merged with the hub", expected_revision=doc["revision"])
    assert merged.status == "needs attention"
    s = store.list_trips()[0]
    assert s.status == "needs attention" and s.open_conflicts == 1


def test_write_failure_leaves_stored_trip_and_says_so(store, monkeypatch):
    import core.store.storage as cs
    from core.store import StoreWriteError

    trip = store.save_trip(make_trip([make_stop()]), "x")
    before = store.trip_document(trip.id)

    def full(path, data):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(cs, "atomic_write_bytes", full)
    with pytest.raises(StoreWriteError) as info:
        store.save_trip(trip.model_copy(update={"notes": "will not fit"}), "y")
    assert "No space left on device" in str(info.value) and "unchanged" in str(info.value)
    monkeypatch.undo()
    assert DeviceStore.open(store.data_dir).trip_document(trip.id) == before


def test_settings_out_of_range_refused_with_label():
    from pydantic import ValidationError

    from core.records.messages import problems_from_validation

    with pytest.raises(ValidationError) as info:
        ProgramSettings(supersaturation_percent=90.0)
    p = problems_from_validation(info.value)[0]
    assert p.code == "number.too_small" and p.message.startswith("Supersaturation threshold: 90")


def test_in_memory_store_same_save_path_and_removed_on_close():
    s = DeviceStore.in_memory()
    root = s.data_dir
    trip = s.save_trip(make_trip([make_stop(temp="20", pressure="1013.25 hPa", cond=None)]), "x")
    assert s.load_trip(trip.id).stops[0].derived.do_sat_mg_l == pytest.approx(
        9.092, abs=0.002
    )  # Benson & Krause (1984)
    assert (root / "trips" / f"{trip.id}.json").exists()
    s.close()
    assert not root.exists()


def test_quarantine_spares_a_file_replaced_meanwhile(store):
    # A reader found bytes it could not parse, but a writer replaced the file before the reader
    # took the lock: the good file must stay where it is.
    trip = store.save_trip(make_trip([make_stop()]), "x")
    path = store.data_dir / "trips" / f"{trip.id}.json"
    assert store._corrupt(path, "seen torn", seen=b'{"trip": {"1"') is None
    assert path.exists() and store.quarantined() == []
    assert store.load_trip(trip.id) == trip


def test_malformed_old_document_refused_clearly(store):
    from core.store import InvalidRecord

    bad = dict(json.loads(json.dumps(V1_DOC)), stops=["not a stop"])
    with pytest.raises(InvalidRecord) as info:
        store.put_document(bad, "import", expected_revision=None)
    assert "schema version 1" in str(info.value) and "\n" not in str(info.value)


def test_save_stop_keeps_unknown_fields_of_the_stored_stop(store):
    doc = make_trip([make_stop()]).to_document()
    doc["stops"][0]["turbidity_ntu"] = 4.2  # written by a newer build
    trip = store.put_document(doc, "from a newer build", expected_revision=None)
    fresh_form = make_stop(id=trip.stops[0].id, temp="12.0")  # a form that never saw the field
    saved = store.save_stop(trip.id, fresh_form)
    assert store.trip_document(saved.id)["stops"][0]["turbidity_ntu"] == 4.2
    assert saved.stops[0].temp.value == 12.0
