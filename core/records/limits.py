"""Limits on trip documents that come from outside the device (hub files, imported trip files).

A document is refused whole, in one line naming the field, when it breaks one of these; nothing is
stored. They sit far above any real trip (the largest sample trip is 8 levels deep, 3 stops,
2 crew names) and far below what would cost a tablet hundreds of MB of memory or a
RecursionError:

================================  ==========================================================
limit                             value
================================  ==========================================================
whole document                    `MAX_DOCUMENT_BYTES` = 8 MiB (hub files: the session's
                                  ``max_document_bytes``, this by default)
nesting depth (objects, lists)    `MAX_DEPTH` = 64 levels
one text value (notes included)   `MAX_TEXT_CHARS` = 100,000 characters
keys of one object                `MAX_KEYS` = 1,000
entries of a list, by its key     `LIST_LIMITS` (crew 100, stops 1,000, bottles 500, lab
                                  results 500, calibrations 200, conflicts 10,000, audit 100,000)
any other list                    `MAX_ITEMS` = 10,000
================================  ==========================================================
"""

from __future__ import annotations

import json
from typing import Any

__all__ = [
    "MAX_DOCUMENT_BYTES",
    "MAX_DEPTH",
    "MAX_TEXT_CHARS",
    "MAX_KEYS",
    "MAX_ITEMS",
    "LIST_LIMITS",
    "LimitError",
    "check_document_limits",
    "loads_limited",
]

MAX_DOCUMENT_BYTES = 8 * 1024 * 1024
MAX_DEPTH = 64
MAX_TEXT_CHARS = 100_000
MAX_KEYS = 1_000
MAX_ITEMS = 10_000
#: Entries allowed in a list, by the key the list sits under (wherever it is in the document).
LIST_LIMITS: dict[str, int] = {
    "crew": 100,
    "stops": 1_000,
    "bottles": 500,
    "lab_results": 500,
    "calibrations": 200,
    "conflicts": 10_000,
    "audit": 100_000,
}
_WHAT = {
    "crew": "crew names",
    "stops": "stops",
    "bottles": "bottles",
    "lab_results": "lab results",
    "calibrations": "calibrations",
    "conflicts": "conflict entries",
    "audit": "audit entries",
}


class LimitError(ValueError):
    """A document breaks one of the limits above; the message is one sentence naming the field."""


def _where(path: tuple[Any, ...]) -> str:
    out = ""
    for part in path:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "the document"


def check_document_limits(doc: Any) -> None:
    """Raises `LimitError` when `doc` (parsed JSON) breaks a limit; walks it without recursion."""
    stack: list[tuple[Any, tuple[Any, ...], int]] = [(doc, (), 1)]
    while stack:
        value, path, depth = stack.pop()
        if isinstance(value, str):
            if len(value) > MAX_TEXT_CHARS:
                raise LimitError(
                    f"{_where(path)} holds {len(value):,} characters; at most "
                    f"{MAX_TEXT_CHARS:,} are accepted in one field"
                )
            continue
        if not isinstance(value, (dict, list)):
            continue
        if depth > MAX_DEPTH:
            raise LimitError(
                f"{_where(path)} is nested more than {MAX_DEPTH} levels deep; a trip document is never that deep"
            )
        if isinstance(value, dict):
            if len(value) > MAX_KEYS:
                raise LimitError(f"{_where(path)} has {len(value):,} fields; at most {MAX_KEYS:,} are accepted")
            for k, v in value.items():
                if isinstance(k, str) and len(k) > MAX_TEXT_CHARS:
                    raise LimitError(f"a field name in {_where(path)} is {len(k):,} characters long")
                stack.append((v, path + (k,), depth + 1))
        else:
            key = next((p for p in reversed(path) if isinstance(p, str)), "")
            limit = LIST_LIMITS.get(key, MAX_ITEMS) if path and isinstance(path[-1], str) else MAX_ITEMS
            if len(value) > limit:
                what = _WHAT.get(key, "entries") if limit != MAX_ITEMS else "entries"
                raise LimitError(f"{_where(path)} lists {len(value):,} {what}; at most {limit:,} are accepted")
            stack.extend((v, path + (i,), depth + 1) for i, v in enumerate(value))


def _refuse_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a number JSON allows")


def loads_limited(text: str | bytes) -> Any:
    """`json.loads` that refuses NaN/Infinity (ValueError) and, instead of a RecursionError,
    raises `LimitError` for a document nested too deep; then `check_document_limits`.
    JSON syntax errors stay `json.JSONDecodeError`."""
    try:
        doc = json.loads(text, parse_constant=_refuse_constant)
    except RecursionError:
        raise LimitError(
            f"the document is nested more than {MAX_DEPTH} levels deep; a trip document is never that deep"
        ) from None
    check_document_limits(doc)
    return doc
