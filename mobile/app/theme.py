"""The touch app's look: a high-contrast palette readable in sun, sizes for wet gloves (pure, no kivy).

Dark ink on white paper gives the most contrast outdoors; colour never carries meaning alone —
every state also has a word and a symbol (see SEVERITY_MARKS).
"""

from __future__ import annotations

__all__ = ["PALETTE", "SIZES", "SEVERITY_MARKS", "severity_mark", "rgba"]


def rgba(hex_code: str, alpha: float = 1.0) -> tuple[float, float, float, float]:
    h = hex_code.lstrip("#")
    return (int(h[0:2], 16) / 255, int(h[2:4], 16) / 255, int(h[4:6], 16) / 255, alpha)


# Contrast against paper (#FFFFFF) is >= 7:1 for every text colour here (WCAG AAA for body text).
PALETTE = {
    "paper": "#FFFFFF",
    "ink": "#0E1116",
    "muted_ink": "#2F3540",  # secondary text, still >= 10:1 on paper
    "panel": "#EDF0F3",
    "rule": "#0E1116",
    "bar": "#0E1116",  # title bar: white on near-black
    "bar_ink": "#FFFFFF",
    "action": "#063F73",  # main buttons: white on deep blue (10.6:1)
    "action_ink": "#FFFFFF",
    "quiet": "#D5DBE2",  # secondary buttons: ink on light grey
    "chosen": "#0E1116",  # the chosen unit in a toggle row: white on ink
    "note_bg": "#E6EEF7",
    "warn_bg": "#FFF1C2",
    "stop_bg": "#FFD9D6",
    "pass_bg": "#DDF2DF",
    "fail_bg": "#FFD9D6",
    "field_bg": "#FFFFFF",
    "field_border": "#0E1116",
    "focus_border": "#063F73",
    "refusal_ink": "#7A0B00",  # 9.6:1 on paper
    "progress": "#8FCF9C",  # sync progress fill; ink on it is about 11:1
}

SIZES = {
    "touch_dp": 56,  # every button and field at least this tall (>= 48 dp rule)
    "value_sp": 24,  # typed values
    "label_sp": 18,  # field labels and body text (>= 18 sp rule)
    "result_sp": 34,  # the saturation figures
    "title_sp": 22,
    "gap_dp": 10,
}

# (symbol, word) per flag severity — shown together with the message, never colour alone.
SEVERITY_MARKS = {
    "note": ("●", "NOTE"),
    "warning": ("▲", "WARNING"),
    "stop-and-check": ("■", "STOP AND CHECK"),
}


def severity_mark(severity: str) -> tuple[str, str]:
    return SEVERITY_MARKS.get(str(severity), ("●", str(severity).upper()))
