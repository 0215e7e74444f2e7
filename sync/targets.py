"""Hub targets, picked by the address a person gives; each only moves bytes (policy is the Session's).

=====================================  =========================================================
address                                target
=====================================  =========================================================
``/mnt/share/hub``, ``file:///...``    `FolderTarget`: a folder (network share, USB stick, ...)
``https://host/dav/hub/``              `WebDavTarget`: a WebDAV collection (RFC 4918)
``http://127.0.0.1:8080/hub/``         WebDAV without TLS, allowed on loopback only
``post+https://host/intake/trips``     `PostTarget`: an HTTP endpoint taking trip JSON by POST
=====================================  =========================================================

All targets share one small interface: ``list_trip``, ``list_all``, ``read``, ``write_revision``
and ``close``; folders and WebDAV also keep the change log (``log_folders``, ``log_list``,
``log_read``, ``log_write``; see `sync.changelog`). See `sync.layout` for the names at the hub.
"""

from __future__ import annotations

import errno
import functools
import hashlib
import os
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from email.utils import parsedate_to_datetime
from pathlib import Path
from typing import Protocol
from urllib.parse import quote, unquote, urlsplit

from core.store.atomic import EXPORT_MODE, atomic_write_bytes, fsync_dir
from sync import errors
from sync.layout import (
    INCOMING,
    LOG,
    TRIPS,
    canonical_trip_id,
    device_key,
    incoming_name,
    is_hidden_name,
    is_incoming_name,
    name_matches,
    odd_entry,
    parse_revision_name,
    shown_name,
    trip_dir,
)
from sync.program import KINDS as PROGRAM_KINDS
from sync.program import PROGRAM, is_program_name, program_dir
from sync.program import name_matches as program_name_matches
from sync.session import Session, redact_url

__all__ = [
    "RemoteFile",
    "WriteResult",
    "Target",
    "Listing",
    "FolderTarget",
    "WebDavTarget",
    "PostTarget",
    "open_target",
    "check_address",
    "POST_PREFIX",
    "MAX_LISTING_BYTES",
    "MAX_ACK_BYTES",
    "STALE_UPLOAD_S",
]

POST_PREFIX = "post+"
MAX_LISTING_BYTES = 64 * 1024 * 1024
MAX_ACK_BYTES = 64 * 1024
#: An upload under incoming/ older than this (seconds) was cut: its device removes it.
STALE_UPLOAD_S = 24 * 3600
_LOOPBACK = {"127.0.0.1", "localhost", "::1"}


@dataclass(frozen=True)
class RemoteFile:
    """One revision file at the hub."""

    trip_id: str
    year: str
    name: str
    size: int | None = None

    @property
    def revision(self) -> int:
        parsed = parse_revision_name(self.name)
        return parsed[0] if parsed else -1


@dataclass(frozen=True)
class WriteResult:
    created: bool  # False: the hub already held these exact bytes
    etag: str | None = None


class Target(Protocol):
    url: str  # shown to people: never carries credentials
    key: str  # stable short id of this hub (names the outbox folder)
    can_list: bool  # False for a POST endpoint: only the outbox knows what was sent

    def list_trip(self, year: str, trip_id: str) -> frozenset[str] | None: ...
    def list_all(self) -> list[RemoteFile]: ...
    def read(self, f: RemoteFile, max_bytes: int) -> bytes: ...
    def write_revision(
        self, year: str, trip_id: str, name: str, data: bytes, device_id: str, revision: int, content_hash: str
    ) -> WriteResult: ...
    def close(self) -> None: ...
    # the program's tables (sync/program.py); an intake endpoint has none
    def list_program(self, kind: str) -> frozenset[str]: ...
    def read_program(self, kind: str, name: str, max_bytes: int) -> bytes: ...
    def write_program(self, kind: str, name: str, data: bytes, device_id: str) -> bool: ...


class Listing(list):
    """The revision files `list_all` found, plus `skipped`: one line per entry under ``trips/``
    that does not fit the hub layout (reported, not read)."""

    def __init__(self, files=(), skipped=()) -> None:  # noqa: ANN001
        super().__init__(files)
        self.skipped: list[str] = list(skipped)


