"""Shared test helpers: run the real command line in a child process."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import settings

# CI draws the same examples every run (a red CI is then reproducible); a developer's run draws
# new ones each time and keeps exploring.
settings.register_profile("ci", derandomize=True, deadline=None)
if os.environ.get("CI"):
    settings.load_profile("ci")

ROOT = Path(__file__).resolve().parent.parent


def cli_env(**extra: str) -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    env.setdefault("KIVY_NO_ARGS", "1")
    env.setdefault("KIVY_NO_CONSOLELOG", "1")
    env.update(extra)
    return env


def run_cli(
    *args: str,
    data_dir: Path | None = None,
    env: dict[str, str] | None = None,
    timeout: float = 120,
    input: str | None = None,
) -> subprocess.CompletedProcess[str]:
    """Runs `streamtab ARGS` as a person would, in a fresh interpreter; never raises on exit status."""
    argv = [sys.executable, "-m", "mobile.cli", *args]
    if data_dir is not None:
        argv += ["--data-dir", str(data_dir)]
    return subprocess.run(
        argv, capture_output=True, text=True, timeout=timeout, env=env or cli_env(), cwd=ROOT, input=input, check=False
    )


@pytest.fixture
def cli():
    return run_cli
