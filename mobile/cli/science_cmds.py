"""Science sub-commands of `streamtab`: sat, salinity, winkler, bod (desk checks of the field arithmetic)."""

from __future__ import annotations

import re

from mobile.cli._common import CliError, emit_json, emit_table, read_dilutions_file

__all__ = ["register"]


def _number(text: str, option: str, accepted: str, units: tuple[str, ...] = ()) -> float:
    """A plain number (decimal comma allowed), optionally followed by one of ``units`` (core's grammar)."""
    from core.science.quantities import QuantityError, read_number

    try:
        return read_number(text, option, units=units, accepted=accepted)
    except QuantityError as exc:
        raise CliError(exc.message) from None


def _typed(kind: str, text: str, option: str, default_unit: str | None = None):
    """A typed quantity (number and unit) read and checked against the one table of limits."""
    from core.science.quantities import QuantityError, read

    try:
        return read(kind, text, option, default_unit=default_unit)
    except QuantityError as exc:
        raise CliError(exc.message) from None


def _core(option: str, fn, *args, **kwargs):
    """Calls core, turning its ValueError into a one-line CliError that names the option."""
    try:
        return fn(*args, **kwargs)
    except ValueError as exc:
        raise CliError(f"{option}: {str(exc).splitlines()[0] if str(exc) else 'invalid value'}") from None


def _fmt(x: float | None, digits: int, unit: str = "") -> str:
    if x is None:
        return "-"
    return f"{x:.{digits}f}{(' ' + unit) if unit else ''}"


def _flag_rows(flags) -> list[tuple[str, str]]:
    return [("flag", f"{f['severity']} {f['code']}: {f['message']}") for f in flags]


# --- sat ------------------------------------------------------------------------------------------


def _sat(args) -> int:
    from core.science.assess import assess_reading

    temp_c = _typed("temp", args.temp, "--temp").value
    pressure_hpa = _typed("pressure", args.pressure, "--pressure").value
    salinity = None
    if args.salinity is not None:
        salinity = _typed("salinity", args.salinity, "--salinity").value
    cond = None
    if args.conductivity is not None:
        cond = _typed("conductivity", args.conductivity, "--conductivity").value
    elif args.at_25:
        raise CliError("--at-25 needs --conductivity; accepted: --conductivity '410 uS/cm' --at-25")
    do_mg_l = do_percent = None
    if args.do is not None:
        do = _typed("do", args.do, "--do", default_unit="mg/L")
        if do.unit == "%":
            do_percent = do.value
        else:
            do_mg_l = do.value
    elevation = None
    if args.elevation is not None:
        elevation = _typed("elevation", args.elevation, "--elevation").value
    try:
        a = assess_reading(
            temp_c,
            pressure_hpa,
            salinity=salinity,
            conductivity_us_cm=cond,
            conductivity_is_sc25=bool(args.at_25),
            do_mg_l=do_mg_l,
            do_percent=do_percent,
            method=args.method,
            elevation_m=elevation,
            percent_basis=args.percent_basis,
        )
    except ValueError as exc:
        msg = _which_sat_option(str(exc))
        if cond is not None and msg.startswith("--salinity"):
            msg = "--conductivity: the salinity derived from it is impossible: " + msg[len("--salinity: ") :]
        raise CliError(msg) from None
    d = a.to_dict()
    if args.json:
        emit_json(d)
        return 0
    src = {"given": "given", "conductivity": "from conductivity", "default": "fresh water, assumed"}
    rows = [
        ("saturation", f"{_fmt(a.do_sat_mg_l, 2, 'mg/L')} ({a.method})"),
        ("temperature", _fmt(a.temp_c, 2, "°C")),
        ("pressure", _fmt(a.pressure_hpa, 1, "hPa (station)")),
        ("salinity", f"{a.salinity:.3f} ({src[a.salinity_source]})"),
    ]
    if a.specific_conductance_us_cm is not None:
        rows.append(("specific conductance", _fmt(a.specific_conductance_us_cm, 0, "µS/cm at 25 °C")))
    if a.do_mg_l is not None:
        rows.append(("DO", _fmt(a.do_mg_l, 2, "mg/L")))
        rows.append(("saturation %", _fmt(a.percent_saturation, 1, "% (of local saturation)")))
    rows += _flag_rows(d["flags"])
    emit_table(rows)
    return 0


_SAT_NAMES = (
    ("temp_c", "--temp"),
    ("pressure_hpa", "--pressure"),
    ("salinity", "--salinity"),
    ("conductivity", "--conductivity"),
    ("do_mg_l", "--do"),
    ("do_percent", "--do"),
    ("elevation_m", "--elevation"),
    ("method", "--method"),
)


