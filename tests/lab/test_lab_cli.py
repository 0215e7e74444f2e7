"""`streamtab lab ...` through the real CLI on a real device store seeded from sample_trips/."""

from __future__ import annotations

import json
import shutil
import uuid
from pathlib import Path

import pytest

from core.store import DeviceStore
from tests.conftest import ROOT, run_cli

SAMPLES = ROOT / "sample_trips"
HOT = "a41f6e2d-8c3b-4d7a-b5e9-0c6d2f8e1a34"  # sample trip of 2026-06-23 (invented)
UPPER = "c9e2d4b7-6a1f-4e3c-8d2b-5f7a9c1e0d68"  # sample trip of 2026-06-30, in progress (invented)
LOWER = "5d7c2b0e-1f4a-4c8e-9b6d-3a2e1f0c9b71"  # sample trip of 2026-06-09, results already in
AT = "2026-06-23T14:00-07:00"  # 6.5 h after TV-0701 was fixed at LK-04
CAUTION_WORDS = ("sulfuric acid", "alkali-iodide-azide", "SOP", "safety data sheets")

# 200 mL original: titrate 200 × 300/298 mL (Standard Methods 4500-O C, from memory).
TITRATED_200 = f"{200 * 300 / 298:.6f}"


def _dup_trip() -> dict:
    """A small invented trip with a do-fixed bottle and its field duplicate at LK-01."""

    def bottle(label, kind):
        return {
            "id": str(uuid.uuid4()),
            "label": label,
            "kind": kind,
            "collected_at": "2026-07-07T08:20:00-07:00",
            "fixed_at": "2026-07-07T08:22:00-07:00",
            "preservation": "fixed on site",
            "notes": "",
            "lab_results": [],
        }

    def q(text, value, unit, entered_unit):
        return {"text": text, "entered_value": value, "entered_unit": entered_unit, "value": value, "unit": unit}

    return {
        "id": "7f3e9a12-0b4c-4d5e-8f6a-1b2c3d4e5f60",
        "schema_version": 2,
        "revision": 0,
        "program": "Tamsin Valley Stream Watch",
        "crew": ["R.O."],
        "started_at": "2026-07-07T07:50:00-07:00",
        "ended_at": "2026-07-07T10:00:00-07:00",
        "stops": [
            {
                "id": str(uuid.uuid4()),
                "site_id": "LK-01",
                "arrived_at": "2026-07-07T08:10:00-07:00",
                "temp": q("16.0", 16.0, "°C", "C"),
                "pressure": q("990 hPa", 990.0, "hPa", "hPa"),
                "do": q("8.9", 8.9, "mg/L", "mg/L"),
                "bottles": [bottle("TV-0901", "do-fixed"), bottle("TV-0901D", "duplicate")],
            }
        ],
    }


@pytest.fixture(scope="module")
def seeded(tmp_path_factory) -> Path:
    """A device store seeded once through `sites import` and `trip import` (the real CLI)."""
    root = tmp_path_factory.mktemp("seed") / "data"
    r = run_cli("sites", "import", str(SAMPLES / "sites.csv"), data_dir=root)
    assert r.returncode == 0, r.stderr
    dup = tmp_path_factory.mktemp("files") / "trip-dup.json"
    dup.write_text(json.dumps(_dup_trip()), encoding="utf-8")
    for f in sorted(SAMPLES.glob("trip-*.json")) + [dup]:
        r = run_cli("trip", "import", str(f), data_dir=root)
        assert r.returncode == 0, r.stderr
    return root


@pytest.fixture
def data(seeded, tmp_path) -> Path:
    target = tmp_path / "data"
    shutil.copytree(seeded, target)
    return target


def lab(*args, data_dir):
    return run_cli("lab", *args, data_dir=data_dir)


def ok_json(r):
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout)


def one_line_error(r, *words):
    assert r.returncode == 2, (r.returncode, r.stdout, r.stderr)
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1, r.stderr
    assert "Traceback" not in r.stderr
    for w in words:
        assert w in lines[0], (w, lines[0])
    return lines[0]


