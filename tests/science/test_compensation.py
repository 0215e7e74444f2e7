"""Conductivity compensation as a program setting: linear α limited to 0.015–0.030 /°C, or the ISO 7888
table (Standard Methods 2510 B [from memory]; Hayashi 2004 for natural waters; ISO 7888:1985)."""

from __future__ import annotations

from datetime import datetime, timezone

import numpy as np
import pytest

from core.records.models import ProgramSettings, Site, Stop, Trip, measure
from core.rules.qc import derive_trip
from core.science.assess import assess_reading
from core.science.conductivity import ALPHA_RANGE_PER_C, iso7888_f25, specific_conductance_us_cm

T0 = datetime(2026, 6, 14, 9, 0, tzinfo=timezone.utc)


@pytest.mark.parametrize("alpha", [0.0, 0.014, 0.031, 0.1, -0.02])
def test_alpha_outside_the_range_is_refused(alpha):
    with pytest.raises(ValueError, match="^alpha"):
        specific_conductance_us_cm(410.0, 10.0, alpha=alpha)


def test_no_accepted_alpha_makes_the_denominator_zero_or_negative():
    # 1 + α(t − 25) at the coldest accepted water (−5 °C) and the largest α
    t = np.linspace(-5.0, 90.0, 400)
    for a in np.linspace(*ALPHA_RANGE_PER_C, 7):
        sc = specific_conductance_us_cm(np.full_like(t, 410.0), t, alpha=float(a))
        assert np.all(np.isfinite(sc)) and np.all(sc > 0)


def test_program_setting_chooses_the_compensation():
    def sc(settings):
        stop = Stop(
            site_id="LK-1",
            arrived_at=T0,
            temp=measure("temp", "10 °C"),
            pressure=measure("pressure", "1000 hPa"),
            conductivity=measure("conductivity", "300 uS/cm"),
        )
        trip = Trip(started_at=T0, stops=[stop])
        return derive_trip(trip, {"LK-1": Site(id="LK-1", name="x", elevation_m=100.0)}, settings).stops[0].derived

    # linear: κ25 = κt / [1 + α(t − 25)]
    assert sc(ProgramSettings()).specific_conductance_us_cm == pytest.approx(300 / (1 - 0.0191 * 15))
    assert sc(ProgramSettings(conductivity_alpha_per_c=0.0187)).specific_conductance_us_cm == pytest.approx(
        300 / (1 - 0.0187 * 15)
    )  # Hayashi 2004 mean
    # ISO 7888: f25(10 °C) = 1.428 [memory for the table value]
    iso = sc(ProgramSettings(conductivity_compensation="iso7888"))
    assert iso.specific_conductance_us_cm == pytest.approx(300 * float(iso7888_f25(10.0)))
    assert float(iso7888_f25(10.0)) == pytest.approx(1.428, abs=0.002)
    with pytest.raises(ValueError):
        ProgramSettings(conductivity_alpha_per_c=0.05)


def test_iso_table_outside_its_range_falls_back_with_a_note():
    a = assess_reading(37.0, 1000.0, conductivity_us_cm=300.0, compensation="iso7888")
    assert "conductivity.compensation_linear" in [f.code for f in a.flags]
    assert a.specific_conductance_us_cm == pytest.approx(300 / (1 + 0.0191 * 12))
    inside = assess_reading(20.0, 1000.0, conductivity_us_cm=300.0, compensation="iso7888")
    assert "conductivity.compensation_linear" not in [f.code for f in inside.flags]
