"""`streamtab app`: opens the touch app, or draws one screen to a PNG (--snapshot) and exits."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from datetime import datetime, timedelta, timezone
from pathlib import Path

from mobile.app.screens import SCREENS as _SCREEN_CLASSES
from mobile.cli._common import fail

SCREENS = tuple(_SCREEN_CLASSES)  # the app's one list of screens (its package imports no kivy)
SNAPSHOT_HINT = "streamtab app --snapshot screen.png [--screen stop]"


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds `streamtab app` to the top-level parser."""
    p = sub.add_parser("app", help="open the touch app (or draw a screen to a PNG with --snapshot)")
    p.add_argument("--data-dir", help="device store folder (default: $STREAMTAB_DATA or the user data folder)")
    p.add_argument("--snapshot", metavar="FILE.png", help="draw the screen, save it as a PNG and exit")
    p.add_argument("--screen", choices=SCREENS, help="open on this screen instead of where the app was")
    p.add_argument(
        "--seed-demo", metavar="DIR", help="on first start (empty data folder) import the sites and trips in DIR"
    )
    p.add_argument(
        "--size",
        default=None,
        metavar="WxH",
        help="window size in pixels, e.g. 800x1200 for portrait (default 1200x780)",
    )
    p.set_defaults(handler=run)


def _parse_size(text: str | None) -> tuple[int, int] | None:
    if not text:
        return None
    try:
        w, h = (int(v) for v in text.lower().split("x"))
    except ValueError:
        fail(f"--size “{text}” is not WIDTHxHEIGHT in pixels, e.g. 800x1200")
    if not (320 <= w <= 4000 and 320 <= h <= 4000):
        fail(f"--size {text} is outside 320–4000 pixels a side")
    return w, h


def _has_display() -> bool:
    if not sys.platform.startswith("linux"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def seed_demo(data_dir: Path, demo_dir: Path) -> int:
    """Imports demo sites and trips into an empty store; returns how many trips came in."""
    from core.records import exchange
    from core.store import DeviceStore

    store = DeviceStore.open(data_dir)
    if store.list_trips() or store.sites():
        return 0
    sites = demo_dir / "sites.csv"
    if sites.exists():
        exchange.import_sites_csv(store, sites)
    n = 0
    now = datetime.now(timezone.utc)
    for trip_file in sorted(demo_dir.glob("trip-*.json")):
        doc = exchange.read_trip_file(trip_file)
        if not doc.get("ended_at"):
            doc = _bring_to_today(doc, now)
        store.merge_document(doc, f"demo trip from {trip_file.name}")
        n += 1
    return n


def _bring_to_today(doc, now: datetime):  # noqa: ANN001, ANN202
    """The demo's open trip, moved in time so its last stop was 40 minutes ago.

    Only for the demo: its holding-time clocks then run as they would on a real trip today.
    """
    times = []

    def walk(node, fn):  # noqa: ANN001, ANN202
        if isinstance(node, dict):
            return {k: walk(v, fn) for k, v in node.items()}
        if isinstance(node, list):
            return [walk(v, fn) for v in node]
        return fn(node)

    def parse(value):  # noqa: ANN001, ANN202
        if isinstance(value, str) and len(value) >= 19 and value[4:5] == "-" and "T" in value:
            try:
                t = datetime.fromisoformat(value)
            except ValueError:
                return None
            return t if t.tzinfo else None
        return None

    for stop in doc.get("stops", []):
        t = parse(stop.get("arrived_at"))
        if t:
            times.append(t)
    if not times:
        return doc
    shift = timedelta(minutes=round((now - timedelta(minutes=40) - max(times)).total_seconds() / 60))

    def move(value):  # noqa: ANN001, ANN202
        t = parse(value)
        return (t + shift).isoformat() if t else value

    return walk(doc, move)


def _check_snapshot(name: str) -> None:
    """--snapshot names a PNG file in an existing folder, or a one-line error before anything opens."""
    path = Path(name)
    if path.suffix.lower() != ".png":
        fail(
            f"--snapshot {name}: the screen is drawn as a PNG image; accepted: a file name ending in .png"
            " (e.g. stop.png)"
        )
    if not path.parent.is_dir():
        fail(f"--snapshot {name}: the folder {path.parent} does not exist; accepted: a file in an existing folder")


def run(args) -> int:  # noqa: ANN001 - argparse namespace
    from core.store.paths import is_store, resolve_data_dir

    if args.snapshot:
        _check_snapshot(args.snapshot)
    size = _parse_size(args.size)
    if not _has_display():
        xvfb = shutil.which("xvfb-run")
        if args.snapshot and xvfb and not os.environ.get("STREAMTAB_UNDER_XVFB"):
            # draw off-screen on a virtual display, then exit (never hangs: bounded by timeout)
            env = dict(os.environ, STREAMTAB_UNDER_XVFB="1")
            argv = [
                xvfb,
                "-a",
                "-s",
                "-screen 0 1280x1280x24",
                sys.executable,
                "-m",
                "mobile.cli",
                "app",
                "--snapshot",
                args.snapshot,
            ]
            for flag, value in (
                ("--data-dir", args.data_dir),
                ("--screen", args.screen),
                ("--seed-demo", args.seed_demo),
                ("--size", args.size),
            ):
                if value:
                    argv += [flag, value]
            try:
                return subprocess.run(argv, env=env, timeout=120, check=False).returncode
            except subprocess.TimeoutExpired:
                fail("drawing the snapshot took over 120 s on the virtual display; nothing was written")
        sys.stderr.write(
            "streamtab: no display here (DISPLAY is not set), so the app cannot open a window; "
            f"to draw a screen to a file run: {SNAPSHOT_HINT}"
            + ("" if xvfb else " (needs xvfb-run: apt-get install xvfb)")
            + "\n"
        )
        return 3
    data_dir = resolve_data_dir(args.data_dir)
    if not is_store(data_dir):
        sys.stderr.write(f"streamtab: note: created a new device store at {data_dir}\n")
    if args.seed_demo:
        demo = Path(args.seed_demo)
        if not demo.is_dir():
            fail(f"--seed-demo {demo} is not a folder; give the folder holding sites.csv and trip-*.json")
        seed_demo(data_dir, demo)
    from mobile.app.app import run_app

    return run_app(
        data_dir,
        start_screen=args.screen,
        size=size or (1200, 780),
        snapshot=Path(args.snapshot) if args.snapshot else None,
    )
