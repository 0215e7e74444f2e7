"""Each field's role (input, derived, bookkeeping, log) is declared once on the models and every
reader agrees with it: the store's diff, the derive step's reuse check, the merge and sync's
content comparison (common practice: one declaration, many readers)."""

from __future__ import annotations

import copy

from core.records.merge import merge_trips
from core.records.models import (
    BOOKKEEPING,
    DERIVED,
    INPUT,
    LOG,
    Calibration,
    LabResult,
    Stop,
    Trip,
    keys_by_role,
    paths_by_role,
    role_tree,
)
from core.store.audit import diff_paths
from sync.reconcile import BOOKKEEPING_KEYS, same_content
from tests.records.conftest import make_bottle, make_cal, make_stop, make_trip


def test_roles_are_read_from_the_field_declarations():
    assert "stops[].derived" in paths_by_role(DERIVED)
    assert {
        "pre_calibration.target_mg_l",
        "pre_calibration.accepted",
        "pre_calibration.method",
        "post_check.flags",
    } <= set(paths_by_role(DERIVED))
    assert paths_by_role(LOG) == ["audit"]
    assert set(paths_by_role(BOOKKEEPING)) == {"id", "schema_version", "revision", "updated_at", "device_id"}
    # the same key name can have different roles on different records
    assert role_tree(Calibration).role("method") == DERIVED
    assert role_tree(LabResult).role("method") == INPUT
    assert role_tree().child("stops").child("bottles").child("lab_results").model == "LabResult"
    assert keys_by_role(DERIVED, model=Stop) == {"derived", "site_snapshot"}
    # a key no model declares (written by a newer build) is input
    assert role_tree(Stop).role("turbidity_ntu") == INPUT
    # the JSON Schema shows the role
    schema = Trip.model_json_schema()
    assert schema["properties"]["audit"]["role"] == LOG


def test_sync_content_comparison_ignores_exactly_bookkeeping_and_log():
    assert keys_by_role(BOOKKEEPING, LOG) == BOOKKEEPING_KEYS
    doc = make_trip([make_stop()]).to_document()
    other = dict(
        doc,
        revision=7,
        updated_at="2026-06-14T20:00:00Z",
        device_id="dev-x",
        audit=[{"id": "a", "at": "2026-06-14T20:00:00Z", "device_id": "dev-x", "change": "x", "revision": 7}],
    )
    assert same_content(doc, other)
    assert not same_content(doc, dict(doc, notes="changed"))
    assert not same_content(doc, dict(doc, conflicts=[{"id": "c"}]))  # a settlement travels


def test_diff_reports_inputs_only_by_role(store):
    trip = store.save_trip(make_trip([make_stop(bottles=[make_bottle()])], pre_calibration=make_cal()), "x")
    old = store.trip_document(trip.id)
    new = copy.deepcopy(old)
    new["pre_calibration"]["method"] = "other"  # derived on a calibration
    new["stops"][0]["derived"] = None  # derived
    new["revision"] = 99  # bookkeeping
    assert diff_paths(old, new) == []
    new["stops"][0]["bottles"][0]["lab_results"] = [{"id": "r1", "analyte": "do", "method": "Winkler"}]
    lab = copy.deepcopy(new)
    lab["stops"][0]["bottles"][0]["lab_results"][0]["method"] = "Winkler, azide modification"
    stop_id, bottle_id = old["stops"][0]["id"], old["stops"][0]["bottles"][0]["id"]
    assert diff_paths(new, lab) == [f"stops[{stop_id}].bottles[{bottle_id}].lab_results[r1].method"]


def test_merge_never_makes_a_conflict_of_a_derived_field_but_does_of_an_input():
    base = make_trip([make_stop()], pre_calibration=make_cal()).to_document()
    a, b = copy.deepcopy(base), copy.deepcopy(base)
    a["pre_calibration"]["method"], b["pre_calibration"]["method"] = "benson-krause", "garcia-gordon"
    a["updated_at"], b["updated_at"] = "2026-06-14T10:00:00Z", "2026-06-14T11:00:00Z"
    assert merge_trips(base, a, b).new_conflicts == []
    a["notes"], b["notes"] = "riffle", "pool"
    found = merge_trips(base, a, b).new_conflicts
    assert [c["path"] for c in found] == ["notes"]
