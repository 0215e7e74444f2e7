"""Helpers for the touch-app tests: a seeded store and a scenario run in a fresh interpreter."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "test-artifacts"

# Invented sites of the demo scenario (Larkspur Creek watershed); elevations are made up.
SITES = (
    ("LK-01", "Mill Ford", 420.0, "cold"),
    ("LK-02", "Heron Riffle", 455.0, "cold"),
    ("LK-03", "Aspen Bend", 610.0, "warm"),
)


def seed_sites(data_dir: Path) -> None:
    from core.records.models import Site
    from core.store import DeviceStore

    store = DeviceStore.open(data_dir)
    store.save_sites([Site(id=i, name=n, elevation_m=e, water_class=w) for i, n, e, w in SITES])


def child_env(kivy_home: Path) -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env["KIVY_NO_ARGS"] = "1"
    env["KIVY_NO_CONSOLELOG"] = "1"
    env["KIVY_NO_FILELOG"] = "1"
    env["KIVY_HOME"] = str(kivy_home)
    return env


def scenario_argv(
    scenario: str,
    data_dir: Path,
    result: Path,
    *,
    size: str = "1200x780",
    artifacts: Path | None = None,
    params: dict[str, str] | None = None,
) -> list[str]:
    argv = [sys.executable, "-m", "tests.app.driver", scenario, str(data_dir), str(result), "--size", size]
    if artifacts is not None:
        argv += ["--artifacts", str(artifacts)]
    for k, v in (params or {}).items():
        argv += ["--param", f"{k}={v}"]
    if not os.environ.get("DISPLAY"):
        xvfb = shutil.which("xvfb-run")
        if xvfb is None:
            pytest.skip("no display and no xvfb-run: the app tests need a window (make test starts Xvfb)")
        argv = [xvfb, "-a", "-s", "-screen 0 1280x1280x24", *argv]
    return argv


def run_scenario(scenario: str, data_dir: Path, tmp: Path, *, timeout: float = 120, **kw) -> dict:
    """Runs the app on `data_dir` in a child interpreter through `scenario`; returns its notes."""
    result = tmp / f"{scenario}-result.json"
    out = subprocess.run(
        scenario_argv(scenario, data_dir, result, **kw),
        env=child_env(tmp / "kivy-home"),
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=timeout,
        check=False,
    )
    assert result.exists(), f"no results (exit {out.returncode}): {out.stderr[-3000:]}"
    notes = json.loads(result.read_text())
    assert notes.get("ok"), notes.get("error") or out.stderr[-3000:]
    assert out.returncode == 0, out.stderr[-3000:]
    return notes


@pytest.fixture
def seeded(tmp_path: Path) -> Path:
    data_dir = tmp_path / "data"
    seed_sites(data_dir)
    return data_dir
