"""Sample holding times (40 CFR 136.3 Table II, overridable by a program's SOP) and the clock for each sample."""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import datetime, timedelta

from core.flags import Flag, Severity
from core.science._validate import real
from core.timefmt import when_text

__all__ = [
    "HoldingRule",
    "HoldingClock",
    "HOLDING_TIMES",
    "BOTTLE_HOLDING",
    "SOON_FRACTION",
    "bottle_holding_kind",
    "holding_clock",
]

_CFR = (
    "US 40 CFR 136.3, Table II (required containers, preservation techniques and holding times)"
    " [from memory; confirm wording]"
)


@dataclass(frozen=True)
class HoldingRule:
    """Maximum holding time of one kind of sample.

    Attributes
    ----------
    kind : str
        Key in :data:`HOLDING_TIMES`.
    label : str
        Plain name of the parameter.
    hours : float
        Maximum holding time, h.
    preservation : str
        Preservation required meanwhile.
    citation : str
        Where the value comes from (the regulation, or "program SOP" for an override).
    clock_from : {"collection", "fixing"}
        Which time the clock runs from (Winkler samples: from fixing when it is recorded).
    cool_max_c : float or None
        Highest temperature the sample may have on receipt, °C (None: no cooling asked for).
    no_freeze : bool
        The sample must not freeze (0 °C or below on receipt is flagged).
    """

    kind: str
    label: str
    hours: float
    preservation: str
    citation: str
    clock_from: str = "collection"
    cool_max_c: float | None = None
    no_freeze: bool = False


#: The regulation's table. A program's SOP may set other (usually stricter) limits through the
#: ``overrides`` argument of :func:`holding_clock`.
HOLDING_TIMES: dict[str, HoldingRule] = {
    "do_probe": HoldingRule("do_probe", "dissolved oxygen, probe", 0.25, "none; analyze on site", _CFR),
    # Fixing belongs on site at collection; the clock runs from collection [common practice],
    # so a late fixing never buys time. core.science.winkler flags the collection-to-fixing delay.
    "do_winkler": HoldingRule(
        "do_winkler", "dissolved oxygen, Winkler", 8.0, "fix on site and store in the dark", _CFR
    ),
    "bod": HoldingRule(
        "bod", "biochemical oxygen demand", 48.0, "cool to ≤ 6 °C, do not freeze", _CFR, cool_max_c=6.0, no_freeze=True
    ),
    "specific_conductance": HoldingRule(
        "specific_conductance", "specific conductance", 28 * 24.0, "cool to ≤ 6 °C", _CFR, cool_max_c=6.0
    ),
    "temperature": HoldingRule("temperature", "temperature", 0.25, "none; measure on site", _CFR),
}

#: The one table from a bottle's kind to the holding time it follows (a key of HOLDING_TIMES; None: no
#: holding time). The app's Bottles and End screens, the lab commands and QC all read it through
#: :func:`bottle_holding_kind`. A duplicate has no entry: it follows the bottle it duplicates.
#: A blank has none here: the program's SOP says how its blanks are kept. [common practice]
BOTTLE_HOLDING: dict[str, str | None] = {"do-fixed": "do_winkler", "bod": "bod", "blank": None}


def bottle_holding_kind(bottle_kind: str, *, duplicates: str | None = None, fixed: bool = False) -> str | None:
    """The holding time a bottle follows: a key of :data:`HOLDING_TIMES`, or None for none.

    Parameters
    ----------
    bottle_kind : {"do-fixed", "bod", "duplicate", "blank"}
        The bottle's kind as recorded.
    duplicates : str, optional
        For a duplicate, the kind of bottle it duplicates when that is known (its ``duplicate_of``
        bottle, or the analysis of its results).
    fixed : bool
        Whether the bottle was fixed on site. A duplicate whose original is not known follows its
        fixing: fixed → a Winkler DO bottle, not fixed → a BOD bottle (a Winkler sample is fixed on
        site, a BOD sample never is). [common practice]

    Raises
    ------
    ValueError
        An unknown bottle kind.
    """
    if bottle_kind == "duplicate":
        if duplicates is not None and duplicates != "duplicate":
            return bottle_holding_kind(duplicates, fixed=fixed)
        return BOTTLE_HOLDING["do-fixed"] if fixed else BOTTLE_HOLDING["bod"]
    if bottle_kind not in BOTTLE_HOLDING:
        raise ValueError(
            f"bottle kind {bottle_kind!r} is not known; accepted: " + ", ".join([*BOTTLE_HOLDING, "duplicate"])
        )
    return BOTTLE_HOLDING[bottle_kind]


#: "Soon" means less than this fraction of the holding time is left. [common practice; our choice]
SOON_FRACTION = 0.25


@dataclass(frozen=True)
class HoldingClock:
    """Where a sample stands against its holding time (``remaining_s`` is negative once expired).

    ``clock_from`` says which time the clock ran from: "fixing" or "collection"."""

    kind: str
    deadline: datetime
    remaining_s: float
    expired: bool
    flag: Flag | None
    rule: HoldingRule
    clock_from: str = "collection"

    def to_dict(self) -> dict:
        return {
            "kind": self.kind,
            "deadline": self.deadline.isoformat(),
            "remaining_s": self.remaining_s,
            "expired": self.expired,
            "flag": None if self.flag is None else self.flag.to_dict(),
            "hours": self.rule.hours,
            "citation": self.rule.citation,
            "clock_from": self.clock_from,
        }


