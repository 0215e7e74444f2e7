"""The sync shell: builds manifests from the store and the outbox, applies the pure plan through a
target, merges with what the hub holds, and reports per trip.

``push(store, target)`` sends every trip changed since its last push; ``pull(store, source)``
brings in every revision at the hub this device has not seen, merging it with the device copy;
``status(store)`` says, per trip, what each hub has. The store only needs ``data_dir``,
``device_id``, ``list_trips()``, ``trip_document(id)`` and ``merge_document(doc, change, base=)``
(the store re-reads the trip under its lock and merges again if another writer saved meanwhile).
"""

from __future__ import annotations

import hashlib
import json
import logging
import threading
import time
from collections.abc import Callable, Iterable
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from core.records.limits import LimitError, loads_limited
from core.records.merge import describe_conflict
from core.store.atomic import atomic_write_bytes, canonical_json_bytes
from core.store.quarantine import quarantine
from sync import changelog, errors, program
from sync.layout import canonical_trip_id, device_key, revision_name, trip_year
from sync.outbox import Outbox, OutboxEntry, hubs
from sync.plan import Action, LocalEntry, RemoteEntry, plan, plan_pull
from sync.reconcile import (
    BOOKKEEPING_KEYS,
    contained_names,
    fold,
    lacks_ancestor,
    newest_contained,
    next_head,
    same_content,
)
from sync.session import Session, ca_file_from_environment, load_credentials
from sync.targets import RemoteFile, Target, WebDavTarget, open_target

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
    "Progress",
    "BOOKKEEPING_KEYS",
]

log = logging.getLogger("streamtab.sync")

Progress = Callable[[int, int, str, str], None]
#: After this many trips in a row fail with a retryable error, the rest are not tried this run.
GIVE_UP_AFTER = 3
#: How often a pushing device looks for its own stale uploads under incoming/ (seconds).
CLEAN_INCOMING_EVERY_S = 24 * 3600


@dataclass
class TripResult:
    """What happened to one trip. `result` is one of pushed, unchanged, conflict, failed
    (push) or pulled, merged, unchanged, quarantined, failed (pull)."""

    trip_id: str
    result: str
    message: str = ""
    revision: int | None = None
    conflicts: list[str] = field(default_factory=list)  # readable lines, one per field
    retry: bool = False  # True: not at the hub yet; the next sync tries again


@dataclass
class PushReport:
    pushed: int = 0
    unchanged: int = 0
    conflicts: int = 0
    failed: int = 0
    per_trip: list[TripResult] = field(default_factory=list)
    target: str = ""
    #: readable lines about the site list and the program settings (published, or why not)
    program: list[str] = field(default_factory=list)

    @property
    def complete(self) -> bool:
        """True when nothing is left to retry (exit status 0 of `streamtab sync push`)."""
        return not any(t.retry for t in self.per_trip)

    def to_dict(self) -> dict[str, Any]:
        return {
            "pushed": self.pushed,
            "unchanged": self.unchanged,
            "conflicts": self.conflicts,
            "failed": self.failed,
            "target": self.target,
            "per_trip": [asdict(t) for t in self.per_trip],
            "program": list(self.program),
        }


@dataclass
class PullReport:
    pulled: int = 0
    merged: int = 0
    quarantined: int = 0
    per_trip: list[TripResult] = field(default_factory=list)
    unchanged: int = 0
    failed: int = 0
    source: str = ""
    skipped: list[str] = field(default_factory=list)  # hub entries that do not fit the layout
    listed: str = "walk"  # "log": only trips named by new change log entries; "walk": the whole hub
    #: readable lines about the site list and the program settings brought from the hub
    program: list[str] = field(default_factory=list)

    @property
    def complete(self) -> bool:
        return not any(t.retry for t in self.per_trip)

    def to_dict(self) -> dict[str, Any]:
        return {
            "pulled": self.pulled,
            "merged": self.merged,
            "quarantined": self.quarantined,
            "unchanged": self.unchanged,
            "failed": self.failed,
            "source": self.source,
            "skipped": list(self.skipped),
            "listed": self.listed,
            "per_trip": [asdict(t) for t in self.per_trip],
            "program": list(self.program),
        }


@dataclass
class HubState:
    hub: str
    pushed_revision: int | None
    state: str  # "synced" | "changed" | "never pushed"
    pushed_at: str | None = None


@dataclass
class TripSyncState:
    trip_id: str
    revision: int
    content_hash: str
    state: str  # "synced" (every hub has this revision), "changed", "never pushed"
    needs_attention: bool = False
    conflicts: list[str] = field(default_factory=list)
    hubs: list[HubState] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


# --- helpers -----------------------------------------------------------------------------------
def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def _sha(data: bytes) -> str:
    return "sha256:" + hashlib.sha256(data).hexdigest()


def _attr(obj: Any, name: str, default: Any = None) -> Any:
    if isinstance(obj, dict):
        return obj.get(name, default)
    return getattr(obj, name, default)


def _summaries(store: Any) -> dict[str, tuple[int, str]]:
    out = {}
    for s in store.list_trips():
        tid = str(_attr(s, "id"))
        out[tid] = (int(_attr(s, "revision", 0) or 0), str(_attr(s, "content_hash", "") or ""))
    return out


