"""`streamtab lab pending|winkler|bod|duplicates|results`: the analyst's bench results on synced trips."""

from __future__ import annotations

import re
import sys
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from core.records.messages import when_text
from mobile.cli._common import (
    CliError,
    emit_json,
    emit_table,
    fail,
    open_store,
    read_dilutions_file,
    read_text_file,
    resolve_trip_id,
)
from mobile.cli._common import parse_time as _time

__all__ = ["register"]

#: Core input names → the option a person typed.
_OPTIONS = {
    "titrant_ml": "--titrant-ml",
    "titrated_ml": "--titrated-ml",
    "bottle_ml": "--bottle-ml",
    "reagents_ml": "--reagents-ml",
    "normality": "--normality",
    "standardisation.titrant_ml": "--std-titrant-ml",
    "standardisation.standard_ml": "--std-ml",
    "standardisation.standard_normality": "--std-normality",
    "standardised_at": "--standardised-at",
    "analysed_at": "--at",
    "bottle": "BOTTLE",
    "redo": "--redo",
    "dilutions": "--dilutions",
    "seed_controls": "--dilutions",
    "blank_depletion_mg_l": "--blank-depletion",
    "gga_bod_mg_l": "--gga",
    "incubation_start": "--incubation-start",
    "incubation_end": "--incubation-end",
    "incubator_temp_c": "--incubator-temp",
    "meter_tolerance_mg_l": "--meter-tolerance",
    "duplicate_rpd_percent": "--rpd-limit",
    "now": "--now",
}


# --------------------------------------------------------------------------------------------
# Reading what was typed
# --------------------------------------------------------------------------------------------
def _number(text: str | None, option: str, accepted: str, units: tuple[str, ...] = ()) -> float | None:
    """A number as typed ("7.3", "7,3", "7.3 mL"); a unit, when given, must be one of `units` (core's grammar)."""
    from core.science.quantities import QuantityError, read_number

    if text is None:
        return None
    try:
        return read_number(text, option, units=units, accepted=accepted)
    except QuantityError as exc:
        raise CliError(exc.message) from None


def _lab_error(exc: Exception, options: dict[str, str] | None = None) -> CliError:
    """The core's refusal as one line naming the option as typed: its "name = value ..." opening and any
    other input named inside it ("(bottle_ml = 300)") become the options ("--at 2026-...", "--bottle-ml 300").
    `options` names an input that came from another option this time (the analysis time from --incubation-end)."""
    names = {**_OPTIONS, **(options or {})}
    field = getattr(exc, "field", "")
    option = names.get(field, "")
    msg = str(exc).splitlines()[0] if str(exc) else "invalid value"
    if field.startswith("standardisation."):
        msg = msg.removeprefix("standardisation ")
    own = field.rsplit(".", 1)[-1]
    if option and msg.startswith(f"{own}: "):  # "seed_controls: ..." under the option's own name
        msg = msg[len(own) + 2 :]
    named = bool(option) and msg.startswith(f"{own} = ")
    if named:
        msg = f"{option} {msg[len(own) + 3 :]}"
    for name, opt in sorted(names.items(), key=lambda kv: -len(kv[0])):
        short = name.rsplit(".", 1)[-1]
        if "_" in short:  # an internal name; plain words such as "bottle" stay words
            msg = re.sub(rf"(?<![\w-]){re.escape(short)}(?: = |(?!\w))", (option if short == own else opt) + " ", msg)
    msg = msg.replace("  ", " ").replace(" ;", ";").replace(" )", ")").rstrip()
    return CliError(msg if named or not option else f"{option}: {msg}")


#: LabSettings fields a program may set in its settings as ``lab_<name>``; options override them.
_PROGRAM_KEYS = ("meter_tolerance_mg_l", "duplicate_rpd_percent", "duplicate_abs_mg_l", "standardisation_max_age_h")


def _now(args) -> datetime:  # noqa: ANN001
    return _time(getattr(args, "now", None), "--now") or datetime.now(timezone.utc)


def _settings(args, store):  # noqa: ANN001
    """LabSettings: defaults, then the program's settings (``lab_<name>`` fields), then the options."""
    from dataclasses import replace

    from core.rules.lab import LabInputError, LabSettings
    from core.store import StoreError

    try:
        program = store.settings()
    except StoreError as exc:
        fail(str(exc))
    kw: dict[str, Any] = {"holding_overrides_h": dict(program.holding_overrides_h or {})}
    # A program may keep the lab's thresholds in its settings (the models keep unknown fields).
    for key in _PROGRAM_KEYS:
        value = (program.model_extra or {}).get(f"lab_{key}")
        if value is not None:
            kw[key] = value
    try:
        base = LabSettings(**kw)
    except LabInputError as exc:
        fail(f"program settings lab_{exc.field}: {exc.message}; change it in the program's settings")
    opts: dict[str, Any] = {}
    tol = _number(
        getattr(args, "meter_tolerance", None), "--meter-tolerance", "mg/L, above 0 to 5 (default 0.5)", ("mg/L",)
    )
    if tol is not None:
        opts["meter_tolerance_mg_l"] = tol
    rpd = _number(getattr(args, "rpd_limit", None), "--rpd-limit", "%, above 0 to 200 (default 20)", ("%",))
    if rpd is not None:
        opts["duplicate_rpd_percent"] = rpd
    try:
        return replace(base, **opts)
    except LabInputError as exc:
        raise _lab_error(exc) from None


