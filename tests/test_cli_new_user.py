"""A new user's mistakes on the command line: each is refused in one line (exit 2) that names what
the person typed — the option or the CSV column — and the accepted range or units, never an
internal name, and leaves nothing behind (common practice for CLIs; ranges from the science
modules' own tables)."""

from __future__ import annotations

import pytest

from tests.conftest import ROOT, run_cli

SAMPLES = ROOT / "sample_trips"
LOWER = "5d7c2b0e"  # sample trip of 2026-06-09 (invented)
HOT = "a41f6e2d"  # sample trip of 2026-06-23 (invented); TV-0703 a BOD bottle, TV-0701 a Winkler bottle
SHEET_HEAD = "bottle,kind,sample_ml,bottle_ml,seed_ml,initial_do_mg_l,final_do_mg_l,notes\n"
#: Names inside the code that a person never typed.
INTERNAL = (
    "titrant_ml =",
    "analysed_at",
    "dilutions[",
    "pressure_hpa",
    "percent_sat",
    "parse_",
    "Error)",
    "type accepted",
)


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    d = tmp_path_factory.mktemp("new-user") / "data"
    assert run_cli("sites", "import", str(SAMPLES / "sites.csv"), data_dir=d).returncode == 0
    for name in ("trip-2026-06-09-lower-watershed.json", "trip-2026-06-23-hot-afternoon.json"):
        r = run_cli("trip", "import", str(SAMPLES / name), data_dir=d)
        assert r.returncode == 0, r.stderr
    return d


def _refused(out) -> str:
    lines = out.stderr.strip().splitlines()
    assert out.returncode == 2, out.stderr
    assert len(lines) == 1 and "Traceback" not in out.stderr, out.stderr
    assert not [w for w in INTERNAL if w in lines[0]], lines[0]
    return lines[0]


def _sheet(tmp_path, rows: str):
    path = tmp_path / "sheet.csv"
    path.write_text(SHEET_HEAD + rows, encoding="utf-8")
    return str(path)


def test_a_winkler_volume_out_of_range_names_the_option(data):
    # Standard Methods 4500-O C: a 200 mL titration takes a few mL of 0.025 N titrant; 0–100 mL is the accepted range
    argv = ("lab", "winkler", HOT, "TV-0701", "--titrant-ml", "700", "--titrated-ml", "201", "--normality", "0.025")
    line = _refused(run_cli(*argv, data_dir=data))
    assert "--titrant-ml 700 is out of range; accepted: 0 to 100 mL" in line


@pytest.mark.parametrize(
    "rows, words",
    [
        # DO of a dilution: 0–70 mg/L (core.science.bod); a cell out of range names its line and column
        (
            "TV-0703,dilution,30,300,,8.6,4.1,\nTV-0703,dilution,60,300,,8.6,95,\n",
            ["line 3, column final_do_mg_l", "0 to 70 mg/L"],
        ),
        ("TV-0703,dilution,-30,300,,8.6,4.1,\n", ["line 2, column sample_ml", "above 0 to 2000 mL"]),
        ("TV-0703,dilution,30,300,,8.6,4.1,\n,seed control,,300,5000,8.6,4.1,\n", ["line 3, column seed_ml"]),
        # the sample and seed must fit in the bottle (Standard Methods 5210 B, 300 mL BOD bottles)
        ("TV-0703,dilution,400,300,,8.6,4.1,\n", ["line 2", "fit in the bottle"]),
    ],
)
def test_an_out_of_range_bench_sheet_cell_names_its_line_and_column(data, tmp_path, rows, words):
    line = _refused(run_cli("lab", "bod", HOT, "TV-0703", "--sheet", _sheet(tmp_path, rows), data_dir=data))
    assert line.startswith("streamtab: --sheet sheet.csv, line"), line
    assert all(w in line for w in words), line


def test_an_incubation_end_before_collection_names_incubation_end(data, tmp_path):
    sheet = _sheet(tmp_path, "TV-0703,dilution,30,300,,8.6,4.1,\n")
    argv = ("lab", "bod", HOT, "TV-0703", "--sheet", sheet, "--incubation-end", "2026-06-22T09:00-07:00")
    line = _refused(run_cli(*argv, data_dir=data))
    assert "--incubation-end 2026-06-22" in line and "after collection" in line


@pytest.mark.parametrize("option", ["--dilutions", "--sheet"])
def test_a_folder_given_for_a_file_is_named_in_words(data, tmp_path, option):
    line = _refused(run_cli("lab", "bod", HOT, "TV-0703", option, str(tmp_path), data_dir=data))
    assert f"{option} '{tmp_path}' is a folder; accepted:" in line


@pytest.mark.parametrize(
    "temp, words",
    [
        ("abc", ["--temp: “abc” is not a number", "°C, °F or K"]),
        ("", ["--temp is empty"]),
        ("65", ["--temp 65 °C", "°F"]),
    ],
)
def test_a_receipt_temperature_names_temp(data, temp, words):
    # −2 to 50 °C is the one table of limits for a water temperature (core.science.quantities)
    argv = ("custody", "add", LOWER, "--from", "J.V.", "--to", "Lab desk", "--lab", "--temp", temp)
    line = _refused(run_cli(*argv, data_dir=data))
    assert all(w in line for w in words), line
    assert "Temperature on receipt" not in line


