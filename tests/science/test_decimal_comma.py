"""A decimal comma is read as a decimal point, and "1,234" (decimal or thousands?) is refused,
in every parser and on the command line alike (common practice: never guess a separator)."""

import json
import subprocess
import sys

import pytest

from core.science._validate import ambiguous_comma, decimal
from core.science.quantities import read
from tests.conftest import ROOT, cli_env, run_cli


@pytest.mark.parametrize(
    "text, expected", [("3,5", 3.5), ("0,125", 0.125), ("1013,25", 1013.25), ("-2,5", -2.5), ("7.3", 7.3)]
)
def test_decimal_comma_reads_as_a_point(text, expected):
    assert not ambiguous_comma(text)
    assert decimal(text, "value") == pytest.approx(expected, abs=0)


@pytest.mark.parametrize("text", ["1,234", "12,500", "+3,000"])
def test_three_digits_after_a_comma_are_refused(text):
    assert ambiguous_comma(text)
    with pytest.raises(ValueError, match="ambiguous"):
        decimal(text, "value")


def test_parsers_refuse_the_ambiguous_comma_and_take_the_plain_one():
    # 1 atm = 1013.25 hPa (US Standard Atmosphere 1976)
    assert read("pressure", "1013,25 hPa", "p").value == pytest.approx(1013.25, abs=1e-9)
    with pytest.raises(ValueError, match="ambiguous"):
        read("pressure", "1,013 atm", "p")
    assert read("temp", "18,5", "t").value == pytest.approx(18.5, abs=1e-12)
    with pytest.raises(ValueError, match="ambiguous"):
        read("temp", "18,500", "t")
    assert read("conductivity", "0,41 mS/cm", "c").value == pytest.approx(410.0, abs=1e-9)
    with pytest.raises(ValueError, match="ambiguous"):
        read("conductivity", "1,620 mS/cm", "c")


def test_cli_refuses_an_ambiguous_comma_in_one_line():
    out = run_cli("winkler", "--titrant-ml", "1,234", "--normality", "0.025", "--titrated-ml", "201")
    assert out.returncode == 2
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and "--titrant-ml" in lines[0] and "ambiguous" in lines[0]


def test_cli_takes_a_decimal_comma():
    # 1 mL of 0.025 N thiosulfate per 1 mg/L for a 200 mL original sample (Standard Methods 4500-O C,
    # from memory): 7.3 mL titrant, 201 mL titrated of a 300 mL bottle with 2 mL of reagents
    out = run_cli("winkler", "--titrant-ml", "7,3", "--normality", "0,025", "--titrated-ml", "201", "--json")
    assert out.returncode == 0, out.stderr
    # DO = V·N·8000 / V_original, V_original = 201 × (300 − 2)/300 (Standard Methods 4500-O C, from memory)
    expected = 7.3 * 0.025 * 8000 / (201 * (300 - 2) / 300)
    assert json.loads(out.stdout)["do_mg_l"] == pytest.approx(expected, rel=1e-9)


def test_closed_output_pipe_gives_no_traceback():
    """`streamtab ... | head` (the reader gone before the output) ends quietly (common practice)."""
    proc = subprocess.Popen(
        [sys.executable, "-m", "mobile.cli", "sat", "--temp", "20", "--pressure", "1 atm"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env=cli_env(),
        cwd=ROOT,
    )
    proc.stdout.close()  # the reader goes away before the child writes
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 0
    assert b"Traceback" not in err
