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
import hashlib
import os
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from email.utils import parsedate_to_datetime
from pathlib import Path
from typing import Protocol
from urllib.parse import quote, unquote, urlsplit

from core.store.atomic import atomic_write_bytes, fsync_dir
from sync import errors
from sync.layout import (INCOMING, LOG, TRIPS, canonical_trip_id, device_key, incoming_name,
                         name_matches, parse_revision_name, trip_dir)
from sync.session import Session, redact_url

__all__ = ["RemoteFile", "WriteResult", "Target", "FolderTarget", "WebDavTarget", "PostTarget",
           "open_target", "POST_PREFIX", "MAX_LISTING_BYTES"]

POST_PREFIX = "post+"
MAX_LISTING_BYTES = 64 * 1024 * 1024
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
    created: bool          # False: the hub already held these exact bytes
    etag: str | None = None


class Target(Protocol):
    url: str           # shown to people: never carries credentials
    key: str           # stable short id of this hub (names the outbox folder)
    can_list: bool     # False for a POST endpoint: only the outbox knows what was sent

    def list_trip(self, year: str, trip_id: str) -> frozenset[str] | None: ...
    def list_all(self) -> list[RemoteFile]: ...
    def read(self, f: RemoteFile, max_bytes: int) -> bytes: ...
    def write_revision(self, year: str, trip_id: str, name: str, data: bytes,
                       device_id: str, revision: int, content_hash: str) -> WriteResult: ...
    def close(self) -> None: ...


