"""The trip meter's % basis chosen on the start screen (a real window under Xvfb) turns a DO in % into mg/L
against 760 mmHg (team science reference §10; Benson & Krause 1984 for the saturation)."""

from __future__ import annotations

from core.science.oxygen import do_saturation_mg_l
from core.store import DeviceStore
from tests.app.conftest import run_scenario, seed_sites


def test_start_screen_basis_reaches_the_stop_and_the_record(tmp_path):
    seed_sites(tmp_path / "data")
    notes = run_scenario("meter_basis", tmp_path / "data", tmp_path, timeout=180)
    assert notes["basis_default"] == "local" and notes["basis_chosen"] == "sea-level"
    trip = DeviceStore.open(tmp_path / "data").load_trip(notes["trip_id"])
    assert trip.meter_percent_basis == "sea-level"
    # 92 % against 760 mmHg at 15 °C: 0.92 × saturation at 1013.25 hPa, not at the stop's 940 hPa
    want = 0.92 * float(do_saturation_mg_l(15.0, 1013.25, 0.0))
    assert notes["view_do_text"].startswith(f"{want:.2f}"), notes["view_do_text"]
    local = 0.92 * float(do_saturation_mg_l(15.0, 940.0, 0.0))
    assert not notes["view_do_text"].startswith(f"{local:.2f}")
    stop = trip.stops[0]
    assert stop.derived is not None and abs(stop.derived.do_mg_l - want) < 1e-9
