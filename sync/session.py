"""The sync session: device id, credentials, finite timeouts, TLS and retry policy in one object.

Targets only move bytes; every HTTP request goes through ``Session.request``, which

* never follows a redirect (a 3xx is a configuration error: requests re-sends a PUT without its
  body after a 301 and drops credentials on a host change);
* never retries by itself inside urllib3 (``Retry(total=0)``): a PUT whose answer was lost must
  not be re-sent blindly, the sync engine decides (``Session.retrying``);
* sends bodies as ``bytes`` so they go with a Content-Length, never chunked;
* verifies TLS by default, against ``ca_file`` when one is given;
* uses finite connect and read timeouts (defaults 5 s and 30 s; there is no "wait forever").

Retry behaviour (``RetryPolicy``): a step that fails with a `RetryableError` (connection refused
or cut, a timeout, 5xx or 429) is tried ``attempts`` times in all, sleeping ``backoff_s``,
``2*backoff_s``, ... (each at most ``max_backoff_s``) in between; then the error is reported and
the trip is left for the next sync. Final errors (401/403, other 4xx, redirects, TLS failures)
are never retried.
"""
from __future__ import annotations

import configparser
import os
import stat
import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, TypeVar
from collections.abc import Callable, Mapping
from urllib.parse import urlsplit, urlunsplit

from sync import errors

if TYPE_CHECKING:
    import requests   # imported on first use at run time (no work at import time)

__all__ = ["RetryPolicy", "Credentials", "Session", "load_credentials", "redact_url",
           "ENV_USER", "ENV_PASSWORD", "ENV_TOKEN", "ENV_CONFIG", "ENV_CA_FILE"]

ENV_USER = "STREAMTAB_SYNC_USER"
ENV_PASSWORD = "STREAMTAB_SYNC_PASSWORD"
ENV_TOKEN = "STREAMTAB_SYNC_TOKEN"
ENV_CONFIG = "STREAMTAB_SYNC_CONFIG"
ENV_CA_FILE = "STREAMTAB_SYNC_CA_FILE"
DEFAULT_CONFIG_NAME = "credentials.ini"   # under <data dir>/sync/

T = TypeVar("T")


def redact_url(url: str) -> str:
    """The URL without any user-info part (``https://user:pw@host/x`` → ``https://host/x``)."""
    try:
        parts = urlsplit(url)
    except ValueError:
        return "<unparseable URL>"
    if parts.username is None and parts.password is None:
        return url
    host = parts.hostname or ""
    if parts.port:
        host = f"{host}:{parts.port}"
    return urlunsplit((parts.scheme, host, parts.path, parts.query, parts.fragment))


@dataclass(frozen=True)
class RetryPolicy:
    """Bounded retries with doubling backoff; see the module docstring."""

    attempts: int = 4
    backoff_s: float = 0.5
    max_backoff_s: float = 8.0

    def __post_init__(self) -> None:
        if not 1 <= self.attempts <= 20:
            raise ValueError(f"retry attempts {self.attempts} must be between 1 and 20")
        if not 0 <= self.backoff_s <= self.max_backoff_s <= 300:
            raise ValueError("retry backoff must satisfy 0 ≤ backoff_s ≤ max_backoff_s ≤ 300 s")

    def delay_s(self, attempt: int) -> float:
        """Sleep before try number `attempt` + 1 (attempt counts from 1)."""
        return min(self.max_backoff_s, self.backoff_s * (2 ** (attempt - 1)))


class Credentials:
    """A user name and password (HTTP Basic) or a bearer token. Never shown by repr or str."""

    __slots__ = ("_password", "_token", "_user")

    def __init__(self, user: str | None = None, password: str | None = None,
                 token: str | None = None) -> None:
        if token is None and (user is None or password is None):
            raise errors.CredentialsError("credentials need a user and a password, or a token")
        self._user, self._password, self._token = user, password, token

    def __repr__(self) -> str:
        return "Credentials(<hidden>)"

    __str__ = __repr__

    def apply(self, http) -> None:  # noqa: ANN001 - a requests.Session
        if self._token is not None:
            http.headers["Authorization"] = f"Bearer {self._token}"
        else:
            http.auth = (self._user, self._password)


def _check_private(path: Path) -> None:
    try:
        st = path.stat()
    except FileNotFoundError:
        raise errors.CredentialsError(f"credentials file {path} does not exist") from None
    if os.name == "posix":
        if st.st_mode & (stat.S_IRWXG | stat.S_IRWXO):
            raise errors.CredentialsError(
                f"credentials file {path} can be read or changed by others (mode "
                f"{stat.S_IMODE(st.st_mode):04o}); make it owner-only with 'chmod 600 {path}'")
        if hasattr(os, "getuid") and st.st_uid != os.getuid():
            raise errors.CredentialsError(
                f"credentials file {path} belongs to another user; it must be owned by the user running sync")