# --------------------------------------------------------------------------------------------
# The store
# --------------------------------------------------------------------------------------------
def _store(args):  # noqa: ANN001
    return open_store(args.data_dir)


def _trip(store, ident: str):  # noqa: ANN001
    """The trip named by its id or a unique start of it (8 characters are usually enough)."""
    from core.store import StoreError

    trip_id = resolve_trip_id(store, ident, "TRIP_ID")
    try:
        return store.load_trip(trip_id)
    except StoreError as exc:
        fail(str(exc))


def _record(store, trip_id: str, compute, describe, options: dict[str, str] | None = None):  # noqa: ANN001, ANN202
    """Computes a lab outcome on the stored trip and saves it in one read–modify–write under the
    store's lock (no other writer, e.g. a sync, can come between); returns (outcome, saved trip).
    `compute(trip)` gives the outcome, `describe(outcome)` the audit sentence; `options` as for
    :func:`_lab_error`."""
    from core.rules.lab import LabInputError
    from core.store import StoreError

    box: dict[str, Any] = {}

    def apply(trip):  # noqa: ANN001, ANN202
        box["out"] = compute(trip)
        return box["out"].trip

    try:
        saved = store.update_trip(trip_id, lambda: describe(box["out"]), apply)
    except LabInputError as exc:
        raise _lab_error(exc, options) from None
    except StoreError as exc:
        fail(f"nothing was saved: {exc}")
    return box["out"], saved


# --------------------------------------------------------------------------------------------
# Commands
# --------------------------------------------------------------------------------------------
def _flag_rows(flags: list[dict]) -> list[tuple[str, str]]:
    return [("flag", f"[{f['severity']}] {f['code']}: {f['message']}") for f in flags]


def _standardisation(args):  # noqa: ANN001, ANN202
    """The thiosulfate standardisation typed as --std-titrant-ml (with --std-ml, --std-normality,
    --standardised-at), or None when --std-titrant-ml is not given."""
    from core.rules.lab import Standardisation

    if args.std_titrant_ml is None:
        return None
    ml = ("mL", "ml")
    return Standardisation(
        titrant_ml=_number(
            args.std_titrant_ml, "--std-titrant-ml", "thiosulfate used on the standard in mL, above 0 to 100", ml
        ),
        standard_ml=_number(args.std_ml, "--std-ml", "bi-iodate standard taken in mL, above 0 (usually 20)", ml),
        standard_normality=_number(
            args.std_normality, "--std-normality", "standard normality in eq/L, above 0 to 1 (usually 0.025)", ("N",)
        ),
        standardised_at=_time(args.standardised_at, "--standardised-at"),
    )


