"""BOD5 by the dilution method (Standard Methods 5210 B): dilutions, seed correction and the quality checks."""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field
from datetime import datetime, timedelta

from core.flags import Flag, Severity
from core.science._validate import real

__all__ = [
    "MIN_DEPLETION_MG_L",
    "MIN_RESIDUAL_MG_L",
    "SEED_UPTAKE_RANGE_MG_L",
    "BLANK_MAX_DEPLETION_MG_L",
    "GGA_RANGE_MG_L",
    "INCUBATION_HOURS",
    "INCUBATION_TOLERANCE_HOURS",
    "BodDilution",
    "BodResult",
    "BodReport",
    "bod_dilution",
    "bod_from_dilutions",
    "bod_report",
    "seed_uptake_per_ml",
    "blank_check",
    "gga_check",
    "incubation_check",
    "DILUTION_KEYS",
    "AGREEMENT_SPREAD",
    "SATURATION_20C_MG_L",
    "BOD_ANALYTES",
]

# Standard Methods 5210 B acceptance rules [from memory unless marked].
MIN_DEPLETION_MG_L = 2.0
MIN_RESIDUAL_MG_L = 1.0
SEED_UPTAKE_RANGE_MG_L = (0.6, 1.0)  # seed correction per bottle
BLANK_MAX_DEPLETION_MG_L = 0.20  # dilution-water blank [summary of the 21st edition's changes]
GGA_RANGE_MG_L = (167.5, 228.5)  # 198 ± 30.5 mg/L glucose–glutamic acid [summary of the 21st edition's changes]
INCUBATION_HOURS = 120.0  # 5 days
INCUBATION_TOLERANCE_HOURS = 6.0
#: Valid dilutions "agree" when (max − min) / mean of their BOD5 is at most this; beyond it they are not
#: averaged. 5210 B averages valid dilutions only without evidence of toxicity or an obvious anomaly
#: [from memory]; the 30 % figure is common practice (our choice), a constant a program may change.
AGREEMENT_SPREAD = 0.30
#: Oxygen saturation of fresh water at 20 °C and 1 atm, mg/L (Benson & Krause 1984; Standard Methods
#: 4500-O Table 4500-O:I gives 9.092). An initial DO above it is supersaturated at the incubation
#: temperature; the lab's own pressure can only lower the value, so this is the generous bound.
SATURATION_20C_MG_L = 9.092
#: The two analytes: BOD5 and CBOD5 (nitrification inhibitor added), never mixed (Standard Methods 5210 B).
BOD_ANALYTES = ("BOD5", "CBOD5")

DILUTION_KEYS = ("initial_do_mg_l", "final_do_mg_l", "sample_ml", "bottle_ml", "seed_ml", "seed_uptake_mg_l_per_ml")
_REQUIRED = DILUTION_KEYS[:3]
_EPS = 1e-9  # readings carry two decimals; keep float rounding (4.1 - 2.1 < 2.0) from deciding a limit


@dataclass(frozen=True)
class BodDilution:
    """One dilution bottle's result. ``bod_mg_l`` is computed even when ``valid`` is false (never hidden)."""

    bod_mg_l: float
    depletion_mg_l: float
    valid: bool
    flags: list[Flag] = field(default_factory=list)
    sample_ml: float = 0.0
    bottle_ml: float = 300.0
    seed_correction_mg_l: float = 0.0

    def to_dict(self) -> dict:
        return {
            "bod_mg_l": self.bod_mg_l,
            "depletion_mg_l": self.depletion_mg_l,
            "valid": self.valid,
            "flags": [f.to_dict() for f in self.flags],
            "sample_ml": self.sample_ml,
            "bottle_ml": self.bottle_ml,
            "seed_correction_mg_l": self.seed_correction_mg_l,
        }