def _session_for(store: Any, address: str, session: Session | None) -> Session:
    if session is None:
        ca = ca_file_from_environment()
        session = Session(store.device_id, credentials=load_credentials(address, data_dir=store.data_dir), ca_file=ca)
    if session.device_id is None:
        session.device_id = str(store.device_id)
    return session


def _notify(progress: Progress | None, done: int, total: int, trip_id: str, result: str) -> None:
    if progress is None:
        return
    try:
        progress(done, total, trip_id, result)
    except Exception:  # a broken progress display must not stop a sync
        log.warning("progress callback failed", exc_info=True)


def _conflict_lines(conflicts: Iterable[dict]) -> list[str]:
    return [c.get("message") or describe_conflict(c) for c in conflicts]


def _parse_hub_doc(f: RemoteFile, data: bytes) -> dict:
    try:
        doc = loads_limited(data.decode("utf-8"))
    except LimitError as exc:
        raise errors.BadHubDocument(f"hub file {f.name} of trip {f.trip_id} is refused: {exc}") from None
    except (UnicodeDecodeError, ValueError):
        raise errors.BadHubDocument(f"hub file {f.name} of trip {f.trip_id} is not valid JSON") from None
    if not isinstance(doc, dict):
        raise errors.BadHubDocument(f"hub file {f.name} of trip {f.trip_id} is not a JSON object")
    if str(doc.get("id")) != f.trip_id:
        raise errors.BadHubDocument(
            f"hub file {f.name} sits in the folder of trip {f.trip_id} but carries id {doc.get('id')!r}"
        )
    rev = doc.get("revision")
    if not isinstance(rev, int) or isinstance(rev, bool) or rev != f.revision:
        raise errors.BadHubDocument(f"hub file {f.name} carries revision {rev!r}, not the {f.revision} its name says")
    return doc


def _extra_ancestors(
    tgt: Target,
    session: Session,
    year: str,
    tid: str,
    local: dict,
    docs: list[dict],
    candidates: list[dict],
    seen_names: list[str],
) -> list[dict]:
    """Hub files already seen, read back only when no known document is a common ancestor of
    the device copy and a diverged hub document (then the merge would be two-way)."""
    extra: list[dict] = []
    if not lacks_ancestor(local, docs, candidates):
        return extra
    for name in sorted(seen_names, reverse=True)[:8]:  # newest first, bounded
        f = RemoteFile(tid, year, name)
        try:
            extra.append(_parse_hub_doc(f, tgt.read(f, session.max_document_bytes)))
        except (errors.BadHubDocument, errors.IntegrityError, errors.Rejected):
            continue
        if not lacks_ancestor(local, docs, candidates + extra):
            break
    return extra


def _quarantine(data_dir: Path, f: RemoteFile, data: bytes | None, reason: str) -> Path:
    """A copy of a bad hub file and a report beside it. Bad files are re-checked at every sync
    (never blacklisted), so the copy has one name per hub file and is refreshed, not multiplied."""
    report = (
        f"hub file: trips/{f.year}/{f.trip_id}/{f.name}\nfound: {_now()}\nreason: {reason}\n"
        + ("" if data is not None else "content: not copied (refused before or while reading)\n")
        + "re-checked at every sync until the hub copy is repaired or removed by the office\n"
    )
    return quarantine(
        Path(data_dir) / "sync" / "quarantine",
        f"{f.trip_id}-{f.name}",
        report,
        data=data,
        note_suffix=".report.txt",
        refresh=True,
    )


def _local_failure(exc: BaseException, data_dir: Path) -> errors.LocalWriteError:
    """One line for a failed write of this device's own files (outbox, quarantine, store)."""
    import errno

    reason = getattr(exc, "strerror", None) or (str(exc).splitlines() or [type(exc).__name__])[0]
    if getattr(exc, "errno", None) in (errno.ENOSPC, getattr(errno, "EDQUOT", -1)) or "No space" in str(exc):
        what = f"the device's disk is full (writing in {data_dir})"
        todo = "free some space and sync again"
    else:
        what = f"this device's data folder {data_dir} could not be written ({reason})"
        todo = "check the folder and sync again"
    return errors.LocalWriteError(f"{what}; {todo} — nothing was lost, the next sync picks up where this one stopped")


def _local_write_errors(exc: BaseException) -> bool:
    from core.store import StoreWriteError

    return isinstance(exc, (OSError, StoreWriteError))


def _store_rejects(exc: Exception) -> bool:
    """True for the store's 'this document is not valid' errors (not locks or I/O)."""
    from core.store import InvalidRecord, NewerSchemaError

    return isinstance(exc, (InvalidRecord, NewerSchemaError))


def _same_bytes(a: dict | None, b: dict | None) -> bool:
    if a is None or b is None:
        return a is b
    return canonical_json_bytes(a) == canonical_json_bytes(b)