def _winkler(args) -> int:  # noqa: ANN001
    from core.rules.lab import CAUTION, WINKLER_KINDS, record_winkler

    ml = ("mL", "ml")
    titrant = _number(args.titrant_ml, "--titrant-ml", "thiosulfate used in mL, 0 to 100", ml)
    titrated = _number(
        args.titrated_ml, "--titrated-ml", "volume titrated in mL, above 0 and at most the bottle (usually 201)", ml
    )
    bottle_ml = _number(args.bottle_ml, "--bottle-ml", "bottle volume in mL, above 0 (usually 300)", ml)
    reagents = _number(args.reagents_ml, "--reagents-ml", "total fixing reagents in mL, 0 or more (usually 2)", ml)
    if args.normality is not None and args.std_titrant_ml is not None:
        fail(
            "--normality and --std-titrant-ml: give one, not both; accepted: --normality in eq/L (usually 0.025)"
            " or --std-titrant-ml (thiosulfate used on the bi-iodate standard, mL)"
        )
    normality = _number(
        args.normality, "--normality", "titrant normality in eq/L, above 0 to 1 (usually 0.025)", ("N",)
    )
    std = _standardisation(args)
    if std is None and args.standardised_at is not None:
        fail("--standardised-at goes with --std-titrant-ml; accepted: both, or --normality alone")
    now = datetime.now(timezone.utc)
    at = _time(args.at, "--at") or now
    store = _store(args)
    settings = _settings(args, store)
    trip = _trip(store, args.trip)
    batch = _batch(trip, args.bottle, WINKLER_KINDS)
    if args.normality is None and args.std_titrant_ml is None and (batch is None or batch.std_titrant_ml is None):
        fail(
            "--normality or --std-titrant-ml is needed (the bottle's bench batch has no standardisation);"
            " accepted: --normality in eq/L (usually 0.025) or --std-titrant-ml, or record the batch's"
            " standardisation with 'streamtab lab batch'"
        )
    entered = {
        "titrant_ml": args.titrant_ml,
        "titrated_ml": args.titrated_ml,
        "bottle_ml": args.bottle_ml,
        "reagents_ml": args.reagents_ml,
    }
    if args.normality is not None:
        entered["normality"] = args.normality
    elif args.std_titrant_ml is None:
        entered["batch"] = batch.name
    else:
        entered.update(
            std_titrant_ml=args.std_titrant_ml,
            std_ml=args.std_ml,
            std_normality=args.std_normality,
            standardised_at=args.standardised_at,
        )

    def compute(t):  # noqa: ANN001, ANN202
        return record_winkler(
            t,
            args.bottle,
            titrant_ml=titrant,
            titrated_ml=titrated,
            normality=normality,
            standardisation=std,
            bottle_ml=bottle_ml,
            reagents_ml=reagents,
            analysed_at=at,
            now=now,
            analyst=args.analyst or "",
            notes=args.notes or "",
            redo_reason=args.redo,
            settings=settings,
            entered=entered,
            batch=batch,
        )

    def describe(o):  # noqa: ANN001, ANN202
        who = f" ({o.result.analyst})" if o.result.analyst else ""
        return f"lab: Winkler DO {o.result.value:.2f} mg/L on bottle {o.bottle.label}{who}" + (
            " (re-titration)" if o.superseded else ""
        )

    out, saved = _record(store, trip.id, compute, describe)
    d = out.result.inputs["derived"]
    data = {
        **out.to_dict(),
        "do_mg_l": out.result.value,
        "original_sample_ml": d["original_sample_ml"],
        "normality": d["normality"],
        "valid": out.result.valid,
        "revision": saved.revision,
        "caution": CAUTION,
    }
    if args.json:
        emit_json(data)
        return 0
    hold = d["holding"]
    rows = [
        ("trip", f"{saved.id[:8]} (revision {saved.revision})"),
        ("bottle", f"{out.bottle.label} ({out.bottle.kind}) at {out.stop.site_id}"),
        ("Winkler DO", f"{out.result.value:.2f} mg/L" + ("" if out.result.valid else " (NOT valid)")),
        ("original sample", f"{d['original_sample_ml']:.2f} mL"),
        ("normality", f"{d['normality']:.5f} N ({d['normality_source']['kind']})"),
        ("held", f"{hold['held_h']:.1f} h from {hold['from']} (limit {hold['limit_h']:g} h)"),
    ]
    if d.get("meter_do_mg_l") is not None:
        rows.append(
            (
                "field meter",
                f"{d['meter_do_mg_l']:.2f} mg/L, difference {d['meter_difference_mg_l']:+.2f}"
                f" mg/L (tolerance ±{d['meter_tolerance_mg_l']:g}; it implies"
                f" {d['titrant_ml_expected_from_meter'] or 0:.2f} mL of titrant)",
            )
        )
    else:
        rows.append(("field meter", d["meter_do_source"]))
    if out.superseded:
        rows.append(("supersedes", ", ".join(s[:8] for s in out.superseded) + " (kept, marked superseded)"))
    rows += _flag_rows(data["flags"])
    rows.append(("result id", out.result.id))
    rows.append(("caution", CAUTION))
    emit_table(rows)
    return 0


def _batch(trip, bottle_ref: str, kinds: tuple[str, ...]):  # noqa: ANN001
    """The bench batch covering the bottle (None when none does, or the label is not found: the
    recording call then says what is wrong with the label)."""
    from core.rules.lab import LabInputError, batch_for, find_bottle

    try:
        _, bottle, _ = find_bottle(trip, bottle_ref, kinds)
    except LabInputError:
        return None
    return batch_for(trip, bottle)