def winkler_args(*extra, trip=HOT[:8], label="TV-0701", titrant="12,1"):
    return (
        "winkler",
        trip,
        label,
        "--titrant-ml",
        titrant,
        "--normality",
        "0.025",
        "--titrated-ml",
        "201",
        "--at",
        AT,
        "--analyst",
        "J.V.",
        *extra,
    )


def test_winkler_saved_on_the_trip(data):
    out = ok_json(lab(*winkler_args("--json"), data_dir=data))
    # Standard Methods 4500-O C [from memory]: DO = V·N·8000 / (V_titrated (300 − 2)/300).
    expected = 12.1 * 0.025 * 8000 / (201 * 298 / 300)
    assert out["do_mg_l"] == pytest.approx(expected)
    assert out["original_sample_ml"] == pytest.approx(201 * 298 / 300)
    assert out["bottle_label"] == "TV-0701" and out["bottle_kind"] == "do-fixed" and out["site_id"] == "LK-04"
    assert all(w in out["caution"] for w in CAUTION_WORDS)
    assert out["revision"] == 2
    codes = [f["code"] for f in out["flags"]]
    # LK-04 meter read 12.9 mg/L (sample trip): beyond 0.5 mg/L (common practice) of the titration.
    assert "lab.meter_disagrees" in codes and "lab.duplicate_label" in codes
    trip = DeviceStore.open(data).load_trip(HOT)  # what the real store holds
    b = next(b for s in trip.stops for b in s.bottles if b.label == "TV-0701" and b.kind == "do-fixed")
    [r] = b.lab_results
    assert r.id == out["result"]["id"] and r.value == pytest.approx(expected)
    assert r.inputs["entered"]["titrant_ml"] == "12,1"  # kept as typed
    assert r.analyst == "J.V." and "4500-O C" in r.method
    assert "Winkler" in trip.audit[-1].change and trip.revision == 2


def test_winkler_table_shows_the_caution(data):
    r = lab(*winkler_args(), data_dir=data)
    assert r.returncode == 0, r.stderr
    assert all(w in r.stdout for w in CAUTION_WORDS)
    assert "mg/L" in r.stdout


def test_retitration_keeps_both_results(data):
    ok_json(lab(*winkler_args("--json"), data_dir=data))
    again = lab(*winkler_args(titrant="12.3"), data_dir=data)
    one_line_error(again, "--redo", "TV-0701", "already has")
    second = ok_json(lab(*winkler_args("--json", "--redo", "end point overshot", titrant="12.3"), data_dir=data))
    assert second["revision"] == 3 and len(second["superseded"]) == 1
    res = ok_json(lab("results", HOT[:8], "--json", data_dir=data))["results"]
    mine = [x for x in res if x["label"] == "TV-0701"]
    assert len(mine) == 2
    assert mine[0]["superseded_by"] == mine[1]["result_id"] == second["result"]["id"]
    assert mine[1]["superseded_by"] is None
    assert mine[0]["value"] == pytest.approx(12.1 * 0.025 * 8000 / (201 * 298 / 300))


def test_standardisation_as_normality_source(data):
    # Standard Methods 4500-O C [from memory]: N = 0.025 × 20.00 / V_titrant.
    out = ok_json(
        lab(
            "winkler",
            UPPER[:8],
            "TV-0721",
            "--titrant-ml",
            "8.0",
            "--std-titrant-ml",
            "19.8",
            "--standardised-at",
            "2026-06-30T08:00-07:00",
            "--titrated-ml",
            TITRATED_200,
            "--at",
            "2026-06-30T12:00-07:00",
            "--json",
            data_dir=data,
        )
    )
    n = 0.025 * 20.0 / 19.8
    assert out["normality"] == pytest.approx(n)
    assert out["do_mg_l"] == pytest.approx(8.0 * n * 8000 / 200.0)
    assert out["result"]["inputs"]["derived"]["normality_source"]["kind"] == "standardisation"


def test_holding_exceeded_marks_invalid(data):
    out = ok_json(
        lab(
            "winkler",
            HOT[:8],
            "TV-0701",
            "--titrant-ml",
            "12.9",
            "--normality",
            "0.025",
            "--titrated-ml",
            TITRATED_200,
            "--at",
            "2026-06-23T16:00-07:00",
            "--json",
            data_dir=data,
        )
    )
    # US 40 CFR 136.3 Table II [from memory]: 8 h from collection (07:25) → 15:25.
    assert "lab.holding_exceeded" in [f["code"] for f in out["flags"]] and out["valid"] is False


