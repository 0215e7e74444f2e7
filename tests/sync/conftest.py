"""Real servers on 127.0.0.1 for the sync tests: wsgidav (WebDAV, optionally TLS), an HTTP intake
endpoint, a fault-injecting TCP proxy; and device stores holding invented trips."""

from __future__ import annotations

import hashlib
import json
import os
import random
import socket
import subprocess
import threading
import time
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path

import pytest

import sync
from core.records.models import Site, Stop, Trip, measure
from core.store import DeviceStore
from sync.session import Credentials, RetryPolicy, Session

DAV_USER, DAV_PASSWORD = "ro-tablet", "larkspur-test-only"
SITES = [("LK-01", "Mill Ford", 120.0), ("LK-02", "Heron Bend", 180.0), ("LK-03", "Upper Weir", 260.0)]


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


# --- WebDAV -------------------------------------------------------------------------------------
@dataclass
class DavServer:
    root: Path
    port: int
    scheme: str
    server: object
    thread: threading.Thread

    @property
    def url(self) -> str:
        return f"{self.scheme}://127.0.0.1:{self.port}/hub/"

    def stop(self) -> None:
        self.server.stop()
        self.thread.join(5)


def finite_depth_only(app, seen: list | None = None):  # noqa: ANN001, ANN201
    """WSGI middleware in front of wsgidav: PROPFIND with ``Depth: infinity`` (or no Depth, which
    RFC 4918 §9.1 says means infinity) is refused with 403 and the RFC's ``propfind-finite-depth``
    precondition, serialised by wsgidav's own error class, as stock servers ship by default.
    `seen` collects the (method, Depth) of every request."""
    from wsgidav.dav_error import DAVErrorCondition, PRECONDITION_CODE_PropfindFiniteDepth

    body = DAVErrorCondition(PRECONDITION_CODE_PropfindFiniteDepth).as_string().encode("utf-8")

    def middleware(environ, start_response):  # noqa: ANN001, ANN202
        depth = environ.get("HTTP_DEPTH", "infinity").lower()
        if seen is not None:
            seen.append((environ["REQUEST_METHOD"], depth))
        if environ["REQUEST_METHOD"] == "PROPFIND" and depth == "infinity":
            start_response(
                "403 Forbidden",
                [("Content-Type", "application/xml; charset=utf-8"), ("Content-Length", str(len(body)))],
            )
            return [body]
        return app(environ, start_response)

    return middleware


def forbid_everything(app):  # noqa: ANN001, ANN201
    """WSGI middleware: every request is refused with a plain 403 page (an account without access)."""
    page = b"<html><body><h1>403 Forbidden</h1><p>Your account may not use this share.</p></body></html>"

    def middleware(environ, start_response):  # noqa: ANN001, ANN202
        start_response("403 Forbidden", [("Content-Type", "text/html"), ("Content-Length", str(len(page)))])
        return [page]

    return middleware


def start_dav(
    root: Path, *, certfile: Path | None = None, keyfile: Path | None = None, auth: bool = True, wrap=None
) -> DavServer:  # noqa: ANN001
    import logging

    from cheroot import wsgi
    from wsgidav.wsgidav_app import WsgiDAVApp

    logging.getLogger("wsgidav").setLevel(logging.ERROR)  # its start-up notes are not findings
    (root / "hub").mkdir(parents=True, exist_ok=True)
    port = free_port()
    config = {
        "host": "127.0.0.1",
        "port": port,
        "provider_mapping": {"/": str(root)},
        "simple_dc": {"user_mapping": {"*": ({DAV_USER: {"password": DAV_PASSWORD}} if auth else True)}},
        "http_authenticator": {
            "domain_controller": None,
            "accept_basic": True,
            "accept_digest": False,
            "default_to_digest": False,
        },
        "verbose": 0,
        "logging": {"enable": False, "enable_loggers": []},
        "property_manager": True,
        "lock_storage": True,
        "dir_browser": {"enable": False},
    }
    app = WsgiDAVApp(config)
    if wrap is not None:
        app = wrap(app)
    server = wsgi.Server(("127.0.0.1", port), app, numthreads=12, timeout=5)
    scheme = "http"
    if certfile is not None:
        from cheroot.ssl.builtin import BuiltinSSLAdapter

        server.ssl_adapter = BuiltinSSLAdapter(str(certfile), str(keyfile))
        scheme = "https"
    server.prepare()
    thread = threading.Thread(target=server.serve, daemon=True)
    thread.start()
    return DavServer(root, port, scheme, server, thread)


