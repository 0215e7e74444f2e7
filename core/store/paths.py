"""Where the device store lives: --data-dir, else $STREAMTAB_DATA, else the user data folder."""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["ENV_VAR", "is_store", "resolve_data_dir"]

ENV_VAR = "STREAMTAB_DATA"


def resolve_data_dir(arg: str | os.PathLike[str] | None = None) -> Path:
    if arg:
        return Path(arg).expanduser()
    env = os.environ.get(ENV_VAR)
    if env:
        return Path(env).expanduser()
    from platformdirs import user_data_dir

    return Path(user_data_dir("streamtab", appauthor=False))


def is_store(root: Path) -> bool:
    """True when `root` holds a device store (its device file or its trips folder), without creating one."""
    return (root / "device.json").is_file() or (root / "trips").is_dir()
