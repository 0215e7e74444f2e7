"""The app's controller without a window: forms in, core's values and the real store out.

Expected values come from core (core.science.assess, core.records.models.measure), never from the app's own
earlier output; saturation checks against Benson & Krause (1984) live in tests/science.
"""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.science.assess import assess_reading
from core.store import DeviceStore
from mobile.app.controller import AppController
from tests.app.conftest import seed_sites


@pytest.fixture
def ctl(tmp_path):
    seed_sites(tmp_path / "data")
    c = AppController(DeviceStore.open(tmp_path / "data"))
    f = c.new_trip_form()
    f.program, f.crew, f.meter_id = "Tamsin Valley Stream Watch", "R.O., J.V.", "DO-7"
    assert c.start_trip(f, without_calibration=True) is None
    c.new_stop()
    c.set_stop_field("site", "LK-01")
    yield c
    c.worker.flush()


def test_view_matches_core_assess(ctl):
    for k, v in (("temp", "12,4"), ("pressure", "968"), ("conductivity", "410"), ("do", "9,8")):
        view = ctl.set_stop_field(k, v)
    a = assess_reading(12.4, 968.0, conductivity_us_cm=410.0, do_mg_l=9.8, elevation_m=420.0, water_class="cold")
    assert view.sat_text == f"{a.do_sat_mg_l:.2f} mg/L"
    assert view.percent_text == f"{a.percent_saturation:.1f} %"
    assert view.salinity_text.startswith(f"{a.salinity:.2f}")


def test_fahrenheit_unit_converts_before_core(ctl):
    ctl.set_stop_field("temp_unit", "F")
    ctl.set_stop_field("temp", "68")
    view = ctl.set_stop_field("pressure", "1000")
    a = assess_reading(20.0, 1000.0, elevation_m=420.0, water_class="cold")  # 68 °F = 20 °C (definition)
    assert view.sat_text == f"{a.do_sat_mg_l:.2f} mg/L"


def test_fahrenheit_value_typed_as_celsius_gets_the_hint(ctl):
    view = ctl.set_stop_field("temp", "68")
    assert any("°F" in f.message for f in view.flags)
    assert view.sat_text == "—"  # nothing computed from a refused value


def test_sea_level_pressure_is_flagged_at_elevation(ctl):
    ctl.set_stop_field("temp", "12")
    view = ctl.set_stop_field("pressure", "1013")  # a weather-service value at a 420 m site
    assert any(f.code == "pressure.sea_level_adjusted" for f in view.flags)


def test_duplicate_bottle_refused_in_trip_and_across_device(ctl, tmp_path):
    assert ctl.add_bottle("B-1", "do_fixed", True) is None
    msg = ctl.add_bottle("b-1", "bod", False)
    assert msg and "already used" in msg
    ctl.save_now(wait=True)
    other = AppController(ctl.store)
    f = other.new_trip_form()
    f.program, f.crew, f.meter_id = "Tamsin Valley Stream Watch", "J.V.", "DO-8"
    other.start_trip(f, without_calibration=True)
    other.new_stop()
    other.set_stop_field("site", "LK-02")
    msg = other.add_bottle("B-1", "do_fixed", True)
    assert msg and "another trip" in msg
    other.worker.flush()


def test_close_blocked_until_required_fields(ctl):
    msg = ctl.close_stop()
    assert msg and "Water temperature" in msg and "Meter DO" in msg
    for k, v in (("temp", "12,4"), ("pressure", "968"), ("do", "9,8")):
        ctl.set_stop_field(k, v)
    assert ctl.close_stop() is None


def test_saved_through_the_store_as_typed(ctl):
    for k, v in (("pressure_unit", "mmHg"), ("temp", "12,4"), ("pressure", "726,1"), ("do", "95"), ("do_unit", "%")):
        ctl.set_stop_field(k, v)
    ctl.save_now(wait=True)
    assert ctl.save_errors == []
    trip = ctl.store.load_trip(ctl.trip.id)
    stop = trip.stops[0]
    assert stop.pressure.text == "726,1 mmHg"
    assert stop.pressure.value == pytest.approx(726.1 * 1.33322387415)  # conventional mmHg (NIST SP 811)
    assert stop.do.unit == "%" and stop.do.value == 95.0
    assert stop.derived.do_sat_mg_l == pytest.approx(
        assess_reading(12.4, 726.1 * 1.33322387415, elevation_m=420.0, water_class="cold", do_percent=95.0).do_sat_mg_l
    )


