"""Reporting rounding in the exports people read (trip CSV, season CSV and workbook), never in stored values.

Defaults [common practice]: DO shown to 0.1 mg/L (stored to 0.01 or finer), % saturation whole,
temperature 0.1 °C, pressure 0.1 hPa, conductivity and specific conductance 3 significant figures,
practical salinity 0.01. A program's own ``reporting_decimals`` wins; ``--full-precision`` writes
the stored value itself.
"""

from __future__ import annotations

import csv
import io
import math
import re

import pytest
from openpyxl import load_workbook

from core.records.exchange import export_trip_csv
from core.records.models import ProgramSettings
from core.rules.report import Rounding, reported, rounding_for
from tests.conftest import run_cli
from tests.records.conftest import make_stop, make_trip


def _stops(text: str) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(text)))


def _decimals(cell: str) -> int:
    return len(cell.split(".", 1)[1]) if "." in cell else 0


def _sig_figures(cell: str) -> int:
    return len(cell.replace(".", "").replace("-", "").lstrip("0").rstrip("0") or "0")


def _close_to(cell: str, stored: float, decimals: int) -> bool:
    """The cell is the stored value rounded to `decimals` (within half a unit of the last place shown)."""
    return abs(float(cell) - stored) <= 0.5 * 10.0**-decimals + 1e-9


@pytest.fixture
def trip(store):
    stop = make_stop(temp="18.46", pressure="752 mmHg", cond="412.7 uS/cm", do="8.437")
    pct = make_stop(
        temp="12.34", pressure="1001.27 hPa", cond="1234.5 uS/cm", do="95.4 %", at=stop.arrived_at.replace(hour=10)
    )
    return store.save_trip(make_trip([stop, pct]), "invented readings")


def test_the_rule_itself_defaults():
    r = Rounding()  # common practice defaults
    assert reported(8.437, "do_mg_l", r).text == "8.4"
    assert reported(95.4, "percent", r).text == "95" and reported(95.4, "percent", r).number == 95
    assert reported(18.46, "temp_c", r).text == "18.5"
    assert reported(1002.58435, "pressure_hpa", r).text == "1002.6"
    assert reported(412.7, "conductivity", r).text == "413"  # 3 significant figures
    assert reported(1234.5, "conductivity", r).text == "1230" and reported(1234.5, "conductivity", r).number == 1230
    assert reported(0.04567, "conductivity", r).text == "0.0457"
    assert reported(-0.04, "do_mg_l", r).text == "0.0"  # never "-0.0"
    # calibration differences are judged against 0.2 mg/L, so they keep 0.01 mg/L and their sign
    assert reported(-0.034, "calibration_mg_l", r).text == "-0.03"
    assert reported(9.0, "do_mg_l", Rounding(do_mg_l=2)).text == "9.00"  # zeros the convention keeps
    assert reported(None, "do_mg_l", r) is None and reported(math.nan, "temp_c", r) is None
    with pytest.raises(ValueError, match="no reporting rule"):
        reported(1.0, "depth_m", r)


def test_trip_csv_rounds_by_default(store, trip):
    rows = _stops(export_trip_csv(store, trip.id)["stops.csv"])
    stored = store.load_trip(trip.id).stops
    first, second = rows
    assert first["water_temp_c"] == "18.5" and first["water_temp_as_typed"] == "18.46"  # typed stays typed
    assert first["station_pressure_hpa"] == "1002.6" and first["station_pressure_as_typed"] == "752 mmHg"
    assert first["conductivity_us_cm"] == "413"
    assert first["meter_do_value"] == "8.4"
    d = stored[0].derived
    assert _decimals(first["do_sat_mg_l"]) == 1 and _close_to(first["do_sat_mg_l"], d.do_sat_mg_l, 1)
    assert _decimals(first["do_percent_saturation"]) == 0 and _close_to(
        first["do_percent_saturation"], d.percent_saturation, 0
    )
    sc = first["specific_conductance_us_cm"]
    assert _sig_figures(sc) <= 3 and abs(float(sc) - d.specific_conductance_us_cm) <= 0.5
    assert _decimals(first["salinity_pss78"]) == 2 and _close_to(first["salinity_pss78"], d.salinity, 2)
    # a meter reading in % is rounded as a percentage
    assert second["meter_do_value"] == "95" and second["meter_do_unit"] == "%"
    assert second["conductivity_us_cm"] == "1230"
    assert first["rounding"].startswith("reported: DO 0.1 mg/L; saturation 1 %; temperature 0.1 °C")
    assert "conductivity 3 significant figures" in first["rounding"]


def test_trip_csv_honours_the_programs_reporting_decimals(store, trip):
    store.save_settings(
        ProgramSettings(reporting_decimals={"do_mg_l": 2, "percent": 1, "temp_c": 2, "conductivity_sig": 4})
    )
    first, second = _stops(export_trip_csv(store, trip.id)["stops.csv"])
    assert first["water_temp_c"] == "18.46" and first["meter_do_value"] == "8.44"
    assert first["conductivity_us_cm"] == "412.7" and second["meter_do_value"] == "95.4"
    assert _decimals(first["do_sat_mg_l"]) == 2 and _decimals(first["do_percent_saturation"]) == 1
    assert first["station_pressure_hpa"] == "1002.6"  # a key the program did not set keeps its default
    assert first["rounding"].startswith("reported: DO 0.01 mg/L; saturation 0.1 %; temperature 0.01 °C")


