"""Chain of custody: hand-offs on trip records, gaps, the lab's receipt, signatures through sync and the CLI."""

from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone

import pytest

import sync
from core.records.models import Bottle, CustodyRecord, Signature, Stop, Trip, measure
from core.rules.custody import CustodyInputError, add_handoff, custody_chains, same_person, sign_handoff
from tests.conftest import ROOT
from tests.lab.test_lab_cli import LOWER, data, lab, ok_json, one_line_error, run_cli, seeded  # noqa: F401
from tests.sync.conftest import dav, dav_session, open_store  # noqa: F401

T0 = datetime(2026, 7, 7, 8, 0, tzinfo=timezone(timedelta(hours=-7)))
NOW = T0 + timedelta(days=1)


def _trip() -> Trip:
    """An invented trip: one stop with a do-fixed, a bod and a blank bottle."""
    bottles = [
        Bottle(
            label="TV-0901",
            kind="do-fixed",
            collected_at=T0 + timedelta(minutes=20),
            fixed_at=T0 + timedelta(minutes=22),
        ),
        Bottle(label="TV-0902", kind="bod", collected_at=T0 + timedelta(minutes=20)),
        Bottle(label="TV-0903", kind="blank", collected_at=T0 + timedelta(minutes=25)),
    ]
    stop = Stop(site_id="LK-01", arrived_at=T0 + timedelta(minutes=10), bottles=bottles)
    return Trip(program="Tamsin Valley Stream Watch", crew=["R.O."], started_at=T0, stops=[stop])


def _codes(trip: Trip, label: str) -> set[str]:
    (chain,) = [c for c in custody_chains(trip) if c.bottle.label == label]
    return {f.code for f in chain.flags}


def _hand(trip, giver, taker, minutes, **kw):
    return add_handoff(
        trip, relinquished_by=giver, received_by=taker, at=T0 + timedelta(minutes=minutes), now=NOW, **kw
    ).trip


def test_a_complete_chain_received_cold_has_no_warning():
    t = _hand(_trip(), "R.O.", "Courier K", 120)
    t = _hand(
        t, "Courier K", "Lab desk M.T.", 200, at_lab=True, temp=measure("temp", "4.2 C"), condition="intact, on ice"
    )
    for label in ("TV-0901", "TV-0902", "TV-0903"):
        assert _codes(t, label) == {"custody.unsigned"}, label
    chain = next(c for c in custody_chains(t) if c.bottle.label == "TV-0902")
    assert chain.status == "at the lab" and chain.receipt.received_by == "Lab desk M.T."
    assert [h.received_by for h in chain.hops] == ["Courier K", "Lab desk M.T."]


def test_a_bottle_received_by_someone_who_never_got_it_is_a_gap():
    t = _hand(_trip(), "R.O.", "Courier K", 120)
    t = _hand(t, "Courier Z", "Lab desk", 200, at_lab=True, temp=measure("temp", "3 C"))
    (gap,) = [f for c in custody_chains(t) if c.bottle.label == "TV-0901" for f in c.flags if f.code == "custody.gap"]
    assert "Courier Z" in gap.message and "Courier K" in gap.message


def test_hand_offs_entered_out_of_order_are_read_in_time_order():
    t = _hand(_trip(), "Courier K", "Lab desk", 200, at_lab=True, temp=measure("temp", "3 C"))
    t = _hand(t, "R.O.", "courier k", 120)  # same person, typed in lower case
    assert "custody.gap" not in _codes(t, "TV-0901")


def test_no_receipt_at_the_lab_is_flagged_and_no_record_at_all_too():
    t = _hand(_trip(), "R.O.", "Courier K", 120, bottle_refs=["TV-0901"])
    assert "custody.no_lab_receipt" in _codes(t, "TV-0901")
    assert {"custody.none", "custody.no_lab_receipt"} <= _codes(t, "TV-0902")


@pytest.mark.parametrize(
    "text, code",
    [
        # BOD: cool to ≤ 6 °C, do not freeze — US 40 CFR 136.3 Table II (from memory); common practice.
        ("6.0 C", None),
        ("4.2 C", None),
        ("0.5 C", None),
        ("6.3 C", "custody.receipt_warm"),
        ("11 C", "custody.receipt_warm"),
        ("0 C", "custody.receipt_frozen"),
        ("-1.5 C", "custody.receipt_frozen"),
        ("45 F", "custody.receipt_warm"),  # 7.2 °C
    ],
)
def test_bod_temperature_on_receipt(text, code):
    t = _hand(_trip(), "R.O.", "Lab desk", 90, at_lab=True, temp=measure("temp", text))
    found = _codes(t, "TV-0902") & {"custody.receipt_warm", "custody.receipt_frozen"}
    assert found == ({code} if code else set())
    # A Winkler bottle is fixed on site: no cooling limit on receipt (40 CFR 136.3 Table II, from memory).
    assert not _codes(t, "TV-0901") & {"custody.receipt_warm", "custody.receipt_frozen"}


