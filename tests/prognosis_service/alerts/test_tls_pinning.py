"""An https delivery connects to the checked address yet verifies the certificate of the name."""

from __future__ import annotations

import shutil
import ssl
import subprocess
import threading
from datetime import UTC, datetime
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import httpx

from prognosis_service.alerts.delivery import DeliveryWorker, SqlDeliveryRepository
from prognosis_service.alerts.ssrf import TargetPolicy
from prognosis_service.alerts.webhooks import SubscriptionIn, create_subscription
from tests.brokers import require_tool
from tests.prognosis_service.alerts.test_delivery import changes_for, deliveries, enqueue

HOST = "dispatch.saltbush.example"


def _now() -> datetime:
    return datetime.now(UTC)


def make_cert(folder: Path) -> tuple[Path, Path]:
    """A self-signed certificate for HOST (it is its own CA)."""
    require_tool(shutil.which("openssl") is not None, "openssl not installed")
    cert, key = folder / "cert.pem", folder / "key.pem"
    subprocess.run(
        [
            "openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2",
            "-keyout", str(key), "-out", str(cert), "-subj", f"/CN={HOST}",
            "-addext", f"subjectAltName=DNS:{HOST}",
            "-addext", "basicConstraints=critical,CA:TRUE",
        ],
        check=True,
        capture_output=True,
    )  # fmt: skip
    return cert, key


def test_https_delivery_is_pinned_and_verified(sqlite_store, sealer, tmp_path: Path) -> None:
    cert, key = make_cert(tmp_path)
    seen: list[dict[str, Any]] = []

    class Handler(BaseHTTPRequestHandler):
        def do_POST(self) -> None:
            self.rfile.read(int(self.headers.get("Content-Length", "0")))
            seen.append({"host": self.headers.get("Host")})
            self.send_response(204)
            self.send_header("Content-Length", "0")
            self.end_headers()

        def log_message(self, *args: Any) -> None:
            pass

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    ctx = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
    ctx.load_cert_chain(cert, key)
    sni: list[str | None] = []
    ctx.sni_callback = lambda sock, name, c: sni.append(name)
    server.socket = ctx.wrap_socket(server.socket, server_side=True)
    port = server.server_address[1]
    thread = threading.Thread(target=server.serve_forever, args=(0.02,), daemon=True)
    thread.start()

    policy = TargetPolicy(allow_private_targets=True, resolver=lambda host, p: ["127.0.0.1"])
    client = httpx.Client(verify=ssl.create_default_context(cafile=str(cert)), trust_env=False)
    worker = DeliveryWorker(
        repository=SqlDeliveryRepository(sqlite_store),
        sealer=sealer,
        target_policy=policy,
        lease_s=30,
        timeout_s=5,
        client=client,
    )
    try:
        with sqlite_store.write() as s:
            create_subscription(
                s,
                SubscriptionIn(name="tls", url=f"https://{HOST}:{port}/hook"),
                sealer=sealer,
                policy=policy,
                now=_now(),
            )
        enqueue(sqlite_store, changes_for("MAL-P1"), _now)
        assert worker.run_once() == 1
        (row,) = deliveries(sqlite_store)
        assert (row.state, row.last_status) == ("delivered", 204), row.last_error
        # connected to 127.0.0.1, yet TLS named (and the certificate was verified for) HOST
        assert seen == [{"host": f"{HOST}:{port}"}]
        assert sni == [HOST]
        # and verification is real: without our CA the same delivery is refused
        strict = DeliveryWorker(
            repository=SqlDeliveryRepository(sqlite_store),
            sealer=sealer,
            target_policy=policy,
            lease_s=30,
            timeout_s=5,
        )
        try:
            enqueue(sqlite_store, changes_for("MAL-P2"), _now)
            assert strict.run_once() == 1
        finally:
            strict.close()
        failed = deliveries(sqlite_store)[1]
        assert failed.state == "pending"
        assert "CERTIFICATE_VERIFY_FAILED" in (failed.last_error or "")
        assert len(seen) == 1
    finally:
        worker.close()
        server.shutdown()
        server.server_close()
