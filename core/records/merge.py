"""Pure three-way merging of trip JSON documents: elements of lists merge by `id`, clashes become `conflicts`.

No I/O, no clock. ``merge_trips(base, a, b)`` is a three-way merge when the common ancestor
`base` is known and a two-way one (``base=None``) when it is not. It gives the same document
whichever side is passed first: every tie is broken by a rule that looks at both sides alike
(the side whose ``updated_at``, then content hash, is greater is "preferred").

Rules, applied at every level of the document:

* equal on both sides → that value; changed on one side only (the other equals `base`) → the
  change; a dict on both sides → key by key; a list whose elements all carry an ``id`` → element
  by element, matched by ``id`` (stops, bottles, calibrations, lab results, audit entries,
  conflicts), in the preferred side's order, then the other side's new elements;
* an element or key removed on one side and untouched on the other is removed; removed on one
  side and changed on the other is kept (field data is never dropped) and reported;
* changed differently on both sides → the preferred side's value is kept, both values are
  recorded in a new entry of the trip's ``conflicts`` list, and the trip needs attention;
* bookkeeping fields are not conflicts: ``revision`` and ``updated_at`` take the larger value,
  ``device_id`` the preferred side's, ``audit`` is the union ordered by time, and values the
  store derives again on save follow the preferred side. Which field is input, derived,
  bookkeeping or log is read from the roles declared on the models (core.records.models).

Ancestry comes from the audit trail the store appends on every save: a document whose audit ids
are a subset of another's is its ancestor (see `relation`).
"""
from __future__ import annotations

import json
import uuid
from dataclasses import dataclass, field
from typing import Any
from collections.abc import Iterable

from core.records.models import BOOKKEEPING, DERIVED, LOG, RoleNode, keys_by_role, role_tree
from core.store.atomic import content_hash

__all__ = [
    "MergeResult", "merge_trips", "relation", "history", "common_ancestor",
    "describe_conflict", "CONFLICT_NAMESPACE",
]


def _outside_generic_rules() -> frozenset[str]:
    """Top-level keys merged by their own rules: bookkeeping, the audit log, and the conflicts
    list (this merge's own output)."""
    return keys_by_role(BOOKKEEPING, LOG) | {"conflicts"}

#: uuid5 namespace for conflict ids, so the same clash found twice gets the same id.
CONFLICT_NAMESPACE = uuid.UUID("6f1c3f52-2a4e-4d35-9a43-3c1f0e5b7d21")
_TIME_KEYS = ("at", "when", "timestamp", "time", "created_at", "recorded_at")
_HINT_KEYS = ("label", "site_id", "site", "name", "kind")


class _Sentinel:
    def __init__(self, name: str) -> None:
        self.name = name

    def __repr__(self) -> str:  # pragma: no cover - debugging aid
        return self.name


MISSING = _Sentinel("MISSING")   # the key or element is absent on that side
UNKNOWN = _Sentinel("UNKNOWN")   # no common ancestor is known (two-way merge)


@dataclass
class MergeResult:
    """The merged document and the conflicts found in this merge (already inside ``doc``)."""

    doc: dict
    new_conflicts: list[dict] = field(default_factory=list)

    @property
    def needs_attention(self) -> bool:
        return bool(self.doc.get("conflicts"))


def _canon(value: Any) -> str:
    return json.dumps(value, sort_keys=True, ensure_ascii=False, separators=(",", ":"))


def _eq(x: Any, y: Any) -> bool:
    if isinstance(x, _Sentinel) or isinstance(y, _Sentinel):
        return x is y
    if type(x) is not type(y) and not (isinstance(x, (int, float)) and isinstance(y, (int, float))
                                       and not isinstance(x, bool) and not isinstance(y, bool)):
        return False
    return _canon(x) == _canon(y)


def _is_id_list(value: Any) -> bool:
    return isinstance(value, list) and all(
        isinstance(e, dict) and isinstance(e.get("id"), str) for e in value)


def _atomic(value: dict) -> bool:
    """A typed quantity (text as typed, number, unit) changes as one value, never part by part."""
    return {"text", "value", "unit"} <= value.keys()


def _hint(elem: Any) -> str:
    for key in _HINT_KEYS:
        v = elem.get(key)
        if isinstance(v, str) and v:
            return f"{v} {elem['id'][:8]}"
    return elem["id"][:8]


