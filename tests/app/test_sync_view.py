"""The sync view in the real window: a trip sent to a hub folder in the background, with progress
and a per-trip result, while the stop screen keeps taking keystrokes."""

from __future__ import annotations

import pytest

from core.store import DeviceStore
from tests.app.conftest import ARTIFACTS, run_scenario, seed_sites

pytestmark = pytest.mark.app


def test_send_to_folder_hub(tmp_path):
    seed_sites(tmp_path / "data")
    hub = tmp_path / "hub"
    hub.mkdir()
    notes = run_scenario(
        "sync_folder", tmp_path / "data", tmp_path, artifacts=ARTIFACTS / "sync", params={"hub": str(hub)}
    )
    assert notes["typed_during_sync"] == "11,0"
    # before sending, the screen says what is waiting (common practice: say the state, not only a button)
    assert "1 trip · 0 at the hub · 1 waiting to send" in notes["idle_status"], notes["idle_status"]
    assert len(notes["idle_rows"]) == 1 and notes["idle_rows"][0].startswith("● WAITING:"), notes["idle_rows"]
    assert notes["status"].startswith("✓ Sent 1"), notes["status"]
    # after, what the tablet holds now: the trip at the hub, nothing waiting, and when it got there
    assert "1 trip · 1 at the hub · 0 waiting to send · 0 with conflicts" in notes["status"], notes["status"]
    assert "last reached the hub" in notes["status"]
    assert any(r.startswith("✓ PUSHED") for r in notes["rows"]), notes["rows"]
    assert notes["progress"][0] == notes["progress"][1]
    # idle, the progress strip takes no room (its empty frame looked like a text field); after, it shows
    assert notes["idle_bar"] == [0, 0, False] and notes["done_bar_visible"] is True
    # the hub holds the trip under its id (layout: sync engineer's; we only look for the id)
    names = [p.name for p in hub.rglob("*")] + [str(p) for p in hub.rglob("*")]
    assert any(notes["trip_id"] in n for n in names)
    trip = DeviceStore.open(tmp_path / "data").load_trip(notes["trip_id"])
    assert trip.stops[0].do.text == "11,0 mg/L"  # typed while sending, saved afterwards


def test_an_address_with_a_password_is_refused_before_it_is_stored(tmp_path):
    seed_sites(tmp_path / "data")
    notes = run_scenario("sync_refuses_secret", tmp_path / "data", tmp_path, artifacts=ARTIFACTS / "sync")
    status, running = notes["sync"]
    assert not running and "must not carry a user name or password" in status
    assert "must not carry a user name or password" in notes["settings"]
    for shown in (status, notes["settings"]):
        assert "s3cret" not in shown and "ann" not in shown
    # nothing holding the password was written anywhere in the data folder
    for f in (tmp_path / "data").rglob("*"):
        if f.is_file():
            assert b"s3cret" not in f.read_bytes(), f
