"""Winkler titration, azide modification: DO from titrant volume, thiosulfate normality, and the inverse.

Caution: the fixing and titration reagents hurt people. Manganous sulfate and the alkali-iodide-azide
reagent are corrosive and toxic (sodium azide); concentrated sulfuric acid burns. Wear eye protection
and gloves, work as the program's SOP and the reagents' safety data sheets say, and dispose of waste
as local regulations require.
"""

from __future__ import annotations

from datetime import datetime

import numpy as np

from core.flags import Flag, Severity
from core.science._validate import real

__all__ = [
    "MG_O_PER_MEQ",
    "original_sample_ml",
    "winkler_do_mg_l",
    "expected_titrant_ml",
    "thiosulfate_normality",
    "SAFETY_NOTE",
    "USUAL_NORMALITY",
    "NORMALITY_RANGE",
    "DO_IMPLAUSIBLE_MG_L",
    "FIXING_DELAY_MAX_MIN",
    "winkler_plausibility_flags",
]

#: One equivalent of oxygen is 8 g (1 O2 → 4 S2O3²⁻), i.e. 8000 mg per equivalent, 8 mg per meq.
MG_O_PER_MEQ = 8.0

#: The one reagent caution shown wherever Winkler bottles are fixed or titrated (field and lab).
SAFETY_NOTE = (
    "Caution, Winkler reagents: manganous sulfate is harmful, alkali-iodide-azide is caustic and toxic"
    " (sodium azide), and concentrated sulfuric acid burns. Wear gloves and eye protection;"
    " follow your program's SOP and the reagents' safety data sheets."
)


def _volumes(titrated_ml, bottle_ml, reagents_ml):
    b = real(bottle_ml, "bottle_ml", lo=0.0, hi=2000.0, lo_open=True, unit="mL", note=" (BOD bottles are 300 mL)")
    r = real(
        reagents_ml,
        "reagents_ml",
        lo=0.0,
        hi=2000.0,
        unit="mL",
        note=" (total fixing reagents added to the bottle, usually 2 mL: 1 + 1)",
    )
    v = real(
        titrated_ml, "titrated_ml", lo=0.0, hi=2000.0, lo_open=True, unit="mL", note=" (at most the bottle's volume)"
    )
    if np.any(np.asarray(r) >= b):
        raise ValueError(
            f"reagents_ml = {_show(r)} is not less than bottle_ml = {_show(b)}; accepted: a few mL"
            " of fixing reagents (usually 2) in a larger bottle (usually 300 mL)"
        )
    if np.any(np.asarray(v) > b):
        raise ValueError(
            f"titrated_ml = {_show(v)} is more than the bottle holds (bottle_ml = {_show(b)});"
            " accepted: above 0 and at most bottle_ml"
        )
    return v, b, r


def _show(x) -> str:
    a = np.asarray(x)
    return f"{float(a):g}" if a.ndim == 0 else f"{a.min():g} to {a.max():g}"


def original_sample_ml(titrated_ml, bottle_ml=300.0, reagents_ml=2.0):
    """Volume of original sample in the titrated portion, correcting for sample displaced by reagents.

    V_original = V_titrated · (V_bottle − V_reagents) / V_bottle.

    Parameters
    ----------
    titrated_ml : float or array_like
        Volume of the fixed, acidified sample titrated, mL (> 0, ≤ bottle).
    bottle_ml : float
        Bottle volume, mL (usually 300).
    reagents_ml : float
        Total volume of fixing reagents added (manganous sulfate + alkali-iodide-azide), mL
        (current practice 1 + 1 = 2 mL; older practice 2 + 2 = 4 mL).

    Returns
    -------
    float or numpy.ndarray
        Original sample volume, mL (201 mL titrated from a 300 mL bottle with 2 mL reagents → 199.66 mL).

    References
    ----------
    Standard Methods 4500-O C, azide modification [from memory].
    """
    v, b, r = _volumes(titrated_ml, bottle_ml, reagents_ml)
    return v * (b - r) / b


