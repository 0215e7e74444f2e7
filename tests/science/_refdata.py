"""Loads the small reference-data CSV files beside the science tests (each row has a source and a tolerance)."""

from __future__ import annotations

import csv
from pathlib import Path

DATA = Path(__file__).resolve().parent / "data"


def rows(name: str) -> list[dict[str, str]]:
    with open(DATA / name, newline="", encoding="utf-8") as fh:
        out = list(csv.DictReader(fh))
    assert out, f"{name} is empty"
    for r in out:
        assert r.get("source"), f"{name}: a row has no source"
    return out


def ids(name: str, *cols: str) -> list[str]:
    return ["-".join(f"{c}={r[c]}" for c in cols) for r in rows(name)]