def test_pending_lists_and_then_drops_a_bottle(data):
    before = ok_json(lab("pending", "--json", "--now", "2026-06-23T12:00-07:00", data_dir=data))
    labels = [(b["label"], b["kind"]) for b in before["bottles"]]
    # At noon on 2026-06-23: TV-0701 (do-fixed, 8 h from collection at 07:25) is due first, then the two BOD bottles
    # (48 h from collection); later trips' bottles were not yet collected.
    assert labels == [("TV-0701", "do-fixed"), ("TV-0701", "bod"), ("TV-0703", "bod")]
    first = before["bottles"][0]
    assert first["deadline"].startswith("2026-06-23T15:25") and first["clock_from"] == "collection"
    assert first["remaining_s"] == pytest.approx(3 * 3600 + 25 * 60)
    # printed on the collection's clock, saying which (common practice: a time without its zone is
    # ambiguous once a record travels)
    text = lab("pending", "--now", "2026-06-23T12:00-07:00", data_dir=data).stdout
    assert "deadline 2026-06-23 15:25 UTC−07:00" in text
    ok_json(lab(*winkler_args("--json"), data_dir=data))
    after = ok_json(lab("pending", "--json", "--now", "2026-06-23T14:30-07:00", data_dir=data))
    assert ("TV-0701", "do-fixed") not in [(b["label"], b["kind"]) for b in after["bottles"]]
    r = lab("pending", "--now", "2026-06-23T12:00-07:00", data_dir=data)
    assert r.returncode == 0 and "TV-0701" in r.stdout and "left" in r.stdout


def test_pending_today_everything_expired(data):
    out = ok_json(lab("pending", "--json", data_dir=data))
    assert out["count"] == len(out["bottles"]) >= 4
    assert all(b["expired"] for b in out["bottles"])  # the sample trips are from June 2026
    assert all(b["label"] not in ("TV-0611", "TV-0612", "TV-0613", "TV-0614") for b in out["bottles"])


def test_bod_from_a_dilution_file(data, tmp_path):
    f = tmp_path / "dil.json"
    f.write_text(
        json.dumps(
            {
                "dilutions": [
                    {"initial_do_mg_l": 8.6, "final_do_mg_l": 4.1, "sample_ml": 30},
                    {"initial_do_mg_l": 8.7, "final_do_mg_l": 6.5, "sample_ml": 15},
                ]
            }
        )
    )
    out = ok_json(
        lab(
            "bod",
            HOT[:8],
            "TV-0703",
            "--dilutions",
            str(f),
            "--blank-depletion",
            "0.12",
            "--gga",
            "201",
            "--incubation-start",
            "2026-06-23T16:00-07:00",
            "--incubation-end",
            "2026-06-28T16:30-07:00",
            "--analyst",
            "R.O.",
            "--json",
            data_dir=data,
        )
    )
    # Standard Methods 5210 B [from memory]: (8.6 − 4.1)/(30/300) = 45, (8.7 − 6.5)/(15/300) = 44.
    assert out["bod_mg_l"] == pytest.approx(44.5) and out["valid"] is True
    assert out["result"]["analyte"] == "bod5" and "5210 B" in out["result"]["method"]
    assert not [f for f in out["flags"] if f["severity"] != "note"]
    assert out["result"]["inputs"]["derived"]["holding"]["limit_h"] == 48.0


