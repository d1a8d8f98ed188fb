"""Fixtures for the deploy tests (the harness is in broker_harness.py)."""

from __future__ import annotations

import shutil
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.brokers import require_tool
from tests.deploy.broker_harness import Broker, Pki, make_broker, make_pki


@pytest.fixture(scope="session")
def pki(tmp_path_factory: pytest.TempPathFactory) -> Pki:
    require_tool(shutil.which("openssl") is not None, "openssl not installed")
    return make_pki(tmp_path_factory.mktemp("pki"))


@pytest.fixture(scope="module")
def broker(tmp_path_factory: pytest.TempPathFactory, pki: Pki) -> Iterator[Broker]:
    """One broker for a test module (the read-only checks share it)."""
    b = make_broker(tmp_path_factory.mktemp("broker"), pki)
    try:
        yield b
    finally:
        b.stop()


@pytest.fixture
def own_broker(tmp_path: Path, pki: Pki) -> Iterator[Broker]:
    """A broker of the test's own, for tests that stop and restart it."""
    b = make_broker(tmp_path, pki)
    try:
        yield b
    finally:
        b.stop()
