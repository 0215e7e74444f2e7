"""Sub-commands of `streamtab` (placeholder until its issue lands)."""
from __future__ import annotations


def register(sub) -> None:  # noqa: ANN001 - argparse's private subparsers type
    """Adds this module's sub-commands to the top-level parser."""