@pytest.fixture
def dav(tmp_path):
    server = start_dav(tmp_path / "davroot")
    yield server
    server.stop()


def dav_session(device_id: str | None = None, **kw) -> Session:
    opts = dict(
        credentials=Credentials(DAV_USER, DAV_PASSWORD),
        connect_timeout_s=2.0,
        read_timeout_s=5.0,
        retry=RetryPolicy(attempts=3, backoff_s=0.01, max_backoff_s=0.05),
    )
    opts.update(kw)
    return Session(device_id, **opts)


def converge(devices, url):
    """Push and pull every device until nothing changes (bounded: 4 rounds)."""
    for _ in range(4):
        moved = 0
        for d in devices:
            moved += sync.push(d, url, session=dav_session(d.device_id)).pushed
            r = sync.pull(d, url, session=dav_session(d.device_id))
            moved += r.pulled + r.merged
        if not moved:
            return
    raise AssertionError("devices did not settle in 4 rounds")


@pytest.fixture
def session_factory():
    return dav_session


# --- HTTP intake endpoint ---------------------------------------------------------------------------
@dataclass
class Intake:
    port: int
    server: ThreadingHTTPServer
    thread: threading.Thread
    received: dict = field(default_factory=dict)  # Idempotency-Key -> body bytes
    by_trip: dict = field(default_factory=dict)  # trip id -> list of (revision, body)
    requests: list = field(default_factory=list)  # (key, status)
    conflict_trips: set = field(default_factory=set)
    answer: str = "ack"  # "ack" (the JSON acknowledgement), "html" (a login page), "empty", "wrong-hash"

    @property
    def url(self) -> str:
        return f"post+http://127.0.0.1:{self.port}/intake/trips"


