"""`streamtab sync push|pull|status` run as a person would (JSON keys and exit status from issue 5:
0 all went, 1 something left to retry, 2 bad input)."""

import json
import os

from tests.conftest import cli_env, run_cli
from tests.sync.conftest import DAV_PASSWORD, DAV_USER, free_port, new_trip, open_store


def test_push_to_a_folder_prints_the_counts_and_a_progress_bar(tmp_path):
    store = open_store(tmp_path / "dev", "tablet-A")
    for d in (3, 4):
        new_trip(store, day=d)
    hub = tmp_path / "hub"
    hub.mkdir()
    out = run_cli("sync", "push", "--to", str(hub), "--json", data_dir=store.data_dir)
    assert out.returncode == 0, out.stderr
    result = json.loads(out.stdout)
    assert {k: result[k] for k in ("pushed", "unchanged", "conflicts", "failed")} == {
        "pushed": 2,
        "unchanged": 0,
        "conflicts": 0,
        "failed": 0,
    }
    assert "push [" in out.stderr and "2/2" in out.stderr
    again = run_cli("sync", "push", "--to", str(hub), "--json", data_dir=store.data_dir)
    assert json.loads(again.stdout)["unchanged"] == 2 and again.returncode == 0
    status = run_cli("sync", "status", "--json", data_dir=store.data_dir)
    assert status.returncode == 0
    assert [t["state"] for t in json.loads(status.stdout)["trips"]] == ["synced", "synced"]
    office = tmp_path / "office"
    pulled = run_cli("sync", "pull", "--from", str(hub), "--json", data_dir=office)
    assert pulled.returncode == 0, pulled.stderr
    got = json.loads(pulled.stdout)
    assert {k: got[k] for k in ("pulled", "merged", "quarantined")} == {"pulled": 2, "merged": 0, "quarantined": 0}


def test_unreachable_hub_exits_1_and_keeps_everything_for_the_next_sync(tmp_path):
    store = open_store(tmp_path / "dev", "tablet-A")
    new_trip(store)
    port = free_port()  # nothing listens there
    out = run_cli(
        "sync", "push", "--to", f"http://127.0.0.1:{port}/hub/", "--json", "--timeout", "1", data_dir=store.data_dir
    )
    assert out.returncode == 1, out.stderr
    result = json.loads(out.stdout)
    assert result["failed"] == 1 and result["pushed"] == 0
    assert "will retry" in result["per_trip"][0]["message"]
    status = run_cli("sync", "status", "--json", data_dir=store.data_dir)
    assert json.loads(status.stdout)["trips"][0]["state"] == "never pushed"


def test_bad_input_is_one_line_with_exit_2(tmp_path):
    store = open_store(tmp_path / "dev", "tablet-A")
    for args in (
        ["sync", "push", "--to", "gopher://hub"],
        ["sync", "push", "--to", str(tmp_path / "missing-folder")],
        ["sync", "push", "--to", "http://dav.example.org/hub/"],
        ["sync", "pull", "--from", "post+http://127.0.0.1:9/x"],
        ["sync", "push"],
    ):
        out = run_cli(*args, data_dir=store.data_dir)
        assert out.returncode == 2, (args, out.stderr)
        assert len(out.stderr.strip().splitlines()) == 1 and "Traceback" not in out.stderr


def test_open_credentials_file_is_refused_by_the_cli_without_showing_the_password(tmp_path, dav):
    store = open_store(tmp_path / "dev", "tablet-A")
    new_trip(store)
    cfg = tmp_path / "creds.ini"
    cfg.write_text(f"[default]\nuser = {DAV_USER}\npassword = {DAV_PASSWORD}\n")
    os.chmod(cfg, 0o644)
    out = run_cli("sync", "push", "--to", dav.url, "--credentials", str(cfg), data_dir=store.data_dir)
    assert out.returncode == 2 and "chmod 600" in out.stderr
    assert DAV_PASSWORD not in out.stderr + out.stdout
    os.chmod(cfg, 0o600)
    out = run_cli("sync", "push", "--to", dav.url, "--credentials", str(cfg), "--json", data_dir=store.data_dir)
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["pushed"] == 1
    assert DAV_PASSWORD not in out.stderr + out.stdout


def test_credentials_from_environment_in_the_cli(tmp_path, dav):
    store = open_store(tmp_path / "dev", "tablet-A")
    new_trip(store)
    env = cli_env(STREAMTAB_SYNC_USER=DAV_USER, STREAMTAB_SYNC_PASSWORD=DAV_PASSWORD)
    out = run_cli("sync", "push", "--to", dav.url, data_dir=store.data_dir, env=env)
    assert out.returncode == 0, out.stderr
    assert "pushed" in out.stdout
    wrong = cli_env(STREAMTAB_SYNC_USER=DAV_USER, STREAMTAB_SYNC_PASSWORD="nope-nope")
    out = run_cli("sync", "pull", "--from", dav.url, data_dir=tmp_path / "office", env=wrong)
    assert out.returncode == 2 and "401" in out.stderr and "nope-nope" not in out.stderr


def test_a_store_busy_past_the_lock_timeout_is_a_retry_not_bad_input(tmp_path):
    """Exit 1 "will retry" (issue 5's exit codes) when another writer holds the store, whether the
    lock is met opening the store or during the push; status says so in one line."""
    store = open_store(tmp_path / "dev", "tablet-A")
    new_trip(store)
    hub = tmp_path / "hub"
    hub.mkdir()
    with store.locked():  # another writer, for longer than the 5 s lock timeout
        out = run_cli("sync", "push", "--to", str(hub), data_dir=store.data_dir)
        status = run_cli("sync", "status", data_dir=store.data_dir)
    assert out.returncode == 1, out.stderr
    assert "will retry" in out.stderr and "Traceback" not in out.stderr
    assert "is busy" in status.stderr and "Traceback" not in status.stderr
    assert run_cli("sync", "push", "--to", str(hub), data_dir=store.data_dir).returncode == 0
