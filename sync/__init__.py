"""streamtab sync: moving trips between the device store and a hub (folder, WebDAV, HTTP endpoint).

One-liners: ``sync.push(store, "https://dav.example.org/hub/")``, ``sync.pull(store, "/mnt/hub")``,
``sync.status(store)``. Policy lives in `sync.session.Session`; errors in `sync.errors`.
"""

from sync import errors
from sync.engine import (
    HubState,
    PullReport,
    PushReport,
    TripResult,
    TripSyncState,
    pull,
    push,
    run_in_background,
    status,
)
from sync.session import Credentials, RetryPolicy, Session, load_credentials

__all__ = [
    "push",
    "pull",
    "status",
    "run_in_background",
    "PushReport",
    "PullReport",
    "TripResult",
    "TripSyncState",
    "HubState",
    "Session",
    "RetryPolicy",
    "Credentials",
    "load_credentials",
    "errors",
]