def _write(
    store: Any, tid: str, based_on: dict | None, new: dict, change: str, *, verbatim: bool
) -> tuple[dict, list[dict]]:
    """Writes `new` — the device copy `based_on` with hub documents folded in — never blind.

    Under the store's lock the stored copy is read again: a save made since `based_on` was read
    (the app, a lab command, another sync) is folded in three-way with `based_on` as the common
    ancestor, so it is never overwritten. `verbatim` says `new` is a hub document as read (a new
    trip or a fast-forward): it is stored byte for byte through ``adopt_document``, keeping the
    hub's revision, so a pull makes no revision of its own. Anything else (a merge) goes through
    the save path, which derives it again and adds a revision with an audit entry.
    Returns (the stored document, conflicts found while folding in a late save).
    """
    with store.locked():
        current = store.trip_document(tid) if store.has_trip(tid) else None
        doc, late = new, []
        if not _same_bytes(current, based_on):
            folded = fold(current, [new], [based_on] if based_on is not None else [])
            assert folded.doc is not None, "folding a document in never yields nothing"
            doc, late = folded.doc, folded.conflicts
            verbatim = verbatim and doc is new
        if current is not None and _same_bytes(doc, current):
            return current, late
        if verbatim:
            rev = None if current is None else int(current.get("revision", 0))
            if store.adopt_document(doc, expected_revision=rev) is not None:
                return store.trip_document(tid), late
        if current is None or not same_content(doc, current):
            store.put_document(
                doc, change, expected_revision=None if current is None else int(current.get("revision", 0))
            )
        return store.trip_document(tid), late


# --- push ----------------------------------------------------------------------------------------
def push(store: Any, target: str, *, progress: Progress | None = None, session: Session | None = None) -> PushReport:
    """Sends every trip changed since its last push to the hub at `target`.

    Parameters
    ----------
    store : core.store.DeviceStore
    target : str
        A folder path or ``file://`` URL, an ``https://`` WebDAV collection, or a
        ``post+https://`` endpoint (see `sync.targets`).
    progress : callable, optional
        ``progress(done, total, trip_id, result)`` after each trip.
    session : Session, optional
        Policy (credentials, timeouts, retries, CA file); by default credentials come from the
        environment or ``<data dir>/sync/credentials.ini``.

    Raises
    ------
    sync.errors.ConfigError, sync.errors.Unauthorized
        When the address, credentials, TLS or a redirect make every trip fail alike.
    """
    session = _session_for(store, target, session)
    tgt = open_target(target, session)
    report = PushReport(target=tgt.url)
    outbox = Outbox(store.data_dir, tgt.key, tgt.url)
    summaries = _summaries(store)
    known = outbox.all()
    local = {
        tid: LocalEntry(tid, rev, h or "sha256:" + "0" * 64, known[tid].seen_set() if tid in known else frozenset())
        for tid, (rev, h) in summaries.items()
    }
    remote = {tid: RemoteEntry(tid, e.seen_set()) for tid, e in known.items() if tid in local and e.hub_name}
    actions = plan(local, remote)
    total, done, failing = len(actions), 0, 0
    try:
        for act in actions:
            tid = act.trip_id
            if act.action is Action.SKIP:
                res = TripResult(tid, "unchanged", revision=local[tid].revision)
            elif failing >= GIVE_UP_AFTER:
                res = TripResult(
                    tid,
                    "failed",
                    "not synced — will retry (the hub is not answering)",
                    revision=local[tid].revision,
                    retry=True,
                )
            else:
                try:
                    res = _push_one(store, tgt, session, outbox, tid)
                    failing = 0
                except errors.LocalWriteError:
                    raise
                except errors.RetryableError as exc:
                    failing += 1
                    res = TripResult(
                        tid, "failed", f"not synced — will retry: {exc}", revision=local[tid].revision, retry=True
                    )
                except errors.Conflict as exc:
                    res = TripResult(tid, "conflict", str(exc), revision=local[tid].revision, retry=True)
                except (
                    errors.Rejected,
                    errors.IntegrityError,
                    errors.BadHubDocument,
                    errors.NotDelivered,
                    ValueError,
                ) as exc:
                    res = TripResult(tid, "failed", str(exc), revision=local[tid].revision, retry=True)
            report.per_trip.append(res)
            if res.result == "pushed":
                report.pushed += 1
            elif res.result == "unchanged":
                report.unchanged += 1
            elif res.result == "conflict":
                report.conflicts += 1
            else:
                report.failed += 1
            done += 1
            _notify(progress, done, total, tid, res.result)
        _log_push(tgt, session, outbox, [t for t in report.per_trip if t.result in ("pushed", "conflict")])
        report.program = _push_program(store, tgt, session, outbox)
        if any(r.result != "unchanged" for r in report.per_trip):  # an unchanged push asks nothing
            _clean_incoming(tgt, session, outbox)
    except Exception as exc:
        if _local_write_errors(exc):
            raise _local_failure(exc, store.data_dir) from None
        raise
    finally:
        _flush(outbox)
        tgt.close()
    return report


def _log_push(tgt: Target, session: Session, outbox: Outbox, results: list[TripResult]) -> None:
    """Writes the change log entry naming the revision files this push put at the hub
    (`sync.changelog`); files whose entry could not be written go into the next push's entry."""
    if not hasattr(tgt, "log_write"):
        return
    paths = []
    for t in results:
        e = outbox.get(t.trip_id)
        if e is not None and e.hub_name and e.pushed_revision == t.revision:
            paths.append(f"{e.year}/{t.trip_id}/{e.hub_name}")
    try:
        state = changelog.LogState.load(outbox.folder)
        if paths or state.pending:
            changelog.append(tgt, state, device_key(session.device_id or ""), paths, session.device_id or "")
    except OSError:  # the record of what to log could not be written: a walk finds these files
        log.warning("push: could not record the change log entry", exc_info=True)


