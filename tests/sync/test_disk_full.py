"""A full disk on the device during sync (issue 9): `sync push` writing its outbox and `sync pull`
saving trips end in one line and exit 1, never a traceback; nothing is lost, and once space is
free the next sync completes. The device's data folder sits on a small tmpfs mounted by the test
(root only); where it cannot be mounted the test is skipped with the reason, except under CI."""

from __future__ import annotations

import errno
import os
import shutil
import subprocess
import tempfile
from pathlib import Path

import pytest

import sync
from core.store.atomic import canonical_json_bytes
from tests.conftest import run_cli
from tests.sync.conftest import hub_files, new_trip, open_store


@pytest.fixture
def small_fs():
    where = Path(tempfile.mkdtemp(prefix="streamtab-full-"))
    why = None
    if os.name != "posix" or not hasattr(os, "geteuid") or os.geteuid() != 0:
        why = "mounting a tmpfs needs root"
    elif shutil.which("mount") is None:
        why = "no mount command"
    else:
        r = subprocess.run(
            ["mount", "-t", "tmpfs", "-o", "size=4m,mode=0755", "tmpfs", str(where)],
            capture_output=True,
            text=True,
            timeout=30,
            check=False,
        )
        if r.returncode != 0:
            why = f"mount -t tmpfs failed: {r.stderr.strip() or r.returncode}"
    if why:
        where.rmdir()
        if os.environ.get("CI"):
            pytest.fail(f"the full-disk test must run under CI, but {why}")
        pytest.skip(why)
    try:
        yield where
    finally:
        subprocess.run(["umount", "-l", str(where)], capture_output=True, timeout=30, check=False)
        shutil.rmtree(where, ignore_errors=True)


def fill(folder: Path) -> Path:
    """Fills the file system holding `folder` to the last byte; returns the filler file."""
    filler = folder / "filler.bin"
    with open(filler, "wb", buffering=0) as fh:
        for size in (256 * 1024, 4096, 1):
            for _ in range(100_000):  # bounded: 4 MiB / 1 byte at worst
                try:
                    fh.write(b"\0" * size)
                except OSError as exc:
                    assert exc.errno == errno.ENOSPC
                    break
    return filler


def one_line(stderr: str) -> str:
    lines = [ln for ln in stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, stderr
    assert "Traceback" not in stderr
    return lines[0]


def test_push_with_a_full_disk_is_one_line_and_loses_nothing(small_fs, tmp_path):
    device = open_store(small_fs / "device", "tablet-A")
    trips = [new_trip(device, day=d) for d in (3, 4, 5)]
    before = {t.id: canonical_json_bytes(device.trip_document(t.id)) for t in trips}
    hub = tmp_path / "hub"
    hub.mkdir()
    filler = fill(small_fs)
    out = run_cli("sync", "push", "--to", str(hub), data_dir=small_fs / "device")
    assert out.returncode == 1
    line = one_line(out.stderr)
    assert "disk is full" in line and "nothing was lost" in line
    filler.unlink()
    # nothing lost: the device still holds every trip as it was, and the next push completes
    assert {t.id: canonical_json_bytes(device.trip_document(t.id)) for t in trips} == before
    again = run_cli("sync", "push", "--to", str(hub), data_dir=small_fs / "device")
    assert again.returncode == 0, again.stderr
    held = hub_files(hub)
    for t in trips:
        assert before[t.id] in [f.read_bytes() for f in held[t.id]]


def test_pull_with_a_full_disk_is_one_line_and_the_next_pull_gets_every_trip(small_fs, tmp_path, device_a):
    trips = [new_trip(device_a, day=d) for d in (3, 4, 5)]
    hub = tmp_path / "hub"
    hub.mkdir()
    assert sync.push(device_a, str(hub)).pushed == 3
    office = open_store(small_fs / "office", "office-desk")
    filler = fill(small_fs)
    out = run_cli("sync", "pull", "--from", str(hub), data_dir=small_fs / "office")
    assert out.returncode == 1
    line = one_line(out.stderr)
    assert "disk is full" in line and "nothing was lost" in line
    assert office.list_trips() == [] or all(office.trip_document(s.id) for s in office.list_trips())
    filler.unlink()
    again = run_cli("sync", "pull", "--from", str(hub), data_dir=small_fs / "office")
    assert again.returncode == 0, again.stderr
    assert {s.id for s in office.list_trips()} == {t.id for t in trips}
    for t in trips:
        assert office.trip_document(t.id)["stops"] == device_a.trip_document(t.id)["stops"]