def _rule(kind: str, overrides: dict[str, float] | None) -> HoldingRule:
    if kind not in HOLDING_TIMES:
        raise ValueError(
            f"kind = {kind!r} is not a sample kind with a holding time; accepted: " + ", ".join(HOLDING_TIMES)
        )
    rule = HOLDING_TIMES[kind]
    if overrides:
        if not isinstance(overrides, dict):
            raise ValueError("overrides must map sample kinds to hours; accepted: e.g. {'bod': 24}")
        unknown = sorted(set(overrides) - set(HOLDING_TIMES))
        if unknown:
            raise ValueError(f"overrides has an unknown kind {unknown[0]!r}; accepted: " + ", ".join(HOLDING_TIMES))
        if kind in overrides:
            hours = real(overrides[kind], f"overrides[{kind!r}]", lo=0.0, hi=24 * 366.0, lo_open=True, unit="h")
            rule = replace(rule, hours=hours, citation=f"program SOP override (regulation: {rule.hours:g} h, {_CFR})")
    return rule


def _fmt(seconds: float) -> str:
    s = abs(seconds)
    if s < 3600:
        return f"{s / 60:.0f} min"
    if s < 72 * 3600:
        return f"{s / 3600:.1f} h"
    return f"{s / 86400:.1f} d"


def holding_clock(
    kind: str,
    collected_at: datetime,
    now: datetime,
    fixed_at: datetime | None = None,
    overrides: dict[str, float] | None = None,
) -> HoldingClock:
    """The deadline and time left for analysing a sample.

    Parameters
    ----------
    kind : {"do_probe", "do_winkler", "bod", "specific_conductance", "temperature"}
        Sample kind (a key of :data:`HOLDING_TIMES`).
    collected_at : datetime
        When the sample was collected.
    now : datetime
        The current time (passed in: the science has no clock).
    fixed_at : datetime, optional
        When a sample was fixed; checked (not before collection) and used only by a rule whose clock
        runs from fixing. Every rule of :data:`HOLDING_TIMES` runs from collection: a Winkler sample is
        fixed on site, and the clock starts at collection.
    overrides : dict of str to float, optional
        A program's SOP limits in hours by kind, replacing the regulation's value.

    Returns
    -------
    HoldingClock
        ``flag``: ``holding.expired`` (stop-and-check) past the deadline; ``holding.soon`` (warning)
        when less than 25 % of the holding time is left; else None.

    Raises
    ------
    ValueError
        Unknown kind, bad override, non-datetime values, a mix of time-zone-aware and naive times,
        ``now`` before collection or fixing before collection.

    References
    ----------
    US 40 CFR 136.3, Table II [from memory; confirm wording]. The program's SOP and local regulations decide.
    """
    rule = _rule(kind, overrides)
    times = {"collected_at": collected_at, "now": now}
    if fixed_at is not None:
        times["fixed_at"] = fixed_at
    for name, value in times.items():
        if not isinstance(value, datetime):
            raise ValueError(f"{name} = {value!r} is not a date-time; accepted: a datetime")
    aware = {name: v.tzinfo is not None and v.utcoffset() is not None for name, v in times.items()}
    if len(set(aware.values())) > 1:
        raise ValueError(
            "collected_at, now and fixed_at mix times with and without a time zone; accepted: all"
            " with a time zone (or all without)"
        )
    if now < collected_at:
        raise ValueError(
            f"now ({now.isoformat()}) is before collected_at ({collected_at.isoformat()}); accepted:"
            " a collection time in the past (check the device clock)"
        )
    if fixed_at is not None and fixed_at < collected_at:
        raise ValueError(
            f"fixed_at ({fixed_at.isoformat()}) is before collected_at ({collected_at.isoformat()});"
            " accepted: fixing at or after collection"
        )
    from_fixing = rule.clock_from == "fixing" and fixed_at is not None
    start = fixed_at if (from_fixing and fixed_at is not None) else collected_at
    limit = timedelta(hours=rule.hours)
    deadline = start + limit
    remaining = (deadline - now).total_seconds()
    expired = remaining < 0
    flag = None
    if expired:
        flag = Flag(
            "holding.expired",
            Severity.STOP,
            f"The holding time for {rule.label} ({_fmt(rule.hours * 3600)}) ended {_fmt(remaining)} ago"
            f" (deadline {when_text(deadline)}).",
            "Analyze it only if the program's SOP allows, and qualify the result as past its holding time.",
            kind,
        )
    elif remaining < SOON_FRACTION * limit.total_seconds():
        flag = Flag(
            "holding.soon",
            Severity.WARNING,
            f"The holding time for {rule.label} ({_fmt(rule.hours * 3600)}) has {_fmt(remaining)} left"
            f" (deadline {when_text(deadline)}).",
            f"Analyze it soon; keep it {rule.preservation}.",
            kind,
        )
    return HoldingClock(
        kind=kind,
        deadline=deadline,
        remaining_s=remaining,
        expired=expired,
        flag=flag,
        rule=rule,
        clock_from="fixing" if from_fixing else "collection",
    )