def _clean_incoming(tgt: Target, session: Session, outbox: Outbox) -> None:
    """At most once a day per hub, in a push that sent something, removes this device's own uploads
    under ``incoming/`` older than a day (cut uploads). Best effort: a failure is logged and tried
    again next push."""
    remove = getattr(tgt, "remove_stale_uploads", None)
    if remove is None or not session.device_id:
        return
    mark = outbox.folder / "incoming-cleaned"
    now = time.time()
    try:
        if now - mark.stat().st_mtime < CLEAN_INCOMING_EVERY_S:
            return
    except OSError:
        pass
    try:
        removed = remove(session.device_id, now)
    except errors.SyncError as exc:
        log.warning("could not remove stale uploads from the hub: %s", exc)
        return
    if removed:
        log.info("removed %d stale upload(s) of this device from the hub's incoming/", removed)
    atomic_write_bytes(mark, f"{_now()} removed {removed}\n".encode(), durable=False)


def _flush(outbox: Outbox) -> None:
    try:
        outbox.flush()
    except OSError as exc:  # only a cache: the per-trip files are the record
        log.info("could not rewrite the outbox manifest (%s)", exc.strerror or exc)


def _push_one(store: Any, tgt: Target, session: Session, outbox: Outbox, tid: str) -> TripResult:
    doc = store.trip_document(tid)
    entry = outbox.get(tid) or OutboxEntry(trip_id=tid, year=trip_year(doc))
    canonical_trip_id(tid)
    year = entry.year
    seen = set(entry.seen_set())
    data = canonical_json_bytes(doc)
    h = _sha(data)
    rev = int(doc.get("revision", 0))
    new_conflicts: list[dict] = []
    notes: list[str] = []

    if tgt.can_list:
        if entry.hub_name is None and isinstance(tgt, WebDavTarget):
            made = tgt.ensure_trip_collection(year, tid)
            listing = frozenset() if made else tgt.list_trip(year, tid)
        else:
            listing = tgt.list_trip(year, tid)
        remote = {} if listing is None else {tid: RemoteEntry(tid, listing)}
        act = plan({tid: LocalEntry(tid, rev, h, frozenset(seen))}, remote)[0]
        if act.action is Action.SKIP:
            if entry.hub_name != act.name:
                # not recorded as sent from here: check the hub copy's bytes before trusting it
                try:
                    same = tgt.read(RemoteFile(tid, year, act.name), len(data) + 1) == data
                except (errors.IntegrityError, errors.BadHubDocument, errors.Rejected):
                    same = False
                if not same:
                    wr = tgt.write_revision(year, tid, act.name, data, session.device_id or "", rev, h)
                    seen.add(act.name)
                    _record(outbox, entry, rev, h, act.name, wr.etag, seen, doc)
                    return TripResult(tid, "pushed", "replaced a damaged hub copy", revision=rev)
            seen.add(act.name)
            _record(outbox, entry, rev, h, act.name, entry.etag, seen, doc)
            return TripResult(tid, "unchanged", "the hub already holds this revision", revision=rev)
        if act.action is Action.MERGE:
            docs, good = [], []
            for name in act.unseen:
                f = RemoteFile(tid, year, name)
                try:
                    docs.append(_parse_hub_doc(f, tgt.read(f, session.max_document_bytes)))
                    good.append(name)
                except (errors.BadHubDocument, errors.IntegrityError, errors.Gone) as exc:
                    # not marked seen: read again at the next sync (a cut read is retried inside
                    # `read`; what stays wrong is reported here, never dropped silently)
                    log.info("push: skipping a hub file: %s", exc)
                    notes.append(f"skipped {exc} — re-checked on the next sync")
                    if not isinstance(exc, errors.Gone):
                        entry.bad.append(name)
            candidates = [entry.base] if entry.base else []
            candidates += _extra_ancestors(
                tgt, session, year, tid, doc, docs, candidates, sorted((listing or frozenset()) - set(act.unseen))
            )
            folded = fold(doc, docs, candidates)
            merged, new_conflicts = folded.doc, folded.conflicts
            seen.update(good)
            if merged is not None and (
                not same_content(merged, doc) or (folded.kind == "pulled" and not _same_bytes(merged, doc))
            ):
                change = "merged with other devices' versions from the hub"
                if new_conflicts:
                    change += f" ({len(new_conflicts)} field(s) changed on both sides kept for review)"
                try:
                    doc, late = _write(store, tid, doc, merged, change, verbatim=folded.kind == "pulled")
                except Exception as exc:
                    if isinstance(exc, errors.SyncError) or not _store_rejects(exc):
                        raise
                    first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
                    raise errors.BadHubDocument(
                        f"the store refused the merge of trip {tid} with the hub's versions: {first}"
                    ) from None
                new_conflicts = new_conflicts + late
                data = canonical_json_bytes(doc)
                h = _sha(data)
                rev = int(doc.get("revision", 0))
                if revision_name(rev, h) in (listing or frozenset()):
                    # the device copy is now a revision the hub holds: nothing to send
                    name = revision_name(rev, h)
                    seen.add(name)
                    _record(outbox, entry, rev, h, name, entry.etag, seen, doc)
                    return TripResult(tid, "unchanged", "brought up to date from the hub", revision=rev)
    name = revision_name(rev, h)
    wr = tgt.write_revision(year, tid, name, data, session.device_id or "", rev, h)
    seen.add(name)
    _record(outbox, entry, rev, h, name, wr.etag, seen, doc)
    if new_conflicts:
        return TripResult(
            tid,
            "conflict",
            "; ".join(["pushed; fields changed on both sides need attention"] + notes),
            revision=rev,
            conflicts=_conflict_lines(new_conflicts),
        )
    return TripResult(
        tid, "pushed", "; ".join(([] if wr.created else ["the hub already held these bytes"]) + notes), revision=rev
    )