def _as_option(first: str, name: str, option: str) -> str:
    """Core's "name = value is ..." as the person typed it: "--option value is ..."."""
    rest = first[len(name) :]
    if rest.startswith(" = "):
        return f"{option} {rest[3:]}"
    if rest.startswith(("[", " ")):
        return f"{option}{rest}" if rest.startswith(" ") else f"{option}: {first}"
    return f"{option}: {first}"


def _which_sat_option(message: str) -> str:
    first = message.splitlines()[0] if message else "invalid value"
    for name, option in _SAT_NAMES:
        if first.startswith(name):
            return _as_option(first, name, option)
    return first


# --- salinity --------------------------------------------------------------------------------------


def _salinity(args) -> int:
    from core.science.conductivity import practical_salinity, specific_conductance_us_cm

    us_cm = _typed("conductivity", args.conductivity, "--conductivity").value
    temp_c = _typed("temp", args.temp, "--temp").value
    p = _number(args.pressure_dbar, "--pressure-dbar", "sea pressure in dbar, 0 to 11000 (0 at the surface)", ("dbar",))
    names = {
        "conductivity_ms_cm": "--conductivity",
        "conductivity_us_cm": "--conductivity",
        "temp_c": "--temp",
        "pressure_dbar": "--pressure-dbar",
    }
    try:
        s = practical_salinity(us_cm / 1000.0, temp_c, p)
        sc = specific_conductance_us_cm(us_cm, temp_c)
    except ValueError as exc:
        raise CliError(_name_option(str(exc), names)) from None
    out = {
        "salinity": s,
        "specific_conductance_us_cm": sc,
        "conductivity_us_cm": us_cm,
        "temp_c": temp_c,
        "pressure_dbar": p,
    }
    # PSS-78 with Hill et al. (1986) dips just below zero for nearly pure water: say so, as `sat` does
    below = s < 0.0
    if below:
        out["note"] = "below what PSS-78 resolves; take the salinity as 0"
    if args.json:
        emit_json(out)
        return 0
    emit_table(
        [
            ("salinity", f"{s:.4f} (PSS-78" + ("; below what it resolves — take it as 0)" if below else ")")),
            ("specific conductance", _fmt(sc, 1, "µS/cm at 25 °C (linear, 0.0191 /°C)")),
            ("conductivity", _fmt(us_cm, 1, f"µS/cm at {temp_c:g} °C")),
        ]
    )
    return 0


# --- winkler ---------------------------------------------------------------------------------------


def _winkler(args) -> int:
    from core.science.winkler import SAFETY_NOTE, original_sample_ml, winkler_do_mg_l, winkler_plausibility_flags

    ml = ("mL",)
    titrant = _number(args.titrant_ml, "--titrant-ml", "titrant volume in mL, 0 to 100", ml)
    normality = _number(args.normality, "--normality", "titrant normality in eq/L, above 0 (usually 0.025)", ("N",))
    titrated = _number(args.titrated_ml, "--titrated-ml", "volume titrated in mL, above 0 and at most the bottle", ml)
    bottle = _number(args.bottle_ml, "--bottle-ml", "bottle volume in mL (usually 300)", ml)
    reagents = _number(args.reagents_ml, "--reagents-ml", "total fixing reagents in mL (usually 2)", ml)
    names = {
        "titrant_ml": "--titrant-ml",
        "normality": "--normality",
        "titrated_ml": "--titrated-ml",
        "bottle_ml": "--bottle-ml",
        "reagents_ml": "--reagents-ml",
    }
    try:
        do = winkler_do_mg_l(titrant, normality, titrated, bottle, reagents)
        orig = original_sample_ml(titrated, bottle, reagents)
    except ValueError as exc:
        raise CliError(_name_option(str(exc), names)) from None
    flags = [f.to_dict() for f in winkler_plausibility_flags(do_mg_l=do, normality=normality)]
    if args.json:
        emit_json({"do_mg_l": do, "original_sample_ml": orig, "flags": flags})
        return 0
    emit_table(
        [("DO", _fmt(do, 2, "mg/L")), ("original sample", _fmt(orig, 2, "mL"))]
        + _flag_rows(flags)
        + [("caution", SAFETY_NOTE)]
    )
    return 0


def _name_option(message: str, names: dict[str, str]) -> str:
    first = message.splitlines()[0] if message else "invalid value"
    for name, option in sorted(names.items(), key=lambda kv: -len(kv[0])):
        if first.startswith(name):
            out = _as_option(first, name, option)
            for other, opt in sorted(names.items(), key=lambda kv: -len(kv[0])):  # "(plus seed_ml = 2)"
                out = re.sub(rf"(?<![\w-]){re.escape(other)}(?: = |(?!\w))", opt + " ", out).replace("  ", " ")
            return out.replace(" ;", ";").replace(" )", ")").rstrip()
    return first


