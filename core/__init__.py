"""streamtab core: the domain — science, records, QC rules and the device store (no UI, no network)."""

from __future__ import annotations

import functools

__all__ = ["version"]


@functools.cache
def version() -> str:
    """streamtab's version: the ``[project] version`` of pyproject.toml, its one home.

    Read from the installed package's metadata (``pip install -e .`` copies it there), else, in
    a source tree that was never installed, from pyproject.toml itself; looked up on first use,
    not at import. ``streamtab --version``, the sync User-Agent and the records' ``core_version``
    all read it here.
    """
    from importlib import metadata

    try:
        return metadata.version("streamtab")
    except metadata.PackageNotFoundError:
        pass
    import tomllib
    from pathlib import Path

    try:
        with (Path(__file__).resolve().parent.parent / "pyproject.toml").open("rb") as fh:
            return str(tomllib.load(fh)["project"]["version"])
    except (OSError, KeyError, tomllib.TOMLDecodeError):
        return "0+unknown"


def __getattr__(name: str) -> str:
    # `core.__version__`, the usual spelling, without reading metadata at import time
    if name == "__version__":
        return version()
    raise AttributeError(f"module 'core' has no attribute {name!r}")