def _record(
    outbox: Outbox, entry: OutboxEntry, rev: int, h: str, name: str, etag: str | None, seen: set[str], doc: dict
) -> None:
    entry.pushed_revision, entry.pushed_hash, entry.hub_name = rev, h, name
    entry.etag = etag
    entry.pushed_at = _now()
    entry.seen = sorted(seen)
    entry.base = doc
    outbox.put(entry)


# --- pull ----------------------------------------------------------------------------------------
def pull(
    store: Any, source: str, *, progress: Progress | None = None, session: Session | None = None, full: bool = False
) -> PullReport:
    """Brings every trip revision at the hub that this device has not seen into the store,
    merging it with the device copy. Each hub document is checked (content hash, size, JSON,
    trip id, revision) and then validated by the store's save path; a bad one is quarantined
    under ``<data dir>/sync/quarantine/`` with a report, and the pull goes on.

    What changed is read from the hub's change log (`sync.changelog`); the whole hub is listed
    instead on the first pull, when the log is missing, odd or a day old, or with ``full=True``."""
    session = _session_for(store, source, session)
    tgt = open_target(source, session)
    report = PullReport(source=tgt.url)
    outbox = Outbox(store.data_dir, tgt.key, tgt.url)
    try:
        own = device_key(session.device_id or "")
        state = changelog.LogState.load(outbox.folder)
        changes = None if full else changelog.read_changes(tgt, state, own, session.max_document_bytes)
        by_trip: dict[str, list[RemoteFile]] = {}
        if changes is None:  # walk the whole hub; what the log holds now is covered
            listing = changelog.snapshot(tgt, own) if hasattr(tgt, "log_folders") else {}
            files = tgt.list_all()  # each request inside is retried (not the whole walk again)
            report.skipped = list(getattr(files, "skipped", []))
            for line in report.skipped:
                log.info("pull: %s", line)
            for f in files:
                by_trip.setdefault(f.trip_id, []).append(f)
            summaries = _summaries(store)
            known = outbox.all()
        else:  # only the trips the new log entries name
            report.listed = "log"
            known = {tid: e for tid in changes.files if (e := outbox.get(tid)) is not None}
            for tid, named in changes.files.items():
                e = known.get(tid)
                have = {n: RemoteFile(tid, e.year, n) for n in e.seen} if e is not None else {}
                have.update({n: RemoteFile(tid, y, n) for y, n in named})
                by_trip[tid] = list(have.values())
            summaries = _summaries_of(store, list(changes.files))
        local = {
            tid: LocalEntry(
                tid,
                rev,
                h if h.startswith("sha256:") and len(h) == 71 else "sha256:" + "0" * 64,
                known[tid].seen_set() if tid in known else frozenset(),
            )
            for tid, (rev, h) in summaries.items()
        }
        remote = {tid: RemoteEntry(tid, frozenset(f.name for f in fs)) for tid, fs in by_trip.items()}
        actions = plan_pull(local, remote, {tid: e.seen_set() for tid, e in known.items()})
        total = len(actions)
        for done, act in enumerate(actions, start=1):
            tid = act.trip_id
            if act.action is Action.SKIP:
                res = TripResult(tid, "unchanged")
            else:
                try:
                    res = _pull_one(
                        store,
                        tgt,
                        session,
                        outbox,
                        tid,
                        act.unseen,
                        {f.name: f for f in by_trip[tid]},
                        tid in summaries,
                    )
                except errors.LocalWriteError:
                    raise
                except errors.RetryableError as exc:
                    res = TripResult(tid, "failed", f"not pulled — will retry: {exc}", retry=True)
                except errors.Rejected as exc:  # one file refused (4xx): this trip only
                    res = TripResult(tid, "failed", f"not pulled — will retry: {exc}", retry=True)
            report.per_trip.append(res)
            if res.result in ("pulled", "merged", "quarantined", "unchanged", "failed"):
                setattr(report, res.result, getattr(report, res.result) + 1)
            _notify(progress, done, total, tid, res.result)
        left = {t.trip_id for t in report.per_trip if t.retry}
        if changes is None:
            state.devices.update(listing)
            if not left:  # a walk with trips left over is repeated next time
                state.walked_at = time.time()
        else:
            changes.settle(state, left)
        try:
            state.save()
        except OSError:  # only costs a walk next time
            log.warning("pull: could not record the change log state", exc_info=True)
        report.program = _pull_program(store, tgt, session, outbox, relist=changes is None)
    except Exception as exc:
        if _local_write_errors(exc):
            raise _local_failure(exc, store.data_dir) from None
        raise
    finally:
        _flush(outbox)
        tgt.close()
    return report