def test_refused_text_survives_a_restart(ctl):
    ctl.set_stop_field("temp", "68")
    ctl.save_now(wait=True)
    again = AppController(ctl.store)
    screen, stop_id = again.resume_point()
    assert screen == "stop" and stop_id == ctl.stop_id
    assert again.stop.temp_text == "68"
    again.worker.flush()


def test_holding_clocks_most_urgent_first(ctl):
    t0 = datetime.now(timezone.utc)
    ctl.now = lambda: t0
    ctl.add_bottle("BOD-1", "bod", False)
    ctl.now = lambda: t0 + timedelta(minutes=5)
    ctl.add_bottle("DO-1", "do_fixed", True)
    lines = ctl.clock_lines(now=t0 + timedelta(hours=7))
    # Winkler DO 8 h vs BOD 48 h (40 CFR 136.3 Table II, from memory)
    assert [c.label for c in lines] == ["DO-1", "BOD-1"]
    assert lines[0].word == "SOON"
    lines = ctl.clock_lines(now=t0 + timedelta(hours=9))
    assert lines[0].word == "EXPIRED"


def test_add_site_with_elevation_and_refusals(ctl):
    site_id = ctl.add_site("LK-09", "Willow Steps", "1250,5")
    assert site_id == "LK-09"
    assert ctl.site("LK-09").elevation_m == pytest.approx(1250.5)
    for code, name, elev, word in (
        ("", "X", "10", "code"),
        ("LK-10", "", "10", "name"),
        ("LK-10", "X", "", "Elevation"),
        ("LK-10", "X", "9000", "outside"),
        ("LK-09", "Again", "10", "already"),
    ):
        with pytest.raises(ValueError) as err:
            ctl.add_site(code, name, elev)
        assert word in str(err.value)


def test_another_writer_between_saves_loses_nothing(ctl):
    from core.records.models import new_id

    for k, v in (("temp", "12,4"), ("pressure", "968"), ("do", "9,8")):
        ctl.set_stop_field(k, v)
    ctl.save_now(wait=True)
    stored = ctl.store.load_trip(ctl.trip.id)
    other = stored.stops[0].model_copy(update={"id": new_id(), "site_id": "LK-02", "bottles": []})
    ctl.store.save_trip(stored.model_copy(update={"stops": [*stored.stops, other]}), "pulled from a hub")
    ctl.set_stop_field("do", "9,9")
    ctl.save_now(wait=True)
    assert ctl.save_errors == []
    after = ctl.store.load_trip(ctl.trip.id)
    assert [s.site_id for s in after.stops] == ["LK-01", "LK-02"]
    assert after.stops[0].do.text == "9,9 mg/L"


def test_open_conflicts_reach_the_attention_list(ctl):
    from datetime import datetime, timezone

    for k, v in (("temp", "12,4"), ("pressure", "968"), ("do", "9,8")):
        ctl.set_stop_field(k, v)
    ctl.save_now(wait=True)
    doc = ctl.store.trip_document(ctl.trip.id)
    doc["conflicts"] = [
        {
            "id": "c1",
            "path": f"stops[{doc['stops'][0]['id']}].notes",
            "detected_at": datetime.now(timezone.utc).isoformat(),
            "sides": [{"device_id": "dev-a", "value": "riffle"}, {"device_id": "dev-b", "value": "pool"}],
        }
    ]
    ctl.store.put_document(doc, "merged by sync", expected_revision=doc["revision"])
    ctl.open_trip(ctl.trip.id)
    lines = [line for line in ctl.attention_lines() if "CONFLICT" in line]
    # in words: the site, the field's label and both values; no record path, no device id
    assert len(lines) == 1 and "riffle" in lines[0] and "pool" in lines[0] and "LK-01" in lines[0]
    assert "stops[" not in lines[0] and "dev-a" not in lines[0]


