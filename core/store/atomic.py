"""Crash-safe file writes and the canonical bytes of a JSON document (shared by the store and sync)."""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from typing import Any

__all__ = ["atomic_write_bytes", "canonical_json_bytes", "content_hash", "fsync_dir", "write_export", "EXPORT_MODE"]

#: Permission bits (before the umask) of files written for people: exports, like any new file.
EXPORT_MODE = 0o666


def fsync_dir(path: Path) -> None:
    """fsyncs a directory so that a rename inside it survives power loss (POSIX)."""
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _create_temp(folder: Path, name: str, mode: int) -> tuple[int, str]:
    """A new temporary file beside `name`, created with `mode` (the process umask applies)."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)
    for _ in range(100):
        tmp = str(folder / f".{name}.{os.urandom(6).hex()}.tmp")
        try:
            return os.open(tmp, flags, mode), tmp
        except FileExistsError:
            continue
    raise FileExistsError(f"no free temporary name in {folder}")


def atomic_write_bytes(path: Path | str, data: bytes, *, durable: bool = True, mode: int = 0o600) -> None:
    """Writes `data` to `path` so that a reader sees the old file or the new one, never a part.

    Temporary file in the same folder → write → fsync → os.replace → fsync the folder. When this
    returns, the new content is on disk. ``durable=False`` skips both fsyncs: only for caches
    that are checked and rebuilt from durable files (a power cut may then lose the new file).
    `mode` is the new file's permission bits before the umask: owner-only (0o600) for the
    device's own files; files written for people to share (exports) pass ``EXPORT_MODE`` so they
    get the permissions the person's umask gives any new file.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = _create_temp(path.parent, path.name, mode)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            if durable:
                fh.flush()
                os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    if durable:
        fsync_dir(path.parent)


def write_export(path: Path | str, data: bytes) -> None:
    """Writes a file for people (an export, a report or bench sheet PDF, a plot, the season tables):
    atomically like every store file, with ``EXPORT_MODE`` so it gets the permissions the person's
    umask gives any new file. The one way the shells write such a file."""
    atomic_write_bytes(path, data, mode=EXPORT_MODE)


def canonical_json_bytes(doc: Any) -> bytes:
    """The one byte form of a JSON document: sorted keys, UTF-8, no NaN/Infinity, trailing newline."""
    return (json.dumps(doc, sort_keys=True, ensure_ascii=False, allow_nan=False, separators=(",", ":")) + "\n").encode(
        "utf-8"
    )


def content_hash(doc: Any) -> str:
    """sha256 of the canonical bytes, as ``"sha256:<hex>"``."""
    return "sha256:" + hashlib.sha256(canonical_json_bytes(doc)).hexdigest()
