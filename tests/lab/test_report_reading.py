"""The trip report read the way a program's lab analyst and QA officer read it: every page's text
read back with pdftotext (poppler) and pypdf, from a store filled through the command line."""

from __future__ import annotations

import re
import subprocess
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest
from pypdf import PdfReader

from tests.conftest import ROOT, run_cli

SAMPLES = ROOT / "sample_trips"
HOT = "a41f6e2d"  # sample trip of 2026-06-23 (invented); two of its bottles share the label TV-0701
UPPER = "c9e2d4b7"  # sample trip of 2026-06-30 (invented), one Winkler bottle
PDT = timezone(timedelta(hours=-7))


def _ok(*args: str, data: Path) -> None:
    r = run_cli(*args, data_dir=data)
    assert r.returncode == 0, r.stderr


@pytest.fixture(scope="module")
def store(tmp_path_factory) -> Path:
    base = tmp_path_factory.mktemp("reading")
    data = base / "d"
    _ok("sites", "import", str(SAMPLES / "sites.csv"), data=data)
    for f in sorted(SAMPLES.glob("trip-*.json")):
        _ok("trip", "import", str(f), data=data)
    # Winkler (Standard Methods 4500-O C): 0.025 N titrant on about 200 mL original sample, so
    # 1 mL of titrant is about 1 mg/L (from memory); a re-titration supersedes the first result.
    winkler = ("--titrated-ml", "201", "--normality", "0.025", "--analyst", "A.B.")
    _ok("lab", "winkler", HOT, "TV-0701", "--at", "2026-06-23T11:00-07:00", "--titrant-ml", "7.9", *winkler, data=data)
    _ok(
        "lab",
        "winkler",
        HOT,
        "TV-0701",
        "--at",
        "2026-06-23T11:30-07:00",
        "--titrant-ml",
        "8.1",
        "--redo",
        "end point overshot",
        *winkler,
        data=data,
    )
    # Titrated a day after collection: past the 8 h Winkler holding time (Standard Methods 4500-O).
    _ok(
        "lab", "winkler", UPPER, "TV-0721", "--at", "2026-07-01T09:00-07:00", "--titrant-ml", "8.5", *winkler, data=data
    )
    # BOD5 (Standard Methods 5210 B): no dilution depleted 2 mg/L, so the result is a bound "< 2.0 mg/L".
    low = base / "low.json"
    low.write_text(
        '[{"initial_do_mg_l": 8.8, "final_do_mg_l": 8.5, "sample_ml": 300},'
        ' {"initial_do_mg_l": 8.8, "final_do_mg_l": 8.7, "sample_ml": 150}]'
    )
    bod = (
        "--blank-depletion",
        "0.1",
        "--gga",
        "198",
        "--incubation-start",
        "2026-06-24T09:00-07:00",
        "--incubation-end",
        "2026-06-29T09:00-07:00",
        "--incubator-temp",
        "20.1",
        "--at",
        "2026-06-29T09:00-07:00",
        "--analyst",
        "C.D.",
    )
    _ok("lab", "bod", HOT, "TV-0703", "--dilutions", str(low), *bod, data=data)
    _ok("custody", "add", HOT, "--from", "J.V.", "--to", "M.K.", "--at", "2026-06-23T12:00-07:00", data=data)
    _ok(
        "custody",
        "add",
        HOT,
        "--from",
        "M.K.",
        "--to",
        "Lab intake",
        "--lab",
        "--at",
        "2026-06-23T16:30-07:00",
        "--temp",
        "9.5 C",
        "--condition",
        "intact, ice melted",
        data=data,
    )
    return data


@pytest.fixture(scope="module")
def reports(store, tmp_path_factory) -> dict[str, Path]:
    out = {}
    base = tmp_path_factory.mktemp("pdf")
    for trip in (HOT, UPPER):
        pdf = base / f"{trip}.pdf"
        _ok("report", trip, "--out", str(pdf), data=store)
        out[trip] = pdf
    return out