def test_duplicates_rpd(data):
    dup = "7f3e9a12"
    ok_json(
        lab(
            "winkler",
            dup,
            "TV-0901",
            "--titrant-ml",
            "8.8",
            "--normality",
            "0.025",
            "--titrated-ml",
            TITRATED_200,
            "--at",
            "2026-07-07T11:00-07:00",
            "--json",
            data_dir=data,
        )
    )
    waiting = ok_json(lab("duplicates", dup, "--json", data_dir=data))
    assert [d["status"] for d in waiting["duplicates"]] == ["waiting"]
    ok_json(
        lab(
            "winkler",
            dup,
            "TV-0901D",
            "--titrant-ml",
            "9.4",
            "--normality",
            "0.025",
            "--titrated-ml",
            TITRATED_200,
            "--at",
            "2026-07-07T11:10-07:00",
            "--json",
            data_dir=data,
        )
    )
    out = ok_json(lab("duplicates", dup, "--json", data_dir=data))
    [d] = out["duplicates"]
    # RPD = |a − b| / mean × 100 (common practice): 0.6 / 9.1 × 100 = 6.6 %, inside 20 %; but 0.6 mg/L is
    # more than the 0.2 mg/L a field duplicate DO should agree within (common practice)
    assert d["rpd_percent"] == pytest.approx(0.6 / 9.1 * 100, rel=1e-6) and d["status"] == "disagrees"
    assert [f["code"] for f in d["flags"]] == ["lab.duplicate_difference"]
    strict = ok_json(lab("duplicates", dup, "--rpd-limit", "5", "--json", data_dir=data))
    assert strict["duplicates"][0]["status"] == "disagrees"
    assert "lab.duplicate_rpd" in [f["code"] for f in strict["duplicates"][0]["flags"]]
    r = lab("duplicates", dup, data_dir=data)
    assert r.returncode == 0 and "TV-0901D" in r.stdout and "RPD" in r.stdout


ERRORS = [
    (
        ("winkler", "00000000", "TV-0701", "--titrant-ml", "7", "--normality", "0.025", "--titrated-ml", "201"),
        ("TRIP_ID", "no such trip"),
    ),
    (
        ("winkler", HOT[:8], "TV-9999", "--titrant-ml", "7", "--normality", "0.025", "--titrated-ml", "201"),
        ("TV-9999", "TV-0701", "TV-0703"),
    ),
    (
        ("winkler", HOT[:8], "TV-0703", "--titrant-ml", "7", "--normality", "0.025", "--titrated-ml", "201"),
        ("TV-0703", "bod", "do-fixed or duplicate"),
    ),
    (winkler_args(titrant="abc"), ("--titrant-ml", "not a number", "0 to 100")),
    (winkler_args(titrant="7.3 L"), ("--titrant-ml", "unit", "mL")),
    (winkler_args(titrant="1,234"), ("--titrant-ml", "ambiguous")),
    (winkler_args(titrant="150"), ("--titrant-ml", "out of range", "0 to 100")),
    (
        ("winkler", HOT[:8], "TV-0701", "--titrant-ml", "7", "--normality", "2", "--titrated-ml", "201", "--at", AT),
        ("--normality", "usually 0.025"),
    ),
    (("winkler", HOT[:8], "TV-0701", "--titrant-ml", "7", "--titrated-ml", "201"), ("--normality", "is needed")),
    (
        (
            "winkler",
            HOT[:8],
            "TV-0701",
            "--titrant-ml",
            "7",
            "--normality",
            "0.025",
            "--std-titrant-ml",
            "20",
            "--titrated-ml",
            "201",
        ),
        ("--normality", "not both"),
    ),
    (
        (
            "winkler",
            HOT[:8],
            "TV-0701",
            "--titrant-ml",
            "7",
            "--normality",
            "0.025",
            "--titrated-ml",
            "400",
            "--at",
            AT,
        ),
        ("--titrated-ml", "bottle"),
    ),
    (
        (
            "winkler",
            HOT[:8],
            "TV-0701",
            "--titrant-ml",
            "7",
            "--normality",
            "0.025",
            "--titrated-ml",
            "201",
            "--at",
            "2026-06-23T14:00",
        ),
        ("--at", "time zone"),
    ),
    (
        (
            "winkler",
            HOT[:8],
            "TV-0701",
            "--titrant-ml",
            "7",
            "--normality",
            "0.025",
            "--titrated-ml",
            "201",
            "--at",
            "2099-01-01T00:00Z",
        ),
        ("--at", "future"),
    ),
    (
        (
            "winkler",
            HOT[:8],
            "TV-0701",
            "--titrant-ml",
            "7",
            "--normality",
            "0.025",
            "--titrated-ml",
            "201",
            "--at",
            "2026-06-23T06:00-07:00",
        ),
        ("--at", "before bottle TV-0701 was collected"),
    ),
    (winkler_args("--meter-tolerance", "9"), ("--meter-tolerance", "0 to 5")),
    (("bod", HOT[:8], "TV-0703", "--dilutions", "/nonexistent/dil.json"), ("--dilutions", "does not exist")),
    (("bod", UPPER[:8], "TV-0721", "--dilutions", "{DIL}"), ("TV-0721", "do-fixed", "bod or duplicate")),
    (
        ("bod", HOT[:8], "TV-0703", "--dilutions", "{DIL}", "--incubation-start", "2026-06-23T16:00-07:00"),
        ("--incubation-end", "go together"),
    ),
    (("bod", HOT[:8], "TV-0703", "--dilutions", "{BAD}"), ("--dilutions", "not valid JSON")),
    (("bod", HOT[:8], "TV-0703", "--dilutions", "{DIL}", "--gga", "lots"), ("--gga", "not a number")),
    (
        (
            "duplicates",
            "",
        ),
        ("TRIP_ID", "empty"),
    ),
    (("pending", "--now", "yesterday"), ("--now", "ISO 8601")),
]


