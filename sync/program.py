"""The program's shared tables at the hub — the site list and the program settings — as pure data:
their file names, their bytes, and how an incoming copy merges with the device's.

Hub layout (beside ``trips/``; the same in a folder and on a WebDAV collection)::

    <hub>/program/sites/<first 24 hex of sha256>.json      one published site list (immutable)
    <hub>/program/settings/<first 24 hex of sha256>.json   one published settings document

A file is written once and never changed; its name is the hash of its bytes, so a reader checks
them on every read, and two devices that hold the same table publish the same name (nothing new).
A sites file is ``{"kind": "streamtab.sites", "sites": [<Site JSON>, ... by id]}``, a settings file
``{"kind": "streamtab.settings", "settings": <ProgramSettings JSON>}``.

Merging keeps, per site id, the entry with the later ``updated_at`` (the store stamps it when a
site changes); an entry without a stamp loses to one with it; equal stamps are settled by the
canonical bytes, so every device picks the same entry whatever the order (commutative,
associative, idempotent). Settings merge the same way as one entry. Nothing is ever deleted.
No I/O here: the engine lists, reads, writes and saves.
"""

from __future__ import annotations

import hashlib
import json
import re
from collections.abc import Iterable, Mapping
from datetime import datetime
from typing import Any

from core.store.atomic import canonical_json_bytes

__all__ = [
    "PROGRAM",
    "KINDS",
    "program_dir",
    "program_name",
    "name_matches",
    "is_program_name",
    "sites_bytes",
    "settings_bytes",
    "parse_program_file",
    "newer",
    "merge_sites",
    "merge_settings",
]

PROGRAM = "program"
KINDS = ("sites", "settings")
_HASH_HEX = 24
_NAME_RE = re.compile(rf"^[0-9a-f]{{{_HASH_HEX}}}\.json$")
_KIND_TAG = {"sites": "streamtab.sites", "settings": "streamtab.settings"}


def program_dir(kind: str) -> str:
    """Relative path of one table's folder at the hub, with a trailing slash."""
    if kind not in KINDS:
        raise ValueError(f"program table {kind!r} is not one of {', '.join(KINDS)}")
    return f"{PROGRAM}/{kind}/"


def program_name(data: bytes) -> str:
    """The file name of a published table: the first 24 hex digits of its sha256."""
    return hashlib.sha256(data).hexdigest()[:_HASH_HEX] + ".json"


def is_program_name(name: str) -> bool:
    return bool(_NAME_RE.match(name))


def name_matches(name: str, data: bytes) -> bool:
    return is_program_name(name) and program_name(data) == name


def sites_bytes(sites: Iterable[Mapping[str, Any]]) -> bytes:
    """The published form of a site list (JSON objects of core.records.models.Site), by id."""
    rows = sorted((dict(s) for s in sites), key=lambda s: str(s.get("id")))
    return canonical_json_bytes({"kind": _KIND_TAG["sites"], "sites": rows})


def settings_bytes(settings: Mapping[str, Any]) -> bytes:
    """The published form of the program settings (JSON of core.records.models.ProgramSettings)."""
    return canonical_json_bytes({"kind": _KIND_TAG["settings"], "settings": dict(settings)})


def parse_program_file(kind: str, data: bytes) -> list[dict] | dict:
    """The site entries (a list of dicts) or the settings (a dict) in a published file.

    Raises ValueError with a readable reason when the bytes are not such a file.
    """
    try:
        doc = json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        raise ValueError(f"the {kind} file is not valid JSON") from None
    if not isinstance(doc, dict) or doc.get("kind") != _KIND_TAG[kind]:
        raise ValueError(f"the {kind} file does not say it holds {kind}")
    body = doc.get(kind)
    if kind == "sites":
        if not isinstance(body, list) or not all(isinstance(s, dict) and isinstance(s.get("id"), str) for s in body):
            raise ValueError("the sites file does not hold a list of sites with ids")
        return [dict(s) for s in body]
    if not isinstance(body, dict):
        raise ValueError("the settings file does not hold a settings object")
    return dict(body)


def _stamp(entry: Mapping[str, Any]) -> tuple[int, datetime | None]:
    raw = entry.get("updated_at")
    if isinstance(raw, str):
        try:
            at = datetime.fromisoformat(raw.replace("Z", "+00:00"))
            if at.tzinfo is not None:
                return (1, at)
        except ValueError:
            pass
    return (0, None)


def newer(a: Mapping[str, Any], b: Mapping[str, Any]) -> Mapping[str, Any]:
    """The entry that wins of two versions of one site (or of the settings): the later
    ``updated_at``; without one, the other; equal, the greater canonical bytes."""
    sa, sb = _stamp(a), _stamp(b)
    if sa[0] != sb[0]:
        return a if sa[0] > sb[0] else b
    if sa[1] is not None and sb[1] is not None and sa[1] != sb[1]:
        return a if sa[1] > sb[1] else b
    return a if canonical_json_bytes(a) >= canonical_json_bytes(b) else b


def merge_sites(local: Mapping[str, Mapping[str, Any]], incoming: Iterable[Mapping[str, Any]]) -> dict[str, dict]:
    """Site id → the entry to keep, given the device's sites (by id) and incoming entries."""
    out = {sid: dict(s) for sid, s in local.items()}
    for entry in incoming:
        sid = entry.get("id")
        if not isinstance(sid, str):
            continue
        out[sid] = dict(entry if sid not in out else newer(out[sid], entry))
    return out


def merge_settings(local: Mapping[str, Any] | None, incoming: Iterable[Mapping[str, Any]]) -> dict | None:
    """The settings to keep, given the device's (None: never saved) and incoming ones."""
    best = None if local is None else dict(local)
    for entry in incoming:
        best = dict(entry) if best is None else dict(newer(best, entry))
    return best
