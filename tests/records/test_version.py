"""The version lives in one place, pyproject.toml, and every reader gets it from there (common practice)."""

from __future__ import annotations

import re
import tomllib

import core
from sync.session import Session
from tests.conftest import ROOT, run_cli
from tests.records.conftest import make_stop, make_trip

PYPROJECT_VERSION = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]["version"]


def test_the_package_version_is_pyprojects():
    assert core.version() == PYPROJECT_VERSION
    assert core.__version__ == PYPROJECT_VERSION


def test_version_option_prints_it():
    out = run_cli("--version")
    assert out.returncode == 0 and out.stdout.strip() == f"streamtab {PYPROJECT_VERSION}"


def test_sync_user_agent_carries_it():
    assert Session("tablet-A").http.headers["User-Agent"] == f"streamtab-sync/{PYPROJECT_VERSION}"


def test_derived_records_carry_it(store):
    trip = store.save_trip(make_trip([make_stop(temp="20", pressure="1013.25 hPa", cond=None, do="9.0")]), "x")
    assert trip.stops[0].derived.core_version == PYPROJECT_VERSION


def test_no_source_file_writes_the_version_itself():
    literal = re.compile(r"""["']""" + re.escape(PYPROJECT_VERSION) + r"""["']|streamtab-sync/\d""")
    found = [
        str(p.relative_to(ROOT))
        for folder in ("core", "sync", "mobile")
        for p in (ROOT / folder).rglob("*.py")
        if literal.search(p.read_text(encoding="utf-8"))
    ]
    assert found == []