class _Merger:
    def __init__(self, a: dict, b: dict, pref_a: bool) -> None:
        self.a, self.b, self.pref_a = a, b, pref_a
        self.conflicts: list[dict] = []

    def value(self, path: str, base: Any, va: Any, vb: Any, *, derived: bool = False,
              node: RoleNode | None = None) -> Any:
        node = node or role_tree()
        if _eq(va, vb):
            return va
        if base is not UNKNOWN:
            if _eq(va, base):
                return vb
            if _eq(vb, base):
                return va
        if va is MISSING and base is UNKNOWN:
            return vb
        if vb is MISSING and base is UNKNOWN:
            return va
        if isinstance(va, dict) and isinstance(vb, dict) and not (_atomic(va) or _atomic(vb)):
            sub_base = base if isinstance(base, dict) else (UNKNOWN if base is UNKNOWN else {})
            return self.mapping(path, sub_base, va, vb, derived=derived, node=node)
        if _is_id_list(va) and _is_id_list(vb):
            return self.id_list(path, base, va, vb, derived=derived, node=node)
        kept = (va if self.pref_a else vb)
        if kept is MISSING:
            kept = vb if kept is va else va
        if not derived:
            self._record(path, base, va, vb, kept)
        return kept

    def mapping(self, path: str, base: Any, a: dict, b: dict, *, derived: bool = False,
                skip: Iterable[str] = (), node: RoleNode | None = None) -> dict:
        node = node or role_tree()
        out: dict = {}
        skip = set(skip)
        for key in sorted(set(a) | set(b)):
            if key in skip:
                continue
            vbase = UNKNOWN if base is UNKNOWN else base.get(key, MISSING)
            sub = f"{path}.{key}" if path else key
            r = self.value(sub, vbase, a.get(key, MISSING), b.get(key, MISSING),
                           derived=derived or node.role(key) == DERIVED, node=node.child(key))
            if r is not MISSING:
                out[key] = r
        return out

    def id_list(self, path: str, base: Any, a: list, b: list, *, derived: bool = False,
                node: RoleNode | None = None) -> list:
        amap: dict[str, dict] = {}
        for e in a:
            amap.setdefault(e["id"], e)
        bmap: dict[str, dict] = {}
        for e in b:
            bmap.setdefault(e["id"], e)
        if base is UNKNOWN:
            basemap: dict | None = None
        else:
            basemap = {}
            if _is_id_list(base):
                for e in base:
                    basemap.setdefault(e["id"], e)
        first, second = (a, b) if self.pref_a else (b, a)
        ids: list[str] = []
        seen: set[str] = set()
        for e in list(first) + list(second):
            if e["id"] not in seen:
                seen.add(e["id"])
                ids.append(e["id"])
        out = []
        for eid in ids:
            ea, eb = amap.get(eid, MISSING), bmap.get(eid, MISSING)
            pa, pb = (ea, eb) if self.pref_a else (eb, ea)
            any_elem = pa if pa is not MISSING else pb
            ebase = UNKNOWN if basemap is None else basemap.get(eid, MISSING)
            r = self.value(f"{path}[{_hint(any_elem)}]", ebase, ea, eb, derived=derived, node=node)
            if r is not MISSING:
                out.append(r)
        return out

    def _side(self, doc: dict, value: Any) -> dict:
        # the device of the side's latest save (the trip's own device_id names where it began)
        audit = [e for e in doc.get("audit") or [] if isinstance(e, dict)]
        last = max(audit, key=lambda e: (_time_key(e), str(e.get("id")))) if audit else {}
        device = last.get("device_id") or doc.get("device_id") or ""
        entry = {"device_id": str(device), "revision": doc.get("revision"),
                 "updated_at": doc.get("updated_at")}
        if value is MISSING:
            entry["removed"] = True
            entry["value"] = None
        else:
            entry["value"] = value
        return entry

    def _record(self, path: str, base: Any, va: Any, vb: Any, kept: Any) -> None:
        sides = sorted([self._side(self.a, va), self._side(self.b, vb)], key=_canon)
        trip_id = str(self.a.get("id"))
        values = sorted([_canon(None if va is MISSING else va), _canon(None if vb is MISSING else vb)])
        cid = str(uuid.uuid5(CONFLICT_NAMESPACE, trip_id + "\n" + path + "\n" + "\n".join(values)))
        detected = _max(self.a.get("updated_at"), self.b.get("updated_at")) or "1970-01-01T00:00:00Z"
        entry = {
            "id": cid,
            "path": path,
            "sides": sides,
            "detected_at": detected,
            "resolved_at": None,
            "resolved_by": None,
            "resolution": None,
            "base": None if isinstance(base, _Sentinel) else base,
            "kept": kept,
        }
        entry["message"] = describe_conflict(entry)
        self.conflicts.append(entry)


def _fmt(value: Any) -> str:
    if isinstance(value, dict) and isinstance(value.get("text"), str):
        return repr(value["text"])
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, (dict, list)):
        text = _canon(value)
        return text if len(text) <= 60 else text[:57] + "..."
    return _canon(value)


