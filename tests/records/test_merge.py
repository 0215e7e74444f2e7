"""Merging trip documents by element id: one-sided changes win, two-sided clashes are kept as
conflicts, and the result does not depend on the order of the sides (rules: core/records/merge.py;
three-way merge by element identity is common practice in file synchronisers)."""

import copy

from hypothesis import given, settings
from hypothesis import strategies as st

from core.records.merge import common_ancestor, merge_trips, relation

TRIP = "5f0901de-c1b3-4a79-aaa5-95b642d7d1c1"
STOP_IDS = [f"00000000-0000-4000-8000-00000000000{i}" for i in range(5)]


def audit(*ids):
    return [
        {"id": i, "at": f"2026-06-03T0{n}:00:00Z", "device_id": "dev-A", "change": "x", "revision": n + 1}
        for n, i in enumerate(ids)
    ]


def base_doc():
    return {
        "id": TRIP,
        "revision": 2,
        "updated_at": "2026-06-03T09:00:00Z",
        "device_id": "dev-A",
        "program": "Tamsin Valley Stream Watch",
        "crew": ["R.O."],
        "notes": "",
        "stops": [
            {
                "id": STOP_IDS[0],
                "site_id": "LK-01",
                "notes": "",
                "temp": {"value": 12.5},
                "bottles": [{"id": "b0", "label": "TV-0001", "notes": ""}],
            },
            {"id": STOP_IDS[1], "site_id": "LK-02", "notes": "", "temp": {"value": 13.0}, "bottles": []},
        ],
        "audit": audit("a1", "a2"),
        "conflicts": [],
    }


def edited(doc, device, stamp, audit_id):
    d = copy.deepcopy(doc)
    d["device_id"], d["updated_at"], d["revision"] = device, stamp, doc["revision"] + 1
    d["audit"] = d["audit"] + [
        {
            "id": audit_id,
            "at": stamp,
            "device_id": device,
            "change": "edit",
            "device_name": device.replace("dev-", "Tablet "),
            "revision": d["revision"],
        }
    ]
    return d


def test_changes_on_different_fields_both_survive_without_conflict():
    base = base_doc()
    a = edited(base, "dev-A", "2026-06-03T10:00:00Z", "a3")
    b = edited(base, "dev-B", "2026-06-03T10:05:00Z", "b3")
    a["stops"][0]["notes"] = "cattle upstream"
    b["stops"][1]["temp"]["value"] = 13.4
    b["stops"][0]["bottles"].append({"id": "b1", "label": "TV-0002", "notes": ""})
    doc = merge_trips(base, a, b).doc
    assert doc["stops"][0]["notes"] == "cattle upstream"
    assert doc["stops"][1]["temp"]["value"] == 13.4
    assert [x["label"] for x in doc["stops"][0]["bottles"]] == ["TV-0001", "TV-0002"]
    assert doc["conflicts"] == []
    assert {e["id"] for e in doc["audit"]} == {"a1", "a2", "a3", "b3"}
    assert doc["revision"] == 3


def test_same_field_changed_on_both_sides_keeps_both_values():
    base = base_doc()
    a = edited(base, "dev-A", "2026-06-03T10:00:00Z", "a3")
    b = edited(base, "dev-B", "2026-06-03T10:05:00Z", "b3")
    a["stops"][0]["temp"]["value"] = 12.8
    b["stops"][0]["temp"]["value"] = 12.2
    r = merge_trips(base, a, b)
    assert len(r.doc["conflicts"]) == 1
    c = r.doc["conflicts"][0]
    assert sorted(s["value"] for s in c["sides"]) == [12.2, 12.8]
    assert {s["device_id"] for s in c["sides"]} == {"dev-A", "dev-B"}
    assert c["base"] == 12.5 and "LK-01" in c["path"] and c["path"].endswith("temp.value")
    # in words: the devices' names, never their ids
    assert r.needs_attention and "Tablet A" in c["message"] and "Tablet B" in c["message"]
    assert "dev-A" not in c["message"] and "stops[" not in c["message"]
    # the later edit (dev-B, 10:05) is the value kept for now
    assert r.doc["stops"][0]["temp"]["value"] == 12.2


def test_removed_on_one_side_and_untouched_on_the_other_is_removed():
    base = base_doc()
    a = edited(base, "dev-A", "2026-06-03T10:00:00Z", "a3")
    b = edited(base, "dev-B", "2026-06-03T10:05:00Z", "b3")
    del a["stops"][1]
    b["notes"] = "high water"
    doc = merge_trips(base, a, b).doc
    assert [s["id"] for s in doc["stops"]] == [STOP_IDS[0]] and doc["notes"] == "high water"