@dataclass(frozen=True)
class BodReport:
    """What a lab reports for one sample (Standard Methods 5210 B reporting rules [from memory]).

    ``value`` with ``qualifier`` None is a measured BOD5 (the mean of agreeing valid dilutions);
    ``qualifier`` "<" or ">" makes ``value`` a bound; ``value`` None means the rules support no value
    (``text`` says why). ``text`` is what a report prints, e.g. ``"< 2.0 mg/L"``. ``basis`` names the rule
    used: "mean", "single", "below-bound", "above-bound", "trend", "disagree", "between", "none".
    """

    value: float | None
    qualifier: str | None
    text: str
    basis: str
    analyte: str = "BOD5"

    def to_dict(self) -> dict:
        return {
            "value": self.value,
            "qualifier": self.qualifier,
            "text": self.text,
            "basis": self.basis,
            "analyte": self.analyte,
        }


@dataclass(frozen=True)
class BodResult:
    """BOD5 of one sample from its dilutions: the mean of the valid ones (None when none is valid) and
    the reportable result (:class:`BodReport`)."""

    bod_mg_l: float | None
    valid: bool
    dilutions: list[BodDilution] = field(default_factory=list)
    flags: list[Flag] = field(default_factory=list)
    report: BodReport | None = None
    analyte: str = "BOD5"

    def to_dict(self) -> dict:
        return {
            "bod_mg_l": self.bod_mg_l,
            "valid": self.valid,
            "analyte": self.analyte,
            "report": None if self.report is None else self.report.to_dict(),
            "dilutions": [d.to_dict() for d in self.dilutions],
            "flags": [f.to_dict() for f in self.flags],
        }


def _do(x, name):
    return real(x, name, lo=0.0, hi=70.0, unit="mg/L")