def winkler_do_mg_l(titrant_ml, normality, titrated_ml, bottle_ml=300.0, reagents_ml=2.0):
    """Dissolved oxygen from a Winkler (azide) titration, mg/L.

    DO = V_titrant · N · 8000 / V_original, V_original from :func:`original_sample_ml`.
    With 200 mL of original sample and 0.025 N thiosulfate, 1 mL of titrant is 1 mg/L.

    Parameters
    ----------
    titrant_ml : float or array_like
        Sodium thiosulfate (or PAO) used to the starch end point, mL (0 to 100).
    normality : float or array_like
        Titrant normality, eq/L (> 0 to 1; usually 0.025), from :func:`thiosulfate_normality`.
    titrated_ml, bottle_ml, reagents_ml
        As in :func:`original_sample_ml`.

    Returns
    -------
    float or numpy.ndarray
        DO, mg/L.

    References
    ----------
    Standard Methods 4500-O C [from memory].
    """
    t = real(titrant_ml, "titrant_ml", lo=0.0, hi=100.0, unit="mL")
    n = real(normality, "normality", lo=0.0, hi=1.0, lo_open=True, unit="N", note=" (usually 0.025)")
    return t * n * (MG_O_PER_MEQ * 1000.0) / original_sample_ml(titrated_ml, bottle_ml, reagents_ml)


def expected_titrant_ml(do_mg_l, normality, titrated_ml, bottle_ml=300.0, reagents_ml=2.0):
    """Titrant volume expected for a DO: the inverse of :func:`winkler_do_mg_l`, for a sanity check.

    V_titrant = DO · V_original / (N · 8000).

    Parameters
    ----------
    do_mg_l : float or array_like
        Expected DO (e.g. the probe reading), mg/L (0 to 70).
    normality, titrated_ml, bottle_ml, reagents_ml
        As in :func:`winkler_do_mg_l`.

    Returns
    -------
    float or numpy.ndarray
        Titrant volume, mL.
    """
    d = real(do_mg_l, "do_mg_l", lo=0.0, hi=70.0, unit="mg/L")
    n = real(normality, "normality", lo=0.0, hi=1.0, lo_open=True, unit="N", note=" (usually 0.025)")
    return d * original_sample_ml(titrated_ml, bottle_ml, reagents_ml) / (n * MG_O_PER_MEQ * 1000.0)


def thiosulfate_normality(titrant_ml, standard_ml=20.0, standard_normality=0.025):
    """Normality of the thiosulfate titrant from a bi-iodate standardisation.

    N = N_std · V_std / V_titrant (equal equivalents of iodine liberated and thiosulfate used).

    Parameters
    ----------
    titrant_ml : float or array_like
        Thiosulfate used to titrate the liberated iodine, mL (> 0, ≤ 100).
    standard_ml : float
        Potassium bi-iodate standard taken, mL (usually 20.00).
    standard_normality : float
        Normality of the standard, eq/L (usually 0.02500 N KH(IO3)2).

    Returns
    -------
    float or numpy.ndarray
        Titrant normality, eq/L (0.025 when 20.00 mL of titrant was used).

    References
    ----------
    Standard Methods 4500-O C, standardisation of sodium thiosulfate [from memory].
    """
    t = real(titrant_ml, "titrant_ml", lo=0.0, hi=100.0, lo_open=True, unit="mL")
    v = real(standard_ml, "standard_ml", lo=0.0, hi=1000.0, lo_open=True, unit="mL")
    n = real(standard_normality, "standard_normality", lo=0.0, hi=1.0, lo_open=True, unit="N")
    return n * v / t


