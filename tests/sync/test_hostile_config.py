"""Credentials sections matched by scheme, host, port and path segments; the usual CA-bundle
variables honoured; a TLS failure says which check failed; a pushing device removes its own stale
uploads under incoming/ and nothing else (issue 9). Real wsgidav (also over TLS) on 127.0.0.1."""

from __future__ import annotations

import os
import time

import pytest

import sync
from sync import errors
from sync.layout import device_key
from sync.session import ca_file_from_environment, load_credentials
from tests.conftest import run_cli
from tests.sync.conftest import DAV_PASSWORD, DAV_USER, dav_session, make_self_signed, new_trip, start_dav


def config(tmp_path, text: str):
    path = tmp_path / "credentials.ini"
    path.write_text(text)
    path.chmod(0o600)
    return path


@pytest.mark.parametrize(
    "hub,matches",
    [
        ("https://dav.example.org/", True),
        ("https://DAV.example.org:443/streamwatch/", True),
        ("https://dav.example.org.attacker.test/", False),  # a longer host name
        ("https://dav.example.org:8443/", False),  # another port
        ("http://dav.example.org/", False),  # another scheme
        ("https://evil.test/?https://dav.example.org", False),
        ("post+https://dav.example.org/intake/", True),  # an endpoint on the same server
    ],
)
def test_sections_match_by_scheme_host_and_port(tmp_path, hub, matches):
    cfg = config(tmp_path, "[hub https://dav.example.org]\ntoken = t-1\n")
    got = load_credentials(hub, config_file=cfg, env={})
    assert (got is not None) == matches


def test_sections_match_whole_path_segments_and_the_most_specific_wins(tmp_path):
    cfg = config(
        tmp_path,
        "[hub https://dav.example.org/stream]\ntoken = A\n"
        "[hub https://dav.example.org/stream/upper/]\ntoken = B\n"
        "[default]\ntoken = D\n",
    )

    def token(url: str) -> str:
        creds = load_credentials(url, config_file=cfg, env={})
        return creds._token

    assert token("https://dav.example.org/stream/") == "A"
    assert token("https://dav.example.org/stream/upper/hub/") == "B"
    assert token("https://dav.example.org/streamwatch/") == "D"  # not a segment of /stream
    assert token("https://dav.example.org.attacker.test/stream/") == "D"


def test_a_section_that_is_not_an_address_is_refused_in_one_line(tmp_path):
    cfg = config(tmp_path, "[hub dav.example.org]\ntoken = t\n")
    with pytest.raises(errors.CredentialsError) as info:
        load_credentials("https://dav.example.org/", config_file=cfg, env={})
    assert "[hub dav.example.org]" in str(info.value) and "t\n" not in str(info.value)


def test_ca_bundle_variables_in_order():
    assert ca_file_from_environment({}) is None
    assert ca_file_from_environment({"SSL_CERT_FILE": "/c"}) == "/c"
    assert ca_file_from_environment({"SSL_CERT_FILE": "/c", "REQUESTS_CA_BUNDLE": "/b"}) == "/b"
    assert ca_file_from_environment({"REQUESTS_CA_BUNDLE": "/b", "STREAMTAB_SYNC_CA_FILE": "/a"}) == "/a"


@pytest.fixture
def tls_dav(tmp_path):
    cert, key = make_self_signed(tmp_path)
    server = start_dav(tmp_path / "tlsroot", certfile=cert, keyfile=key)
    yield server, cert
    server.stop()


def test_tls_failures_say_which_check_failed(tls_dav, device_a):
    server, cert = tls_dav
    new_trip(device_a)
    with pytest.raises(errors.TLSError) as unknown:
        sync.push(device_a, server.url, session=dav_session("tablet-A"))
    assert "not issued by a certificate authority" in str(unknown.value)
    assert "REQUESTS_CA_BUNDLE" in str(unknown.value)
    # the right CA, the wrong name: the certificate is made out for 127.0.0.1, not localhost
    by_name = server.url.replace("127.0.0.1", "localhost")
    with pytest.raises(errors.TLSError) as host:
        sync.push(device_a, by_name, session=dav_session("tablet-A", ca_file=cert))
    assert "another host name" in str(host.value) and "certificate authority" not in str(host.value)


@pytest.mark.parametrize("variable", ["REQUESTS_CA_BUNDLE", "SSL_CERT_FILE"])
def test_cli_honours_the_usual_ca_bundle_variables(tls_dav, device_a, tmp_path, variable):
    server, cert = tls_dav
    new_trip(device_a)
    cfg = config(tmp_path, f"[hub {server.url}]\nuser = {DAV_USER}\npassword = {DAV_PASSWORD}\n")
    env = {
        k: v
        for k, v in os.environ.items()
        if k not in ("REQUESTS_CA_BUNDLE", "SSL_CERT_FILE", "STREAMTAB_SYNC_CA_FILE")
    }
    refused = run_cli(
        "sync", "push", "--to", server.url, "--credentials", str(cfg), data_dir=device_a.data_dir, env=env
    )
    assert refused.returncode == 2 and "Traceback" not in refused.stderr
    env[variable] = str(cert)
    ok = run_cli("sync", "push", "--to", server.url, "--credentials", str(cfg), data_dir=device_a.data_dir, env=env)
    assert ok.returncode == 0, ok.stderr


# --- stale uploads ----------------------------------------------------------------------------------------
def plant_uploads(incoming_root, own: str, other: str, trip_id: str):
    day = 24 * 3600
    mine, theirs = incoming_root / device_key(own), incoming_root / device_key(other)
    mine.mkdir(parents=True, exist_ok=True)
    theirs.mkdir(parents=True, exist_ok=True)
    files = {
        "own old": mine / f"{trip_id}.aaaaaaaaaaaa.part",
        "own fresh": mine / f"{trip_id}.bbbbbbbbbbbb.part",
        "own old table upload": mine / "sites.dddddddddddd.part",
        "own old, not an upload name": mine / "keep-me.txt",
        "other device old table upload": theirs / "settings.eeeeeeeeeeee.part",
        "other device old": theirs / f"{trip_id}.cccccccccccc.part",
    }
    for label, path in files.items():
        path.write_bytes(b"cut upload")
        if "fresh" not in label:
            old = time.time() - 2 * day
            os.utime(path, (old, old))
    return files


@pytest.mark.parametrize("kind", ["webdav", "folder"])
def test_a_pushing_device_removes_only_its_own_stale_uploads(dav, device_a, tmp_path, kind):
    t = new_trip(device_a)
    if kind == "webdav":
        hub_root, url, session = dav.root / "hub", dav.url, dav_session("tablet-A")
    else:
        hub_root = tmp_path / "folder-hub"
        hub_root.mkdir()
        url, session = str(hub_root), None
    files = plant_uploads(hub_root / "incoming", "tablet-A", "tablet-B", t.id)
    report = sync.push(device_a, url, session=session)
    assert report.pushed == 1
    assert not files["own old"].exists()
    assert not files["own old table upload"].exists()
    assert files["own fresh"].exists() and files["own old, not an upload name"].exists()
    assert files["other device old"].exists() and files["other device old table upload"].exists()
    # at most once a day: a second stale upload waits for tomorrow's push
    again = files["own old"]
    again.write_bytes(b"cut again")
    os.utime(again, (time.time() - 2 * 24 * 3600,) * 2)
    new_trip(device_a, day=9)
    assert sync.push(device_a, url, session=dav_session("tablet-A") if kind == "webdav" else None).pushed == 1
    assert again.exists()