@pytest.fixture
def intake():
    state: dict = {}

    class Handler(BaseHTTPRequestHandler):
        protocol_version = "HTTP/1.1"

        def log_message(self, *args):  # keep test output quiet
            pass

        def do_POST(self):
            it: Intake = state["intake"]
            length = int(self.headers.get("Content-Length", "0"))
            body = self.rfile.read(length)
            key = self.headers.get("Idempotency-Key")
            status = 201
            if self.path != "/intake/trips" or not key:
                status = 400
            elif self.headers.get("Transfer-Encoding"):
                status = 411
            elif key in it.received:
                status = 200 if it.received[key] == body else 422
            else:
                doc = json.loads(body)
                if doc["id"] in it.conflict_trips:
                    status = 409
                else:
                    it.received[key] = body
                    it.by_trip.setdefault(doc["id"], []).append((doc["revision"], body))
            it.requests.append((key, status))
            out, ctype = b"", "text/plain"
            if status in (200, 201):
                if it.answer == "html":
                    out, ctype = (
                        (
                            b"<!DOCTYPE html><html><head><title>Sign in</title></head><body>"
                            b"<form>user <input name=u></form></body></html>"
                        ),
                        "text/html",
                    )
                    it.received.pop(key, None)  # a login page takes nothing in
                    it.by_trip.clear()
                elif it.answer in ("ack", "wrong-hash"):
                    digest = "sha256:" + hashlib.sha256(body).hexdigest()
                    if it.answer == "wrong-hash":
                        digest = "sha256:" + "0" * 64
                    out, ctype = (
                        json.dumps(
                            {"trip_id": json.loads(body)["id"], "content_hash": digest, "received": True}
                        ).encode(),
                        "application/json",
                    )
            self.send_response(status)
            self.send_header("Content-Type", ctype)
            self.send_header("Content-Length", str(len(out)))
            self.end_headers()
            self.wfile.write(out)

    port = free_port()
    server = ThreadingHTTPServer(("127.0.0.1", port), Handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    it = Intake(port, server, thread)
    state["intake"] = it
    thread.start()
    yield it
    server.shutdown()
    server.server_close()


# --- fault-injecting TCP proxy ----------------------------------------------------------------------
class FaultProxy:
    """Forwards 127.0.0.1:port to an upstream port; each new connection gets a fault drawn from
    `faults` (or "pass"): "cut_upload" (forward part of the request, then close), "stall" (take
    the request, answer nothing until the client gives up), "http500"/"http503" (answer at once),
    "cut_response" (forward the request, then only part of the answer)."""

    FAULTS = ("cut_upload", "stall", "http500", "http503", "cut_response", "cut_headers")

    def __init__(self, upstream_port: int, seed: int = 1) -> None:
        self.upstream = upstream_port
        self.rng = random.Random(seed)
        self.fault_rate = 0.0
        self.faults = self.FAULTS
        self.counts: dict[str, int] = {}
        # method -> faults for its next requests, in order ("cut_headers": the answer is cut right
        # after its status line, before Content-Length: the client reads an empty 200/207)
        self.script: dict[str, list[str]] = {}
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(64)
        self.port = self.sock.getsockname()[1]
        self._stop = threading.Event()
        self._lock = threading.Lock()
        self.thread = threading.Thread(target=self._accept, daemon=True)
        self.thread.start()

    def _pick(self) -> str:
        with self._lock:
            fault = self.rng.choice(self.faults) if self.rng.random() < self.fault_rate else "pass"
            self.counts[fault] = self.counts.get(fault, 0) + 1
            cut = self.rng.randint(1, 900)
            return fault, cut

    def _accept(self) -> None:
        self.sock.settimeout(0.2)
        while not self._stop.is_set():
            try:
                client, _ = self.sock.accept()
            except (TimeoutError, OSError):
                continue
            fault, cut = self._pick()
            threading.Thread(target=self._serve, args=(client, fault, cut), daemon=True).start()

    def _scripted(self, client: socket.socket, fault: str) -> tuple[str, bytes]:
        """Reads the request's first bytes; a scripted fault for its method replaces the draw."""
        try:
            first = client.recv(65536)
        except OSError:
            return fault, b""
        method = first.split(b" ", 1)[0].decode("ascii", "replace")
        with self._lock:
            queue = self.script.get(method)
            if queue:
                fault = queue.pop(0)
                self.counts[fault] = self.counts.get(fault, 0) + 1
        return fault, first

    def _serve(self, client: socket.socket, fault: str, cut: int) -> None:
        client.settimeout(3.0)
        first = b""
        if self.script:
            fault, first = self._scripted(client, fault)
        try:
            if fault in ("http500", "http503", "stall"):
                try:
                    client.recv(65536)
                except OSError:
                    pass
                if fault == "stall":
                    deadline = time.monotonic() + 3.0
                    while time.monotonic() < deadline and not self._stop.is_set():
                        try:
                            if not client.recv(65536):
                                break
                        except TimeoutError:
                            break
                        except OSError:
                            break
                    return
                code = "500 Internal Server Error" if fault == "http500" else "503 Service Unavailable"
                client.sendall(f"HTTP/1.1 {code}\r\nContent-Length: 0\r\nConnection: close\r\n\r\n".encode())
                return
            upstream = socket.create_connection(("127.0.0.1", self.upstream), timeout=3.0)
            try:
                if first:
                    upstream.sendall(first)
                self._pump(client, upstream, fault, cut)
            finally:
                upstream.close()
        finally:
            try:
                client.close()
            except OSError:
                pass

    def _pump(self, client, upstream, fault, cut) -> None:
        import selectors

        sel = selectors.DefaultSelector()
        sel.register(client, selectors.EVENT_READ, upstream)
        sel.register(upstream, selectors.EVENT_READ, client)
        sent_up = sent_down = 0
        deadline = time.monotonic() + 10.0
        while time.monotonic() < deadline and not self._stop.is_set():
            events = sel.select(timeout=0.5)
            if not events:
                continue
            for key, _ in events:
                src, dst = key.fileobj, key.data
                try:
                    data = src.recv(65536)
                except OSError:
                    return
                if not data:
                    return
                if src is client:
                    if fault == "cut_upload" and sent_up + len(data) > cut:
                        dst.sendall(data[: max(0, cut - sent_up)])
                        return
                    sent_up += len(data)
                else:
                    if fault == "cut_headers":
                        head = data.find(b"\r\n")
                        if sent_down == 0 and head >= 0:  # the status line only, then close
                            dst.sendall(data[: head + 2])
                            return
                    if fault == "cut_response" and sent_down + len(data) > cut // 8:
                        dst.sendall(data[: max(0, cut // 8 - sent_down)])
                        return
                    sent_down += len(data)
                try:
                    dst.sendall(data)
                except OSError:
                    return

    def url_for(self, path: str = "/hub/") -> str:
        return f"http://127.0.0.1:{self.port}{path}"

    def close(self) -> None:
        self._stop.set()
        self.sock.close()
        self.thread.join(2)


@pytest.fixture
def fault_proxy(dav):
    proxy = FaultProxy(dav.port)
    yield proxy
    proxy.close()


# --- device stores with invented trips ---------------------------------------------------------------
def open_store(path: Path, device_id: str) -> DeviceStore:
    store = DeviceStore.open(path, device_id)
    store.save_sites([Site(id=s, name=n, elevation_m=e) for s, n, e in SITES])
    return store


def new_trip(store: DeviceStore, *, day: int = 3, stops: int = 1, crew: str = "R.O.") -> Trip:
    start = datetime(2026, 6, day, 8, 0, tzinfo=timezone.utc)
    trip = store.save_trip(Trip(program="Tamsin Valley Stream Watch", crew=[crew], started_at=start), "trip started")
    for i in range(stops):
        site = SITES[i % len(SITES)][0]
        stop = Stop(
            site_id=site,
            arrived_at=start + timedelta(hours=1 + i),
            temp=measure("temp", f"{11.5 + i} C"),
            pressure=measure("pressure", "990 hPa"),
            do=measure("do", "9.1 mg/L"),
        )
        trip = store.save_stop(trip.id, stop)
    return trip


def edit_stop_notes(store: DeviceStore, trip_id: str, index: int, notes: str) -> Trip:
    trip = store.load_trip(trip_id)
    stops = list(trip.stops)
    stops[index] = stops[index].model_copy(update={"notes": notes})
    return store.save_trip(trip.model_copy(update={"stops": stops}), f"notes of stop {index + 1}")


def edit_stop_temp(store: DeviceStore, trip_id: str, index: int, text: str) -> Trip:
    trip = store.load_trip(trip_id)
    stops = list(trip.stops)
    stops[index] = stops[index].model_copy(update={"temp": measure("temp", text)})
    return store.save_trip(trip.model_copy(update={"stops": stops}), f"temperature of stop {index + 1}")


@pytest.fixture
def device_a(tmp_path):
    return open_store(tmp_path / "device-a", "tablet-A")


@pytest.fixture
def device_b(tmp_path):
    return open_store(tmp_path / "device-b", "tablet-B")


def hub_files(root: Path) -> dict[str, list[Path]]:
    """trip id -> revision files in a hub folder (any layout depth under trips/)."""
    out: dict[str, list[Path]] = {}
    trips = root / "trips"
    if trips.is_dir():
        for f in sorted(trips.glob("*/*/*")):
            out.setdefault(f.parent.name, []).append(f)
    return out


def make_self_signed(folder: Path) -> tuple[Path, Path]:
    """A self-signed certificate for 127.0.0.1 (test only): with the `cryptography` package when
    installed, else the `openssl` command. When neither is there the test is skipped on a developer's
    machine but fails under CI (env CI set), so a CI run never passes with TLS untested."""
    import shutil

    cert, key = folder / "hub-cert.pem", folder / "hub-key.pem"
    try:
        import ipaddress

        from cryptography import x509
        from cryptography.hazmat.primitives import hashes, serialization
        from cryptography.hazmat.primitives.asymmetric import rsa
        from cryptography.x509.oid import NameOID
    except ImportError:
        if shutil.which("openssl") is None:
            why = "neither the cryptography package nor the openssl command is installed"
            if os.environ.get("CI"):
                pytest.fail(f"{why}: CI must test TLS (install openssl, see .ci/sysdeps.sh)")
            pytest.skip(why)
        subprocess.run(
            [
                "openssl",
                "req",
                "-x509",
                "-newkey",
                "rsa:2048",
                "-nodes",
                "-keyout",
                str(key),
                "-out",
                str(cert),
                "-days",
                "2",
                "-subj",
                "/CN=127.0.0.1",
                "-addext",
                "subjectAltName=IP:127.0.0.1",
            ],
            check=True,
            capture_output=True,
            timeout=60,
        )
        return cert, key
    pkey = rsa.generate_private_key(public_exponent=65537, key_size=2048)
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "127.0.0.1")])
    now = datetime.now(timezone.utc)
    certificate = (
        x509.CertificateBuilder()
        .subject_name(name)
        .issuer_name(name)
        .public_key(pkey.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - timedelta(minutes=5))
        .not_valid_after(now + timedelta(days=2))
        .add_extension(x509.SubjectAlternativeName([x509.IPAddress(ipaddress.ip_address("127.0.0.1"))]), critical=False)
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .sign(pkey, hashes.SHA256())
    )
    cert.write_bytes(certificate.public_bytes(serialization.Encoding.PEM))
    key.write_bytes(
        pkey.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, serialization.NoEncryption())
    )
    return cert, key