def test_removed_on_one_side_and_changed_on_the_other_is_kept_and_reported():
    base = base_doc()
    a = edited(base, "dev-A", "2026-06-03T10:00:00Z", "a3")
    b = edited(base, "dev-B", "2026-06-03T10:05:00Z", "b3")
    del a["stops"][1]
    b["stops"][1]["notes"] = "log jam"
    r = merge_trips(base, a, b)
    assert [s["id"] for s in r.doc["stops"]] == STOP_IDS[:2]
    assert r.doc["stops"][1]["notes"] == "log jam"
    assert len(r.doc["conflicts"]) == 1 and any(s.get("removed") for s in r.doc["conflicts"][0]["sides"])


def test_two_way_merge_keeps_elements_from_both_sides():
    base = base_doc()
    a = edited(base, "dev-A", "2026-06-03T10:00:00Z", "a3")
    b = edited(base, "dev-B", "2026-06-03T10:05:00Z", "b3")
    a["stops"].append({"id": STOP_IDS[2], "site_id": "LK-03", "notes": "", "bottles": []})
    b["stops"].append({"id": STOP_IDS[3], "site_id": "LK-04", "notes": "", "bottles": []})
    doc = merge_trips(None, a, b).doc
    assert {s["id"] for s in doc["stops"]} == set(STOP_IDS[:4])


def test_relation_and_common_ancestor_follow_the_audit_trail():
    base = base_doc()
    a = edited(base, "dev-A", "2026-06-03T10:00:00Z", "a3")
    b = edited(base, "dev-B", "2026-06-03T10:05:00Z", "b3")
    assert relation(base, a) == "ancestor" and relation(a, base) == "descendant"
    assert relation(a, b) == "diverged" and relation(a, copy.deepcopy(a)) == "same"
    assert common_ancestor([a, b, base], a, b) is base


# --- the order-independence property ------------------------------------------------------------
_values = st.one_of(st.integers(-5, 5), st.text(max_size=3), st.none(), st.floats(0, 30, allow_nan=False))


@st.composite
def side(draw, base, device, stamp, audit_id):
    d = edited(base, device, stamp, audit_id)
    for _ in range(draw(st.integers(0, 5))):
        op = draw(st.sampled_from(["field", "notes", "add", "remove", "bottle", "top"]))
        stops = d["stops"]
        if op == "add":
            sid = draw(st.sampled_from(STOP_IDS))
            if all(s["id"] != sid for s in stops):
                stops.insert(
                    draw(st.integers(0, len(stops))),
                    {
                        "id": sid,
                        "site_id": draw(st.sampled_from(["LK-03", "LK-04"])),
                        "notes": draw(st.text(max_size=3)),
                        "bottles": [],
                    },
                )
        elif op == "top":
            d[draw(st.sampled_from(["notes", "program", "meter_id"]))] = draw(_values)
        elif stops:
            s = draw(st.sampled_from(stops))
            if op == "field":
                s.setdefault("temp", {})["value"] = draw(_values)
            elif op == "notes":
                s["notes"] = draw(st.text(max_size=3))
            elif op == "remove":
                stops.remove(s)
            elif op == "bottle":
                s["bottles"].append(
                    {
                        "id": draw(st.sampled_from(["b1", "b2", "b3"])),
                        "label": draw(st.text(min_size=1, max_size=3)),
                        "notes": "",
                    }
                )
    return d


@st.composite
def triples(draw):
    base = base_doc()
    stamp_a = draw(st.sampled_from(["2026-06-03T10:00:00Z", "2026-06-03T10:05:00Z"]))
    a = draw(side(base, "dev-A", stamp_a, "a3"))
    b = draw(side(base, "dev-B", "2026-06-03T10:05:00Z", "b3"))
    return base, a, b


@settings(max_examples=300, deadline=None)
@given(triples(), st.booleans())
def test_merge_gives_the_same_result_in_either_order(t, two_way):
    base, a, b = t
    base = None if two_way else base
    ab, ba = merge_trips(base, a, b), merge_trips(base, b, a)
    assert ab.doc == ba.doc
    # nothing changed on one side only is lost: every stop either side added is present
    base_ids = {s["id"] for s in base_doc()["stops"]}
    for s in a["stops"] + b["stops"]:
        if s["id"] not in base_ids:
            assert s["id"] in {x["id"] for x in ab.doc["stops"]}
    # merging the result again with an input it contains adds nothing new (bookkeeping aside)
    again = merge_trips(a, ab.doc, a).doc

    def strip(d):
        return {k: v for k, v in d.items() if k not in ("device_id", "revision", "updated_at")}

    assert strip(again) == strip(ab.doc)
