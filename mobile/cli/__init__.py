"""The `streamtab` command line: science at the desk, trips in the store, sync, and the touch app."""

from __future__ import annotations

import os
import sys

from mobile.cli._common import EXIT_BAD_INPUT, CliError, OneLineParser

__all__ = ["main"]


def build_parser() -> OneLineParser:
    from mobile.cli import (
        app_cmd,
        archive_cmds,
        conflict_cmds,
        custody_cmds,
        lab_cmds,
        paper_cmds,
        review_cmds,
        science_cmds,
        sync_cmds,
        trip_cmds,
    )

    parser = OneLineParser(
        prog="streamtab",
        description="Dissolved-oxygen field work: saturation targets, trip records, sync.",
    )
    from core import version

    parser.add_argument("--version", action="version", version=f"streamtab {version()}")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=OneLineParser)
    science_cmds.register(sub)
    trip_cmds.register(sub)
    sync_cmds.register(sub)
    app_cmd.register(sub)
    lab_cmds.register(sub)
    custody_cmds.register(sub)
    conflict_cmds.register(sub)
    paper_cmds.register(sub)
    review_cmds.register(sub)
    archive_cmds.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.handler(args) or 0)
    except CliError as exc:
        sys.stderr.write(f"streamtab: {exc}\n")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        sys.stderr.write("streamtab: interrupted\n")
        return 130
    except BrokenPipeError:
        # The reader (e.g. `| head`) stopped reading: the work is done, the rest of the output is
        # not wanted. Point stdout at /dev/null so the interpreter's final flush stays quiet.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