def test_trip_csv_full_precision_is_the_stored_value(store, trip):
    rows = _stops(export_trip_csv(store, trip.id, full_precision=True)["stops.csv"])
    for row, s in zip(rows, store.load_trip(trip.id).stops, strict=True):
        d = s.derived
        assert float(row["water_temp_c"]) == s.temp.value
        assert float(row["station_pressure_hpa"]) == s.pressure.value
        assert float(row["conductivity_us_cm"]) == s.conductivity.value
        assert float(row["meter_do_value"]) == s.do.value
        assert float(row["do_sat_mg_l"]) == d.do_sat_mg_l
        assert float(row["do_percent_saturation"]) == d.percent_saturation
        assert float(row["specific_conductance_us_cm"]) == d.specific_conductance_us_cm
        assert float(row["salinity_pss78"]) == d.salinity
        assert row["rounding"] == "full precision as stored"


def _trip_file(store, trip_id):
    files = [p for p in (store.data_dir / "trips").rglob("*.json") if trip_id in p.name]
    assert len(files) == 1, files
    return files[0]


def test_exports_leave_the_stored_trip_file_as_it_was(store, trip, tmp_path):
    path = _trip_file(store, trip.id)
    before = path.read_bytes()
    data = store.data_dir
    store.close()
    out = tmp_path / "csv"
    out.mkdir()
    r = run_cli("trip", "export", trip.id, "--format", "csv", "--out", str(out), data_dir=data)
    assert r.returncode == 0, r.stderr
    rows = _stops((out / "stops.csv").read_text(encoding="utf-8"))
    assert rows[0]["water_temp_c"] == "18.5"
    r = run_cli("trip", "export", trip.id, "--format", "csv", "--full-precision", data_dir=data)
    assert r.returncode == 0, r.stderr
    assert "18.46" in r.stdout and "full precision as stored" in r.stdout
    r = run_cli("export", "season", "--out", str(tmp_path / "season"), "--xlsx", data_dir=data)
    assert r.returncode == 0, r.stderr
    assert path.read_bytes() == before


def test_season_csv_and_workbook_round_and_full_precision_keeps_stored(store, trip, tmp_path):
    stored = store.load_trip(trip.id).stops
    data = store.data_dir
    store.close()
    out, full = tmp_path / "season", tmp_path / "season-full"
    assert run_cli("export", "season", "--out", str(out), "--xlsx", data_dir=data).returncode == 0
    r = run_cli("export", "season", "--out", str(full), "--xlsx", "--full-precision", data_dir=data)
    assert r.returncode == 0, r.stderr
    rows = _stops((out / "stops.csv").read_text(encoding="utf-8"))
    assert [x["water_temp_c"] for x in rows] == ["18.5", "12.3"]
    assert rows[0]["meter_do_mg_l"] == "8.4" and rows[1]["meter_do_percent"] == "95"
    assert rows[0]["conductivity_us_cm"] == "413" and rows[0]["station_pressure_hpa"] == "1002.6"
    assert re.fullmatch(r"\d+", rows[0]["percent_saturation"])  # whole percent
    assert rows[0]["rounding"].startswith("reported: DO 0.1 mg/L")
    ws = load_workbook(out / "season.xlsx")["stops"]
    head = [c.value for c in ws[1]]
    temp = ws.cell(row=2, column=head.index("water_temp_c") + 1)
    assert temp.value == 18.5 and temp.number_format == "0.0"  # a number, shown with one decimal
    pct = ws.cell(row=2, column=head.index("percent_saturation") + 1)
    assert isinstance(pct.value, int) and pct.number_format == "0"
    # full precision: the stored values, in CSV and workbook alike
    rows = _stops((full / "stops.csv").read_text(encoding="utf-8"))
    assert [float(x["water_temp_c"]) for x in rows] == [s.temp.value for s in stored]
    assert float(rows[0]["do_sat_mg_l"]) == stored[0].derived.do_sat_mg_l
    assert rows[0]["rounding"] == "full precision as stored"
    ws = load_workbook(full / "season.xlsx")["stops"]
    assert ws.cell(row=2, column=head.index("station_pressure_hpa") + 1).value == stored[0].pressure.value


def test_rounding_for_reads_only_known_keys_in_range():
    # a program file from elsewhere may carry keys this version does not know; they are passed over
    s = ProgramSettings(reporting_decimals={"do_mg_l": 3, "salinity": 1, "depth_m": 2, "temp_c": 9})
    r = rounding_for(s)
    assert (r.do_mg_l, r.salinity, r.temp_c) == (3, 1, Rounding().temp_c)
