"""The trip report as a PDF (fpdf2): field sheet, lab results, chain of custody with drawn signatures, a plot.

The content comes from :func:`core.rules.report.trip_report`; this module only lays it out. Text is
set in DejaVu Sans (shipped with matplotlib), so °, µ, ≤ and → print as they are.
"""

from __future__ import annotations

import io
from datetime import datetime
from pathlib import Path
from typing import Any

__all__ = ["render_trip_report", "Sheet", "draw_signature", "when"]

GREY_TEXT = (90, 90, 90)
RULE_GREY = (150, 150, 150)
HEAD_FILL = (225, 225, 225)


def _font_dir() -> Path:
    import matplotlib

    return Path(matplotlib.get_data_path()) / "fonts" / "ttf"


def when(t: datetime | None) -> str:
    """A time as printed: date, hour and minute in the zone it was recorded in, with that zone
    (``2026-06-09 07:40 UTC−07:00``, as the app and the command line show it)."""
    from core.records.messages import when_text

    return when_text(t)


def _hm(t: datetime | None) -> str:
    return "—" if t is None else f"{t:%m-%d %H:%M}"


class Sheet:
    """An fpdf2 document with our fonts, a running header and a numbered footer."""

    def __init__(self, title: str, subtitle: str, *, landscape: bool = True):
        from fpdf import FPDF

        sheet = self

        class _Doc(FPDF):
            def header(self) -> None:  # noqa: D401 - fpdf hook
                self.set_font("Sans", "B", 9)
                self.set_text_color(0, 0, 0)
                self.cell(0, 5, sheet.title, new_x="LMARGIN", new_y="NEXT")
                self.set_font("Sans", "", 7.5)
                self.set_text_color(*GREY_TEXT)
                self.cell(0, 4, sheet.subtitle, new_x="LMARGIN", new_y="NEXT")
                self.set_draw_color(*RULE_GREY)
                self.line(self.l_margin, self.get_y() + 1, self.w - self.r_margin, self.get_y() + 1)
                self.ln(4)
                self.set_text_color(0, 0, 0)

            def footer(self) -> None:  # noqa: D401 - fpdf hook
                self.set_y(-10)
                self.set_font("Sans", "", 7)
                self.set_text_color(*GREY_TEXT)
                self.cell(0, 5, sheet.footer_text, align="L")
                self.set_x(self.l_margin)
                self.cell(0, 5, f"page {self.page_no()} of {{nb}}", align="R")

        self.title = title
        self.subtitle = subtitle
        self.footer_text = ""
        self.pdf = _Doc(orientation="L" if landscape else "P", unit="mm", format="A4")
        fonts = _font_dir()
        self.pdf.add_font("Sans", "", str(fonts / "DejaVuSans.ttf"))
        self.pdf.add_font("Sans", "B", str(fonts / "DejaVuSans-Bold.ttf"))
        self.pdf.add_font("Sans", "I", str(fonts / "DejaVuSans-Oblique.ttf"))
        self.pdf.set_margins(12, 10, 12)
        self.pdf.set_auto_page_break(True, margin=14)
        self._body_top = 0.0
        self.pdf.set_title(title)
        self.pdf.set_creator("streamtab")

    # -- building blocks ------------------------------------------------------------------
    @property
    def width(self) -> float:
        return self.pdf.w - self.pdf.l_margin - self.pdf.r_margin

    def page(self) -> None:
        self.pdf.add_page()
        self._body_top = self.pdf.get_y()

    def keep_room(self, height: float) -> None:
        """Breaks the page when `height` mm do not fit above the bottom margin, unless the page
        is still empty (a block taller than a page starts where it is)."""
        pdf = self.pdf
        if pdf.get_y() + height > pdf.page_break_trigger and pdf.get_y() > self._body_top + 0.5:
            pdf.add_page()

    #: What a heading keeps on its page by default: a table's heading row and first rows, or the
    #: first lines of a paragraph (mm).
    KEEP_MM = 16.0

    def heading(self, text: str, size: float = 12, keep: float = KEEP_MM) -> None:
        """A heading that stays with what follows it: when the heading and the first `keep` mm of
        the block after it do not fit on this page, the page breaks before the heading."""
        pdf = self.pdf
        self.keep_room(1.5 + 7 + keep)
        pdf.ln(1.5)
        pdf.set_font("Sans", "B", size)
        pdf.cell(0, 7, text, new_x="LMARGIN", new_y="NEXT")
        pdf.set_font("Sans", "", 8.5)

    def para(self, text: str, size: float = 8.5, style: str = "", grey: bool = False, h: float = 4.2) -> None:
        pdf = self.pdf
        pdf.set_font("Sans", style, size)
        if grey:
            pdf.set_text_color(*GREY_TEXT)
        pdf.multi_cell(0, h, text, new_x="LMARGIN", new_y="NEXT")
        pdf.set_text_color(0, 0, 0)
        pdf.set_font("Sans", "", 8.5)

    def pairs(self, rows: list[tuple[str, str]], label_w: float = 48) -> None:
        pdf = self.pdf
        for label, value in rows:
            pdf.set_font("Sans", "B", 8.5)
            pdf.cell(label_w, 4.8, label)
            pdf.set_font("Sans", "", 8.5)
            pdf.multi_cell(0, 4.8, value, new_x="LMARGIN", new_y="NEXT")

    def table(
        self,
        headings: list[str],
        rows: list[list[str]],
        widths: list[float],
        *,
        size: float = 7.5,
        muted: set[int] | None = None,
        align: list[str] | None = None,
        row_h: float | None = None,
    ) -> None:
        """A ruled table; rows whose index is in `muted` print in grey italics (superseded results)."""
        from fpdf.fonts import FontFace

        pdf = self.pdf
        muted = muted or set()
        pdf.set_font("Sans", "", size)
        pdf.set_draw_color(*RULE_GREY)
        pdf.set_line_width(0.2)
        total = sum(widths)
        cols = tuple(w * self.width / total for w in widths)
        head = FontFace(emphasis="BOLD", fill_color=HEAD_FILL)
        with pdf.table(
            col_widths=cols,
            width=self.width,
            line_height=row_h or size * 0.5,
            headings_style=head,
            text_align=tuple(align) if align else "LEFT",
            borders_layout="HORIZONTAL_LINES",
            padding=(0.8, 1.0),
            repeat_headings=1,
        ) as t:
            r = t.row()
            for h in headings:
                r.cell(h)
            for i, row in enumerate(rows):
                style = FontFace(emphasis="ITALICS", color=(110, 110, 110)) if i in muted else None
                r = t.row(style=style)
                for c in row:
                    r.cell(c)
        pdf.ln(2)

    def output(self, path: Path | None = None) -> bytes:
        data = bytes(self.pdf.output())
        if path is not None:
            from core.store.atomic import write_export

            write_export(Path(path), data)
        return data


