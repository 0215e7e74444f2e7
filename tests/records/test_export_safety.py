"""Exported tables are safe to open in a spreadsheet (formula-leading cells neutralised, NUL
refused) and exported files get the permissions the person's umask gives any new file (issue 9)."""

from __future__ import annotations

import csv
import io
import json
import os
import stat

import pytest

from core.records.exchange import FORMULA_LEADS, ExchangeError, csv_table, export_trip_csv, spreadsheet_safe
from tests.conftest import run_cli
from tests.records.conftest import make_stop, make_trip


# The lead characters and the apostrophe prefix are the usual "CSV injection" neutralisation
# (common practice, OWASP's CSV injection page).
@pytest.mark.parametrize(
    "cell",
    [
        '=HYPERLINK("http://x.test","open")',
        "+1+2",
        "-2+3*cmd|' /C calc'!A0",
        "@SUM(A1:A2)",
        "\tleading tab",
        "\rleading return",
    ],
)
def test_formula_leading_cells_are_written_as_text(cell):
    assert cell.startswith(FORMULA_LEADS)
    assert spreadsheet_safe(cell) == "'" + cell


@pytest.mark.parametrize("cell", ["-0.35", "+12.5", "-1e-3", "8.4", "", 'pool, "deep"', "a=b", "5 - 3"])
def test_numbers_and_ordinary_text_pass_unchanged(cell):
    assert spreadsheet_safe(cell) == cell


def test_nul_is_refused_in_one_line_naming_the_file_line_and_column():
    with pytest.raises(ExchangeError) as info:
        csv_table(
            ("site_id", "notes"),
            [{"site_id": "LK-01", "notes": "ok"}, {"site_id": "LK-02", "notes": "cut\x00here"}],
            name="stops.csv",
        )
    msg = str(info.value)
    assert msg.startswith("stops.csv, line 3, column notes:") and "NUL" in msg and "\n" not in msg


def test_trip_csv_export_neutralises_a_formula_typed_in_the_notes(store):
    trip = store.save_trip(make_trip([make_stop(notes="=cmd|' /C calc'!A0", weather="@rain")]), "x")
    rows = list(csv.DictReader(io.StringIO(export_trip_csv(store, trip.id)["stops.csv"])))
    assert rows[0]["notes"] == "'=cmd|' /C calc'!A0"
    assert rows[0]["weather"] == "'@rain"
    # numbers stay numbers
    assert float(rows[0]["water_temp_c"]) == 18.5


@pytest.mark.parametrize("umask,expected", [(0o022, 0o644), (0o077, 0o600), (0o002, 0o664)])
def test_exported_files_get_the_umask_permissions(store, tmp_path, umask, expected):
    trip = store.save_trip(make_trip([make_stop()]), "x")
    out = tmp_path / f"out-{umask:o}"
    out.mkdir()
    old = os.umask(umask)
    try:
        r_json = run_cli(
            "trip", "export", trip.id, "--format", "json", "--out", str(out / "t.json"), data_dir=store.data_dir
        )
        r_csv = run_cli("trip", "export", trip.id, "--format", "csv", "--out", str(out), data_dir=store.data_dir)
    finally:
        os.umask(old)
    assert r_json.returncode == 0 and r_csv.returncode == 0, r_json.stderr + r_csv.stderr
    assert json.loads((out / "t.json").read_text())["id"] == trip.id
    for name in ("t.json", "stops.csv", "bottles.csv"):
        assert stat.S_IMODE((out / name).stat().st_mode) == expected, name
    # the device's own files stay owner-only whatever the umask
    trip_file = next((store.data_dir / "trips").glob("*.json"))
    assert stat.S_IMODE(trip_file.stat().st_mode) & 0o077 == 0


def test_every_file_written_for_people_gets_the_umask_permissions(tmp_path):
    """Report and bench sheet PDFs, the bench sheet CSV, a plot and the season tables (CSV and
    .xlsx) all go through the one export writer: with umask 027 each is 0640, not the device's
    owner-only 0600 (common practice: a new file takes 0666 less the umask, as open(2) does)."""
    from tests.conftest import ROOT

    samples = ROOT / "sample_trips"
    data = tmp_path / "data"
    assert run_cli("sites", "import", str(samples / "sites.csv"), data_dir=data).returncode == 0
    r = run_cli("trip", "import", str(samples / "trip-2026-06-09-lower-watershed.json"), data_dir=data)
    assert r.returncode == 0, r.stderr
    out = tmp_path / "out"
    out.mkdir()
    commands = [
        ("report", "5d7c2b0e", "--out", str(out / "report.pdf")),
        ("lab", "sheet", "--out", str(out / "sheet.pdf")),
        ("lab", "sheet", "--out", str(out / "sheet.csv")),
        ("plot", "site", "LK-01", "--out", str(out / "lk01.png")),
        ("export", "season", "--out", str(out / "season"), "--xlsx"),
    ]
    old = os.umask(0o027)
    try:
        results = [run_cli(*argv, data_dir=data) for argv in commands]
    finally:
        os.umask(old)
    for argv, r in zip(commands, results, strict=True):
        assert r.returncode == 0, (argv, r.stderr)
    written = [p for p in out.rglob("*") if p.is_file()]
    names = {p.name for p in written}
    assert {"report.pdf", "sheet.pdf", "sheet.csv", "lk01.png", "season.xlsx", "stops.csv"} <= names, names
    for p in written:
        assert stat.S_IMODE(p.stat().st_mode) == 0o640, p.name
    assert not list(out.rglob("*.tmp"))  # nothing half-written left behind