def test_bod_received_without_a_temperature_gets_a_note():
    t = _hand(_trip(), "R.O.", "Lab desk", 90, at_lab=True)
    assert "custody.receipt_temp_missing" in _codes(t, "TV-0902")
    assert "custody.receipt_temp_missing" not in _codes(t, "TV-0901")


@pytest.mark.parametrize(
    "kw, field",
    [
        (dict(relinquished_by=" ", received_by="B"), "relinquished_by"),
        (dict(relinquished_by="A", received_by=""), "received_by"),
        (dict(relinquished_by="R. O.", received_by="r.o."), "received_by"),
        (dict(at=NOW + timedelta(hours=1)), "at"),
        (dict(at=T0), "at"),  # before the bottles were collected
        (dict(bottle_refs=["TV-9999"]), "bottles"),
        (dict(at=datetime(2026, 7, 7, 12, 0)), "at"),  # no time zone
    ],
)
def test_a_bad_hand_off_is_refused_and_names_the_input(kw, field):
    args = dict(relinquished_by="A", received_by="B", at=T0 + timedelta(hours=2), now=NOW) | kw
    trip = _trip()
    with pytest.raises(CustodyInputError) as info:
        add_handoff(trip, **args)
    assert info.value.field == field
    assert trip.custody == []


def test_names_compare_without_case_spacing_or_stops():
    assert same_person("R.O.", "r o") and not same_person("R.O.", "R.P.") and not same_person("", "")


def test_a_trip_without_custody_is_written_as_before():
    doc = json.loads((ROOT / "sample_trips" / "trip-2026-06-09-lower-watershed.json").read_text("utf-8"))
    assert "custody" not in Trip.from_document(doc).to_document()
    t = _hand(_trip(), "R.O.", "B", 90)
    back = Trip.from_document(t.to_document())
    assert back.custody == t.custody and len(back.custody) == 1


def _sig(name: str, n: int = 40) -> Signature:
    pts = [[round(0.05 + 0.9 * i / n, 4), round(0.5 + 0.3 * ((-1) ** i) * (i % 7) / 7, 4)] for i in range(n)]
    return Signature(name=name, signed_at=T0 + timedelta(hours=2), aspect=3.0, strokes=[pts, pts[::3]])


def test_signing_checks_the_name_and_signatures_are_bounded():
    out = add_handoff(_trip(), relinquished_by="R.O.", received_by="Courier K", at=T0 + timedelta(hours=2), now=NOW)
    with pytest.raises(CustodyInputError):
        sign_handoff(out.trip, out.record.id, "received", _sig("Somebody Else"))
    t = sign_handoff(out.trip, out.record.id[:8], "received", _sig("courier k"))
    t = sign_handoff(t, out.record.id, "relinquished", _sig("R.O."))
    assert t.custody[0].signed and "custody.unsigned" not in _codes(t, "TV-0901")
    with pytest.raises(ValueError):
        Signature(name="A", signed_at=T0, strokes=[[[0.5, 1.5]]])
    with pytest.raises(ValueError):
        Signature(name="A", signed_at=T0, strokes=[[[0.5, 0.5]]] * 201)


def test_a_signature_round_trips_through_sync(tmp_path, dav):  # noqa: F811 - fixture
    tablet = open_store(tmp_path / "tablet", "tablet-A")
    office = open_store(tmp_path / "office", "office-desk")
    trip = tablet.save_trip(_trip(), "trip with bottles")
    out = add_handoff(
        trip,
        relinquished_by="R.O.",
        received_by="Lab desk",
        at=T0 + timedelta(hours=3),
        now=NOW,
        at_lab=True,
        temp=measure("temp", "3.9 C"),
        condition="intact",
        relinquished_signature=_sig("R.O."),
        received_signature=_sig("Lab desk", 300),
    )
    tablet.save_trip(out.trip, "custody signed on the tablet")
    assert sync.push(tablet, dav.url, session=dav_session("tablet-A")).pushed == 1
    assert sync.pull(office, dav.url, session=dav_session("office-desk")).pulled == 1
    (rec,) = office.load_trip(trip.id).custody
    assert isinstance(rec, CustodyRecord) and rec.signed
    assert rec.received_signature.strokes == out.record.received_signature.strokes
    assert rec.relinquished_signature.strokes == out.record.relinquished_signature.strokes
    assert rec.temp.value == pytest.approx(3.9)


# --- the command line ------------------------------------------------------------------------------------
def custody(*args, data_dir):
    return run_cli("custody", *args, data_dir=data_dir)


