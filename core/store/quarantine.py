"""Quarantine: a file that cannot be read is moved (or copied) aside with the reason, never overwritten.

Shared by the device store (unreadable trip, site and settings files) and sync (hub documents
that fail their checks), so both keep the same promise: nothing found bad is deleted, and a
person can read why it was set aside in the note file beside it.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

from core.store.atomic import atomic_write_bytes

__all__ = ["quarantine", "utc_stamp"]


def utc_stamp(*, zone: bool = False) -> str:
    """The current UTC time as ``YYYYmmddTHHMMSS`` (``…Z`` with `zone`), for quarantined names."""
    return time.strftime("%Y%m%dT%H%M%S" + ("Z" if zone else ""), time.gmtime())


def _free(folder: Path, name: str) -> Path:
    target = folder / name
    n = 1
    while target.exists():
        n += 1
        target = folder / f"{name}.{n}"
    return target


def quarantine(
    folder: Path | str,
    name: str,
    reason: str,
    *,
    source: Path | None = None,
    data: bytes | None = None,
    note_suffix: str = ".reason.txt",
    refresh: bool = False,
) -> Path:
    """Sets a bad file aside in `folder` under `name` (``name.2``, ``name.3``… when taken).

    With `refresh`, `name` is used even when taken: the copy and its note are replaced (for a
    source that is checked again at every run and must not multiply, e.g. a bad hub file).

    With `source`, the file is moved there (``os.replace``; a source already gone moves
    nothing and writes no note); with `data`, those bytes are written there (durably); with
    neither, only the note is written. The note (`reason` and a newline) goes beside it as
    ``<target><note_suffix>``. Returns the target path.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    target = folder / name if refresh else _free(folder, name)
    if source is not None:
        try:
            os.replace(source, target)
        except FileNotFoundError:
            return target
    elif data is not None:
        atomic_write_bytes(target, data)
    text = reason if reason.endswith("\n") else reason + "\n"
    atomic_write_bytes(target.with_name(target.name + note_suffix), text.encode("utf-8"))
    return target
