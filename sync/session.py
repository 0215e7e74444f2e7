"""The sync session: device id, credentials, finite timeouts, TLS and retry policy in one object.

Targets only move bytes; every HTTP request goes through ``Session.request``, which

* never follows a redirect (a 3xx is a configuration error: requests re-sends a PUT without its
  body after a 301 and drops credentials on a host change);
* never retries by itself inside urllib3 (``Retry(total=0)``): a PUT whose answer was lost must
  not be re-sent blindly, the sync engine decides (``Session.retrying``);
* sends bodies as ``bytes`` so they go with a Content-Length, never chunked;
* verifies TLS by default, against ``ca_file`` when one is given;
* uses finite connect and read timeouts (defaults 5 s and 30 s; there is no "wait forever"),
  and a deadline for the whole request (``deadline_s``): a server dripping its answer a byte at a
  time is cut off there;
* tells RFC 4918's finite-depth 403 (``DepthRefused``) from a real 403 (``Unauthorized``), and
  says which TLS check failed (certificate authority, host name, dates).

Retry behaviour (``RetryPolicy``): a step that fails with a `RetryableError` (connection refused
or cut, a timeout, 5xx or 429) is tried ``attempts`` times in all, sleeping ``backoff_s``,
``2*backoff_s``, ... (each at most ``max_backoff_s``) in between; then the error is reported and
the trip is left for the next sync. Final errors (401/403, other 4xx, redirects, TLS failures)
are never retried. A step includes reading and checking the answer's body, so a body cut while
streaming is retried like any other cut.
"""

from __future__ import annotations

import configparser
import os
import socket
import stat
import threading
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, TypeVar
from urllib.parse import unquote, urlsplit, urlunsplit

from core.records.limits import MAX_DOCUMENT_BYTES
from sync import errors

if TYPE_CHECKING:
    import requests  # imported on first use at run time (no work at import time)

__all__ = [
    "RetryPolicy",
    "Credentials",
    "Session",
    "load_credentials",
    "redact_url",
    "ca_file_from_environment",
    "ENV_USER",
    "ENV_PASSWORD",
    "ENV_TOKEN",
    "ENV_CONFIG",
    "ENV_CA_FILE",
    "ENV_CA_CHAIN",
]

ENV_USER = "STREAMTAB_SYNC_USER"
ENV_PASSWORD = "STREAMTAB_SYNC_PASSWORD"
ENV_TOKEN = "STREAMTAB_SYNC_TOKEN"
ENV_CONFIG = "STREAMTAB_SYNC_CONFIG"
ENV_CA_FILE = "STREAMTAB_SYNC_CA_FILE"
#: Where a CA bundle may be named, first found wins (the last two are the usual names).
ENV_CA_CHAIN = (ENV_CA_FILE, "REQUESTS_CA_BUNDLE", "SSL_CERT_FILE")
DEFAULT_CONFIG_NAME = "credentials.ini"  # under <data dir>/sync/

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

    def __init__(self, user: str | None = None, password: str | None = None, token: str | None = None) -> None:
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
                f"{stat.S_IMODE(st.st_mode):04o}); make it owner-only with 'chmod 600 {path}'"
            )
        if hasattr(os, "getuid") and st.st_uid != os.getuid():
            raise errors.CredentialsError(
                f"credentials file {path} belongs to another user; it must be owned by the user running sync"
            )


_DEFAULT_PORTS = {"http": 80, "https": 443}


def _url_key(url: str) -> tuple[str, str, int, tuple[str, ...]] | None:
    """(scheme, host, port, path segments) of an http(s) address, for matching credentials
    sections: ``https://dav.example.org`` must not match ``https://dav.example.org.attacker.test/``
    nor ``/hub`` match ``/hubcap/``. A ``post+`` prefix is dropped (the endpoint is an https URL)."""
    if url.lower().startswith("post+"):
        url = url[5:]
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError:
        return None
    scheme = parts.scheme.lower()
    if scheme not in _DEFAULT_PORTS or not parts.hostname:
        return None
    host = parts.hostname.lower().rstrip(".")
    segments = tuple(unquote(p) for p in parts.path.split("/") if p)
    return scheme, host, port or _DEFAULT_PORTS[scheme], segments