# --- bod -------------------------------------------------------------------------------------------

_BOD_SINGLE = ("initial", "final", "sample_ml", "seed_ml", "seed_uptake")


def _bod(args) -> int:
    from core.science.bod import BOD_ANALYTES, bod_dilution, bod_report

    given = [n for n in _BOD_SINGLE if getattr(args, n) is not None]
    if args.dilutions is not None:
        if given:
            raise CliError(
                f"--dilutions cannot be combined with --{given[0].replace('_', '-')}; accepted: either"
                " --dilutions FILE or --initial/--final/--sample-ml"
            )
        return _bod_file(args)
    for n in ("initial", "final", "sample_ml"):
        if getattr(args, n) is None:
            raise CliError(
                f"--{n.replace('_', '-')} is missing; accepted: --initial, --final and --sample-ml"
                " (mg/L, mg/L, mL), or --dilutions FILE"
            )
    if (args.seed_ml is None) != (args.seed_uptake is None):
        raise CliError(
            "--seed-ml and --seed-uptake go together; accepted: both (mL of seed, and mg/L per mL"
            " from the seed controls) or neither"
        )
    mg = ("mg/L",)
    kw = dict(
        initial_do_mg_l=_number(args.initial, "--initial", "initial DO in mg/L, 0 to 70", mg),
        final_do_mg_l=_number(args.final, "--final", "final DO in mg/L, 0 to 70", mg),
        sample_ml=_number(args.sample_ml, "--sample-ml", "sample volume in mL, above 0", ("mL",)),
        bottle_ml=_number(args.bottle_ml, "--bottle-ml", "bottle volume in mL (usually 300)", ("mL",)),
    )
    if args.seed_ml is not None:
        kw["seed_ml"] = _number(args.seed_ml, "--seed-ml", "seed volume in mL, 0 or more", ("mL",))
        kw["seed_uptake_mg_l_per_ml"] = _number(
            args.seed_uptake, "--seed-uptake", "seed uptake in mg/L per mL of seed, 0 or more"
        )
    names = {
        "initial_do_mg_l": "--initial",
        "final_do_mg_l": "--final",
        "sample_ml": "--sample-ml",
        "bottle_ml": "--bottle-ml",
        "seed_ml": "--seed-ml",
        "seed_uptake_mg_l_per_ml": "--seed-uptake",
    }
    try:
        d = bod_dilution(**kw)
    except ValueError as exc:
        raise CliError(_name_option(str(exc), names)) from None
    analyte = BOD_ANALYTES[1] if args.nitrification_inhibitor else BOD_ANALYTES[0]
    report, report_flags = bod_report([d], analyte)
    flags = [f.to_dict() for f in d.flags + report_flags]
    if args.json:
        emit_json(
            {
                "bod_mg_l": d.bod_mg_l,
                "valid": d.valid,
                "analyte": analyte,
                "report": report.to_dict(),
                "flags": flags,
                "depletion_mg_l": d.depletion_mg_l,
                "seed_correction_mg_l": d.seed_correction_mg_l,
            }
        )
        return 0
    emit_table(
        [
            (analyte, report.text),
            ("this dilution", _fmt(d.bod_mg_l, 1, "mg/L") + ("" if d.valid else " (not valid)")),
            ("depletion", _fmt(d.depletion_mg_l, 2, "mg/L")),
            ("seed correction", _fmt(d.seed_correction_mg_l, 2, "mg/L")),
        ]
        + _flag_rows(flags)
    )
    return 0


def _bod_file(args) -> int:
    from core.science.bod import bod_from_dilutions, seed_uptake_per_ml

    doc, controls, inhibitor = read_dilutions_file(args.dilutions)
    inhibitor = inhibitor or bool(args.nitrification_inhibitor)
    if controls is not None:
        s = _core("--dilutions seed_controls", seed_uptake_per_ml, controls)
        doc = [
            dict(d, seed_uptake_mg_l_per_ml=d.get("seed_uptake_mg_l_per_ml", s))
            if isinstance(d, dict) and d.get("seed_ml")
            else d
            for d in doc
        ]
    r = _core("--dilutions", bod_from_dilutions, doc, nitrification_inhibitor=inhibitor)
    d = r.to_dict()
    if args.json:
        emit_json(d)
        return 0
    rows = [(r.analyte, r.report.text if r.report is not None else "-")]
    for i, dil in enumerate(r.dilutions, 1):
        rows.append(
            (
                f"dilution {i}",
                f"{dil.sample_ml:g} mL: {dil.bod_mg_l:.1f} mg/L, depletion"
                f" {dil.depletion_mg_l:.2f} mg/L, {'valid' if dil.valid else 'not valid'}",
            )
        )
    rows += _flag_rows(d["flags"])
    emit_table(rows)
    return 0


