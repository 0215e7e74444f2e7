"""Aquatic-life dissolved-oxygen criteria as program settings, and the flags a reading raises against them."""

from __future__ import annotations

from dataclasses import dataclass

from core.flags import Flag, Severity
from core.science._validate import real
from core.science.quantities import LIMITS

__all__ = ["Criteria", "WATER_CLASSES", "LIFE_STAGES", "EPA_1986_MG_L", "SPOT_PERIOD", "do_criteria_flags"]

WATER_CLASSES = ("warm", "cold")
#: "early": early life stages (embryos and larvae) present; "other": all other life stages.
LIFE_STAGES = ("other", "early")
#: The averaging period a single (spot) reading can be compared with.
SPOT_PERIOD = "1-day minimum"

#: US EPA 440/5-86-003 (1986), Ambient Water Quality Criteria for Dissolved Oxygen, mg/L by water class,
#: life stage and averaging period [from memory; confirm against the document]. Early-life-stage cold-water
#: values are water-column concentrations. Only the 1-day minimum can be judged from a spot reading; the
#: means need continuous data.
EPA_1986_MG_L: dict[tuple[str, str], dict[str, float]] = {
    ("warm", "other"): {"30-day mean": 5.5, "7-day mean minimum": 4.0, "1-day minimum": 3.0},
    ("warm", "early"): {"7-day mean": 6.0, "1-day minimum": 5.0},
    ("cold", "other"): {"30-day mean": 6.5, "7-day mean minimum": 5.0, "1-day minimum": 4.0},
    ("cold", "early"): {"7-day mean": 9.5, "1-day minimum": 8.0},
}

_DECIDES = "The program's own standard decides what applies to this water."


@dataclass(frozen=True)
class Criteria:
    """DO thresholds a program applies; every field is a program setting.

    Attributes
    ----------
    warm_min_mg_l : float
        Minimum DO for warm-water streams, mg/L. Default 5.0: the value many state standards use
        [common practice]; US EPA 440/5-86-003 (1986) gives a 30-day mean of 5.5 and 1-day minimum of
        3.0 for warm water, other life stages [from memory].
    cold_min_mg_l : float
        Minimum DO for cold-water streams, mg/L. Default 6.5: the 30-day mean for cold water, other
        life stages, in US EPA 440/5-86-003 (1986) [from memory].
    supersaturation_percent : float
        Percent saturation above which a reading is flagged as supersaturated; default 120 %
        [common practice].
    hypoxic_mg_l : float
        DO below which water is called hypoxic, mg/L; default 2.0 [common practice].
    life_stage : {"other", "early"}
        Which life stages the program protects at these streams; selects the EPA 1986 1-day minimum a
        spot reading is compared with (:data:`EPA_1986_MG_L`). Default "other".
    """

    warm_min_mg_l: float = 5.0
    cold_min_mg_l: float = 6.5
    supersaturation_percent: float = 120.0
    hypoxic_mg_l: float = 2.0
    life_stage: str = "other"

    def __post_init__(self) -> None:
        if self.life_stage not in LIFE_STAGES:
            raise ValueError(f"life_stage = {self.life_stage!r} is not known; accepted: {', '.join(LIFE_STAGES)}")
        lo, hi, _ = LIMITS["criterion"]  # the one table of limits, shared with the records and the app
        real(self.warm_min_mg_l, "warm_min_mg_l", lo=lo, hi=hi, unit="mg/L")
        real(self.cold_min_mg_l, "cold_min_mg_l", lo=lo, hi=hi, unit="mg/L")
        real(self.hypoxic_mg_l, "hypoxic_mg_l", lo=lo, hi=hi, unit="mg/L")
        lo, hi, _ = LIMITS["supersaturation"]
        real(self.supersaturation_percent, "supersaturation_percent", lo=lo, hi=hi, unit="%")


