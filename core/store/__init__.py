"""The device store: one small file per trip, atomic writes, a checked summary index, the audit."""

from core.store.device import (
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
    "AtomicJSONStorage", "CorruptFile", "DeviceStore", "InvalidRecord", "NewerSchemaError", "StaleTrip",
    "StoreError", "StoreLocked", "StoreWriteError", "TripNotFound", "TripSummary", "diff_paths",
]
