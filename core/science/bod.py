"""BOD5 by the dilution method (Standard Methods 5210 B): dilutions, seed correction and the quality checks."""
from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timedelta

from core.science._validate import real
from core.flags import Flag, Severity

__all__ = [
    "MIN_DEPLETION_MG_L", "MIN_RESIDUAL_MG_L", "SEED_UPTAKE_RANGE_MG_L", "BLANK_MAX_DEPLETION_MG_L",
    "GGA_RANGE_MG_L", "INCUBATION_HOURS", "INCUBATION_TOLERANCE_HOURS",
    "BodDilution", "BodResult", "bod_dilution", "bod_from_dilutions", "seed_uptake_per_ml", "blank_check",
    "gga_check", "incubation_check", "DILUTION_KEYS",
]

# Standard Methods 5210 B acceptance rules [from memory unless marked].
MIN_DEPLETION_MG_L = 2.0
MIN_RESIDUAL_MG_L = 1.0
SEED_UPTAKE_RANGE_MG_L = (0.6, 1.0)  # seed correction per bottle
BLANK_MAX_DEPLETION_MG_L = 0.20  # dilution-water blank [summary of the 21st edition's changes]
GGA_RANGE_MG_L = (167.5, 228.5)  # 198 ± 30.5 mg/L glucose–glutamic acid [summary of the 21st edition's changes]
INCUBATION_HOURS = 120.0  # 5 days
INCUBATION_TOLERANCE_HOURS = 6.0

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
        return {"bod_mg_l": self.bod_mg_l, "depletion_mg_l": self.depletion_mg_l, "valid": self.valid,
                "flags": [f.to_dict() for f in self.flags], "sample_ml": self.sample_ml,
                "bottle_ml": self.bottle_ml, "seed_correction_mg_l": self.seed_correction_mg_l}


@dataclass(frozen=True)
class BodResult:
    """BOD5 of one sample from its dilutions: the mean of the valid ones, or None when none is valid."""

    bod_mg_l: float | None
    valid: bool
    dilutions: list[BodDilution] = field(default_factory=list)
    flags: list[Flag] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"bod_mg_l": self.bod_mg_l, "valid": self.valid,
                "dilutions": [d.to_dict() for d in self.dilutions], "flags": [f.to_dict() for f in self.flags]}


def _do(x, name):
    return real(x, name, lo=0.0, hi=70.0, unit="mg/L")


def bod_dilution(initial_do_mg_l, final_do_mg_l, sample_ml, bottle_ml=300.0, seed_ml=0.0,
                 seed_uptake_mg_l_per_ml=0.0) -> BodDilution:
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
        raise ValueError(f"sample_ml = {v:g} (plus seed_ml = {vs:g}) is more than bottle_ml = {b:g};"
                         " accepted: sample and seed volumes that fit in the bottle")
    if vs > 0.0 and s == 0.0:
        raise ValueError("seed_uptake_mg_l_per_ml is 0 while seed_ml is above 0; accepted: the seed uptake"
                         " from the seed controls (mg/L per mL of seed), or seed_ml = 0 for an unseeded sample")
    depletion = d1 - d2
    seed_corr = s * vs
    p = v / b
    bod = (depletion - seed_corr) / p  # Standard Methods 5210 B: [(D1 − D2) − S·Vs] / P
    flags: list[Flag] = []
    if depletion < MIN_DEPLETION_MG_L - _EPS:
        flags.append(Flag(
            "bod.depletion_too_small", Severity.WARNING,
            f"The {v:g} mL dilution used {depletion:.2f} mg/L of oxygen, less than {MIN_DEPLETION_MG_L:g} mg/L;"
            " too little depletion to measure the BOD reliably.",
            "Leave this dilution out of the average; use a larger sample volume next time.", "final_do_mg_l"))
    if d2 < MIN_RESIDUAL_MG_L - _EPS:
        flags.append(Flag(
            "bod.residual_too_low", Severity.WARNING,
            f"The {v:g} mL dilution ended with {d2:.2f} mg/L of oxygen, below {MIN_RESIDUAL_MG_L:g} mg/L;"
            " oxygen may have run out before day 5, so the BOD is understated.",
            "Leave this dilution out of the average; use a smaller sample volume next time.", "final_do_mg_l"))
    if vs > 0.0:
        lo, hi = SEED_UPTAKE_RANGE_MG_L
        if not (lo - _EPS <= seed_corr <= hi + _EPS):
            flags.append(Flag(
                "bod.seed_correction_out_of_range", Severity.WARNING,
                f"The seed in the {v:g} mL dilution accounts for {seed_corr:.2f} mg/L of depletion; Standard"
                f" Methods 5210 B asks for {lo:g}–{hi:g} mg/L per bottle.",
                "Adjust the seed volume so that the seed correction falls in range.", "seed_ml"))
    valid = depletion >= MIN_DEPLETION_MG_L - _EPS and d2 >= MIN_RESIDUAL_MG_L - _EPS
    return BodDilution(bod_mg_l=bod, depletion_mg_l=depletion, valid=valid, flags=flags, sample_ml=v,
                       bottle_ml=b, seed_correction_mg_l=seed_corr)


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