def _key(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def _checked_read(
    f: RemoteFile,
    where: str,
    fetch,
    session: Session | None,  # noqa: ANN001, ANN202
    matches=name_matches,
):  # noqa: ANN001
    """Reads a hub file with `fetch()` and checks its bytes against the hash in its name
    (``matches(name, data)``: a trip revision's by default, a program table's for those).

    A mismatch is first a transport problem (an answer cut inside its headers reads as an empty
    200): it is `ReadMismatch`, retried like a cut. Only the same wrong bytes on a fresh read make
    the copy damaged (`IntegrityError`, carrying the bytes in ``.data`` for the quarantine).
    """
    previous: list[bytes] = []

    def step() -> bytes:
        data, framed = fetch()
        if matches(f.name, data):
            return data
        if f.size is not None and f.size != len(data):
            framed = False  # not the size the listing gave: the answer was cut
        if not framed:
            # an answer without a length to check it by (a cut inside the headers drops the
            # Content-Length and reads as a short 200) can never prove the hub copy damaged
            raise errors.ReadMismatch(
                f"hub copy {where} arrived without its full length ({len(data)} bytes; cut on the way)"
            )
        if previous and previous[-1] == data:
            exc = errors.IntegrityError(
                f"hub copy {where} does not match the content hash in its "
                f"name on two fresh reads (truncated or altered at the hub)"
            )
            exc.data = data
            raise exc
        previous.append(data)
        raise errors.ReadMismatch(
            f"hub copy {where} did not match the content hash in its name "
            f"as read ({len(data)} bytes; cut or altered on the way)"
        )

    if session is None:
        try:
            return step()
        except errors.ReadMismatch:
            return step()
    return session.retrying(step)


def _walk_report(root_rel: str, entries, skipped: list[str]) -> list[tuple[tuple[str, ...], int | None]]:  # noqa: ANN001
    """Sorts listing entries (relpath, is_folder, size) into revision files (parts, size) and
    report lines for odd entries; what lies under an odd entry is skipped without a line, and
    hidden names (`is_hidden_name`, what file managers leave) and what lies under them quietly."""
    files: list[tuple[tuple[str, ...], int | None]] = []
    odd_prefixes: list[tuple[str, ...]] = []
    for relpath, is_col, size in sorted(entries, key=lambda e: e[0]):
        parts = tuple(p for p in relpath.strip("/").split("/") if p)
        if len(parts) < 2 or parts[0] != TRIPS or any(is_hidden_name(p) for p in parts):
            continue
        if any(parts[: len(o)] == o for o in odd_prefixes):
            continue
        why = odd_entry(parts, is_col)
        if why is not None:
            odd_prefixes.append(parts)
            skipped.append(f"{'/'.join(shown_name(p) for p in parts)}{'/' if is_col else ''} skipped: {why}")
            continue
        if len(parts) == 4 and not is_col:
            files.append((parts, size))
    return files


def _too_big(where: str, max_bytes: int) -> errors.BadHubDocument:
    return errors.BadHubDocument(f"hub document {where} is larger than the {max_bytes} byte limit")


# --- folder ------------------------------------------------------------------------------------
class FolderTarget:
    """A hub in a local or mounted folder. Revision files are written to ``incoming/`` (fsync),
    then hard-linked into place, which fails if the name exists, so nothing is overwritten."""

    can_list = True

    def __init__(self, root: Path | str) -> None:
        self.root = Path(root).expanduser().absolute()
        self.url = str(self.root)
        self.key = _key("folder:" + self.url)
        if not self.root.is_dir():
            raise errors.ConfigError(
                f"hub folder {self.url} does not exist; create it, mount the share or check the path"
            )

    def _trip_path(self, year: str, trip_id: str) -> Path:
        return self.root / trip_dir(year, trip_id)

    def list_trip(self, year: str, trip_id: str) -> frozenset[str] | None:
        try:
            names = os.listdir(self._trip_path(year, trip_id))
        except FileNotFoundError:
            return None
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be read ({exc.strerror})") from None
        return frozenset(n for n in names if parse_revision_name(n))

    def list_all(self) -> Listing:
        trips = self.root / TRIPS
        if not trips.is_dir():
            if not self.root.is_dir():
                raise errors.ConfigError(f"hub folder {self.url} does not exist")
            return Listing()
        entries: list[tuple[str, bool, int | None]] = []
        try:
            for year in os.scandir(trips):
                entries.append((f"{TRIPS}/{year.name}", year.is_dir(), None))
                if not year.is_dir():
                    continue
                for tdir in os.scandir(year.path):
                    entries.append((f"{TRIPS}/{year.name}/{tdir.name}", tdir.is_dir(), None))
                    if not tdir.is_dir():
                        continue
                    for f in os.scandir(tdir.path):
                        try:
                            is_dir, size = f.is_dir(), (None if f.is_dir() else f.stat().st_size)
                        except OSError:  # listed and gone: read settles it
                            is_dir, size = False, None
                        entries.append((f"{TRIPS}/{year.name}/{tdir.name}/{f.name}", is_dir, size))
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be listed ({exc.strerror})") from None
        out = Listing()
        for parts, size in _walk_report(TRIPS, entries, out.skipped):
            out.append(RemoteFile(parts[2], parts[1], parts[3], size))
        out.sort(key=lambda f: (f.trip_id, f.name))
        return out

    def read(self, f: RemoteFile, max_bytes: int) -> bytes:
        path = self._trip_path(f.year, f.trip_id) / f.name
        where = f"{TRIPS}/{f.year}/{f.trip_id}/{f.name}"

        def fetch() -> tuple[bytes, bool]:
            try:
                with open(path, "rb") as fh:
                    data = fh.read(max_bytes + 1)
            except FileNotFoundError:
                raise errors.Gone(f"hub file {where} was listed but is gone") from None
            except IsADirectoryError:
                raise errors.BadHubDocument(f"hub entry {where} is a folder, not a revision file") from None
            except OSError as exc:
                raise errors.Unreachable(f"hub file {where} cannot be read ({exc.strerror})") from None
            if len(data) > max_bytes:
                raise _too_big(where, max_bytes)
            return data, True

        return _checked_read(f, where, fetch, None)

    def write_revision(
        self, year: str, trip_id: str, name: str, data: bytes, device_id: str, revision: int, content_hash: str
    ) -> WriteResult:
        if not self.root.is_dir():
            raise errors.ConfigError(f"hub folder {self.url} does not exist; create it or check the path")
        tmp = self.root / incoming_name(device_id, trip_id)
        final_dir = self._trip_path(year, trip_id)
        final = final_dir / name
        try:
            # hub files are shared (an office drive): the permissions the umask gives any new
            # file, not the owner-only mode of the device's own files
            atomic_write_bytes(tmp, data, mode=EXPORT_MODE)
            final_dir.mkdir(parents=True, exist_ok=True)
            try:
                os.link(tmp, final)
                created = True
            except FileExistsError:
                created = self._settle_existing(final, tmp, data)
            except OSError as exc:
                if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV, errno.EMLINK):
                    raise
                # no hard links on this share: the name is content-addressed, so a racing writer
                # can only have put the same bytes there
                if final.exists():
                    created = self._settle_existing(final, tmp, data)
                else:
                    os.replace(tmp, final)
                    created = True
            fsync_dir(final_dir)
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be written ({exc.strerror})") from None
        finally:
            try:
                os.unlink(tmp)
            except FileNotFoundError:
                pass
        return WriteResult(created=created)

    def remove_stale_uploads(self, device_id: str, now: float) -> int:
        """Removes this device's own uploads under ``incoming/<device key>/`` older than
        `STALE_UPLOAD_S` (cut uploads); returns how many. The only deletion sync does."""
        folder = self.root / INCOMING / device_key(device_id)
        removed = 0
        try:
            entries = list(os.scandir(folder))
        except FileNotFoundError:
            return 0
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be listed ({exc.strerror})") from None
        for e in entries:
            try:
                if (
                    is_incoming_name(e.name)
                    and e.is_file(follow_symlinks=False)
                    and e.stat(follow_symlinks=False).st_mtime < now - STALE_UPLOAD_S
                ):
                    os.unlink(e.path)
                    removed += 1
            except FileNotFoundError:
                continue
            except OSError as exc:
                raise errors.Unreachable(f"hub folder {self.url} cannot be cleaned ({exc.strerror})") from None
        return removed

    # change log (sync.changelog): a local folder is listed whole every time (cheap), so no stamps
    def log_folders(self) -> dict[str, float | None] | None:
        try:
            return {e.name: None for e in os.scandir(self.root / LOG) if e.is_dir()}
        except FileNotFoundError:
            return None
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be read ({exc.strerror})") from None

    def log_list(self, device: str) -> tuple[list[str], float | None]:
        try:
            return sorted(os.listdir(self.root / LOG / device)), None
        except (FileNotFoundError, NotADirectoryError):
            return [], None
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be read ({exc.strerror})") from None

    def log_read(self, device: str, name: str, max_bytes: int) -> bytes:
        try:
            with open(self.root / LOG / device / name, "rb") as fh:
                data = fh.read(max_bytes + 1)
        except OSError as exc:
            raise errors.Rejected(f"log entry {device}/{name} cannot be read ({exc.strerror})") from None
        if len(data) > max_bytes:
            raise errors.Rejected(f"log entry {device}/{name} is larger than {max_bytes} bytes")
        return data

    def log_write(self, device: str, name: str, data: bytes, device_id: str) -> bool:
        """Temporary file, then a hard link to the entry's name (fails if it exists)."""
        folder = self.root / LOG / device
        tmp = self.root / INCOMING / device_key(device_id) / f"{name}.{os.urandom(6).hex()}.part"
        try:
            atomic_write_bytes(tmp, data)
            folder.mkdir(parents=True, exist_ok=True)
            try:
                os.link(tmp, folder / name)
                created = True
            except FileExistsError:
                if (folder / name).read_bytes() != data:
                    os.replace(tmp, folder / name)  # content-addressed: only these bytes belong there
                created = False
            except OSError as exc:
                if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV, errno.EMLINK):
                    raise
                os.replace(tmp, folder / name)
                created = True
            fsync_dir(folder)
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be written ({exc.strerror})") from None
        finally:
            try:
                os.unlink(tmp)
            except FileNotFoundError:
                pass
        return created

    @staticmethod
    def _settle_existing(final: Path, tmp: Path, data: bytes) -> bool:
        existing = final.read_bytes()
        if existing == data:
            return False
        if not name_matches(final.name, existing):  # a damaged copy: put the right bytes back
            os.replace(tmp, final)
            return True
        raise errors.IntegrityError(f"hub file {final.name} holds other content than its name says")

    # program tables (sync/program.py): the same write-once dance as revisions
    def list_program(self, kind: str) -> frozenset[str]:
        try:
            names = os.listdir(self.root / program_dir(kind))
        except FileNotFoundError:
            return frozenset()
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be read ({exc.strerror})") from None
        return frozenset(n for n in names if is_program_name(n))

    def read_program(self, kind: str, name: str, max_bytes: int) -> bytes:
        where = program_dir(kind) + name

        def fetch() -> tuple[bytes, bool]:
            try:
                with open(self.root / where, "rb") as fh:
                    data = fh.read(max_bytes + 1)
            except FileNotFoundError:
                raise errors.Gone(f"hub file {where} was listed but is gone") from None
            except OSError as exc:
                raise errors.Unreachable(f"hub file {where} cannot be read ({exc.strerror})") from None
            if len(data) > max_bytes:
                raise _too_big(where, max_bytes)
            return data, True

        return _checked_read(RemoteFile("", kind, name), where, fetch, None, program_name_matches)

    def write_program(self, kind: str, name: str, data: bytes, device_id: str) -> bool:
        """Publishes one table file; False when the hub already held these bytes."""
        final_dir = self.root / program_dir(kind)
        final = final_dir / name
        tmp = self.root / incoming_name(device_id, kind)
        try:
            atomic_write_bytes(tmp, data, mode=EXPORT_MODE)
            final_dir.mkdir(parents=True, exist_ok=True)
            try:
                os.link(tmp, final)
                created = True
            except FileExistsError:
                created = final.read_bytes() != data
                if created:  # damaged: only these bytes belong there
                    os.replace(tmp, final)
            except OSError as exc:
                if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV, errno.EMLINK):
                    raise
                created = not final.exists() or final.read_bytes() != data
                if created:
                    os.replace(tmp, final)
            fsync_dir(final_dir)
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be written ({exc.strerror})") from None
        finally:
            try:
                os.unlink(tmp)
            except FileNotFoundError:
                pass
        return created

    def close(self) -> None:
        pass