def _batch_cmd(args) -> int:  # noqa: ANN001
    """Records a bench batch's QC once; 'lab bod' and 'lab winkler' apply it to the batch's bottles."""
    from core.rules.lab import LabInputError, add_batch, batch_qc

    mg = ("mg/L", "mg/l")
    blank = _number(
        args.blank_depletion, "--blank-depletion", "dilution-water blank depletion in mg/L (≤ 0.20 passes)", mg
    )
    gga = _number(args.gga, "--gga", "glucose–glutamic acid check BOD5 in mg/L (198 ± 30.5 passes)", mg)
    temp = _number(args.incubator_temp, "--incubator-temp", "incubator temperature in °C (20 ± 1)", ("°C", "C"))
    start = _time(args.incubation_start, "--incubation-start")
    end = _time(args.incubation_end, "--incubation-end")
    controls = None
    if args.seed_sheet is not None:
        from core.rules.bench import SheetError, read_bench_sheet

        raw = read_text_file(args.seed_sheet, "--seed-sheet", "a bench sheet CSV with seed control rows")
        try:
            controls = read_bench_sheet(
                raw, name=f"--seed-sheet {Path(args.seed_sheet).name}", need_dilutions=False
            ).seed_controls
        except SheetError as exc:
            fail(str(exc))
        if not controls:
            fail(f"--seed-sheet {args.seed_sheet!r} has no seed control rows; accepted: rows of kind 'seed control'")
    std = _standardisation(args)
    now = datetime.now(timezone.utc)
    store = _store(args)
    settings = _settings(args, store)
    trip = _trip(store, args.trip)
    refs = [r for r in (args.bottles or "").split(",") if r.strip()]
    from core.store import StoreError

    box: dict[str, Any] = {}

    def apply(t):  # noqa: ANN001, ANN202 - runs under the store's lock on the stored trip
        new_trip, box["batch"] = add_batch(
            t,
            name=args.name,
            bottle_refs=refs,
            created_at=now,
            now=now,
            analyst=args.analyst or "",
            blank_depletion_mg_l=blank,
            gga_bod_mg_l=gga,
            seed_controls=controls,
            incubation_start=start,
            incubation_end=end,
            incubator_temp_c=temp,
            standardisation=std,
            notes=args.notes or "",
        )
        return new_trip

    try:
        saved = store.update_trip(
            trip.id, lambda: f"lab: batch {box['batch'].name} ({len(box['batch'].bottle_ids)} bottles)", apply
        )
    except LabInputError as exc:
        field = {"name": "--name", "bottle": "--bottles", "seed_controls": "--seed-sheet"}.get(exc.field)
        raise (CliError(f"{field}: {exc.message}") if field else _lab_error(exc)) from None
    except StoreError as exc:
        fail(f"nothing was saved: {exc}")
    batch = box["batch"]
    qc = batch_qc(batch, now, settings)
    labels = [b.label for s in saved.stops for b in s.bottles if b.id in set(batch.bottle_ids)]
    if args.json:
        emit_json(
            {
                "trip_id": saved.id,
                "revision": saved.revision,
                "batch": batch.model_dump(mode="json"),
                "bottles": labels,
                "qc": qc,
            }
        )
        return 0
    rows = [
        ("trip", f"{saved.id[:8]} (revision {saved.revision})"),
        ("batch", batch.name),
        ("bottles", ", ".join(labels)),
    ]
    for c in qc["checks"]:
        rows.append((c["check"], f"{c['shown']} — {c['verdict']}"))
        if c["flag"]:
            rows.append(("flag", f"[{c['flag']['severity']}] {c['flag']['message']}"))
    emit_table(rows)
    return 0


def _read_sheet(path_text: str, bottle: str) -> tuple[Any, Any]:
    from core.rules.bench import SheetError, read_bench_sheet

    path = Path(path_text)
    raw = read_text_file(path_text, "--sheet", "a bench sheet CSV (see 'streamtab lab sheet')")
    try:
        sheet = read_bench_sheet(raw, bottle=bottle, name=f"--sheet {path.name}")
    except SheetError as exc:
        fail(str(exc))
    return sheet.dilutions, (sheet.seed_controls or None)


