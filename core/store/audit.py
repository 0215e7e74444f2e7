"""The audit trail of a trip: what a save changed (path, old and new value), and the append-only merge of entries."""

from __future__ import annotations

import json
from typing import Any

from core.records.models import AUDIT_VALUE_BYTES, INPUT, RoleNode, role_tree

__all__ = ["diff_changes", "diff_paths", "merge_audit"]


def _bounded(value: Any) -> tuple[Any, bool]:
    """The value as the audit keeps it: whole when small, else the start of its JSON text."""
    text = json.dumps(value, sort_keys=True, ensure_ascii=False, separators=(",", ":"))
    if len(text.encode("utf-8")) <= AUDIT_VALUE_BYTES:
        return value, False
    cut = text.encode("utf-8")[:AUDIT_VALUE_BYTES].decode("utf-8", "ignore")
    return cut + "…", True


def diff_changes(old: Any, new: Any, prefix: str = "", limit: int = 25) -> list[dict[str, Any]]:
    """The input fields that differ between two documents, each as ``{"path", "old", "new"}``
    (plus ``"truncated": True`` when a value was too long to keep whole); list elements are
    matched by `id`.

    Paths look like ``stops[<id>].temp``; only input fields are compared (derived values,
    bookkeeping and the audit log follow from the inputs or from the save itself; roles as
    declared in core.records.models). An element added or removed is one change (old or new
    is None). At most `limit` changes.
    """
    out: list[dict[str, Any]] = []

    def record(path: str, a: Any, b: Any) -> None:
        old_v, cut_a = _bounded(a)
        new_v, cut_b = _bounded(b)
        entry: dict[str, Any] = {"path": path or "(document)", "old": old_v, "new": new_v}
        if cut_a or cut_b:
            entry["truncated"] = True
        out.append(entry)

    def walk(a: Any, b: Any, path: str, node: RoleNode) -> None:
        if len(out) >= limit or a == b:
            return
        if isinstance(a, dict) and isinstance(b, dict) and ("id" in a or "id" in b or not path):
            # Records (with an id) are walked field by field; values such as a quantity are
            # reported as one path ("stops[<id>].temp"), which keeps audit entries short.
            for key in sorted(set(a) | set(b)):
                if node.role(key) != INPUT:
                    continue
                walk(a.get(key), b.get(key), f"{path}.{key}" if path else key, node.child(key))
            return
        if isinstance(a, list) and isinstance(b, list) and all(isinstance(x, dict) and "id" in x for x in a + b):
            old_by = {x["id"]: x for x in a}
            new_by = {x["id"]: x for x in b}
            for key in list(old_by) + [k for k in new_by if k not in old_by]:
                walk(old_by.get(key), new_by.get(key), f"{path}[{key}]", node)
            return
        record(path, a, b)

    walk(old, new, prefix, role_tree())
    return out


def diff_paths(old: Any, new: Any, prefix: str = "", limit: int = 25) -> list[str]:
    """The paths of :func:`diff_changes` (e.g. ``stops[<id>].temp``), at most `limit`."""
    return [c["path"] for c in diff_changes(old, new, prefix, limit)]


def merge_audit(stored: list[dict[str, Any]], incoming: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Stored entries in their order, then incoming entries not yet stored (by id), oldest first."""
    known = {e.get("id") for e in stored}
    extra = [e for e in incoming if e.get("id") not in known]
    if not extra:
        return list(stored)
    extra.sort(key=lambda e: (str(e.get("at", "")), str(e.get("id", ""))))
    return list(stored) + extra