def _summaries_of(store: Any, trip_ids: list[str]) -> dict[str, tuple[int, str]]:
    """(revision, content hash) of the given trips the store holds, read one by one."""
    from core.store.atomic import content_hash

    out = {}
    for tid in trip_ids:
        if store.has_trip(tid):
            doc = store.trip_document(tid)
            out[tid] = (int(doc.get("revision", 0) or 0), content_hash(doc))
    return out


def _pull_one(
    store: Any,
    tgt: Target,
    session: Session,
    outbox: Outbox,
    tid: str,
    unseen: tuple[str, ...],
    files: dict[str, RemoteFile],
    have_local: bool,
) -> TripResult:
    entry = outbox.get(tid)
    local_doc = store.trip_document(tid) if have_local else None
    year = files[unseen[0]].year
    if entry is None:
        entry = OutboxEntry(trip_id=tid, year=year)
    bad_lines: list[str] = []
    gone_lines: list[str] = []
    docs: list[tuple[str, dict]] = []
    for name in unseen:
        f = files[name]
        data = None
        try:
            data = tgt.read(f, session.max_document_bytes)
            docs.append((name, _parse_hub_doc(f, data)))
        except errors.Gone as exc:  # listed, then removed: looked for again next sync
            gone_lines.append(f"{exc}; skipped")
        except (errors.BadHubDocument, errors.IntegrityError) as exc:
            # stays unseen: re-checked at every sync, reported every time, never blacklisted
            where = _quarantine(store.data_dir, f, data if data is not None else getattr(exc, "data", None), str(exc))
            bad_lines.append(f"{exc} (copied to {where.name}; re-checked on the next sync)")
            entry.bad.append(name)
    candidates = [entry.base] if entry.base else []
    if local_doc is not None:
        candidates += _extra_ancestors(
            tgt, session, year, tid, local_doc, [d for _, d in docs], candidates, sorted(set(files) - set(unseen))
        )
    acc, kind, conflicts = local_doc, "unchanged", []
    accepted: list[str] = []
    pending = dict(docs)
    for _ in range(len(docs) + 1):  # bounded: each round settles at least one document
        for name in contained_names(pending, acc):  # documents the device copy already contains
            accepted.append(name)
            del pending[name]
        if not pending:
            break
        name = next_head(pending)
        doc = pending[name]
        folded = fold(acc, [doc], candidates + list(dict(docs).values()))
        trial, k, c = folded.doc, folded.kind, folded.conflicts
        if trial is not None and (
            acc is None or not same_content(trial, acc) or (k == "pulled" and not _same_bytes(trial, acc))
        ):
            try:
                acc, late = _write(
                    store,
                    tid,
                    acc,
                    trial,
                    "pulled from hub" if k == "pulled" else "merged with the hub's version",
                    verbatim=k == "pulled",
                )
            except errors.SyncError:
                raise
            except Exception as exc:  # the store's validation refused it
                if not _store_rejects(exc):
                    raise
                msg = f"the store refused hub file {name}: {exc}".splitlines()[0]
                _quarantine(store.data_dir, files[name], canonical_json_bytes(doc), msg)
                bad_lines.append(f"{msg} (re-checked on the next sync)")
                entry.bad.append(name)
                del pending[name]
                continue
            kind = "merged" if (k == "merged" or kind == "merged" or late) else "pulled"
            conflicts.extend(c + late)
        elif acc is None:
            acc = trial
        # same content as the device copy (bookkeeping aside): nothing to save
        accepted.append(name)
        del pending[name]
        if acc is not None and trial is not None and same_content(trial, acc):
            for other in contained_names(pending, doc):
                accepted.append(other)
                del pending[other]
    entry.seen = sorted(set(entry.seen) | set(accepted))
    entry.bad = [n for n in entry.bad if n not in accepted]  # repaired at the hub since
    if acc is not None and accepted:
        # the ancestor for the next merge: the newest hub document the device copy contains
        base = newest_contained([d for n, d in docs if n in accepted], acc)
        if base is not None:
            entry.base = base
        name = revision_name(int(acc.get("revision", 0)), _sha(canonical_json_bytes(acc)))
        if name in files and name not in entry.bad:
            # the device copy is byte for byte a hub file (checked against its name when read):
            # record it as held by the hub, so the next push sends nothing and asks nothing
            entry.pushed_revision, entry.pushed_hash = int(acc.get("revision", 0)), _sha(canonical_json_bytes(acc))
            entry.hub_name = name
            entry.seen = sorted(set(entry.seen) | {name})
    outbox.put(entry)
    rev = int(acc.get("revision", 0)) if acc else None
    if bad_lines:
        return TripResult(
            tid,
            "quarantined",
            "; ".join(bad_lines + gone_lines),
            revision=rev,
            conflicts=_conflict_lines(conflicts),
            retry=True,
        )
    msg = "; ".join((["fields changed on both sides need attention"] if conflicts else []) + gone_lines)
    return TripResult(tid, kind, msg, revision=rev, conflicts=_conflict_lines(conflicts))