def _pages(pdf: Path) -> list[str]:
    count = len(PdfReader(str(pdf)).pages)
    return [
        subprocess.run(
            ["pdftotext", "-layout", "-f", str(n), "-l", str(n), str(pdf), "-"],
            check=True,
            capture_output=True,
            text=True,
        ).stdout
        for n in range(1, count + 1)
    ]


def _flat(pdf: Path) -> str:
    return re.sub(r"\s+", " ", " ".join(_pages(pdf)))


def test_no_machine_name_reaches_the_reader(reports):
    """Analytes, bottle kinds, finding codes and severities print in words (common practice: a
    filed report is read by people, not parsers)."""
    for pdf in reports.values():
        flat = _flat(pdf)
        for name in ("do_winkler", "bod5", "[warning]", "[note]", "[stop-and-check]"):
            assert name not in flat, (pdf.name, name)
        assert not re.search(r"\b(lab|bod|holding|custody|do|bottle|stop)\.[a-z_]+\b", flat), pdf.name
    hot = _flat(reports[HOT])
    assert "DO (Winkler)" in hot and "BOD5" in hot
    assert "DO, fixed on site" in hot and "BOD, chilled" in hot


def test_bounds_superseded_and_invalid_results_are_marked(reports):
    """A bound prints with its qualifier (Standard Methods 5210 B); a superseded result stays, marked;
    a result the bench rules refused says why (common practice)."""
    hot = _flat(reports[HOT])
    assert "< 2.0 mg/L" in hot
    assert "(7.9 mg/L)" in hot and "superseded by" in hot and "8.1 mg/L" in hot
    assert "not valid" in hot and "No dilution used 2 mg/L of oxygen" in hot
    assert "Bench findings on results in use" in hot
    assert "superseded and not valid results are left off the plot" in hot  # the plot says what it omits
    upper = _flat(reports[UPPER])
    assert "past holding" in upper and "past the 8 h Winkler holding time" in upper


def test_holding_findings_name_the_bottle_and_its_deadline_with_its_zone(reports):
    """A filed report says when a holding time ended, in the zone of the record; never "N d ago",
    which changes with the day it is printed (common practice)."""
    hot = _flat(reports[HOT])
    assert "Bottle TV-0703 (biochemical oxygen demand) has no valid result on record" in hot
    assert "ended 2026-06-25 10:10 UTC−07:00" in hot
    for pdf in reports.values():
        flat = _flat(pdf)
        assert not re.search(r"\d d ago", flat), pdf.name
        assert not re.search(r"\d{4}-\d\d-\d\dT\d\d:\d\d", flat), pdf.name  # no ISO "T" times for people


def test_every_page_says_the_review_state_and_the_cautions_print_once(reports):
    """The review state on every page, so a page read alone is never taken for a reviewed one; the
    cautions once per report (common practice)."""
    for pdf in reports.values():
        pages = _pages(pdf)
        for n, text in enumerate(pages, start=1):
            assert "review: " in text, (pdf.name, n)
        flat = _flat(pdf)
        assert flat.count("Wading: enter the water") == 1
        assert flat.count("concentrated sulfuric acid burns") == 1
        assert flat.count("This report informs") == 1
    assert "review: ended, not reviewed yet" in _pages(reports[HOT])[0]
    assert "review: in progress" in _pages(reports[UPPER])[-1]


def test_table_headings_print_whole_and_the_stops_table_gives_specific_conductance(reports):
    """No heading word cut across lines (common practice); specific conductance at 25 °C printed
    with its unit."""
    words = set()
    for page in PdfReader(str(reports[HOT])).pages:
        words |= set((page.extract_text() or "").split())
    for heading in ("saturation, %", "sp. cond. at 25 °C, µS/cm", "criterion, mg/L", "sat. target, mg/L"):
        for w in heading.split():
            assert w in words, (heading, w)
    assert "2100" in _flat(reports[HOT])  # LK-03: 1.62 mS/cm at 13.1 °C is about 2100 µS/cm at 25 °C


