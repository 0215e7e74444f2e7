"""QC flags: a code, a severity, a message and the action a technician can take."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from enum import Enum

__all__ = ["Severity", "Flag"]


class Severity(str, Enum):
    """How hard a flag asks for attention, mildest first."""

    NOTE = "note"
    WARNING = "warning"
    STOP = "stop-and-check"

    @property
    def rank(self) -> int:
        return {"note": 0, "warning": 1, "stop-and-check": 2}[self.value]


@dataclass(frozen=True)
class Flag:
    """One finding about a value or record.

    `code` is stable (other tools read it, e.g. ``"pressure.sea_level_adjusted"``); `message` says
    what was found in one sentence; `action` says what to do about it.
    """

    code: str
    severity: Severity
    message: str
    action: str = ""
    field: str | None = None

    def to_dict(self) -> dict:
        d = asdict(self)
        d["severity"] = self.severity.value
        return d