def _bod(args) -> int:  # noqa: ANN001
    from core.rules.lab import BOD_KINDS, record_bod

    if (args.dilutions is None) == (args.sheet is None):
        fail("give the dilutions as --sheet FILE.csv (a bench sheet) or --dilutions FILE.json, one of the two")
    inhibitor = False
    if args.sheet is not None:
        dilutions, controls = _read_sheet(args.sheet, args.bottle)
    else:
        dilutions, controls, inhibitor = read_dilutions_file(args.dilutions)
    inhibitor = inhibitor or bool(args.nitrification_inhibitor)
    mg = ("mg/L", "mg/l")
    blank = _number(
        args.blank_depletion, "--blank-depletion", "dilution-water blank depletion in mg/L (≤ 0.20 passes)", mg
    )
    gga = _number(args.gga, "--gga", "glucose–glutamic acid check BOD5 in mg/L (198 ± 30.5 passes)", mg)
    temp = _number(args.incubator_temp, "--incubator-temp", "incubator temperature in °C (20 ± 1)", ("°C", "C"))
    start = _time(args.incubation_start, "--incubation-start")
    end = _time(args.incubation_end, "--incubation-end")
    now = datetime.now(timezone.utc)
    at = _time(args.at, "--at") or end or now
    store = _store(args)
    settings = _settings(args, store)
    trip = _trip(store, args.trip)
    source = (
        {"sheet_file": Path(args.sheet).name}
        if args.sheet is not None
        else {"dilutions_file": Path(args.dilutions).name}
    )
    entered: dict[str, Any] = {**source, "dilutions": dilutions}
    for key, value in (
        ("seed_controls", controls),
        ("blank_depletion", args.blank_depletion),
        ("gga", args.gga),
        ("incubator_temp", args.incubator_temp),
        ("incubation_start", args.incubation_start),
        ("incubation_end", args.incubation_end),
    ):
        if value is not None:
            entered[key] = value
    batch = _batch(trip, args.bottle, BOD_KINDS)

    def compute(t):  # noqa: ANN001, ANN202
        return record_bod(
            t,
            args.bottle,
            dilutions=dilutions,
            seed_controls=controls,
            blank_depletion_mg_l=blank,
            gga_bod_mg_l=gga,
            incubation_start=start,
            incubation_end=end,
            incubator_temp_c=temp,
            analysed_at=at,
            now=now,
            analyst=args.analyst or "",
            notes=args.notes or "",
            redo_reason=args.redo,
            settings=settings,
            entered=entered,
            batch=batch,
            nitrification_inhibitor=inhibitor,
        )

    def report_of(o):  # noqa: ANN001, ANN202
        return o.result.inputs["derived"].get("report") or {}

    def shown_of(o):  # noqa: ANN001, ANN202
        rep = report_of(o)
        if rep.get("text"):
            return rep["text"]
        return "no valid dilution" if o.result.value is None else f"{o.result.value:.1f} mg/L"

    def describe(o):  # noqa: ANN001, ANN202
        return (
            f"lab: {report_of(o).get('analyte', 'BOD5')} {shown_of(o)} on bottle {o.bottle.label}"
            + (f" ({o.result.analyst})" if o.result.analyst else "")
            + (" (repeat)" if o.superseded else "")
        )

    typed_as: dict[str, str] = {}  # the option a value came from when it was not typed as itself
    if args.sheet is not None:
        typed_as.update(dilutions=f"--sheet {Path(args.sheet).name}", seed_controls=f"--sheet {Path(args.sheet).name}")
    if args.at is None and end is not None:
        typed_as["analysed_at"] = "--incubation-end"
    out, saved = _record(store, trip.id, compute, describe, typed_as)
    shown = shown_of(out)
    report = report_of(out)
    what = report.get("analyte", "BOD5")
    d = out.result.inputs["derived"]
    data = {
        **out.to_dict(),
        "bod_mg_l": out.result.value,
        "valid": out.result.valid,
        "analyte": what,
        "report": report,
        "dilutions": d["dilutions"],
        "revision": saved.revision,
    }
    if args.json:
        emit_json(data)
        return 0
    rows = [
        ("trip", f"{saved.id[:8]} (revision {saved.revision})"),
        ("bottle", f"{out.bottle.label} ({out.bottle.kind}) at {out.stop.site_id}"),
        (what, shown + ("" if out.result.valid or report.get("qualifier") else " (NOT valid)")),
    ]
    for i, dil in enumerate(d["dilutions"], 1):
        rows.append(
            (
                f"dilution {i}",
                f"{dil['sample_ml']:g} mL: {dil['bod_mg_l']:.1f} mg/L, depletion"
                f" {dil['depletion_mg_l']:.2f} mg/L, {'valid' if dil['valid'] else 'not valid'}",
            )
        )
    if "holding" in d:
        rows.append(
            ("held", f"{d['holding']['held_h']:.1f} h from collection to set-up (limit {d['holding']['limit_h']:g} h)")
        )
    if out.superseded:
        rows.append(("supersedes", ", ".join(s[:8] for s in out.superseded) + " (kept, marked superseded)"))
    rows += _flag_rows(data["flags"])
    rows.append(("result id", out.result.id))
    emit_table(rows)
    return 0


def _sheet(args) -> int:  # noqa: ANN001
    """A blank bench sheet: PDF to print, or CSV to fill in and read back with 'lab bod --sheet'."""
    from core.rules.lab import BOD_ANALYTE, LabInputError, pending_bottles
    from core.store.atomic import write_export

    out = Path(args.out)
    suffix = out.suffix.lower()
    if suffix not in (".pdf", ".csv"):
        fail(f"--out {args.out!r} must end in .pdf or .csv; accepted: e.g. bench-sheet.pdf")
    if not out.parent.exists():
        fail(
            f"--out {args.out!r}: the folder {str(out.parent)!r} does not exist; accepted: a file in an existing folder"
        )
    rows = int(_number(args.rows, "--rows", "a whole number of rows, 1 to 200") or 0) if args.rows else 18
    if not 1 <= rows <= 200:
        fail(f"--rows {args.rows!r} is out of range; accepted: 1 to 200")
    now = datetime.now(timezone.utc)
    labels: list[str] = []
    program = ""
    if args.trip:
        store = _store(args)
        trip = _trip(store, args.trip)
        program = trip.program
        try:
            waiting = pending_bottles([trip], now, _settings(args, store))
        except LabInputError as exc:
            raise _lab_error(exc) from None
        labels = [p.label for p in waiting if p.analyte == BOD_ANALYTE]
    if suffix == ".pdf":
        from mobile.paper.bench_pdf import render_bench_sheet

        data = render_bench_sheet(labels, rows=rows, printed_at=now, program=program)
    else:
        from core.rules.bench import DILUTION, SEED_CONTROL, write_bench_sheet

        body = [{"bottle": label, "kind": DILUTION, "bottle_ml": 300} for label in labels for _ in range(3)]
        body += [{"kind": SEED_CONTROL, "bottle_ml": 300} for _ in range(3)]
        data = write_bench_sheet(body, name=out.name).encode("utf-8")
    try:
        write_export(out, data)
    except OSError as exc:
        fail(f"--out {args.out!r} could not be written ({exc.strerror or exc}); accepted: a writable file")
    if args.json:
        emit_json({"out": str(out), "bottles": labels, "bytes": len(data)})
    else:
        sys.stdout.write(f"wrote {out}" + (f" with bottles {', '.join(labels)}" if labels else "") + "\n")
    return 0