def test_a_correction_names_value_and_the_column(data):
    argv = ("trip", "correct", LOWER, "--stop", "1", "--field", "water_temp_c", "--value", "65", "--reason", "typo")
    line = _refused(run_cli(*argv, "--by", "D.M.", data_dir=data))
    assert "--value for --field water_temp_c:" in line and "−2–50 °C" in line and "°F" in line


@pytest.mark.parametrize("fmt, name", [("json", "t.json"), ("csv", "tables")])
def test_a_trip_export_into_a_missing_folder_is_refused_and_creates_nothing(data, tmp_path, fmt, name):
    missing = tmp_path / "no-such-folder"
    argv = ("trip", "export", LOWER, "--format", fmt, "--out", str(missing / name))
    line = _refused(run_cli(*argv, data_dir=data))
    assert f"the folder '{missing}' does not exist" in line
    assert not missing.exists()


@pytest.mark.parametrize("timeout", ["0", "abc", "5 min", "601"])
def test_a_sync_timeout_names_its_range(data, tmp_path, timeout):
    hub = tmp_path / "hub"
    hub.mkdir()
    line = _refused(run_cli("sync", "push", "--to", str(hub), "--timeout", timeout, data_dir=data))
    assert "--timeout" in line and "above 0 to 600" in line


def test_a_pull_from_a_missing_hub_leaves_no_new_store(tmp_path):
    store = tmp_path / "office"
    line = _refused(run_cli("sync", "pull", "--from", str(tmp_path / "no-hub"), data_dir=store))
    assert "--from" in line and "does not exist" in line
    assert not store.exists()


def test_a_site_cell_that_is_not_a_number_reads_as_one_sentence(tmp_path):
    csv_file = tmp_path / "sites.csv"
    csv_file.write_text("site_id,name,elevation_m\nLK-01,Mill Ford,abc\n", encoding="utf-8")
    line = _refused(run_cli("sites", "import", str(csv_file), data_dir=tmp_path / "data"))
    assert "line 2, column elevation_m" in line and "is not a number; accepted:" in line


def test_a_correction_to_a_sea_level_pressure_is_saved_and_warned_about(data):
    # US Standard Atmosphere 1976: about 952 hPa at 520 m (LK-05 of the demo), so 1013.2 hPa there
    # is a sea-level-adjusted value; the correction is the office's call, the check says so at once.
    argv = ("trip", "correct", HOT, "--stop", "3", "--field", "station_pressure_hpa", "--value", "1013.2 hPa")
    out = run_cli(*argv, "--reason", "barometer re-read", "--by", "D.M.", data_dir=data)
    assert out.returncode == 0, out.stderr
    assert "LK-05" in out.stdout and "→ 1013.2 hPa" in out.stdout
    assert "pressure.sea_level_adjusted" in out.stdout and "520 m" in out.stdout


def test_a_correction_to_a_site_not_on_the_list_is_refused(data):
    # common practice: a stop belongs to a site of the program's list (the site's elevation and
    # criteria judge it); a mistyped code must not create a stop nobody can place
    argv = ("trip", "correct", LOWER, "--stop", "1", "--field", "site_id", "--value", "ZZ-9", "--reason", "moved")
    line = _refused(run_cli(*argv, "--by", "D.M.", data_dir=data))
    assert "--value for --field site_id" in line and "'ZZ-9' is not in the site list" in line and "LK-01" in line


def test_an_incubator_temperature_typed_in_fahrenheit_gets_the_hint(data, tmp_path):
    # Standard Methods 5210 B: incubate at 20 ± 1 °C [from memory]; 68 °F is that 20 °C (68 − 32) / 1.8
    dil = tmp_path / "dil.json"
    dil.write_text('[{"sample_ml": 30, "initial_do_mg_l": 8.6, "final_do_mg_l": 4.1}]', encoding="utf-8")
    argv = ("lab", "bod", HOT, "TV-0703", "--dilutions", str(dil), "--incubator-temp", "68")
    line = _refused(run_cli(*argv, data_dir=data))
    assert "--incubator-temp 68" in line and "°F" in line and "20.0 °C" in line


def test_an_archive_load_from_a_missing_hub_leaves_no_new_store(tmp_path):
    # common practice: as 'sync pull' does, a mistyped --from leaves nothing behind
    store = tmp_path / "office"
    line = _refused(
        run_cli(
            "archive", "load", "--from", str(tmp_path / "no-hub"), "--db", "postgresql://127.0.0.1:1/x", data_dir=store
        )
    )
    assert "--from" in line and "does not exist" in line
    assert not store.exists()


def test_salinity_of_nearly_pure_water_says_to_take_it_as_zero():
    # PSS-78 with the Hill et al. (1986) extension dips just below 0 under ~2–3 µS/cm (common practice: report 0)
    out = run_cli("salinity", "--conductivity", "1 uS/cm", "--temp", "15")
    assert out.returncode == 0 and "take it as 0" in out.stdout
    assert "take it as 0" not in run_cli("salinity", "--conductivity", "200 uS/cm", "--temp", "15").stdout


def test_a_correction_to_an_empty_site_names_the_option(data):
    argv = ("trip", "correct", LOWER, "--stop", "1", "--field", "site_id", "--value", "  ", "--reason", "moved")
    line = _refused(run_cli(*argv, "--by", "D.M.", data_dir=data))
    assert "--value for --field site_id" in line and "empty" in line