def test_no_page_is_left_with_a_stray_line_and_the_plot_shares_the_first_page(reports):
    """Sections follow one another; no page but the last carries fewer than four lines of body
    (common practice in typesetting: no widows)."""
    for pdf in reports.values():
        pages = _pages(pdf)
        assert "Dissolved oxygen by stop" in pages[0], pdf.name
        assert len(PdfReader(str(pdf)).pages[0].images) == 1
        for n, text in enumerate(pages[:-1], start=1):
            body = [
                line
                for line in text.splitlines()[2:]
                if line.strip() and not line.strip().startswith("streamtab trip report")
            ]
            assert len(body) >= 4, (pdf.name, n, body)


def test_hand_offs_tell_bottles_with_the_same_label_apart(reports):
    """Two bottles labelled TV-0701: a hand-off names each with its site (common practice)."""
    hot = _flat(reports[HOT])
    assert "TV-0701 at LK-04, TV-0701 at LK-03, TV-0703" in hot


def _overlaps(a, b) -> bool:
    return a.x0 < b.x1 and b.x0 < a.x1 and a.y0 < b.y1 and b.y0 < a.y1


def test_plot_legends_sit_beside_the_data_and_the_date_axis_names_its_zone():
    """A legend never covers a point (common practice); dates say their zone."""
    from core.rules.report import PlotPoint
    from mobile.paper.plots import site_season_figure, trip_do_figure

    t0 = datetime(2026, 6, 9, 8, 0, tzinfo=PDT)
    points = [PlotPoint(f"LK-0{i}", t0 + timedelta(hours=i), 0.5 + i, 9.0, 5.0, [0.6 + i]) for i in range(4)]
    rows = [
        {"at": t0 + timedelta(days=7 * i), "do_mg_l": 0.4 + i, "percent_saturation": 5.0 + i, "winkler_mg_l": []}
        for i in range(4)
    ]
    site = site_season_figure(rows, site_id="LK-03", criterion_mg_l=6.5, supersat_percent=120)
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    for fig in (trip_do_figure(points), site):
        FigureCanvasAgg(fig)
        fig.canvas.draw()
        renderer = fig.canvas.get_renderer()
        for ax in fig.axes:
            legend = ax.get_legend()
            assert legend is not None
            assert not _overlaps(legend.get_window_extent(renderer), ax.get_window_extent(renderer))
    assert site.axes[1].get_xlabel() == "date (UTC−07:00)"


def test_the_bench_sheet_headings_give_units_beside_the_csv_names(store, tmp_path):
    """Each column of the printed bench sheet says what it holds and its unit, and the CSV column it is
    typed into (common practice: units on every number a person writes down)."""
    pdf = tmp_path / "bench.pdf"
    _ok("lab", "sheet", "--out", str(pdf), "--trip", HOT, data=store)
    flat = _flat(pdf)
    for label in ("sample, mL", "bottle, mL", "seed, mL", "initial DO, mg/L", "final DO, mg/L", "depletion, mg/L"):
        assert label in flat, label
    for column in ("sample_ml", "initial_do_mg_l", "final_do_mg_l"):
        assert column in flat, column
    assert flat.count("concentrated sulfuric acid burns") == 1