def _duplicates(args) -> int:  # noqa: ANN001
    from core.rules.lab import duplicate_checks

    store = _store(args)
    settings = _settings(args, store)
    trip = _trip(store, args.trip)
    checks = [c.to_dict() for c in duplicate_checks(trip, settings)]
    if args.json:
        emit_json({"trip_id": trip.id, "limit_percent": settings.duplicate_rpd_percent, "duplicates": checks})
        return 0
    if not checks:
        sys.stdout.write(f"trip {trip.id[:8]}: no field duplicate bottles\n")
        return 0
    for c in checks:
        rpd = "—" if c["rpd_percent"] is None else f"{c['rpd_percent']:.1f} %"
        pv = "—" if c["primary_value"] is None else f"{c['primary_value']:.2f}"
        dv = "—" if c["duplicate_value"] is None else f"{c['duplicate_value']:.2f}"
        sys.stdout.write(
            f"{c['site_id']:<8} {c['analyte']:<11} {c['primary_label'] or '?':<10} {pv:>7}  "
            f"{c['duplicate_label']:<10} {dv:>7}  RPD {rpd:>8} (limit {c['limit_percent']:g} %)"
            f"  {c['status']}\n"
        )
        for f in c["flags"]:
            sys.stdout.write(f"  [{f['severity']}] {f['code']}: {f['message']}\n")
    return 0


def _left(seconds: float) -> str:
    from mobile.app.views import fmt_duration

    text = fmt_duration(seconds)
    return f"{text} left" if seconds >= 0 else f"expired {text} ago"


def _pending(args) -> int:  # noqa: ANN001
    from core.rules.lab import LabInputError, pending_bottles
    from core.store import StoreError

    now = _now(args)
    store = _store(args)
    settings = _settings(args, store)
    trips, skipped = [], []
    if args.trip:
        trips = [_trip(store, args.trip)]
    else:
        for s in store.list_trips():
            try:
                trips.append(store.load_trip(s.id))
            except StoreError as exc:
                skipped.append({"trip_id": s.id, "reason": str(exc)})
    try:
        items = [p.to_dict() for p in pending_bottles(trips, now, settings)]
    except LabInputError as exc:
        raise _lab_error(exc) from None
    if args.json:
        emit_json({"now": now.isoformat(), "count": len(items), "bottles": items, "skipped": skipped})
        return 0
    for sk in skipped:
        sys.stderr.write(f"streamtab: skipped trip {sk['trip_id'][:8]}: {sk['reason']}\n")
    if not items:
        sys.stdout.write("no bottles waiting for a lab result\n")
        return 0
    for p in items:
        sys.stdout.write(
            f"{p['label']:<10} {p['kind']:<9} {p['analyte']:<10} {p['site_id']:<7} trip {p['trip_id'][:8]}"
            f"  deadline {when_text(p['deadline'])}  {_left(p['remaining_s'])}"
            f"  (limit {p['holding_hours']:g} h from {p['clock_from']})\n"
        )
    return 0


