"""Winkler titration, azide modification (Standard Methods 4500-O C [from memory])."""

from __future__ import annotations

import numpy as np
import pytest

from core.science.winkler import expected_titrant_ml, original_sample_ml, thiosulfate_normality, winkler_do_mg_l


def test_one_ml_of_0025n_is_one_mg_per_l_for_200ml_original():
    # Standard Methods 4500-O C: with 200 mL original sample and 0.025 N thiosulfate, 1 mL = 1 mg/L
    titrated = 200.0 * 300.0 / 298.0  # the volume that holds 200 mL of original sample (1 + 1 mL reagents)
    assert original_sample_ml(titrated, 300.0, 2.0) == pytest.approx(200.0)
    for ml in (1.0, 7.3, 9.1):
        assert winkler_do_mg_l(ml, 0.025, titrated, 300.0, 2.0) == pytest.approx(ml, rel=1e-12)
    # no displacement correction: titrating exactly 200 mL of an unfixed volume
    assert winkler_do_mg_l(1.0, 0.025, 200.0, 300.0, 0.0) == pytest.approx(1.0)


def test_displacement_examples():
    # Standard Methods 4500-O C: 1 + 1 mL reagents -> titrate 201 mL for 200 mL; 2 + 2 mL -> about 203 mL
    assert original_sample_ml(201.0, 300.0, 2.0) == pytest.approx(200.0, abs=0.5)
    assert original_sample_ml(203.0, 300.0, 4.0) == pytest.approx(200.0, abs=0.5)


def test_thiosulfate_normality_from_bi_iodate():
    # Standard Methods 4500-O C: 20.00 mL of 0.02500 N KH(IO3)2; N = 0.025 · 20 / V
    assert thiosulfate_normality(20.0) == pytest.approx(0.025)
    assert thiosulfate_normality(19.6) == pytest.approx(0.025 * 20.0 / 19.6)


def test_inverse_agrees():
    # algebraic inverse of DO = V·N·8000/V_original (4500-O C)
    v = np.array([0.5, 7.3, 12.0])
    do = winkler_do_mg_l(v, 0.0245, 203.0, 300.0, 4.0)
    assert np.allclose(expected_titrant_ml(do, 0.0245, 203.0, 300.0, 4.0), v)


@pytest.mark.parametrize(
    "kw, name",
    [
        (dict(titrant_ml=-0.1), "titrant_ml"),
        (dict(normality=0.0), "normality"),
        (dict(titrated_ml=0.0), "titrated_ml"),
        (dict(titrated_ml=350.0), "titrated_ml"),
        (dict(reagents_ml=300.0), "reagents_ml"),
        (dict(bottle_ml=float("nan")), "bottle_ml"),
    ],
)
def test_refusals(kw, name):
    args = dict(titrant_ml=7.3, normality=0.025, titrated_ml=201.0, bottle_ml=300.0, reagents_ml=2.0)
    args.update(kw)
    with pytest.raises(ValueError, match=f"^{name}"):
        winkler_do_mg_l(**args)


# --- plausibility (Standard Methods 4500-O C [from memory]; limits common practice) -------------------------


def test_winkler_plausibility_fires_and_not():
    from datetime import datetime, timedelta, timezone

    from core.science.winkler import winkler_plausibility_flags as wp

    t0 = datetime(2026, 6, 14, 9, 0, tzinfo=timezone.utc)
    assert wp(do_mg_l=8.4, normality=0.025, collected_at=t0, fixed_at=t0 + timedelta(minutes=5)) == []
    assert [f.code for f in wp(normality=0.25)] == ["winkler.normality_unusual"]  # 0.25 typed for 0.025
    assert [f.code for f in wp(normality=0.0025)] == ["winkler.normality_unusual"]
    assert wp(normality=0.0245) == []  # a standardised 0.0245 N
    big = wp(do_mg_l=73.0)  # 7.3 mL at 0.25 N
    assert [f.code for f in big] == ["winkler.do_implausible"] and big[0].severity.value == "stop-and-check"
    late = wp(collected_at=t0, fixed_at=t0 + timedelta(hours=2))
    assert [f.code for f in late] == ["winkler.late_fixing"] and "120 min" in late[0].message
    assert "collection" in late[0].message


def test_standalone_winkler_shows_the_flags():
    from tests.science.test_cli import run_json

    d = run_json("winkler", "--titrant-ml", "7.3", "--normality", "0.25", "--titrated-ml", "201")
    assert [f["code"] for f in d["flags"]] == ["winkler.normality_unusual", "winkler.do_implausible"]
