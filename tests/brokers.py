"""A private Mosquitto broker per test session (or per test), on a free loopback port.

The broker itself is ``wellspan.mosquitto`` (the demo runs it the same way).

``mosquitto`` (session scope) is shared by every test that only needs a broker; tests that stop,
restart or reconfigure the broker use ``private_mosquitto`` (function scope), their own.
"""

from __future__ import annotations

import os
import shutil
import subprocess
from collections.abc import Iterator
from pathlib import Path
from typing import NoReturn

import pytest

from wellspan.mosquitto import (
    MOSQUITTO,
    MOSQUITTO_PASSWD,
    BrokerCertificates,
    free_port,
    mosquitto_installed,
)
from wellspan.mosquitto import MosquittoBroker as _Broker

__all__ = [
    "MOSQUITTO",
    "MOSQUITTO_PASSWD",
    "BrokerCertificates",
    "MosquittoBroker",
    "free_port",
    "make_certificates",
    "missing",
    "mosquitto",
    "private_mosquitto",
    "require_tool",
]


def missing(what: str) -> NoReturn:
    """Skip a test whose system tool or local service is missing on a developer's machine,
    with the reason.

    Under CI (``CI`` set) it fails instead: ``./dev test`` installs mosquitto, openssl and
    PostgreSQL and ``.ci/run`` starts PostgreSQL, so their absence there is a broken install or
    start step, not a reason to skip.
    """
    if os.environ.get("CI"):
        pytest.fail(f"{what}; ./dev test should have installed or started it", pytrace=False)
    pytest.skip(what)  # outside CI only, and with the reason: which tool or service is missing


def require_tool(present: bool, what: str) -> None:
    """:func:`missing` unless ``present``."""
    if not present:
        missing(what)


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


class MosquittoBroker(_Broker):
    """``wellspan.mosquitto.MosquittoBroker`` that skips the test (fails under CI) when the
    binary is missing."""

    def __init__(self, workdir: Path, port: int | None = None) -> None:
        require_tool(mosquitto_installed(), f"Mosquitto binary not found at {MOSQUITTO}")
        super().__init__(workdir, port)


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