def _results(args) -> int:  # noqa: ANN001
    from core.rules.lab import reported_bod

    store = _store(args)
    trip = _trip(store, args.trip)
    rows = []
    for stop in sorted(trip.stops, key=lambda s: s.arrived_at):
        for b in stop.bottles:
            for r in b.lab_results:
                rep = reported_bod(r)
                rows.append(
                    {
                        "site_id": stop.site_id,
                        "bottle_id": b.id,
                        "label": b.label,
                        "kind": b.kind,
                        "result_id": r.id,
                        "analyte": r.analyte,
                        "value": r.value,
                        "unit": r.unit,
                        "report": None if rep is None else rep.to_dict(),
                        "analysed_at": r.analysed_at.isoformat() if r.analysed_at else None,
                        "analyst": r.analyst,
                        "method": r.method,
                        "valid": r.valid,
                        "status": r.status,
                        "superseded_by": r.superseded_by,
                        "flags": [f.model_dump(mode="json") for f in r.flags],
                    }
                )
    if args.json:
        emit_json({"trip_id": trip.id, "results": rows})
        return 0
    if not rows:
        sys.stdout.write(f"trip {trip.id[:8]}: no lab results yet\n")
        return 0
    for r in rows:
        value = "—" if r["value"] is None else f"{r['value']:.2f} {r['unit']}"
        if r["report"] is not None:
            value = r["report"]["text"] if r["report"]["value"] is not None else "—"
        state = (
            f"superseded by {r['superseded_by'][:8]}"
            if r["superseded_by"]
            else ("valid" if r["valid"] else ("NOT valid" if r["valid"] is False else "not checked"))
        )
        sys.stdout.write(
            f"{r['site_id']:<7} {r['label']:<10} {r['analyte']:<11} {value:>11}  "
            f"{when_text(r['analysed_at']):<26}  {r['analyst'] or '—':<6} {r['result_id'][:8]}  {state}\n"
        )
    return 0


# --------------------------------------------------------------------------------------------
# Registration
# --------------------------------------------------------------------------------------------
def _common(p) -> None:  # noqa: ANN001
    p.add_argument(
        "--data-dir",
        metavar="DIR",
        default=None,
        help="device store folder (else $STREAMTAB_DATA, else the user data folder)",
    )
    p.add_argument("--json", action="store_true", help="print JSON")


