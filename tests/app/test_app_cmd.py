"""`streamtab app` as a person runs it: no display → one line naming the snapshot command; --snapshot
draws a screen to a PNG (under xvfb-run when there is no display) and exits; --seed-demo fills an
empty data folder once. Checks are common practice for command-line tools."""

from __future__ import annotations

import shutil

import pytest

from tests.app.conftest import ARTIFACTS, ROOT
from tests.conftest import cli_env, run_cli

pytestmark = pytest.mark.app


def _no_display_env(tmp_path):
    env = cli_env(KIVY_HOME=str(tmp_path / "kivy-home"))
    env.pop("DISPLAY", None)
    env.pop("WAYLAND_DISPLAY", None)
    return env


def test_no_display_says_so_in_one_line_and_never_hangs(tmp_path):
    out = run_cli("app", "--data-dir", str(tmp_path / "d"), env=_no_display_env(tmp_path), timeout=30)
    assert out.returncode != 0
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1, out.stderr
    assert "display" in lines[0] and "--snapshot" in lines[0]
    assert "Traceback" not in out.stderr


@pytest.mark.skipif(shutil.which("xvfb-run") is None, reason="needs xvfb-run")
@pytest.mark.parametrize("screen", ["trips", "start", "stop", "bottles", "end", "sync", "settings", "bench", "sign"])
def test_snapshot_of_demo_screens(tmp_path, screen):
    from PIL import Image

    from core.store import DeviceStore

    png = ARTIFACTS / "cli-demo" / f"{screen}.png"
    png.parent.mkdir(parents=True, exist_ok=True)  # --snapshot writes only into an existing folder
    out = run_cli(
        "app",
        "--data-dir",
        str(tmp_path / "d"),
        "--seed-demo",
        str(ROOT / "sample_trips"),
        "--snapshot",
        str(png),
        "--screen",
        screen,
        "--size",
        "1000x700",
        env=_no_display_env(tmp_path),
        timeout=120,
    )
    assert out.returncode == 0, out.stderr[-2000:]
    with Image.open(png) as im:
        assert im.size == (1000, 700)
        # a drawn screen, not a blank one: several distinct colours
        assert len(im.convert("RGB").getcolors(maxcolors=1 << 16) or []) > 10
    n_demo = len(list((ROOT / "sample_trips").glob("trip-*.json")))
    assert len(DeviceStore.open(tmp_path / "d").list_trips()) == n_demo


def test_seed_demo_only_into_an_empty_folder(tmp_path):
    from core.store import DeviceStore
    from mobile.cli.app_cmd import seed_demo

    n = seed_demo(tmp_path / "d", ROOT / "sample_trips")
    assert n == len(list((ROOT / "sample_trips").glob("trip-*.json"))) and n > 0
    assert seed_demo(tmp_path / "d", ROOT / "sample_trips") == 0
    assert len(DeviceStore.open(tmp_path / "d").list_trips()) == n


def test_seed_demo_moves_only_the_open_trip_to_today(tmp_path):
    """The demo's open trip runs on today's clock (its last stop 40 min ago); ended trips keep
    their dates and every stored value but the times is as in sample_trips/ (demo behaviour)."""
    import json
    from datetime import datetime, timedelta, timezone

    from core.store import DeviceStore
    from mobile.cli.app_cmd import seed_demo

    before = datetime.now(timezone.utc)
    seed_demo(tmp_path / "d", ROOT / "sample_trips")
    store = DeviceStore.open(tmp_path / "d")
    files = {
        json.loads(f.read_text())["id"]: json.loads(f.read_text()) for f in (ROOT / "sample_trips").glob("trip-*.json")
    }
    open_trips = [s for s in store.list_trips() if files[s.id].get("ended_at") is None]
    assert open_trips, "the demo needs an open trip"
    for summary in store.list_trips():
        trip = store.load_trip(summary.id)
        src = files[summary.id]
        if src.get("ended_at") is None:
            last = max(stop.arrived_at for stop in trip.stops)
            assert timedelta(minutes=38) <= before - last <= timedelta(minutes=43)
            shift = trip.started_at - datetime.fromisoformat(src["started_at"])
            for stop, src_stop in zip(trip.stops, src["stops"], strict=True):
                assert stop.arrived_at - datetime.fromisoformat(src_stop["arrived_at"]) == shift
                assert stop.temp.text == src_stop["temp"]["text"]
        else:
            assert trip.started_at == datetime.fromisoformat(src["started_at"])


def test_bad_size_is_one_line_exit_2(tmp_path):
    out = run_cli("app", "--size", "big", env=_no_display_env(tmp_path), timeout=30)
    assert out.returncode == 2
    assert len(out.stderr.strip().splitlines()) == 1 and "--size" in out.stderr