def bod_from_dilutions(dilutions: list[dict]) -> BodResult:
    """BOD5 of a sample from several dilutions: the mean of the valid ones.

    Parameters
    ----------
    dilutions : list of dict
        Each with the keyword arguments of :func:`bod_dilution` (``initial_do_mg_l``, ``final_do_mg_l``,
        ``sample_ml``, optional ``bottle_ml``, ``seed_ml``, ``seed_uptake_mg_l_per_ml``).

    Returns
    -------
    BodResult
        ``bod_mg_l`` the mean of the valid dilutions (None when none is valid, with a
        ``bod.no_valid_dilution`` stop-and-check flag); each dilution's own flags are kept in
        ``dilutions`` and repeated in ``flags``.
    """
    if not isinstance(dilutions, (list, tuple)) or not dilutions:
        raise ValueError("dilutions is empty or not a list; accepted: a list of dilutions, each with"
                         f" {', '.join(_REQUIRED)}")
    results = []
    for i, d in enumerate(dilutions):
        _args(d, i, "dilutions", DILUTION_KEYS, _REQUIRED)
        try:
            results.append(bod_dilution(**d))
        except ValueError as exc:
            raise ValueError(f"dilutions[{i}]: {exc}") from None
    flags = [f for r in results for f in r.flags]
    good = [r.bod_mg_l for r in results if r.valid]
    if not good:
        flags.append(Flag(
            "bod.no_valid_dilution", Severity.STOP,
            f"None of the {len(results)} dilutions met both rules (depletion ≥ {MIN_DEPLETION_MG_L:g} mg/L and"
            f" residual ≥ {MIN_RESIDUAL_MG_L:g} mg/L), so no BOD5 can be reported from them.",
            "Report the sample as the program's SOP says for an invalid BOD (e.g. as greater or less than a"
            " bound) and choose other dilutions next time.", "dilutions"))
        return BodResult(bod_mg_l=None, valid=False, dilutions=results, flags=flags)
    return BodResult(bod_mg_l=sum(good) / len(good), valid=True, dilutions=results, flags=flags)


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
        raise ValueError(f"no seed control met depletion ≥ {MIN_DEPLETION_MG_L:g} mg/L and residual ≥"
                         f" {MIN_RESIDUAL_MG_L:g} mg/L; accepted: at least one such control")
    return sum(uptakes) / len(uptakes)


def blank_check(depletion_mg_l) -> Flag | None:
    """Dilution-water blank: depletion over 5 d must not exceed 0.20 mg/L (Standard Methods 5210 B).

    Returns ``bod.blank_depletion`` (warning) when it does, else None.
    """
    d = real(depletion_mg_l, "depletion_mg_l", lo=-70.0, hi=70.0, unit="mg/L")
    if d <= BLANK_MAX_DEPLETION_MG_L + 1e-12:
        return None
    return Flag(
        "bod.blank_depletion", Severity.WARNING,
        f"The dilution-water blank used {d:.2f} mg/L of oxygen, more than {BLANK_MAX_DEPLETION_MG_L:.2f} mg/L:"
        " the dilution water or bottles carry oxygen demand.",
        "Qualify this batch's results as the program's SOP says and clean or replace the dilution water.",
        "depletion_mg_l")


def gga_check(bod_mg_l) -> Flag | None:
    """Glucose–glutamic acid check: BOD5 must be 198 ± 30.5 mg/L, i.e. 167.5–228.5 (Standard Methods 5210 B).

    Returns ``bod.gga_out_of_range`` (warning) outside that range, else None.
    """
    b = real(bod_mg_l, "bod_mg_l", lo=-1000.0, hi=10000.0, unit="mg/L")
    lo, hi = GGA_RANGE_MG_L
    if lo <= b <= hi:
        return None
    return Flag(
        "bod.gga_out_of_range", Severity.WARNING,
        f"The glucose–glutamic acid check gave {b:.1f} mg/L, outside {lo:g}–{hi:g} mg/L (198 ± 30.5).",
        "Check the seed, the dilution water and the technique; qualify this batch as the program's SOP says.",
        "bod_mg_l")


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
        raise ValueError("started_at and ended_at mix a time zone with none; accepted: both with a time"
                         " zone or both without") from None
    if span < timedelta(0):
        raise ValueError(f"ended_at ({ended_at.isoformat()}) is before started_at ({started_at.isoformat()});"
                         " accepted: an end after the start")
    hours = span.total_seconds() / 3600.0
    if abs(hours - INCUBATION_HOURS) <= INCUBATION_TOLERANCE_HOURS:
        return None
    return Flag(
        "bod.incubation_time", Severity.WARNING,
        f"The bottles were incubated {hours:.1f} h; BOD5 asks for 5 d ± 6 h (114–126 h).",
        "Qualify the result as the program's SOP says.", "ended_at")
