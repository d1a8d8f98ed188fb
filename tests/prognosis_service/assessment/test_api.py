"""The assessment routes: shapes of the shared contract, auth and site scoping, both dialects."""

from __future__ import annotations

import time
import uuid
from datetime import UTC, datetime, timedelta

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import null, select

from edge_agent.simulator import FaultScenario
from prognosis_service.alerts.rules import ZoneRule, severity_zone
from prognosis_service.app import create_app
from prognosis_service.assessment.assessor import assess_asset
from prognosis_service.assessment.baseline import OUTSIDE_SPEED_RANGE
from prognosis_service.assessment.diagnosis_model import load_classifier
from prognosis_service.assessment.models import AssetAssessment
from prognosis_service.prognosis import ADVISORY
from prognosis_service.settings import load_settings
from tests.brokers import MosquittoBroker
from tests.prognosis_service.assessment.simfleet import START, register, simulate, store_messages
from tests.prognosis_service.conftest import Service

OUTER = FaultScenario(fault="outer_race", onset=START + timedelta(days=8), life_days=20.0)
TTF_KEYS = {
    "asset_id", "site_id", "asset_class", "as_of", "status", "message", "failure_mode",
    "health_index", "failure_threshold", "anomaly", "forecast", "model", "diagnosis", "advisory",
}  # fmt: skip
FORECAST_KEYS = {
    "p10_h", "p50_h", "p90_h", "p10_at", "p50_at", "p90_at", "horizon_h",
    "probability_within_horizon", "risk", "latest_maintenance_at",
}  # fmt: skip


@pytest.fixture
def degrading(service: Service) -> Service:
    layout, msgs = simulate("MAL-P2", OUTER, seed=3, hours=24 * 24, every_h=3.0)
    register(service.store, "MAL-P2")
    store_messages(service.store, layout, msgs)
    assess_asset(service.store, "MAL-P2", classifier=load_classifier())
    healthy_layout, healthy = simulate("MAL-P1", FaultScenario(), seed=11, hours=36, every_h=3.0)
    register(service.store, "MAL-P1")
    store_messages(service.store, healthy_layout, healthy)
    assess_asset(service.store, "MAL-P1", classifier=load_classifier())
    return service


def _get(s: Service, path: str, token: str, **params: object) -> dict:
    r = s.client.get(path, headers=s.auth(token), params=params)
    assert r.status_code == 200, r.text
    return r.json()


def test_time_to_failure_has_the_contract_shape(degrading: Service) -> None:
    s = degrading
    body = _get(s, "/v1/assets/MAL-P2/time-to-failure", s.keys.reader, risk=0.2, horizon_h=240)
    assert set(body) >= TTF_KEYS
    assert body["status"] == "forecast"
    assert body["advisory"] == ADVISORY
    f = body["forecast"]
    assert set(f) >= FORECAST_KEYS
    assert 0 < f["p10_h"] < f["p50_h"] < f["p90_h"]
    assert f["p10_at"] < f["p50_at"] < f["p90_at"] and f["p50_at"].endswith("Z")
    assert f["risk"] == 0.2 and f["horizon_h"] == 240
    assert 0 <= f["probability_within_horizon"] <= 1
    assert f["latest_maintenance_at"] <= f["p50_at"]
    assert body["model"]["name"] in ("ExponentialDegradation", "WienerDegradation")
    assert body["model"]["n_points"] >= 5
    assert {"log_evidence", "model_probability"} <= set(body["model"]["fit_quality"])
    assert body["diagnosis"]["fault"] == "outer_race"
    assert body["anomaly"]["over_limit"] is True
    wider = _get(s, "/v1/assets/MAL-P2/time-to-failure", s.keys.reader, horizon_h=2000)
    assert wider["forecast"]["probability_within_horizon"] >= f["probability_within_horizon"]


def test_without_a_baseline_the_answer_says_why(degrading: Service) -> None:
    s = degrading
    body = _get(s, "/v1/assets/MAL-P1/time-to-failure", s.keys.reader)
    assert body["status"] == "no_baseline"
    assert body["forecast"] is None and body["model"] is None
    assert "not enough data yet: 12 healthy windows of the 48" in body["message"]


