"""A live service (uvicorn on a free port, temporary SQLite store filled through real HTTP
ingest) and a headless Debian Chromium driven by Selenium with the system chromedriver."""

from __future__ import annotations

import shutil
import threading
import time
from collections.abc import AsyncIterator, Iterator
from contextlib import asynccontextmanager, contextmanager
from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path
from typing import Any

import httpx
import pytest
import uvicorn
from fastapi import FastAPI

from edge_agent.simulator import FaultScenario
from prognosis_service.api import assets, indicators
from prognosis_service.api.problems import install_problem_handlers
from prognosis_service.app import create_app, start_runtime, stop_runtime
from prognosis_service.assessment.worker import AssessmentWorker
from prognosis_service.auth import create_key
from prognosis_service.dashboard import router as dashboard_router
from prognosis_service.settings import Settings, load_settings
from prognosis_service.store.engine import Store
from shared_schema import to_readable
from tests.brokers import free_port, require_tool
from tests.prognosis_service.assessment.simfleet import SITE, START, simulate

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"
HOSTILE = '<img src=x onerror="window.__pwned=1">"\'&'
# Three Saltbush Flats pumps, simulated (edge_agent.simulator → extractor) for 24 days, one
# window every 3 hours, and sent through POST /v1/indicators:
DAY = timedelta(days=1)
SCENARIOS = {
    "MAL-P2": (FaultScenario(fault="outer_race", onset=START + 8 * DAY, life_days=20.0), 3),
    "GIB-P1": (FaultScenario(fault="imbalance", onset=START + 12 * DAY, life_days=60.0), 5),
    "MAL-P1": (FaultScenario(), 11),  # healthy
}
ASSETS = list(SCENARIOS)
HOURS, EVERY_H = 24 * 24.0, 3.0
INSPECTED_AT = START + timedelta(days=10)


@dataclass
class LiveService:
    url: str
    app: Any
    store: Store
    keys: dict[str, str]

    def client(self, key: str = "admin") -> httpx.Client:
        return httpx.Client(
            base_url=self.url, headers={"Authorization": f"Bearer {self.keys[key]}"}, timeout=60
        )


def populate(svc: LiveService, *, assess: bool = True) -> None:
    """Register the pumps and send their windows through POST /v1/indicators; then record an
    inspection and run the service's own assessment over them (``assess``)."""
    with svc.client("admin") as admin, svc.client("ingest") as ingest:
        for n, (asset_id, (scenario, seed)) in enumerate(SCENARIOS.items()):
            resp = admin.post(
                "/v1/assets",
                json={
                    "asset_id": asset_id,
                    "site": SITE,
                    "asset_class": "end-suction-centrifugal",
                    "description": f"transfer pump {n + 1} {HOSTILE}",
                },
            )
            assert resp.status_code == 201, resp.text
            layout, msgs = simulate(asset_id, scenario, seed=seed, hours=HOURS, every_h=EVERY_H)
            body = {
                "layouts": [layout.model_dump(mode="json")],
                "messages": [to_readable(m, layout) for m in msgs],
            }
            resp = ingest.post("/v1/indicators", json=body)
            assert resp.status_code == 200, resp.text
            assert resp.json()["stored"] == len(msgs)
        if not assess:
            return
        resp = admin.post(
            "/v1/assets/MAL-P2/maintenance-events",
            json={
                "at": INSPECTED_AT.isoformat(),
                "kind": "inspection",
                "component": "drive-end bearing",
                "notes": f"grease darkened {HOSTILE}",
                "performed_by": "B. Quandong",
            },
        )
        assert resp.status_code == 201, resp.text
    # the service's own assessment, as its background worker would run it
    worker = AssessmentWorker(svc.store)
    while worker.run_once():
        pass


@contextmanager
def serve(app: FastAPI) -> Iterator[LiveService]:
    """Run ``app`` with uvicorn on a free loopback port in a thread; keys of each scope."""
    port = free_port()
    server = uvicorn.Server(
        uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning", lifespan="on")
    )
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            raise RuntimeError("uvicorn did not start")
        time.sleep(0.05)
    try:
        store: Store = app.state.runtime.store
        with store.write() as session:
            keys = {
                name: create_key(session, name=name, scopes=scopes)[1]
                for name, scopes in [
                    ("admin", ["admin"]),
                    ("reader", ["read"]),
                    ("operator", ["operate"]),
                    ("ingest", ["ingest"]),
                ]
            }
        yield LiveService(f"http://127.0.0.1:{port}", app, store, keys)
    finally:
        server.should_exit = True
        thread.join(timeout=10)


def _settings(folder: Path) -> Settings:
    return load_settings(
        database_url=f"sqlite:///{folder / 'wellspan.db'}", mqtt_url="mqtt://127.0.0.1:9"
    )


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LiveService]:
    """The whole service, its demo assets ingested and assessed."""
    app = create_app(_settings(tmp_path_factory.mktemp("dashboard")), run_ingest=False)
    with serve(app) as svc:
        populate(svc)
        yield svc


@pytest.fixture(scope="module")
def bare(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LiveService]:
    """A service with only the asset and ingest routes and the dashboard: none of the
    assessment or alert routes the page also reads."""
    settings = _settings(tmp_path_factory.mktemp("bare"))

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        app.state.runtime = start_runtime(settings, run_ingest=False)
        yield
        stop_runtime(app.state.runtime)

    app = FastAPI(lifespan=lifespan)
    install_problem_handlers(app)
    for router in (assets.router, indicators.router, dashboard_router):
        app.include_router(router)
    with serve(app) as svc:
        populate(svc, assess=False)
        yield svc


@pytest.fixture(scope="module")
def browser() -> Iterator[Any]:
    require_tool(Path(CHROMIUM).exists(), f"Chromium not found at {CHROMIUM}")
    require_tool(Path(CHROMEDRIVER).exists(), f"chromedriver not found at {CHROMEDRIVER}")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service as DriverService

    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for arg in (
        "--headless=new",
        "--no-sandbox",  # we run as root in CI
        "--disable-gpu",
        "--disable-dev-shm-usage",
        "--window-size=1366,768",
        "--hide-scrollbars",
    ):
        options.add_argument(arg)
    driver = webdriver.Chrome(service=DriverService(CHROMEDRIVER), options=options)
    driver.set_page_load_timeout(30)
    yield driver
    driver.quit()
