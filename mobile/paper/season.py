"""Writes the season tables (`core.rules.season`) as CSV files in a folder, or as one .xlsx workbook.

A value the reporting rule rounded (`core.rules.report.Reported`) is written as its text in CSV ("9.40")
and as a number in the workbook, shown with the same decimals."""

from __future__ import annotations

from pathlib import Path
from typing import Any

__all__ = ["write_csv_tables", "write_workbook"]


def write_csv_tables(tables: dict[str, list[dict[str, Any]]], folder: Path) -> list[Path]:
    """One ``<table>.csv`` per table (UTF-8, header row), each written atomically; every cell guarded."""
    from core.records.exchange import csv_table
    from core.rules.season import TABLES
    from core.store.atomic import write_export

    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name, columns in TABLES.items():
        path = folder / f"{name}.csv"
        text = csv_table(columns, tables.get(name, []), name=path.name)
        write_export(path, text.encode("utf-8"))
        written.append(path)
    return written


def write_workbook(tables: dict[str, list[dict[str, Any]]], path: Path) -> Path:
    """The same tables as sheets of one workbook; numbers stay numbers, text goes through the cell guard."""
    import io

    from openpyxl import Workbook

    from core.records.exchange import spreadsheet_safe
    from core.rules.report import Reported
    from core.rules.season import TABLES
    from core.store.atomic import write_export

    wb = Workbook()
    wb.remove(wb.active)
    for name, columns in TABLES.items():
        ws = wb.create_sheet(title=name)
        ws.append([spreadsheet_safe(c, where=f"{path.name}, sheet {name}, header") for c in columns])
        for i, row in enumerate(tables.get(name, []), start=2):
            cells, formats = [], {}
            for j, c in enumerate(columns, start=1):
                v = row.get(c)
                if isinstance(v, Reported):
                    cells.append(v.number)
                    formats[j] = "0." + "0" * v.decimals if v.decimals > 0 else "0"
                elif isinstance(v, (int, float)) and not isinstance(v, bool):
                    cells.append(v)
                else:
                    cells.append(spreadsheet_safe(v, where=f"{path.name}, sheet {name}, row {i}, column {c}"))
            ws.append(cells)
            for j, fmt in formats.items():
                ws.cell(row=i, column=j).number_format = fmt
        ws.freeze_panes = "A2"
    buf = io.BytesIO()
    wb.save(buf)
    write_export(path, buf.getvalue())
    return path