def test_fleet_risk_sorts_most_at_risk_first(degrading: Service) -> None:
    s = degrading
    body = _get(s, "/v1/fleet/risk", s.keys.reader)
    assert body["count"] == 2 and body["horizon_h"] == 720 and body["advisory"] == ADVISORY
    first, second = body["items"]
    assert first["asset_id"] == "MAL-P2" and second["asset_id"] == "MAL-P1"
    assert first["likely_fault"] == "outer_race" and first["zone"] in ("A", "B", "C", "D")
    assert first["probability_within_horizon"] > 0.5 and first["p50_at"].endswith("Z")
    assert second["probability_within_horizon"] is None and second["status"] == "no_baseline"
    assert _get(s, "/v1/fleet/risk", s.keys.mallee_reader)["items"] == []
    r = s.client.get(
        "/v1/fleet/risk", params={"site": "saltbush-flats"}, headers=s.auth(s.keys.mallee_reader)
    )
    assert r.status_code == 403


def test_fleet_risk_reads_the_summary_or_else_the_whole_result(degrading: Service) -> None:
    s = degrading
    body = _get(s, "/v1/fleet/risk", s.keys.reader, horizon_h=240)
    # the zone is that of the largest overall velocity in the diagnosis (ISO 10816-3 zones)
    d = _get(s, "/v1/assets/MAL-P2/diagnosis", s.keys.reader)
    v = max(i["value"] for i in d["indicators"] if i["name"].endswith(".velocity_rms"))
    assert body["items"][0]["zone"] == severity_zone(v, ZoneRule())
    with s.store.write() as session:  # rows as assessed before the summary column existed
        rows = session.scalars(select(AssetAssessment)).all()
        assert all(r.summary is not None for r in rows)
        for r in rows:
            r.summary = null()  # SQL NULL, as the migration leaves them (None is JSON null)
            if r.result is not None:
                r.result = {**r.result, "velocity_rms_mm_s": None}
    assert _get(s, "/v1/fleet/risk", s.keys.reader, horizon_h=240) == body
    assess_asset(s.store, "MAL-P2", classifier=load_classifier())  # writes the summary again
    with s.store.read() as session:
        assert session.get(AssetAssessment, "MAL-P2").summary is not None  # type: ignore[union-attr]
    again = _get(s, "/v1/fleet/risk", s.keys.reader, horizon_h=240)["items"]
    assert [{**i, "as_of": None} for i in again] == [{**i, "as_of": None} for i in body["items"]]


def test_health_history_and_diagnosis(degrading: Service) -> None:
    s = degrading
    body = _get(s, "/v1/assets/MAL-P2/health", s.keys.reader, limit=5000)
    assert body["failure_mode"] == "outer_race" and body["failure_threshold"] == 1.0
    assert len(body["points"]) == 24 * 8
    # The only windows without a verdict are those at speeds the baseline was not learned at.
    outside = [x for x in body["points"] if x["excluded"]]
    assert body["excluded_count"] == len(outside)
    assert all(x["excluded_reason"].startswith(OUTSIDE_SPEED_RANGE) for x in outside)
    p = body["points"][-1]
    assert set(p) >= {"t", "health_index", "anomaly_score", "control_limit", "regime",
                      "excluded", "excluded_reason"}  # fmt: skip
    assert body["points"][0]["health_index"] < p["health_index"]
    assert body["forecast"]["p50_h"] > 0
    page = _get(s, "/v1/assets/MAL-P2/health", s.keys.reader, limit=100)
    assert len(page["points"]) == 100 and page["next_cursor"]
    rest = _get(
        s, "/v1/assets/MAL-P2/health", s.keys.reader, limit=5000, cursor=page["next_cursor"]
    )
    assert [x["t"] for x in page["points"] + rest["points"]] == [x["t"] for x in body["points"]]

    d = _get(s, "/v1/assets/MAL-P2/diagnosis", s.keys.reader)
    assert d["fault"] == "outer_race" and 0.5 <= d["confidence"] <= 1
    assert abs(sum(d["probabilities"].values()) - 1) < 1e-9
    assert any("outer race" in e for e in d["evidence"])
    bpfo = next(i for i in d["indicators"] if i["name"] == "de_accel.env_bpfo")
    assert bpfo["unit"] == "dB" and bpfo["db_over_baseline"] > 6
    assert "qualified personnel" in d["advisory"]


