"""A private Mosquitto broker on a free loopback port, with its own temporary configuration.

Used by the demo (``wellspan demo``) and by the tests (``tests/brokers.py``), so both run the
broker the same way: a listener on 127.0.0.1 only, no persistence (unless asked for, as the
chaos run does), logs to a file in its folder.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import socket
import subprocess
import time
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

__all__ = [
    "INSTALL_HINT",
    "MOSQUITTO",
    "MOSQUITTO_PASSWD",
    "BrokerCertificates",
    "MosquittoBroker",
    "MosquittoMissingError",
    "free_port",
    "free_ports",
    "mosquitto_installed",
]

MOSQUITTO = shutil.which("mosquitto") or "/usr/sbin/mosquitto"
MOSQUITTO_PASSWD = shutil.which("mosquitto_passwd") or "/usr/bin/mosquitto_passwd"
INSTALL_HINT = "install it with: sudo apt-get install -y mosquitto"


class MosquittoMissingError(RuntimeError):
    """The Mosquitto binary is not installed."""


def mosquitto_installed() -> bool:
    return Path(MOSQUITTO).exists()


def free_ports(count: int) -> list[int]:
    """``count`` distinct TCP ports on 127.0.0.1 that nothing listens on right now.

    All sockets stay bound until every port is picked: ports asked for one at a time may come
    back the same, since a port freed by the first pick is free again for the second.
    """
    with contextlib.ExitStack() as held:
        ports = []
        for _ in range(count):
            s = held.enter_context(socket.socket())
            s.bind(("127.0.0.1", 0))
            ports.append(int(s.getsockname()[1]))
        return ports


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on right now."""
    return free_ports(1)[0]


@dataclass(frozen=True)
class BrokerCertificates:
    """A CA and a server certificate for 127.0.0.1 (PEM files)."""

    ca: Path
    cert: Path
    key: Path


class MosquittoBroker:
    """A Mosquitto process on ``host:port``; ``stop()`` and ``start()`` keep the port.

    ``start(users={...})`` turns authentication on (only those users may connect);
    ``set_users`` rewrites the password file of a running broker and reloads it (SIGHUP);
    ``start(tls=...)`` serves MQTT over TLS on the port instead.

    Raises
    ------
    MosquittoMissingError
        If the binary is not installed.
    """

    host = "127.0.0.1"

    def __init__(
        self, workdir: Path, port: int | None = None, *, persistence: bool = False
    ) -> None:
        if not mosquitto_installed():
            raise MosquittoMissingError(
                f"Mosquitto binary not found at {MOSQUITTO}; {INSTALL_HINT}"
            )
        self.workdir = workdir
        self.workdir.mkdir(parents=True, exist_ok=True)
        self.port = port or free_port()
        self.conf = workdir / "mosquitto.conf"
        self.log = workdir / "mosquitto.log"
        self.passwords = workdir / "passwords"
        self._proc: subprocess.Popen[bytes] | None = None
        self.tls: BrokerCertificates | None = None
        self.persistence = persistence

    @property
    def url(self) -> str:
        return f"{'mqtts' if self.tls else 'mqtt'}://{self.host}:{self.port}"

    @property
    def running(self) -> bool:
        return self._proc is not None and self._proc.poll() is None

    @property
    def pid(self) -> int | None:
        return None if self._proc is None else self._proc.pid

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
            *self._persistence_lines(),
            "max_queued_messages 0",
            f"log_dest file {self.log}",
            "log_type error",
            "log_type warning",
            "log_type notice",
        ]
        if tls is not None:
            lines += [f"cafile {tls.ca}", f"certfile {tls.cert}", f"keyfile {tls.key}"]
        if os.geteuid() == 0:
            # as root Mosquitto would switch to the 'mosquitto' user, who cannot read private
            # temporary folders
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
            start_new_session=True,  # a Ctrl-C at the terminal is for our parent to handle
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

    def _persistence_lines(self) -> list[str]:
        if not self.persistence:
            return ["persistence false"]
        # Sessions and queued QoS 1 messages survive a restart. Mosquitto saves its state as a
        # snapshot, not a log: saving after every change keeps what a SIGKILL can lose small.
        return [
            "persistence true",
            f"persistence_location {self.workdir}/",
            "autosave_on_changes true",
            "autosave_interval 1",
        ]

    def set_users(self, users: Mapping[str, str]) -> None:
        self._write_users(users)
        assert self._proc is not None
        os.kill(self._proc.pid, signal.SIGHUP)
        time.sleep(0.2)

    def kill(self) -> None:
        """SIGKILL, as a crash or power loss would stop it (``start`` brings it back)."""
        if self._proc is not None and self._proc.poll() is None:
            self._proc.kill()
            self._proc.wait()

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