# --- WebDAV ------------------------------------------------------------------------------------
_PROPFIND_BODY = (
    b'<?xml version="1.0" encoding="utf-8"?>'
    b'<D:propfind xmlns:D="DAV:"><D:prop><D:resourcetype/><D:getcontentlength/>'
    b"<D:getetag/></D:prop></D:propfind>"
)


_PROPFIND_TIMES_BODY = (
    b'<?xml version="1.0" encoding="utf-8"?>'
    b'<D:propfind xmlns:D="DAV:"><D:prop><D:resourcetype/><D:getcontentlength/>'
    b"<D:getlastmodified/></D:prop></D:propfind>"
)


class WebDavTarget:
    """A hub on a WebDAV collection.

    Writing one revision: PUT the bytes to a fresh name under ``incoming/`` (a cut upload can only
    truncate that scratch file), then MOVE it to its final name with ``Overwrite: F`` (RFC 4918
    §10.6: the hub answers 412 if the name exists, so nothing is overwritten). A 412, or a 404 on
    a MOVE retried after its answer was lost, is settled by reading the final file: the same
    bytes count as success.
    """

    can_list = True

    def __init__(self, url: str, session: Session) -> None:
        if not url.endswith("/"):
            url += "/"
        self.base = url
        self.url = redact_url(url)
        self.key = _key("webdav:" + self.url)
        self.session = session
        self._base_path = unquote(urlsplit(url).path)
        self._made: set[str] = set()
        self._program: dict[str, frozenset[str]] | None = None  # program/ listed once per sync
        #: the Date (server clock, epoch s) of the last PROPFIND answer, for the change log
        self.listed_at: float | None = None

    def _u(self, rel: str) -> str:
        return self.base + quote(rel)

    # collections
    def _mkcol(self, rel: str, depth: int = 0) -> None:
        if rel in self._made:
            return
        resp = self.session.retrying(lambda: self.session.request("MKCOL", self._u(rel)))
        resp.close()
        if resp.status_code in (201, 405):  # 405: it exists already
            self._made.add(rel)
            return
        if resp.status_code == 409 and depth < 6:  # a parent is missing
            parent = rel.rstrip("/").rpartition("/")[0]
            if parent:
                self._mkcol(parent + "/", depth + 1)
                return self._mkcol(rel, depth + 1)
        raise errors.Rejected(f"the hub refused to create collection {rel} ({resp.status_code})", resp.status_code)

    def _mkcol_new(self, rel: str) -> bool:
        """MKCOL that tells whether it made the collection (True) or it was there (False)."""
        resp = self.session.retrying(lambda: self.session.request("MKCOL", self._u(rel)))
        resp.close()
        if resp.status_code == 201:
            self._made.add(rel)
            return True
        if resp.status_code == 405:
            self._made.add(rel)
            return False
        if resp.status_code == 409:
            parent = rel.rstrip("/").rpartition("/")[0]
            self._mkcol(parent + "/")
            return self._mkcol_new(rel)
        raise errors.Rejected(f"the hub refused to create collection {rel} ({resp.status_code})", resp.status_code)

    # listing
    def _propfind(
        self, rel: str, depth: str, body: bytes = _PROPFIND_BODY, with_times: bool = False
    ) -> list[tuple] | None:
        """Entries (relpath, is_folder, size[, last modified]) of one PROPFIND; None for 404.
        The request, its body and the XML are one retried step: a listing cut mid-answer (or
        inside its headers, which reads as an empty 207) is a transport problem, not bad input."""

        def step():
            resp = self.session.request(
                "PROPFIND",
                self._u(rel),
                body=body,
                headers={"Depth": depth, "Content-Type": "application/xml; charset=utf-8"},
                stream=True,
            )
            try:
                if resp.status_code == 404:
                    return None
                if resp.status_code != 207:
                    raise errors.Rejected(f"the hub answered PROPFIND {rel} with {resp.status_code}", resp.status_code)
                raw = self.session.read_body(resp, MAX_LISTING_BYTES, f"listing of {rel}")
                self.listed_at = _http_time(resp.headers.get("Date"))
            finally:
                resp.close()
            try:
                return ET.fromstring(raw)
            except ET.ParseError:
                raise errors.Unreachable(
                    f"the hub's listing of {rel} arrived cut or garbled ({len(raw)} bytes of XML that do not parse)"
                ) from None

        root = self.session.retrying(step)
        if root is None:
            return None
        out: list[tuple] = []
        for r in root.iter("{DAV:}response"):
            href = r.findtext("{DAV:}href") or ""
            try:
                path = unquote(urlsplit(href).path)
            except ValueError:
                continue
            if not path.startswith(self._base_path):
                continue
            relpath = path[len(self._base_path) :]
            is_col = r.find(".//{DAV:}resourcetype/{DAV:}collection") is not None
            size_text = r.findtext(".//{DAV:}getcontentlength")
            size = int(size_text) if size_text and size_text.strip().isdigit() else None
            if with_times:
                out.append((relpath, is_col, size, r.findtext(".//{DAV:}getlastmodified")))
            else:
                out.append((relpath, is_col, size))
        return out

    def list_trip(self, year: str, trip_id: str) -> frozenset[str] | None:
        rel = trip_dir(year, trip_id)
        entries = self._propfind(rel, "1")
        if entries is None:
            return None
        self._made.add(rel)
        return frozenset(
            p.rsplit("/", 1)[-1] for p, col, _ in entries if not col and parse_revision_name(p.rsplit("/", 1)[-1])
        )

    def list_all(self) -> Listing:
        try:
            entries = self._propfind(TRIPS + "/", "infinity")
        except errors.DepthRefused:
            # RFC 4918 §9.1: the server does not list whole trees (the shipped default of common
            # servers); the same listing costs one Depth-1 PROPFIND per folder
            entries = self._walk()
        out = Listing()
        for parts, size in _walk_report(TRIPS, entries or [], out.skipped):
            out.append(RemoteFile(parts[2], parts[1], parts[3], size))
        out.sort(key=lambda f: (f.trip_id, f.name))
        return out

    def _walk(self) -> list[tuple[str, bool, int | None]]:
        """Depth-1 walk for servers that refuse ``Depth: infinity`` (3 levels, bounded); only
        folders that fit the layout are entered."""
        found: list[tuple[str, bool, int | None]] = []
        level = [TRIPS + "/"]
        for _ in range(3):
            nxt = []
            for rel in level:
                for relpath, is_col, size in self._propfind(rel, "1") or []:
                    if relpath.rstrip("/") == rel.rstrip("/"):
                        continue
                    found.append((relpath, is_col, size))
                    parts = tuple(p for p in relpath.strip("/").split("/") if p)
                    if is_col and len(parts) < 4 and odd_entry(parts, True) is None:
                        nxt.append(quote_rel(parts))
            level = nxt
        return found

    # reading
    def read(self, f: RemoteFile, max_bytes: int) -> bytes:
        rel = trip_dir(f.year, f.trip_id) + f.name
        if f.size is not None and f.size > max_bytes:
            raise _too_big(rel, max_bytes)

        return _checked_read(f, rel, functools.partial(self._fetch, rel, max_bytes), self.session)

    def _fetch(self, rel: str, max_bytes: int) -> tuple[bytes, bool]:
        """One GET of a listed hub file: (its bytes, whether the answer carried its length)."""
        resp = self.session.request("GET", self._u(rel), stream=True)
        try:
            if resp.status_code in (404, 410):
                raise errors.Gone(f"hub file {rel} was listed but is gone")
            if resp.status_code != 200:
                raise errors.Rejected(f"the hub answered GET {rel} with {resp.status_code}", resp.status_code)
            data = self.session.read_body(resp, max_bytes, rel, too_big=lambda: _too_big(rel, max_bytes))
            # read_body checked a Content-Length; a chunked body ends with its last chunk
            framed = (
                bool(resp.headers.get("Content-Length"))
                or "chunked" in resp.headers.get("Transfer-Encoding", "").lower()
            )
            return data, framed
        finally:
            resp.close()

    def _get_bytes(self, rel: str, limit: int) -> bytes | None:
        def step() -> bytes | None:
            resp = self.session.request("GET", self._u(rel), stream=True)
            try:
                if resp.status_code == 404:
                    return None
                if resp.status_code != 200:
                    raise errors.Rejected(f"the hub answered GET {rel} with {resp.status_code}", resp.status_code)
                return self.session.read_body(resp, limit, rel)
            finally:
                resp.close()

        return self.session.retrying(step)

    # change log (sync.changelog)
    def log_folders(self) -> dict[str, float | None] | None:
        return self._dated_folders(LOG)

    def _dated_folders(self, top: str) -> dict[str, float | None] | None:
        """The folders directly under `top` with their last change (server clock), from one Depth-1
        PROPFIND; None when the hub has no `top`."""
        entries = self._propfind(top + "/", "1", body=_PROPFIND_TIMES_BODY, with_times=True)
        if entries is None:
            return None
        out: dict[str, float | None] = {}
        for relpath, is_col, _size, modified in entries:
            parts = relpath.strip("/").split("/")
            if is_col and len(parts) == 2 and parts[0] == top:
                out[parts[1]] = _http_time(modified)
        return out

    def log_list(self, device: str) -> tuple[list[str], float | None]:
        names, listed_at = self._file_names(f"{LOG}/{device}/")
        return sorted(names), listed_at

    def _file_names(self, rel: str) -> tuple[list[str], float | None]:
        """The names of the files directly in folder `rel` from one Depth-1 PROPFIND, and the ``Date``
        of that answer (server clock); ([], None) when the folder does not exist."""
        self.listed_at = None
        entries = self._propfind(rel, "1")
        if entries is None:
            return [], None
        return [p.rstrip("/").rsplit("/", 1)[-1] for p, col, *_ in entries if not col], self.listed_at

    def log_read(self, device: str, name: str, max_bytes: int) -> bytes:
        data = self._get_bytes(f"{LOG}/{device}/{name}", max_bytes)
        if data is None:
            raise errors.Rejected(f"log entry {device}/{name} disappeared", 404)
        return data

    def log_write(self, device: str, name: str, data: bytes, device_id: str) -> bool:
        """One PUT with ``If-None-Match: *`` straight to the entry's name (no upload + MOVE: a cut
        upload leaves at worst a damaged entry, which readers detect by its hash and answer with
        one walk, and which the next try here replaces)."""
        rel = f"{LOG}/{device}/{name}"

        def step() -> bool:
            for _ in range(3):
                resp = self.session.request(
                    "PUT", self._u(rel), body=data, headers={"Content-Type": "application/json", "If-None-Match": "*"}
                )
                resp.close()
                if resp.status_code in (200, 201, 204):
                    return True
                if resp.status_code == 409:  # log/ or log/<device>/ missing
                    self._made.discard(f"{LOG}/{device}/")
                    self._mkcol(f"{LOG}/{device}/")
                    continue
                if resp.status_code == 412:
                    existing = self._get_bytes(rel, len(data) + 1)
                    if existing == data:
                        return False
                    resp = self.session.request(
                        "PUT", self._u(rel), body=data, headers={"Content-Type": "application/json"}
                    )
                    resp.close()
                    if resp.status_code in (200, 201, 204):
                        return True
                raise errors.Rejected(f"the hub refused log entry {rel} ({resp.status_code})", resp.status_code)
            raise errors.Rejected(f"the hub refused to create the collection for {rel}")

        return self.session.retrying(step)

    # cleaning
    def remove_stale_uploads(self, device_id: str, now: float) -> int:
        """Removes this device's own uploads under ``incoming/<device key>/`` whose last change is
        older than `STALE_UPLOAD_S` (cut uploads): one PROPFIND, one DELETE each. The only
        deletion sync does."""
        rel = f"{INCOMING}/{device_key(device_id)}/"
        entries = self._propfind(rel, "1", body=_PROPFIND_TIMES_BODY, with_times=True) or []
        removed = 0
        for relpath, is_col, _size, modified in entries:
            name = relpath.rstrip("/").rsplit("/", 1)[-1]
            if is_col or not relpath.startswith(rel) or not is_incoming_name(name):
                continue
            when = _http_time(modified)
            if when is None or when >= now - STALE_UPLOAD_S:
                continue
            resp = self.session.retrying(functools.partial(self.session.request, "DELETE", self._u(rel + name)))
            resp.close()
            if resp.status_code in (200, 204):
                removed += 1
            elif resp.status_code != 404:
                raise errors.Rejected(f"the hub refused to remove {rel}{name} ({resp.status_code})", resp.status_code)
        return removed

    # writing
    def ensure_trip_collection(self, year: str, trip_id: str) -> bool:
        """Makes the trip's collection; True if it was new (nobody else has written this trip)."""
        return self._mkcol_new(trip_dir(year, trip_id))

    def write_revision(
        self, year: str, trip_id: str, name: str, data: bytes, device_id: str, revision: int, content_hash: str
    ) -> WriteResult:
        tdir = trip_dir(year, trip_id)
        final_rel = tdir + name
        tmp_rel, etag = self.session.retrying(lambda: self._put_temp(device_id, trip_id, data))
        outcome = self.session.retrying(lambda: self._move(tmp_rel, final_rel, year, trip_id))
        if outcome in ("moved", "repaired"):
            return WriteResult(created=True, etag=etag)
        # "exists" (412) or "gone" (404: a retried MOVE whose first try landed)
        try:
            existing = self._get_bytes(final_rel, len(data) + 1)
        except errors.Rejected:
            existing = b""  # larger than ours or unreadable: not our bytes
        if existing == data:
            return WriteResult(created=(outcome == "gone"), etag=etag)
        if outcome == "exists" and (existing is None or not name_matches(name, existing)):
            # the file under this content-addressed name is damaged; only these bytes belong there
            tmp_rel, etag = self.session.retrying(lambda: self._put_temp(device_id, trip_id, data))
            self.session.retrying(lambda: self._move(tmp_rel, final_rel, year, trip_id, overwrite=True))
            return WriteResult(created=True, etag=etag)
        raise errors.Unreachable(f"hub file {final_rel} could not be confirmed after MOVE; will retry")

    def _put_temp(self, device_id: str, trip_id: str, data: bytes) -> tuple[str, str | None]:
        return self._put_upload(incoming_name(device_id, trip_id), device_id, data)

    def _put_upload(self, tmp_rel: str, device_id: str, data: bytes) -> tuple[str, str | None]:
        """PUTs `data` to the fresh upload name `tmp_rel` (under ``incoming/<device key>/``, made
        when missing); returns the name and the ETag the hub gave."""
        for _ in range(2):
            resp = self.session.request(
                "PUT", self._u(tmp_rel), body=data, headers={"Content-Type": "application/json", "If-None-Match": "*"}
            )
            resp.close()
            if resp.status_code in (200, 201, 204):
                return tmp_rel, resp.headers.get("ETag")
            if resp.status_code == 409:  # incoming/<device>/ missing
                self._made.discard(f"{INCOMING}/{device_key(device_id)}/")
                self._mkcol(f"{INCOMING}/{device_key(device_id)}/")
                continue
            raise errors.Rejected(f"the hub refused an upload to {INCOMING}/ ({resp.status_code})", resp.status_code)
        raise errors.Rejected(f"the hub refused to create {INCOMING}/ for uploads")

    def _move(self, src_rel: str, dst_rel: str, year: str, trip_id: str, overwrite: bool = False) -> str:
        for _ in range(2):
            resp = self.session.request(
                "MOVE",
                self._u(src_rel),
                headers={"Destination": self._u(dst_rel), "Overwrite": "T" if overwrite else "F"},
            )
            resp.close()
            code = resp.status_code
            if code in (201, 204):
                return "repaired" if overwrite else "moved"
            if code == 412:
                return "exists"
            if code == 404:
                return "gone"
            if code == 409:  # the trip's collection is missing
                self._mkcol(trip_dir(year, trip_id))
                continue
            raise errors.Rejected(f"the hub refused MOVE to {dst_rel} ({code})", code)
        raise errors.Rejected(f"the hub refused MOVE to {dst_rel}: its collection cannot be made")

    # program tables (sync/program.py): PUT to incoming/, MOVE with Overwrite: F, like revisions
    def list_program(self, kind: str) -> frozenset[str]:
        """The table files of one kind; both kinds come from one PROPFIND of ``program/``
        (Depth: infinity; per kind at Depth 1 where the server refuses that)."""
        if self._program is None:
            try:
                self._program = self.list_program_tree()
            except errors.DepthRefused:
                self._program = {k: self.list_program_folder(k)[0] for k in PROGRAM_KINDS}
        return self._program[kind]

    def list_program_tree(self) -> dict[str, frozenset[str]]:
        """Both tables' files from one ``PROPFIND Depth: infinity`` of ``program/``; raises
        `errors.DepthRefused` where the server refuses that (RFC 4918 §9.1)."""
        found: dict[str, set[str]] = {k: set() for k in PROGRAM_KINDS}
        for relpath, is_col, *_ in self._propfind(PROGRAM + "/", "infinity") or []:
            parts = relpath.strip("/").split("/")
            if (
                not is_col
                and len(parts) == 3
                and parts[0] == PROGRAM
                and parts[1] in found
                and is_program_name(parts[2])
            ):
                found[parts[1]].add(parts[2])
        return {k: frozenset(v) for k, v in found.items()}

    def program_folders(self) -> dict[str, float | None] | None:
        """The table folders under ``program/`` with their last change (server clock), from one
        Depth-1 PROPFIND; None when the hub has no ``program/``. A pull lists a table's folder
        only when its date moved (see `sync.engine._pull_program`)."""
        folders = self._dated_folders(PROGRAM)
        return None if folders is None else {k: v for k, v in folders.items() if k in PROGRAM_KINDS}

    def list_program_folder(self, kind: str) -> tuple[frozenset[str], float | None]:
        """The table files of one kind from one Depth-1 PROPFIND of its folder, and the ``Date``
        of that answer (server clock)."""
        names, listed_at = self._file_names(program_dir(kind))
        return frozenset(n for n in names if is_program_name(n)), listed_at

    def read_program(self, kind: str, name: str, max_bytes: int) -> bytes:
        rel = program_dir(kind) + name
        return _checked_read(
            RemoteFile("", kind, name),
            rel,
            functools.partial(self._fetch, rel, max_bytes),
            self.session,
            program_name_matches,
        )

    def write_program(self, kind: str, name: str, data: bytes, device_id: str) -> bool:
        """Publishes one table file; False when the hub already held these bytes."""
        folder = program_dir(kind)
        final_rel = folder + name
        self._mkcol(folder)

        def put() -> str:
            return self._put_upload(incoming_name(device_id, kind), device_id, data)[0]

        def move(tmp_rel: str, overwrite: bool) -> int:
            resp = self.session.request(
                "MOVE",
                self._u(tmp_rel),
                headers={"Destination": self._u(final_rel), "Overwrite": "T" if overwrite else "F"},
            )
            resp.close()
            if resp.status_code not in (201, 204, 404, 412):
                raise errors.Rejected(f"the hub refused MOVE to {final_rel} ({resp.status_code})", resp.status_code)
            return resp.status_code

        self._program = None
        tmp_rel = self.session.retrying(put)
        code = self.session.retrying(lambda: move(tmp_rel, False))
        if code in (201, 204):
            return True
        try:
            existing = self._get_bytes(final_rel, len(data) + 1)
        except errors.Rejected:
            existing = b""
        if existing == data:
            return code == 404
        if code == 412:  # a damaged copy under this content-addressed name
            tmp_rel = self.session.retrying(put)
            self.session.retrying(lambda: move(tmp_rel, True))
            return True
        raise errors.Unreachable(f"hub file {final_rel} could not be confirmed after MOVE; will retry")

    def close(self) -> None:
        pass


