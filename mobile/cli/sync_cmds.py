"""`streamtab sync push|pull|status`: send trips to a hub, bring them back, and see what is where.

Exit status: 0 when everything went, 1 when something is left for the next sync (the hub was
unreachable, timed out or answered 5xx; an endpoint reported a conflict), 2 for bad input (a
wrong address, options, credentials, TLS or a redirect).
"""

from __future__ import annotations

import sys
from typing import Any

from mobile.cli._common import EXIT_OK, EXIT_RETRY, emit_json, emit_table, fail, open_store

__all__ = ["register"]


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds `sync push`, `sync pull` and `sync status` to the top-level parser."""
    p = sub.add_parser(
        "sync",
        help="send trips to a hub (folder, WebDAV, HTTP endpoint) and back",
        description="Send trips to a hub and bring them back.",
    )
    verbs = p.add_subparsers(dest="sync_command", required=True, parser_class=type(p))

    def common(q, with_hub: bool = True) -> None:  # noqa: ANN001
        q.add_argument("--data-dir", help="device store folder (else $STREAMTAB_DATA, else the user folder)")
        q.add_argument("--json", action="store_true", help="print the result as JSON")
        if with_hub:
            q.add_argument("--ca-file", help="PEM file of the program's own certificate authority")
            q.add_argument(
                "--credentials",
                help="owner-only INI file with the hub's user and password "
                "or token (else environment, else <data dir>/sync/credentials.ini)",
            )
            q.add_argument(
                "--timeout",
                default="30",
                help="seconds to wait for each answer from the hub, above 0 to 600 (default 30)",
            )

    push = verbs.add_parser("push", help="send every trip changed since its last push")
    push.add_argument(
        "--to",
        required=True,
        metavar="TARGET",
        help="folder or file:// URL, https:// WebDAV collection, or post+https:// endpoint",
    )
    common(push)
    push.set_defaults(handler=_push)

    pull = verbs.add_parser("pull", help="bring every trip from a hub into this store, merging")
    pull.add_argument(
        "--from",
        dest="source",
        required=True,
        metavar="TARGET",
        help="folder or file:// URL, or https:// WebDAV collection",
    )
    pull.add_argument(
        "--full",
        action="store_true",
        help="list the whole hub instead of reading its change log (a repair; slow on big hubs)",
    )
    common(pull)
    pull.set_defaults(handler=_pull)

    st = verbs.add_parser("status", help="what each hub holds of every trip on this device")
    common(st, with_hub=False)
    st.set_defaults(handler=_status)


class _Bar:
    """A progress bar on stderr (redrawn in place on a terminal, one line per trip otherwise)."""

    def __init__(self, verb: str) -> None:
        self.verb = verb
        self.tty = sys.stderr.isatty()
        self.drawn = False

    def __call__(self, done: int, total: int, trip_id: str, result: str) -> None:
        width = 24
        filled = int(width * done / total) if total else width
        line = f"{self.verb} [{'#' * filled}{'.' * (width - filled)}] {done}/{total} {trip_id[:8]} {result}"
        if self.tty:
            sys.stderr.write("\r" + line.ljust(78))
        else:
            sys.stderr.write(line + "\n")
        sys.stderr.flush()
        self.drawn = True

    def finish(self) -> None:
        if self.drawn and self.tty:
            sys.stderr.write("\n")
            sys.stderr.flush()
        self.drawn = False


def _open_store(args: Any, *, create: bool = False):  # noqa: ANN202
    return open_store(args.data_dir, create=create, locked_raises=True)


def _timeout(args: Any) -> float:
    """--timeout as typed ("30", "30 s"), above 0 to 600 seconds, or one line naming it."""
    from core.science.quantities import QuantityError, read_number

    accepted = "seconds, above 0 to 600 (e.g. 30)"
    try:
        seconds = read_number(args.timeout, "--timeout", units=("s",), accepted=accepted)
    except QuantityError as exc:
        fail(exc.message)
    if not 0 < seconds <= 600:
        fail(f"--timeout {args.timeout} is out of range; accepted: {accepted}")
    return seconds


def _session(args: Any, store: Any, address: str):  # noqa: ANN202
    from sync.errors import SyncError
    from sync.session import Session, ca_file_from_environment, load_credentials

    timeout = _timeout(args)
    try:
        creds = load_credentials(address, config_file=args.credentials, data_dir=store.data_dir)
        return Session(
            store.device_id,
            credentials=creds,
            read_timeout_s=timeout,
            connect_timeout_s=min(10.0, timeout),
            ca_file=args.ca_file or ca_file_from_environment(),
        )
    except SyncError as exc:
        fail(str(exc))


def _check_address(session: Any, address: str, option: str) -> None:
    """A hub address that names no usable target is refused naming the option it was typed in."""
    from sync.errors import ConfigError
    from sync.targets import open_target

    try:
        target = open_target(address, session)
    except ConfigError as exc:
        session.close()
        fail(f"{option} {address!r}: {exc}")
    target.close()


def hub_before_creating(data_dir: str | None, address: str, timeout: float) -> None:
    """Where --data-dir holds no store yet, the --from hub is checked first (one line and no new store
    when it names no usable hub): a pull may start a store, but never an empty one by mistake."""
    from core.store.paths import is_store, resolve_data_dir
    from sync.session import Session

    if not is_store(resolve_data_dir(data_dir)):
        probe = Session(connect_timeout_s=min(10.0, timeout))
        _check_address(probe, address, "--from")
        probe.close()


def _run(args: Any, verb: str, address: str):  # noqa: ANN202
    import sync
    from core.store import StoreLocked
    from sync.errors import FinalError, RetryableError

    if verb == "pull":  # a pull may fill an empty office store, but only from a hub that is there
        hub_before_creating(args.data_dir, address, _timeout(args))
    try:
        store = _open_store(args, create=verb == "pull")
    except StoreLocked as exc:  # another writer holds the store: a sync tries again later
        return None, str(exc)
    session = _session(args, store, address)
    _check_address(session, address, "--to" if verb == "push" else "--from")
    bar = _Bar(verb)
    try:
        if verb == "push":
            return sync.push(store, address, progress=bar, session=session), None
        return sync.pull(store, address, progress=bar, session=session, full=bool(getattr(args, "full", False))), None
    except FinalError as exc:
        bar.finish()
        fail(str(exc))
    except (RetryableError, StoreLocked) as exc:
        bar.finish()
        return None, str(exc)
    except Exception as exc:  # noqa: BLE001 - a person never sees a traceback; the log keeps it
        import logging

        bar.finish()
        logging.getLogger("streamtab.sync").debug("sync stopped", exc_info=True)
        first = (str(exc).splitlines() or [""])[0][:160]
        fail(
            f"sync {verb} stopped on an unexpected problem ({type(exc).__name__}: {first}); nothing "
            f"stored was changed by it — run it again, and report it if it repeats"
        )
    finally:
        bar.finish()
        session.close()


def _push(args: Any) -> int:
    report, problem = _run(args, "push", args.to)
    if report is None:
        return _left(args, {"pushed": 0, "unchanged": 0, "conflicts": 0, "failed": 0}, problem)
    if args.json:
        emit_json(report.to_dict())
    else:
        emit_table(
            [
                ("hub", report.target),
                ("pushed", str(report.pushed)),
                ("unchanged", str(report.unchanged)),
                ("conflicts", str(report.conflicts)),
                ("failed", str(report.failed)),
            ]
        )
        _details(report.per_trip)
    return EXIT_OK if report.complete else EXIT_RETRY


def _pull(args: Any) -> int:
    report, problem = _run(args, "pull", args.source)
    if report is None:
        return _left(args, {"pulled": 0, "merged": 0, "quarantined": 0}, problem)
    if args.json:
        emit_json(report.to_dict())
    else:
        emit_table(
            [
                ("hub", report.source),
                ("pulled", str(report.pulled)),
                ("merged", str(report.merged)),
                ("quarantined", str(report.quarantined)),
                ("unchanged", str(report.unchanged)),
                ("failed", str(report.failed)),
            ]
            + ([("skipped at the hub", str(len(report.skipped)))] if report.skipped else [])
        )
        _details(report.per_trip)
        for line in report.skipped:
            sys.stdout.write(f"hub entry {line}\n")
    return EXIT_OK if report.complete else EXIT_RETRY


def _left(args: Any, zeros: dict, problem: str | None) -> int:
    sys.stderr.write(f"streamtab: not synced — will retry: {problem}\n")
    if args.json:
        emit_json({**zeros, "error": problem})
    return EXIT_RETRY


def _details(per_trip: list) -> None:
    for t in per_trip:
        if t.result not in ("pushed", "unchanged", "pulled"):
            sys.stdout.write(f"{t.trip_id}  {t.result}: {t.message}\n")
        for line in t.conflicts:
            sys.stdout.write(f"    needs attention: {line}\n")


def _status(args: Any) -> int:
    import sync

    store = open_store(args.data_dir)
    states = sync.status(store)
    if args.json:
        emit_json({"trips": [s.to_dict() for s in states]})
        return EXIT_OK
    if not states:
        sys.stdout.write("no trips on this device\n")
    for s in states:
        hubs = ", ".join(f"{h.hub}: {h.state}" for h in s.hubs) or "no hub yet"
        flag = "  NEEDS ATTENTION" if s.needs_attention else ""
        sys.stdout.write(f"{s.trip_id}  revision {s.revision}  {s.state} ({hubs}){flag}\n")
        for line in s.conflicts:
            sys.stdout.write(f"    {line}\n")
    return EXIT_OK
