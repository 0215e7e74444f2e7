"""Names at the hub: where each trip revision lives, built from trip UUIDs and content hashes only.

Hub layout (the same in a folder and on a WebDAV collection)::

    <hub>/trips/<YYYY>/<trip-uuid>/r<revision:06>-<sha256 first 24 hex>.json   immutable revisions
    <hub>/incoming/<device key>/<trip-uuid>.<nonce>.part                       uploads in flight
    <hub>/incoming/<device key>/<sites|settings>.<nonce>.part                  (and of program tables)
    <hub>/log/<device key>/e<seq:08>-<sha256 first 24 hex>.json                the change log

`YYYY` is the year of the trip's ``started_at`` as the crew wrote it (kept from the first push,
so a trip never moves). A revision file is written once and never changed: its name says which
content it must hold, so a reader checks the bytes against the name on every read.
"""

from __future__ import annotations

import hashlib
import re
import uuid

from sync.program import KINDS as PROGRAM_KINDS

__all__ = [
    "TRIPS",
    "INCOMING",
    "LOG",
    "revision_name",
    "parse_revision_name",
    "trip_dir",
    "trip_year",
    "canonical_trip_id",
    "device_key",
    "incoming_name",
    "HASH_HEX",
    "name_matches",
    "odd_entry",
    "shown_name",
    "is_incoming_name",
    "is_hidden_name",
    "YEAR_RE",
]

TRIPS = "trips"
INCOMING = "incoming"
LOG = "log"  # the change log (sync.changelog)
HASH_HEX = 24
_NAME_RE = re.compile(rf"^r(\d{{6,}})-([0-9a-f]{{{HASH_HEX}}})\.json$")
#: A year folder: the trip's four-digit start year, or "undated".
YEAR_RE = re.compile(r"\d{4}|undated")
_INCOMING_RE = re.compile(
    r"(?:[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}|"
    + "|".join(PROGRAM_KINDS)
    + r")\.[0-9a-f]{12}\.part"
)


def canonical_trip_id(trip_id: str) -> str:
    """The trip's UUID in its canonical lower-case form; ValueError for anything else."""
    try:
        return str(uuid.UUID(str(trip_id)))
    except (ValueError, AttributeError, TypeError):
        raise ValueError(f"trip id {trip_id!r} is not a UUID; hub names are built from UUIDs only") from None


def _hex(content_hash: str) -> str:
    h = content_hash.split(":", 1)[-1].lower()
    if not re.fullmatch(r"[0-9a-f]{64}", h):
        raise ValueError(f"content hash {content_hash!r} is not a sha256 hex digest")
    return h


def revision_name(revision: int, content_hash: str) -> str:
    """File name of one trip revision, e.g. ``r000007-3f2a....json``."""
    if not isinstance(revision, int) or revision < 0:
        raise ValueError(f"revision {revision!r} must be a whole number ≥ 0")
    return f"r{revision:06d}-{_hex(content_hash)[:HASH_HEX]}.json"


def parse_revision_name(name: str) -> tuple[int, str] | None:
    """(revision, hash prefix) of a revision file name, or None for any other name."""
    m = _NAME_RE.match(name)
    return (int(m.group(1)), m.group(2)) if m else None


def name_matches(name: str, data: bytes) -> bool:
    """True when `data` hashes to the prefix carried in the revision file name."""
    parsed = parse_revision_name(name)
    return parsed is not None and hashlib.sha256(data).hexdigest()[:HASH_HEX] == parsed[1]


def trip_year(doc: dict) -> str:
    for key in ("started_at", "updated_at"):
        v = doc.get(key)
        if isinstance(v, str) and re.match(r"^\d{4}-", v):
            return v[:4]
    return "undated"


def trip_dir(year: str, trip_id: str) -> str:
    """Relative path of a trip's collection, with a trailing slash."""
    if not YEAR_RE.fullmatch(year):
        raise ValueError(f"year folder {year!r} must be four digits or 'undated'")
    return f"{TRIPS}/{year}/{canonical_trip_id(trip_id)}/"


def device_key(device_id: str) -> str:
    """A file-name-safe stand-in for a device id (which a person may have typed)."""
    return hashlib.sha256(str(device_id).encode("utf-8")).hexdigest()[:12]


def incoming_name(device_id: str, what: str) -> str:
    """A fresh temporary upload path for a trip revision (`what` is the trip id) or a program
    table (`what` is its kind, ``sites`` or ``settings``); a new nonce per attempt, so a late,
    cut upload of an earlier attempt can never be moved into place by a later one."""
    stem = what if what in PROGRAM_KINDS else canonical_trip_id(what)
    return f"{INCOMING}/{device_key(device_id)}/{stem}.{uuid.uuid4().hex[:12]}.part"


def is_incoming_name(name: str) -> bool:
    """True for an upload file name made by `incoming_name` (``<trip uuid>.<nonce>.part`` or
    ``<sites|settings>.<nonce>.part``)."""
    return bool(_INCOMING_RE.fullmatch(name))


def shown_name(name: str, limit: int = 80) -> str:
    """A hub entry's name as it can be shown in one line (control characters as '?', shortened)."""
    text = "".join(c if c.isprintable() else "?" for c in name)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def is_hidden_name(name: str) -> bool:
    """True for a hidden name (``.DS_Store``, ``._r000001-….json``, ``.Trash``) that file managers
    and shares leave beside files: never part of the hub layout, and passed over without a report.
    ``.`` and ``..`` are not hidden names: an entry named so is reported like any odd entry."""
    return name.startswith(".") and name not in (".", "..")


def odd_entry(parts: tuple[str, ...], is_folder: bool) -> str | None:
    """Why an entry under ``trips/`` does not fit the hub layout (None when it fits).

    `parts` is its path below the hub, starting with ``trips``. Callers report an odd entry once
    and skip what lies under it; the rest of the hub is read as usual.
    """
    depth = len(parts)
    if depth < 2 or parts[0] != TRIPS:
        return None
    if not YEAR_RE.fullmatch(parts[1]):
        return "not a year folder (four digits or 'undated')"
    if depth == 2:
        return None if is_folder else "a file where year folders belong"
    tid = parts[2]
    try:
        canonical = canonical_trip_id(tid)
    except ValueError:
        return "not a trip folder (its name is not a trip id)"
    if canonical != tid:
        return f"a trip folder whose name is not in sync's lower-case form (rename it to {canonical})"
    if depth == 3:
        return None if is_folder else "a file where trip folders belong"
    if depth == 4 and not is_folder:
        return None if parse_revision_name(parts[3]) else "not a revision file (r<revision>-<hash>.json)"
    return "a folder inside a trip folder" if depth == 4 else "below the hub layout"
