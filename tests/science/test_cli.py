"""The science sub-commands: JSON fields (a contract), readable tables, and one-line exit-2 errors."""

from __future__ import annotations

import contextlib
import io
import json

import gsw
import pytest

from mobile.cli import main
from tests.conftest import run_cli


def run(*argv: str) -> tuple[int, str, str]:
    """Runs the real `streamtab` entry point in-process (same code path as the console script)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main(list(argv))
        except SystemExit as exc:  # argparse usage errors
            code = int(exc.code or 0)
    return code, out.getvalue(), err.getvalue()


def run_json(*argv: str) -> dict:
    code, out, err = run(*argv, "--json")
    assert code == 0, err
    return json.loads(out)


SAT_KEYS = {"do_sat_mg_l", "percent_saturation", "salinity", "pressure_hpa", "temp_c", "method", "flags"}


def test_sat_json_contract_and_values():
    # Benson & Krause (1984) / 4500-O:I: 20 °C, 1 atm (760 mmHg), S 0 -> 9.092 mg/L
    d = run_json("sat", "--temp", "20", "--pressure", "760 mmHg")
    assert set(d) >= SAT_KEYS
    assert d["do_sat_mg_l"] == pytest.approx(9.092, abs=0.002)
    assert d["percent_saturation"] is None and d["salinity"] == 0.0 and d["method"] == "benson-krause"
    # NIST SP 811: the conventional mmHg is 133.322387 Pa, so 760 mmHg = 1013.2501 hPa (1 torr = 1/760 atm exactly)
    assert d["pressure_hpa"] == pytest.approx(1013.25, abs=0.001) and d["temp_c"] == 20.0
    assert d["flags"] == []


def test_sat_with_do_conductivity_and_method():
    # source for the salinity: gsw.SP_from_C (TEOS-10); % = 100·DO/Cp (USGS NFM A6.2)
    d = run_json("sat", "--temp", "18.5", "--pressure", "752 mmHg", "--conductivity", "410 uS/cm", "--do", "8.4")
    assert d["salinity"] == pytest.approx(float(gsw.SP_from_C(0.41, 18.5, 0.0)), abs=1e-10)
    assert d["percent_saturation"] == pytest.approx(100 * 8.4 / d["do_sat_mg_l"])
    at25 = run_json("sat", "--temp", "18.5", "--pressure", "752 mmHg", "--conductivity", "0.41 mS/cm", "--at-25")
    assert at25["salinity"] == pytest.approx(float(gsw.SP_from_C(0.41, 25.0, 0.0)), abs=1e-10)
    gg = run_json("sat", "--temp", "20", "--pressure", "1013.25 hPa", "--method", "garcia-gordon")
    # gsw.O2sol_SP_pt(0, 20) = 284.625 µmol/kg × 0.99820 kg/L × 0.0319988 mg/µmol
    assert gg["method"] == "garcia-gordon" and gg["do_sat_mg_l"] == pytest.approx(9.0913, abs=0.001)


def test_sat_flags_in_json():
    d = run_json("sat", "--temp", "45", "--pressure", "29.92 inHg", "--elevation", "1200")
    codes = [f["code"] for f in d["flags"]]
    assert "temp.looks_fahrenheit" in codes and "pressure.sea_level_adjusted" in codes
    for f in d["flags"]:
        assert {"code", "severity", "message"} <= set(f)


def test_sat_table():
    code, out, _ = run("sat", "--temp", "18.5", "--pressure", "1002,3 hPa", "--salinity", "0.2", "--do", "8.4")
    assert code == 0 and "mg/L" in out and "hPa" in out and "%" in out


def test_salinity_contract():
    # UNESCO (1983) Tech. Pap. 44: R = 1 at 15 °C (IPTS-68) -> S = 35; 15 °C IPTS-68 = 14.9964 °C ITS-90
    d = run_json("salinity", "--conductivity", "42.914 mS/cm", "--temp", "14.9964")
    assert {"salinity", "specific_conductance_us_cm"} <= set(d)
    assert d["salinity"] == pytest.approx(35.0, abs=1e-4)
    # Standard Methods 2510 B linear law, α = 0.0191
    assert d["specific_conductance_us_cm"] == pytest.approx(42914 / (1 + 0.0191 * (14.9964 - 25)))


def test_winkler_contract():
    # Standard Methods 4500-O C: 1 mL of 0.025 N per 1 mg/L with 200 mL original sample
    d = run_json(
        "winkler",
        "--titrant-ml",
        "7.3",
        "--normality",
        "0.025",
        "--titrated-ml",
        str(200 * 300 / 298),
        "--reagents-ml",
        "2",
    )
    assert set(d) == {"do_mg_l", "original_sample_ml", "flags"} and d["flags"] == []
    assert d["do_mg_l"] == pytest.approx(7.3) and d["original_sample_ml"] == pytest.approx(200.0)
    code, out, _ = run("winkler", "--titrant-ml", "7.3", "--normality", "0.025", "--titrated-ml", "201")
    assert code == 0 and "Caution" in out and "SOP" in out


def test_bod_contract():
    # Standard Methods 5210 B: [(D1 − D2) − S·Vs]/P = (4.5 − 0.7)/0.1 = 38 mg/L
    d = run_json(
        "bod", "--initial", "8.6", "--final", "4.1", "--sample-ml", "30", "--seed-ml", "2", "--seed-uptake", "0.35"
    )
    assert {"bod_mg_l", "valid", "flags"} <= set(d)
    assert d["bod_mg_l"] == pytest.approx(38.0) and d["valid"] is True and d["flags"] == []
    bad = run_json("bod", "--initial", "8.6", "--final", "7.9", "--sample-ml", "30")
    assert bad["valid"] is False and bad["flags"][0]["code"] == "bod.depletion_too_small"


def test_bod_dilutions_file(tmp_path):
    # Standard Methods 5210 B: mean of the valid dilutions; S from seed controls (4.0 mg/L / 10 mL = 0.4)
    f = tmp_path / "d.json"
    f.write_text(
        json.dumps(
            {
                "seed_controls": [{"initial_do_mg_l": 8.7, "final_do_mg_l": 4.7, "seed_ml": 10.0}],
                "dilutions": [
                    {"initial_do_mg_l": 8.6, "final_do_mg_l": 7.9, "sample_ml": 10.0},
                    {"initial_do_mg_l": 8.6, "final_do_mg_l": 5.3, "sample_ml": 30.0, "seed_ml": 2.0},
                ],
            }
        )
    )
    d = run_json("bod", "--dilutions", str(f))
    assert d["valid"] is True and d["bod_mg_l"] == pytest.approx((3.3 - 0.8) / 0.1)
    assert [x["valid"] for x in d["dilutions"]] == [False, True]
    g = tmp_path / "list.json"
    g.write_text(json.dumps([{"initial_do_mg_l": 8.6, "final_do_mg_l": 8.0, "sample_ml": 300.0}]))
    d = run_json("bod", "--dilutions", str(g))
    assert d["bod_mg_l"] is None and d["valid"] is False
    # 5210 B [from memory]: undiluted and under 2.0 mg/L depletion -> "< 2.0 mg/L"
    assert d["report"] == {
        "value": 2.0,
        "qualifier": "<",
        "text": "< 2.0 mg/L",
        "basis": "below-bound",
        "analyte": "BOD5",
    }
    code, out, _ = run("bod", "--dilutions", str(g))
    assert code == 0 and "< 2.0 mg/L" in out


def test_bod_json_report_single_dilution():
    # 5210 B [from memory]: the only dilution ran out of oxygen -> "> (D1 − D2)/P" = > 8.4/0.1 = > 84.0
    d = run_json("bod", "--initial", "8.6", "--final", "0.2", "--sample-ml", "30")
    assert d["report"]["qualifier"] == ">" and d["report"]["text"] == "> 84.0 mg/L"
    assert "bod.reported_above_bound" in [f["code"] for f in d["flags"]]
    ok = run_json("bod", "--initial", "8.6", "--final", "4.1", "--sample-ml", "30", "--nitrification-inhibitor")
    assert ok["report"] == {
        "value": pytest.approx(45.0),
        "qualifier": None,
        "text": "45.0 mg/L",
        "basis": "single",
        "analyte": "CBOD5",
    }


SAT = ("sat", "--temp", "18.5", "--pressure", "752 mmHg")
WINK = ("winkler", "--titrant-ml", "7.3", "--normality", "0.025", "--titrated-ml", "201")
BOD = ("bod", "--initial", "8.6", "--final", "4.1", "--sample-ml", "30")

ERROR_CASES = [
    # (argv, words that must appear in the one line)
    (("sat", "--temp", "18.5", "--pressure", "752"), ["--pressure", "no unit", "mmHg", "inHg", "hPa"]),
    (("sat", "--temp", "18.5", "--pressure", "752 mm"), ["--pressure", "unknown unit"]),
    (("sat", "--temp", "18.5", "--pressure", ""), ["--pressure", "empty"]),
    (("sat", "--temp", "18.5", "--pressure", "-1 hPa"), ["--pressure", "400–1100 hPa"]),
    (("sat", "--temp", "18.5", "--pressure", "1600 hPa"), ["--pressure", "400–1100 hPa"]),
    (("sat", "--temp", "18.5", "--pressure", "1e9 hPa"), ["--pressure", "outside 400–1100 hPa"]),
    (("sat", "--temp", "", "--pressure", "752 mmHg"), ["--temp", "empty"]),
    (("sat", "--temp", "warm", "--pressure", "752 mmHg"), ["--temp", "not a number"]),
    (("sat", "--temp", "-60", "--pressure", "752 mmHg"), ["--temp", "−2–50 °C"]),
    (("sat", "--temp", "68", "--pressure", "752 mmHg"), ["--temp", "−2–50 °C", "°F"]),
    (("sat", "--temp", "18.5 X", "--pressure", "752 mmHg"), ["--temp", "unknown unit"]),
    (("sat", "--pressure", "752 mmHg"), ["--temp", "required"]),
    (("sat", "--temp", "18.5"), ["--pressure", "required"]),
    ((*SAT, "--salinity", "abc"), ["--salinity", "not a number"]),
    ((*SAT, "--salinity", "-1"), ["--salinity", "0–42"]),
    ((*SAT, "--salinity", "0.2 ppt"), ["--salinity", "unknown unit", "psu"]),
    ((*SAT, "--salinity", "0.2", "--conductivity", "410 uS/cm"), ["--conductivity", "--salinity"]),
    ((*SAT, "--conductivity", "410"), ["--conductivity", "no unit", "uS/cm"]),
    ((*SAT, "--conductivity", "410 ppm"), ["--conductivity", "unknown unit"]),
    ((*SAT, "--conductivity", "-4 uS/cm"), ["--conductivity", "0–100000 µS/cm"]),
    ((*SAT, "--at-25"), ["--at-25", "--conductivity"]),
    ((*SAT, "--conductivity", "290 mS/cm"), ["--conductivity", "0–100000 µS/cm"]),
    ((*SAT, "--do", "lots"), ["--do", "not a number"]),
    ((*SAT, "--do", "84 ppm"), ["--do", "unknown unit", "mg/L or %"]),
    ((*SAT, "--do", "99"), ["--do", "0–25 mg/L", "did you mean 99 %?"]),
    ((*SAT, "--do", "-1"), ["--do", "0–25 mg/L"]),
    ((*SAT, "--do", "600 %"), ["--do", "0–300 %"]),
    ((*SAT, "--method", "chlorinity"), ["--method", "benson-krause", "garcia-gordon"]),
    ((*SAT, "--elevation", "high"), ["--elevation", "not a number"]),
    ((*SAT, "--elevation", "20000"), ["--elevation", "−430–6000 m", "feet"]),
    ((*SAT, "--elevation", "20000 ft"), ["--elevation", "“20000 ft”", "6096 m"]),
    (("salinity", "--conductivity", "42.914", "--temp", "15"), ["--conductivity", "no unit"]),
    (("salinity", "--conductivity", "42.914 mS/cm", "--temp", "99"), ["--temp", "−2–50 °C"]),
    (("salinity", "--conductivity", "42.914 mS/cm", "--temp", "x"), ["--temp", "not a number"]),
    (
        ("salinity", "--conductivity", "42.914 mS/cm", "--temp", "15", "--pressure-dbar", "-5"),
        ["--pressure-dbar", "accepted"],
    ),
    (
        ("salinity", "--conductivity", "42.914 mS/cm", "--temp", "15", "--pressure-dbar", "deep"),
        ["--pressure-dbar", "not a number"],
    ),
    (("salinity", "--temp", "15"), ["--conductivity", "required"]),
    (
        ("winkler", "--titrant-ml", "x", "--normality", "0.025", "--titrated-ml", "201"),
        ["--titrant-ml", "not a number"],
    ),
    (("winkler", "--titrant-ml", "-1", "--normality", "0.025", "--titrated-ml", "201"), ["--titrant-ml", "accepted"]),
    (("winkler", "--titrant-ml", "7.3", "--normality", "0", "--titrated-ml", "201"), ["--normality", "accepted"]),
    (("winkler", "--titrant-ml", "7.3", "--normality", "0.025", "--titrated-ml", "400"), ["--titrated-ml", "bottle"]),
    ((*WINK, "--reagents-ml", "300"), ["--reagents-ml", "bottle"]),
    ((*WINK, "--bottle-ml", "0"), ["--bottle-ml", "accepted"]),
    (("winkler", "--normality", "0.025", "--titrated-ml", "201"), ["--titrant-ml", "required"]),
    (("bod", "--initial", "8.6", "--final", "4.1"), ["--sample-ml", "missing"]),
    (("bod",), ["--initial", "missing"]),
    (("bod", "--initial", "x", "--final", "4.1", "--sample-ml", "30"), ["--initial", "not a number"]),
    (("bod", "--initial", "-8.6", "--final", "4.1", "--sample-ml", "30"), ["--initial", "accepted"]),
    (("bod", "--initial", "8.6", "--final", "4.1", "--sample-ml", "400"), ["--sample-ml", "bottle"]),
    ((*BOD, "--seed-ml", "2"), ["--seed-ml", "--seed-uptake"]),
    ((*BOD, "--seed-uptake", "0.3"), ["--seed-ml", "--seed-uptake"]),
    ((*BOD, "--seed-ml", "2", "--seed-uptake", "0"), ["--seed-uptake", "accepted"]),
    ((*BOD, "--dilutions", "x.json"), ["--dilutions", "--initial"]),
    (("bod", "--dilutions", "/nonexistent/d.json"), ["--dilutions", "does not exist"]),
]


@pytest.mark.parametrize("argv, words", ERROR_CASES, ids=[" ".join(a)[:60] for a, _ in ERROR_CASES])
def test_every_error_is_one_line_exit_2(argv, words):
    code, out, err = run(*argv)
    assert code == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    for w in words:
        assert w in lines[0], lines[0]
    # the option as the person typed it, never core's variable names (issue 11)
    for name in (
        "temp_c",
        "pressure_hpa",
        "percent_sat",
        "do_mg_l",
        "do_percent",
        "elevation_m",
        "parse_",
        "conductivity_us_cm",
        "titrant_ml",
        "titrated_ml",
        "bottle_ml",
        "reagents_ml",
        "sample_ml",
        "seed_ml",
        "seed_uptake",
        "initial_do",
        "final_do",
        "pressure_dbar",
    ):
        assert name not in lines[0], lines[0]


@pytest.mark.parametrize(
    "content, words",
    [
        ("{not json", ["not valid JSON", "line 1"]),
        ("42", ["no list of dilutions"]),
        ('{"dilution": []}', ["unknown key", "dilution"]),
        ("[]", ["empty"]),
        ('[{"initial_do_mg_l": 8.6, "sample_ml": 30}]', ["dilutions[0]", "final_do_mg_l"]),
        ('[{"initial_do_mg_l": 8.6, "final_do_mg_l": 4.1, "sample_ml": 30, "temp": 20}]', ["unknown key", "temp"]),
        ('[{"initial_do_mg_l": "high", "final_do_mg_l": 4.1, "sample_ml": 30}]', ["initial_do_mg_l", "text"]),
        (
            '{"seed_controls": [{"initial_do_mg_l": 8.6, "final_do_mg_l": 8.4, "seed_ml": 3}], "dilutions": []}',
            ["seed_controls", "no seed control"],
        ),
    ],
)
def test_bad_dilutions_files(tmp_path, content, words):
    f = tmp_path / "d.json"
    f.write_text(content)
    code, out, err = run("bod", "--dilutions", str(f))
    assert code == 2 and out == "" and len(err.strip().splitlines()) == 1
    for w in words:
        assert w in err


def test_real_process_error_and_success():
    # the console entry point in a fresh interpreter, as a person runs it
    bad = run_cli("sat", "--temp", "18.5", "--pressure", "752")
    assert bad.returncode == 2 and len(bad.stderr.strip().splitlines()) == 1 and "Traceback" not in bad.stderr
    ok = run_cli("sat", "--temp", "20", "--pressure", "1013.25 hPa", "--json")
    assert ok.returncode == 0
    assert json.loads(ok.stdout)["do_sat_mg_l"] == pytest.approx(9.092, abs=0.002)  # 4500-O:I


@pytest.mark.parametrize("cmd", ["sat", "salinity", "winkler", "bod"])
def test_help(cmd):
    code, out, _ = run(cmd, "--help")
    assert code == 0 and "--json" in out


def test_top_level_help_prints_the_sat_line():
    # a "%" in an argparse help string is a format directive: it must be written "%%"
    code, out, _ = run("--help")
    assert code == 0
    line = next(x for x in out.splitlines() if x.strip().startswith("sat "))
    assert "DO saturation target and % saturation of a reading" in line


def test_elevation_in_feet_and_salinity_in_psu():
    # 1 ft = 0.3048 m (NIST SP 811): 3937 ft is 1200 m, where a 29.92 inHg reading is sea-level adjusted
    feet = run_json(
        "sat", "--temp", "20", "--pressure", "29.92 inHg", "--elevation", "3937 ft", "--salinity", "0.2 psu"
    )
    metres = run_json("sat", "--temp", "20", "--pressure", "29.92 inHg", "--elevation", "1200", "--salinity", "0.2")
    assert "pressure.sea_level_adjusted" in [f["code"] for f in feet["flags"]]
    assert feet["do_sat_mg_l"] == metres["do_sat_mg_l"] and feet["salinity"] == 0.2
