"""`streamtab report`: the trip report PDF read back (pypdf) and rendered (pdftoppm) as a reader sees it."""

from __future__ import annotations

import re
import shutil
import subprocess
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest
from PIL import Image
from pypdf import PdfReader

from core.records.exchange import import_sites_csv, import_trip_file
from core.records.models import Bottle, LabResult, Signature, measure
from core.rules.custody import add_handoff
from core.rules.lab import record_winkler
from core.store import DeviceStore
from tests.conftest import ROOT, run_cli

SAMPLES = ROOT / "sample_trips"
LOWER = "5d7c2b0e-1f4a-4c8e-9b6d-3a2e1f0c9b71"  # sample trip of 2026-06-09 (invented)
PDT = timezone(timedelta(hours=-7))
NOW = datetime(2026, 6, 20, 12, 0, tzinfo=PDT)

needs_pdftoppm = pytest.mark.skipif(
    shutil.which("pdftoppm") is None and not __import__("os").environ.get("CI"),
    reason="pdftoppm (poppler-utils) is installed by .ci/sysdeps.sh",
)


def _sig(name: str, seed: int) -> Signature:
    """A made-up scribble: a loop and an underline, in pad fractions."""
    import math

    loop = [
        [round(0.1 + 0.35 * i / 60 + 0.05 * math.sin(i / 4 + seed), 4), round(0.5 - 0.3 * math.sin(i / 6 + seed), 4)]
        for i in range(60)
    ]
    line = [[round(0.1 + 0.8 * i / 20, 4), 0.85] for i in range(21)]
    return Signature(name=name, signed_at=datetime(2026, 6, 9, 12, 0, tzinfo=PDT), aspect=3.5, strokes=[loop, line])


def _build(root: Path, *, signed: bool) -> DeviceStore:
    store = DeviceStore.open(root, "lab-desk")
    import_sites_csv(store, SAMPLES / "sites.csv")
    import_trip_file(store, SAMPLES / "trip-2026-06-09-lower-watershed.json")
    trip = store.load_trip(LOWER)
    # A re-titration of TV-0613: the demo result stays, marked superseded (Standard Methods 4500-O C,
    # 200 mL original sample with 0.025 N titrant: 1 mL = 1 mg/L, from memory).
    out = record_winkler(
        trip,
        "TV-0613",
        titrant_ml=9.05,
        titrated_ml=200 * 300 / 298,
        normality=0.025,
        analysed_at=datetime(2026, 6, 9, 13, 0, tzinfo=PDT),
        now=NOW,
        analyst="M.T.",
        redo_reason="end point overshot on the first titration",
    )
    trip = out.trip
    # A BOD5 bottle whose result is a bound ("< 2.0 mg/L", Standard Methods 5210 B: no dilution
    # depleted 2.0 mg/L), in the layout of the bench's report.
    stops = list(trip.stops)
    last = stops[-1]
    bound = LabResult(
        analyte="bod5",
        value=2.0,
        unit="mg/L",
        analysed_at=datetime(2026, 6, 14, 11, 0, tzinfo=PDT),
        analyst="M.T.",
        method="Standard Methods 5210 B",
        valid=True,
        inputs={"report": {"value": 2.0, "qualifier": "<", "text": "< 2.0 mg/L"}},
    )
    extra = Bottle(
        label="TV-0615",
        kind="bod",
        collected_at=last.arrived_at + timedelta(minutes=6),
        preservation="on ice, ≤ 6 °C",
        lab_results=[bound],
    )
    stops[-1] = last.model_copy(update={"bottles": list(last.bottles) + [extra]})
    trip = trip.model_copy(update={"stops": stops})
    sig = dict(relinquished_signature=_sig("J.V.", 1), received_signature=_sig("Courier K", 2)) if signed else {}
    trip = add_handoff(
        trip,
        relinquished_by="J.V.",
        received_by="Courier K",
        at=datetime(2026, 6, 9, 12, 30, tzinfo=PDT),
        now=NOW,
        **sig,
    ).trip
    sig = (
        dict(relinquished_signature=_sig("Courier K", 3), received_signature=_sig("Lab desk M.T.", 4)) if signed else {}
    )
    trip = add_handoff(
        trip,
        relinquished_by="Courier K",
        received_by="Lab desk M.T.",
        at=datetime(2026, 6, 9, 12, 55, tzinfo=PDT),
        now=NOW,
        at_lab=True,
        temp=measure("temp", "4.2 C"),
        condition="intact, on ice",
        bottle_refs=["TV-0611", "TV-0612", "TV-0613", "TV-0615"],
        **sig,
    ).trip
    store.save_trip(trip, "lab and custody for the report test")
    return store


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    base = tmp_path_factory.mktemp("report")
    out = {}
    for signed in (True, False):
        data = base / f"data-{signed}"
        _build(data, signed=signed).close()
        pdf = base / f"trip-{signed}.pdf"
        r = run_cli("report", LOWER[:8], "--out", str(pdf), data_dir=data)
        assert r.returncode == 0, r.stderr
        out[signed] = pdf
    return out


def _text(pdf: Path) -> str:
    return "\n".join(p.extract_text() or "" for p in PdfReader(str(pdf)).pages)


