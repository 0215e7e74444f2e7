"""The blank BOD bench sheet as a PDF: batch QC boxes and one ruled row per dilution, columns as the CSV."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

__all__ = ["render_bench_sheet"]


def render_bench_sheet(
    labels: list[str], *, rows: int, printed_at: datetime, program: str = "", path: Path | None = None
) -> bytes:
    """A printable bench sheet; `labels` pre-fill the bottle column (three dilution rows each)."""
    from core.rules.bench import DILUTION, SEED_CONTROL
    from core.science.bod import BLANK_MAX_DEPLETION_MG_L, GGA_RANGE_MG_L
    from core.science.winkler import SAFETY_NOTE
    from mobile.paper.report_pdf import Sheet, when

    gga_mid = (GGA_RANGE_MG_L[0] + GGA_RANGE_MG_L[1]) / 2
    gga_tol = (GGA_RANGE_MG_L[1] - GGA_RANGE_MG_L[0]) / 2
    sheet = Sheet(
        "BOD5 bench sheet — dilution method (Standard Methods 5210 B)",
        f"{program + ' · ' if program else ''}printed {when(printed_at)} · type it back with"
        " 'streamtab lab bod TRIP BOTTLE --sheet FILE.csv' (same columns)",
    )
    sheet.footer_text = "streamtab bench sheet"
    sheet.page()
    sheet.heading("Batch", 10)
    blank = "_" * 22
    sheet.table(
        ["batch", "analyst", "set up (date, time)", "read (date, time)", "incubator, °C (20 ± 1)"],
        [[blank, blank, blank, blank, blank]],
        [1, 1, 1, 1, 1],
        size=8,
    )
    sheet.table(
        ["QC check", "initial DO, mg/L", "final DO, mg/L", "result", "accepted when"],
        [
            ["dilution-water blank", "", "", "depletion:", f"depletion ≤ {BLANK_MAX_DEPLETION_MG_L:.2f} mg/L"],
            ["glucose–glutamic acid (GGA)", "", "", "BOD5:", f"{gga_mid:g} ± {gga_tol:g} mg/L"],
            [
                "thiosulfate standardisation",
                "titrant, mL:",
                "bi-iodate, mL / N:",
                "date:",
                "age shown in days; standardise daily",
            ],
        ],
        [3, 2, 2, 2, 3],
        size=8,
    )
    body = []
    for label in labels:
        for _ in range(3):
            body.append([label, DILUTION, "", "300", "", "", "", "", ""])
    body += [["", SEED_CONTROL, "", "300", "", "", "", "", ""] for _ in range(3)]
    body += [["", "", "", "300", "", "", "", "", ""] for _ in range(max(0, rows - len(body)))]
    sheet.heading("Dilutions (one row per bottle)", 10)
    sheet.table(
        # what each column holds, with its unit; under it the CSV column name it is typed back into
        [
            "bottle",
            "kind",
            "sample, mL\nsample_ml",
            "bottle, mL\nbottle_ml",
            "seed, mL\nseed_ml",
            "initial DO, mg/L\ninitial_do_mg_l",
            "final DO, mg/L\nfinal_do_mg_l",
            "depletion, mg/L\n≥ 2.0, left ≥ 1.0",
            "notes",
        ],
        body,
        [13, 11, 10, 10, 9, 13, 13, 16, 17],
        size=8.5,
        row_h=6.5,
    )
    sheet.para(
        "A dilution counts when it depletes at least 2.0 mg/L and leaves at least 1.0 mg/L"
        " (Standard Methods 5210 B). Volumes in mL and DO in mg/L as typed, to 0.01 mg/L; results are"
        " rounded only when reported (BOD5 to 0.1 mg/L unless the program says otherwise). The second"
        " line of a column heading is the CSV column it is typed into. " + SAFETY_NOTE + " The lab's SOP decides.",
        size=7.5,
        grey=True,
    )
    return sheet.output(path)
