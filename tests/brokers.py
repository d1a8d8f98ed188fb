"""A private Mosquitto broker per test session (or per test), on a free loopback port.

``mosquitto`` (session scope) is shared by every test that only needs a broker; tests that stop,
restart or reconfigure the broker use ``private_mosquitto`` (function scope), their own.
"""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import time
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path

import pytest

__all__ = [
    "MOSQUITTO",
    "BrokerCertificates",
    "MosquittoBroker",
    "free_port",
    "make_certificates",
    "mosquitto",
    "private_mosquitto",
]

MOSQUITTO = shutil.which("mosquitto") or "/usr/sbin/mosquitto"
MOSQUITTO_PASSWD = shutil.which("mosquitto_passwd") or "/usr/bin/mosquitto_passwd"


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@dataclass(frozen=True)
class BrokerCertificates:
    """A throw-away CA and a server certificate for 127.0.0.1 (PEM files)."""

    ca: Path
    cert: Path
    key: Path


def require_tool(present: bool, what: str) -> None:
    """Skip a test whose system tool is missing on a developer's machine, with the reason.

    Under CI (``CI`` set) a missing tool fails instead: ``./dev test`` installs mosquitto and
    openssl, so their absence there is a broken install step, not a reason to skip.
    """
    if present:
        return
    if os.environ.get("CI"):
        pytest.fail(f"{what}; ./dev test should have installed it", pytrace=False)
    pytest.skip(what)


def make_certificates(folder: Path) -> BrokerCertificates:
    """Create a CA and a server certificate for 127.0.0.1 with the ``openssl`` command."""
    require_tool(shutil.which("openssl") is not None, "openssl not installed")
    folder.mkdir(parents=True, exist_ok=True)

    def openssl(*args: str) -> None:
        subprocess.run(["openssl", *args], cwd=folder, check=True, capture_output=True)

    openssl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout", "ca.key", "-out",
            "ca.crt", "-days", "2", "-subj", "/CN=wellspan test CA")  # fmt: skip
    openssl("req", "-newkey", "rsa:2048", "-nodes", "-keyout", "server.key", "-out",
            "server.csr", "-subj", "/CN=127.0.0.1")  # fmt: skip
    (folder / "san.ext").write_text("subjectAltName=IP:127.0.0.1\n")
    openssl("x509", "-req", "-in", "server.csr", "-CA", "ca.crt", "-CAkey", "ca.key",
            "-CAcreateserial", "-out", "server.crt", "-days", "2",
            "-extfile", "san.ext")  # fmt: skip
    return BrokerCertificates(folder / "ca.crt", folder / "server.crt", folder / "server.key")


class MosquittoBroker:
    """A Mosquitto process on ``host:port``; ``stop()`` and ``start()`` keep the port.

    ``start(users={...})`` turns authentication on (only those users may connect);
    ``set_users`` rewrites the password file of a running broker and reloads it (SIGHUP);
    ``start(tls=make_certificates(...))`` serves MQTT over TLS on the port instead.
    """

    host = "127.0.0.1"

    def __init__(self, workdir: Path, port: int | None = None) -> None:
        require_tool(Path(MOSQUITTO).exists(), f"Mosquitto binary not found at {MOSQUITTO}")
        self.workdir = workdir
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.port = port or free_port()
        self.conf = workdir / "mosquitto.conf"
        self.log = workdir / "mosquitto.log"
        self.passwords = workdir / "passwords"
        self._proc: subprocess.Popen[bytes] | None = None
        self.tls: BrokerCertificates | None = None

    @property
    def url(self) -> str:
        return f"{'mqtts' if self.tls else 'mqtt'}://{self.host}:{self.port}"

    @property
    def running(self) -> bool:
        return self._proc is not None and self._proc.poll() is None

    def _write_users(self, users: Mapping[str, str]) -> None:
        self.passwords.write_text("")
        for user, password in users.items():
            subprocess.run(
                [MOSQUITTO_PASSWD, "-b", str(self.passwords), user, password],
                check=True,
                capture_output=True,
            )

    def start(
        self, *, users: Mapping[str, str] | None = None, tls: BrokerCertificates | None = None
    ) -> None:
        if self.running:
            return
        self.tls = tls
        lines = [
            f"listener {self.port} {self.host}",
            "persistence false",
            "max_queued_messages 0",
            f"log_dest file {self.log}",
            "log_type error",
            "log_type warning",
            "log_type notice",
        ]
        if tls is not None:
            lines += [f"cafile {tls.ca}", f"certfile {tls.cert}", f"keyfile {tls.key}"]
        if os.geteuid() == 0:
            # as root Mosquitto would switch to the 'mosquitto' user, who cannot read pytest's
            # private temporary folders
            lines.append("user root")
        if users is None:
            lines.append("allow_anonymous true")
        else:
            self._write_users(users)
            lines += ["allow_anonymous false", f"password_file {self.passwords}"]
        self.conf.write_text("\n".join(lines) + "\n")
        self._proc = subprocess.Popen(
            [MOSQUITTO, "-c", str(self.conf)],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline:
            if self._proc.poll() is not None:
                raise RuntimeError(f"mosquitto exited with {self._proc.returncode}; see {self.log}")
            try:
                with socket.create_connection((self.host, self.port), timeout=0.2):
                    return
            except OSError:
                time.sleep(0.02)
        raise RuntimeError(f"mosquitto did not listen on {self.port} within 10 s")

    def set_users(self, users: Mapping[str, str]) -> None:
        self._write_users(users)
        assert self._proc is not None
        os.kill(self._proc.pid, signal.SIGHUP)
        time.sleep(0.2)

    def stop(self) -> None:
        if self._proc is None:
            return
        if self._proc.poll() is None:
            self._proc.terminate()
            try:
                self._proc.wait(timeout=5)
            except subprocess.TimeoutExpired:
                self._proc.kill()
                self._proc.wait()
        self._proc = None

    def __repr__(self) -> str:
        return f"MosquittoBroker(port={self.port}, running={self.running})"


@pytest.fixture(scope="session")
def mosquitto(tmp_path_factory: pytest.TempPathFactory) -> Iterator[MosquittoBroker]:
    """A broker shared by the whole session; tests must leave it running and anonymous."""
    broker = MosquittoBroker(tmp_path_factory.mktemp("mosquitto"))
    broker.start()
    yield broker
    broker.stop()


@pytest.fixture
def private_mosquitto(tmp_path: Path) -> Iterator[MosquittoBroker]:
    """A broker of this test alone, free to stop, restart and reconfigure."""
    broker = MosquittoBroker(tmp_path / "mosquitto")
    broker.start()
    yield broker
    broker.stop()
