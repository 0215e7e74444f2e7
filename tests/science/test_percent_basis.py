"""The meter's % basis: saturation at the local pressure, or at 760 mmHg (team science reference §10 [memory];
the conversion mg/L = % × saturation at the basis pressure, Benson & Krause 1984 for the saturation)."""

from __future__ import annotations

import json
from datetime import datetime, timezone

import pytest

from core.records.models import ProgramSettings, Site, Stop, Trip, measure
from core.rules.qc import derive_trip
from core.science.assess import assess_reading
from core.science.oxygen import do_saturation_mg_l, meter_percent_to_mg_l
from tests.science.test_cli import run, run_json

T0 = datetime(2026, 6, 14, 9, 0, tzinfo=timezone.utc)
P_2000M = 795.0  # about the standard atmosphere at 2000 m (US Standard Atmosphere 1976: 794.95 hPa)


def test_sea_level_basis_at_altitude_gives_the_right_mg_l():
    # a 760-mmHg meter reading 92 % means 92 % of saturation at 1013.25 hPa, whatever the station pressure
    sea = meter_percent_to_mg_l(92.0, 15.0, P_2000M, basis="sea-level")
    local = meter_percent_to_mg_l(92.0, 15.0, P_2000M, basis="local")
    assert sea == pytest.approx(0.92 * do_saturation_mg_l(15.0, 1013.25, 0.0), rel=1e-12)
    assert local == pytest.approx(0.92 * do_saturation_mg_l(15.0, P_2000M, 0.0), rel=1e-12)
    # US Standard Atmosphere 1976: about 795 hPa at 2000 m, so the two bases differ by about 22 % (795/1013 = 0.785)
    assert 1 - local / sea == pytest.approx(0.22, abs=0.01)
    # at sea level the basis does not matter (the rule not firing)
    assert meter_percent_to_mg_l(92.0, 15.0, 1013.25, basis="sea-level") == pytest.approx(
        meter_percent_to_mg_l(92.0, 15.0, 1013.25, basis="local"), rel=1e-12
    )


def test_assess_reports_percent_against_local_and_says_so():
    a = assess_reading(15.0, P_2000M, do_percent=92.0, percent_basis="sea-level")
    assert a.do_mg_l == pytest.approx(0.92 * do_saturation_mg_l(15.0, 1013.25, 0.0), rel=1e-12)
    assert a.percent_saturation == pytest.approx(100 * a.do_mg_l / a.do_sat_mg_l, rel=1e-12)
    assert "do.percent_basis_sea_level" in [f.code for f in a.flags]
    local = assess_reading(15.0, P_2000M, do_percent=92.0)
    assert local.percent_saturation == 92.0 and "do.percent_basis_sea_level" not in [f.code for f in local.flags]
    with pytest.raises(ValueError, match="percent_basis"):
        assess_reading(15.0, P_2000M, do_percent=92.0, percent_basis="760")


def test_cli_percent_basis_and_both_do_fields():
    d = run_json("sat", "--temp", "15", "--pressure", "795 hPa", "--do", "92 %", "--percent-basis", "sea-level")
    assert d["do_mg_l"] == pytest.approx(0.92 * do_saturation_mg_l(15.0, 1013.25, 0.0), rel=1e-9)
    assert d["percent_saturation"] == pytest.approx(100 * d["do_mg_l"] / d["do_sat_mg_l"], rel=1e-9)
    dflt = run_json("sat", "--temp", "15", "--pressure", "795 hPa", "--do", "92 %")
    assert dflt["percent_basis"] == "local" and dflt["percent_saturation"] == 92.0
    assert dflt["do_mg_l"] == pytest.approx(0.92 * dflt["do_sat_mg_l"], rel=1e-12)
    mg = run_json("sat", "--temp", "15", "--pressure", "795 hPa", "--do", "8.1")
    assert mg["do_mg_l"] == 8.1 and mg["percent_saturation"] == pytest.approx(100 * 8.1 / mg["do_sat_mg_l"])
    code, _, err = run("sat", "--temp", "15", "--pressure", "795 hPa", "--percent-basis", "760")
    assert code == 2 and "--percent-basis" in err


def _trip(basis=None):
    stop = Stop(
        site_id="HI-1",
        arrived_at=T0,
        temp=measure("temp", "15 °C"),
        pressure=measure("pressure", "795 hPa"),
        do=measure("do", "92 %"),
    )
    return Trip(started_at=T0, stops=[stop], meter_percent_basis=basis)


def test_trip_meter_basis_overrides_the_program_setting():
    sites = {"HI-1": Site(id="HI-1", name="High", elevation_m=2000.0)}
    want_sea = 0.92 * do_saturation_mg_l(15.0, 1013.25, 0.0)
    want_local = 0.92 * do_saturation_mg_l(15.0, 795.0, 0.0)
    program_sea = ProgramSettings(percent_basis="sea-level")
    assert derive_trip(_trip(), sites, ProgramSettings()).stops[0].derived.do_mg_l == pytest.approx(want_local)
    assert derive_trip(_trip(), sites, program_sea).stops[0].derived.do_mg_l == pytest.approx(want_sea)
    assert derive_trip(_trip("local"), sites, program_sea).stops[0].derived.do_mg_l == pytest.approx(want_local)
    assert derive_trip(_trip("sea-level"), sites, ProgramSettings()).stops[0].derived.do_mg_l == pytest.approx(want_sea)
    # older documents (no field) still validate; the field round-trips
    doc = _trip("sea-level").to_document()
    assert Trip.from_document(json.loads(json.dumps(doc))).meter_percent_basis == "sea-level"