def bod_dilution(
    initial_do_mg_l, final_do_mg_l, sample_ml, bottle_ml=300.0, seed_ml=0.0, seed_uptake_mg_l_per_ml=0.0
) -> BodDilution:
    """BOD5 of one dilution, unseeded or seeded.

    Unseeded: BOD5 = (D1 − D2) / P; seeded: BOD5 = [(D1 − D2) − S·Vs] / P, with P = sample volume /
    bottle volume, S the seed uptake per mL of seed (:func:`seed_uptake_per_ml`) and Vs the mL of
    seed in this bottle. A dilution is valid with depletion ≥ 2.0 mg/L and residual DO ≥ 1.0 mg/L.

    Parameters
    ----------
    initial_do_mg_l : float
        D1, DO of the diluted sample right after preparation, mg/L (0 to 70).
    final_do_mg_l : float
        D2, DO after 5 d incubation at 20 °C, mg/L (0 to 70).
    sample_ml : float
        Sample volume in the bottle, mL (> 0, ≤ bottle).
    bottle_ml : float
        Bottle volume, mL (usually 300).
    seed_ml : float
        Seed volume in the bottle, mL (≥ 0; 0 for unseeded).
    seed_uptake_mg_l_per_ml : float
        Seed uptake S, mg/L of depletion per mL of seed (≥ 0).

    Returns
    -------
    BodDilution
        Flags ``bod.depletion_too_small``, ``bod.residual_too_low``, ``bod.seed_correction_out_of_range``
        (warnings) with the reason.

    References
    ----------
    Standard Methods 5210 B [from memory].
    """
    d1 = _do(initial_do_mg_l, "initial_do_mg_l")
    d2 = _do(final_do_mg_l, "final_do_mg_l")
    b = real(bottle_ml, "bottle_ml", lo=0.0, hi=2000.0, lo_open=True, unit="mL", note=" (usually 300)")
    v = real(sample_ml, "sample_ml", lo=0.0, hi=2000.0, lo_open=True, unit="mL")
    vs = real(seed_ml, "seed_ml", lo=0.0, hi=2000.0, unit="mL")
    s = real(seed_uptake_mg_l_per_ml, "seed_uptake_mg_l_per_ml", lo=0.0, hi=20.0, unit="mg/L per mL")
    if not all(isinstance(x, float) for x in (d1, d2, b, v, vs, s)):
        raise ValueError("bod_dilution takes single numbers; pass several dilutions to bod_from_dilutions")
    if v + vs > b:
        raise ValueError(
            f"sample_ml = {v:g} (plus seed_ml = {vs:g}) is more than bottle_ml = {b:g};"
            " accepted: sample and seed volumes that fit in the bottle"
        )
    if vs > 0.0 and s == 0.0:
        raise ValueError(
            "seed_uptake_mg_l_per_ml is 0 while seed_ml is above 0; accepted: the seed uptake"
            " from the seed controls (mg/L per mL of seed), or seed_ml = 0 for an unseeded sample"
        )
    depletion = d1 - d2
    seed_corr = s * vs
    p = v / b
    bod = (depletion - seed_corr) / p  # Standard Methods 5210 B: [(D1 − D2) − S·Vs] / P
    flags: list[Flag] = []
    if d1 > SATURATION_20C_MG_L + _EPS:
        flags.append(
            Flag(
                "bod.initial_supersaturated",
                Severity.WARNING,
                f"The {v:g} mL dilution started at {d1:.2f} mg/L, above saturation at 20 °C ({SATURATION_20C_MG_L:g}"
                " mg/L at sea level): the extra oxygen leaves the bottle during incubation and counts as demand.",
                "Bring supersaturated samples to 20 °C and shake or aerate them before setting up (Standard"
                " Methods 5210 B).",
                "initial_do_mg_l",
            )
        )
    if d2 > d1 + _EPS:
        flags.append(
            Flag(
                "bod.final_above_initial",
                Severity.WARNING,
                f"The {v:g} mL dilution ended with more oxygen ({d2:.2f} mg/L) than it started with ({d1:.2f} mg/L):"
                " a bottle or reading mix-up, an air bubble, or algae growing in light.",
                "Check the bench sheet for swapped readings and that the bottles were incubated dark and sealed.",
                "final_do_mg_l",
            )
        )
    if depletion < MIN_DEPLETION_MG_L - _EPS:
        flags.append(
            Flag(
                "bod.depletion_too_small",
                Severity.WARNING,
                f"The {v:g} mL dilution used {depletion:.2f} mg/L of oxygen, less than {MIN_DEPLETION_MG_L:g} mg/L;"
                " too little depletion to measure the BOD reliably.",
                "Leave this dilution out of the average; use a larger sample volume next time.",
                "final_do_mg_l",
            )
        )
    if d2 < MIN_RESIDUAL_MG_L - _EPS:
        flags.append(
            Flag(
                "bod.residual_too_low",
                Severity.WARNING,
                f"The {v:g} mL dilution ended with {d2:.2f} mg/L of oxygen, below {MIN_RESIDUAL_MG_L:g} mg/L;"
                " oxygen may have run out before day 5, so the BOD is understated.",
                "Leave this dilution out of the average; use a smaller sample volume next time.",
                "final_do_mg_l",
            )
        )
    if vs > 0.0:
        lo, hi = SEED_UPTAKE_RANGE_MG_L
        if not (lo - _EPS <= seed_corr <= hi + _EPS):
            flags.append(
                Flag(
                    "bod.seed_correction_out_of_range",
                    Severity.WARNING,
                    f"The seed in the {v:g} mL dilution accounts for {seed_corr:.2f} mg/L of depletion; Standard"
                    f" Methods 5210 B asks for {lo:g}–{hi:g} mg/L per bottle.",
                    "Adjust the seed volume so that the seed correction falls in range.",
                    "seed_ml",
                )
            )
    valid = depletion >= MIN_DEPLETION_MG_L - _EPS and d2 >= MIN_RESIDUAL_MG_L - _EPS
    return BodDilution(
        bod_mg_l=bod,
        depletion_mg_l=depletion,
        valid=valid,
        flags=flags,
        sample_ml=v,
        bottle_ml=b,
        seed_correction_mg_l=seed_corr,
    )


