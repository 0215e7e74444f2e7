"""The audit trail of a trip: which field paths a save changed, and the append-only merge of entries."""
from __future__ import annotations

from typing import Any

from core.records.models import INPUT, RoleNode, role_tree

__all__ = ["diff_paths", "merge_audit"]


def diff_paths(old: Any, new: Any, prefix: str = "", limit: int = 25) -> list[str]:
    """Field paths that differ between two documents; list elements are matched by `id`.

    Paths look like ``stops[<id>].temp``; only input fields are compared (derived values,
    bookkeeping and the audit log follow from the inputs or from the save itself; roles as
    declared in core.records.models). At most `limit` paths.
    """
    out: list[str] = []

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
        if (isinstance(a, list) and isinstance(b, list)
                and all(isinstance(x, dict) and "id" in x for x in a + b)):
            old_by = {x["id"]: x for x in a}
            new_by = {x["id"]: x for x in b}
            for key in list(old_by) + [k for k in new_by if k not in old_by]:
                walk(old_by.get(key), new_by.get(key), f"{path}[{key}]", node)
            return
        out.append(path or "(document)")

    walk(old, new, prefix, role_tree())
    return out


def merge_audit(stored: list[dict[str, Any]], incoming: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Stored entries in their order, then incoming entries not yet stored (by id), oldest first."""
    known = {e.get("id") for e in stored}
    extra = [e for e in incoming if e.get("id") not in known]
    if not extra:
        return list(stored)
    extra.sort(key=lambda e: (str(e.get("at", "")), str(e.get("id", ""))))
    return list(stored) + extra
