"""Aquatic-life DO criteria flags (defaults: EPA 1986 [from memory] / common practice)."""

from __future__ import annotations

import pytest

from core.flags import Severity
from core.science.criteria import Criteria, do_criteria_flags


def test_defaults_are_the_documented_values():
    # warm 5.0 mg/L: many state standards [common practice]; cold 6.5 mg/L: EPA 440/5-86-003 30-day mean
    # [from memory]; supersaturation 120 % and hypoxia 2 mg/L [common practice]
    c = Criteria()
    assert (c.warm_min_mg_l, c.cold_min_mg_l, c.supersaturation_percent, c.hypoxic_mg_l) == (5.0, 6.5, 120.0, 2.0)


@pytest.mark.parametrize(
    "do, cls, want",
    [
        (4.9, "warm", ["do.below_criterion"]),
        (5.0, "warm", []),
        (6.0, "cold", ["do.below_criterion"]),
        (6.0, "warm", []),
        (1.5, "cold", ["do.hypoxic", "do.below_criterion", "do.below_1day_minimum"]),
        (1.5, None, ["do.hypoxic"]),
        (6.4, None, []),
    ],
)
def test_below_criterion_and_hypoxic(do, cls, want):
    flags = do_criteria_flags(do, 80.0, cls, Criteria())
    assert [f.code for f in flags] == want
    for f in flags:
        assert "program's own standard decides" in f.message


def test_supersaturation_and_program_settings():
    # common practice: above 120 % saturation is flagged; a program may choose its own threshold
    assert [f.code for f in do_criteria_flags(11.0, 121.0, "warm", Criteria())] == ["do.supersaturated"]
    assert do_criteria_flags(11.0, 120.0, "warm", Criteria()) == []
    assert (
        do_criteria_flags(11.0, 115.0, "warm", Criteria(supersaturation_percent=110.0))[0].code == "do.supersaturated"
    )
    assert do_criteria_flags(5.5, None, "warm", Criteria(warm_min_mg_l=6.0))[0].code == "do.below_criterion"
    assert do_criteria_flags(1.0, None, None, Criteria())[0].severity is Severity.STOP


def test_refusals():
    with pytest.raises(ValueError, match="water_class"):
        do_criteria_flags(5.0, 50.0, "lukewarm", Criteria())
    with pytest.raises(ValueError, match="^do_mg_l"):
        do_criteria_flags(-1.0, 50.0, "warm", Criteria())
    with pytest.raises(ValueError, match="^warm_min_mg_l"):
        Criteria(warm_min_mg_l=float("nan"))


# --- life stage and averaging period: US EPA 440/5-86-003 (1986) [from memory] -------------------------------


def _codes(flags):
    return [f.code for f in flags]


def test_spot_reading_against_the_1_day_minimum_by_life_stage():
    from core.science.criteria import EPA_1986_MG_L, Criteria, do_criteria_flags

    # cold water, other life stages: 1-day minimum 4.0 mg/L (EPA 1986, from memory)
    assert EPA_1986_MG_L[("cold", "other")]["1-day minimum"] == 4.0
    low = do_criteria_flags(3.8, None, "cold", Criteria())
    f = [x for x in low if x.code == "do.below_1day_minimum"]
    assert f and "1-day minimum of 4 mg/L" in f[0].message and "continuous data" in f[0].message
    assert "cold water, other life stages" in f[0].message
    assert "do.below_1day_minimum" not in _codes(do_criteria_flags(4.2, None, "cold", Criteria()))
    # early life stages, cold water: 1-day minimum 8.0 (water column) — 7.5 fires there, not for other stages
    early = Criteria(life_stage="early")
    assert "do.below_1day_minimum" in _codes(do_criteria_flags(7.5, None, "cold", early))
    assert "do.below_1day_minimum" not in _codes(do_criteria_flags(7.5, None, "cold", Criteria()))
    # warm water: 3.0 (other) and 5.0 (early)
    assert "do.below_1day_minimum" in _codes(do_criteria_flags(4.5, None, "warm", Criteria(life_stage="early")))
    assert "do.below_1day_minimum" not in _codes(do_criteria_flags(4.5, None, "warm", Criteria()))
    # no class: no criterion applies
    assert "do.below_1day_minimum" not in _codes(do_criteria_flags(1.0, None, None, Criteria()))


def test_life_stage_is_a_program_setting():
    import pytest

    from core.records.models import ProgramSettings
    from core.science.criteria import Criteria

    assert ProgramSettings(life_stage="early").criteria().life_stage == "early"
    assert ProgramSettings().criteria().life_stage == "other"
    with pytest.raises(ValueError, match="life_stage"):
        Criteria(life_stage="juvenile")