def test_the_report_names_every_stop_bottle_result_and_hand_off(reports):
    text = _text(reports[True])
    flat = re.sub(r"\s+", " ", text)
    for site in ("LK-01", "LK-02", "LK-03", "Mill Ford", "Heron Bend", "Alder Gauge"):
        assert site in text, site
    for label in ("TV-0611", "TV-0612", "TV-0613", "TV-0614", "TV-0615"):
        assert label in text, label
    assert "< 2.0 mg/L" in flat  # the bound, with its qualifier (Standard Methods 5210 B)
    assert "9.1 mg/L" in flat and "(9.1 mg/L)" in flat  # the re-titration live, the demo result in brackets
    assert "superseded by" in flat
    assert "9.4 mg/L" in flat and "0.8 mg/L" in flat and "0.6 mg/L" in flat
    assert "J.V. → Courier K" in flat and "Courier K → Lab desk M.T. — received at the lab" in flat
    assert "temperature on receipt: 4.2 °C" in flat and "intact, on ice" in flat
    assert "TV-0614 has no receipt at the lab" in flat  # it never reached the lab desk
    assert "742.1 mmHg" in flat  # readings as typed
    assert "SOP" in flat and "local regulations" in flat and "sulfuric acid" in flat and "Wading" in flat
    assert "unsigned" not in flat


def test_an_unsigned_chain_says_so(reports):
    flat = re.sub(r"\s+", " ", _text(reports[False]))
    assert flat.count("unsigned (typed name)") == 4


def _pages(pdf: Path, out: Path) -> list[Image.Image]:
    subprocess.run(["pdftoppm", "-r", "50", "-gray", str(pdf), str(out)], check=True, timeout=120)
    return [Image.open(p).convert("L") for p in sorted(out.parent.glob(out.name + "*.pgm"))]


def _ink(img: Image.Image) -> float:
    hist = img.histogram()
    return sum(hist[:160]) / (img.width * img.height)


@needs_pdftoppm
def test_every_page_renders_with_ink_and_signatures_are_drawn(reports, tmp_path):
    signed = _pages(reports[True], tmp_path / "signed")
    unsigned = _pages(reports[False], tmp_path / "unsigned")
    assert len(signed) == len(PdfReader(str(reports[True])).pages) >= 4
    for i, page in enumerate(signed):
        assert _ink(page) > 0.003, f"page {i + 1} looks blank"
    # The custody page: the drawn strokes add ink where the unsigned copy has only a grey note.
    custody = next(
        i for i, p in enumerate(PdfReader(str(reports[True])).pages) if "Hand-offs" in (p.extract_text() or "")
    )
    assert _ink(signed[custody]) > _ink(unsigned[custody]) + 0.001


HEADINGS = {
    "Field sheet",
    "Meter calibration",
    "Dissolved oxygen by stop",
    "Stops: readings as entered and what was derived",
    "Findings at each stop",
    "Notes",
    "Lab results",
    "Chain of custody",
    "Hand-offs",
    "Custody findings",
    "Cautions and reporting conventions",
}


def _page_texts(pdf: Path) -> list[str]:
    """Each page's text as pdftotext (poppler) reads it, one string per page."""
    count = len(PdfReader(str(pdf)).pages)
    return [
        subprocess.run(
            ["pdftotext", "-f", str(n), "-l", str(n), str(pdf), "-"], check=True, capture_output=True, text=True
        ).stdout
        for n in range(1, count + 1)
    ]


@needs_pdftoppm
@pytest.mark.parametrize("signed", [True, False])
def test_a_heading_never_ends_a_page_and_the_do_plot_follows_its_heading(reports, tmp_path, signed):
    """A heading stays on the page of the block it introduces (common practice in typesetting:
    no widowed headings). Read back per page with pdftotext and rendered with pdftoppm."""
    pdf = reports[signed]
    texts = _page_texts(pdf)
    for n, text in enumerate(texts, start=1):
        lines = [
            line.strip()
            for line in text.splitlines()
            if line.strip() and not line.strip().startswith(("streamtab trip report", "page "))
        ]
        assert lines, f"page {n} is empty"
        assert lines[-1] not in HEADINGS, f"page {n} ends with the heading {lines[-1]!r}"
    do_page = next(i for i, t in enumerate(texts) if "Dissolved oxygen by stop" in t)
    assert "Solid line, filled circles: meter DO" in texts[do_page]  # the caption under the plot
    assert len(PdfReader(str(pdf)).pages[do_page].images) == 1  # the plot itself, on the same page
    page = _pages(pdf, tmp_path / "page")[do_page]
    # the plot's lines and axes put ink in the upper half of that page, below the heading
    top = page.crop((0, page.height // 8, page.width, page.height // 2))
    assert _ink(top) > 0.01


def test_plot_series_read_in_grey_scale():
    from matplotlib.colors import to_rgb

    from mobile.paper.plots import STYLES

    looks = {(str(s.get("linestyle")), s.get("marker")) for s in STYLES.values()}
    assert len(looks) == len(STYLES)  # told apart by line and marker, not colour
    for name, s in STYLES.items():
        r, g, b = to_rgb(s["color"])
        assert r == g == b, name  # no hue carries meaning


def test_report_refuses_a_bad_out_in_one_line(tmp_path):
    for out, word in ((tmp_path / "r.png", ".pdf"), (tmp_path / "nope" / "r.pdf", "does not exist")):
        r = run_cli("report", LOWER[:8], "--out", str(out), data_dir=tmp_path / "data")
        assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1 and word in r.stderr, r.stderr
        assert "Traceback" not in r.stderr