def _from_file(path: Path, hub_url: str) -> Credentials | None:
    _check_private(path)
    cp = configparser.ConfigParser(interpolation=None)
    try:
        cp.read_string(path.read_text(encoding="utf-8"), source=str(path))
    except (configparser.Error, UnicodeDecodeError) as exc:
        raise errors.CredentialsError(
            f"credentials file {path} is not a valid INI file ({type(exc).__name__})"
        ) from None
    best, best_len = None, -1
    hub = _url_key(hub_url)
    for section in cp.sections():
        if section == "default":
            length = 0
        elif section.startswith("hub "):
            key = _url_key(section[4:].strip())
            if key is None:
                raise errors.CredentialsError(
                    f"section [{section}] of credentials file {path} does not name an http:// or "
                    f"https:// address; write it as [hub https://host/path/]"
                )
            if hub is None or key[:3] != hub[:3] or hub[3][: len(key[3])] != key[3]:
                continue
            length = 1 + len(key[3])
        else:
            continue
        if length > best_len:
            best, best_len = section, length
    if best is None:
        return None
    sec = cp[best]
    if "token" in sec:
        return Credentials(token=sec["token"])
    if "user" in sec and "password" in sec:
        return Credentials(user=sec["user"], password=sec["password"])
    raise errors.CredentialsError(
        f"section [{best}] of credentials file {path} needs 'user' and 'password', or 'token'"
    )


def ca_file_from_environment(env: Mapping[str, str] | None = None) -> str | None:
    """The CA bundle the environment names: ``$STREAMTAB_SYNC_CA_FILE``, else
    ``$REQUESTS_CA_BUNDLE``, else ``$SSL_CERT_FILE`` (the usual names); None for the default."""
    env = os.environ if env is None else env
    for name in ENV_CA_CHAIN:
        if env.get(name):
            return env[name]
    return None