# --- the program's tables: site list and settings (sync/program.py) ------------------------------
_TABLE_WORDS = {"sites": "site list", "settings": "program settings"}
#: Errors that leave a table for the next sync (the trips go on).
_TABLE_ERRORS = (errors.RetryableError, errors.Rejected, errors.IntegrityError, errors.BadHubDocument)


def _program_state(outbox: Outbox) -> dict[str, Any]:
    """Per table, the hub files this device has published or merged (`seen`), and, on WebDAV,
    the table folder's date when a pull last listed it all in (`stamp`, `listed_at`: server clock);
    `finite_depth` when the hub refused ``PROPFIND Depth: infinity`` of ``program/``."""
    state: dict[str, Any] = {k: {"seen": []} for k in program.KINDS}
    try:
        raw = json.loads((outbox.folder / "program.json").read_bytes())
    except (OSError, ValueError):
        return state  # lost or damaged: only costs a listing and a re-read
    for kind in program.KINDS:
        entry = raw.get(kind) if isinstance(raw, dict) else None
        if isinstance(entry, dict):
            names = entry.get("seen")
            if isinstance(names, list):
                state[kind]["seen"] = [n for n in names if isinstance(n, str)]
            for key in ("stamp", "listed_at"):
                if isinstance(entry.get(key), (int, float)) and not isinstance(entry.get(key), bool):
                    state[kind][key] = float(entry[key])
    if isinstance(raw, dict) and raw.get("finite_depth") is True:
        state["finite_depth"] = True
    return state


def _save_program_state(outbox: Outbox, state: dict) -> None:
    try:
        atomic_write_bytes(outbox.folder / "program.json", canonical_json_bytes(state))
    except OSError:
        log.warning("could not record the program tables seen at the hub", exc_info=True)


def _local_table(store: Any, kind: str) -> bytes | None:
    """The device's table in its published form; None when there is nothing to publish (no
    sites, or settings never saved on this device)."""
    if kind == "sites":
        sites = store.sites()
        return program.sites_bytes(s.model_dump(mode="json") for s in sites) if sites else None
    settings = store.settings()
    if getattr(settings, "updated_at", None) is None:
        return None
    return program.settings_bytes(settings.model_dump(mode="json"))


def _push_program(store: Any, tgt: Target, session: Session, outbox: Outbox) -> list[str]:
    """Publishes the site list and the settings when the hub does not hold them yet."""
    if not tgt.can_list:
        return []  # an intake endpoint takes trips only
    state = _program_state(outbox)
    lines: list[str] = []
    for kind in program.KINDS:
        data = _local_table(store, kind)
        if data is None:
            continue
        name = program.program_name(data)
        if name in state[kind]["seen"]:
            continue  # published or merged before: no request at all
        try:
            if name not in tgt.list_program(kind):
                tgt.write_program(kind, name, data, session.device_id or "")
                lines.append(f"{_TABLE_WORDS[kind]} published")
        except _TABLE_ERRORS as exc:
            lines.append(f"{_TABLE_WORDS[kind]} not published — will retry: {exc}")
            continue
        state[kind]["seen"].append(name)
    _save_program_state(outbox, state)
    return lines


def _pull_program(store: Any, tgt: Target, session: Session, outbox: Outbox, *, relist: bool = False) -> list[str]:
    """Merges every site list and settings file at the hub this device has not seen into the
    store: per site id (and for the settings) the newest entry wins (sync/program.py).

    On WebDAV one ``PROPFIND Depth: infinity`` of ``program/`` lists both tables. Where the server
    refuses that (RFC 4918 §9.1; remembered per hub), one Depth-1 PROPFIND of ``program/`` dates
    the two table folders, and a folder is listed only when its date moved since a pull last read
    everything in it (the change log's rule, `sync.changelog.needs_listing`), or with `relist` (a
    pull that walked the hub, at least daily). Either way a quiet pull costs one request."""
    if not tgt.can_list:
        return []
    from core.records.models import ProgramSettings, Site

    state = _program_state(outbox)
    lines: list[str] = []
    folders: dict[str, float | None] | None = None
    tree: dict[str, frozenset[str]] | None = None
    if isinstance(tgt, WebDavTarget):
        try:
            if not state.get("finite_depth"):
                try:
                    tree = tgt.list_program_tree()
                except errors.DepthRefused:
                    state["finite_depth"] = True  # remembered: not asked again at this hub
            if tree is None:
                folders = tgt.program_folders() or {}
        except _TABLE_ERRORS as exc:
            return [f"site list and settings not brought — will retry: {exc}"]
    for kind in program.KINDS:
        known = set(state[kind]["seen"])
        listed_at: float | None = None
        try:
            if tree is not None:
                names = sorted(tree[kind] - known)
            elif folders is None:
                names = sorted(tgt.list_program(kind) - known)
            elif kind not in folders:
                names = []  # no such folder at the hub: nothing published yet
            elif not relist and not changelog.needs_listing(
                state[kind].get("stamp"), state[kind].get("listed_at"), folders[kind]
            ):
                names = []  # the folder has not changed since every file in it was read
            else:
                assert isinstance(tgt, WebDavTarget), "dated table folders come from WebDAV only"
                found, listed_at = tgt.list_program_folder(kind)
                names = sorted(found - known)
        except _TABLE_ERRORS as exc:
            lines.append(f"{_TABLE_WORDS[kind]} not brought — will retry: {exc}")
            continue
        complete = True
        incoming: list[dict] = []
        read: list[str] = []
        for name in names:
            try:
                parsed = program.parse_program_file(kind, tgt.read_program(kind, name, session.max_document_bytes))
            except errors.RetryableError as exc:
                lines.append(f"{_TABLE_WORDS[kind]} file {name} not read — will retry: {exc}")
                complete = False
                continue
            except (errors.IntegrityError, errors.BadHubDocument, errors.Rejected, ValueError) as exc:
                # left unseen: checked again at the next sync, never blacklisted
                lines.append(f"{_TABLE_WORDS[kind]} file {name} left aside: {exc}")
                complete = False
                continue
            read.append(name)
            for entry in parsed if isinstance(parsed, list) else [parsed]:
                try:  # each entry must be a valid record for this build
                    model = Site if kind == "sites" else ProgramSettings
                    checked = model.model_validate_json(canonical_json_bytes(entry))
                except Exception:  # noqa: BLE001 - pydantic's or JSON's refusal: skip the entry
                    lines.append(f"{_TABLE_WORDS[kind]} file {name}: an entry this build cannot read was left aside")
                    continue
                if kind == "settings" and checked.schema_version > ProgramSettings().schema_version:
                    continue
                incoming.append(entry)
        if incoming:
            with store.locked():
                lines.extend(_merge_sites(store, incoming) if kind == "sites" else _merge_settings(store, incoming))
        state[kind]["seen"].extend(read)
        if folders is not None and kind in folders and listed_at is not None:
            # a file left aside keeps the folder listed at every pull until it reads well
            state[kind]["stamp"] = folders[kind] if complete else None
            state[kind]["listed_at"] = listed_at if complete else None
    _save_program_state(outbox, state)
    return lines