def test_maintenance_events_need_operate_and_reset_the_segment(degrading: Service) -> None:
    s = degrading
    body = {
        "at": (START + timedelta(days=24, hours=1)).isoformat().replace("+00:00", "Z"),
        "kind": "repair",
        "component": "drive-end bearing",
        "failure_mode": "outer_race",
        "notes": "outer race spalled",
        "performed_by": "Saltbush crew 2",
    }
    path = "/v1/assets/MAL-P2/maintenance-events"
    assert s.client.post(path, json=body).status_code == 401
    assert s.client.post(path, json=body, headers=s.auth(s.keys.reader)).status_code == 403
    r = s.client.post(path, json=body, headers=s.auth(s.keys.gibber_admin))
    assert r.status_code == 404  # admin of another site: the asset's existence does not leak
    r = s.client.post(path, json=body, headers=s.auth(s.keys.admin))
    assert r.status_code == 201, r.text
    out = r.json()
    assert set(out) == {"event_id", "asset_id", "at", "kind", "component", "failure_mode",
                        "notes", "performed_by", "recorded_at"}  # fmt: skip
    assert out["at"] == "2026-03-25T01:00:00Z" and out["kind"] == "repair"
    page = _get(s, path, s.keys.reader)
    assert page["count"] == 1 and page["items"][0]["event_id"] == out["event_id"]
    assert page["next_cursor"] is None

    assess_asset(s.store, "MAL-P2", classifier=load_classifier())
    ttf = _get(s, "/v1/assets/MAL-P2/time-to-failure", s.keys.reader)
    assert ttf["status"] in ("no_baseline", "not_enough_data") and ttf["forecast"] is None
    health = _get(s, "/v1/assets/MAL-P2/health", s.keys.reader, limit=5000)
    assert [e["event_id"] for e in health["maintenance_events"]] == [out["event_id"]]


@pytest.mark.parametrize(
    "change",
    [
        {"kind": "overhaul"},
        {"at": "2026-03-25T01:00:00"},  # no time zone
        {"failure_mode": "gremlins"},
        {"at": (datetime.now(UTC) + timedelta(days=3)).isoformat()},
        {"unknown": 1},
    ],
)
def test_bad_maintenance_events_are_refused(degrading: Service, change: dict) -> None:
    s = degrading
    body = {"at": "2026-03-25T01:00:00Z", "kind": "inspection", **change}
    r = s.client.post(
        "/v1/assets/MAL-P2/maintenance-events", json=body, headers=s.auth(s.keys.admin)
    )
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")


@pytest.mark.parametrize(
    "path",
    [
        "/v1/assets/{a}/time-to-failure",
        "/v1/assets/{a}/health",
        "/v1/assets/{a}/diagnosis",
        "/v1/assets/{a}/maintenance-events",
    ],
)
def test_auth_scoping_and_unknown_assets(degrading: Service, path: str) -> None:
    s = degrading
    assert s.client.get(path.format(a="MAL-P2")).status_code == 401
    assert s.client.get(path.format(a="MAL-P2"), headers=s.auth(s.keys.revoked)).status_code == 401
    r = s.client.get(path.format(a="MAL-P2"), headers=s.auth(s.keys.mallee_reader))
    assert r.status_code == 404  # another site's asset answers as a missing one (no leak)
    r = s.client.get(path.format(a="NOPE-P9"), headers=s.auth(s.keys.reader))
    assert r.status_code == 404


def test_bad_query_values_are_refused(degrading: Service) -> None:
    s = degrading
    for params in ({"risk": 0}, {"risk": 1.5}, {"horizon_h": -1}):
        r = s.client.get(
            "/v1/assets/MAL-P2/time-to-failure", params=params, headers=s.auth(s.keys.reader)
        )
        assert r.status_code == 422
    r = s.client.get(
        "/v1/assets/MAL-P2/health", params={"cursor": "garbage"}, headers=s.auth(s.keys.reader)
    )
    assert r.status_code == 422


def test_the_service_with_ingest_runs_the_assessment_worker(
    store_url: str, broker: MosquittoBroker
) -> None:
    """With ingest on, stored windows are assessed in the background; the lead wires readings."""
    settings = load_settings(
        database_url=store_url,
        mqtt_url=broker.url,
        mqtt_client_id=f"assess-{uuid.uuid4().hex[:8]}",
        assess_interval_s=0.05,
    )
    app = create_app(settings, run_ingest=True)
    with TestClient(app) as client:
        runtime = app.state.runtime
        assert runtime.assessor is not None
        layout, msgs = simulate("MAL-P1", FaultScenario(), seed=11, hours=36, every_h=3.0)
        register(runtime.store, "MAL-P1")
        store_messages(runtime.store, layout, msgs)
        for _ in range(400):
            with runtime.store.read() as session:
                row = session.get(AssetAssessment, "MAL-P1")
            if row is not None and row.cursor_id > 0:
                break
            time.sleep(0.05)
        assert row is not None and row.status == "no_baseline" and row.cursor_id > 0
        assert client.get("/livez").status_code == 200
    assert runtime.assessor is None or runtime.assessor._thread is None  # stopped with the app
