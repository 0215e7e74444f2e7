"""Winkler titration, azide modification: DO from titrant volume, thiosulfate normality, and the inverse.

Caution: the fixing and titration reagents hurt people. Manganous sulfate and the alkali-iodide-azide
reagent are corrosive and toxic (sodium azide); concentrated sulfuric acid burns. Wear eye protection
and gloves, work as the program's SOP and the reagents' safety data sheets say, and dispose of waste
as local regulations require.
"""
from __future__ import annotations

import numpy as np

from core.science._validate import real

__all__ = ["MG_O_PER_MEQ", "original_sample_ml", "winkler_do_mg_l", "expected_titrant_ml", "thiosulfate_normality",
           "SAFETY_NOTE"]

#: One equivalent of oxygen is 8 g (1 O2 → 4 S2O3²⁻), i.e. 8000 mg per equivalent, 8 mg per meq.
MG_O_PER_MEQ = 8.0

#: The one reagent caution shown wherever Winkler bottles are fixed or titrated (field and lab).
SAFETY_NOTE = ("Caution, Winkler reagents: manganous sulfate is harmful, alkali-iodide-azide is caustic and toxic"
               " (sodium azide), and concentrated sulfuric acid burns. Wear gloves and eye protection;"
               " follow your program's SOP and the reagents' safety data sheets.")


def _volumes(titrated_ml, bottle_ml, reagents_ml):
    b = real(bottle_ml, "bottle_ml", lo=0.0, hi=2000.0, lo_open=True, unit="mL", note=" (BOD bottles are 300 mL)")
    r = real(reagents_ml, "reagents_ml", lo=0.0, hi=2000.0, unit="mL",
             note=" (total fixing reagents added to the bottle, usually 2 mL: 1 + 1)")
    v = real(titrated_ml, "titrated_ml", lo=0.0, hi=2000.0, lo_open=True, unit="mL",
             note=" (at most the bottle's volume)")
    if np.any(np.asarray(r) >= b):
        raise ValueError(f"reagents_ml = {_show(r)} is not less than bottle_ml = {_show(b)}; accepted: a few mL"
                         " of fixing reagents (usually 2) in a larger bottle (usually 300 mL)")
    if np.any(np.asarray(v) > b):
        raise ValueError(f"titrated_ml = {_show(v)} is more than the bottle holds (bottle_ml = {_show(b)});"
                         " accepted: above 0 and at most bottle_ml")
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
