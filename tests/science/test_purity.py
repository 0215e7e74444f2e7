"""The science modules and the lab rules stay pure: no clock, no file writes (team rules: pure core).

What they may import is checked by the import-linter contracts in pyproject.toml (`make check`);
this test checks what import-linter cannot: the calls a module makes."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
# Every science module (the folder, so a new one cannot be missed) and the lab rules.
PURE = sorted(f"core/science/{p.name}" for p in (ROOT / "core" / "science").glob("*.py")) + ["core/rules/lab.py"]
FORBIDDEN_CALLS = {"now", "utcnow", "today", "open", "write_text", "write_bytes"}


def test_the_list_holds_every_science_module():
    assert {"core/science/oxygen.py", "core/science/quantities.py", "core/science/bod.py"} <= set(PURE)


@pytest.mark.parametrize("name", PURE)
def test_module_is_pure(name):
    tree = ast.parse((ROOT / name).read_text(encoding="utf-8"))
    assert ast.get_docstring(tree), "modules open with a one-line docstring"
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            fn = node.func
            called = fn.attr if isinstance(fn, ast.Attribute) else getattr(fn, "id", "")
            assert called not in FORBIDDEN_CALLS, f"{name}: calls {called}()"
