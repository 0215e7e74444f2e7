"""`streamtab export season` and `streamtab plot site` on a store holding a small invented season."""

from __future__ import annotations

import csv
import json
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest
from openpyxl import load_workbook
from PIL import Image

from core.records.models import Bottle, LabResult, Stop, Trip, measure
from core.rules.season import TABLES
from tests.conftest import run_cli
from tests.lab.test_report import LOWER, _build

PDT = timezone(timedelta(hours=-7))
HOSTILE_NOTE = '=HYPERLINK("http://example.invalid","click")'


def _visit(day: int, temp: str, do: str, winkler: float | None, note: str = "") -> Trip:
    start = datetime(2026, 7, day, 8, 0, tzinfo=PDT)
    bottles = []
    if winkler is not None:
        bottles.append(
            Bottle(
                label=f"TV-07{day:02d}",
                kind="do-fixed",
                collected_at=start + timedelta(minutes=25),
                fixed_at=start + timedelta(minutes=27),
                lab_results=[
                    LabResult(
                        analyte="do_winkler",
                        value=winkler,
                        unit="mg/L",
                        analysed_at=start + timedelta(hours=4),
                        analyst="M.T.",
                    )
                ],
            )
        )
    stop = Stop(
        site_id="LK-01",
        arrived_at=start + timedelta(minutes=20),
        temp=measure("temp", temp, default_unit="C"),
        pressure=measure("pressure", "990 hPa"),
        do=measure("do", do),
        bottles=bottles,
        notes=note,
    )
    return Trip(program="Tamsin Valley Stream Watch", crew=["+R.O."], started_at=start, stops=[stop])


