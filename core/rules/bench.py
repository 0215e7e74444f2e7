"""The BOD bench sheet as CSV: one row per dilution bottle (and per seed control), read and written.

Columns (:data:`SHEET_COLUMNS`): ``bottle`` (the sample's label on the field sheet; empty on a seed
control), ``kind`` ("dilution" or "seed control"), ``sample_ml``, ``bottle_ml`` (default 300),
``seed_ml`` (default 0), ``initial_do_mg_l``, ``final_do_mg_l``, ``notes``. Numbers are read with
the one number rule (:func:`core.records.models.parse_number`: a decimal comma is fine, "1,234" is
refused as ambiguous). One sheet can hold a whole batch: reading it for one bottle takes that
bottle's dilutions and every seed control.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from typing import Any

__all__ = [
    "SHEET_COLUMNS",
    "DILUTION",
    "SEED_CONTROL",
    "SheetError",
    "BenchSheet",
    "read_bench_sheet",
    "write_bench_sheet",
]

SHEET_COLUMNS = ("bottle", "kind", "sample_ml", "bottle_ml", "seed_ml", "initial_do_mg_l", "final_do_mg_l", "notes")
DILUTION = "dilution"
SEED_CONTROL = "seed control"
_REQUIRED = ("kind", "sample_ml", "initial_do_mg_l", "final_do_mg_l")
_NUMBERS = ("sample_ml", "bottle_ml", "seed_ml", "initial_do_mg_l", "final_do_mg_l")


class SheetError(ValueError):
    """A bench sheet that cannot be read: the message names the file, line and column."""


@dataclass(frozen=True)
class BenchSheet:
    """What a sheet holds for one bottle: its dilutions and the batch's seed controls."""

    dilutions: list[dict[str, float]]
    seed_controls: list[dict[str, float]]
    bottles: list[str] = field(default_factory=list)


def _cell(text: str) -> str:
    # A cell the export guard neutralised ("'=...") reads back as typed.
    text = (text or "").strip()
    return text[1:] if text.startswith("'") and text[1:2] in ("=", "+", "-", "@") else text


def _check_row(row: dict[str, float], name: str, line: int, *, control: bool = False) -> None:
    """A row's values inside the science's ranges (core.science.bod) and its volumes fitting the
    bottle, or a SheetError naming the line (and the column); whether the row counts (depletion,
    residual) is the bench's finding, judged later."""
    from core.science._validate import InputValueError
    from core.science.bod import bod_dilution, seed_uptake_per_ml

    try:
        if control:
            seed_uptake_per_ml([row])
        else:
            # the seed's uptake comes from the sheet's seed controls later; any value checks the row
            bod_dilution(**row, seed_uptake_mg_l_per_ml=1.0 if row.get("seed_ml") else 0.0)
    except InputValueError as exc:
        raise SheetError(
            f"{name}, line {line}, column {exc.field}: {exc.shown} {exc.why}; accepted: {exc.accepted}"
        ) from None
    except ValueError as exc:
        if not control:  # the volumes do not fit the bottle
            raise SheetError(f"{name}, line {line}: {exc}") from None