def describe_conflict(conflict: dict) -> str:
    """One readable line for a conflict entry, e.g. for the CLI or the app's sync view."""
    parts = []
    for side in conflict.get("sides") or conflict.get("values") or []:
        dev = side.get("device_id") or "another device"
        what = "removed it" if side.get("removed") else f"set {_fmt(side.get('value'))}"
        parts.append(f"device {dev} {what}")
    return f"{conflict.get('path')}: " + " and ".join(parts) + f"; kept {_fmt(conflict.get('kept'))}"


def _time_key(entry: dict) -> str:
    for key in _TIME_KEYS:
        v = entry.get(key)
        if isinstance(v, str):
            return v
    return ""


def _pref_key(doc: dict) -> tuple[str, str]:
    return (str(doc.get("updated_at") or ""), content_hash(doc))


def _max(x: Any, y: Any) -> Any:
    if x is None:
        return y
    if y is None:
        return x
    try:
        return x if x >= y else y
    except TypeError:
        return x if _canon(x) >= _canon(y) else y


def merge_trips(base: dict | None, a: dict, b: dict) -> MergeResult:
    """Merges two versions `a` and `b` of one trip document, given their common ancestor `base`.

    Parameters
    ----------
    base : dict or None
        The last version both sides are known to contain, or None when unknown (then any field
        that differs is a conflict, but list elements present on one side only are kept).
    a, b : dict
        The two versions (JSON objects with the same ``id``).

    Returns
    -------
    MergeResult
        ``doc`` is a new dict (inputs are not changed); ``merge_trips(base, a, b).doc ==
        merge_trips(base, b, a).doc`` for all inputs.
    """
    if a.get("id") != b.get("id"):
        raise ValueError(f"cannot merge different trips: {a.get('id')!r} and {b.get('id')!r}")
    if _eq(a, b):
        return MergeResult(doc=json.loads(_canon(a)))
    pref_a = _pref_key(a) >= _pref_key(b)
    m = _Merger(a, b, pref_a)
    root_base: Any = UNKNOWN if base is None else base
    out = m.mapping("", root_base, a, b, skip=_outside_generic_rules(), node=role_tree())
    pref, other = (a, b) if pref_a else (b, a)
    out["id"] = a.get("id")
    for key in ("revision", "updated_at", "schema_version"):
        v = _max(a.get(key), b.get(key))
        if v is not None:
            out[key] = v
    if "device_id" in pref or "device_id" in other:
        out["device_id"] = pref.get("device_id", other.get("device_id"))
    # audit: a grow-only log, union by id, in time order
    audit: dict[str, dict] = {}
    for e in list(pref.get("audit") or []) + list(other.get("audit") or []):
        if isinstance(e, dict) and isinstance(e.get("id"), str):
            audit.setdefault(e["id"], e)
    if "audit" in a or "audit" in b:
        out["audit"] = sorted(audit.values(), key=lambda e: (_time_key(e), e["id"]))
    # conflicts: merged like any id list (a resolved one removed on one side stays removed) + new
    base_conf = UNKNOWN if base is None else (base.get("conflicts") or [])
    conf = m.value("conflicts", base_conf, list(a.get("conflicts") or []),
                   list(b.get("conflicts") or []), derived=True, node=role_tree().child("conflicts"))
    conf = [] if conf is MISSING else list(conf)
    known = {c.get("id") for c in conf if isinstance(c, dict)}
    for c in m.conflicts:
        if c["id"] not in known:
            known.add(c["id"])
            conf.append(c)
    if conf or "conflicts" in a or "conflicts" in b:
        out["conflicts"] = conf
    return MergeResult(doc=json.loads(_canon(out)), new_conflicts=m.conflicts)


# --- ancestry from the audit trail ------------------------------------------------------------
def history(doc: dict) -> frozenset[str]:
    """The ids of a document's audit entries: its causal history (one entry per store save)."""
    return frozenset(e["id"] for e in doc.get("audit") or []
                     if isinstance(e, dict) and isinstance(e.get("id"), str))


def relation(x: dict, y: dict) -> str:
    """How version `x` stands to `y`: ``"same"``, ``"ancestor"`` (y contains x), ``"descendant"``
    (x contains y) or ``"diverged"`` (each has changes the other lacks)."""
    if content_hash(x) == content_hash(y):
        return "same"
    hx, hy = history(x), history(y)
    if hx and hy:
        if hx < hy:
            return "ancestor"
        if hy < hx:
            return "descendant"
    return "diverged"


def common_ancestor(candidates: Iterable[dict], a: dict, b: dict) -> dict | None:
    """The candidate with the largest history contained in both `a` and `b` (None if there is none)."""
    ha, hb = history(a), history(b)
    both = ha & hb
    best, best_key = None, None
    for c in candidates:
        hc = history(c)
        if not hc or not hc <= both:
            continue
        key = (len(hc), content_hash(c))
        if best_key is None or key > best_key:
            best, best_key = c, key
    return best