@pytest.mark.parametrize(
    "args, words", ERRORS, ids=[" ".join(a[:1] + a[2:4]) + f"-{i}" for i, (a, _) in enumerate(ERRORS)]
)
def test_every_error_is_one_line_exit_2_and_nothing_is_saved(data, tmp_path, args, words):
    dil = tmp_path / "dil.json"
    dil.write_text(json.dumps([{"initial_do_mg_l": 8.6, "final_do_mg_l": 4.1, "sample_ml": 30}]))
    bad = tmp_path / "bad.json"
    bad.write_text("[{", encoding="utf-8")
    args = tuple(str(dil) if a == "{DIL}" else str(bad) if a == "{BAD}" else a for a in args)
    before = {p.name: p.read_bytes() for p in (data / "trips").glob("*.json")}
    one_line_error(lab(*args, data_dir=data), *words)
    after = {p.name: p.read_bytes() for p in (data / "trips").glob("*.json")}
    assert after == before


def test_help_lists_the_lab_commands():
    r = run_cli("lab", "--help")
    assert r.returncode == 0
    for name in ("pending", "winkler", "bod", "duplicates", "results"):
        assert name in r.stdout


@pytest.mark.parametrize("name", ["pending", "winkler", "bod", "duplicates", "results"])
def test_each_command_has_help(name):
    r = run_cli("lab", name, "--help")
    assert r.returncode == 0 and "--data-dir" in r.stdout and "Traceback" not in r.stderr


def test_results_of_a_trip_with_earlier_results(data):
    out = ok_json(lab("results", LOWER[:8], "--json", data_dir=data))
    assert {r["label"] for r in out["results"]} == {"TV-0611", "TV-0612", "TV-0613", "TV-0614"}
    # Earlier results (recorded before this command existed) block a silent second titration.
    r = lab(
        "winkler",
        LOWER[:8],
        "TV-0611",
        "--titrant-ml",
        "9.4",
        "--normality",
        "0.025",
        "--titrated-ml",
        "201",
        "--at",
        "2026-06-09T12:00-07:00",
        data_dir=data,
    )
    one_line_error(r, "--redo", "already has")


def test_program_settings_feed_the_checks(data):
    from core.records.models import ProgramSettings

    store = DeviceStore.open(data)
    # A stricter SOP holding time (4 h) and the lab's meter tolerance kept in the program's settings.
    store.save_settings(
        ProgramSettings(
            program="Tamsin Valley Stream Watch", holding_overrides_h={"do_winkler": 4.0}, lab_meter_tolerance_mg_l=1.0
        )
    )
    out = ok_json(lab(*winkler_args("--json"), data_dir=data))
    codes = [f["code"] for f in out["flags"]]
    assert "lab.holding_exceeded" in codes  # 6.5 h after collection > 4 h
    assert "lab.meter_disagrees" not in codes  # 0.78 mg/L within the program's 1.0
    assert out["result"]["inputs"]["derived"]["holding"]["limit_h"] == 4.0
    r = lab(*winkler_args("--meter-tolerance", "0.5", "--redo", "check"), data_dir=data)
    assert r.returncode == 0 and "lab.meter_disagrees" in r.stdout  # the option overrides the program


