"""Exchange and command line: JSON and CSV round trips, site lists with line-numbered errors,
`streamtab sites import` and `trip import|list|show|export` on the sample scenario."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest

from core.records.exchange import (
    BOTTLE_COLUMNS,
    STOP_COLUMNS,
    ExchangeError,
    export_trip_csv,
    export_trip_json,
    import_sites_csv,
    import_trip_file,
)
from core.store import DeviceStore
from tests.conftest import ROOT, run_cli
from tests.records.conftest import make_bottle, make_cal, make_stop, make_trip

SAMPLES = ROOT / "sample_trips"


def write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


# ---- JSON round trip ----------------------------------------------------------------------
def test_json_export_import_round_trip(store, tmp_path):
    trip = store.save_trip(make_trip([make_stop(bottles=[make_bottle("TV-1")])], pre_calibration=make_cal()), "x")
    data = export_trip_json(store, trip.id)
    path = tmp_path / "t.json"
    path.write_bytes(data)
    other = DeviceStore.open(tmp_path / "other", device_id="dev-b")
    other.save_sites(store.sites())
    outcome = import_trip_file(other, path)
    imported = outcome.trip
    assert outcome.result == "new"
    assert imported.stops == trip.stops and imported.pre_calibration == trip.pre_calibration
    assert json.loads(data)["id"] == trip.id
    # Importing the same file again changes nothing.
    again = import_trip_file(other, path)
    assert again.result == "unchanged" and again.trip.revision == imported.revision


def test_json_import_bad_json_names_file_and_line(store, tmp_path):
    p = write(tmp_path, "broken.json", '{\n  "id": "x",\n  "stops": [,]\n}')
    with pytest.raises(ExchangeError) as info:
        import_trip_file(store, p)
    assert str(info.value).startswith("broken.json, line 3 column")


def test_json_import_nan_refused(store, tmp_path):
    doc = make_trip([make_stop()]).to_document()
    text = json.dumps(doc).replace('"value": 18.5', '"value": NaN')
    with pytest.raises(ExchangeError) as info:
        import_trip_file(store, write(tmp_path, "nan.json", text))
    assert "nan.json" in str(info.value) and "NaN" in str(info.value)
    assert store.list_trips() == []


def test_json_import_bad_field_names_file_and_field(store, tmp_path):
    doc = make_trip([make_stop()]).to_document()
    doc["stops"][0]["temp"]["value"] = 64.0
    with pytest.raises(ExchangeError) as info:
        import_trip_file(store, write(tmp_path, "hot.json", json.dumps(doc)))
    msg = str(info.value)
    assert msg.startswith("hot.json: Stop 1: Water temperature 64 °C is outside") and "\n" not in msg
    assert store.list_trips() == []


# ---- CSV exports --------------------------------------------------------------------------
def test_csv_round_trip_values_and_units_in_headers(store):
    s1 = make_stop(
        temp="18,5",
        pressure="752 mmHg",
        cond="0.41 mS/cm",
        do="8.4",
        bottles=[make_bottle("TV-1"), make_bottle("TV-2", kind="blank")],
        notes='pool, "deep"',
    )
    trip = store.save_trip(make_trip([s1]), "x")
    files = export_trip_csv(store, trip.id, full_precision=True)  # rounding: tests/records/test_export_rounding.py
    assert set(files) == {"stops.csv", "bottles.csv"}
    stops = list(csv.DictReader(io.StringIO(files["stops.csv"])))
    bottles = list(csv.DictReader(io.StringIO(files["bottles.csv"])))
    assert tuple(stops[0]) == STOP_COLUMNS and tuple(bottles[0]) == BOTTLE_COLUMNS
    assert all(
        h.endswith(("_c", "_hpa", "_us_cm", "_mg_l", "_saturation", "_pss78"))
        or not h.startswith(("water_temp_c", "station_pressure_hpa"))
        for h in STOP_COLUMNS
    )
    row = stops[0]
    stored = store.load_trip(trip.id).stops[0]
    assert float(row["water_temp_c"]) == stored.temp.value and row["water_temp_as_typed"] == "18,5"
    assert float(row["station_pressure_hpa"]) == stored.pressure.value
    assert row["station_pressure_as_typed"] == "752 mmHg"
    assert float(row["do_sat_mg_l"]) == stored.derived.do_sat_mg_l
    assert row["notes"] == 'pool, "deep"'
    assert [b["bottle_id"] for b in bottles] == ["TV-1", "TV-2"]
    assert bottles[0]["bottle_uuid"] == stored.bottles[0].id


# ---- site lists ---------------------------------------------------------------------------
def test_sites_csv_import(store, tmp_path):
    p = write(tmp_path, "s.csv", 'site_id,name,elevation_m,water_class\nLK-07,Fern Steps,"301,5",cold\n')
    sites = import_sites_csv(store, p)
    assert sites[0].elevation_m == 301.5 and store.sites_by_id()["LK-07"].water_class == "cold"


@pytest.mark.parametrize(
    "text,expected",
    [
        ("site_id,name\nLK-1,A\n", "s.csv, line 1: missing column elevation_m"),
        ("site_id,name,elevation_m,elev\nLK-1,A,3,4\n", "s.csv, line 1: unknown column elev"),
        (
            "site_id,name,elevation_m\nLK-1,A,10\nLK-2,B,abc\n",
            "s.csv, line 3, column elevation_m: Elevation: “abc” is not a number",
        ),
        (
            "site_id,name,elevation_m\nLK-1,A,10\nLK-1,B,20\n",
            "s.csv, line 3: site LK-1 is listed twice (first on line 2)",
        ),
        ("site_id,name,elevation_m\nLK-1,A,\n", "s.csv, line 2, column elevation_m: Elevation is required"),
        (
            "site_id,name,elevation_m,water_class\nLK-1,A,10,tepid\n",
            "s.csv, line 2, column water_class: Water class: “tepid” is not one of",
        ),
        ("site_id,name,elevation_m\nLK-1,A,9000\n", "s.csv, line 2, column elevation_m: Elevation 9000 m is outside"),
        ("site_id,name,elevation_m\nLK-1,A,1,234\n", "s.csv, line 2: more values than columns"),
        ("site_id,name,elevation_m,min_do_mg_l\nLK-1,A,10,-3\n", "s.csv, line 2, column min_do_mg_l: "),
        ("site_id,name,elevation_m,latitude\nLK-1,A,10,95\n", "s.csv, line 2, column latitude: "),
        ("site_id,name,elevation_m\n,A,10\n", "s.csv, line 2, column site_id: "),
        ("site_id,name,elevation_m\nLK-1,,10\n", "s.csv, line 2, column name: "),
        ("site_id,name,elevation_m\n", "s.csv: no sites found"),
    ],
)
def test_sites_csv_errors_name_line_and_field(store, tmp_path, text, expected):
    before = store.sites()
    with pytest.raises(ExchangeError) as info:
        import_sites_csv(store, write(tmp_path, "s.csv", text))
    assert str(info.value).startswith(expected)
    assert store.sites() == before  # nothing half-imported


# ---- command line -------------------------------------------------------------------------
@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    r = run_cli("sites", "import", str(SAMPLES / "sites.csv"), data_dir=d)
    assert r.returncode == 0, r.stderr
    for f in sorted(SAMPLES.glob("trip-*.json")):
        r = run_cli("trip", "import", str(f), data_dir=d)
        assert r.returncode == 0, r.stderr
    return d


def test_cli_list_json(demo):
    r = run_cli("trip", "list", "--json", data_dir=demo)
    assert r.returncode == 0
    trips = json.loads(r.stdout)
    assert len(trips) == len(list(SAMPLES.glob("trip-*.json")))
    assert {"id", "program", "crew", "started_at", "revision", "status", "stop_count", "content_hash"} <= set(trips[0])


def test_cli_show_every_sample_with_saturation_and_flags(demo):
    trips = json.loads(run_cli("trip", "list", "--json", data_dir=demo).stdout)
    all_codes = set()
    for t in trips:
        r = run_cli("trip", "show", t["id"], "--json", data_dir=demo)
        assert r.returncode == 0, r.stderr
        data = json.loads(r.stdout)
        assert data["stops"] and all(s["derived"]["do_sat_mg_l"] > 0 for s in data["stops"])
        all_codes |= {f["code"] for s in data["stops"] for f in s["flags"]}
        all_codes |= {f["code"] for f in data["trip_flags"]}
        text = run_cli("trip", "show", t["id"][:8], data_dir=demo)
        assert text.returncode == 0 and "saturation" in text.stdout and "mg/L" in text.stdout
    # The scenario's problem trip sets off several rules.
    assert len(all_codes) >= 5


def test_cli_export_json_and_csv(demo, tmp_path):
    tid = json.loads(run_cli("trip", "list", "--json", data_dir=demo).stdout)[0]["id"]
    out = tmp_path / "t.json"
    r = run_cli("trip", "export", tid, "--format", "json", "--out", str(out), data_dir=demo)
    assert r.returncode == 0 and json.loads(out.read_text())["id"] == tid
    r = run_cli("trip", "export", tid, "--format", "csv", "--out", str(tmp_path), data_dir=demo)
    assert r.returncode == 0
    assert (tmp_path / "stops.csv").read_text().startswith("trip_id,stop_id,site_id")
    assert (tmp_path / "bottles.csv").exists()


def test_cli_bad_file_exit_2_one_line(demo, tmp_path):
    bad = write(tmp_path, "bad-trip.json", json.dumps({"schema_version": 2, "id": "x1", "started_at": "yesterday"}))
    r = run_cli("trip", "import", str(bad), data_dir=demo)
    assert r.returncode == 2
    line = r.stderr.strip()
    assert "\n" not in line and "bad-trip.json" in line and "Trip start time" in line
    assert "Traceback" not in r.stderr
    r = run_cli("sites", "import", str(write(tmp_path, "s.csv", "site_id,name,elevation_m\nA,B,x\n")), data_dir=demo)
    assert r.returncode == 2 and "s.csv, line 2" in r.stderr and "Elevation" in r.stderr


def test_cli_unknown_trip_exit_2(demo):
    r = run_cli("trip", "show", "zzzz", data_dir=demo)
    assert r.returncode == 2 and "no such trip" in r.stderr


def test_trip_id_must_be_safe_for_a_file_name(store, tmp_path):
    doc = make_trip().to_document()
    doc["id"] = "../../etc/x"
    with pytest.raises(ExchangeError) as info:
        import_trip_file(store, write(tmp_path, "evil.json", json.dumps(doc)))
    assert "evil.json: ID" in str(info.value) and "letters, digits" in str(info.value)
    assert store.list_trips() == []


def test_import_of_a_folder_is_a_clear_error(store, tmp_path):
    with pytest.raises(ExchangeError) as info:
        import_trip_file(store, tmp_path)
    assert "cannot be read" in str(info.value)


def test_cli_list_names_quarantined_files(tmp_path):
    d = tmp_path / "store"
    store = DeviceStore.open(d)
    trip = store.save_trip(make_trip([make_stop()]), "x")
    (d / "trips" / f"{trip.id}.json").write_bytes(b"{broken")
    r = run_cli("trip", "list", "--json", data_dir=d)
    assert r.returncode == 0 and json.loads(r.stdout) == []
    assert "unreadable file" in r.stderr and f"{trip.id}.json" in r.stderr


def test_cli_show_lists_open_conflicts(tmp_path):
    d = tmp_path / "store"
    store = DeviceStore.open(d)
    doc = make_trip([make_stop()]).to_document()
    doc["conflicts"] = [
        {
            "path": "notes",
            "detected_at": "2026-06-14T18:00:00Z",
            "sides": [{"device_id": "tablet-a", "value": "riffle"}, {"device_id": "tablet-b", "value": "pool"}],
        }
    ]
    trip = store.put_document(doc, "merged", expected_revision=None)
    r = run_cli("trip", "show", trip.id, data_dir=d)
    assert r.returncode == 0 and "needs attention" in r.stdout
    # in words: the values and the field's label, never a device id or a record path
    line = next(x for x in r.stdout.splitlines() if "[needs attention]" in x)
    assert "“riffle”" in line and "“pool”" in line and "Notes" in line
    assert "tablet-b" not in r.stdout and "'path'" not in r.stdout


def test_csv_to_a_closed_pipe_ends_quietly(store):
    """`trip export --format csv | head` whose reader has gone: exit 0, no message about --out (common practice)."""
    import os
    import subprocess
    import sys

    from tests.conftest import cli_env

    trip = store.save_trip(make_trip([make_stop()]), "x")
    read_end, write_end = os.pipe()
    os.close(read_end)  # the reader stopped before anything was written
    try:
        r = subprocess.run(
            [sys.executable, "-m", "mobile.cli", "trip", "export", trip.id, "--format", "csv"]
            + ["--data-dir", str(store.data_dir)],
            stdout=write_end,
            stderr=subprocess.PIPE,
            text=True,
            env=cli_env(),
            cwd=ROOT,
            timeout=120,
            check=False,
        )
    finally:
        os.close(write_end)
    assert r.returncode == 0, r.stderr
    assert "--out" not in r.stderr and "None" not in r.stderr and "Traceback" not in r.stderr, r.stderr