def _key(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def _check_read(f: RemoteFile, data: bytes, where: str) -> bytes:
    if not name_matches(f.name, data):
        raise errors.IntegrityError(
            f"hub copy {where} does not match the content hash in its name (truncated or altered)")
    return data


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
            raise errors.ConfigError(f"hub folder {self.url} does not exist; create it, mount the "
                                     f"share or check the path")

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

    def list_all(self) -> list[RemoteFile]:
        out: list[RemoteFile] = []
        trips = self.root / TRIPS
        if not trips.is_dir():
            if not self.root.is_dir():
                raise errors.ConfigError(f"hub folder {self.url} does not exist")
            return out
        for year in sorted(p for p in trips.iterdir() if p.is_dir()):
            for tdir in sorted(p for p in year.iterdir() if p.is_dir()):
                try:
                    tid = canonical_trip_id(tdir.name)
                except ValueError:
                    continue
                for f in sorted(tdir.iterdir()):
                    if parse_revision_name(f.name) and f.is_file():
                        out.append(RemoteFile(tid, year.name, f.name, f.stat().st_size))
        return out

    def read(self, f: RemoteFile, max_bytes: int) -> bytes:
        path = self._trip_path(f.year, f.trip_id) / f.name
        where = f"{TRIPS}/{f.year}/{f.trip_id}/{f.name}"
        with open(path, "rb") as fh:
            data = fh.read(max_bytes + 1)
        if len(data) > max_bytes:
            raise _too_big(where, max_bytes)
        return _check_read(f, data, where)

    def write_revision(self, year: str, trip_id: str, name: str, data: bytes,
                       device_id: str, revision: int, content_hash: str) -> WriteResult:
        if not self.root.is_dir():
            raise errors.ConfigError(f"hub folder {self.url} does not exist; create it or check the path")
        tmp = self.root / incoming_name(device_id, trip_id)
        final_dir = self._trip_path(year, trip_id)
        final = final_dir / name
        try:
            atomic_write_bytes(tmp, data)
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

    # change log (sync.changelog): a local folder is listed whole every time (cheap), so no stamps
    def log_folders(self) -> dict[str, float | None] | None:
        root = self.root / LOG
        try:
            return {e.name: None for e in os.scandir(root) if e.is_dir()}
        except FileNotFoundError:
            return None
        except OSError as exc:
            raise errors.Unreachable(f"hub folder {self.url} cannot be read ({exc.strerror})") from None

    def log_list(self, device: str) -> tuple[list[str], float | None]:
        try:
            return sorted(os.listdir(self.root / LOG / device)), None
        except FileNotFoundError:
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
            raise _too_big(f"{LOG}/{device}/{name}", max_bytes)
        return data

    def log_write(self, device: str, name: str, data: bytes, device_id: str) -> bool:
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
                    os.replace(tmp, folder / name)   # content-addressed: only these bytes belong there
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
        if not name_matches(final.name, existing):   # a damaged copy: put the right bytes back
            os.replace(tmp, final)
            return True
        raise errors.IntegrityError(f"hub file {final.name} holds other content than its name says")

    def close(self) -> None:
        pass


# --- WebDAV ------------------------------------------------------------------------------------
_PROPFIND_BODY = (b'<?xml version="1.0" encoding="utf-8"?>'
                  b'<D:propfind xmlns:D="DAV:"><D:prop><D:resourcetype/><D:getcontentlength/>'
                  b'<D:getetag/><D:getlastmodified/></D:prop></D:propfind>')


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

    def _u(self, rel: str) -> str:
        return self.base + quote(rel)

    # collections
    def _mkcol(self, rel: str, depth: int = 0) -> None:
        if rel in self._made:
            return
        resp = self.session.retrying(lambda: self.session.request("MKCOL", self._u(rel)))
        resp.close()
        if resp.status_code in (201, 405):          # 405: it exists already
            self._made.add(rel)
            return
        if resp.status_code == 409 and depth < 6:    # a parent is missing
            parent = rel.rstrip("/").rpartition("/")[0]
            if parent:
                self._mkcol(parent + "/", depth + 1)
                return self._mkcol(rel, depth + 1)
        raise errors.Rejected(f"the hub refused to create collection {rel} ({resp.status_code})",
                              resp.status_code)

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
        raise errors.Rejected(f"the hub refused to create collection {rel} ({resp.status_code})",
                              resp.status_code)

    # listing
    def _propfind(self, rel: str, depth: str) -> list[tuple[str, bool, int | None]] | None:
        got = self._propfind_timed(rel, depth)
        return None if got is None else [(p, c, n) for p, c, n, _ in got[0]]

    def _propfind_timed(self, rel: str, depth: str
                        ) -> tuple[list[tuple[str, bool, int | None, float | None]], float | None] | None:
        """(entries as (relpath, is_collection, size, modified), the answer's Date), both as
        epoch seconds of the server's clock; None for 404."""
        def step():
            return self.session.request("PROPFIND", self._u(rel), body=_PROPFIND_BODY,
                                        headers={"Depth": depth,
                                                 "Content-Type": "application/xml; charset=utf-8"},
                                        stream=True)
        resp = self.session.retrying(step)
        try:
            if resp.status_code == 404:
                return None
            if resp.status_code != 207:
                raise errors.Rejected(f"the hub answered PROPFIND {rel} with {resp.status_code}",
                                      resp.status_code)
            raw = _read_capped(resp, MAX_LISTING_BYTES, f"listing of {rel}")
            answered = _http_time(resp.headers.get("Date"))
        finally:
            resp.close()
        try:
            root = ET.fromstring(raw)
        except ET.ParseError:
            raise errors.Rejected(f"the hub's listing of {rel} is not valid WebDAV XML") from None
        out = []
        for r in root.iter("{DAV:}response"):
            href = r.findtext("{DAV:}href") or ""
            path = unquote(urlsplit(href).path)
            if not path.startswith(self._base_path):
                continue
            relpath = path[len(self._base_path):]
            is_col = r.find(".//{DAV:}resourcetype/{DAV:}collection") is not None
            size_text = r.findtext(".//{DAV:}getcontentlength")
            size = int(size_text) if size_text and size_text.strip().isdigit() else None
            out.append((relpath, is_col, size, _http_time(r.findtext(".//{DAV:}getlastmodified"))))
        return out, answered

    def list_trip(self, year: str, trip_id: str) -> frozenset[str] | None:
        rel = trip_dir(year, trip_id)
        entries = self._propfind(rel, "1")
        if entries is None:
            return None
        self._made.add(rel)
        return frozenset(p.rsplit("/", 1)[-1] for p, col, _ in entries
                         if not col and parse_revision_name(p.rsplit("/", 1)[-1]))

    def list_all(self) -> list[RemoteFile]:
        try:
            entries = self._propfind(TRIPS + "/", "infinity")
        except errors.Unauthorized:
            # a 403 here is usually the server refusing infinite depth (RFC 4918 §9.1), not the
            # credentials: walk with Depth 1, which raises Unauthorized again if they are wrong
            entries = self._walk()
        except errors.Rejected as exc:
            if exc.status != 403:
                raise
            entries = self._walk()
        out = []
        for relpath, is_col, size in entries or []:
            parts = relpath.strip("/").split("/")
            if is_col or len(parts) != 4 or parts[0] != TRIPS or not parse_revision_name(parts[3]):
                continue
            try:
                tid = canonical_trip_id(parts[2])
            except ValueError:
                continue
            out.append(RemoteFile(tid, parts[1], parts[3], size))
        return sorted(out, key=lambda f: (f.trip_id, f.name))

    def _walk(self) -> list[tuple[str, bool, int | None]]:
        """Depth-1 walk for servers that refuse ``Depth: infinity`` (3 levels, bounded)."""
        found: list[tuple[str, bool, int | None]] = []
        level = [TRIPS + "/"]
        for _ in range(3):
            nxt = []
            for rel in level:
                for relpath, is_col, size in self._propfind(rel, "1") or []:
                    if relpath.rstrip("/") == rel.rstrip("/"):
                        continue
                    found.append((relpath, is_col, size))
                    if is_col:
                        nxt.append(relpath if relpath.endswith("/") else relpath + "/")
            level = nxt
        return found

    # change log (sync.changelog)
    def log_folders(self) -> dict[str, float | None] | None:
        got = self._propfind_timed(LOG + "/", "1")
        if got is None:
            return None
        out = {}
        for relpath, is_col, _, modified in got[0]:
            parts = relpath.strip("/").split("/")
            if is_col and len(parts) == 2 and parts[0] == LOG:
                out[parts[1]] = modified
        return out

    def log_list(self, device: str) -> tuple[list[str], float | None]:
        got = self._propfind_timed(f"{LOG}/{device}/", "1")
        if got is None:
            return [], None
        names = [p.rstrip("/").rsplit("/", 1)[-1] for p, col, _, _ in got[0] if not col]
        return sorted(names), got[1]

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
                resp = self.session.request("PUT", self._u(rel), body=data,
                                            headers={"Content-Type": "application/json", "If-None-Match": "*"})
                resp.close()
                if resp.status_code in (200, 201, 204):
                    return True
                if resp.status_code == 409:           # log/ or log/<device>/ missing
                    self._made.discard(f"{LOG}/{device}/")
                    self._mkcol(f"{LOG}/{device}/")
                    continue
                if resp.status_code == 412:
                    existing = self._get_bytes(rel, len(data) + 1)
                    if existing == data:
                        return False
                    resp = self.session.request("PUT", self._u(rel), body=data,
                                                headers={"Content-Type": "application/json"})
                    resp.close()
                    if resp.status_code in (200, 201, 204):
                        return True
                raise errors.Rejected(f"the hub refused log entry {rel} ({resp.status_code})", resp.status_code)
            raise errors.Rejected(f"the hub refused to create the collection for {rel}")
        return self.session.retrying(step)

    # reading
    def read(self, f: RemoteFile, max_bytes: int) -> bytes:
        rel = trip_dir(f.year, f.trip_id) + f.name
        if f.size is not None and f.size > max_bytes:
            raise _too_big(rel, max_bytes)
        resp = self.session.retrying(lambda: self.session.request("GET", self._u(rel), stream=True))
        try:
            if resp.status_code == 404:
                raise errors.Rejected(f"hub file {rel} disappeared while reading", 404)
            if resp.status_code != 200:
                raise errors.Rejected(f"the hub answered GET {rel} with {resp.status_code}",
                                      resp.status_code)
            data = _read_capped(resp, max_bytes, rel, bad=True)
        finally:
            resp.close()
        return _check_read(f, data, rel)

    def _get_bytes(self, rel: str, limit: int) -> bytes | None:
        resp = self.session.retrying(lambda: self.session.request("GET", self._u(rel), stream=True))
        try:
            if resp.status_code == 404:
                return None
            if resp.status_code != 200:
                raise errors.Rejected(f"the hub answered GET {rel} with {resp.status_code}",
                                      resp.status_code)
            return _read_capped(resp, limit, rel)
        finally:
            resp.close()

    # writing
    def ensure_trip_collection(self, year: str, trip_id: str) -> bool:
        """Makes the trip's collection; True if it was new (nobody else has written this trip)."""
        return self._mkcol_new(trip_dir(year, trip_id))

    def write_revision(self, year: str, trip_id: str, name: str, data: bytes,
                       device_id: str, revision: int, content_hash: str) -> WriteResult:
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
            existing = b""      # larger than ours or unreadable: not our bytes
        if existing == data:
            return WriteResult(created=(outcome == "gone"), etag=etag)
        if outcome == "exists" and (existing is None or not name_matches(name, existing)):
            # the file under this content-addressed name is damaged; only these bytes belong there
            tmp_rel, etag = self.session.retrying(lambda: self._put_temp(device_id, trip_id, data))
            self.session.retrying(lambda: self._move(tmp_rel, final_rel, year, trip_id, overwrite=True))
            return WriteResult(created=True, etag=etag)
        raise errors.Unreachable(f"hub file {final_rel} could not be confirmed after MOVE; will retry")

    def _put_temp(self, device_id: str, trip_id: str, data: bytes) -> tuple[str, str | None]:
        tmp_rel = incoming_name(device_id, trip_id)   # a fresh name for every attempt
        for _ in range(2):
            resp = self.session.request("PUT", self._u(tmp_rel), body=data,
                                        headers={"Content-Type": "application/json",
                                                 "If-None-Match": "*"})
            resp.close()
            if resp.status_code in (200, 201, 204):
                return tmp_rel, resp.headers.get("ETag")
            if resp.status_code == 409:             # incoming/<device>/ missing
                self._made.discard(f"{INCOMING}/{device_key(device_id)}/")
                self._mkcol(f"{INCOMING}/{device_key(device_id)}/")
                continue
            raise errors.Rejected(f"the hub refused an upload to {INCOMING}/ ({resp.status_code})",
                                  resp.status_code)
        raise errors.Rejected(f"the hub refused to create {INCOMING}/ for uploads")

    def _move(self, src_rel: str, dst_rel: str, year: str, trip_id: str, overwrite: bool = False) -> str:
        for _ in range(2):
            resp = self.session.request("MOVE", self._u(src_rel),
                                        headers={"Destination": self._u(dst_rel),
                                                 "Overwrite": "T" if overwrite else "F"})
            resp.close()
            code = resp.status_code
            if code in (201, 204):
                return "repaired" if overwrite else "moved"
            if code == 412:
                return "exists"
            if code == 404:
                return "gone"
            if code == 409:                          # the trip's collection is missing
                self._mkcol(trip_dir(year, trip_id))
                continue
            raise errors.Rejected(f"the hub refused MOVE to {dst_rel} ({code})", code)
        raise errors.Rejected(f"the hub refused MOVE to {dst_rel}: its collection cannot be made")

    def close(self) -> None:
        pass


def _http_time(text: str | None) -> float | None:
    """An HTTP date (RFC 9110) as epoch seconds, or None."""
    if not text:
        return None
    try:
        return parsedate_to_datetime(text.strip()).timestamp()
    except (TypeError, ValueError, IndexError):
        return None


def _read_capped(resp, limit: int, where: str, bad: bool = False) -> bytes:  # noqa: ANN001
    length = resp.headers.get("Content-Length")
    if length and length.isdigit() and int(length) > limit:
        raise (_too_big(where, limit) if bad else errors.Rejected(f"{where} is larger than {limit} bytes"))
    chunks, total = [], 0
    try:
        for chunk in resp.iter_content(64 * 1024):
            total += len(chunk)
            if total > limit:
                raise (_too_big(where, limit) if bad else errors.Rejected(f"{where} is larger than {limit} bytes"))
            chunks.append(chunk)
    except errors.SyncError:
        raise
    except Exception as exc:   # requests/urllib3 read errors while streaming the body
        import requests

        if isinstance(exc, (requests.exceptions.Timeout,)) or "timed out" in str(exc).lower():
            raise errors.TimedOut(f"reading {where} timed out") from None
        raise errors.Unreachable(f"the connection was cut while reading {where}") from None
    return b"".join(chunks)


# --- HTTP POST endpoint ----------------------------------------------------------------------------
class PostTarget:
    """An intake service taking one trip document per POST (push only).

    Each POST carries ``Idempotency-Key: <trip uuid>-r<revision>-<first 16 hex of content hash>``
    so a POST re-sent after a lost answer is recognised by the service. 2xx: accepted; 409: the
    service holds a conflicting version (reported as a conflict); other 4xx: rejected.
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
            f"{self.url} is an HTTP endpoint that only receives trips; pull from a folder or WebDAV hub")

    def read(self, f: RemoteFile, max_bytes: int) -> bytes:
        raise errors.ConfigError("an HTTP endpoint cannot be read from")

    def write_revision(self, year: str, trip_id: str, name: str, data: bytes,
                       device_id: str, revision: int, content_hash: str) -> WriteResult:
        key = self.idempotency_key(trip_id, revision, content_hash)

        def step():
            resp = self.session.request("POST", self.endpoint, body=data,
                                        headers={"Content-Type": "application/json",
                                                 "Idempotency-Key": key})
            resp.close()
            return resp
        resp = self.session.retrying(step)
        if 200 <= resp.status_code < 300:
            return WriteResult(created=True, etag=resp.headers.get("ETag"))
        if resp.status_code == 409:
            raise errors.Conflict(f"the endpoint holds a conflicting version of trip {trip_id} (409)")
        raise errors.Rejected(f"the endpoint refused trip {trip_id} ({resp.status_code})", resp.status_code)

    def close(self) -> None:
        pass


def open_target(address: str, session: Session) -> Target:
    """The target for a hub address (see the module docstring); ConfigError for anything else."""
    if not isinstance(address, str) or not address.strip():
        raise errors.ConfigError("the hub address is empty; give a folder, an https:// WebDAV URL "
                                 "or a post+https:// endpoint")
    address = address.strip()
    lower = address.lower()
    is_post = lower.startswith(POST_PREFIX)
    url = address[len(POST_PREFIX):] if is_post else address
    scheme = urlsplit(url).scheme.lower() if "://" in url else ""
    if scheme in ("http", "https"):
        parts = urlsplit(url)
        if parts.username is not None or parts.password is not None:
            raise errors.ConfigError("the hub address must not carry a user name or password; put "
                                     "them in the credentials file or the environment")
        if not parts.hostname:
            raise errors.ConfigError(f"the hub address {redact_url(url)} has no host name")
        if scheme == "http" and parts.hostname not in _LOOPBACK:
            raise errors.ConfigError(f"plain http:// is allowed only on this machine (127.0.0.1); "
                                     f"use https:// for {parts.hostname}")
        return PostTarget(url, session) if is_post else WebDavTarget(url, session)
    if is_post:
        raise errors.ConfigError("a post+ endpoint address must continue with http:// or https://")
    if scheme == "file":
        path = unquote(urlsplit(url).path)
        return FolderTarget(path)
    if scheme:
        raise errors.ConfigError(f"hub addresses of kind {scheme}:// are not supported; give a folder, "
                                 f"an https:// WebDAV URL or a post+https:// endpoint")
    return FolderTarget(address)