def _merge_sites(store: Any, incoming: list[dict]) -> list[str]:
    """Saves the sites that incoming entries make newer (store lock held)."""
    from core.records.models import Site

    local = {s.id: s.model_dump(mode="json") for s in store.sites()}
    merged = program.merge_sites(local, incoming)
    changed = [
        Site.model_validate_json(canonical_json_bytes(e)) for sid, e in sorted(merged.items()) if local.get(sid) != e
    ]
    if not changed:
        return []
    store.save_sites(changed)
    more = " ..." if len(changed) > 6 else ""
    return [f"site list: {len(changed)} site(s) updated from the hub ({', '.join(s.id for s in changed[:6])}{more})"]


def _merge_settings(store: Any, incoming: list[dict]) -> list[str]:
    """Saves incoming settings when they are newer than the device's (store lock held)."""
    from core.records.models import ProgramSettings

    current = store.settings()
    local = current.model_dump(mode="json") if current.updated_at is not None else None
    merged = program.merge_settings(local, incoming)
    if merged is None or merged == local:
        return []
    store.save_settings(ProgramSettings.model_validate_json(canonical_json_bytes(merged)))
    return ["program settings updated from the hub"]


# --- status --------------------------------------------------------------------------------------
def status(store: Any) -> list[TripSyncState]:
    """Per trip on the device: its revision, whether each known hub holds it, open conflicts."""
    boxes = hubs(store.data_dir)
    out = []
    for tid, (rev, h) in sorted(_summaries(store).items()):
        states = []
        for box in boxes:
            e = box.get(tid)
            if e is None or e.pushed_revision is None:
                states.append(HubState(box.hub_url, None, "never pushed"))
            else:
                same = e.pushed_revision == rev and (not h or e.pushed_hash == h)
                states.append(HubState(box.hub_url, e.pushed_revision, "synced" if same else "changed", e.pushed_at))
        conflicts: list[str] = []
        try:
            doc = store.trip_document(tid)
            conflicts = _conflict_lines(
                c for c in doc.get("conflicts") or [] if isinstance(c, dict) and not c.get("resolved_at")
            )
        except Exception:  # noqa: BLE001 - an unreadable trip is the store's report, not ours
            pass
        if not states or all(s.state == "never pushed" for s in states):
            overall = "never pushed"
        elif all(s.state == "synced" for s in states):
            overall = "synced"
        else:
            overall = "changed"
        out.append(TripSyncState(tid, rev, h, overall, bool(conflicts), conflicts, states))
    return out


def run_in_background(
    operation: Callable[..., Any],
    store: Any,
    address: str,
    *,
    progress: Progress | None = None,
    session: Session | None = None,
    on_done: Callable[[Any, BaseException | None], None] | None = None,
) -> threading.Thread:
    """Runs `push` or `pull` in a daemon thread (the UI thread never waits on the network).

    `progress` and ``on_done(report, error)`` are called from that thread: a UI marshals them to
    its own thread (for Kivy, ``Clock.schedule_once``). Exactly one of report and error is None.
    """

    def work() -> None:
        try:
            report = operation(store, address, progress=progress, session=session)
        except BaseException as exc:  # noqa: BLE001 - handed to the caller, never lost in the thread
            if on_done is not None:
                on_done(None, exc)
            else:
                log.warning("background sync failed: %s", exc)
            return
        if on_done is not None:
            on_done(report, None)

    thread = threading.Thread(target=work, name="streamtab-sync", daemon=True)
    thread.start()
    return thread