def test_bad_program_setting_is_one_line(data):
    from core.records.models import ProgramSettings

    DeviceStore.open(data).save_settings(ProgramSettings(lab_duplicate_rpd_percent=-3))
    one_line_error(lab("duplicates", HOT[:8], data_dir=data), "lab_duplicate_rpd_percent", "0 to 200")


def test_data_dir_that_is_a_file(tmp_path):
    f = tmp_path / "not-a-folder"
    f.write_text("x")
    one_line_error(lab("pending", data_dir=f), "--data-dir")


def test_expected_titrant_from_the_meter(data):
    out = ok_json(lab(*winkler_args("--json"), data_dir=data))
    # Inverse of the Winkler equation (Standard Methods 4500-O C, from memory): V = DO · V_orig / (N · 8000).
    expected = 12.9 * (201 * 298 / 300) / (0.025 * 8000)
    assert out["result"]["inputs"]["derived"]["titrant_ml_expected_from_meter"] == pytest.approx(expected)


def test_ambiguous_trip_prefix(data, tmp_path):
    doc = _dup_trip()
    doc["id"] = "7f3e9a12-ffff-4d5e-8f6a-1b2c3d4e5f61"  # same first 8 characters as the duplicate trip
    for s in doc["stops"]:
        for b in s["bottles"]:
            b["label"] += "X"
    f = tmp_path / "twin.json"
    f.write_text(json.dumps(doc), encoding="utf-8")
    assert run_cli("trip", "import", str(f), data_dir=data).returncode == 0
    one_line_error(lab("duplicates", "7f3e9a12", data_dir=data), "TRIP_ID", "matches 2 trips", "more characters")
    assert ok_json(lab("duplicates", "7f3e9a12-f", "--json", data_dir=data))["trip_id"] == doc["id"]


INTERNAL_NAMES = (
    "analysed_at",
    "standardised_at",
    "incubation_end",
    "titrated_ml",
    "bottle_ml",
    "reagents_ml",
    "_ml =",
)


@pytest.mark.parametrize(
    "args, option, words",
    [
        (
            (
                "winkler",
                HOT,
                "TV-0701",
                "--titrant-ml",
                "7.3",
                "--normality",
                "0.025",
                "--titrated-ml",
                "201",
                "--at",
                "2026-06-01T08:00-07:00",
            ),
            "--at 2026-06-01T08:00:00-07:00",
            "before bottle TV-0701 was collected",
        ),
        (
            (
                "winkler",
                HOT,
                "TV-0701",
                "--titrant-ml",
                "7.3",
                "--normality",
                "0.025",
                "--titrated-ml",
                "400",
                "--at",
                AT,
            ),
            "--titrated-ml 400",
            "(--bottle-ml 300)",
        ),
        (
            (
                "winkler",
                HOT,
                "TV-0701",
                "--titrant-ml",
                "7.3",
                "--std-titrant-ml",
                "20.1",
                "--standardised-at",
                "2026-06-24T08:00-07:00",
                "--titrated-ml",
                "201",
                "--at",
                AT,
            ),
            "--standardised-at 2026-06-24",
            "after the",
        ),
        (
            (
                "bod",
                HOT,
                "TV-0703",
                "--dilutions",
                "DIL",
                "--incubation-start",
                "2026-06-24T08:00-07:00",
                "--incubation-end",
                "2099-06-29T08:00-07:00",
            ),
            "--incubation-end 2099-06-29",
            "in the future",
        ),
    ],
)
def test_lab_refusals_name_the_option_never_an_internal_name(data, tmp_path, args, option, words):
    """A lab refusal names the option as typed (common practice for a command line), once, in one line."""
    dil = tmp_path / "dil.json"
    dil.write_text(json.dumps([{"initial_do_mg_l": 8.7, "final_do_mg_l": 4.1, "sample_ml": 60}]), encoding="utf-8")
    r = lab(*[str(dil) if a == "DIL" else a for a in args], data_dir=data)
    one_line_error(r)
    err = r.stderr.strip()
    assert err.startswith(f"streamtab: {option}") and words in err, err
    for name in INTERNAL_NAMES:
        assert name not in err, err