def _bench(p) -> None:  # noqa: ANN001
    p.add_argument("trip", metavar="TRIP_ID", help="trip id, or its first 8 characters")
    p.add_argument("bottle", metavar="BOTTLE", help="bottle label as on the field sheet (or the bottle id)")
    p.add_argument("--analyst", help="analyst's initials, e.g. R.O.")
    p.add_argument("--at", metavar="ISO-TIME", help="when the analysis was done, with time zone (default: now)")
    p.add_argument("--notes", help="bench notes kept with the result")
    p.add_argument(
        "--redo",
        metavar="REASON",
        help="record a repeat analysis of a bottle that already has a result; the earlier result is"
        " kept and marked superseded",
    )


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds the `lab` command group to the top-level parser."""
    from mobile.cli._common import OneLineParser

    lab = sub.add_parser(
        "lab",
        help="lab results on synced trips: what is waiting, Winkler, BOD5, duplicates",
        description="The analyst's side: bench results recorded on the trip's bottles through the"
        " device store. Informs only; the lab's SOP and QA plan decide.",
    )
    lab_sub = lab.add_subparsers(dest="lab_command", required=True, parser_class=OneLineParser)

    p = lab_sub.add_parser("pending", help="bottles still waiting for a result, most urgent first")
    p.add_argument("--trip", metavar="TRIP_ID", help="only this trip")
    p.add_argument("--now", metavar="ISO-TIME", help="read the holding clocks at this time (default: now)")
    _common(p)
    p.set_defaults(handler=_pending)

    p = lab_sub.add_parser(
        "winkler",
        help="record a Winkler (azide) DO titration on a bottle",
        description="Winkler DO, Standard Methods 4500-O C (azide modification), recorded on a"
        " do-fixed or duplicate bottle. Caution: sulfuric acid and the alkali-iodide-"
        "azide reagent hurt people; follow the lab's SOP and the safety data sheets.",
    )
    _bench(p)
    p.add_argument("--titrant-ml", required=True, help="thiosulfate used to the end point, mL")
    p.add_argument("--titrated-ml", required=True, help="volume titrated, mL (e.g. 201)")
    p.add_argument("--normality", help="titrant normality, eq/L (e.g. 0.025)")
    p.add_argument("--std-titrant-ml", help="instead of --normality: thiosulfate used on the bi-iodate standard, mL")
    p.add_argument("--std-ml", default="20", help="bi-iodate standard taken, mL (default 20)")
    p.add_argument("--std-normality", default="0.025", help="bi-iodate standard normality, eq/L (default 0.025)")
    p.add_argument("--standardised-at", metavar="ISO-TIME", help="when the thiosulfate was standardised")
    p.add_argument("--bottle-ml", default="300", help="bottle volume, mL (default 300)")
    p.add_argument("--reagents-ml", default="2", help="total fixing reagents added, mL (default 2: 1 + 1)")
    p.add_argument(
        "--meter-tolerance",
        metavar="MG_L",
        help="accepted difference from the field meter's DO, mg/L (default 0.5, common practice)",
    )
    _common(p)
    p.set_defaults(handler=_winkler)

    p = lab_sub.add_parser(
        "bod",
        help="record a BOD5 result from a dilution series on a bottle",
        description="BOD5, Standard Methods 5210 B, from a bench sheet CSV (--sheet; a blank one"
        " from 'streamtab lab sheet') or a JSON file of dilutions (--dilutions, the"
        " layout of 'streamtab bod --dilutions').",
    )
    _bench(p)
    p.add_argument(
        "--sheet",
        metavar="FILE.csv",
        help="the bench sheet: one row per dilution (bottle, kind, sample_ml, bottle_ml, seed_ml,"
        " initial_do_mg_l, final_do_mg_l); the bottle's rows and every seed control are taken",
    )
    p.add_argument(
        "--dilutions",
        metavar="FILE",
        help="JSON: a list of {initial_do_mg_l, final_do_mg_l, sample_ml[, bottle_ml, seed_ml,"
        " seed_uptake_mg_l_per_ml]} or an object with dilutions and seed_controls",
    )
    p.add_argument("--blank-depletion", metavar="MG_L", help="dilution-water blank depletion, mg/L")
    p.add_argument("--gga", metavar="MG_L", help="glucose–glutamic acid check result, mg/L")
    p.add_argument("--incubation-start", metavar="ISO-TIME", help="when the bottles were set up")
    p.add_argument("--incubation-end", metavar="ISO-TIME", help="when they were read after 5 days")
    p.add_argument("--incubator-temp", metavar="C", help="incubator temperature, °C")
    p.add_argument(
        "--nitrification-inhibitor",
        action="store_true",
        help="a nitrification inhibitor was added: records CBOD5, its own analyte",
    )
    _common(p)
    p.set_defaults(handler=_bod)

    p = lab_sub.add_parser(
        "batch",
        help="record a bench batch's QC once; it applies to every bottle in the batch",
        description="Batch QC (Standard Methods 5210 B and 4500-O C): dilution-water blank, GGA"
        " check, seed controls, incubation, thiosulfate standardisation. 'lab bod' and"
        " 'lab winkler' then use it for the batch's bottles. Recording a batch under"
        " the same name again replaces it.",
    )
    p.add_argument("trip", metavar="TRIP_ID", help="trip id, or its first 8 characters")
    p.add_argument("--name", required=True, help="batch name, e.g. B-0623")
    p.add_argument("--bottles", metavar="LABEL,...", required=True, help="bottle labels set up in the batch")
    p.add_argument("--analyst", help="analyst's initials")
    p.add_argument("--blank-depletion", metavar="MG_L", help="dilution-water blank depletion, mg/L")
    p.add_argument("--gga", metavar="MG_L", help="glucose–glutamic acid check result, mg/L")
    p.add_argument("--seed-sheet", metavar="FILE.csv", help="a bench sheet whose seed control rows are the batch's")
    p.add_argument("--incubation-start", metavar="ISO-TIME", help="when the bottles were set up")
    p.add_argument("--incubation-end", metavar="ISO-TIME", help="when they were read after 5 days")
    p.add_argument("--incubator-temp", metavar="C", help="incubator temperature, °C")
    p.add_argument("--std-titrant-ml", help="thiosulfate used on the bi-iodate standard, mL")
    p.add_argument("--std-ml", default="20", help="bi-iodate standard taken, mL (default 20)")
    p.add_argument("--std-normality", default="0.025", help="bi-iodate standard normality, eq/L (default 0.025)")
    p.add_argument("--standardised-at", metavar="ISO-TIME", help="when the thiosulfate was standardised")
    p.add_argument("--notes", help="notes kept with the batch")
    _common(p)
    p.set_defaults(handler=_batch_cmd)

    p = lab_sub.add_parser(
        "sheet",
        help="a blank BOD bench sheet to print (.pdf) or fill in (.csv)",
        description="A bench sheet with the batch QC boxes and one row per dilution. With"
        " --trip, the trip's BOD bottles still waiting are printed in it. The CSV"
        " has the columns 'streamtab lab bod --sheet' reads.",
    )
    p.add_argument("--out", metavar="FILE", required=True, help="FILE.pdf (to print) or FILE.csv (to fill in)")
    p.add_argument("--trip", metavar="TRIP_ID", help="pre-fill the BOD bottles of this trip still waiting")
    p.add_argument("--rows", metavar="N", help="dilution rows on the printed sheet (default 18)")
    _common(p)
    p.set_defaults(handler=_sheet)

    p = lab_sub.add_parser("duplicates", help="field duplicates against their bottles (relative percent difference)")
    p.add_argument("trip", metavar="TRIP_ID", help="trip id, or its first 8 characters")
    p.add_argument(
        "--rpd-limit",
        metavar="PERCENT",
        help="largest accepted relative percent difference, %% (default 20, common practice)",
    )
    _common(p)
    p.set_defaults(handler=_duplicates)

    p = lab_sub.add_parser("results", help="every lab result on a trip, superseded ones included")
    p.add_argument("trip", metavar="TRIP_ID", help="trip id, or its first 8 characters")
    _common(p)
    p.set_defaults(handler=_results)