def test_arrival_time_typed_as_hh_mm_or_full(ctl):
    from mobile.app.views import parse_when

    base = datetime(2026, 6, 9, 8, 0, tzinfo=timezone.utc)
    t = parse_when("14:05", base)
    assert (t.hour, t.minute, t.date()) == (14, 5, base.astimezone(t.tzinfo).date()) and t.tzinfo is not None
    t = parse_when("2026-06-10 07:30", base)
    assert (t.day, t.hour, t.minute) == (10, 7, 30) and t.tzinfo is not None
    view = ctl.set_stop_field("arrived", "half past two")
    assert "Arrival time" in view.errors["arrived"] and view.flags[0].code == "input.arrived"


def test_a_warm_celsius_value_that_may_be_fahrenheit_is_computed_and_flagged(ctl):
    from core.science.temperature import fahrenheit_hint

    ctl.set_stop_field("pressure", "968")
    view = ctl.set_stop_field("temp", "45")
    expected = fahrenheit_hint(45.0)  # core decides whether 45 "°C" looks like °F
    codes = [f.code for f in view.flags]
    assert view.sat_text != "—"
    assert (expected is not None) == ("temp.looks_fahrenheit" in codes)
    assert expected is not None  # 45 °C water is implausible for a stream (common practice)


class _StoreThatFailsOnce:
    """The real store, whose next save raises StoreLocked once (as when the CLI holds the lock)."""

    def __init__(self, store):
        self._store = store
        self.fail_next = False

    def __getattr__(self, name):
        return getattr(self._store, name)

    def save_trip(self, trip, change):
        from core.store import StoreLocked

        if self.fail_next:
            self.fail_next = False
            raise StoreLocked("The store is busy (another streamtab holds its lock).")
        return self._store.save_trip(trip, change)


def test_a_failed_save_is_reported_and_written_next_time(ctl):
    flaky = _StoreThatFailsOnce(ctl.store)
    ctl.store = flaky
    ctl.set_stop_field("temp", "12,4")
    flaky.fail_next = True
    ctl.save_now(wait=True)
    errors = ctl.take_save_errors()
    assert errors and "busy" in errors[0]
    assert ctl.dirty is True
    assert ctl.flush(10)  # what on_pause or the next trigger does
    assert ctl.save_errors == []
    assert flaky.load_trip(ctl.trip.id).stops[0].temp.text == "12,4 °C"


def test_settings_limits_are_the_records_own(ctl):
    """The settings screen accepts what ProgramSettings accepts and refuses the rest, naming the field."""
    from core.records.models import ProgramSettings

    units = {"temp_unit": "C", "pressure_unit": "hPa", "cond_unit": "uS/cm", "do_unit": "mg/L"}
    ok = {
        "calibration_tolerance_mg_l": "0,5",
        "warm_min_mg_l": "5",
        "cold_min_mg_l": "6.5",
        "supersaturation_percent": "130",
    }
    hi = ProgramSettings.model_fields["calibration_tolerance_mg_l"].metadata[-1].le
    assert ctl.save_settings_form(units, {**ok, "calibration_tolerance_mg_l": f"{hi:g}"}, "") is None
    assert ctl.store.settings().calibration_tolerance_mg_l == hi
    assert ctl.save_settings_form(units, ok, "") is None
    assert ctl.store.settings().calibration_tolerance_mg_l == 0.5
    for name, text, words in (
        ("calibration_tolerance_mg_l", "0", "Calibration tolerance"),
        ("supersaturation_percent", "99", "Supersaturation threshold"),
        ("warm_min_mg_l", "", "Warm-water minimum"),
    ):
        msg = ctl.save_settings_form(units, {**ok, name: text}, "")
        assert msg and msg.startswith(words), msg
    assert ctl.store.settings().supersaturation_percent == 130  # a refusal saved nothing


