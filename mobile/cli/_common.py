"""Shared pieces of the command line: one-line errors with exit status 2, JSON or table output."""

from __future__ import annotations

import argparse
import json
import sys
from datetime import datetime
from pathlib import Path
from typing import Any, NoReturn

EXIT_OK = 0
EXIT_RETRY = 1
EXIT_BAD_INPUT = 2


class CliError(Exception):
    """A bad input: printed as one line, exit status 2."""


class OneLineParser(argparse.ArgumentParser):
    """argparse that reports a usage mistake in one line (no usage dump) with exit status 2."""

    def error(self, message: str) -> NoReturn:  # noqa: D401 - argparse hook
        command = " ".join(["streamtab", self._sub_name()]).strip()
        sys.stderr.write(f"streamtab: {message} (see '{command} --help')\n")
        raise SystemExit(EXIT_BAD_INPUT)

    def _sub_name(self) -> str:
        return self.prog.replace("streamtab", "", 1).strip()


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


#: The commands that may create a device store where there is none (they say so when they do).
CREATING_COMMANDS = (
    "'streamtab sites import', 'trip import', 'sync pull', 'archive load --from', 'device name' and 'app'"
)


def store_location(data_dir: str | None) -> str:
    """Where the store is looked for, as the person set it: the option, the variable or the default."""
    import os

    from core.store.paths import ENV_VAR, resolve_data_dir

    root = resolve_data_dir(data_dir)
    if data_dir:
        return f"--data-dir {data_dir}"
    if os.environ.get(ENV_VAR):
        return f"${ENV_VAR} ({root})"
    return f"the user data folder ({root})"


def open_store(data_dir: str | None, *, create: bool = False, locked_raises: bool = False):
    """The device store at --data-dir (else $STREAMTAB_DATA, else the user folder), or a one-line error.

    Only a command that saves something a person gave it may create a store (`create`), and it
    says so on stderr; every other command refuses a folder that holds no store, so a mistyped
    --data-dir never leaves an empty store behind. With `locked_raises`, a store busy past the lock
    timeout raises core.store.StoreLocked (sync reports it as "will retry", exit 1)."""
    from core.store import DeviceStore, StoreError, StoreLocked
    from core.store.paths import is_store, resolve_data_dir

    root = resolve_data_dir(data_dir)
    new = not is_store(root)
    if new and not create:
        fail(
            f"{store_location(data_dir)}: no device store there; accepted: the folder of an existing store"
            f" ({CREATING_COMMANDS} create one)."
        )
    try:
        store = DeviceStore.open(data_dir)
        if new:
            sys.stderr.write(f"streamtab: note: created a new device store at {root}\n")
        return store
    except StoreError as exc:
        if locked_raises and isinstance(exc, StoreLocked):
            raise
        fail(str(exc))
    except OSError as exc:
        fail(
            f"{store_location(data_dir)}: cannot open the device store there ({exc.strerror});"
            " accepted: a writable folder."
        )


def resolve_trip_id(store, ident: str, label: str = "trip") -> str:  # noqa: ANN001
    """The full id of the trip named by its id or a unique start of it, or a one-line error."""
    from core.store import StoreError

    ident = (ident or "").strip()
    if not ident:
        fail(f"{label} is empty; accepted: a trip id or its first 8 characters (see 'streamtab trip list').")
    try:
        if store.has_trip(ident):
            return ident
        matches = [s.id for s in store.list_trips() if s.id.startswith(ident)]
    except StoreError as exc:
        fail(str(exc))
    if len(matches) == 1:
        return matches[0]
    if not matches:
        fail(
            f"{label} {ident!r}: no such trip on this device; accepted: a trip id or its first 8"
            " characters (see 'streamtab trip list')."
        )
    fail(
        f"{label} {ident!r} matches {len(matches)} trips ({', '.join(m[:12] for m in matches)});"
        " accepted: more characters of the id."
    )


def parse_time(text: str | None, option: str) -> datetime | None:
    """A date-time option as typed (ISO 8601 with a zone), None when not given, else a one-line error."""
    if text is None:
        return None
    try:
        t = datetime.fromisoformat(text.strip())
    except ValueError:
        raise CliError(
            f"{option} {text!r} is not a date-time; accepted: ISO 8601 with a time zone, e.g. 2026-06-09T11:20-07:00"
        ) from None
    if t.tzinfo is None or t.utcoffset() is None:
        raise CliError(
            f"{option} {text!r} has no time zone; accepted: ISO 8601 with a time zone, e.g."
            " 2026-06-09T11:20-07:00 or 2026-06-09T18:20Z"
        )
    return t


def read_text_file(path_text: str, option: str, accepted: str) -> str:
    """The UTF-8 text of a file named by `option`, or a one-line error naming the option, what was
    wrong (missing, a folder, not UTF-8, unreadable) and what is `accepted`."""
    path = Path(path_text)
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        fail(f"{option} {path_text!r} does not exist; accepted: {accepted}")
    except IsADirectoryError:
        fail(f"{option} {path_text!r} is a folder; accepted: {accepted}")
    except UnicodeDecodeError as exc:
        fail(f"{option} {path_text!r} is not UTF-8 text (byte {exc.start + 1}); accepted: {accepted}, saved as UTF-8")
    except OSError as exc:
        fail(f"{option} {path_text!r} cannot be read ({exc.strerror or exc}); accepted: {accepted}")


def read_dilutions_file(path_text: str) -> tuple[list[Any], Any, bool]:
    """A --dilutions JSON file as (dilutions, seed_controls or None, nitrification_inhibitor), or a
    one-line error: a list of dilutions, or an object with "dilutions" (and "seed_controls",
    "nitrification_inhibitor"). An empty list and the entries themselves are checked by core."""
    raw = read_text_file(path_text, "--dilutions", "a JSON file of dilutions")
    try:
        doc = json.loads(raw)
    except json.JSONDecodeError as exc:
        fail(
            f"--dilutions {path_text!r} is not valid JSON (line {exc.lineno}, column {exc.colno}); accepted: a"
            ' list of dilutions or an object with "dilutions" (and "seed_controls")'
        )
    controls = None
    inhibitor = False
    if isinstance(doc, dict):
        unknown = sorted(set(doc) - {"dilutions", "seed_controls", "nitrification_inhibitor"})
        if unknown:
            fail(
                f"--dilutions {path_text!r} has an unknown key {unknown[0]!r}; accepted keys: dilutions,"
                " seed_controls, nitrification_inhibitor"
            )
        inhibitor = doc.get("nitrification_inhibitor", False)
        if not isinstance(inhibitor, bool):
            fail(
                f"--dilutions {path_text!r}: nitrification_inhibitor is not true or false; accepted: true"
                " (CBOD5) or false (BOD5)"
            )
        controls = doc.get("seed_controls")
        doc = doc.get("dilutions")
    if not isinstance(doc, list):
        fail(
            f"--dilutions {path_text!r} holds no list of dilutions; accepted: a JSON list of objects with"
            ' initial_do_mg_l, final_do_mg_l, sample_ml (or an object with "dilutions")'
        )
    return doc, controls, inhibitor
