"""Reconciling one trip's versions on plain dicts: heads, folding, ancestors (sync/reconcile.py;
ancestry by audit-id containment and three-way merging are common practice in synchronisers)."""

import copy

from sync.reconcile import contained_names, fold, lacks_ancestor, newest_contained, next_head, same_content

TRIP = "5f0901de-c1b3-4a79-aaa5-95b642d7d1c1"


def root():
    return {
        "id": TRIP,
        "revision": 1,
        "updated_at": "2026-06-03T08:00:00Z",
        "device_id": "dev-A",
        "notes": "",
        "crew": ["R.O."],
        "conflicts": [],
        "audit": [{"id": "a1", "at": "2026-06-03T08:00:00Z", "device_id": "dev-A", "revision": 1}],
    }


def edit(doc, audit_id, stamp, **changes):
    d = copy.deepcopy(doc)
    d.update(changes)
    d["revision"] = doc["revision"] + 1
    d["updated_at"] = stamp
    d["audit"] = d["audit"] + [{"id": audit_id, "at": stamp, "device_id": "dev", "revision": d["revision"]}]
    return d


def test_same_content_ignores_bookkeeping_only():
    r = root()
    bumped = edit(r, "a2", "2026-06-03T09:00:00Z")
    assert same_content(r, bumped)
    assert not same_content(r, edit(r, "a2", "2026-06-03T09:00:00Z", notes="riffle"))
    assert same_content(None, None) and not same_content(r, None)


def test_fold_into_nothing_takes_the_document():
    r = root()
    f = fold(None, [r], [])
    assert f.doc == r and f.kind == "pulled" and f.conflicts == []


def test_fold_fast_forwards_and_ignores_ancestors():
    r = root()
    child = edit(r, "a2", "2026-06-03T09:00:00Z", notes="riffle")
    f = fold(r, [child], [])
    assert f.doc == child and f.kind == "pulled"
    g = fold(child, [r], [])
    assert g.doc == child and g.kind == "unchanged"


def test_fold_merges_diverged_three_way_with_a_candidate_ancestor():
    r = root()
    a = edit(r, "a2", "2026-06-03T09:00:00Z", notes="riffle")
    b = edit(r, "b2", "2026-06-03T09:05:00Z", crew=["R.O.", "K.T."])
    f = fold(a, [b], [r])
    assert f.kind == "merged" and f.conflicts == []
    assert f.doc["notes"] == "riffle" and f.doc["crew"] == ["R.O.", "K.T."]
    # without the ancestor both changed fields clash (two-way merge keeps both values)
    g = fold(a, [b], [])
    assert g.kind == "merged" and {c["path"] for c in g.conflicts} == {"notes", "crew"}


def test_lacks_ancestor_only_for_diverged_documents_without_a_common_one():
    r = root()
    a = edit(r, "a2", "2026-06-03T09:00:00Z", notes="riffle")
    b = edit(r, "b2", "2026-06-03T09:05:00Z", notes="pool")
    assert lacks_ancestor(a, [b], [])
    assert not lacks_ancestor(a, [b], [r])
    assert not lacks_ancestor(r, [a], [])  # a fast-forward needs no ancestor


def test_heads_and_contained_names():
    r = root()
    a = edit(r, "a2", "2026-06-03T09:00:00Z", notes="riffle")
    a2 = edit(a, "a3", "2026-06-03T09:30:00Z", notes="riffle, cattle")
    b = edit(r, "b2", "2026-06-03T09:05:00Z", crew=["K.T."])
    pending = {"r1": r, "ra": a, "ra2": a2, "rb": b}
    # r and a are contained in a2; the heads are a2 (revision 3) and b (revision 2)
    assert next_head(pending) == "rb"
    assert sorted(contained_names(pending, a2)) == ["r1", "ra", "ra2"]
    assert contained_names(pending, None) == []
    assert newest_contained([r, a, b], a2) is a
    assert newest_contained([b], a2) is None