def test_meter_percent_basis_is_saved_with_the_program_settings(ctl):
    """The settings screen's % basis goes to ProgramSettings.percent_basis (team science reference §10),
    a limit refused saves no basis either, and a new trip starts from the stored value."""
    units = {"temp_unit": "C", "pressure_unit": "hPa", "cond_unit": "uS/cm", "do_unit": "mg/L"}
    ok = {
        "calibration_tolerance_mg_l": "0.2",
        "warm_min_mg_l": "5",
        "cold_min_mg_l": "6.5",
        "supersaturation_percent": "120",
    }
    assert ctl.program_percent_basis() == "local"  # the default
    assert ctl.save_settings_form(units, {**ok, "warm_min_mg_l": ""}, "", "sea-level")
    assert ctl.store.settings().percent_basis == "local"  # nothing saved with a refusal
    msg = ctl.save_settings_form(units, ok, "", "760")
    assert msg and "basis" in msg and "percent_basis" not in msg
    assert ctl.save_settings_form(units, ok, "", "sea-level") is None
    assert ctl.store.settings().percent_basis == "sea-level" and ctl.prefs.percent_basis == "sea-level"
    assert ctl.program_percent_basis() == "sea-level"
    assert ctl.save_settings_form(units, ok, "") is None  # a caller that does not send it keeps it
    assert ctl.store.settings().percent_basis == "sea-level"


def test_trip_start_reads_the_same_in_the_app_and_the_command_line(tmp_path, capsys, monkeypatch):
    """Both show a trip's start in its own UTC offset and say which, whatever this machine's zone."""
    import time
    from pathlib import Path

    from core.records.messages import when_text
    from mobile.cli import main
    from mobile.cli.app_cmd import seed_demo

    monkeypatch.setenv("TZ", "Asia/Tokyo")  # a tablet far from where the trips were recorded
    time.tzset()
    try:
        seed_demo(tmp_path / "d", Path(__file__).resolve().parents[2] / "sample_trips")
        store = DeviceStore.open(tmp_path / "d")
        c = AppController(store)
        lines = {line.id: line.detail for line in c.trip_lines()}
        assert main(["trip", "list", "--data-dir", str(tmp_path / "d")]) == 0
        out = capsys.readouterr().out
        for t in store.list_trips():
            shown = when_text(t.started_at)
            assert "UTC" in shown and t.started_at[11:16] in shown  # the recorded clock, not Tokyo's
            assert lines[t.id].startswith(shown)
            assert f"{t.id[:8]}  {shown}" in out
        c.worker.flush()
    finally:
        monkeypatch.delenv("TZ")
        time.tzset()


def _demo_controller(tmp_path, monkeypatch, zone="Asia/Tokyo"):
    """The demo trips (recorded at UTC−07:00, typed without units) opened on a tablet in `zone`."""
    import time
    from pathlib import Path

    from mobile.cli.app_cmd import seed_demo

    monkeypatch.setenv("TZ", zone)
    time.tzset()
    seed_demo(tmp_path / "d", Path(__file__).resolve().parents[2] / "sample_trips")
    store = DeviceStore.open(tmp_path / "d")
    return store, AppController(store)


@pytest.fixture
def restore_tz():
    import os
    import time

    before = os.environ.get("TZ")
    yield
    if before is None:
        os.environ.pop("TZ", None)
    else:
        os.environ["TZ"] = before
    time.tzset()


def test_opening_and_saving_a_trip_changes_nothing(tmp_path, monkeypatch, restore_tz):
    store, c = _demo_controller(tmp_path, monkeypatch)
    for t in store.list_trips():
        before = store.load_trip(t.id)
        c.open_trip(t.id)
        c.save_now(wait=True)
        assert c.take_save_errors() == []
        after = store.load_trip(t.id)
        assert after.revision == before.revision, after.audit[-1].fields  # nothing written
    c.worker.flush()