def _from_file(path: Path, hub_url: str) -> Credentials | None:
    _check_private(path)
    cp = configparser.ConfigParser(interpolation=None)
    try:
        cp.read_string(path.read_text(encoding="utf-8"), source=str(path))
    except (configparser.Error, UnicodeDecodeError) as exc:
        raise errors.CredentialsError(
            f"credentials file {path} is not a valid INI file ({type(exc).__name__})") from None
    best, best_len = None, -1
    plain = redact_url(hub_url)
    for section in cp.sections():
        if section == "default":
            prefix = ""
        elif section.startswith("hub "):
            prefix = section[4:].strip()
        else:
            continue
        if plain.startswith(prefix) and len(prefix) > best_len:
            best, best_len = section, len(prefix)
    if best is None:
        return None
    sec = cp[best]
    if "token" in sec:
        return Credentials(token=sec["token"])
    if "user" in sec and "password" in sec:
        return Credentials(user=sec["user"], password=sec["password"])
    raise errors.CredentialsError(
        f"section [{best}] of credentials file {path} needs 'user' and 'password', or 'token'")


def load_credentials(hub_url: str, *, config_file: Path | str | None = None,
                     data_dir: Path | str | None = None,
                     env: Mapping[str, str] | None = None) -> Credentials | None:
    """Credentials for `hub_url`, or None when none are configured.

    Looked up in this order: `config_file` (or ``$STREAMTAB_SYNC_CONFIG``); the environment
    (``$STREAMTAB_SYNC_TOKEN``, or ``$STREAMTAB_SYNC_USER`` with ``$STREAMTAB_SYNC_PASSWORD``);
    ``<data_dir>/sync/credentials.ini`` when it exists. A credentials file must be readable by
    its owner only (mode 600), else `CredentialsError`. File layout (INI)::

        [hub https://dav.example.org/streamwatch/]    ; longest matching URL prefix wins
        user = r.o
        password = ...
        [default]
        token = ...
    """
    env = os.environ if env is None else env
    explicit = config_file or env.get(ENV_CONFIG)
    if explicit:
        return _from_file(Path(explicit).expanduser(), hub_url)
    if env.get(ENV_TOKEN):
        return Credentials(token=env[ENV_TOKEN])
    if env.get(ENV_USER) or env.get(ENV_PASSWORD):
        if not (env.get(ENV_USER) and env.get(ENV_PASSWORD)):
            raise errors.CredentialsError(f"set both {ENV_USER} and {ENV_PASSWORD}, or neither")
        return Credentials(user=env[ENV_USER], password=env[ENV_PASSWORD])
    if data_dir is not None:
        default = Path(data_dir) / "sync" / DEFAULT_CONFIG_NAME
        if default.exists():
            return _from_file(default, hub_url)
    return None


