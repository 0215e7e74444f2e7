"""The lab mode's controller (no kivy): waiting list, standardisation, Winkler and BOD as typed, signing."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.records.exchange import import_trip_file
from core.rules.custody import add_handoff
from core.store import DeviceStore
from mobile.app.lab_bench import LabBench
from tests.app.conftest import ROOT, seed_sites

HOT = "a41f6e2d-8c3b-4d7a-b5e9-0c6d2f8e1a34"  # sample trip of 2026-06-23 (invented)
PDT = timezone(timedelta(hours=-7))
NOW = datetime(2026, 6, 23, 14, 0, tzinfo=PDT)


@pytest.fixture
def bench(tmp_path):
    seed_sites(tmp_path / "data")
    store = DeviceStore.open(tmp_path / "data")
    import_trip_file(store, ROOT / "sample_trips" / "trip-2026-06-23-hot-afternoon.json")
    trip = store.load_trip(HOT)
    store.save_trip(add_handoff(trip, relinquished_by="R.O.", received_by="Lab desk", at=NOW, now=NOW).trip, "typed")
    return LabBench(store, now=lambda: NOW)


def test_waiting_is_most_urgent_first(bench):
    rows = bench.waiting()
    # Winkler (8 h from fixing) before BOD (48 h) — 40 CFR 136.3 Table II, from memory.
    assert rows[0].analysis == "Winkler DO" and {r.analysis for r in rows[1:]} == {"BOD5"}


def test_winkler_needs_the_days_standardisation_and_uses_it(bench):
    w = next(r for r in bench.waiting() if r.analysis == "Winkler DO")
    with pytest.raises(ValueError, match="standardisation"):
        bench.winkler(w.trip_id, w.bottle_id, "9.0", "201")
    with pytest.raises(ValueError, match="Thiosulfate on the standard"):
        bench.set_standardisation("lots")
    assert "0.0250 N" in bench.set_standardisation("20,0")  # N = 0.025 · 20 / 20 (Standard Methods 4500-O C)
    with pytest.raises(ValueError, match="Titrant used"):
        bench.winkler(w.trip_id, w.bottle_id, "9..0", "201")
    # 200 mL original sample (201 mL titrated of 300 with 2 mL of reagents ≈ 199.66 mL): DO = V·N·8000/V_orig.
    msg = bench.winkler(w.trip_id, w.bottle_id, "9.0", f"{200 * 300 / 298:.4f}")
    assert "9.00 mg/L saved" in msg
    assert not [r for r in bench.waiting() if r.bottle_id == w.bottle_id]


def test_bod_lines_show_validity_as_typed(bench):
    lines, reportable, good = bench.bod_lines(
        [("150", "300", "8.8", "4.3"), ("", "300", "", ""), ("50", "300", "8.75", "abc")]
    )
    assert lines[0].valid is True and lines[1].text == "" and lines[2].valid is None and "Day-5 DO" in lines[2].text
    assert reportable == "Reportable BOD5: 9.0 mg/L" and len(good) == 1  # (8.8 − 4.3)/0.5, Standard Methods 5210 B
    # A clean stream: undiluted, 0.7 mg/L depletion < 2.0 — reported as a bound, "< 2.0 mg/L" (5210 B).
    _, reportable, _ = bench.bod_lines([("300", "300", "8.8", "8.1")])
    assert reportable == "Reportable BOD5: < 2.0 mg/L"


def test_sign_needs_strokes_and_names_the_side(bench):
    (rec, role, text), _ = bench.unsigned(HOT)
    assert role == "relinquished" and text.startswith("R.O.")
    with pytest.raises(ValueError, match="finger"):
        bench.sign(HOT, rec, role, [[[0.1, 0.5]]], 3.0)
    stroke = [[0.1 + i / 50, 0.5] for i in range(20)]
    assert "R.O." in bench.sign(HOT, rec, role, [stroke], 3.0)
    assert [s[1] for s in bench.unsigned(HOT)] == ["received"]


def test_a_queued_field_save_before_the_bench_write_does_not_refuse_the_result(bench):
    # The field form's queued save of the same trip lands when the bench writes (before_write):
    # the bench reads the trip after it, so the result is saved and the field edit is kept too.
    store = bench.store

    def field_save():
        trip = store.load_trip(HOT)
        store.save_trip(trip.model_copy(update={"crew": [*trip.crew, "Z.Q."]}), "field edit queued")

    bench.before_write = field_save
    bench.set_standardisation("20")
    w = next(r for r in bench.waiting() if r.analysis == "Winkler DO")
    assert "saved" in bench.winkler(w.trip_id, w.bottle_id, "9.0", f"{200 * 300 / 298:.4f}")
    stored = store.load_trip(HOT)
    assert "Z.Q." in stored.crew
    assert not [r for r in bench.waiting() if r.bottle_id == w.bottle_id]


def test_a_tablet_clock_before_collection_is_refused_in_words(tmp_path):
    """The lab rules refuse an analysis before collection (common practice); the bench says so in its words."""
    seed_sites(tmp_path / "data")
    store = DeviceStore.open(tmp_path / "data")
    import_trip_file(store, ROOT / "sample_trips" / "trip-2026-06-23-hot-afternoon.json")
    trip = store.load_trip(HOT)
    store.save_trip(add_handoff(trip, relinquished_by="R.O.", received_by="Lab desk", at=NOW, now=NOW).trip, "typed")
    bench = LabBench(store, now=lambda: NOW)
    w = next(r for r in bench.waiting() if r.analysis == "Winkler DO")
    early = datetime(2026, 6, 1, 9, 0, tzinfo=PDT)  # then the tablet's clock is set weeks back
    bench.now = lambda: early
    bench.set_standardisation("20,0")
    with pytest.raises(ValueError) as info:
        bench.winkler(w.trip_id, w.bottle_id, "9.0", "201")
    msg = str(info.value)
    assert msg.startswith("The time of analysis (this tablet's clock) 2026-06-01") and "before bottle" in msg, msg
    assert "analysed_at" not in msg and "_at =" not in msg