# --- registration ----------------------------------------------------------------------------------


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds this module's sub-commands (sat, salinity, winkler, bod) to the top-level parser."""
    from core.science.oxygen import METHODS, PERCENT_BASES

    p = sub.add_parser(
        "sat",
        help="DO saturation target and %% saturation of a reading",
        description="Saturation target at the water temperature and station pressure; with --do,"
        " the reading's % saturation. Informs only: the program's SOP decides.",
    )
    p.add_argument("--temp", required=True, help="water temperature, e.g. 18.5 (°C) or '65 F'")
    p.add_argument(
        "--pressure",
        required=True,
        help="station pressure with unit: '752 mmHg', '29.61inHg', '1002.3 hPa' (not sea-level adjusted)",
    )
    g = p.add_mutually_exclusive_group()
    g.add_argument("--salinity", help="practical salinity, e.g. 0.2 or '0.2 psu' (default 0)")
    g.add_argument("--conductivity", help="conductivity at the water temperature with unit, e.g. '410 uS/cm'")
    p.add_argument("--at-25", action="store_true", help="--conductivity is already specific conductance at 25 °C")
    p.add_argument("--do", help="DO reading in mg/L (e.g. 8.4), or in %% written with %% (e.g. '92 %%')")
    p.add_argument(
        "--elevation", help="site elevation, e.g. 1200 (m) or '3900 ft'; checks for a sea-level-adjusted pressure"
    )
    p.add_argument(
        "--percent-basis",
        default="local",
        choices=PERCENT_BASES,
        help="what the meter's 100 %% is: saturation at the local pressure (default) or at 760 mmHg"
        " (sea-level); used when --do is in %%",
    )
    p.add_argument("--method", default="benson-krause", choices=METHODS, help="solubility equation")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(handler=_sat)

    p = sub.add_parser(
        "salinity",
        help="practical salinity (PSS-78) from conductivity",
        description="Practical salinity from conductivity and temperature (PSS-78, Hill et al."
        " 1986 below 2) and specific conductance at 25 °C.",
    )
    p.add_argument("--conductivity", required=True, help="conductivity with unit, e.g. '42.914 mS/cm'")
    p.add_argument("--temp", required=True, help="temperature, °C (or '65 F')")
    p.add_argument("--pressure-dbar", default="0", help="sea pressure in dbar (default 0, the surface)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(handler=_salinity)

    p = sub.add_parser(
        "winkler",
        help="DO from a Winkler (azide) titration",
        description="DO from a Winkler titration, azide modification, with the correction for"
        " sample displaced by the fixing reagents. Caution: corrosive and toxic"
        " reagents; follow your program's SOP.",
    )
    p.add_argument("--titrant-ml", required=True, help="thiosulfate used, mL")
    p.add_argument("--normality", required=True, help="thiosulfate normality, e.g. 0.025")
    p.add_argument("--titrated-ml", required=True, help="volume titrated, mL (e.g. 201)")
    p.add_argument("--bottle-ml", default="300", help="bottle volume, mL (default 300)")
    p.add_argument("--reagents-ml", default="2", help="total fixing reagents added, mL (default 2)")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(handler=_winkler)

    p = sub.add_parser(
        "bod",
        help="BOD5 from a dilution (or a file of dilutions)",
        description="BOD5 by Standard Methods 5210 B: one dilution from the options, or several"
        " of one sample from a JSON file. The reported result follows 5210 B: the"
        " mean of agreeing valid dilutions, '< bound' when no dilution used 2.0 mg/L,"
        " '> bound' when every dilution ended under 1.0 mg/L.",
    )
    p.add_argument("--initial", help="initial DO of the dilution, mg/L")
    p.add_argument("--final", help="DO after 5 days, mg/L")
    p.add_argument("--sample-ml", help="sample volume in the bottle, mL")
    p.add_argument("--bottle-ml", default="300", help="bottle volume, mL (default 300)")
    p.add_argument("--seed-ml", help="seed volume in the bottle, mL")
    p.add_argument("--seed-uptake", help="seed uptake, mg/L per mL of seed")
    p.add_argument(
        "--nitrification-inhibitor",
        action="store_true",
        help="a nitrification inhibitor was added: the result is CBOD5, reported as its own analyte",
    )
    p.add_argument(
        "--dilutions",
        metavar="FILE",
        help="JSON file: a list of {initial_do_mg_l, final_do_mg_l, sample_ml[, bottle_ml, seed_ml,"
        " seed_uptake_mg_l_per_ml]} or an object with dilutions and seed_controls",
    )
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(handler=_bod)
