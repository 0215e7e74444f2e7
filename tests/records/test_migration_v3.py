"""Schema version 3: a lab result's findings, superseding and state are typed fields (they lived in
the free `inputs` dict in version 2), a duplicate bottle names what it duplicates; documents of
versions 1 and 2 are lifted on read, the original left unchanged (common practice: versioned
document migrations, one step per version)."""

from __future__ import annotations

import copy
import json

from core.records.migrations import migrate
from core.records.models import SCHEMA_VERSION, Trip
from core.rules.lab import current_result, duplicate_checks
from tests.conftest import ROOT
from tests.records.test_store import V1_DOC

TRIP = "0c0ffee0-0000-4000-8000-000000000002"
FLAG = {
    "code": "lab.meter_difference",
    "severity": "warning",
    "message": "Winkler and meter differ by 0.6 mg/L.",
    "action": "Check the meter's calibration.",
    "field": "titrant_ml",
}


def v2_doc() -> dict:
    def result(rid, value, **inputs):
        return {
            "id": rid,
            "analyte": "do_winkler",
            "value": value,
            "unit": "mg/L",
            "analysed_at": "2026-06-23T14:00:00-07:00",
            "analyst": "J.V.",
            "method": "Standard Methods 4500-O C",
            "valid": inputs.pop("valid", True),
            "notes": "",
            "inputs": {"entered": {"titrant_ml": "12,1"}, **inputs},
        }

    first = result(
        "r-1",
        9.71,
        flags=[FLAG],
        superseded_by="r-2",
        superseded_at="2026-06-23T15:00:00-07:00",
        superseded_reason="end point overshot",
    )
    second = result("r-2", 9.87, supersedes=["r-1"], flags=[])
    failed = result("r-3", 31.0, valid=False, flags=[dict(FLAG, code="lab.do_implausible", severity="stop-and-check")])
    bottle = {
        "id": "b-1",
        "label": "TV-0701",
        "kind": "do-fixed",
        "collected_at": "2026-06-23T07:30:00-07:00",
        "fixed_at": "2026-06-23T07:32:00-07:00",
        "lab_results": [first, second],
    }
    dup = {
        "id": "b-2",
        "label": "TV-0701D",
        "kind": "duplicate",
        "collected_at": "2026-06-23T07:31:00-07:00",
        "fixed_at": "2026-06-23T07:33:00-07:00",
        "duplicate_of": "TV-0701",
        "lab_results": [failed],
    }
    return {
        "schema_version": 2,
        "id": TRIP,
        "revision": 4,
        "program": "Tamsin Valley Stream Watch",
        "crew": ["R.O."],
        "started_at": "2026-06-23T07:00:00-07:00",
        "stops": [
            {"id": "s-1", "site_id": "LK-04", "arrived_at": "2026-06-23T07:25:00-07:00", "bottles": [bottle, dup]}
        ],
        "audit": [],
        "conflicts": [],
    }


def test_v2_lab_results_become_typed():
    original = v2_doc()
    doc = migrate(copy.deepcopy(original))
    assert doc["schema_version"] == SCHEMA_VERSION == 3
    trip = Trip.from_document(doc)
    first, second = trip.stops[0].bottles[0].lab_results
    assert (first.status, first.superseded_by, first.superseded_reason) == ("superseded", "r-2", "end point overshot")
    assert first.superseded_at.isoformat() == "2026-06-23T15:00:00-07:00"
    assert [(f.code, f.severity, f.field) for f in first.flags] == [("lab.meter_difference", "warning", "titrant_ml")]
    assert (second.status, second.supersedes) == ("valid", ["r-1"])
    failed = trip.stops[0].bottles[1].lab_results[0]
    assert failed.status == "invalid" and failed.flags[0].severity == "stop-and-check"
    # what was typed at the bench stays in inputs; the conventions are gone from it
    assert first.inputs == {"entered": {"titrant_ml": "12,1"}}
    assert trip.stops[0].bottles[1].duplicate_of == "TV-0701"
    assert "duplicate_of" not in (trip.stops[0].bottles[1].model_extra or {})
    assert original == v2_doc()  # the input is not changed
    # the lab rules read the typed fields
    assert current_result(trip.stops[0].bottles[0], "do_winkler").id == "r-2"
    (check,) = duplicate_checks(trip)
    assert check.primary_label == "TV-0701" and check.duplicate_label == "TV-0701D"


def test_v1_documents_are_lifted_to_v3():
    doc = migrate(json.loads(json.dumps(V1_DOC)))
    assert doc["schema_version"] == 3
    trip = Trip.from_document(doc)
    bottle = trip.stops[0].bottles[0]
    assert bottle.label == "TV-0100" and bottle.lab_results == [] and bottle.duplicate_of is None


def test_migrating_twice_gives_the_same_document():
    once = migrate(v2_doc())
    assert migrate(once) is once  # current version: returned as is
    assert migrate(v2_doc()) == once


def test_store_keeps_a_v2_document_typed_after_an_import(store):
    out = store.merge_document(v2_doc(), "import of an older build's file")
    stored = store.trip_document(out.trip.id)
    assert stored["schema_version"] == 3
    results = stored["stops"][0]["bottles"][0]["lab_results"]
    assert [r["status"] for r in results] == ["superseded", "valid"]
    assert all("superseded_by" not in r["inputs"] and "flags" not in r["inputs"] for r in results)


def test_the_sample_trips_migrate_and_validate():
    for path in sorted((ROOT / "sample_trips").glob("trip-*.json")):
        doc = migrate(json.loads(path.read_text(encoding="utf-8")))
        trip = Trip.from_document(doc)
        for s in trip.stops:
            for b in s.bottles:
                for r in b.lab_results:
                    assert r.status in ("valid", "invalid", "superseded")
                    assert not {"flags", "supersedes", "superseded_by"} & set(r.inputs or {})
