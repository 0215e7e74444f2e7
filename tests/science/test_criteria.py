"""Aquatic-life DO criteria flags (defaults: EPA 1986 [from memory] / common practice)."""
from __future__ import annotations

import pytest

from core.science.criteria import Criteria, do_criteria_flags
from core.flags import Severity


def test_defaults_are_the_documented_values():
    # warm 5.0 mg/L: many state standards [common practice]; cold 6.5 mg/L: EPA 440/5-86-003 30-day mean
    # [from memory]; supersaturation 120 % and hypoxia 2 mg/L [common practice]
    c = Criteria()
    assert (c.warm_min_mg_l, c.cold_min_mg_l, c.supersaturation_percent, c.hypoxic_mg_l) == (5.0, 6.5, 120.0, 2.0)


@pytest.mark.parametrize("do, cls, want", [
    (4.9, "warm", ["do.below_criterion"]), (5.0, "warm", []), (6.0, "cold", ["do.below_criterion"]),
    (6.0, "warm", []), (1.5, "cold", ["do.hypoxic", "do.below_criterion"]), (1.5, None, ["do.hypoxic"]),
    (6.4, None, []),
])
def test_below_criterion_and_hypoxic(do, cls, want):
    flags = do_criteria_flags(do, 80.0, cls, Criteria())
    assert [f.code for f in flags] == want
    for f in flags:
        assert "program's own standard decides" in f.message


def test_supersaturation_and_program_settings():
    # common practice: above 120 % saturation is flagged; a program may choose its own threshold
    assert [f.code for f in do_criteria_flags(11.0, 121.0, "warm", Criteria())] == ["do.supersaturated"]
    assert do_criteria_flags(11.0, 120.0, "warm", Criteria()) == []
    assert do_criteria_flags(11.0, 115.0, "warm", Criteria(supersaturation_percent=110.0))[0].code == \
        "do.supersaturated"
    assert do_criteria_flags(5.5, None, "warm", Criteria(warm_min_mg_l=6.0))[0].code == "do.below_criterion"
    assert do_criteria_flags(1.0, None, None, Criteria())[0].severity is Severity.STOP


def test_refusals():
    with pytest.raises(ValueError, match="water_class"):
        do_criteria_flags(5.0, 50.0, "lukewarm", Criteria())
    with pytest.raises(ValueError, match="^do_mg_l"):
        do_criteria_flags(-1.0, 50.0, "warm", Criteria())
    with pytest.raises(ValueError, match="^warm_min_mg_l"):
        Criteria(warm_min_mg_l=float("nan"))
