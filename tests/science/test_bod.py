"""BOD5 by dilution (Standard Methods 5210 B [from memory except where marked])."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.science.bod import (
    AGREEMENT_SPREAD,
    blank_check,
    bod_dilution,
    bod_from_dilutions,
    bod_report,
    gga_check,
    incubation_check,
    seed_uptake_per_ml,
)


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
    r = bod_from_dilutions(
        [
            dict(initial_do_mg_l=8.6, final_do_mg_l=7.9, sample_ml=10.0),  # depletion 0.7: invalid
            dict(initial_do_mg_l=8.6, final_do_mg_l=6.1, sample_ml=30.0),  # 25 mg/L
            dict(initial_do_mg_l=8.5, final_do_mg_l=3.3, sample_ml=60.0),  # 26 mg/L
            dict(initial_do_mg_l=8.5, final_do_mg_l=0.4, sample_ml=120.0),  # residual too low: invalid
        ]
    )
    assert r.valid and r.bod_mg_l == pytest.approx((25.0 + 26.0) / 2)
    assert [d.valid for d in r.dilutions] == [False, True, True, False]
    assert {f.code for f in r.flags} == {"bod.depletion_too_small", "bod.residual_too_low"}


def test_no_valid_dilution():
    r = bod_from_dilutions([dict(initial_do_mg_l=8.6, final_do_mg_l=8.0, sample_ml=300.0)])
    assert r.bod_mg_l is None and not r.valid
    # 5210 B [from memory]: no dilution depleted 2.0 mg/L -> a reportable "< 2.0 mg/L" (undiluted)
    assert r.flags[-1].code == "bod.reported_below_bound" and r.report.text == "< 2.0 mg/L"
    # common practice: a clean stream's BOD5 is under about 1 mg/L: undiluted 300 mL shows 0.6 mg/L here
    assert r.dilutions[0].bod_mg_l == pytest.approx(0.6)


@pytest.mark.parametrize(
    "dils, word",
    [
        ([], "empty"),
        ([dict(initial_do_mg_l=8.0, sample_ml=30.0)], "final_do_mg_l"),
        ([dict(initial_do_mg_l=8.0, final_do_mg_l=4.0, sample_ml=30.0, colour="blue")], "unknown key"),
        ([dict(initial_do_mg_l=8.0, final_do_mg_l=4.0, sample_ml=400.0)], "bottle_ml"),
        ([dict(initial_do_mg_l=-8.0, final_do_mg_l=4.0, sample_ml=30.0)], "initial_do_mg_l"),
        ([dict(initial_do_mg_l=8.0, final_do_mg_l=4.0, sample_ml=30.0, seed_ml=2.0)], "seed_uptake"),
        (["8.0"], "not an object"),
    ],
)
def test_dilution_refusals(dils, word):
    with pytest.raises(ValueError, match=word):
        bod_from_dilutions(dils)


def test_seed_uptake_per_ml():
    # 5210 B: S = (D1 − D2)/Vs over valid seed controls, averaged
    s = seed_uptake_per_ml(
        [
            dict(initial_do_mg_l=8.7, final_do_mg_l=4.7, seed_ml=10.0),
            dict(initial_do_mg_l=8.7, final_do_mg_l=2.7, seed_ml=15.0),
            dict(initial_do_mg_l=8.7, final_do_mg_l=8.0, seed_ml=3.0),
        ]
    )  # too little: ignored
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


# --- reporting (Standard Methods 5210 B [from memory]) -----------------------------------


def D(d1, d2, ml, bottle=300.0):
    return dict(initial_do_mg_l=d1, final_do_mg_l=d2, sample_ml=ml, bottle_ml=bottle)


def codes(r):
    return [f.code for f in r.flags]


def test_less_than_bound_from_the_largest_sample_volume():
    # 5210 B: no dilution depletes 2.0 mg/L -> "< 2.0 / P" with P from the largest sample volume
    r = bod_from_dilutions([D(8.6, 8.3, 60.0), D(8.6, 8.1, 150.0), D(8.6, 8.4, 30.0)])
    assert r.report.qualifier == "<" and r.report.value == pytest.approx(2.0 / 0.5) and r.report.text == "< 4.0 mg/L"
    assert "bod.reported_below_bound" in codes(r) and "bod.no_valid_dilution" not in codes(r)
    # not firing: one dilution reached 2.0 mg/L depletion -> a measured value, no qualifier
    ok = bod_from_dilutions([D(8.6, 8.3, 60.0), D(8.6, 6.6, 150.0)])
    assert ok.report.qualifier is None and ok.report.value == pytest.approx(2.0 / 0.5)
    assert "bod.reported_below_bound" not in codes(ok)


def test_greater_than_bound_from_the_smallest_sample_volume():
    # 5210 B: every dilution leaves < 1.0 mg/L -> "> (D1 − D2)/P" from the smallest sample volume
    r = bod_from_dilutions([D(8.6, 0.3, 15.0), D(8.6, 0.2, 6.0), D(8.6, 0.4, 30.0)])
    assert r.report.qualifier == ">" and r.report.value == pytest.approx((8.6 - 0.2) / 0.02)
    assert r.report.text == "> 420.0 mg/L" and "bod.reported_above_bound" in codes(r)
    # not firing: one bottle kept 1.0 mg/L and used 2.0 mg/L -> that dilution is the result
    ok = bod_from_dilutions([D(8.6, 0.3, 15.0), D(8.6, 1.0, 6.0)])
    assert ok.report.qualifier is None and ok.report.value == pytest.approx(7.6 / 0.02)
    assert "bod.reported_above_bound" not in codes(ok)


def test_dilution_trend_is_not_averaged():
    # 5210 B: average only without evidence of toxicity; 11, 35, 114 mg/L rising with dilution (the issue's
    # example) suggests a toxic sample or a seed problem
    r = bod_from_dilutions([D(8.6, 8.6 - 3.3, 90.0), D(8.6, 8.6 - 3.5, 30.0), D(8.6, 8.6 - 3.8, 10.0)])
    assert [round(d.bod_mg_l) for d in r.dilutions] == [11, 35, 114] and all(d.valid for d in r.dilutions)
    assert "bod.dilution_trend" in codes(r) and r.report.value is None and r.report.basis == "trend"
    assert "rises" in r.report.text and "10 mL" in r.report.text
    assert r.bod_mg_l is not None  # the plain mean is still there, never hidden, but not the report
    # not firing: dilutions that agree within the spread are averaged (45 and 44 mg/L)
    ok = bod_from_dilutions([D(8.6, 4.1, 30.0), D(8.7, 6.5, 15.0)])
    assert "bod.dilution_trend" not in codes(ok) and ok.report.value == pytest.approx(44.5)
    assert ok.report.basis == "mean" and ok.report.text == "44.5 mg/L"


def test_disagreeing_dilutions_without_a_trend():
    # common practice (our 30 % spread): three valid dilutions, not monotone, far apart
    r = bod_from_dilutions([D(8.6, 1.6, 60.0), D(8.6, 6.2, 30.0), D(8.6, 6.6, 15.0)])  # 35, 24, 40 mg/L
    values = sorted(d.bod_mg_l for d in r.dilutions)
    assert (values[-1] - values[0]) / (sum(values) / 3) > AGREEMENT_SPREAD
    assert "bod.dilutions_disagree" in codes(r) and r.report.value is None


def test_initial_supersaturated_and_final_above_initial():
    # B&K 1984 / 4500-O:I: 9.092 mg/L at 20 °C, 1 atm; an initial DO above it is supersaturated
    hi = bod_dilution(9.6, 7.2, 30.0)
    assert "bod.initial_supersaturated" in [f.code for f in hi.flags] and "9.60" in hi.flags[0].message
    assert "bod.initial_supersaturated" not in [f.code for f in bod_dilution(9.0, 6.5, 30.0).flags]
    # a final DO above the initial cannot come from the sample (common practice)
    up = bod_dilution(8.2, 8.5, 300.0)
    assert "bod.final_above_initial" in [f.code for f in up.flags]
    assert "bod.final_above_initial" not in [f.code for f in bod_dilution(8.2, 8.2, 300.0).flags]


def test_negative_blank_depletion_is_flagged_in_words():
    # a blank cannot gain oxygen (common practice); 5210 B limit 0.20 mg/L on the other side
    f = blank_check(-0.15)
    assert f is not None and f.code == "bod.blank_negative" and "gained oxygen" in f.message
    assert blank_check(0.0) is None and blank_check(0.1) is None


def test_cbod5_is_its_own_analyte():
    # 5210 B: with a nitrification inhibitor the result is CBOD5, reported as its own parameter
    r = bod_from_dilutions([D(8.6, 4.1, 30.0)], nitrification_inhibitor=True)
    assert r.analyte == "CBOD5" and r.report.analyte == "CBOD5"
    assert bod_from_dilutions([D(8.6, 4.1, 30.0)]).analyte == "BOD5"
    with pytest.raises(ValueError):
        bod_report([], "BOD5")
