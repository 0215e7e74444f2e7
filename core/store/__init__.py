"""The device store: one small file per trip, atomic writes, a checked summary index, the audit."""

from core.store.device import (
    ApprovedTrip,
    AtomicJSONStorage,
    CorruptFile,
    DeviceStore,
    InvalidRecord,
    NewerSchemaError,
    StaleTrip,
    StoreError,
    StoreLocked,
    StoreWriteError,
    TripNotFound,
    TripSummary,
    diff_paths,
)

__all__ = [
    "ApprovedTrip", "AtomicJSONStorage", "CorruptFile", "DeviceStore", "InvalidRecord", "NewerSchemaError", "StaleTrip",
    "StoreError", "StoreLocked", "StoreWriteError", "TripNotFound", "TripSummary", "diff_paths",
]