class Session:
    """Policy for one sync run; targets borrow its `request` to move bytes.

    Parameters
    ----------
    device_id : str, optional
        This device (defaults to the store's device id when `push`/`pull` get the session).
    credentials : Credentials, optional
    connect_timeout_s, read_timeout_s : float
        Finite timeouts in seconds for connecting and for each read (0 < t ≤ 600).
    retry : RetryPolicy
    ca_file : path, optional
        A PEM bundle used instead of the system's to verify the hub's certificate.
    max_document_bytes : int
        Hub documents larger than this are refused during a pull (default 8 MiB).
    """

    def __init__(self, device_id: str | None = None, *, credentials: Credentials | None = None,
                 connect_timeout_s: float = 5.0, read_timeout_s: float = 30.0,
                 retry: RetryPolicy | None = None, ca_file: Path | str | None = None,
                 max_document_bytes: int = 8 * 1024 * 1024,
                 sleep: Callable[[float], None] = time.sleep) -> None:
        for name, value in (("connect_timeout_s", connect_timeout_s), ("read_timeout_s", read_timeout_s)):
            if not (isinstance(value, (int, float)) and 0 < value <= 600):
                raise errors.ConfigError(f"{name} {value!r} must be between 0 and 600 seconds")
        if ca_file is not None and not Path(ca_file).is_file():
            raise errors.ConfigError(f"CA file {ca_file} does not exist; give a PEM file of the program's CA")
        self.device_id = device_id
        self.credentials = credentials
        self.timeout = (float(connect_timeout_s), float(read_timeout_s))
        self.retry = retry or RetryPolicy()
        self.ca_file = str(ca_file) if ca_file is not None else None
        self.max_document_bytes = int(max_document_bytes)
        self.sleep = sleep
        self.request_count = 0
        self._http: requests.Session | None = None

    def __repr__(self) -> str:
        return (f"Session(device_id={self.device_id!r}, timeout={self.timeout}, retry={self.retry}, "
                f"ca_file={self.ca_file!r}, credentials={'<hidden>' if self.credentials else None})")

    # -- HTTP ----------------------------------------------------------------------------------
    @property
    def http(self):  # noqa: ANN201 - requests.Session, created on first use
        if self._http is None:
            import requests
            from requests.adapters import HTTPAdapter
            from urllib3.util.retry import Retry

            http = requests.Session()
            # total=0 and read=False: urllib3 never re-sends anything by itself (a PUT whose answer
            # timed out may have landed); allowed_methods=None only silences a deprecation.
            no_retry = Retry(total=0, connect=0, read=False, redirect=0, status=0, other=0,
                             allowed_methods=None, raise_on_redirect=False,
                             raise_on_status=False)
            adapter = HTTPAdapter(max_retries=no_retry, pool_connections=4, pool_maxsize=4)
            http.mount("http://", adapter)
            http.mount("https://", adapter)
            http.trust_env = False          # no proxies or netrc picked up behind the user's back
            http.verify = self.ca_file if self.ca_file else True
            http.headers["User-Agent"] = "streamtab-sync/0.1"
            if self.credentials is not None:
                self.credentials.apply(http)
            self._http = http
        return self._http

    def request(self, method: str, url: str, *, body: bytes | None = None,
                headers: Mapping[str, str] | None = None, stream: bool = False):  # noqa: ANN201
        """One HTTP request under this session's policy; returns the response for any status
        that is not an error of the tree (2xx, 404, 409, 412, ...), raises otherwise."""
        import requests

        if body is not None and not isinstance(body, bytes):
            raise TypeError("request bodies are bytes (sent with Content-Length, never chunked)")
        hdrs = dict(headers or {})
        if body is not None:
            hdrs["Content-Length"] = str(len(body))
        shown = redact_url(url)
        self.request_count += 1
        try:
            resp = self.http.request(method, url, data=body, headers=hdrs, timeout=self.timeout,
                                     allow_redirects=False, stream=stream)
        except requests.exceptions.SSLError:
            raise errors.TLSError(
                f"the TLS certificate of {shown} could not be verified; if the program runs its own "
                f"certificate authority, give its CA file (--ca-file)") from None
        except requests.exceptions.Timeout:
            raise errors.TimedOut(f"{method} {shown} got no answer within the timeout") from None
        except requests.exceptions.ConnectionError:
            raise errors.Unreachable(f"{method} {shown}: the connection failed or was cut") from None
        except (requests.exceptions.InvalidURL, requests.exceptions.MissingSchema,
                requests.exceptions.InvalidSchema, requests.exceptions.URLRequired) as exc:
            raise errors.ConfigError(f"{method} {shown} could not be sent ({type(exc).__name__})") from None
        except Exception as exc:  # an answer cut or garbled on the way (ChunkedEncodingError, ...)
            if isinstance(exc, errors.SyncError):
                raise
            raise errors.Unreachable(
                f"{method} {shown}: the answer was cut or garbled on the way ({type(exc).__name__})") from None
        status = resp.status_code
        if 300 <= status < 400:
            where = redact_url(resp.headers.get("Location", "") or "?")
            resp.close()
            raise errors.RedirectRefused(
                f"the hub answered {method} {shown} with a redirect ({status}) to {where}; sync never "
                f"follows redirects, so set the hub address to the final URL")
        if status in (401, 403):
            resp.close()
            raise errors.Unauthorized(
                f"the hub refused {method} {shown} ({status}); check the user name and password or "
                f"token in the credentials file or environment")
        if status >= 500 or status == 429:
            resp.close()
            raise errors.ServerError(f"the hub answered {method} {shown} with {status}; sync will retry",
                                     status)
        return resp

    def retrying(self, step: Callable[[], T]) -> T:
        """Runs `step`, retrying it on a RetryableError as the retry policy says."""
        attempt = 1
        while True:
            try:
                return step()
            except errors.RetryableError:
                if attempt >= self.retry.attempts:
                    raise
                self.sleep(self.retry.delay_s(attempt))
                attempt += 1

    def close(self) -> None:
        if self._http is not None:
            self._http.close()
            self._http = None

    def __enter__(self) -> Session:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
