"""TinyDB storage that never leaves a half-written file, and the reading of a store file's JSON."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from tinydb import TinyDB
from tinydb.storages import Storage

from core.store.atomic import atomic_write_bytes, canonical_json_bytes

__all__ = ["AtomicJSONStorage", "SnapshotStorage", "json_file", "open_tinydb"]


def json_file(raw: bytes, error: type[Exception]) -> Any:
    """The JSON in a store file's bytes; `error` (with a plain reason) for an empty or broken one."""
    if not raw.strip():
        raise error("the file is empty")
    try:
        return json.loads(raw)
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise error(f"the file is not valid JSON ({exc})") from None
    except RecursionError:
        raise error("the file is nested too deeply to read") from None


def _table_map(data: Any) -> dict[str, Any]:
    if not isinstance(data, dict):
        raise ValueError("the file does not hold a table map")
    return data


class AtomicJSONStorage(Storage):
    """TinyDB storage: `read()` parses the file (None when absent); `write()` replaces it atomically.

    Unlike TinyDB's JSONStorage it never rewrites a file in place: each write goes to a temporary
    file that is fsynced, moved over the old one with ``os.replace``, and the folder fsynced.
    A file that does not parse raises ``ValueError`` (the store quarantines it). The bytes of
    the last write and the data written are kept in :attr:`written` and :attr:`written_data`
    (the store caches them). `current`, when given,
    is the file's content the caller has just read under the store's lock: the first `read()`
    returns it instead of parsing the file again.
    """

    def __init__(self, path: str | Path, current: dict[str, Any] | None = None, **_: Any):
        super().__init__()
        self.path = Path(path)
        self.written: bytes | None = None
        self.written_data: dict[str, Any] | None = None
        self._current = current

    def read(self) -> dict[str, Any] | None:
        if self._current is not None:
            current, self._current = self._current, None
            return current
        try:
            raw = self.path.read_bytes()
        except FileNotFoundError:
            return None
        return _table_map(json_file(raw, ValueError))

    def write(self, data: dict[str, Any]) -> None:
        raw = canonical_json_bytes(data)
        atomic_write_bytes(self.path, raw)
        self.written, self.written_data = raw, data

    def close(self) -> None:
        pass


class SnapshotStorage(Storage):
    """TinyDB storage over bytes already read (read-only): the store reads a file once, compares
    the bytes with its cache, and lets TinyDB interpret them only when they changed."""

    def __init__(self, raw: bytes, **_: Any):
        super().__init__()
        self._data = _table_map(json_file(raw, ValueError))

    def read(self) -> dict[str, Any] | None:
        return self._data

    def write(self, data: dict[str, Any]) -> None:  # pragma: no cover - never called
        raise OSError("a snapshot of a store file is read-only")


def open_tinydb(path: Path) -> TinyDB:
    """A TinyDB over `path` through :class:`AtomicJSONStorage`."""
    return TinyDB(path, storage=AtomicJSONStorage)