def test_season_tables_have_one_row_per_observation_and_no_row_twice(store, tmp_path):
    """Tidy tables (Wickham 2014, "Tidy Data"): one row per observation, units in the column names,
    ISO 8601 times with their offset, no row repeated; read back with the csv module and openpyxl."""
    import csv

    from openpyxl import load_workbook

    out = tmp_path / "season"
    _ok("export", "season", "--out", str(out), "--xlsx", data=store)
    tables = {}
    for name in ("stops", "bottles", "results", "calibrations", "custody"):
        with open(out / f"{name}.csv", newline="", encoding="utf-8") as fh:
            tables[name] = list(csv.DictReader(fh))
    custody = tables["custody"]
    # two hand-offs of three bottles, two of them labelled TV-0701: six rows, each naming one bottle
    assert len(custody) == 6
    assert sorted((c["label"], c["site_id"]) for c in custody if c["at_lab"] == "yes") == [
        ("TV-0701", "LK-03"),
        ("TV-0701", "LK-04"),
        ("TV-0703", "LK-05"),
    ]
    bottle_ids = {b["bottle_id"] for b in tables["bottles"]}
    assert {c["bottle_id"] for c in custody} <= bottle_ids
    for name, rows in tables.items():
        keys = [tuple(r.values()) for r in rows]
        assert len(keys) == len(set(keys)), name
        for r in rows:
            for col, v in r.items():
                if col in ("at", "arrived_at", "closed_at", "collected_at", "fixed_at", "analysed_at") and v:
                    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d[+-]\d\d:\d\d", v), (name, col, v)
    wb = load_workbook(out / "season.xlsx")
    assert wb["custody"].max_row == 1 + 6
    head = [c.value for c in wb["custody"][1]]
    assert "bottle_labels" not in head and {"bottle_id", "label", "site_id", "temp_on_receipt_c"} <= set(head)


def test_custody_findings_are_grouped_under_each_bottle_by_its_site(reports):
    """Two bottles labelled TV-0701 were received warm; each finding sits under its own bottle
    (common practice)."""
    hot = _flat(reports[HOT])
    assert "TV-0701 at LK-03 (BOD, chilled):" in hot
    assert "TV-0703 (BOD, chilled):" in hot


def test_a_single_stop_plot_still_draws_its_criterion_and_no_point_is_clipped():
    """The criterion is a level across each stop, visible with one stop; the y axis leaves room
    above the highest value (common practice)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from core.rules.report import PlotPoint
    from mobile.paper.plots import trip_do_figure

    one = [PlotPoint("LK-05", datetime(2026, 6, 30, 8, 50, tzinfo=PDT), 9.07, 9.48, 7.0, [])]
    fig = trip_do_figure(one)
    FigureCanvasAgg(fig)
    fig.canvas.draw()
    ax = fig.axes[0]
    crit = [a for a in ax.get_children() if getattr(a, "get_label", lambda: "")() == "DO criterion (mg/L)"]
    assert crit, "no criterion drawn"
    box = crit[0].get_window_extent(fig.canvas.get_renderer())
    assert box.width > 10 and ax.get_ylim()[1] > 9.48


def test_the_report_command_counts_in_words(store, tmp_path):
    r = run_cli("report", UPPER, "--out", str(tmp_path / "u.pdf"), data_dir=store)
    assert r.returncode == 0, r.stderr
    assert "1 stop," in r.stdout and "1 lab result," in r.stdout and "0 hand-offs" in r.stdout


def test_season_findings_read_in_words_and_codes_appear_once(store, tmp_path):
    """A person reading results.csv finds the bench's findings in words beside the codes; a code is
    listed once per result (common practice)."""
    import csv

    out = tmp_path / "season"
    _ok("export", "season", "--out", str(out), data=store)
    with open(out / "results.csv", newline="", encoding="utf-8") as fh:
        results = list(csv.DictReader(fh))
    bound = next(r for r in results if r["label"] == "TV-0703")
    codes = bound["flag_codes"].split(";")
    assert len(codes) == len(set(codes)) and "bod.depletion_too_small" in codes
    assert "Note: No dilution used 2 mg/L of oxygen" in bound["findings"]
    assert "Warning: The 300 mL dilution used 0.30 mg/L" in bound["findings"]
    late = next(r for r in results if r["label"] == "TV-0721")
    assert "deadline 2026-06-30 16:55 UTC−07:00" in late["findings"]  # times with their zone, for people
    with open(out / "stops.csv", newline="", encoding="utf-8") as fh:
        stops = list(csv.DictReader(fh))
    assert any(s["findings"].startswith("Warning: DO is 158 % of saturation") for s in stops)