def test_a_one_field_edit_changes_one_path(tmp_path, monkeypatch, restore_tz):
    """Each kind of field edited once on a tablet in another time zone: the audit lists exactly
    the one path edited, typed text elsewhere stays as typed, times keep their own offset."""
    store, c = _demo_controller(tmp_path, monkeypatch)
    trip_id = next(t.id for t in store.list_trips() if t.status == "ended")
    c.open_trip(trip_id)
    stop = c.trip.stops[1]
    bottle = next(b for s in c.trip.stops for b in s.bottles)
    original = store.load_trip(trip_id).model_dump(mode="json")

    def edit_stop(name, value):
        def run():
            c.stop_id = stop.id
            c.set_stop_field(name, value)

        return run

    def set_attr(obj, attr, value):
        return lambda: setattr(obj, attr, value)

    cases = [
        ("water temperature", edit_stop("temp", "14,2"), f"stops[{stop.id}].temp"),
        ("pressure unit", edit_stop("pressure_unit", "mbar"), f"stops[{stop.id}].pressure"),
        ("conductivity", edit_stop("conductivity", "1,71"), f"stops[{stop.id}].conductivity"),
        ("meter DO", edit_stop("do", "7,77"), f"stops[{stop.id}].do"),
        (
            "conductivity basis",
            edit_stop("cond_is_sc25", not stop.cond_is_sc25),
            f"stops[{stop.id}].conductivity_is_sc25",
        ),
        ("notes", edit_stop("notes", "gauge plate bent"), f"stops[{stop.id}].notes"),
        ("site", edit_stop("site", "LK-05"), f"stops[{stop.id}].site_id"),
        ("arrival time", edit_stop("arrived", "06:05"), f"stops[{stop.id}].arrived_at"),
        (
            "bottle fixed time",
            set_attr(bottle, "fixed_at", (bottle.fixed_at or bottle.collected_at) + timedelta(minutes=3)),
            f"stops[{next(s.id for s in c.trip.stops if bottle in s.bottles)}].bottles[{bottle.id}].fixed_at",
        ),
        ("program", set_attr(c.trip, "program", "Tamsin Valley Stream Watch B"), "program"),
        ("meter", set_attr(c.trip, "meter_id", "DO-METER-10"), "meter_id"),
        ("crew", set_attr(c.trip, "crew", c.trip.crew + ", A.B."), "crew"),
        ("calibration reading", set_attr(c.trip.pre_cal, "reading_text", "8,31"), "pre_calibration.reading_mg_l"),
        ("post-check temperature", set_attr(c.trip.post_check, "temp_text", "21,5"), "post_check.temp"),
    ]
    pressure_before = stop.pressure_text
    for what, run, path in cases:
        rev = store.load_trip(trip_id).revision
        run()
        c.save_now(wait=True)
        assert c.take_save_errors() == [], what
        saved = store.load_trip(trip_id)
        assert saved.revision == rev + 1, what
        assert saved.audit[-1].fields == [path], (what, saved.audit[-1].fields)
    saved = store.load_trip(trip_id).model_dump(mode="json")
    # untouched stops keep their text as typed and their times as stored (offset included)
    for old, new in zip(original["stops"], saved["stops"], strict=True):
        if old["id"] == stop.id:
            assert new["pressure"]["text"] == f"{pressure_before} mbar"
            assert new["arrived_at"].endswith(old["arrived_at"][-6:])  # its own offset
            continue
        assert {k: new[k] for k in ("temp", "do", "arrived_at")} == {k: old[k] for k in ("temp", "do", "arrived_at")}
    assert saved["started_at"] == original["started_at"] and saved["ended_at"] == original["ended_at"]
    c.worker.flush()


