"""The BOD bench sheet: CSV round trip, `lab bod --sheet` against Standard Methods arithmetic, the printed sheet."""

from __future__ import annotations

import pytest
from pypdf import PdfReader

from core.rules.bench import DILUTION, SEED_CONTROL, SheetError, read_bench_sheet, write_bench_sheet
from tests.lab.test_lab_cli import HOT, data, lab, ok_json, one_line_error, seeded  # noqa: F401

ROWS = [
    {
        "bottle": "TV-0703",
        "kind": DILUTION,
        "sample_ml": 150,
        "bottle_ml": 300,
        "initial_do_mg_l": 8.8,
        "final_do_mg_l": 4.3,
    },
    {
        "bottle": "TV-0703",
        "kind": DILUTION,
        "sample_ml": 100,
        "bottle_ml": 300,
        "initial_do_mg_l": 8.7,
        "final_do_mg_l": 5.7,
    },
    {
        "bottle": "TV-0703",
        "kind": DILUTION,
        "sample_ml": 50,
        "bottle_ml": 300,
        "initial_do_mg_l": 8.75,
        "final_do_mg_l": 7.9,
        "notes": "depletes too little",
    },
    {"bottle": "TV-0799", "kind": DILUTION, "sample_ml": 300, "initial_do_mg_l": 8.9, "final_do_mg_l": 8.1},
    {"kind": SEED_CONTROL, "seed_ml": 10, "initial_do_mg_l": 8.8, "final_do_mg_l": 4.8},
]


def test_a_sheet_written_reads_back_the_same():
    text = write_bench_sheet(ROWS)
    sheet = read_bench_sheet(text, bottle="tv-0703")
    assert sheet.dilutions == [
        {"initial_do_mg_l": 8.8, "final_do_mg_l": 4.3, "sample_ml": 150.0, "bottle_ml": 300.0},
        {"initial_do_mg_l": 8.7, "final_do_mg_l": 5.7, "sample_ml": 100.0, "bottle_ml": 300.0},
        {"initial_do_mg_l": 8.75, "final_do_mg_l": 7.9, "sample_ml": 50.0, "bottle_ml": 300.0},
    ]
    assert sheet.seed_controls == [{"initial_do_mg_l": 8.8, "final_do_mg_l": 4.8, "seed_ml": 10.0}]
    assert sheet.bottles == ["TV-0703", "TV-0799"]
    assert write_bench_sheet([{**r, "kind": r["kind"]} for r in ROWS]) == text
    assert len(read_bench_sheet(text).dilutions) == 4


def test_a_decimal_comma_and_unused_template_rows_are_fine():
    text = (
        "bottle,kind,sample_ml,bottle_ml,seed_ml,initial_do_mg_l,final_do_mg_l,notes\n"
        'TV-0703,dilution,150,300,,"8,8","4,3",\n'
        "TV-0703,dilution,,300,,,,\n"
    )
    sheet = read_bench_sheet(text, bottle="TV-0703")
    assert sheet.dilutions == [{"initial_do_mg_l": 8.8, "final_do_mg_l": 4.3, "sample_ml": 150.0, "bottle_ml": 300.0}]


@pytest.mark.parametrize(
    "text, words",
    [
        ("", ("empty",)),
        ("bottle,kind,sample_ml\n", ("initial_do_mg_l",)),
        ("kind,sample_ml,initial_do_mg_l,final_do_mg_l,colour\n", ("colour",)),
        ("kind,sample_ml,initial_do_mg_l,final_do_mg_l\nboiled,1,8,4\n", ("line 2", "kind")),
        ('kind,sample_ml,initial_do_mg_l,final_do_mg_l\ndilution,150,"1,234",4\n', ("line 2", "initial_do_mg_l")),
        ("kind,sample_ml,initial_do_mg_l,final_do_mg_l\ndilution,150,8.8,\n", ("line 2", "final_do_mg_l")),
        ("bottle,kind,sample_ml,initial_do_mg_l,final_do_mg_l\nTV-1,dilution,150,8.8,4\n", ("TV-0703", "TV-1")),
    ],
)
def test_a_bad_sheet_names_line_and_column(text, words):
    with pytest.raises(SheetError) as info:
        read_bench_sheet(text, bottle="TV-0703", name="sheet.csv")
    for w in words:
        assert w in str(info.value), (w, str(info.value))


def test_lab_bod_from_a_sheet_gives_the_standard_methods_result(data, tmp_path):  # noqa: F811
    f = tmp_path / "bench.csv"
    f.write_text(write_bench_sheet(ROWS[:3] + ROWS[3:4]), encoding="utf-8")
    out = ok_json(
        lab(
            "bod",
            HOT[:8],
            "TV-0703",
            "--sheet",
            str(f),
            "--blank-depletion",
            "0.12",
            "--gga",
            "201",
            "--incubation-start",
            "2026-06-23T16:00-07:00",
            "--incubation-end",
            "2026-06-28T16:30-07:00",
            "--json",
            data_dir=data,
        )
    )
    # Standard Methods 5210 B [from memory]: BOD5 = (D1 − D2) / P; (8.8 − 4.3)/(150/300) = 9.0,
    # (8.7 − 5.7)/(100/300) = 9.0; the 50 mL bottle depletes 0.85 < 2.0 mg/L and does not count.
    assert out["bod_mg_l"] == pytest.approx(9.0) and out["valid"] is True
    assert [d["valid"] for d in out["dilutions"]] == [True, True, False]
    assert out["result"]["inputs"]["entered"]["sheet_file"] == "bench.csv"


def test_lab_bod_needs_one_source_and_reports_a_bad_sheet_in_one_line(data, tmp_path):  # noqa: F811
    f = tmp_path / "bench.csv"
    f.write_text("kind,sample_ml,initial_do_mg_l,final_do_mg_l\ndilution,150,8.8,lots\n", encoding="utf-8")
    one_line_error(
        lab("bod", HOT[:8], "TV-0703", "--sheet", str(f), data_dir=data), "--sheet", "line 2", "final_do_mg_l"
    )
    one_line_error(lab("bod", HOT[:8], "TV-0703", data_dir=data), "--sheet", "--dilutions")
    results = ok_json(lab("results", HOT[:8], "--json", data_dir=data))["results"]
    assert not [r for r in results if r["label"] == "TV-0703"]


def test_lab_sheet_prints_a_blank_pdf_and_a_csv_template_that_reads_back(data, tmp_path):  # noqa: F811
    pdf = tmp_path / "bench.pdf"
    out = ok_json(lab("sheet", "--out", str(pdf), "--trip", HOT[:8], "--json", data_dir=data))
    assert "TV-0703" in out["bottles"]
    text = "\n".join(p.extract_text() for p in PdfReader(str(pdf)).pages)
    for word in (
        "initial_do_mg_l",
        "final_do_mg_l",
        "TV-0703",
        "seed control",
        "dilution-water blank",
        "glucose–glutamic acid",
        "198 ± 30.5 mg/L",
        "0.20 mg/L",
        "SOP",
    ):
        assert word in text, word
    csv_out = tmp_path / "bench.csv"
    ok_json(lab("sheet", "--out", str(csv_out), "--trip", HOT[:8], "--json", data_dir=data))
    filled = csv_out.read_text(encoding="utf-8").replace(
        "TV-0703,dilution,,300,,,,", "TV-0703,dilution,150,300,,8.8,4.3,", 1
    )
    assert read_bench_sheet(filled, bottle="TV-0703").dilutions[0]["sample_ml"] == 150.0
    one_line_error(lab("sheet", "--out", str(tmp_path / "x.txt"), data_dir=data), "--out", ".pdf")
