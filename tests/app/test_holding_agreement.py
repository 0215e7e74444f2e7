"""One table of bottles through the three readers of the holding rules: the app's Bottles/End screens
(AppController.clock_lines), `lab pending` (core.rules.lab.pending_bottles) and QC (core.rules.qc.stop_flags).
They must agree bottle by bottle, and a bottle with a valid result is never expired anywhere.

Holding times: Winkler DO 8 h and BOD 48 h, both from collection (US 40 CFR 136.3 Table II, from
memory; the Winkler sample is fixed on site); "soon" is less than 25 % left (common practice).
"""

from __future__ import annotations

from datetime import timedelta

import pytest

from core.records.models import Bottle, LabResult, Site, Stop
from core.rules.lab import pending_bottles
from core.rules.qc import stop_flags
from core.store import DeviceStore
from mobile.app.controller import AppController
from tests.records.conftest import T0, FakeClock, make_trip

NOW = T0 + timedelta(hours=10)


def _result(analyte: str, valid: bool | None = True) -> LabResult:
    return LabResult(
        analyte=analyte,
        value=8.1 if analyte == "do_winkler" else 3.2,
        unit="mg/L",
        analysed_at=T0 + timedelta(hours=2),
        valid=valid,
    )


def _fixed(hours: float):
    return T0 + timedelta(hours=hours)


# label, kind, fixed at, results, the bottle it duplicates (an analysed primary at the same stop),
# and the expected state at NOW (T0 + 10 h): "expired", "soon", "in time" or None (no clock runs).
CASES = [
    # Winkler collected at 0, fixed at 0.5 h: deadline 8 h, passed
    ("W-open", "do-fixed", _fixed(0.5), [], None, "expired"),
    # the same bottle titrated in time: a valid result stops the clock (never "expired")
    ("W-done", "do-fixed", _fixed(0.5), [_result("do_winkler")], None, None),
    # an invalid result does not count: the bottle still waits, and its time has passed
    ("W-void", "do-fixed", _fixed(0.5), [_result("do_winkler", valid=False)], None, "expired"),
    # collected at 3 h (see COLLECTED_H), fixed at 3.2 h: deadline 11 h, 1 h left of 8 h (< 25 %)
    ("W-late", "do-fixed", _fixed(3.2), [], None, "soon"),
    # BOD 48 h from collection: 38 h left
    ("B-open", "bod", None, [], None, "in time"),
    ("B-done", "bod", None, [_result("bod5")], None, None),
    # a duplicate nobody fixed and whose original is not named: a BOD sample (never fixed on site)
    ("D-unfixed", "duplicate", None, [], None, "in time"),
    # a duplicate fixed on site: a Winkler sample, deadline 8 h
    ("D-fixed", "duplicate", _fixed(0.5), [], None, "expired"),
    # an unfixed duplicate of a Winkler bottle: Winkler clock from collection (8 h), passed
    ("D-of-W", "duplicate", None, [], "P-W", "expired"),
    # an unfixed duplicate of a BOD bottle: 48 h
    ("D-of-B", "duplicate", None, [], "P-B", "in time"),
    # a duplicate with a valid Winkler result: done
    ("D-done", "duplicate", _fixed(0.5), [_result("do_winkler")], None, None),
    # a blank has no holding time here (the program's SOP keeps it)
    ("K-blank", "blank", None, [], None, None),
]
COLLECTED_H = {"W-late": 3.0}  # hours after T0; every other bottle is collected at T0
PRIMARIES = {"P-W": ("do-fixed", _fixed(0.2), "do_winkler"), "P-B": ("bod", None, "bod5")}


@pytest.fixture
def trip_store(tmp_path):
    store = DeviceStore.open(tmp_path / "data", device_id="dev-test-a", clock=FakeClock(T0 - timedelta(hours=1)))
    store.save_sites([Site(id="LK-01", name="Mill Ford", elevation_m=212.0, water_class="warm")])
    stops = []
    for i, (label, kind, fixed, results, dup_of, _) in enumerate(CASES):
        extra = {"duplicate_of": f"{dup_of}-{label}"} if dup_of else {}
        collected = T0 + timedelta(hours=COLLECTED_H.get(label, 0.0))
        bottles = [Bottle(label=label, kind=kind, collected_at=collected, fixed_at=fixed, lab_results=results, **extra)]
        if dup_of:
            p_kind, p_fixed, p_analyte = PRIMARIES[dup_of]
            bottles.append(
                Bottle(
                    label=f"{dup_of}-{label}",
                    kind=p_kind,
                    collected_at=T0,
                    fixed_at=p_fixed,
                    lab_results=[_result(p_analyte)],
                )
            )
        stops.append(Stop(site_id="LK-01", arrived_at=T0 + timedelta(minutes=i), bottles=bottles))
    trip = store.save_trip(make_trip(stops), "holding cases")
    return store, trip


def _expected() -> dict[str, str | None]:
    return {label: state for label, *_, state in CASES}


def test_lab_pending_follows_the_table(trip_store):
    _store, trip = trip_store
    pending = {p.label: p.status for p in pending_bottles([trip], NOW)}
    assert pending == {label: state for label, state in _expected().items() if state is not None}


def test_qc_follows_the_table(trip_store):
    store, trip = trip_store
    settings = store.settings()
    got = {}
    for stop in trip.stops:
        codes = {f.code for f in stop_flags(stop, settings, NOW)}
        label = stop.bottles[0].label
        got[label] = "expired" if "holding.expired" in codes else "soon" if "holding.soon" in codes else "in time"
    # QC has no "no clock" state: a bottle whose clock does not run raises no holding flag
    assert got == {label: state or "in time" for label, state in _expected().items()}


def test_the_app_follows_the_table(trip_store):
    store, trip = trip_store
    ctl = AppController(store)
    ctl.open_trip(trip.id)
    lines = {c.label: c for c in ctl.clock_lines(now=NOW)}
    words = {"expired": "EXPIRED", "soon": "SOON", "in time": "OK"}
    for label, state in _expected().items():
        if state is None:
            # analysed bottles say so; a blank runs no clock and is not listed
            assert label not in lines or (lines[label].word == "ANALYSED" and not lines[label].expired), label
        else:
            assert lines[label].word == words[state], label
            assert lines[label].expired == (state == "expired"), label
    assert "K-blank" not in lines and lines["W-done"].word == "ANALYSED"
    ctl.worker.flush()


def test_the_three_agree_bottle_by_bottle(trip_store):
    store, trip = trip_store
    ctl = AppController(store)
    ctl.open_trip(trip.id)
    app = {
        c.label: {"EXPIRED": "expired", "SOON": "soon", "OK": "in time"}.get(c.word) for c in ctl.clock_lines(now=NOW)
    }
    lab = {p.label: p.status for p in pending_bottles([trip], NOW)}
    settings = store.settings()
    for stop in trip.stops:
        label = stop.bottles[0].label
        codes = {f.code for f in stop_flags(stop, settings, NOW)}
        qc = "expired" if "holding.expired" in codes else "soon" if "holding.soon" in codes else None
        assert app.get(label) == lab.get(label), label
        assert qc == (lab.get(label) if lab.get(label) in ("expired", "soon") else None), label
    ctl.worker.flush()
