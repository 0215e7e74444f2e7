"""The store and the migrations import each other's modules without a circle: each of these modules
imports first in a fresh interpreter (common practice: an errors module with no imports of its users)."""

import subprocess
import sys

import pytest

from tests.conftest import ROOT, cli_env


@pytest.mark.parametrize(
    "module",
    [
        "core.records.migrations",
        "core.store.errors",
        "core.store",
        "core.store.device",
        "core.records.merge",
        "core.rules.conflicts",
    ],
)
def test_module_imports_first_in_a_fresh_interpreter(module):
    code = f"import {module}; import core.store as s; s.DeviceStore; s.StoreError"
    r = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, env=cli_env(), capture_output=True, text=True, timeout=60, check=False
    )
    assert r.returncode == 0, r.stderr


def test_importing_the_errors_does_not_import_the_store():
    code = "import sys, core.store.errors; assert 'core.store.device' not in sys.modules, 'store imported'"
    r = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, env=cli_env(), capture_output=True, text=True, timeout=60, check=False
    )
    assert r.returncode == 0, r.stderr
