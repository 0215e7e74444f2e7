"""The sync error tree: one root, a retryable branch (try again later) and a final one (a person must act).

Messages are one sentence a person can act on. They never carry a password, a token or an
``Authorization`` header: URLs in messages are shown without their user-info part.
"""

from __future__ import annotations

__all__ = [
    "SyncError",
    "RetryableError",
    "Unreachable",
    "TimedOut",
    "ServerError",
    "ReadMismatch",
    "LocalWriteError",
    "FinalError",
    "ConfigError",
    "CredentialsError",
    "Unauthorized",
    "Rejected",
    "DepthRefused",
    "Gone",
    "NotDelivered",
    "Conflict",
    "RedirectRefused",
    "TLSError",
    "IntegrityError",
    "BadHubDocument",
]


class SyncError(Exception):
    """Root of every error raised by `sync`."""

    retryable: bool = False


# --- retryable: nothing is lost, the next sync tries again -------------------------------------
class RetryableError(SyncError):
    """The hub could not be reached or answered with a temporary failure; sync will retry."""

    retryable = True


class Unreachable(RetryableError):
    """Connection refused, reset or cut before an answer arrived."""


class TimedOut(RetryableError):
    """No answer within the session's connect or read timeout."""


class ServerError(RetryableError):
    """The hub answered 5xx (or 429 Too Many Requests)."""

    def __init__(self, message: str, status: int) -> None:
        super().__init__(message)
        self.status = status


class ReadMismatch(RetryableError):
    """A hub file's bytes did not match the content hash in its name on this read: first taken as
    a transport problem (an answer cut inside its headers reads as an empty 200) and read again."""


class LocalWriteError(RetryableError):
    """This device could not write its own files (disk full, read-only, no permission): the run
    stops with one line; nothing is lost, the next sync picks up where this one stopped."""


# --- final: retrying the same thing gives the same answer --------------------------------------
class FinalError(SyncError):
    """The hub refused, or the configuration is wrong; a person has to act."""


class ConfigError(FinalError):
    """The hub address, an option or a file given to sync is wrong."""


class CredentialsError(ConfigError):
    """The credentials file is missing, malformed, or readable by others than its owner."""


class RedirectRefused(ConfigError):
    """The hub answered 3xx: sync never follows redirects (a PUT would be re-sent without its body)."""


class TLSError(ConfigError):
    """The hub's TLS certificate could not be verified against the system or the given CA file."""


class Unauthorized(FinalError):
    """The hub answered 401 or 403."""


class Rejected(FinalError):
    """The hub answered another 4xx that retrying will not change."""

    def __init__(self, message: str, status: int | None = None) -> None:
        super().__init__(message)
        self.status = status


class DepthRefused(Rejected):
    """A 403 with RFC 4918 §9.1's ``propfind-finite-depth`` precondition: the server refuses
    ``PROPFIND Depth: infinity`` (its shipped default), not the user; sync walks with Depth 1."""

    def __init__(self, message: str) -> None:
        super().__init__(message, 403)


class Gone(Rejected):
    """A hub file that was listed is gone when read (404): skipped, and looked for again next sync."""

    def __init__(self, message: str) -> None:
        super().__init__(message, 404)


class NotDelivered(FinalError):
    """An intake endpoint answered without the acknowledgement sync/DESIGN.md defines (a JSON
    body echoing the trip id and content hash): the trip is not counted as delivered."""


class Conflict(FinalError):
    """The hub holds a version that cannot be reconciled automatically (an endpoint's 409)."""


class IntegrityError(FinalError):
    """A hub copy's bytes do not match the content hash in its name (truncated or altered)."""

    data: bytes = b""  # the damaged bytes as read, for the quarantine


class BadHubDocument(FinalError):
    """A document read from the hub is not a valid trip (malformed, oversized, wrong id)."""