def read_bench_sheet(
    text: str, *, bottle: str | None = None, name: str = "the sheet", need_dilutions: bool = True
) -> BenchSheet:
    """The dilutions of `bottle` (every dilution when None) and all seed controls on the sheet.

    With ``need_dilutions=False`` a sheet of seed controls only is accepted (a batch's QC).

    Raises :class:`SheetError` naming ``name``, the line and the column of the first problem.
    """
    from core.records.models import InputError, parse_number

    if text.startswith("\ufeff"):
        text = text[1:]
    reader = csv.DictReader(io.StringIO(text))
    header = [h.strip() for h in (reader.fieldnames or [])]
    if not header:
        raise SheetError(f"{name} is empty; accepted: a CSV with the columns {', '.join(SHEET_COLUMNS)}")
    missing = [c for c in _REQUIRED if c not in header]
    if missing:
        raise SheetError(f"{name} has no column {missing[0]!r}; accepted columns: {', '.join(SHEET_COLUMNS)}")
    unknown = [c for c in header if c not in SHEET_COLUMNS]
    if unknown:
        raise SheetError(f"{name} has an unknown column {unknown[0]!r}; accepted columns: {', '.join(SHEET_COLUMNS)}")
    reader.fieldnames = header
    dilutions: list[dict[str, float]] = []
    controls: list[dict[str, float]] = []
    labels: list[str] = []
    want = (bottle or "").strip().casefold()
    for line, row in enumerate(reader, start=2):
        cells = {k: _cell(v) for k, v in row.items() if k is not None}
        if not any(cells.get(c) for c in ("sample_ml", "seed_ml", "initial_do_mg_l", "final_do_mg_l")):
            continue  # an unused row of the printed template (label and bottle size only)
        kind = cells.get("kind", "").strip().lower()
        if kind not in (DILUTION, SEED_CONTROL):
            raise SheetError(
                f"{name}, line {line}, column kind: {cells.get('kind', '')!r} is not accepted;"
                f" accepted: {DILUTION} or {SEED_CONTROL}"
            )
        label = cells.get("bottle", "")
        nums: dict[str, float] = {}
        for col in _NUMBERS:
            raw = cells.get(col, "")
            if not raw:
                continue
            try:
                nums[col] = parse_number(raw, col)
            except InputError:
                raise SheetError(
                    f"{name}, line {line}, column {col}: {raw!r} is not a number; accepted: digits such as 8.75 or 8,75"
                ) from None
        for col in (
            ("sample_ml", "initial_do_mg_l", "final_do_mg_l")
            if kind == DILUTION
            else ("initial_do_mg_l", "final_do_mg_l")
        ):
            if col not in nums:
                raise SheetError(f"{name}, line {line}, column {col} is empty; accepted: a number")
        if kind == SEED_CONTROL:
            seed = nums.get("seed_ml", nums.get("sample_ml"))
            if seed is None:
                raise SheetError(f"{name}, line {line}, column seed_ml is empty; accepted: the seed volume in mL")
            control = {
                "initial_do_mg_l": nums["initial_do_mg_l"],
                "final_do_mg_l": nums["final_do_mg_l"],
                "seed_ml": seed,
            }
            _check_row(control, name, line, control=True)
            controls.append(control)
            continue
        if label and label not in labels:
            labels.append(label)
        if want and label.casefold() != want:
            continue
        d = {
            "initial_do_mg_l": nums["initial_do_mg_l"],
            "final_do_mg_l": nums["final_do_mg_l"],
            "sample_ml": nums["sample_ml"],
            "bottle_ml": nums.get("bottle_ml", 300.0),
        }
        if nums.get("seed_ml"):
            d["seed_ml"] = nums["seed_ml"]
        _check_row(d, name, line)
        dilutions.append(d)
    if not dilutions and need_dilutions:
        which = f" for bottle {bottle}" if bottle else ""
        on = f" (bottles on the sheet: {', '.join(labels)})" if labels else ""
        raise SheetError(
            f"{name} has no dilution rows{which}{on}; accepted: rows of kind {DILUTION} with the bottle's label"
        )
    return BenchSheet(dilutions, controls, labels)


def write_bench_sheet(rows: list[dict[str, Any]], name: str = "bench-sheet.csv") -> str:
    """CSV text of a bench sheet (columns :data:`SHEET_COLUMNS`), every cell through the CSV cell guard."""
    from core.records.exchange import csv_table

    def num(v: Any) -> str:
        return "" if v is None else f"{float(v):g}"

    out = []
    for r in rows:
        out.append(
            {
                **{c: num(r.get(c)) if c in _NUMBERS else (r.get(c) or "") for c in SHEET_COLUMNS},
                "kind": r.get("kind", DILUTION),
            }
        )
    return csv_table(SHEET_COLUMNS, out, name=name)