def _args(d: object, i: int, what: str, keys: tuple[str, ...], required: tuple[str, ...]) -> dict:
    """Entry `i` of the list `what`: an object with only `keys`, and every one of `required`."""
    if not isinstance(d, dict):
        raise ValueError(f"{what}[{i}] is not an object with keys; accepted: {', '.join(keys)}")
    unknown = sorted(set(d) - set(keys))
    if unknown:
        raise ValueError(f"{what}[{i}] has an unknown key {unknown[0]!r}; accepted keys: {', '.join(keys)}")
    missing = [k for k in required if k not in d]
    if missing:
        raise ValueError(f"{what}[{i}] has no {missing[0]!r}; accepted keys: {', '.join(keys)}")
    return d


def bod_from_dilutions(dilutions: list[dict], *, nitrification_inhibitor: bool = False) -> BodResult:
    """BOD5 (or CBOD5) of a sample from several dilutions, with its reportable result.

    Parameters
    ----------
    dilutions : list of dict
        Each with the keyword arguments of :func:`bod_dilution` (``initial_do_mg_l``, ``final_do_mg_l``,
        ``sample_ml``, optional ``bottle_ml``, ``seed_ml``, ``seed_uptake_mg_l_per_ml``).
    nitrification_inhibitor : bool
        True when a nitrification inhibitor was added: the result is CBOD5, its own analyte.

    Returns
    -------
    BodResult
        ``bod_mg_l`` the mean of the valid dilutions (None when none is valid); ``report`` the value to
        report by :func:`bod_report`; each dilution's own flags are kept in ``dilutions`` and repeated
        in ``flags``, followed by the report's flags.
    """
    if not isinstance(dilutions, (list, tuple)) or not dilutions:
        raise ValueError(
            f"dilutions is empty or not a list; accepted: a list of dilutions, each with {', '.join(_REQUIRED)}"
        )
    if not isinstance(nitrification_inhibitor, bool):
        raise ValueError("nitrification_inhibitor must be true or false")
    results = []
    for i, d in enumerate(dilutions):
        _args(d, i, "dilutions", DILUTION_KEYS, _REQUIRED)
        try:
            results.append(bod_dilution(**d))
        except ValueError as exc:
            raise ValueError(f"dilutions[{i}]: {exc}") from None
    analyte = BOD_ANALYTES[1] if nitrification_inhibitor else BOD_ANALYTES[0]
    report, report_flags = bod_report(results, analyte)
    flags = [f for r in results for f in r.flags] + report_flags
    good = [r.bod_mg_l for r in results if r.valid]
    mean = sum(good) / len(good) if good else None
    return BodResult(bod_mg_l=mean, valid=bool(good), dilutions=results, flags=flags, report=report, analyte=analyte)


def _mg(x: float) -> str:
    return f"{x:.1f} mg/L"