def load_credentials(
    hub_url: str,
    *,
    config_file: Path | str | None = None,
    data_dir: Path | str | None = None,
    env: Mapping[str, str] | None = None,
) -> Credentials | None:
    """Credentials for `hub_url`, or None when none are configured.

    Looked up in this order: `config_file` (or ``$STREAMTAB_SYNC_CONFIG``); the environment
    (``$STREAMTAB_SYNC_TOKEN``, or ``$STREAMTAB_SYNC_USER`` with ``$STREAMTAB_SYNC_PASSWORD``);
    ``<data_dir>/sync/credentials.ini`` when it exists. A credentials file must be readable by
    its owner only (mode 600), else `CredentialsError`. File layout (INI)::

        [hub https://dav.example.org/streamwatch/]    ; same scheme, host and port, and the
                                                      ; most path segments in common, wins
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


class _Watchdog:
    """One daemon thread for the whole process that fires request deadlines. It keeps only the
    requests still running (a finished one is dropped at once) and sleeps until the earliest of
    them is due, so it wakes about once per deadline period, not once per request: neither a
    thread per request nor a wake-up per request, either of which costs more than a loopback
    request itself."""

    def __init__(self) -> None:
        self._live: dict[_Watch, float] = {}
        self._cond = threading.Condition()
        self._target: float | None = None  # when the sleeping thread wakes up next
        self._thread = threading.Thread(target=self._run, name="streamtab-sync-deadlines", daemon=True)
        self._thread.start()

    def arm(self, watch: _Watch, delay_s: float) -> None:
        with self._cond:
            due = time.monotonic() + delay_s
            self._live[watch] = due
            if self._target is None or due < self._target:
                self._cond.notify()

    def disarm(self, watch: _Watch) -> None:
        with self._cond:
            self._live.pop(watch, None)

    def _run(self) -> None:
        while True:
            with self._cond:
                now = time.monotonic()
                due = [w for w, at in self._live.items() if at <= now]
                for w in due:
                    del self._live[w]
                if not due:
                    self._target = min(self._live.values(), default=None)
                    self._cond.wait(None if self._target is None else self._target - now)
                    self._target = None
                    continue
            for w in due:
                w.fire()


_watchdog: _Watchdog | None = None
_watchdog_lock = threading.Lock()


def _the_watchdog() -> _Watchdog:
    global _watchdog  # noqa: PLW0603 - one watchdog thread per process, started on first use
    with _watchdog_lock:
        if _watchdog is None:
            _watchdog = _Watchdog()
        return _watchdog


class _Watch:
    """Ends one request at its deadline: shuts down the sockets it uses, so a read blocked on a
    server that drips bytes returns at once (a per-read timeout never fires on a drip)."""

    def __init__(self, deadline_s: float) -> None:
        self.deadline_s = deadline_s
        self.fired = False
        self.done = False
        self._conns: list = []
        self._lock = threading.Lock()
        _the_watchdog().arm(self, deadline_s)

    def add(self, conn) -> None:  # noqa: ANN001 - a urllib3 connection taken from the pool
        with self._lock:
            self._conns.append(conn)
        if self.fired:
            self.fire()

    def fire(self) -> None:
        with self._lock:
            if self.done:
                return
            self.fired = True
            conns = list(self._conns)
        for conn in conns:
            sock = getattr(conn, "sock", None)
            if sock is not None:
                try:
                    sock.shutdown(socket.SHUT_RDWR)
                except OSError:
                    pass
        if any(getattr(c, "sock", None) is None for c in conns):
            # a connection still being set up: look again shortly (bounded by the connect timeout)
            _the_watchdog().arm(self, 0.05)

    def attach(self, resp) -> None:  # noqa: ANN001 - a requests.Response read later by the caller
        close = resp.close

        def closing() -> None:
            self.finish()
            close()

        resp.close = closing
        resp.streamtab_watch = self

    def finish(self) -> None:
        with self._lock:
            self.done = True
        _the_watchdog().disarm(self)


def _watched_adapter_class():  # noqa: ANN202 - built on first use: no requests import at import time
    from requests.adapters import HTTPAdapter
    from urllib3.connectionpool import HTTPConnectionPool, HTTPSConnectionPool

    class WatchedAdapter(HTTPAdapter):
        """An adapter whose pools hand every connection they give out to the running request's
        `_Watch` (found in the session's thread-local), so the deadline can end it."""

        def __init__(self, local, **kw) -> None:  # noqa: ANN001
            self._watch_local = local
            super().__init__(**kw)

        def init_poolmanager(self, *args, **kw) -> None:  # noqa: ANN002, ANN003
            super().init_poolmanager(*args, **kw)
            local = self._watch_local

            def watched(base):  # noqa: ANN001, ANN202
                class Pool(base):  # type: ignore[valid-type,misc]  # urllib3's pool class, chosen at run time
                    def _get_conn(self, timeout=None):  # noqa: ANN001, ANN202
                        conn = super()._get_conn(timeout)
                        watch = getattr(local, "watch", None)
                        if watch is not None:
                            watch.add(conn)
                        return conn

                return Pool

            self.poolmanager.pool_classes_by_scheme = {
                "http": watched(HTTPConnectionPool),
                "https": watched(HTTPSConnectionPool),
            }

    return WatchedAdapter


def _watched_adapter(local, **kw):  # noqa: ANN001, ANN202
    return _watched_adapter_class()(local, **kw)


def _finite_depth_only(resp) -> bool:  # noqa: ANN001
    """True when a 403 carries RFC 4918 §9.1's ``propfind-finite-depth`` precondition (the server
    refuses ``Depth: infinity``, not the user)."""
    try:
        body = next(resp.iter_content(64 * 1024), b"") if resp.raw is not None else b""
    except Exception:  # noqa: BLE001 - a cut body: no precondition to be found
        return False
    if b"propfind-finite-depth" not in body:
        return False
    import xml.etree.ElementTree as ET

    try:
        root = ET.fromstring(body)
    except ET.ParseError:
        return False
    return root.find(".//{DAV:}propfind-finite-depth") is not None or root.tag == "{DAV:}propfind-finite-depth"


# OpenSSL verify codes (x509_vfy.h) and the texts Python shows for them
_HOST_CODES = {62, 64}  # hostname / IP address mismatch
_CA_CODES = {2, 18, 19, 20, 21}  # issuer unknown, self-signed, not trusted
_TIME_CODES = {9, 10}  # not yet valid, expired


def _verify_error(exc: BaseException):  # noqa: ANN202
    import ssl

    seen, todo = set(), [exc]
    while todo:
        e = todo.pop()
        if id(e) in seen or e is None:
            continue
        seen.add(id(e))
        if isinstance(e, ssl.SSLCertVerificationError):
            return e
        todo.extend(a for a in getattr(e, "args", ()) if isinstance(a, BaseException))
        todo.extend(x for x in (getattr(e, "reason", None), e.__cause__, e.__context__) if isinstance(x, BaseException))
    return None


def _tls_message(exc: BaseException, shown: str, ca_file: str | None) -> str:
    """One sentence saying which TLS check failed: the certificate authority, the host name,
    the validity dates, or the connection itself."""
    host = urlsplit(shown).hostname or shown
    err = _verify_error(exc)
    code = getattr(err, "verify_code", None)
    text = (getattr(err, "verify_message", "") or str(exc)).lower()
    if code in _HOST_CODES or "mismatch" in text or "doesn't match" in text:
        return (
            f"the TLS certificate presented by {host} is made out for another host name; use the "
            f"address the certificate was issued for, or have the hub's certificate reissued"
        )
    if code in _TIME_CODES or "expired" in text or "not yet valid" in text:
        return (
            f"the TLS certificate of {host} has expired or is not valid yet; check the device's "
            f"date and time, or have the hub's certificate renewed"
        )
    if err is not None or code in _CA_CODES:
        where = f"the CA file {ca_file}" if ca_file else "this device's certificate authorities"
        return (
            f"the TLS certificate of {host} was not issued by a certificate authority in {where}; "
            f"if the program runs its own certificate authority, give its CA file (--ca-file, or "
            f"$STREAMTAB_SYNC_CA_FILE, $REQUESTS_CA_BUNDLE or $SSL_CERT_FILE)"
        )
    if "no certificate or crl found" in text or "pem" in text:
        return f"the CA file {ca_file} holds no certificate; give a PEM file of the program's certificate authority"
    return (
        f"the TLS connection to {host} failed before any certificate check "
        f"({str(exc).splitlines()[0][:120] if str(exc) else type(exc).__name__})"
    )


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
    deadline_s : float, optional
        The most one request may take in all, from connecting to the last byte of its answer
        (default: the larger of the two timeouts). A server that drips its answer a byte at a
        time, which no per-read timeout notices, is cut off here and the request counts as
        timed out (retryable).
    """

    def __init__(
        self,
        device_id: str | None = None,
        *,
        credentials: Credentials | None = None,
        connect_timeout_s: float = 5.0,
        read_timeout_s: float = 30.0,
        retry: RetryPolicy | None = None,
        ca_file: Path | str | None = None,
        max_document_bytes: int = MAX_DOCUMENT_BYTES,
        deadline_s: float | None = None,
        sleep: Callable[[float], None] = time.sleep,
    ) -> None:
        if deadline_s is None and all(isinstance(v, (int, float)) for v in (connect_timeout_s, read_timeout_s)):
            deadline_s = max(connect_timeout_s, read_timeout_s)
        for name, value in (
            ("connect_timeout_s", connect_timeout_s),
            ("read_timeout_s", read_timeout_s),
            ("deadline_s", deadline_s),
        ):
            if not (isinstance(value, (int, float)) and 0 < value <= 600):
                raise errors.ConfigError(f"{name} {value!r} must be between 0 and 600 seconds")
        if ca_file is not None and not Path(ca_file).is_file():
            raise errors.ConfigError(f"CA file {ca_file} does not exist; give a PEM file of the program's CA")
        self.device_id = device_id
        self.credentials = credentials
        self.timeout = (float(connect_timeout_s), float(read_timeout_s))
        self.deadline_s = float(deadline_s or 0.0)  # checked above: a number in (0, 600]
        self._local = threading.local()  # the watch of the request running in this thread
        self.retry = retry or RetryPolicy()
        self.ca_file = str(ca_file) if ca_file is not None else None
        self.max_document_bytes = int(max_document_bytes)
        self.sleep = sleep
        self.request_count = 0
        self._http: requests.Session | None = None

    def __repr__(self) -> str:
        return (
            f"Session(device_id={self.device_id!r}, timeout={self.timeout}, retry={self.retry}, "
            f"ca_file={self.ca_file!r}, credentials={'<hidden>' if self.credentials else None})"
        )

    # -- HTTP ----------------------------------------------------------------------------------
    @property
    def http(self):  # noqa: ANN201 - requests.Session, created on first use
        if self._http is None:
            import requests
            from urllib3.util.retry import Retry

            http = requests.Session()
            # total=0 and read=False: urllib3 never re-sends anything by itself (a PUT whose answer
            # timed out may have landed); allowed_methods=None only silences a deprecation.
            no_retry = Retry(
                total=0,
                connect=0,
                read=False,
                redirect=0,
                status=0,
                other=0,
                allowed_methods=None,
                raise_on_redirect=False,
                raise_on_status=False,
            )
            adapter = _watched_adapter(self._local, max_retries=no_retry, pool_connections=4, pool_maxsize=4)
            http.mount("http://", adapter)
            http.mount("https://", adapter)
            http.trust_env = False  # no proxies or netrc picked up behind the user's back
            http.verify = self.ca_file if self.ca_file else True
            import core

            http.headers["User-Agent"] = f"streamtab-sync/{core.version()}"
            if self.credentials is not None:
                self.credentials.apply(http)
            self._http = http
        return self._http

    def request(
        self,
        method: str,
        url: str,
        *,
        body: bytes | None = None,
        headers: Mapping[str, str] | None = None,
        stream: bool = False,
    ):  # noqa: ANN201
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
        http = self.http
        watch = _Watch(self.deadline_s)
        self._local.watch = watch
        try:
            resp = http.request(
                method, url, data=body, headers=hdrs, timeout=self.timeout, allow_redirects=False, stream=stream
            )
        except requests.exceptions.SSLError as exc:
            watch.finish()
            raise errors.TLSError(_tls_message(exc, shown, self.ca_file)) from None
        except Exception as exc:
            watch.finish()
            if isinstance(exc, errors.SyncError):
                raise
            if watch.fired:
                raise errors.TimedOut(
                    f"{method} {shown} took longer than the {self.deadline_s:g} s "
                    f"limit for one request (the answer came too slowly)"
                ) from None
            if isinstance(exc, requests.exceptions.Timeout):
                raise errors.TimedOut(f"{method} {shown} got no answer within the timeout") from None
            if isinstance(exc, requests.exceptions.ConnectionError):
                raise errors.Unreachable(f"{method} {shown}: the connection failed or was cut") from None
            if isinstance(
                exc,
                (
                    requests.exceptions.InvalidURL,
                    requests.exceptions.MissingSchema,
                    requests.exceptions.InvalidSchema,
                    requests.exceptions.URLRequired,
                ),
            ):
                raise errors.ConfigError(f"{method} {shown} could not be sent ({type(exc).__name__})") from None
            if isinstance(exc, OSError) and "CA certificate bundle" in str(exc):
                raise errors.TLSError(
                    f"the CA file {self.ca_file} cannot be read; give a PEM file of the program's certificate authority"
                ) from None
            # an answer cut or garbled on the way (ChunkedEncodingError, ...)
            raise errors.Unreachable(
                f"{method} {shown}: the answer was cut or garbled on the way ({type(exc).__name__})"
            ) from None
        finally:
            self._local.watch = None
        if stream:
            watch.attach(resp)  # the caller reads the body; the watch ends at resp.close()
        else:
            watch.finish()
        status = resp.status_code
        if 300 <= status < 400:
            where = redact_url(resp.headers.get("Location", "") or "?")
            resp.close()
            raise errors.RedirectRefused(
                f"the hub answered {method} {shown} with a redirect ({status}) to {where}; sync never "
                f"follows redirects, so set the hub address to the final URL"
            )
        if status == 403 and method == "PROPFIND" and _finite_depth_only(resp):
            resp.close()
            raise errors.DepthRefused(
                f"the hub refuses PROPFIND {shown} with Depth: infinity (RFC 4918 propfind-finite-depth)"
            )
        if status in (401, 403):
            resp.close()
            raise errors.Unauthorized(
                f"the hub refused {method} {shown} ({status}); check the user name and password or "
                f"token in the credentials file or environment"
            )
        if status >= 500 or status == 429:
            resp.close()
            raise errors.ServerError(f"the hub answered {method} {shown} with {status}; sync will retry", status)
        return resp

    def read_body(self, resp, limit: int, where: str, *, too_big: Callable[[], Exception] | None = None) -> bytes:  # noqa: ANN001
        """The body of a streamed answer, at most `limit` bytes (else `too_big()` or `Rejected`).
        A body cut on the way is `Unreachable` and one that outlives the request's deadline
        `TimedOut`, both retryable: callers read inside `retrying`."""
        import requests

        def big() -> Exception:
            return too_big() if too_big else errors.Rejected(f"{where} is larger than {limit} bytes")

        length = resp.headers.get("Content-Length")
        if length and length.isdigit() and int(length) > limit:
            raise big()
        chunks, total = [], 0
        watch = getattr(resp, "streamtab_watch", None)
        try:
            for chunk in resp.iter_content(64 * 1024):
                total += len(chunk)
                if total > limit:
                    raise big()
                chunks.append(chunk)
        except errors.SyncError:
            raise
        except Exception as exc:  # noqa: BLE001 - requests/urllib3 read errors while streaming the body
            if watch is not None and watch.fired:
                raise errors.TimedOut(
                    f"reading {where} took longer than the {self.deadline_s:g} s limit for one request"
                ) from None
            if isinstance(exc, requests.exceptions.Timeout) or "timed out" in str(exc).lower():
                raise errors.TimedOut(f"reading {where} timed out") from None
            raise errors.Unreachable(f"the connection was cut while reading {where}") from None
        if watch is not None and watch.fired:
            raise errors.TimedOut(f"reading {where} took longer than the {self.deadline_s:g} s limit for one request")
        data = b"".join(chunks)
        if length and length.isdigit() and int(length) != len(data):
            raise errors.Unreachable(f"the answer for {where} was cut ({len(data)} of {length} bytes)")
        return data

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