def quote_rel(parts: tuple[str, ...]) -> str:
    """A folder path below the hub from its parts, with a trailing slash."""
    return "/".join(parts) + "/"


def _http_time(text: str | None) -> float | None:
    """An HTTP date (RFC 9110) as epoch seconds, or None."""
    if not text:
        return None
    try:
        return parsedate_to_datetime(text.strip()).timestamp()
    except (TypeError, ValueError, IndexError, OverflowError):
        return None


# --- HTTP POST endpoint ----------------------------------------------------------------------------
class PostTarget:
    """An intake service taking one trip document per POST (push only).

    Each POST carries ``Idempotency-Key: <trip uuid>-r<revision>-<first 16 hex of content hash>``
    so a POST re-sent after a lost answer is recognised by the service. A 2xx whose body is the
    acknowledgement (`ack_problem`: JSON echoing the trip id and content hash): accepted; any
    other 2xx: `NotDelivered`; 409: the service holds a conflicting version (reported as a
    conflict); other 4xx: rejected.
    """

    can_list = False

    def __init__(self, url: str, session: Session) -> None:
        self.endpoint = url
        self.url = POST_PREFIX + redact_url(url)
        self.key = _key("post:" + redact_url(url))
        self.session = session

    @staticmethod
    def idempotency_key(trip_id: str, revision: int, content_hash: str) -> str:
        return f"{canonical_trip_id(trip_id)}-r{revision}-{content_hash.split(':', 1)[-1][:16]}"

    def list_trip(self, year: str, trip_id: str) -> frozenset[str] | None:
        raise errors.ConfigError("an HTTP endpoint cannot list what it holds")

    def list_all(self) -> list[RemoteFile]:
        raise errors.ConfigError(
            f"{self.url} is an HTTP endpoint that only receives trips; pull from a folder or WebDAV hub"
        )

    def read(self, f: RemoteFile, max_bytes: int) -> bytes:
        raise errors.ConfigError("an HTTP endpoint cannot be read from")

    # an intake endpoint takes trips only: the site list and settings travel by folder or WebDAV
    def list_program(self, kind: str) -> frozenset[str]:
        raise errors.ConfigError("an HTTP endpoint takes trips only, not the site list or settings")

    def read_program(self, kind: str, name: str, max_bytes: int) -> bytes:
        raise errors.ConfigError("an HTTP endpoint takes trips only, not the site list or settings")

    def write_program(self, kind: str, name: str, data: bytes, device_id: str) -> bool:
        raise errors.ConfigError("an HTTP endpoint takes trips only, not the site list or settings")

    def write_revision(
        self, year: str, trip_id: str, name: str, data: bytes, device_id: str, revision: int, content_hash: str
    ) -> WriteResult:
        key = self.idempotency_key(trip_id, revision, content_hash)

        def step():
            resp = self.session.request(
                "POST",
                self.endpoint,
                body=data,
                headers={"Content-Type": "application/json", "Accept": "application/json", "Idempotency-Key": key},
                stream=True,
            )
            try:
                body = b""
                if 200 <= resp.status_code < 300:
                    body = self.session.read_body(
                        resp,
                        MAX_ACK_BYTES,
                        "the endpoint's answer",
                        too_big=lambda: errors.NotDelivered(
                            f"the endpoint answered {resp.status_code} with more than {MAX_ACK_BYTES} "
                            f"bytes, not an acknowledgement; trip {trip_id} is not counted as delivered"
                        ),
                    )
                return resp.status_code, resp.headers, body
            finally:
                resp.close()

        status, headers, body = self.session.retrying(step)
        if 200 <= status < 300:
            problem = ack_problem(body, trip_id, content_hash)
            if problem:
                raise errors.NotDelivered(
                    f"the endpoint answered {status} but {problem} ({_describe(headers, body)}); trip "
                    f"{trip_id} is not counted as delivered and is sent again next sync — check that "
                    f"the address is the intake endpoint itself"
                )
            return WriteResult(created=True, etag=headers.get("ETag"))
        if status == 409:
            raise errors.Conflict(f"the endpoint holds a conflicting version of trip {trip_id} (409)")
        raise errors.Rejected(f"the endpoint refused trip {trip_id} ({status})", status)

    def close(self) -> None:
        pass


