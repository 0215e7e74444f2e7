"""Runs every tests/bench/bench_*.py module's `main()` in turn (or those named on the command line)."""

from __future__ import annotations

import importlib
import pkgutil
import sys

import tests.bench as pkg


def main(argv: list[str]) -> int:
    names = sorted(m.name for m in pkgutil.iter_modules(pkg.__path__) if m.name.startswith("bench_"))
    if argv:
        names = [n for n in names if any(a in n for a in argv)]
    status = 0
    for name in names:
        print(f"== {name}", flush=True)
        module = importlib.import_module(f"tests.bench.{name}")
        status |= int(module.main() or 0)
    return status


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