def draw_signature(pdf: Any, signature: Any, x: float, y: float, w: float, h: float) -> None:
    """Draws a signature's strokes as vector lines, fitted into the box (x, y, w, h) with its own shape."""
    aspect = float(signature.aspect)
    bw, bh = (w, w / aspect) if w / aspect <= h else (h * aspect, h)
    ox, oy = x + (w - bw) / 2, y + (h - bh) / 2
    pdf.set_draw_color(0, 0, 0)
    pdf.set_line_width(0.35)
    for stroke in signature.strokes:
        pts = [(ox + px * bw, oy + py * bh) for px, py in stroke]
        if len(pts) == 1:
            pts = [pts[0], (pts[0][0] + 0.2, pts[0][1])]
        if pts:
            pdf.polyline(pts)
    pdf.set_line_width(0.2)


def _flag_line(f: Any) -> str:
    from core.rules.report import finding_text

    return finding_text(f)


def render_trip_report(rep: Any, path: Path | None = None) -> bytes:
    """Lays out a :class:`core.rules.report.TripReport` as PDF bytes (and writes `path` atomically)."""
    from core.rules.report import analyte_text, bottle_names, kind_text, reported, typed
    from core.rules.review import describe as review_describe
    from mobile.paper.plots import figure_bytes, trip_do_figure

    trip = rep.trip
    rnd = rep.rounding
    title = f"Trip report — {trip.program or 'monitoring program'}"
    subtitle = (
        f"trip {trip.id} · revision {trip.revision} · started {when(trip.started_at)}"
        f" · printed {when(rep.generated_at)}"
    )
    sheet = Sheet(title, subtitle)
    review = review_describe(trip)
    # every page says the review state, so a page read on its own is never taken for a reviewed one
    sheet.footer_text = f"streamtab trip report · trip {trip.id[:8]} r{trip.revision} · review: {review}"
    pdf = sheet.pdf

    # -- page 1: the trip and its meter --------------------------------------------------------
    sheet.page()
    sheet.heading("Field sheet", 13)
    sheet.pairs(
        [
            ("Program", trip.program or "—"),
            ("Crew", ", ".join(trip.crew) or "—"),
            ("Trip", f"{when(trip.started_at)} to {when(trip.ended_at) if trip.ended_at else '(in progress)'}"),
            ("Meter", trip.meter_id or "—"),
            ("Device", trip.device_id or "—"),
            ("Status", trip.status),
            ("Review", review),
        ]
    )
    cal_rows = []
    for name, cal in rep.calibrations:
        if cal is None:
            cal_rows.append([name, "—", "not recorded", "", "", "", ""])
            continue
        verdict = {True: "accepted", False: "NOT accepted", None: "not assessed"}[cal.accepted]

        def mg(value: float | None, signed: bool = False) -> str:
            r = reported(value, "calibration_mg_l", rnd)
            if r is None:
                return "—"
            return f"{'+' if signed and r.number > 0 else ''}{r.text} mg/L"

        cal_rows.append(
            [
                name,
                when(cal.at),
                f"{typed(cal.temp)} / {typed(cal.pressure)}",
                mg(cal.reading_mg_l),
                mg(cal.target_mg_l),
                mg(cal.difference_mg_l, signed=True),
                verdict,
            ]
        )
    sheet.heading("Meter calibration", 10)
    sheet.table(
        [
            "check",
            "time",
            "temperature / pressure as entered",
            "meter reading",
            "target (air-saturated)",
            "difference",
            "verdict",
        ],
        cal_rows,
        [22, 28, 40, 20, 24, 18, 18],
    )
    if rep.trip_flags:
        for f in rep.trip_flags:
            sheet.para(_flag_line(f), size=8)

    fig = trip_do_figure(rep.plot)
    png = figure_bytes(fig, "png", dpi=200)
    fig_w_in, fig_h_in = fig.get_size_inches()
    # The plot takes the room left on this page when that keeps it readable (at least 60 % of full
    # width), else a page of its own; the heading, the plot and its caption stay together.
    caption_h, head_h = 10.0, 1.5 + 7
    room = pdf.page_break_trigger - pdf.get_y() - head_h - caption_h
    img_w = min(sheet.width * 0.8, room * fig_w_in / fig_h_in)
    if img_w < sheet.width * 0.6:
        img_w = sheet.width * 0.8
    sheet.heading("Dissolved oxygen by stop", 10, keep=img_w * fig_h_in / fig_w_in + caption_h)
    pdf.image(io.BytesIO(png), x=pdf.l_margin, w=img_w)
    sheet.para(
        "Solid line, filled circles: meter DO. Dashed line, open squares: the saturation target at each"
        " stop's temperature and pressure. Dotted line: the program's DO criterion for the site's water"
        " class. Open triangles: Winkler DO from the lab, results in use only (superseded and not valid"
        " results are left off the plot; the lab results table lists them).",
        size=7,
        grey=True,
    )

    # -- the stops --------------------------------------------------------------------------
    sheet.heading("Stops: readings as entered and what was derived", 11)
    rows = []
    for s in rep.stops:
        rows.append(
            [
                f"{s.stop.site_id}\n{s.site_name}",
                when(s.stop.arrived_at),
                s.temp_text,
                s.pressure_text,
                s.conductivity_text,
                s.do_text,
                s.shown["do_mg_l"],
                s.shown["do_sat_mg_l"],
                s.shown["percent_saturation"],
                s.shown["sc25"],
                "—" if s.criterion_mg_l is None else f"{s.criterion_mg_l:.{rnd.do_mg_l}f}",
                str(len(s.flags)),
            ]
        )
    sheet.table(
        [
            "site",
            "arrived",
            "water temp.",
            "station pressure",
            "conductivity",
            "meter DO",
            "DO, mg/L",
            "sat. target, mg/L",
            "saturation, %",
            "sp. cond. at 25 °C, µS/cm",
            "criterion, mg/L",
            "findings",
        ],
        rows,
        [26, 25, 19, 25, 22, 16, 12, 14, 19, 19, 15, 14],
    )
    sheet.heading("Findings at each stop", 10)
    any_flag = False
    for s in rep.stops:
        if not s.flags:
            continue
        any_flag = True
        sheet.para(f"{s.stop.site_id} ({when(s.stop.arrived_at)})", size=8.5, style="B")
        for f in s.flags:
            sheet.para("• " + _flag_line(f), size=8)
    if not any_flag:
        sheet.para("No findings at any stop.", size=8.5)
    notes = [(s.stop.site_id, s.stop.notes) for s in rep.stops if s.stop.notes.strip()]
    if notes or trip.notes.strip():
        sheet.heading("Notes", 10)
        if trip.notes.strip():
            sheet.para(f"Trip: {trip.notes.strip()}", size=8)
        for site, text in notes:
            sheet.para(f"{site}: {text.strip()}", size=8)

    # -- lab results --------------------------------------------------------------------------
    sheet.heading("Lab results", 11)
    rows, muted = [], set()
    for i, r in enumerate(rep.results):
        status = r.status if r.status != "superseded" else f"superseded by {(r.superseded_by or '')[:8]}"
        shown = r.reported if r.status != "superseded" else f"({r.reported})"
        if r.status == "superseded":
            muted.add(i)
        rows.append(
            [
                r.label,
                r.site_id,
                analyte_text(r.analyte),
                shown,
                status,
                r.holding,
                r.analyst or "—",
                when(r.analysed_at),
                r.method or "—",
                r.result_id[:8],
            ]
        )
    if rows:
        sheet.table(
            [
                "bottle",
                "site",
                "analyte",
                "reported",
                "status",
                "holding time",
                "analyst",
                "analysed",
                "method",
                "result",
            ],
            rows,
            [16, 11, 16, 18, 24, 18, 22, 27, 45, 12],
            muted=muted,
        )
        sheet.para(
            "Superseded results are kept for the record, in grey and in brackets; they are not live values."
            " A value with < or > is a bound reported as the method directs.",
            size=7,
            grey=True,
        )
    else:
        sheet.para("No lab results are recorded for this trip yet.")
    flagged = [r for r in rep.results if r.findings and r.status != "superseded"]
    if flagged:
        sheet.heading("Bench findings on results in use", 10)
        for r in flagged:
            sheet.para(
                f"{r.label} at {r.site_id}, {analyte_text(r.analyte)} {r.reported} ({r.status}):", size=8, style="B"
            )
            for line in r.findings:
                sheet.para("• " + line, size=8)

    # -- chain of custody -----------------------------------------------------------------------
    sheet.heading("Chain of custody", 11)
    rows = []
    for b in rep.bottles:
        rows.append(
            [
                b.bottle.label,
                kind_text(b.bottle.kind),
                b.stop.site_id,
                when(b.bottle.collected_at),
                when(b.bottle.fixed_at) if b.bottle.fixed_at else "—",
                b.bottle.preservation or "—",
                when(b.deadline) if b.deadline else "—",
                b.holding_rule,
                b.custody_status,
            ]
        )
    sheet.table(
        ["bottle", "kind", "site", "collected", "fixed", "preservation", "holding deadline", "holding time", "custody"],
        rows,
        [15, 22, 11, 26, 26, 36, 26, 24, 16],
    )
    sheet.heading("Hand-offs", 10)
    if not rep.handoffs:
        sheet.para("No hand-offs are recorded: the custody of these bottles is not documented in this record.")
    for h in rep.handoffs:
        _handoff_block(sheet, h)
    custody_flags = [
        (b, [f for f in b.custody_flags if f.code != "custody.unsigned"]) for b in rep.bottles if b.custody_flags
    ]
    custody_flags = [(b, fs) for b, fs in custody_flags if fs]
    if custody_flags:
        sheet.heading("Custody findings", 10)
        names = bottle_names(trip)
        for b, fs in custody_flags:
            # under each bottle by its name (with its site when a label repeats), so the findings of two
            # bottles that share a label stay apart
            sheet.para(f"{names.get(b.bottle.id, b.bottle.label)} ({kind_text(b.bottle.kind)}):", size=8, style="B")
            for f in fs:
                sheet.para("• " + _flag_line(f), size=8)

    # -- cautions and conventions ------------------------------------------------------------------
    sheet.heading("Cautions and reporting conventions", 10, keep=36)
    for c in rep.cautions:
        sheet.para(c, size=8)

    from core.rules.report import rounding_note

    sheet.para(
        "Values are shown rounded as the program's settings say ("
        + rounding_note(rnd).removeprefix("reported: ")
        + "). Stored values keep their full precision; readings are printed as they were typed.",
        size=7.5,
        grey=True,
    )
    return sheet.output(path)


