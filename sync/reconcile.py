"""Pure reconciliation of one trip's versions: which hub documents are heads, folding them into the
device copy, and the ancestor bookkeeping. No I/O, no clock: plain dicts in, plain dicts out.

The engine (`sync.engine`) reads hub files and the store, asks this module what to do with them,
and writes the results. Ancestry comes from the audit trail (`core.records.merge.relation`): a document
whose audit ids are a subset of another's is contained in it.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

from core.records.merge import common_ancestor, history, merge_trips, relation
from core.records.models import BOOKKEEPING, LOG, keys_by_role
from core.store.atomic import canonical_json_bytes

__all__ = [
    "BOOKKEEPING_KEYS",
    "semantic",
    "same_content",
    "Fold",
    "fold",
    "lacks_ancestor",
    "contained_names",
    "next_head",
    "newest_contained",
]

#: Fields that change on every save and say nothing about the field work itself (the roles
#: bookkeeping and log, as declared on the models in core.records.models).
BOOKKEEPING_KEYS = keys_by_role(BOOKKEEPING, LOG)


def semantic(doc: dict) -> bytes:
    """The canonical bytes of a document without its bookkeeping fields."""
    return canonical_json_bytes({k: v for k, v in doc.items() if k not in BOOKKEEPING_KEYS})


def same_content(a: dict | None, b: dict | None) -> bool:
    """True when both are documents equal apart from bookkeeping (revision, time, audit)."""
    if a is None or b is None:
        return a is b
    return semantic(a) == semantic(b)


@dataclass
class Fold:
    """The device copy after folding hub documents in: `kind` is "unchanged", "pulled"
    (new or fast-forward) or "merged"; `conflicts` are the ones this fold found."""

    doc: dict | None
    kind: str = "unchanged"
    conflicts: list[dict] = field(default_factory=list)


def fold(local: dict | None, incoming: Iterable[dict], candidates: list[dict]) -> Fold:
    """Folds hub documents into the device copy, oldest revision first.

    A document the accumulated copy already contains changes nothing; one that contains the copy
    replaces it (fast-forward); a diverged one is merged three-way with the best common ancestor
    among `candidates` and the incoming documents (two-way when there is none).
    """
    incoming = list(incoming)
    acc, kind, conflicts = local, "unchanged", []
    for doc in sorted(incoming, key=lambda d: (d.get("revision", 0), canonical_json_bytes(d))):
        if acc is None:
            acc, kind = doc, "pulled"
            continue
        rel = relation(doc, acc)
        if rel in ("same", "ancestor"):
            continue
        if rel == "descendant":
            acc = doc
            kind = "merged" if kind == "merged" else "pulled"
            continue
        base = common_ancestor(candidates + incoming, acc, doc)
        result = merge_trips(base, acc, doc)
        acc, kind = result.doc, "merged"
        conflicts.extend(result.new_conflicts)
    return Fold(acc, kind, conflicts)


def lacks_ancestor(local: dict, docs: Iterable[dict], candidates: Iterable[dict]) -> bool:
    """True when some document diverged from the device copy and no known document (the
    candidates or the documents themselves) is a common ancestor of the two: the merge would be
    two-way unless older hub files are read back."""
    docs, candidates = list(docs), list(candidates)
    return any(relation(d, local) == "diverged" and common_ancestor(candidates + docs, local, d) is None for d in docs)


def contained_names(pending: Mapping[str, dict], acc: dict | None) -> list[str]:
    """Names of the pending documents the copy `acc` already contains (same or ancestor)."""
    if acc is None:
        return []
    return [n for n, d in pending.items() if relation(d, acc) in ("same", "ancestor")]


def next_head(pending: Mapping[str, dict]) -> str:
    """The pending document to fold next: among the heads (documents no other pending document
    contains), the lowest revision, then the name. `pending` must not be empty."""
    heads = [
        n for n, d in pending.items() if not any(m != n and relation(d, e) == "ancestor" for m, e in pending.items())
    ]
    return min(heads, key=lambda n: (pending[n].get("revision", 0), n))


def newest_contained(docs: Iterable[dict], acc: dict) -> dict | None:
    """The ancestor for the next merge: of `docs`, the one with the longest history that the copy
    `acc` contains (None when it contains none)."""
    inside = [d for d in docs if relation(d, acc) in ("same", "ancestor")]
    if not inside:
        return None
    return max(inside, key=lambda d: (len(history(d)), d.get("revision", 0)))
