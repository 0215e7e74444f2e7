"""The sync error tree: one root, a retryable branch (try again later) and a final one (a person must act).

Messages are one sentence a person can act on. They never carry a password, a token or an
``Authorization`` header: URLs in messages are shown without their user-info part.
"""
from __future__ import annotations

__all__ = [
    "SyncError",
    "RetryableError", "Unreachable", "TimedOut", "ServerError",
    "FinalError", "ConfigError", "CredentialsError", "Unauthorized", "Rejected", "Conflict",
    "RedirectRefused", "TLSError", "IntegrityError", "BadHubDocument",
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


class Conflict(FinalError):
    """The hub holds a version that cannot be reconciled automatically (an endpoint's 409)."""


class IntegrityError(FinalError):
    """A hub copy's bytes do not match the content hash in its name (truncated or altered)."""


class BadHubDocument(FinalError):
    """A document read from the hub is not a valid trip (malformed, oversized, wrong id)."""
