"""The device store's errors: one root, :class:`StoreError`, whose str() is a sentence a person can act on.

This module imports nothing of the store, so the records' migrations can raise these errors
without importing the store (the store imports the migrations).
"""

from __future__ import annotations

from pathlib import Path

from core.records.messages import Problem
from core.records.models import SCHEMA_VERSION

__all__ = [
    "ApprovedTrip",
    "CorruptFile",
    "InvalidRecord",
    "NewerSchemaError",
    "StaleTrip",
    "StoreError",
    "StoreLocked",
    "StoreWriteError",
    "TripNotFound",
]


class StoreError(Exception):
    """Root of every device-store error; str() is one sentence a person can act on."""


class StoreLocked(StoreError):
    """Another process (the app, a command-line sync) holds the store's lock for too long."""


class NewerSchemaError(StoreError):
    """A document written by a newer build than this one; it is left untouched."""

    def __init__(self, message: str, found: int | None = None, known: int = SCHEMA_VERSION):
        super().__init__(message)
        self.found = found
        self.known = known


class TripNotFound(StoreError):
    """No trip with that id on this device."""


class InvalidRecord(StoreError):
    """A record failed validation; `problems` holds every finding (code, field, label, message)."""

    def __init__(self, message: str, problems: list[Problem] | None = None):
        super().__init__(message)
        self.problems = list(problems or [])


class StoreWriteError(StoreError):
    """The disk refused a write (full, read-only, removed); the stored file is unchanged."""


class ApprovedTrip(StoreError):
    """An edit of an approved trip that is not a correction (core.rules.review.check_change)."""


class StaleTrip(StoreError):
    """The trip was changed (by another save or a sync) since this copy was loaded."""


class CorruptFile(StoreError):
    """A stored file could not be read; it was moved to quarantine (see `path`)."""

    def __init__(self, message: str, path: Path | None = None):
        super().__init__(message)
        self.path = path
