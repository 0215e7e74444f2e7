"""BOD5 by dilution (Standard Methods 5210 B [from memory except where marked])."""
from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.science.bod import (bod_dilution, bod_from_dilutions, blank_check, gga_check, incubation_check,
                      seed_uptake_per_ml)


def test_unseeded():
    # 5210 B: BOD5 = (D1 − D2)/P; 30 mL in 300 mL (P = 0.1), 8.6 -> 4.1 gives 45 mg/L
    d = bod_dilution(8.6, 4.1, 30.0)
    assert d.bod_mg_l == pytest.approx(45.0) and d.depletion_mg_l == pytest.approx(4.5)
    assert d.valid and d.flags == []


def test_seeded():
    # 5210 B: BOD5 = [(D1 − D2) − S·Vs]/P; S = 0.35 mg/L per mL, Vs = 2 mL -> 0.7 mg/L seed correction
    d = bod_dilution(8.6, 4.1, 30.0, seed_ml=2.0, seed_uptake_mg_l_per_ml=0.35)
    assert d.bod_mg_l == pytest.approx((4.5 - 0.7) / 0.1) and d.valid
    assert d.seed_correction_mg_l == pytest.approx(0.7)
    # 5210 B: seed correction should be 0.6–1.0 mg/L per bottle
    w = bod_dilution(8.6, 4.1, 30.0, seed_ml=1.0, seed_uptake_mg_l_per_ml=0.35)
    assert [f.code for f in w.flags] == ["bod.seed_correction_out_of_range"] and w.valid


def test_validity_rules():
    # 5210 B: valid only with depletion ≥ 2.0 mg/L and residual ≥ 1.0 mg/L
    small = bod_dilution(8.6, 7.0, 30.0)
    assert not small.valid and [f.code for f in small.flags] == ["bod.depletion_too_small"]
    assert small.bod_mg_l == pytest.approx(16.0)  # still computed, never hidden
    low = bod_dilution(8.6, 0.5, 30.0)
    assert not low.valid and [f.code for f in low.flags] == ["bod.residual_too_low"]
    assert bod_dilution(4.1, 2.1, 30.0).valid  # exactly 2.0 depletion, though 4.1 - 2.1 < 2.0 in binary floats
    assert bod_dilution(8.6, 1.0, 30.0).valid  # exactly 1.0 residual


def test_average_of_valid_dilutions():
    # 5210 B: average the valid dilutions
    r = bod_from_dilutions([
        dict(initial_do_mg_l=8.6, final_do_mg_l=7.9, sample_ml=10.0),   # depletion 0.7: invalid
        dict(initial_do_mg_l=8.6, final_do_mg_l=6.1, sample_ml=30.0),   # 25 mg/L
        dict(initial_do_mg_l=8.5, final_do_mg_l=3.3, sample_ml=60.0),   # 26 mg/L
        dict(initial_do_mg_l=8.5, final_do_mg_l=0.4, sample_ml=120.0),  # residual too low: invalid
    ])
    assert r.valid and r.bod_mg_l == pytest.approx((25.0 + 26.0) / 2)
    assert [d.valid for d in r.dilutions] == [False, True, True, False]
    assert {f.code for f in r.flags} == {"bod.depletion_too_small", "bod.residual_too_low"}


def test_no_valid_dilution():
    r = bod_from_dilutions([dict(initial_do_mg_l=8.6, final_do_mg_l=8.0, sample_ml=300.0)])
    assert r.bod_mg_l is None and not r.valid
    assert r.flags[-1].code == "bod.no_valid_dilution"
    # common practice: a clean stream's BOD5 is under about 1 mg/L: undiluted 300 mL shows 0.6 mg/L here
    assert r.dilutions[0].bod_mg_l == pytest.approx(0.6)


@pytest.mark.parametrize("dils, word", [
    ([], "empty"), ([dict(initial_do_mg_l=8.0, sample_ml=30.0)], "final_do_mg_l"),
    ([dict(initial_do_mg_l=8.0, final_do_mg_l=4.0, sample_ml=30.0, colour="blue")], "unknown key"),
    ([dict(initial_do_mg_l=8.0, final_do_mg_l=4.0, sample_ml=400.0)], "bottle_ml"),
    ([dict(initial_do_mg_l=-8.0, final_do_mg_l=4.0, sample_ml=30.0)], "initial_do_mg_l"),
    ([dict(initial_do_mg_l=8.0, final_do_mg_l=4.0, sample_ml=30.0, seed_ml=2.0)], "seed_uptake"),
    (["8.0"], "not an object"),
])
def test_dilution_refusals(dils, word):
    with pytest.raises(ValueError, match=word):
        bod_from_dilutions(dils)


def test_seed_uptake_per_ml():
    # 5210 B: S = (D1 − D2)/Vs over valid seed controls, averaged
    s = seed_uptake_per_ml([dict(initial_do_mg_l=8.7, final_do_mg_l=4.7, seed_ml=10.0),
                            dict(initial_do_mg_l=8.7, final_do_mg_l=2.7, seed_ml=15.0),
                            dict(initial_do_mg_l=8.7, final_do_mg_l=8.0, seed_ml=3.0)])  # too little: ignored
    assert s == pytest.approx((0.4 + 0.4) / 2)
    with pytest.raises(ValueError, match="no seed control"):
        seed_uptake_per_ml([dict(initial_do_mg_l=8.7, final_do_mg_l=8.0, seed_ml=3.0)])
    with pytest.raises(ValueError, match="seed_ml"):
        seed_uptake_per_ml([dict(initial_do_mg_l=8.7, final_do_mg_l=4.0, seed_ml=0.0)])


def test_blank_and_gga():
    # 5210 B (21st ed. summary): blank ≤ 0.20 mg/L; GGA 198 ± 30.5 = 167.5–228.5 mg/L
    assert blank_check(0.20) is None and blank_check(0.05) is None
    assert blank_check(0.21).code == "bod.blank_depletion"
    assert gga_check(167.5) is None and gga_check(228.5) is None and gga_check(198.0) is None
    assert gga_check(167.4).code == "bod.gga_out_of_range" and gga_check(230.0).code == "bod.gga_out_of_range"


def test_incubation_window():
    # 5210 B: 5 d ± 6 h [from memory]
    t0 = datetime(2026, 6, 1, 9, 0, tzinfo=timezone.utc)
    assert incubation_check(t0, t0 + timedelta(days=5)) is None
    assert incubation_check(t0, t0 + timedelta(days=5, hours=6)) is None
    assert incubation_check(t0, t0 + timedelta(days=5, hours=-6)) is None
    assert incubation_check(t0, t0 + timedelta(days=5, hours=6, minutes=1)).code == "bod.incubation_time"
    assert incubation_check(t0, t0 + timedelta(days=4)).code == "bod.incubation_time"
    with pytest.raises(ValueError, match="before"):
        incubation_check(t0, t0 - timedelta(hours=1))
    with pytest.raises(ValueError, match="time zone"):
        incubation_check(t0, datetime(2026, 6, 6, 9, 0))
