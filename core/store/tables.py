"""The sites and program-settings tables: two small TinyDB files beside the trips.

``sites.json`` holds table "sites" (one document per site); ``settings.json`` holds table
"settings" (document 1 = the program settings). Reads are cached by the file's (mtime, size);
writes go through TinyDB's own API on :class:`core.store.storage.AtomicJSONStorage`. The
caller (the device store) holds its lock around writes and validates the records first.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable, MutableMapping
from pathlib import Path
from typing import Any, TypeVar

from pydantic import ValidationError
from pydantic_core import from_json
from tinydb import TinyDB
from tinydb.middlewares import CachingMiddleware
from tinydb.table import Document

from core.records.models import SCHEMA_VERSION, ProgramSettings, Site
from core.store.atomic import canonical_json_bytes
from core.store.errors import CorruptFile, NewerSchemaError, StoreWriteError
from core.store.storage import AtomicJSONStorage, open_tinydb

__all__ = ["Tables"]

Stamp = tuple[int, int]


def _stamp(path: Path) -> Stamp:
    try:
        st = path.stat()
        return (st.st_mtime_ns, st.st_size)
    except FileNotFoundError:
        return (0, 0)


M = TypeVar("M", ProgramSettings, Site)


def salvage(model: type[M], doc: dict[str, Any], *, rounds: int = 50) -> tuple[M | None, list[str]]:
    """The record `doc` holds, keeping every valid part: each field (or list element, e.g. one
    instrument log) that fails validation is left out, so one bad value never costs the rest.

    Returns the record (None when even the remainder is not one, e.g. a site without its id) and
    the parts left out, as dotted paths ("supersaturation_percent", "instruments.2"). Bounded:
    at most `rounds` passes."""
    if not isinstance(doc, dict):
        return None, ["(the whole record)"]
    try:  # a whole valid record (the usual case) costs one validation
        return model.model_validate_json(canonical_json_bytes(doc)), []
    except (ValidationError, ValueError, RecursionError):
        pass
    # a value JSON cannot carry (NaN) or the validator cannot parse (nested too deep) is left out first
    work: dict[str, Any] = {}
    dropped: list[str] = []
    for key, value in doc.items():
        if _readable(value):
            work[key] = value
        elif isinstance(value, list):
            work[key] = [v for v in value if _readable(v)]
            dropped += [f"{key}.{i}" for i, v in enumerate(value) if not _readable(v)]
        else:
            dropped.append(str(key))
    for _ in range(rounds):
        try:
            return model.model_validate_json(canonical_json_bytes(work)), dropped
        except (ValidationError, ValueError) as exc:
            errors = exc.errors() if isinstance(exc, ValidationError) else []
            locs = [tuple(e.get("loc") or ()) for e in errors]
            locs = [loc for loc in locs if loc and isinstance(loc[0], str) and loc[0] in work]
            if not locs:
                return None, [*dropped, "(the whole record)"]
            # one part per field, list element or mapping entry (a log with three bad values is one part);
            # list elements first, from the highest index, so earlier indexes stay right
            parts = {loc[:2] if len(loc) > 1 and isinstance(loc[1], (int, str)) else loc[:1] for loc in locs}
            for loc in sorted(parts, key=lambda loc: -(loc[1] if len(loc) > 1 and isinstance(loc[1], int) else -1)):
                key = str(loc[0])
                value = work.get(key)
                if len(loc) > 1 and isinstance(loc[1], int) and isinstance(value, list) and loc[1] < len(value):
                    work[key] = value[: loc[1]] + value[loc[1] + 1 :]
                    dropped.append(f"{key}.{loc[1]}")
                elif len(loc) > 1 and isinstance(loc[1], str) and isinstance(value, dict) and loc[1] in value:
                    work[key] = {k: v for k, v in value.items() if k != loc[1]}
                    dropped.append(f"{key}.{loc[1]}")
                elif key in work:
                    del work[key]
                    dropped.append(key)
    return None, [*dropped, "(the whole record)"]


def _readable(value: Any) -> bool:
    """Whether `value` can be written as JSON and parsed back by the validator (no NaN, not nested too deep)."""
    try:
        from_json(canonical_json_bytes(value))
    except (ValueError, RecursionError):
        return False
    return True


def _replace_with(new: dict[str, Any]) -> Callable[[MutableMapping[Any, Any]], None]:
    """A TinyDB update that replaces a document's fields (keys it no longer has are dropped)."""

    def replace(doc: MutableMapping[Any, Any]) -> None:
        doc.clear()
        doc.update(new)

    return replace