def fmt(value: float | None, decimals: int, unit: str = "", *, signed: bool = False) -> str:
    if value is None:
        return "—"
    text = f"{value:+.{decimals}f}" if signed else f"{value:.{decimals}f}"
    return f"{text} {unit}".strip()


def _handoff_block(sheet: Sheet, h: Any) -> None:
    pdf = sheet.pdf
    rec = h.record
    block_h = 33
    sheet.keep_room(block_h + 2)
    x0, y0 = pdf.l_margin, pdf.get_y()
    pdf.set_draw_color(*RULE_GREY)
    pdf.rect(x0, y0, sheet.width, block_h - 2)
    pdf.set_xy(x0 + 2, y0 + 1.5)
    pdf.set_font("Sans", "B", 9)
    where = " — received at the lab" if rec.at_lab else ""
    pdf.cell(0, 5, f"{when(rec.at)}   {rec.relinquished_by} → {rec.received_by}{where}", new_x="LMARGIN", new_y="NEXT")
    pdf.set_x(x0 + 2)
    pdf.set_font("Sans", "", 8)
    details = [f"bottles: {', '.join(h.labels)}"]
    if rec.temp is not None or rec.at_lab:
        details.append(f"temperature on receipt: {h.temp_text}")
    if rec.condition:
        details.append(f"condition: {rec.condition}")
    pdf.multi_cell(
        sheet.width * 0.5,
        4,
        " · ".join(details) + (f"\nnotes: {rec.notes}" if rec.notes else ""),
        new_x="LMARGIN",
        new_y="NEXT",
    )
    box_w, box_h = 62, 15
    for i, (role, name, sig) in enumerate(
        (
            ("relinquished by", rec.relinquished_by, rec.relinquished_signature),
            ("received by", rec.received_by, rec.received_signature),
        )
    ):
        bx = x0 + sheet.width * 0.52 + i * (box_w + 6)
        by = y0 + 6.5
        pdf.set_draw_color(*RULE_GREY)
        pdf.line(bx, by + box_h, bx + box_w, by + box_h)
        if sig is not None:
            draw_signature(pdf, sig, bx + 1, by + 0.5, box_w - 2, box_h - 1.5)
        else:
            pdf.set_xy(bx, by + box_h / 2 - 2)
            pdf.set_font("Sans", "I", 8)
            pdf.set_text_color(*GREY_TEXT)
            pdf.cell(box_w, 4, "unsigned (typed name)", align="C")
            pdf.set_text_color(0, 0, 0)
        pdf.set_xy(bx, by + box_h + 0.5)
        pdf.set_font("Sans", "", 7)
        pdf.cell(box_w, 3.3, f"{role}: {name}", align="C")
        pdf.set_xy(bx, by + box_h + 3.8)
        pdf.set_text_color(*GREY_TEXT)
        pdf.cell(box_w, 3.3, f"signed {when(sig.signed_at)}" if sig is not None else "no signature", align="C")
        pdf.set_text_color(0, 0, 0)
    pdf.set_xy(x0, y0 + block_h)
    pdf.set_font("Sans", "", 8.5)