def bod_report(dilutions: list[BodDilution], analyte: str = "BOD5") -> tuple[BodReport, list[Flag]]:
    """The reportable BOD5 of one sample from its dilution results (Standard Methods 5210 B [from memory]).

    - Valid dilutions (depletion ≥ 2.0 mg/L, residual ≥ 1.0 mg/L) that agree (spread at most
      :data:`AGREEMENT_SPREAD` of their mean) are averaged.
    - Valid dilutions whose BOD5 rises or falls steadily with dilution are not averaged: flag
      ``bod.dilution_trend`` (toxicity or a seed problem); the most dilute valid bottle is named as the
      least affected, and no value is reported. Disagreeing dilutions without a trend: ``bod.dilutions_disagree``.
    - No dilution depleted 2.0 mg/L: report "< 2.0 / P" with P the largest sample fraction
      (undiluted: "< 2.0 mg/L"), flag ``bod.reported_below_bound`` (note).
    - Every dilution left less than 1.0 mg/L: report "> (D1 − D2) / P" from the smallest sample
      fraction, flag ``bod.reported_above_bound`` (warning).
    - Otherwise (no valid dilution, neither rule): ``bod.no_valid_dilution`` (stop-and-check), with the
      bounds the dilutions do give.

    Returns
    -------
    (BodReport, list of Flag)
    """
    if analyte not in BOD_ANALYTES:
        raise ValueError(f"analyte = {analyte!r} is not known; accepted: {', '.join(BOD_ANALYTES)}")
    if not dilutions:
        raise ValueError("dilutions is empty; accepted: at least one dilution result")
    a = analyte
    valid = sorted((d for d in dilutions if d.valid), key=lambda d: d.sample_ml / d.bottle_ml)
    if valid:
        values = [d.bod_mg_l for d in valid]
        mean = sum(values) / len(values)
        if len(values) == 1:
            return BodReport(values[0], None, _mg(values[0]), "single", a), []
        spread = (max(values) - min(values)) / abs(mean) if mean else float("inf")
        if spread <= AGREEMENT_SPREAD + 1e-12:
            return BodReport(mean, None, _mg(mean), "mean", a), []
        listed = ", ".join(f"{v:.1f}" for v in values)
        steps = [b - c for b, c in itertools.pairwise(values)]  # from the most dilute to the least
        most_dilute = valid[0]
        if all(x > 0 for x in steps) or all(x < 0 for x in steps):
            way = "rises" if steps[0] > 0 else "falls"
            text = (
                f"not averaged: {a} {way} with dilution ({listed} mg/L from the most to the least dilute);"
                f" the most dilute valid bottle ({most_dilute.sample_ml:g} mL, {_mg(most_dilute.bod_mg_l)})"
                " is the least affected"
            )
            flag = Flag(
                "bod.dilution_trend",
                Severity.STOP,
                f"The valid dilutions give {listed} mg/L, {way} steadily with dilution: a sign of a toxic"
                " sample (BOD rising as the sample is diluted) or of a seed or dilution-water problem, so"
                " they are not averaged.",
                "Report only as the program's SOP allows (e.g. the most dilute bottle, qualified); check the"
                " sample for toxicity and the seed, and rerun with other dilutions.",
                "dilutions",
            )
            return BodReport(None, None, text, "trend", a), [flag]
        text = f"not averaged: the valid dilutions disagree ({listed} mg/L)"
        flag = Flag(
            "bod.dilutions_disagree",
            Severity.STOP,
            f"The valid dilutions give {listed} mg/L, more than {AGREEMENT_SPREAD:.0%} apart and with no steady"
            " trend: an obvious anomaly, so they are not averaged.",
            "Check the bench sheet for a mistake in one bottle; report only as the program's SOP allows.",
            "dilutions",
        )
        return BodReport(None, None, text, "disagree", a), [flag]

    by_fraction = sorted(dilutions, key=lambda d: d.sample_ml / d.bottle_ml)
    if all(d.depletion_mg_l < MIN_DEPLETION_MG_L - _EPS for d in dilutions):
        largest = by_fraction[-1]
        p = largest.sample_ml / largest.bottle_ml
        bound = MIN_DEPLETION_MG_L / p
        text = f"< {_mg(bound)}"
        flag = Flag(
            "bod.reported_below_bound",
            Severity.NOTE,
            f"No dilution used {MIN_DEPLETION_MG_L:g} mg/L of oxygen; the {a} is reported as {text}, the"
            f" {MIN_DEPLETION_MG_L:g} mg/L depletion divided by the largest sample fraction ({largest.sample_ml:g}"
            f" of {largest.bottle_ml:g} mL).",
            "Nothing to do for a clean stream; use a larger sample volume if a lower bound is needed.",
            "dilutions",
        )
        return BodReport(bound, "<", text, "below-bound", a), [flag]
    if all(_residual_low(d) for d in dilutions):
        smallest = by_fraction[0]
        bound = smallest.bod_mg_l
        text = f"> {_mg(bound)}"
        flag = Flag(
            "bod.reported_above_bound",
            Severity.WARNING,
            f"Every dilution ended below {MIN_RESIDUAL_MG_L:g} mg/L of oxygen; the {a} is reported as {text}, from"
            f" the smallest sample volume ({smallest.sample_ml:g} mL).",
            "Report as a lower bound; use smaller sample volumes next time.",
            "dilutions",
        )
        return BodReport(bound, ">", text, "above-bound", a), [flag]
    lows = [d for d in dilutions if _residual_low(d)]
    smalls = [d for d in dilutions if d.depletion_mg_l < MIN_DEPLETION_MG_L - _EPS and not _residual_low(d)]
    text = "no valid dilution"
    basis = "none"
    if lows and smalls:
        lower = max(d.bod_mg_l for d in lows)
        upper = min(MIN_DEPLETION_MG_L / (d.sample_ml / d.bottle_ml) for d in smalls)
        if lower < upper:
            text = f"no valid dilution: {a} between {lower:.1f} and {_mg(upper)}"
            basis = "between"
    flag = Flag(
        "bod.no_valid_dilution",
        Severity.STOP,
        f"None of the {len(dilutions)} dilutions met both rules (depletion ≥ {MIN_DEPLETION_MG_L:g} mg/L and"
        f" residual ≥ {MIN_RESIDUAL_MG_L:g} mg/L), and neither the < nor the > rule applies, so no {a} can be"
        " reported from them.",
        "Report the sample as the program's SOP says for an invalid BOD and choose other dilutions next time.",
        "dilutions",
    )
    return BodReport(None, None, text, basis, a), [flag]