def test_cli_add_and_list_a_chain_with_a_gap(data):  # noqa: F811 - fixture
    r = ok_json(
        custody(
            "add",
            LOWER[:8],
            "--from",
            "R.O.",
            "--to",
            "Courier K",
            "--at",
            "2026-06-09T12:00-07:00",
            "--json",
            data_dir=data,
        )
    )
    assert r["signed"] is False and set(r["bottles"]) == {"TV-0611", "TV-0612", "TV-0613", "TV-0614"}
    ok_json(
        custody(
            "add",
            LOWER[:8],
            "--from",
            "Courier Z",
            "--to",
            "Lab desk",
            "--lab",
            "--temp",
            "7.5 C",
            "--condition",
            "intact",
            "--bottles",
            "TV-0611,TV-0612",
            "--at",
            "2026-06-09T13:00-07:00",
            "--json",
            data_dir=data,
        )
    )
    listed = ok_json(custody("list", LOWER[:8], "--json", data_dir=data))
    assert [h["received_by"] for h in listed["handoffs"]] == ["Courier K", "Lab desk"]
    assert listed["handoffs"][1]["bottle_labels"] == ["TV-0611", "TV-0612"]
    codes = {b["label"]: {f["code"] for f in b["flags"]} for b in listed["bottles"]}
    assert "custody.gap" in codes["TV-0611"]
    assert "custody.receipt_warm" in codes["TV-0612"]  # BOD at 7.5 °C > 6 °C (40 CFR 136.3, from memory)
    assert "custody.no_lab_receipt" in codes["TV-0613"]
    text = custody("list", LOWER[:8], data_dir=data).stdout
    assert "R.O. → Courier K" in text and "7.5 °C on receipt" in text and "unsigned" in text


@pytest.mark.parametrize(
    "args, words",
    [
        (("--from", "A", "--to", "a"), ("--to", "another person")),
        (("--from", "A", "--to", "B", "--temp", "warm"), ("--temp", "°C, °F or K")),
        (("--from", "A", "--to", "B", "--at", "2026-06-09 12:00"), ("--at", "time zone")),
        (("--from", "A", "--to", "B", "--bottles", "NOPE-1"), ("--bottles", "TV-0611")),
        (("--from", "A", "--to", "B", "--at", "2026-06-01T12:00Z"), ("--at", "before bottle")),
    ],
)
def test_cli_refuses_a_bad_hand_off_in_one_line_and_saves_nothing(data, args, words):  # noqa: F811
    before = ok_json(custody("list", LOWER[:8], "--json", data_dir=data))
    one_line_error(custody("add", LOWER[:8], *args, data_dir=data), *words)
    assert ok_json(custody("list", LOWER[:8], "--json", data_dir=data)) == before


def test_a_duplicate_follows_the_bottle_it_names_on_the_custody_page():
    """An unfixed duplicate of a Winkler bottle keeps the Winkler rules (8 h from collection, no
    cooling limit), not the BOD ones its missing fixing time alone would suggest."""
    from core.rules.report import bottle_rows

    t = _trip()
    stop = t.stops[0]
    dup = Bottle(label="TV-0904", kind="duplicate", duplicate_of="TV-0901", collected_at=T0 + timedelta(minutes=21))
    t = t.model_copy(update={"stops": [stop.model_copy(update={"bottles": [*stop.bottles, dup]})]})
    t = _hand(t, "R.O.", "Lab desk", 90, at_lab=True, temp=measure("temp", "11 C"))
    # 40 CFR 136.3 Table II (from memory): Winkler DO fixed on site, no cooling limit; BOD ≤ 6 °C.
    assert "custody.receipt_warm" in _codes(t, "TV-0902")
    assert not _codes(t, "TV-0904") & {"custody.receipt_warm", "custody.receipt_frozen"}
    rows = {r.bottle.label: r for r in bottle_rows(t)}
    # 40 CFR 136.3 Table II (from memory): Winkler DO 8 h, BOD 48 h, both counted from collection.
    assert rows["TV-0904"].deadline == dup.collected_at + timedelta(hours=8)
    assert rows["TV-0904"].holding_rule == "8 h from collection"
    assert rows["TV-0901"].holding_rule == "8 h from collection"  # fixed on site; the clock runs from collection
    assert rows["TV-0902"].holding_rule == "48 h from collection"
    assert rows["TV-0903"].deadline is None


def test_a_result_analysed_before_the_lab_received_the_bottle_is_flagged():
    # common practice (chain of custody): the lab analyses a bottle it holds; a result timed before the
    # lab's receipt means a time is wrong or a hand-off is missing from the record
    from core.records.models import LabResult

    t = _hand(_trip(), "R.O.", "Lab desk", 300, at_lab=True, temp=measure("temp", "3 C"))
    early = LabResult(analyte="do_winkler", value=8.1, unit="mg/L", analysed_at=T0 + timedelta(minutes=200))
    t.stops[0].bottles[0].lab_results.append(early)
    assert "custody.analysed_before_receipt" in _codes(t, "TV-0901")
    (flag,) = [
        f
        for c in custody_chains(t)
        if c.bottle.label == "TV-0901"
        for f in c.flags
        if f.code.endswith("before_receipt")
    ]
    assert "UTC−07:00" in flag.message  # times say their zone
    later = t.model_copy(deep=True)
    later.stops[0].bottles[0].lab_results[0].analysed_at = T0 + timedelta(minutes=320)
    assert "custody.analysed_before_receipt" not in _codes(later, "TV-0901")
    assert "custody.analysed_before_receipt" not in _codes(t, "TV-0902")  # no result on that bottle