def _check_url(url: str) -> None:
    """The rules for an http(s) hub address; ConfigError (never echoing a password) when one fails."""
    parts = urlsplit(url)
    if parts.username is not None or parts.password is not None:
        raise errors.ConfigError(
            "the hub address must not carry a user name or password; put "
            "them in the credentials file or the environment"
        )
    if not parts.hostname:
        raise errors.ConfigError(f"the hub address {redact_url(url)} has no host name")
    if parts.scheme.lower() == "http" and parts.hostname not in _LOOPBACK:
        raise errors.ConfigError(
            f"plain http:// is allowed only on this machine (127.0.0.1); use https:// for {parts.hostname}"
        )


def check_address(address: str) -> None:
    """Checks a web hub address by open_target's rules without opening anything (a screen checks
    what was typed before storing it); ConfigError saying what is wrong. Folders are not looked at."""
    address = (address or "").strip()
    url = address[len(POST_PREFIX) :] if address.lower().startswith(POST_PREFIX) else address
    try:
        scheme = urlsplit(url).scheme.lower() if "://" in url else ""
    except ValueError:
        raise errors.ConfigError("the hub address is not a readable web address") from None
    if scheme in ("http", "https"):
        _check_url(url)


def ack_problem(body: bytes, trip_id: str, content_hash: str) -> str | None:
    """What is wrong with an intake endpoint's 2xx answer, or None for a proper acknowledgement:
    a JSON object echoing ``trip_id`` (the trip's UUID) and ``content_hash`` (``sha256:<hex>`` of
    the bytes sent). See sync/DESIGN.md, "HTTP endpoint"."""
    import json

    try:
        ack = json.loads(body.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError):
        return "not with the JSON acknowledgement sync expects"
    if not isinstance(ack, dict):
        return "not with a JSON object acknowledging the trip"
    if str(ack.get("trip_id", "")).lower() != canonical_trip_id(trip_id):
        return f"its acknowledgement names trip {shown_name(str(ack.get('trip_id')), 40)!s}, not this one"
    if str(ack.get("content_hash", "")).lower() != content_hash.lower():
        return "its acknowledgement does not echo the content hash of the bytes sent"
    return None