def test_a_save_after_another_writer_keeps_both_changes(tmp_path, monkeypatch, restore_tz):
    """Another writer (a sync merge, the office) changes one field while the tablet edits
    another: the tablet's save is refused as stale, only its own edit goes on the stored trip,
    and the form then shows the other writer's value (no lost update)."""
    from core.records.models import measure

    store, c = _demo_controller(tmp_path, monkeypatch, zone="UTC")
    trip_id = next(t.id for t in store.list_trips() if t.status == "ended")
    c.open_trip(trip_id)
    c.stop_id = c.trip.stops[0].id
    c.set_stop_field("temp", "15,5")  # typed here, not saved yet

    other = store.load_trip(trip_id)  # the other writer
    first = other.stops[0]
    changed = first.model_copy(update={"do": measure("do", "6.66 mg/L"), "notes": "office note"})
    store.save_trip(other.model_copy(update={"stops": [changed, *other.stops[1:]]}), "office correction")

    c.save_now(wait=True)
    assert c.take_save_errors() == []
    saved = store.load_trip(trip_id)
    stop = next(s for s in saved.stops if s.id == first.id)
    assert stop.temp.text == "15,5 °C"  # ours
    assert (stop.do.text, stop.notes) == ("6.66 mg/L", "office note")  # theirs, kept
    assert saved.audit[-1].fields == [f"stops[{first.id}].temp"]
    assert c.adopt_rebased() is True
    assert (c.stop.do_text, c.stop.notes, c.stop.temp_text) == ("6.66", "office note", "15,5")
    c.save_now(wait=True)  # and the next save changes nothing
    assert store.load_trip(trip_id).revision == saved.revision
    c.worker.flush()


def test_a_returned_trip_is_handed_back_from_the_tablet(tmp_path):
    from core.records.exchange import import_trip_file
    from core.records.models import ReviewEvent
    from core.rules.review import new_event, review_state
    from tests.app.conftest import ROOT

    seed_sites(tmp_path / "data")
    store = DeviceStore.open(tmp_path / "data")
    import_trip_file(store, ROOT / "sample_trips" / "trip-2026-06-23-hot-afternoon.json")
    trip = store.load_trip("a41f6e2d-8c3b-4d7a-b5e9-0c6d2f8e1a34")  # sample trip of 2026-06-23 (invented)
    ev = new_event(trip, "returned", by="D.M.", at=datetime.now(timezone.utc), reasons=["LK-03 temperature missing"])
    store.save_trip(
        trip.model_copy(update={"review_events": [*trip.review_events, ReviewEvent.model_validate(ev, strict=False)]}),
        "office returned it",
    )
    c = AppController(store)
    c.open_trip(trip.id)
    assert "LK-03 temperature missing" in c.returned_reasons()
    assert c.resubmit() is None
    stored = store.load_trip(trip.id)
    assert review_state(stored) == "ended" and stored.review_events[-1].action == "resubmitted"
    assert c.returned_reasons() is None
    assert "cannot resubmit" in c.resubmit()  # only a returned trip can be handed back
    c.worker.flush()


def test_saving_the_screen_never_puts_back_a_setting_changed_meanwhile(ctl):
    """The settings screen writes only what the person changed, under the store's lock (common practice
    for shared settings: a stale copy must not overwrite a newer one that a pull or the office brought)."""
    ctl.load_prefs()
    other = DeviceStore.open(ctl.store.data_dir)  # a pull or a command in another process, meanwhile
    other.save_settings(other.settings().model_copy(update={"warm_min_mg_l": 5.5, "program": "From the office"}))
    # the sync screen keeps a new hub address: no program setting changed on this tablet
    ctl.send("/nonexistent-hub-for-this-test", progress=lambda *a: None, on_done=lambda *a: None)
    assert ctl.store.settings().warm_min_mg_l == 5.5
    # the settings screen changes one limit: that one is written, the office's value stays
    units = {"temp_unit": "C", "pressure_unit": "hPa", "cond_unit": "µS/cm", "do_unit": "mg/L"}
    limits = {
        "calibration_tolerance_mg_l": f"{ctl.prefs.tolerance_mg_l:g}",
        "warm_min_mg_l": f"{ctl.prefs.warm_min_mg_l:g}",  # shown before the office's change, untouched
        "cold_min_mg_l": "7",
        "supersaturation_percent": f"{ctl.prefs.supersaturation_percent:g}",
    }
    assert ctl.save_settings_form(units, limits, "") is None
    st = ctl.store.settings()
    assert (st.cold_min_mg_l, st.warm_min_mg_l, st.program) == (7.0, 5.5, "From the office")
