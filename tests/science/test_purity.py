"""The science modules stay pure: no clock, no file writes (team rules: pure core).

What they may import is checked by the import-linter contracts in pyproject.toml (`make check`);
this test checks what import-linter cannot: the calls a module makes."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
SCIENCE = [
    "_validate",
    "pressure",
    "temperature",
    "conductivity",
    "oxygen",
    "criteria",
    "calibration",
    "winkler",
    "bod",
    "holding",
    "assess",
]
FORBIDDEN_CALLS = {"now", "utcnow", "today", "open", "write_text", "write_bytes"}


@pytest.mark.parametrize("name", SCIENCE)
def test_module_is_pure(name):
    tree = ast.parse((ROOT / "core" / "science" / f"{name}.py").read_text(encoding="utf-8"))
    assert ast.get_docstring(tree), "modules open with a one-line docstring"
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            fn = node.func
            called = fn.attr if isinstance(fn, ast.Attribute) else getattr(fn, "id", "")
            assert called not in FORBIDDEN_CALLS, f"{name}: calls {called}()"