def _describe(headers, body: bytes) -> str:  # noqa: ANN001
    """What came back, in a few words: content type, size and the first characters."""
    ctype = (headers.get("Content-Type") or "no content type").split(";")[0].strip()
    text = body[:60].decode("utf-8", "replace")
    snippet = " ".join("".join(c if c.isprintable() else " " for c in text).split())
    return f"{ctype}, {len(body)} bytes" + (f": “{snippet}{'…' if len(body) > 60 else ''}”" if snippet else "")


def open_target(address: str, session: Session) -> Target:
    """The target for a hub address (see the module docstring); ConfigError for anything else."""
    if not isinstance(address, str) or not address.strip():
        raise errors.ConfigError(
            "the hub address is empty; give a folder, an https:// WebDAV URL or a post+https:// endpoint"
        )
    address = address.strip()
    lower = address.lower()
    is_post = lower.startswith(POST_PREFIX)
    url = address[len(POST_PREFIX) :] if is_post else address
    scheme = urlsplit(url).scheme.lower() if "://" in url else ""
    if scheme in ("http", "https"):
        _check_url(url)
        return PostTarget(url, session) if is_post else WebDavTarget(url, session)
    if is_post:
        raise errors.ConfigError("a post+ endpoint address must continue with http:// or https://")
    if scheme == "file":
        path = unquote(urlsplit(url).path)
        return FolderTarget(path)
    if scheme:
        raise errors.ConfigError(
            f"hub addresses of kind {scheme}:// are not supported; give a folder, "
            f"an https:// WebDAV URL or a post+https:// endpoint"
        )
    return FolderTarget(address)
