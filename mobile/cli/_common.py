"""Shared pieces of the command line: one-line errors with exit status 2, JSON or table output."""
from __future__ import annotations

import argparse
import json
import sys
from typing import Any, NoReturn

EXIT_OK = 0
EXIT_RETRY = 1
EXIT_BAD_INPUT = 2


class CliError(Exception):
    """A bad input: printed as one line, exit status 2."""


class OneLineParser(argparse.ArgumentParser):
    """argparse that reports a usage mistake in one line (no usage dump) with exit status 2."""

    def error(self, message: str) -> NoReturn:  # noqa: D401 - argparse hook
        sys.stderr.write(f"streamtab: {message} (see 'streamtab {self._sub_name()} --help')\n")
        raise SystemExit(EXIT_BAD_INPUT)

    def _sub_name(self) -> str:
        return self.prog.replace("streamtab", "", 1).strip() or "-"


def emit_json(obj: Any) -> None:
    json.dump(obj, sys.stdout, indent=2, sort_keys=False, default=str)
    sys.stdout.write("\n")


def emit_table(rows: list[tuple[str, str]]) -> None:
    """Two columns, label and value-with-unit, aligned."""
    width = max((len(label) for label, _ in rows), default=0)
    for label, value in rows:
        sys.stdout.write(f"{label.ljust(width)}  {value}\n")


def fail(message: str) -> NoReturn:
    raise CliError(message)