def _residual_low(d: BodDilution) -> bool:
    return any(f.code == "bod.residual_too_low" for f in d.flags)


def seed_uptake_per_ml(controls: list[dict]) -> float:
    """Seed uptake S, mg/L of depletion per mL of seed, from seed-control bottles.

    For each control, (D1 − D2) / seed_ml; the mean over controls that meet the dilution rules
    (depletion ≥ 2.0 mg/L, residual ≥ 1.0 mg/L).

    Parameters
    ----------
    controls : list of dict
        Each with ``initial_do_mg_l``, ``final_do_mg_l`` and ``seed_ml`` (mL of seed in that control
        bottle, > 0).

    Returns
    -------
    float
        S, mg/L per mL of seed.

    Raises
    ------
    ValueError
        No controls, a bad value, or no control that meets the rules (the message says why).
    """
    keys = ("initial_do_mg_l", "final_do_mg_l", "seed_ml")
    if not isinstance(controls, (list, tuple)) or not controls:
        raise ValueError(f"controls is empty or not a list; accepted: seed controls, each with {', '.join(keys)}")
    uptakes = []
    for i, c in enumerate(controls):
        _args(c, i, "controls", keys, keys)
        d1 = _do(c["initial_do_mg_l"], f"controls[{i}].initial_do_mg_l")
        d2 = _do(c["final_do_mg_l"], f"controls[{i}].final_do_mg_l")
        vs = real(c["seed_ml"], f"controls[{i}].seed_ml", lo=0.0, hi=2000.0, lo_open=True, unit="mL")
        if d1 - d2 >= MIN_DEPLETION_MG_L - _EPS and d2 >= MIN_RESIDUAL_MG_L - _EPS:
            uptakes.append((d1 - d2) / vs)
    if not uptakes:
        raise ValueError(
            f"no seed control met depletion ≥ {MIN_DEPLETION_MG_L:g} mg/L and residual ≥"
            f" {MIN_RESIDUAL_MG_L:g} mg/L; accepted: at least one such control"
        )
    return sum(uptakes) / len(uptakes)


