"""The command line's shell: one-line errors with exit status 2 (common practice for CLIs)."""

import json

import pytest

from tests.conftest import ROOT, run_cli


def test_help_lists_commands():
    out = run_cli("--help")
    assert out.returncode == 0
    assert "streamtab" in out.stdout


def test_unknown_command_is_one_line_exit_2():
    out = run_cli("no-such-command")
    assert out.returncode == 2
    assert len(out.stderr.strip().splitlines()) == 1
    assert "Traceback" not in out.stderr


def _one_line(out) -> str:
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in out.stderr, out.stderr
    return lines[0]


@pytest.mark.parametrize("argv", [("trip", "list"), ("sites", "list"), ("sync", "status"), ("lab", "pending")])
def test_a_reading_command_refuses_a_missing_store_and_creates_nothing(tmp_path, argv):
    # common practice: a command that only reads never leaves an empty store behind a mistyped --data-dir
    missing = tmp_path / "no-such-store"
    out = run_cli(*argv, data_dir=missing)
    assert out.returncode == 2
    line = _one_line(out)
    assert f"--data-dir {missing}" in line and "no device store" in line and "trip import" in line
    assert not missing.exists()


@pytest.mark.parametrize(
    "argv, content, words",
    [
        (("sites", "import"), "site_id,name,elevation_m\nLK-1,A,\n", ["line 2", "elevation_m"]),
        (("sites", "import"), None, ["no such file"]),
        (("trip", "import"), "{not json", ["not valid JSON"]),
        (("trip", "import"), None, ["no such file"]),
    ],
)
def test_an_import_of_a_bad_file_creates_no_store(tmp_path, argv, content, words):
    # common practice: a mistyped path or a broken file leaves nothing behind
    target = tmp_path / "new-store"
    f = tmp_path / "input.txt"
    if content is not None:
        f.write_text(content, encoding="utf-8")
    out = run_cli(*argv, str(f), data_dir=target)
    assert out.returncode == 2
    line = _one_line(out)
    assert all(w in line for w in words), line
    assert not target.exists()


def test_an_empty_existing_folder_is_not_a_store_either(tmp_path):
    out = run_cli("trip", "list", data_dir=tmp_path)
    assert out.returncode == 2 and "no device store" in _one_line(out)
    assert list(tmp_path.iterdir()) == []


def test_an_import_creates_the_store_and_says_so_once(tmp_path):
    store = tmp_path / "office"
    trip_file = sorted((ROOT / "sample_trips").glob("trip-*.json"))[0]
    first = run_cli("trip", "import", str(trip_file), data_dir=store)
    assert first.returncode == 0, first.stderr
    assert f"created a new device store at {store}" in first.stderr
    listed = run_cli("trip", "list", data_dir=store)
    assert listed.returncode == 0 and listed.stdout.startswith(json.loads(trip_file.read_text())["id"][:8])
    again = run_cli("sites", "import", str(ROOT / "sample_trips" / "sites.csv"), data_dir=store)
    assert again.returncode == 0 and "created" not in again.stderr


@pytest.mark.parametrize("name", ["stop.jpg", "stop", "stop.png.txt"])
def test_snapshot_refuses_a_name_not_ending_in_png(tmp_path, name):
    target = tmp_path / name
    out = run_cli("app", "--snapshot", str(target), data_dir=tmp_path / "store")
    assert out.returncode == 2
    line = _one_line(out)
    assert line.startswith(f"streamtab: --snapshot {target}") and ".png" in line
    assert not target.exists() and not (tmp_path / "store").exists()


def test_snapshot_refuses_a_missing_folder(tmp_path):
    out = run_cli("app", "--snapshot", str(tmp_path / "nope" / "stop.png"), data_dir=tmp_path / "store")
    assert out.returncode == 2 and "does not exist" in _one_line(out)


@pytest.mark.parametrize(
    "verb,option,address,words",
    [
        ("push", "--to", "ftp://hub.invalid/x", "not supported"),
        ("push", "--to", "{tmp}/no-such-hub", "does not exist"),
        ("pull", "--from", "", "empty"),
    ],
)
def test_a_bad_hub_address_names_the_option_it_was_typed_in(tmp_path, verb, option, address, words):
    store = tmp_path / "store"
    assert run_cli("sites", "import", str(ROOT / "sample_trips" / "sites.csv"), data_dir=store).returncode == 0
    address = address.format(tmp=tmp_path)
    out = run_cli("sync", verb, option, address, data_dir=store)
    assert out.returncode == 2
    line = _one_line(out)
    assert line.startswith(f"streamtab: {option} {address!r}: ") and words in line