@pytest.fixture(scope="module")
def season(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("season") / "data"
    store = _build(root, signed=True)
    for day, temp, do, wink in (
        (2, "18.0", "8.9 mg/L", 8.8),
        (9, "20.5", "8.1 mg/L", None),
        (16, "22.4", "6.2 mg/L", 6.4),
        (23, "23.9", "4.6 mg/L", 4.8),
        (30, "21.0", "95 %", None),
    ):
        store.save_trip(_visit(day, temp, do, wink, HOSTILE_NOTE if day == 16 else ""), "invented visit")
    store.close()
    return root


def _read(folder: Path, name: str) -> list[dict[str, str]]:
    with open(folder / f"{name}.csv", newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _floats(rows, column):
    return [float(r[column]) for r in rows if r[column] != ""]


def test_season_tables_are_tidy_and_complete(season, tmp_path):
    out = tmp_path / "tables"
    r = run_cli("export", "season", "--out", str(out), "--json", data_dir=season)
    assert r.returncode == 0, r.stderr
    summary = json.loads(r.stdout)
    assert summary["trips"] == 6 and summary["rows"]["stops"] == 3 + 5
    stops = _read(out, "stops")
    assert tuple(stops[0].keys()) == TABLES["stops"]
    for col in ("water_temp_c", "station_pressure_hpa", "do_sat_mg_l", "percent_saturation", "criterion_mg_l"):
        assert col in stops[0]
        assert len(_floats(stops, col)) == len(stops), col  # every stop has it, and it is a number
    lk01 = [s for s in stops if s["site_id"] == "LK-01"]
    assert len(lk01) == 6
    pct = [s for s in lk01 if s["meter_do_as_typed"] == "95 %"]
    assert pct[0]["meter_do_percent"] == "95" and pct[0]["meter_do_mg_l"] == ""  # whole %, common practice
    results = _read(out, "results")
    assert len(results) == 6 + 3  # the report trip's six, three July Winklers
    bound = next(r for r in results if r["label"] == "TV-0615")
    assert (bound["qualifier"], bound["value"], bound["unit"], bound["status"]) == ("<", "2.0", "mg/L", "valid")
    superseded = [r for r in results if r["status"] == "superseded"]
    assert len(superseded) == 1 and superseded[0]["superseded_by"]
    custody = _read(out, "custody")
    # one row per bottle per hand-off (tidy data, Wickham 2014): J.V. handed over every bottle,
    # the lab desk received four of them
    assert list(dict.fromkeys(c["received_by"] for c in custody)) == ["Courier K", "Lab desk M.T."]
    lab = [c for c in custody if c["at_lab"] == "yes"]
    assert sorted(c["label"] for c in lab) == ["TV-0611", "TV-0612", "TV-0613", "TV-0615"]
    assert {c["temp_on_receipt_c"] for c in lab} == {"4.2"}
    assert {c["bottle_id"] for c in custody} <= {b["bottle_id"] for b in _read(out, "bottles")}
    bottles = _read(out, "bottles")
    assert {b["custody_status"] for b in bottles if b["trip_id"] == LOWER} == {"at the lab", "in transit"}
    cals = _read(out, "calibrations")
    assert {c["kind"] for c in cals} == {"pre-trip", "post-trip"}
    assert any(c["difference_mg_l"].startswith("-") for c in cals)  # a plain negative number stays a number


def test_formula_leading_cells_are_neutralised_in_csv_and_xlsx(season, tmp_path):
    out = tmp_path / "t"
    r = run_cli("export", "season", "--out", str(out), "--xlsx", data_dir=season)
    assert r.returncode == 0, r.stderr
    stops = _read(out, "stops")
    assert any(s["notes"] == "'" + HOSTILE_NOTE for s in stops)
    assert all(not s["crew"].startswith("+") for s in stops)
    wb = load_workbook(out / "season.xlsx")
    assert wb.sheetnames == list(TABLES)
    ws = wb["stops"]
    head = [c.value for c in ws[1]]
    notes = [row[head.index("notes")] for row in ws.iter_rows(min_row=2)]
    assert any(c.value == "'" + HOSTILE_NOTE and c.data_type != "f" for c in notes)
    temps = [row[head.index("water_temp_c")].value for row in ws.iter_rows(min_row=2)]
    assert all(isinstance(t, (int, float)) for t in temps)  # numbers stay numbers in the workbook


def test_filters_by_date_and_site(season, tmp_path):
    out = tmp_path / "july"
    r = run_cli(
        "export",
        "season",
        "--from",
        "2026-07-05",
        "--to",
        "2026-07-25",
        "--site",
        "lk-01",
        "--out",
        str(out),
        data_dir=season,
    )
    assert r.returncode == 0, r.stderr
    stops = _read(out, "stops")
    assert sorted(s["arrived_at"][:10] for s in stops) == ["2026-07-09", "2026-07-16", "2026-07-23"]
    assert _read(out, "custody") == []


@pytest.mark.parametrize(
    "args, word",
    [
        (("--from", "2026-07-30", "--to", "2026-07-01"), "--from"),
        (("--from", "July"), "--from"),
        (("--site", "ZZ-99"), "--site"),
    ],
)
def test_export_refuses_bad_options_in_one_line(season, tmp_path, args, word):
    r = run_cli("export", "season", "--out", str(tmp_path / "x"), *args, data_dir=season)
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and word in r.stderr, r.stderr


def test_plot_site_writes_a_png_and_a_pdf(season, tmp_path):
    png = tmp_path / "lk01.png"
    r = run_cli("plot", "site", "LK-01", "--out", str(png), "--json", data_dir=season)
    assert r.returncode == 0, r.stderr
    info = json.loads(r.stdout)
    assert info["visits"] == 6 and info["winkler_points"] == 1 + 3  # one in June, three in July
    img = Image.open(png).convert("L")
    dark = sum(img.histogram()[:128]) / (img.width * img.height)
    assert img.width > 1000 and 0.005 < dark < 0.5
    pdf = tmp_path / "lk01.pdf"
    assert run_cli("plot", "site", "LK-01", "--from", "2026-07-01", "--out", str(pdf), data_dir=season).returncode == 0
    assert pdf.read_bytes()[:5] == b"%PDF-"
    bad = run_cli("plot", "site", "ZZ-99", "--out", str(png), data_dir=season)
    assert bad.returncode == 2 and "ZZ-99" in bad.stderr and "LK-01" in bad.stderr