#: The usual thiosulfate titrant: 0.025 N, where 1 mL titrant = 1 mg/L DO for 200 mL of original sample
#: (Standard Methods 4500-O C [from memory]).
USUAL_NORMALITY = 0.025
#: A normality outside this range is far from the usual 0.025 N: often 0.25 or 0.0025 typed for 0.025, or
#: a titrant that was never standardised. [common practice; our choice: ±20 %]
NORMALITY_RANGE = (0.020, 0.030)
#: A Winkler DO above this is taken as a typing or unit mistake: streams rarely exceed about 20 mg/L even
#: when strongly supersaturated. [common practice]
DO_IMPLAUSIBLE_MG_L = 20.0
#: Fixing belongs on site at collection; more than this between collection and fixing lets the sample's
#: oxygen change before it is fixed. [common practice; our choice]
FIXING_DELAY_MAX_MIN = 30.0


def winkler_plausibility_flags(
    do_mg_l=None, normality=None, collected_at: datetime | None = None, fixed_at: datetime | None = None
) -> list[Flag]:
    """Plausibility checks of a Winkler titration: the titrant's normality, the DO it gives, the fixing delay.

    Parameters
    ----------
    do_mg_l : float, optional
        The titration's DO, mg/L.
    normality : float, optional
        Thiosulfate normality, eq/L.
    collected_at, fixed_at : datetime, optional
        Collection and fixing times of the bottle (both aware or both naive).

    Returns
    -------
    list of Flag
        ``winkler.normality_unusual`` (warning) outside :data:`NORMALITY_RANGE`; ``winkler.do_implausible``
        (stop-and-check) above :data:`DO_IMPLAUSIBLE_MG_L`; ``winkler.late_fixing`` (warning) when the
        bottle was fixed more than :data:`FIXING_DELAY_MAX_MIN` minutes after collection (the holding
        clock still runs from collection).

    References
    ----------
    Standard Methods 4500-O C (azide modification) [from memory]: fix at collection; the holding
    clock runs from collection [common practice]. Limits are common practice.
    """
    flags: list[Flag] = []
    if normality is not None:
        n = real(normality, "normality", lo=0.0, hi=1.0, lo_open=True, unit="N")
        lo, hi = NORMALITY_RANGE
        if not (lo <= n <= hi):
            flags.append(
                Flag(
                    "winkler.normality_unusual",
                    Severity.WARNING,
                    f"The titrant normality {n:g} N is far from the usual {USUAL_NORMALITY:g} N: a typing mistake"
                    " (0.25 or 0.0025 for 0.025?) or a titrant that needs standardising.",
                    "Check the bottle label and the last bi-iodate standardisation; correct the normality.",
                    "normality",
                )
            )
    if do_mg_l is not None:
        do = real(do_mg_l, "do_mg_l", lo=0.0, unit="mg/L")
        if do > DO_IMPLAUSIBLE_MG_L:
            flags.append(
                Flag(
                    "winkler.do_implausible",
                    Severity.STOP,
                    f"Winkler DO {do:.2f} mg/L is above {DO_IMPLAUSIBLE_MG_L:g} mg/L, which a stream rarely reaches:"
                    " a typing mistake in the titrant volume or normality?",
                    "Check the bench sheet and the normality; re-titrate if the bottle allows.",
                    "titrant_ml",
                )
            )
    if collected_at is not None and fixed_at is not None:
        try:
            delay_min = (fixed_at - collected_at).total_seconds() / 60.0
        except TypeError:
            raise ValueError(
                "collected_at and fixed_at mix a time zone with none; accepted: both with a time zone"
            ) from None
        if delay_min > FIXING_DELAY_MAX_MIN:
            flags.append(
                Flag(
                    "winkler.late_fixing",
                    Severity.WARNING,
                    f"The bottle was fixed {delay_min:.0f} min after collection; fixing belongs on site at collection"
                    f" (within {FIXING_DELAY_MAX_MIN:g} min here), and the holding clock ran from collection anyway.",
                    "Qualify the result as the program's SOP says; fix bottles at the stream next time.",
                    "fixed_at",
                )
            )
    return flags
