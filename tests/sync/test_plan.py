"""The pure push/pull plan, on plain dicts (the rules are ours: sync/plan.py; common practice)."""

from sync.layout import parse_revision_name, revision_name
from sync.plan import Action, LocalEntry, RemoteEntry, plan, plan_pull

H1 = "sha256:" + "1" * 64
H2 = "sha256:" + "2" * 64
H3 = "sha256:" + "3" * 64


def test_new_trip_is_created():
    acts = plan({"t1": LocalEntry("t1", 1, H1)}, {})
    assert [(a.action, a.trip_id) for a in acts] == [(Action.CREATE, "t1")]
    assert acts[0].name == revision_name(1, H1)


def test_hub_holding_this_revision_is_skipped():
    name = revision_name(3, H1)
    acts = plan({"t1": LocalEntry("t1", 3, H1, frozenset({name}))}, {"t1": RemoteEntry("t1", frozenset({name}))})
    assert acts[0].action is Action.SKIP


def test_changed_trip_whose_hub_copies_were_all_seen_is_an_update():
    old = revision_name(3, H1)
    acts = plan({"t1": LocalEntry("t1", 4, H2, frozenset({old}))}, {"t1": RemoteEntry("t1", frozenset({old}))})
    assert acts[0].action is Action.UPDATE


def test_unseen_hub_revision_asks_for_a_merge_oldest_first():
    mine = revision_name(3, H1)
    theirs = [revision_name(5, H3), revision_name(4, H2)]
    acts = plan(
        {"t1": LocalEntry("t1", 4, H2.replace("2", "4"), frozenset({mine}))},
        {"t1": RemoteEntry("t1", frozenset({mine, *theirs}))},
    )
    assert acts[0].action is Action.MERGE
    assert acts[0].unseen == tuple(sorted(theirs))
    assert [parse_revision_name(n)[0] for n in acts[0].unseen] == [4, 5]


def test_plan_is_in_trip_id_order_and_covers_every_local_trip():
    local = {t: LocalEntry(t, 1, H1) for t in ("c", "a", "b")}
    assert [a.trip_id for a in plan(local, {})] == ["a", "b", "c"]


def test_pull_fetches_unseen_and_skips_known():
    n1, n2 = revision_name(1, H1), revision_name(2, H2)
    remote = {"t1": RemoteEntry("t1", frozenset({n1, n2})), "t2": RemoteEntry("t2", frozenset({n1}))}
    local = {"t1": LocalEntry("t1", 1, H1, frozenset({n1}))}
    acts = {a.trip_id: a for a in plan_pull(local, remote)}
    assert acts["t1"].action is Action.FETCH and acts["t1"].unseen == (n2,)
    assert acts["t2"].action is Action.FETCH and acts["t2"].unseen == (n1,)  # not on the device
    local["t1"] = LocalEntry("t1", 2, H2, frozenset({n1}))  # device holds rev 2
    assert {a.trip_id: a.action for a in plan_pull(local, remote)}["t1"] is Action.SKIP


def test_revision_names_carry_the_hash_and_sort_by_revision():
    names = [revision_name(r, H1) for r in (10, 2, 100)]
    assert sorted(names) == [revision_name(r, H1) for r in (2, 10, 100)]
    assert parse_revision_name(revision_name(7, H2)) == (7, "2" * 24)
    assert parse_revision_name("r7-x.json") is None
