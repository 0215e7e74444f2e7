"""The device store: one small file per trip, atomic writes, a checked summary index, the audit.

The package's parts: ``errors`` (the StoreError tree, importable without the store), ``atomic``
(crash-safe writes), ``quarantine``, ``storage`` (TinyDB storage), ``trips`` (the trip files),
``index`` (the summaries), ``audit``, ``tables`` (sites and settings) and ``device`` (the
:class:`DeviceStore` with its one save path). Names are loaded on first use, so importing
``core.store.errors`` does not import the store.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__all__ = [
    "ApprovedTrip",
    "AtomicJSONStorage",
    "CorruptFile",
    "DeviceStore",
    "InvalidRecord",
    "MergeOutcome",
    "NewerSchemaError",
    "StaleTrip",
    "StoreError",
    "StoreLocked",
    "StoreWriteError",
    "TripNotFound",
    "TripSummary",
    "diff_paths",
]

_WHERE = {
    "AtomicJSONStorage": "core.store.storage",
    "DeviceStore": "core.store.device",
    "MergeOutcome": "core.store.device",
    "TripSummary": "core.store.index",
    "diff_paths": "core.store.audit",
    **dict.fromkeys(
        (
            "ApprovedTrip",
            "CorruptFile",
            "InvalidRecord",
            "NewerSchemaError",
            "StaleTrip",
            "StoreError",
            "StoreLocked",
            "StoreWriteError",
            "TripNotFound",
        ),
        "core.store.errors",
    ),
}

if TYPE_CHECKING:  # pragma: no cover
    from core.store.audit import diff_paths
    from core.store.device import DeviceStore, MergeOutcome
    from core.store.errors import (
        ApprovedTrip,
        CorruptFile,
        InvalidRecord,
        NewerSchemaError,
        StaleTrip,
        StoreError,
        StoreLocked,
        StoreWriteError,
        TripNotFound,
    )
    from core.store.index import TripSummary
    from core.store.storage import AtomicJSONStorage


def __getattr__(name: str) -> Any:
    where = _WHERE.get(name)
    if where is None:
        raise AttributeError(f"module 'core.store' has no attribute {name!r}")
    value = getattr(importlib.import_module(where), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(list(globals()) + __all__)