def do_criteria_flags(do_mg_l, percent_sat, water_class: str | None, criteria: Criteria | None = None) -> list[Flag]:
    """Flags a DO reading against a program's criteria.

    Parameters
    ----------
    do_mg_l : float
        Dissolved oxygen, mg/L (0 to 70).
    percent_sat : float or None
        Percent saturation of the same reading, % (0 to 500); None skips the supersaturation check.
    water_class : {"warm", "cold"} or None
        The stream's class in the program; None skips the below-criterion check.
    criteria : Criteria, optional
        The program's thresholds; default :class:`Criteria` ().

    Returns
    -------
    list of Flag
        ``do.hypoxic`` (stop-and-check) below ``hypoxic_mg_l``; ``do.below_criterion`` (warning) below
        the class minimum; ``do.below_1day_minimum`` (warning) below the EPA 1986 1-day minimum for the
        class and the criteria's life stage (a spot reading is compared with the 1-day minimum only, and
        the flag says the 7- and 30-day means need continuous data); ``do.supersaturated`` (warning)
        above ``supersaturation_percent``. Each message says that the program's own standard decides.
    """
    crit = criteria if criteria is not None else Criteria()
    if not isinstance(crit, Criteria):
        raise ValueError(f"criteria = {criteria!r} is not a Criteria; accepted: core.science.criteria.Criteria(...)")
    do = real(do_mg_l, "do_mg_l", lo=0.0, hi=70.0, unit="mg/L")
    if water_class is not None:
        wc = str(water_class).strip().lower()
        if wc not in WATER_CLASSES:
            raise ValueError(f"water_class = {water_class!r} is not a known class; accepted: warm, cold, or none")
    else:
        wc = None
    flags: list[Flag] = []
    if do < crit.hypoxic_mg_l:
        flags.append(
            Flag(
                "do.hypoxic",
                Severity.STOP,
                f"DO {do:.2f} mg/L is below {crit.hypoxic_mg_l:g} mg/L (hypoxic); most fish cannot live in"
                f" this for long. {_DECIDES}",
                "Re-check the reading (membrane, stirring, calibration), measure again nearby, and report it"
                " as the program's SOP says.",
                "do_mg_l",
            )
        )
    if wc is not None:
        limit = crit.warm_min_mg_l if wc == "warm" else crit.cold_min_mg_l
        if do < limit:
            flags.append(
                Flag(
                    "do.below_criterion",
                    Severity.WARNING,
                    f"DO {do:.2f} mg/L is below the {wc}-water criterion of {limit:g} mg/L set for this"
                    f" program. {_DECIDES}",
                    "Note the time of day and flow (DO is lowest near dawn); re-measure if it looks wrong.",
                    "do_mg_l",
                )
            )
        epa = EPA_1986_MG_L[(wc, crit.life_stage)]
        one_day = epa[SPOT_PERIOD]
        if do < one_day:
            stage = "early life stages" if crit.life_stage == "early" else "other life stages"
            flags.append(
                Flag(
                    "do.below_1day_minimum",
                    Severity.WARNING,
                    f"DO {do:.2f} mg/L is below the EPA 1986 {SPOT_PERIOD} of {one_day:g} mg/L ({wc} water,"
                    f" {stage}); its 7- and 30-day means need continuous data. {_DECIDES}",
                    "Re-measure near dawn if you can; ask whether a logger belongs here.",
                    "do_mg_l",
                )
            )
    if percent_sat is not None:
        ps = real(percent_sat, "percent_sat", lo=0.0, hi=500.0, unit="%")
        if ps > crit.supersaturation_percent:
            flags.append(
                Flag(
                    "do.supersaturated",
                    Severity.WARNING,
                    f"DO is {ps:.0f} % of saturation, above {crit.supersaturation_percent:g} %: strong algal"
                    " photosynthesis, a plunge pool, or a reading error (air bubble on the sensor, stale"
                    f" calibration). {_DECIDES}",
                    "Check the sensor for bubbles and the calibration, note sun and plant growth, re-measure.",
                    "do_mg_l",
                )
            )
    return flags
