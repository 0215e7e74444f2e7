"""DO plots that read in grey scale: series told apart by line style and marker shape, not colour."""

from __future__ import annotations

import io
from datetime import datetime
from typing import Any

__all__ = ["STYLES", "trip_do_figure", "site_season_figure", "figure_bytes"]

#: One style per series, distinct in line style AND marker so a black-and-white copy still reads.
STYLES: dict[str, dict[str, Any]] = {
    "meter": dict(color="black", linestyle="-", marker="o", markersize=6, linewidth=1.6, label="meter DO (mg/L)"),
    "target": dict(
        color="0.45",
        linestyle="--",
        marker="s",
        markersize=5,
        markerfacecolor="white",
        linewidth=1.4,
        label="saturation target (mg/L)",
    ),
    "criterion": dict(color="black", linestyle=":", marker="", linewidth=1.8, label="DO criterion (mg/L)"),
    "winkler": dict(
        color="black",
        linestyle="none",
        marker="^",
        markersize=8,
        markerfacecolor="white",
        markeredgewidth=1.4,
        label="Winkler DO, lab (mg/L)",
    ),
    "percent": dict(
        color="0.3",
        linestyle="-.",
        marker="D",
        markersize=4,
        markerfacecolor="white",
        linewidth=1.2,
        label="% saturation",
    ),
    "supersat": dict(
        color="0.3", linestyle=(0, (1, 3)), marker="", linewidth=1.2, label="supersaturation threshold (%)"
    ),
}


def _figure(width_in: float, height_in: float):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), dpi=100, layout="constrained")


def _legend(ax) -> None:  # noqa: ANN001
    """The legend beside the axes, on the right, where it can never cover a point or a line."""
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0, fontsize=8, frameon=True)


def trip_do_figure(points: list[Any], *, title: str = ""):
    """Measured DO, the saturation target and the criterion by stop (route order), Winkler beside them.

    `points` are :class:`core.rules.report.PlotPoint`. Returns a matplotlib Figure.
    """
    fig = _figure(9.5, 3.6)
    ax = fig.add_subplot()
    xs = list(range(len(points)))
    labels = [p.site_id for p in points]
    ax.plot(xs, [p.do_mg_l if p.do_mg_l is not None else float("nan") for p in points], **STYLES["meter"])
    ax.plot(xs, [p.do_sat_mg_l if p.do_sat_mg_l is not None else float("nan") for p in points], **STYLES["target"])
    crit = [p.criterion_mg_l if p.criterion_mg_l is not None else float("nan") for p in points]
    if any(c == c for c in crit):
        # one level per stop, across the stop's width, so a single stop still shows its criterion
        style = {k: v for k, v in STYLES["criterion"].items() if not k.startswith("marker")}
        ax.stairs(crit, [x - 0.5 for x in xs] + [len(xs) - 0.5], baseline=None, **style)
    wx = [x for x, p in zip(xs, points, strict=True) for _ in p.winkler_mg_l]
    wy = [v for p in points for v in p.winkler_mg_l]
    if wy:
        ax.plot(wx, wy, **STYLES["winkler"])
    ax.set_xticks(xs, labels)
    ax.set_xlabel("stop (route order)")
    ax.set_ylabel("dissolved oxygen, mg/L")
    ax.set_xlim(-0.5, max(len(xs) - 0.5, 0.5))
    shown = [v for p in points for v in (p.do_mg_l, p.do_sat_mg_l, p.criterion_mg_l, *p.winkler_mg_l) if v is not None]
    ax.set_ylim(0, max(shown, default=10.0) * 1.08)  # room above the highest point, never clipped
    ax.grid(True, color="0.85", linewidth=0.6)
    _legend(ax)
    if title:
        ax.set_title(title, fontsize=10)
    return fig


def site_season_figure(
    rows: list[dict[str, Any]],
    *,
    site_id: str,
    site_name: str = "",
    criterion_mg_l: float | None = None,
    supersat_percent: float | None = None,
):
    """DO (mg/L) and % saturation over a season at one site, criterion lines, Winkler points.

    `rows` are dicts with ``at`` (datetime), ``do_mg_l``, ``percent_saturation``, ``winkler_mg_l``
    (a list). Two stacked axes sharing the time axis.
    """
    fig = _figure(9.5, 6.0)
    ax, ax2 = fig.subplots(2, 1, sharex=True)
    rows = sorted(rows, key=lambda r: r["at"])
    ts: list[datetime] = [r["at"] for r in rows]
    ax.plot(ts, [r["do_mg_l"] if r["do_mg_l"] is not None else float("nan") for r in rows], **STYLES["meter"])
    wx = [r["at"] for r in rows for _ in r["winkler_mg_l"]]
    wy = [v for r in rows for v in r["winkler_mg_l"]]
    if wy:
        ax.plot(wx, wy, **STYLES["winkler"])
    if criterion_mg_l is not None:
        ax.axhline(criterion_mg_l, **STYLES["criterion"])
    ax.set_ylabel("DO, mg/L")
    ax.set_ylim(bottom=0)
    ax.grid(True, color="0.85", linewidth=0.6)
    _legend(ax)
    ax.set_title(f"{site_id} {site_name}".strip() + " — dissolved oxygen over the season", fontsize=10)
    ax2.plot(
        ts,
        [r["percent_saturation"] if r["percent_saturation"] is not None else float("nan") for r in rows],
        **STYLES["percent"],
    )
    if supersat_percent is not None:
        ax2.axhline(supersat_percent, **STYLES["supersat"])
    ax2.set_ylabel("% saturation")
    ax2.grid(True, color="0.85", linewidth=0.6)
    _legend(ax2)
    # dates in the zone of the visits (the first one's offset), and the axis says which zone
    from matplotlib.dates import AutoDateLocator, DateFormatter

    from core.records.messages import offset_text

    zone = ts[0].tzinfo if ts and ts[0].utcoffset() is not None else None
    ax2.xaxis.set_major_locator(AutoDateLocator(tz=zone))
    ax2.xaxis.set_major_formatter(DateFormatter("%Y-%m-%d", tz=zone))
    ax2.set_xlabel(f"date ({offset_text(ts[0])})" if zone is not None else "date")
    fig.autofmt_xdate()
    return fig


def figure_bytes(fig, fmt: str, dpi: int = 200) -> bytes:
    """The figure written as PNG or PDF bytes."""
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=dpi, metadata={"Creator": "streamtab"} if fmt == "pdf" else None)
    return buf.getvalue()