class Tables:
    """The site list and the program settings of one data folder."""

    def __init__(
        self,
        data_dir: Path,
        quarantine: Callable[[Path, str], Path],
        keep_copy: Callable[[str, bytes, str], Path] | None = None,
    ):
        self.sites_path = Path(data_dir) / "sites.json"
        self.settings_path = Path(data_dir) / "settings.json"
        self._quarantine = quarantine
        # keep_copy(name, data, reason): a copy of a stored record that could be read only in part
        # is set aside before anything could overwrite it (the store passes its quarantine folder)
        self._keep_copy = keep_copy
        #: Parts of the stored settings and sites left out as invalid on the last read, by record.
        self.left_out: dict[str, list[str]] = {}
        self._sites_cache: tuple[Stamp, dict[str, Site]] | None = None
        self._settings_cache: tuple[Stamp, ProgramSettings] | None = None

    def basis_key(self) -> tuple[Stamp | None, Stamp | None]:
        """The versions of the two files last read (what derived values were computed with)."""
        return (
            self._sites_cache[0] if self._sites_cache else None,
            self._settings_cache[0] if self._settings_cache else None,
        )

    def _read_table(self, name: str, path: Path) -> dict[str, Any]:
        try:
            data = AtomicJSONStorage(path).read()
        except ValueError as exc:
            target = self._quarantine(path, str(exc))
            raise CorruptFile(
                f"The file {path.name} could not be read ({exc}); it was moved to {target}.", target
            ) from None
        return (data or {}).get(name, {}) or {}

    # -- sites -------------------------------------------------------------------------------
    def sites_by_id(self) -> dict[str, Site]:
        stamp = _stamp(self.sites_path)
        if self._sites_cache is not None and self._sites_cache[0] == stamp:
            return dict(self._sites_cache[1])
        try:
            table = self._read_table("sites", self.sites_path)
        except CorruptFile:
            table = {}
        sites: dict[str, Site] = {}
        for what in [w for w in self.left_out if w.startswith("site ")]:  # as this read finds them
            del self.left_out[what]
        for doc in table.values():
            site, dropped = salvage(Site, doc)
            if dropped:
                name = doc.get("id", "?") if isinstance(doc, dict) else "?"
                self._set_aside(f"site {name}", "sites.json", doc, dropped)
            if site is not None:
                sites[site.id] = site
        self._sites_cache = (stamp, sites)
        return dict(sites)

    def _set_aside(self, what: str, file: str, doc: Any, dropped: list[str]) -> None:
        """Notes the parts left out of a stored record and keeps a copy of the whole record (once per
        content: the copy's name carries its hash), so a later save cannot lose what was there."""
        self.left_out[what] = dropped
        if self._keep_copy is None:
            return
        try:
            data = canonical_json_bytes(doc)
        except ValueError:  # not JSON we can write back (e.g. NaN): keep its text as it reads
            data = repr(doc).encode("utf-8")
        digest = hashlib.sha256(data).hexdigest()[:12]
        reason = (
            f"{what} in {file}: left out as not valid on reading: {', '.join(dropped)}; this is the whole"
            " record as it was stored."
        )
        try:
            self._keep_copy(f"{file}.{digest}.partly-read", data, reason)
        except OSError:
            pass  # the record is still in its file; a later read tries again

    def write_sites(self, checked: list[Site]) -> None:
        """Adds or replaces sites by id in one atomic write (lock held by the caller)."""
        # TinyDB's write cache gathers every insert and update; one flush writes the file once
        # (all or nothing).
        cached = CachingMiddleware(AtomicJSONStorage)
        cached.WRITE_CACHE_SIZE = 1 << 30
        db = TinyDB(self.sites_path, storage=cached)
        table = db.table("sites")
        by_site = {doc.get("id"): doc.doc_id for doc in table.all()}
        try:
            for site in checked:
                doc = site.model_dump(mode="json")
                key = by_site.get(site.id)
                if key is None:
                    by_site[site.id] = table.insert(doc)
                else:
                    table.update(_replace_with(doc), doc_ids=[key])
            cached.flush()
        except OSError as exc:
            raise StoreWriteError(
                f"Could not write sites.json ({exc.strerror or exc}); the site list is unchanged."
            ) from None
        finally:
            self._sites_cache = None

    # -- settings ----------------------------------------------------------------------------
    def settings(self) -> ProgramSettings:
        stamp = _stamp(self.settings_path)
        if self._settings_cache is not None and self._settings_cache[0] == stamp:
            return self._settings_cache[1]
        try:
            table = self._read_table("settings", self.settings_path)
        except CorruptFile:
            table = {}
        doc = table.get("1")
        settings = ProgramSettings()
        self.left_out.pop("settings", None)  # as this read finds it
        if doc is not None:
            version = doc.get("schema_version", 0) if isinstance(doc, dict) else 0
            if isinstance(version, int) and not isinstance(version, bool) and version > SCHEMA_VERSION:
                raise NewerSchemaError(
                    "The settings were saved by a newer streamtab; update this one.", doc.get("schema_version")
                )
            salvaged, dropped = salvage(ProgramSettings, doc)
            if dropped:
                self._set_aside("settings", "settings.json", doc, dropped)
            settings = salvaged if salvaged is not None else ProgramSettings()
        self._settings_cache = (stamp, settings)
        return settings

    def write_settings(self, checked: ProgramSettings) -> None:
        """Replaces the program settings (lock held by the caller)."""
        try:
            open_tinydb(self.settings_path).table("settings").upsert(
                Document(checked.model_dump(mode="json"), doc_id=1)
            )
        except OSError as exc:
            raise StoreWriteError(
                f"Could not write settings.json ({exc.strerror or exc}); the settings are unchanged."
            ) from None
        finally:
            self._settings_cache = None
