"""Bench batches: QC recorded once per batch and applied to its bottles (BOD and Winkler)."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import pytest

from core.records.models import Bottle, Stop, Trip
from core.rules.lab import LabInputError, Standardisation, add_batch, batch_for, batch_qc
from tests.lab.test_lab_cli import HOT, TITRATED_200, data, lab, ok_json, one_line_error, seeded  # noqa: F401

PDT = timezone(timedelta(hours=-7))
T0 = datetime(2026, 7, 7, 8, 0, tzinfo=PDT)
NOW = datetime(2026, 7, 13, 9, 0, tzinfo=PDT)


def _trip() -> Trip:
    b = [
        Bottle(label="TV-0902", kind="bod", collected_at=T0 + timedelta(minutes=20)),
        Bottle(label="TV-0904", kind="bod", collected_at=T0 + timedelta(minutes=50)),
    ]
    return Trip(
        program="Tamsin Valley Stream Watch",
        started_at=T0,
        stops=[Stop(site_id="LK-01", arrived_at=T0 + timedelta(minutes=10), bottles=b)],
    )


def _qc(**kw):
    args = dict(name="B-0707", bottle_refs=["TV-0902", "TV-0904"], created_at=NOW, now=NOW) | kw
    trip, batch = add_batch(_trip(), **args)
    return trip, batch, {c["check"]: c for c in batch_qc(batch, NOW)["checks"]}, batch_qc(batch, NOW)


@pytest.mark.parametrize("blank, verdict", [(0.15, "passes"), (0.20, "passes"), (0.25, "fails")])
def test_blank_check(blank, verdict):
    # Dilution-water blank depletion ≤ 0.20 mg/L (Standard Methods 5210 B, summary of the 21st edition).
    assert _qc(blank_depletion_mg_l=blank)[2]["dilution-water blank"]["verdict"] == verdict


@pytest.mark.parametrize("gga, verdict", [(198.0, "passes"), (168.0, "passes"), (160.0, "fails"), (240.0, "fails")])
def test_gga_check(gga, verdict):
    # Glucose–glutamic acid check 198 ± 30.5 mg/L (Standard Methods 5210 B, summary of the 21st edition).
    assert _qc(gga_bod_mg_l=gga)[2]["glucose–glutamic acid"]["verdict"] == verdict


def test_seed_uptake_and_standardisation_age_in_days():
    controls = [
        {"initial_do_mg_l": 8.8, "final_do_mg_l": 4.8, "seed_ml": 10},
        {"initial_do_mg_l": 8.7, "final_do_mg_l": 2.9, "seed_ml": 15},
    ]
    std = Standardisation(
        titrant_ml=20.0, standard_ml=20.0, standard_normality=0.025, standardised_at=NOW - timedelta(days=3)
    )
    _, _, checks, qc = _qc(seed_controls=controls, standardisation=std)
    # Seed uptake per mL = mean of (D1 − D2)/seed_ml over usable controls (Standard Methods 5210 B, from
    # memory): (4.0/10 + 5.8/15)/2 = 0.39333.
    assert checks["seed controls"]["value"] == pytest.approx((4.0 / 10 + 5.8 / 15) / 2)
    # N = N_std · V_std / V_titrant (Standard Methods 4500-O C, from memory): 0.025 · 20 / 20 = 0.025 N.
    assert qc["normality"] == pytest.approx(0.025)
    assert qc["standardisation_age_days"] == pytest.approx(3.0)
    t = checks["thiosulfate standardisation"]
    assert "3.0 days" in t["shown"] and t["flag"]["code"] == "lab.standardisation_old"
    assert "days" in t["flag"]["message"] and " h " not in t["flag"]["message"].split("than")[0]


def test_a_batch_is_kept_once_and_replaced_by_name():
    trip, batch, _, _ = _qc(blank_depletion_mg_l=0.1)
    again, second = add_batch(
        trip, name="B-0707", bottle_refs=["TV-0902"], created_at=NOW, now=NOW, blank_depletion_mg_l=0.12
    )
    assert [b.name for b in again.lab_batches] == ["B-0707"] and second.id == batch.id
    assert batch_for(again, again.stops[0].bottles[0]).blank_depletion_mg_l == 0.12
    assert batch_for(again, again.stops[0].bottles[1]) is None
    assert "lab_batches" not in _trip().to_document()
    assert Trip.from_document(again.to_document()).lab_batches == again.lab_batches


@pytest.mark.parametrize(
    "kw, field",
    [
        (dict(name=" "), "name"),
        (dict(bottle_refs=[]), "bottle"),
        (dict(bottle_refs=["TV-9999"]), "bottle"),
        (dict(blank_depletion_mg_l=500.0), "blank_depletion_mg_l"),
        (dict(seed_controls=[{"initial_do_mg_l": 8.0, "final_do_mg_l": 7.5, "seed_ml": 5}]), "seed_controls"),
        (dict(incubation_start=NOW), "incubation_end"),
    ],
)
def test_a_bad_batch_is_refused_naming_the_input(kw, field):
    with pytest.raises(LabInputError) as info:
        _qc(**kw)
    assert info.value.field == field


def test_cli_batch_qc_is_applied_to_bod_and_winkler(data, tmp_path):  # noqa: F811
    seed = tmp_path / "seed.csv"
    seed.write_text(
        "bottle,kind,sample_ml,bottle_ml,seed_ml,initial_do_mg_l,final_do_mg_l,notes\n,seed control,,300,10,8.8,4.8,\n",
        encoding="utf-8",
    )
    out = ok_json(
        lab(
            "batch",
            HOT[:8],
            "--name",
            "B-0623",
            "--bottles",
            "TV-0703,065333e4",
            "--blank-depletion",
            "0.12",
            "--gga",
            "201",
            "--seed-sheet",
            str(seed),
            "--incubation-start",
            "2026-06-23T16:00-07:00",
            "--incubation-end",
            "2026-06-28T16:30-07:00",
            "--incubator-temp",
            "20.1",
            "--std-titrant-ml",
            "20.0",
            "--standardised-at",
            "2026-06-23T07:00-07:00",
            "--json",
            data_dir=data,
        )
    )
    assert {c["check"]: c["verdict"] for c in out["qc"]["checks"]}["glucose–glutamic acid"] == "passes"
    sheet = tmp_path / "bench.csv"
    sheet.write_text(
        "bottle,kind,sample_ml,bottle_ml,seed_ml,initial_do_mg_l,final_do_mg_l,notes\n"
        "TV-0703,dilution,150,300,2,8.8,4.0,\n",
        encoding="utf-8",
    )
    bod = ok_json(lab("bod", HOT[:8], "TV-0703", "--sheet", str(sheet), "--json", data_dir=data))
    # Seeded BOD5 = ((D1 − D2) − S · seed_ml) / P (Standard Methods 5210 B, from memory), S from the
    # batch's control = (8.8 − 4.8)/10 = 0.4 per mL: ((8.8 − 4.0) − 0.8) / 0.5 = 8.0 mg/L.
    assert bod["bod_mg_l"] == pytest.approx(8.0)
    derived = bod["result"]["inputs"]["derived"]
    assert derived["batch"]["name"] == "B-0623" and derived["blank_depletion_mg_l"] == 0.12
    codes = {f["code"] for f in bod["flags"]}
    assert not codes & {"lab.bod_blank_missing", "lab.bod_gga_missing", "lab.bod_times_missing"}
    # Winkler on a batch bottle takes the batch's standardisation: 0.025 N, so with 200 mL of original
    # sample 1 mL of titrant is 1 mg/L (Standard Methods 4500-O C, from memory).
    w = ok_json(
        lab(
            "winkler",
            HOT[:8],
            "TV-0701",
            "--titrant-ml",
            "9.0",
            "--titrated-ml",
            TITRATED_200,
            "--at",
            "2026-06-23T14:00-07:00",
            "--json",
            data_dir=data,
        )
    )
    assert w["normality"] == pytest.approx(0.025) and w["do_mg_l"] == pytest.approx(9.0)
    assert w["result"]["inputs"]["derived"]["normality_source"]["kind"] == "standardisation"


def test_cli_winkler_without_normality_or_batch_says_what_to_give(data):  # noqa: F811
    one_line_error(
        lab(
            "winkler",
            HOT[:8],
            "TV-0701",
            "--titrant-ml",
            "9.0",
            "--titrated-ml",
            TITRATED_200,
            "--at",
            "2026-06-23T14:00-07:00",
            data_dir=data,
        ),
        "--normality",
        "lab batch",
    )