def blank_check(depletion_mg_l) -> Flag | None:
    """Dilution-water blank: depletion over 5 d must not exceed 0.20 mg/L (Standard Methods 5210 B).

    Returns ``bod.blank_depletion`` (warning) when it does, ``bod.blank_negative`` (warning) when the
    blank gained oxygen (a negative depletion: a reading or bottle mistake, or air in the bottle), else None.
    """
    d = real(depletion_mg_l, "depletion_mg_l", lo=-70.0, hi=70.0, unit="mg/L")
    if d < -_EPS:
        return Flag(
            "bod.blank_negative",
            Severity.WARNING,
            f"The dilution-water blank gained oxygen ({d:.2f} mg/L depletion): blank water cannot make oxygen,"
            " so a reading is wrong, the bottles were swapped, or air got into the blank.",
            "Check the blank's readings and the meter; qualify this batch as the program's SOP says.",
            "depletion_mg_l",
        )
    if d <= BLANK_MAX_DEPLETION_MG_L + 1e-12:
        return None
    return Flag(
        "bod.blank_depletion",
        Severity.WARNING,
        f"The dilution-water blank used {d:.2f} mg/L of oxygen, more than {BLANK_MAX_DEPLETION_MG_L:.2f} mg/L:"
        " the dilution water or bottles carry oxygen demand.",
        "Qualify this batch's results as the program's SOP says and clean or replace the dilution water.",
        "depletion_mg_l",
    )


def gga_check(bod_mg_l) -> Flag | None:
    """Glucose–glutamic acid check: BOD5 must be 198 ± 30.5 mg/L, i.e. 167.5–228.5 (Standard Methods 5210 B).

    Returns ``bod.gga_out_of_range`` (warning) outside that range, else None.
    """
    b = real(bod_mg_l, "bod_mg_l", lo=-1000.0, hi=10000.0, unit="mg/L")
    lo, hi = GGA_RANGE_MG_L
    if lo <= b <= hi:
        return None
    return Flag(
        "bod.gga_out_of_range",
        Severity.WARNING,
        f"The glucose–glutamic acid check gave {b:.1f} mg/L, outside {lo:g}–{hi:g} mg/L (198 ± 30.5).",
        "Check the seed, the dilution water and the technique; qualify this batch as the program's SOP says.",
        "bod_mg_l",
    )


def incubation_check(started_at: datetime, ended_at: datetime) -> Flag | None:
    """Incubation time: 5 days ± 6 hours (Standard Methods 5210 B [from memory]).

    Parameters
    ----------
    started_at, ended_at : datetime
        Start and end of incubation, both timezone-aware or both naive.

    Returns
    -------
    Flag or None
        ``bod.incubation_time`` (warning) when the time is outside 114–126 h.

    Raises
    ------
    ValueError
        Not datetimes, mixed aware and naive, or ``ended_at`` before ``started_at``.
    """
    if not isinstance(started_at, datetime) or not isinstance(ended_at, datetime):
        raise ValueError("started_at and ended_at must be date-times; accepted: datetime values")
    try:
        span = ended_at - started_at
    except TypeError:
        raise ValueError(
            "started_at and ended_at mix a time zone with none; accepted: both with a time zone or both without"
        ) from None
    if span < timedelta(0):
        raise ValueError(
            f"ended_at ({ended_at.isoformat()}) is before started_at ({started_at.isoformat()});"
            " accepted: an end after the start"
        )
    hours = span.total_seconds() / 3600.0
    if abs(hours - INCUBATION_HOURS) <= INCUBATION_TOLERANCE_HOURS:
        return None
    return Flag(
        "bod.incubation_time",
        Severity.WARNING,
        f"The bottles were incubated {hours:.1f} h; BOD5 asks for 5 d ± 6 h (114–126 h).",
        "Qualify the result as the program's SOP says.",
        "ended_at",
    )
