"""Holding times (40 CFR 136.3 Table II [from memory]) and program SOP overrides."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.flags import Severity
from core.science.holding import BOTTLE_HOLDING, HOLDING_TIMES, bottle_holding_kind, holding_clock

T0 = datetime(2026, 6, 1, 8, 0, tzinfo=timezone.utc)


def test_table_values_and_citations():
    # 40 CFR 136.3 Table II [from memory]: DO probe 15 min, Winkler 8 h, BOD 48 h, SC 28 d, temperature 15 min
    want = {"do_probe": 0.25, "do_winkler": 8.0, "bod": 48.0, "specific_conductance": 672.0, "temperature": 0.25}
    assert {k: r.hours for k, r in HOLDING_TIMES.items()} == want
    for r in HOLDING_TIMES.values():
        assert "40 CFR 136.3" in r.citation and r.preservation
    assert "6 °C" in HOLDING_TIMES["bod"].preservation


def test_clock_states():
    c = holding_clock("bod", T0, T0 + timedelta(hours=10))
    assert c.deadline == T0 + timedelta(hours=48) and c.remaining_s == 38 * 3600 and not c.expired
    assert c.flag is None
    soon = holding_clock("bod", T0, T0 + timedelta(hours=37))  # 11 h left < 25 % of 48 h
    assert soon.flag.code == "holding.soon" and soon.flag.severity is Severity.WARNING
    late = holding_clock("bod", T0, T0 + timedelta(hours=49))
    assert late.expired and late.remaining_s == -3600 and late.flag.code == "holding.expired"
    assert late.flag.severity is Severity.STOP


def test_winkler_clock_from_collection():
    # 40 CFR 136.3 Table II: Winkler samples are fixed on site, 8 h [from memory]; the clock runs from
    # collection (team science reference §10), so a late fixing buys no time
    fixed = T0 + timedelta(minutes=5)
    c = holding_clock("do_winkler", T0, T0 + timedelta(hours=8, minutes=2), fixed_at=fixed)
    assert c.deadline == T0 + timedelta(hours=8) and c.expired and c.rule.clock_from == "collection"
    assert not holding_clock("do_winkler", T0, T0 + timedelta(hours=7, minutes=59), fixed_at=fixed).expired


def test_sop_override():
    c = holding_clock("bod", T0, T0 + timedelta(hours=25), overrides={"bod": 24})
    assert c.expired and "SOP" in c.rule.citation
    assert holding_clock("do_probe", T0, T0 + timedelta(minutes=20), overrides={"bod": 24}).expired


@pytest.mark.parametrize(
    "kw, word",
    [
        (dict(kind="ph"), "kind"),
        (dict(now=T0 - timedelta(minutes=1)), "before collected_at"),
        (dict(now=datetime(2026, 6, 1, 9, 0)), "time zone"),
        (dict(overrides={"bod": -1}), "overrides"),
        (dict(overrides={"nitrate": 48}), "unknown kind"),
        (dict(fixed_at=T0 - timedelta(minutes=1)), "fixed_at"),
        (dict(collected_at="2026-06-01"), "collected_at"),
    ],
)
def test_refusals(kw, word):
    args = dict(kind="bod", collected_at=T0, now=T0 + timedelta(hours=1))
    args.update(kw)
    with pytest.raises(ValueError, match=word):
        holding_clock(**args)


@pytest.mark.parametrize(
    "kind,kw,expected",
    [
        # 40 CFR 136.3 Table II (from memory): a Winkler DO bottle keeps 8 h from fixing, a BOD bottle 48 h
        ("do-fixed", {}, "do_winkler"),
        ("bod", {}, "bod"),
        ("blank", {}, None),  # no holding time here: the SOP's
        # a duplicate follows the bottle it duplicates (common practice) ...
        ("duplicate", {"duplicates": "do-fixed"}, "do_winkler"),
        ("duplicate", {"duplicates": "bod", "fixed": True}, "bod"),
        # ... and, when that is not known, its fixing: Winkler samples are fixed on site, BOD samples never
        ("duplicate", {"fixed": True}, "do_winkler"),
        ("duplicate", {}, "bod"),
        ("duplicate", {"duplicates": "duplicate"}, "bod"),
    ],
)
def test_bottle_kinds_map_to_one_holding_time(kind, kw, expected):
    assert bottle_holding_kind(kind, **kw) == expected
    assert expected is None or expected in HOLDING_TIMES


def test_the_bottle_table_names_only_holding_times_that_exist():
    assert set(BOTTLE_HOLDING) == {"do-fixed", "bod", "blank"}
    assert all(v is None or v in HOLDING_TIMES for v in BOTTLE_HOLDING.values())
    with pytest.raises(ValueError, match="bottle kind 'jar' is not known; accepted: do-fixed, bod, blank"):
        bottle_holding_kind("jar")
