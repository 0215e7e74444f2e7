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
import re
import uuid
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any

from core.records.models import BOOKKEEPING, DERIVED, LOG, RoleNode, analyte_key, keys_by_role, role_tree
from core.store.atomic import content_hash

__all__ = [
    "MergeResult",
    "merge_trips",
    "relation",
    "history",
    "common_ancestor",
    "describe_conflict",
    "CONFLICT_NAMESPACE",
    "retain",
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


MISSING = _Sentinel("MISSING")  # the key or element is absent on that side
UNKNOWN = _Sentinel("UNKNOWN")  # no common ancestor is known (two-way merge)


@dataclass
class MergeResult:
    """The merged document and the conflicts found in this merge (already inside ``doc``)."""

    doc: dict
    new_conflicts: list[dict] = field(default_factory=list)

    @property
    def needs_attention(self) -> bool:
        """True while a conflict of the merged document is not settled."""
        return any(isinstance(c, dict) and not c.get("resolved_at") for c in self.doc.get("conflicts") or [])


def _canon(value: Any) -> str:
    return json.dumps(value, sort_keys=True, ensure_ascii=False, separators=(",", ":"))


def _eq(x: Any, y: Any) -> bool:
    if isinstance(x, _Sentinel) or isinstance(y, _Sentinel):
        return x is y
    if type(x) is not type(y) and not (
        isinstance(x, (int, float))
        and isinstance(y, (int, float))
        and not isinstance(x, bool)
        and not isinstance(y, bool)
    ):
        return False
    return _canon(x) == _canon(y)


def _is_id_list(value: Any) -> bool:
    return isinstance(value, list) and all(isinstance(e, dict) and isinstance(e.get("id"), str) for e in value)


def _atomic(value: dict) -> bool:
    """A typed quantity (text as typed, number, unit) changes as one value, never part by part."""
    return {"text", "value", "unit"} <= value.keys()


def _hint(elem: Any) -> str:
    for key in _HINT_KEYS:
        v = elem.get(key)
        if isinstance(v, str) and v:
            return f"{v} {elem['id'][:8]}"
    return elem["id"][:8]


def _settled(*docs: dict) -> dict[str, dict]:
    """Settled conflicts of the documents by id (the latest settlement when both settled one)."""
    out: dict[str, dict] = {}
    for doc in docs:
        for c in doc.get("conflicts") or []:
            if isinstance(c, dict) and c.get("resolved_at") and isinstance(c.get("id"), str):
                have = out.get(c["id"])
                if have is None or (str(c["resolved_at"]), _canon(c)) > (str(have["resolved_at"]), _canon(have)):
                    out[c["id"]] = c
    return out


def _settled_value(conflict: dict) -> Any:
    res = conflict.get("resolution")
    return res.get("value", MISSING) if isinstance(res, dict) else MISSING


class _Merger:
    def __init__(self, a: dict, b: dict, pref_a: bool) -> None:
        self.a, self.b, self.pref_a = a, b, pref_a
        self.conflicts: list[dict] = []
        # A clash a person already settled is not a new conflict: the settled value stands.
        self.settled = _settled(a, b)

    def value(
        self,
        path: str,
        base: Any,
        va: Any,
        vb: Any,
        *,
        derived: bool = False,
        node: RoleNode | None = None,
        loc: str | None = None,
    ) -> Any:
        node = node or role_tree()
        loc = path if loc is None else loc
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
            return self.mapping(path, sub_base, va, vb, derived=derived, node=node, loc=loc)
        if _is_id_list(va) and _is_id_list(vb):
            return self.id_list(path, base, va, vb, derived=derived, node=node, loc=loc)
        kept = va if self.pref_a else vb
        if kept is MISSING:
            kept = vb if kept is va else va
        if not derived:
            kept = self._record(path, base, va, vb, kept, loc)
        return kept

    def mapping(
        self,
        path: str,
        base: Any,
        a: dict,
        b: dict,
        *,
        derived: bool = False,
        skip: Iterable[str] = (),
        node: RoleNode | None = None,
        loc: str | None = None,
    ) -> dict:
        node = node or role_tree()
        loc = path if loc is None else loc
        out: dict = {}
        skip = set(skip)
        for key in sorted(set(a) | set(b)):
            if key in skip:
                continue
            vbase = UNKNOWN if base is UNKNOWN else base.get(key, MISSING)
            sub = f"{path}.{key}" if path else key
            r = self.value(
                sub,
                vbase,
                a.get(key, MISSING),
                b.get(key, MISSING),
                derived=derived or node.role(key) == DERIVED,
                node=node.child(key),
                loc=f"{loc}.{key}" if loc else key,
            )
            if r is not MISSING:
                out[key] = r
        return out

    def id_list(
        self,
        path: str,
        base: Any,
        a: list,
        b: list,
        *,
        derived: bool = False,
        node: RoleNode | None = None,
        loc: str | None = None,
    ) -> list:
        loc = path if loc is None else loc
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
            r = self.value(f"{path}[{_hint(any_elem)}]", ebase, ea, eb, derived=derived, node=node, loc=f"{loc}[{eid}]")
            if r is not MISSING:
                out.append(r)
        return out

    def _side(self, doc: dict, value: Any) -> dict:
        # the device of the side's latest save (the trip's own device_id names where it began)
        audit = [e for e in doc.get("audit") or [] if isinstance(e, dict)]
        last = max(audit, key=lambda e: (_time_key(e), str(e.get("id")))) if audit else {}
        device = last.get("device_id") or doc.get("device_id") or ""
        entry = {"device_id": str(device), "revision": doc.get("revision"), "updated_at": doc.get("updated_at")}
        name = last.get("device_name") if last.get("device_id") == device else None
        if isinstance(name, str) and name:
            entry["device_name"] = name
        if value is MISSING:
            entry["removed"] = True
            entry["value"] = None
        else:
            entry["value"] = value
        return entry

    def _record(self, path: str, base: Any, va: Any, vb: Any, kept: Any, loc: str | None = None) -> Any:
        """Records a clash as a new conflict and returns the value to keep (the settled one when
        a person already settled this very clash)."""
        trip_id = str(self.a.get("id"))
        values = sorted([_canon(None if va is MISSING else va), _canon(None if vb is MISSING else vb)])
        cid = str(uuid.uuid5(CONFLICT_NAMESPACE, trip_id + "\n" + path + "\n" + "\n".join(values)))
        settled = self.settled.get(cid)
        if settled is not None:
            chosen = _settled_value(settled)
            return kept if chosen is MISSING else chosen
        sides = sorted([self._side(self.a, va), self._side(self.b, vb)], key=_canon)
        detected = _max(self.a.get("updated_at"), self.b.get("updated_at")) or "1970-01-01T00:00:00Z"
        entry = {
            "id": cid,
            "path": path,
            "locator": loc or path,
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
        return kept

    def live_results(self, out: dict) -> None:
        """Two live results of one analysis on one bottle, one from each side, are a conflict."""
        a_ids, b_ids = _result_ids(self.a), _result_ids(self.b)
        trip_id = str(self.a.get("id"))
        for stop in out.get("stops") or []:
            for bottle in (stop.get("bottles") or []) if isinstance(stop, dict) else []:
                if not isinstance(bottle, dict):
                    continue
                groups: dict[str, list[dict]] = {}
                for r in bottle.get("lab_results") or []:
                    if isinstance(r, dict) and r.get("status", "valid") != "superseded" and not r.get("superseded_by"):
                        groups.setdefault(analyte_key(r.get("analyte", "")), []).append(r)
                for analyte, live in sorted(groups.items()):
                    only_a = [r for r in live if r["id"] in a_ids and r["id"] not in b_ids]
                    only_b = [r for r in live if r["id"] in b_ids and r["id"] not in a_ids]
                    if not only_a or not only_b:
                        continue
                    path = f"stops[{_hint(stop)}].bottles[{_hint(bottle)}].lab_results[{analyte}]"
                    loc = f"stops[{stop['id']}].bottles[{bottle['id']}].lab_results[{analyte}]"
                    ids = sorted(r["id"] for r in only_a + only_b)
                    cid = str(uuid.uuid5(CONFLICT_NAMESPACE, trip_id + "\n" + path + "\n" + "\n".join(ids)))
                    if cid in self.settled:
                        continue
                    sides = sorted(
                        [self._side(self.a, r) for r in only_a] + [self._side(self.b, r) for r in only_b], key=_canon
                    )
                    entry = {
                        "id": cid,
                        "kind": "results",
                        "path": path,
                        "locator": loc,
                        "sides": sides,
                        "detected_at": _max(self.a.get("updated_at"), self.b.get("updated_at"))
                        or "1970-01-01T00:00:00Z",
                        "resolved_at": None,
                        "resolved_by": None,
                        "resolution": None,
                        "kept": None,
                    }
                    entry["message"] = describe_conflict(entry)
                    self.conflicts.append(entry)


def _result_ids(doc: dict) -> set[str]:
    return {
        r["id"]
        for s in doc.get("stops") or []
        if isinstance(s, dict)
        for b in s.get("bottles") or []
        if isinstance(b, dict)
        for r in b.get("lab_results") or []
        if isinstance(r, dict) and isinstance(r.get("id"), str)
    }


def _fmt(value: Any) -> str:
    """A value in words: a reading as typed with its unit, text in quotes, a record as such."""
    if isinstance(value, dict) and isinstance(value.get("text"), str):
        text, unit = value["text"].strip(), str(value.get("unit") or "")
        return text if not unit or any(c.isalpha() or c in "°%µ" for c in text) else f"{text} {unit}"
    if isinstance(value, dict) and "analyte" in value:
        v = value.get("value")
        return "a result with no value" if v is None else f"a result of {v:g} {value.get('unit') or ''}".strip()
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, str):
        return f"“{value}”" if value else "(empty)"
    if value is None:
        return "(empty)"
    if isinstance(value, (dict, list)):
        return "a changed record"
    return _canon(value)


def _where_words(path: str) -> str:
    """``stops[LK-01 57e55725].bottles[TV-0701 1a2b3c4d].notes`` → "LK-01, bottle TV-0701: Notes"."""
    from core.records.messages import label_for

    parts = []
    for key, hint in re.findall(r"([A-Za-z_][A-Za-z0-9_]*)(?:\[([^\]]*)\])?", path):
        if hint and key in ("stops", "bottles"):
            name = hint.rsplit(" ", 1)[0] if " " in hint else ""
            if name:
                parts.append(name if key == "stops" else f"bottle {name}")
    last = re.findall(r"([A-Za-z_][A-Za-z0-9_]*)", path.rsplit(".", 1)[-1])
    label = label_for(last[0]) if last else "a field"
    return (", ".join(parts) + ": " if parts else "") + label


def describe_conflict(conflict: dict) -> str:
    """One readable line for a conflict entry (words only: no record paths, no device ids)."""
    parts = []
    for side in conflict.get("sides") or conflict.get("values") or []:
        dev = side.get("device_name") or "another device"
        what = "removed it" if side.get("removed") else f"set {_fmt(side.get('value'))}"
        parts.append(f"{dev} {what}")
    where = _where_words(str(conflict.get("path") or ""))
    if conflict.get("kind") == "results":
        return f"{where}: two live results from two devices ({' and '.join(parts)}); keep one"
    return f"{where}: " + " and ".join(parts) + f"; kept {_fmt(conflict.get('kept'))} for now"


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
    m.live_results(out)
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
    conf = m.value(
        "conflicts",
        base_conf,
        list(a.get("conflicts") or []),
        list(b.get("conflicts") or []),
        derived=True,
        node=role_tree().child("conflicts"),
    )
    conf = [] if conf is MISSING else list(conf)
    # a settlement made on either side stands (the latest one when both settled the same conflict)
    conf = [m.settled.get(str(c.get("id")), c) if isinstance(c, dict) else c for c in conf]
    have = {c.get("id") for c in conf if isinstance(c, dict)}
    conf += [c for cid, c in sorted(m.settled.items()) if cid not in have]
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
    return frozenset(e["id"] for e in doc.get("audit") or [] if isinstance(e, dict) and isinstance(e.get("id"), str))


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


# --- what an import or a merge never removes ----------------------------------------------------
def _holds_retained(value: Any, node: RoleNode) -> bool:
    """True when a record (or a list of them) holds something a retained field keeps."""
    if isinstance(value, list):
        return any(_holds_retained(v, node) for v in value)
    if not isinstance(value, dict):
        return False
    for key, sub in value.items():
        if key in node.retained and sub not in (None, [], {}):
            return True
        if key in node.children and _holds_retained(sub, node.child(key)):
            return True
    return False


def retain(kept: dict, result: dict, node: RoleNode | None = None) -> dict:
    """`result` with everything of `kept` that the models mark as retained put back (a new dict).

    Lab results, calibrations and custody records (fields declared with ``retain``) are never
    removed by an import or a merge: a retained value `result` lacks is taken from `kept`; an
    element of a retained list `result` lacks is appended; a stop or bottle `result` removed is
    kept when it holds retained content. Everything else of `result` stands.
    """
    node = node or role_tree()
    out = dict(result)
    for key, old in kept.items():
        new = out.get(key)
        if key in node.retained:
            if _is_id_list(old) and (new is None or _is_id_list(new)):
                have = {e["id"] for e in new or []}
                extra = [e for e in old if e["id"] not in have]
                if extra:
                    new = list(new or []) + extra
            elif new is None and old is not None:
                new = old
        if key in node.children and _is_id_list(old) and (new is None or _is_id_list(new)):
            child = node.child(key)
            by_id = {e["id"]: e for e in old}
            merged = []
            for e in new or []:
                merged.append(retain(by_id[e["id"]], e, child) if e["id"] in by_id else e)
            have = {e["id"] for e in merged}
            merged += [e for e in old if e["id"] not in have and _holds_retained(e, child)]
            new = merged
        elif key in node.children and isinstance(old, dict) and isinstance(new, dict):
            new = retain(old, new, node.child(key))
        if new is not None or key in out:
            out[key] = new
    return out
