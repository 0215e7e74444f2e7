"""The lab mode in the real window under Xvfb: the bench screen and the signature pad, driven with touches."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest
from PIL import Image

from core.records.exchange import import_trip_file
from core.rules.custody import add_handoff
from core.store import DeviceStore
from tests.app.conftest import ARTIFACTS, ROOT, run_scenario, seed_sites

pytestmark = pytest.mark.app

HOT = "a41f6e2d-8c3b-4d7a-b5e9-0c6d2f8e1a34"  # sample trip of 2026-06-23 (invented)
PDT = timezone(timedelta(hours=-7))


def _seed(data):
    seed_sites(data)
    store = DeviceStore.open(data)
    import_trip_file(store, ROOT / "sample_trips" / "trip-2026-06-23-hot-afternoon.json")
    trip = store.load_trip(HOT)
    out = add_handoff(
        trip,
        relinquished_by="R.O.",
        received_by="Lab desk M.T.",
        at=datetime(2026, 6, 23, 15, 0, tzinfo=PDT),
        now=datetime.now(timezone.utc),
        at_lab=True,
    )
    store.save_trip(out.trip, "typed hand-off to sign on the tablet")
    store.close()


def test_bench_screen_and_signature_pad(tmp_path):
    data = tmp_path / "data"
    _seed(data)
    art = ARTIFACTS / "lab"
    notes = run_scenario("bench_and_sign", data, tmp_path, artifacts=art, size="1200x780", timeout=180)
    assert notes["waiting"] and any("BOD5" in w for w in notes["waiting"])
    assert "0.0250 N" in notes["standardisation"]  # N = 0.025 · 20 / 20 (Standard Methods 4500-O C, from memory)
    # Standard Methods 5210 B [from memory]: (8.8 − 4.3)/0.5 = 9.0 and (8.7 − 5.7)/(1/3) = 9.0 count;
    # the 50 mL bottle depletes 0.85 mg/L < 2.0 and does not.
    assert notes["row_status"][0].startswith("9.0 mg/L") and "counts" in notes["row_status"][0]
    assert "does not count" in notes["row_status"][2]
    assert notes["reportable"] == "Reportable BOD5: 9.0 mg/L"
    assert "saved" in notes["bench_message"]
    assert len(notes["waiting_after"]) == len(notes["waiting"]) - 1
    assert notes["signing"].startswith("R.O. (relinquished by)")
    assert notes["pad_points"] >= 60
    assert "saved" in notes["sign_message"] and notes["signing_next"].startswith("Lab desk M.T.")
    trip = DeviceStore.open(data).load_trip(HOT)
    sig = trip.custody[0].relinquished_signature
    assert sig is not None and sig.name == "R.O." and len(sig.strokes) == 2
    assert all(0.0 <= c <= 1.0 for s in sig.strokes for pt in s for c in pt)
    xs = [pt[0] for pt in sig.strokes[1]]
    assert min(xs) > 0.45 and max(xs) < 0.9  # the second stroke lies where it was drawn
    bod = [r for s in trip.stops for b in s.bottles for r in b.lab_results if r.analyte == "bod5"]
    assert [r.value for r in bod] == [pytest.approx(9.0)]
    for name in ("bench", "sign-pad"):
        img = Image.open(art / f"{name}.png").convert("L")
        dark = sum(img.histogram()[:100]) / (img.width * img.height)
        assert dark > 0.01, f"{name} looks blank"


def test_bench_screen_on_a_portrait_tablet(tmp_path):
    """Portrait: the waiting list sits above the forms at full width, each waiting row is as tall as its
    wrapped text (no row drawn over the next) and the Save button's word stays on one line (common practice)."""
    data = tmp_path / "data"
    _seed(data)
    notes = run_scenario("bench_narrow", data, tmp_path, artifacts=ARTIFACTS / "lab", size="600x1000")
    assert notes["row_count"] >= 1 and all(notes["rows_fit"]), notes["rows_fit"]
    text_h, font = notes["save_button"]
    assert text_h < 2 * font, notes["save_button"]  # one line of text
    width, screen = notes["queue_width"]
    assert width >= 0.9 * screen
