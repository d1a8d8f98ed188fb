"""The HTTP API on both dialects: keys and scopes, assets, history (checked against numpy),
gateways, quarantine administration, HTTP ingest with Idempotency-Key, problem details."""

from __future__ import annotations

import json
import re
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
import pytest

from prognosis_service.ingest.pipeline import Inbound
from shared_schema import GatewayState, encode_json, to_readable
from tests.prognosis_service import factories as f
from tests.prognosis_service.conftest import Service

PROBLEM = "application/problem+json"
UNAUTHENTICATED = {"/livez", "/readyz", "/metrics", "/docs", "/openapi.json", "/redoc"}


def assert_problem(resp: Any, status: int) -> dict[str, Any]:
    assert resp.status_code == status, resp.text
    assert resp.headers["content-type"].startswith(PROBLEM)
    body = resp.json()
    assert body["status"] == status
    assert body["type"].startswith("urn:wellspan:problem:")
    assert body["title"] and body["detail"]
    return body


def register(svc: Service, asset_id: str = f.ASSET, site: str = f.SITE) -> Any:
    return svc.client.post(
        "/v1/assets",
        json={"asset_id": asset_id, "site": site, "asset_class": "end-suction-centrifugal"},
        headers=svc.auth(svc.keys.admin),
    )


def ingest(
    svc: Service,
    messages: list[Any],
    *,
    layouts: bool = True,
    key: str | None = None,
    headers: dict[str, str] | None = None,
) -> Any:
    body: dict[str, Any] = {"messages": messages}
    if layouts:
        body["layouts"] = [f.LAYOUT.model_dump(mode="json")]
    return svc.client.post(
        "/v1/indicators",
        content=json.dumps(body),
        headers={
            **svc.auth(key or svc.keys.ingest),
            "content-type": "application/json",
            **(headers or {}),
        },
    )


def _routes(svc: Service) -> list[tuple[str, str]]:
    """Every operation the OpenAPI document lists, with sample path parameters."""
    out = []
    for path, ops in svc.client.get("/openapi.json").json()["paths"].items():
        if path in UNAUTHENTICATED:
            continue
        path = re.sub(r"\{entry_id\}", "1", path)
        path = re.sub(r"\{name\}", "de_accel.kurtosis", path)
        path = re.sub(r"\{[a-z_]+\}", "MAL-P1", path)
        out += [(method.upper(), path) for method in ops]
    return out


def test_every_endpoint_refuses_missing_wrong_or_revoked_keys(service: Service) -> None:
    routes = _routes(service)
    assert len(routes) >= 12
    bad = {
        "missing": {},
        "wrong": {"Authorization": "Bearer wsk_000000000000_" + "A" * 43},
        "garbage": {"Authorization": "Bearer nonsense"},
        "basic": {"Authorization": "Basic dXNlcjpwYXNz"},
        "revoked": service.auth(service.keys.revoked),
    }
    for method, path in routes:
        for label, headers in bad.items():
            resp = service.client.request(method, path, headers=headers)
            body = assert_problem(resp, 401)
            assert resp.headers["www-authenticate"].startswith("Bearer"), (label, path)
            assert "key" in body["detail"]


def test_scopes_are_enforced(service: Service) -> None:
    reader, ingest_key = service.auth(service.keys.reader), service.auth(service.keys.ingest)
    assert_problem(service.client.get("/v1/quarantine", headers=reader), 403)
    assert_problem(service.client.post("/v1/assets", json={}, headers=reader), 403)
    assert_problem(service.client.get("/v1/assets", headers=ingest_key), 403)
    assert_problem(service.client.post("/v1/indicators", content=b"[]", headers=reader), 403)
    assert service.client.get("/v1/assets", headers=reader).status_code == 200
    # admin implies read
    assert (
        service.client.get("/v1/assets", headers=service.auth(service.keys.admin)).status_code
        == 200
    )


def test_site_limited_keys_see_only_their_sites(service: Service) -> None:
    assert register(service).status_code == 201
    assert register(service, "GIB-P1", "gibber").status_code == 201
    mallee = service.auth(service.keys.mallee_reader)
    resp = service.client.get("/v1/assets", headers=mallee)
    assert resp.status_code == 200
    assert [a["asset_id"] for a in resp.json()["items"]] == ["MAL-P1"]
    assert service.client.get("/v1/assets/MAL-P1", headers=mallee).status_code == 200
    # another site's asset answers as a missing one (404), so its existence does not leak
    assert_problem(service.client.get("/v1/assets/GIB-P1", headers=mallee), 404)
    assert_problem(
        service.client.get("/v1/assets/GIB-P1/indicators/de_accel.kurtosis", headers=mallee), 404
    )
    assert_problem(service.client.get("/v1/assets?site=gibber", headers=mallee), 403)
    gibber_admin = service.auth(service.keys.gibber_admin)
    assert_problem(
        service.client.post(
            "/v1/assets", json={"asset_id": "MAL-P2", "site": f.SITE}, headers=gibber_admin
        ),
        403,
    )
    resp = service.client.post(
        "/v1/indicators",
        json={
            "layouts": [f.LAYOUT.model_dump(mode="json")],
            "messages": [to_readable(f.message(1), f.LAYOUT)],
        },
        headers=gibber_admin,
    )
    assert_problem(resp, 403)


def test_assets_register_list_detail_and_import(service: Service) -> None:
    resp = register(service)
    assert resp.status_code == 201 and resp.json()["created"] is True
    again = register(service)
    assert again.status_code == 200 and again.json()["created"] is False
    assert_problem(register(service, f.ASSET, "gibber"), 409)
    toml = (
        'gateway_id = "gibber-gw1"\nsite = "gibber"\n[broker]\nhost = "x"\n'
        '[[assets]]\nasset_id = "GIB-P1"\nasset_class = "end-suction-centrifugal"\n'
        '[[assets]]\nasset_id = "GIB-P2"\n'
    )
    admin = service.auth(service.keys.admin)
    resp = service.client.post(
        "/v1/assets/import", content=toml, headers={**admin, "content-type": "application/toml"}
    )
    assert resp.status_code == 200, resp.text
    assert [a["asset_id"] for a in resp.json()["items"]] == ["GIB-P1", "GIB-P2"]
    assert resp.json()["items"][0]["gateway_id"] == "gibber-gw1"
    bad = service.client.post(
        "/v1/assets/import",
        content="site = 'gibber'\n[[assets]]\nasset_id = 'bad id'\n",
        headers={**admin, "content-type": "application/toml"},
    )
    assert "assets[0].asset_id" in assert_problem(bad, 422)["detail"]
    # pagination: three assets, two per page
    reader = service.auth(service.keys.reader)
    page1 = service.client.get("/v1/assets?limit=2", headers=reader).json()
    assert page1["count"] == 2 and page1["next_cursor"]
    page2 = service.client.get(
        f"/v1/assets?limit=2&cursor={page1['next_cursor']}", headers=reader
    ).json()
    assert [a["asset_id"] for a in page1["items"] + page2["items"]] == [
        "GIB-P1",
        "GIB-P2",
        "MAL-P1",
    ]
    assert page2["next_cursor"] is None
    assert_problem(service.client.get("/v1/assets?cursor=%%%", headers=reader), 422)
    assert_problem(service.client.get("/v1/assets/NOPE-P1", headers=reader), 404)
    detail = service.client.get("/v1/assets/MAL-P1", headers=reader).json()
    assert detail["site"] == "mallee" and detail["registered_at"].endswith("Z")


def test_http_ingest_and_idempotency_key(service: Service) -> None:
    register(service)
    msgs = [to_readable(f.message(i), f.LAYOUT) for i in range(10)]
    bad = dict(
        msgs[0], window_s=-1.0, message_id="6f1c1a2e-0000-4000-8000-000000000000", sequence=999
    )
    resp = ingest(service, [*msgs, bad], headers={"Idempotency-Key": "batch-1"})
    assert resp.status_code == 200, resp.text
    body = resp.json()
    assert (body["received"], body["stored"], body["duplicates"]) == (11, 10, 0)
    assert body["layouts_stored"] == 1
    assert [(q["index"], q["reason"]) for q in body["quarantined"]] == [(10, "invalid")]
    # the same request retried: the first answer comes back
    retry = ingest(service, [*msgs, bad], headers={"Idempotency-Key": "batch-1"})
    assert retry.status_code == 200 and retry.json() == body
    assert retry.headers["idempotent-replayed"] == "true"
    # the same messages under a new key: stored nothing twice
    again = ingest(service, msgs, headers={"Idempotency-Key": "batch-2"})
    assert (again.json()["stored"], again.json()["duplicates"]) == (0, 10)
    # a key reused with another body is refused
    assert_problem(ingest(service, msgs[:3], headers={"Idempotency-Key": "batch-1"}), 422)
    # the envelope being wrong is the caller's problem, not quarantine's
    assert_problem(
        service.client.post(
            "/v1/indicators", content=b"{not json", headers=service.auth(service.keys.ingest)
        ),
        422,
    )
    assert_problem(
        service.client.post(
            "/v1/indicators",
            json={"messages": [], "extra": 1},
            headers=service.auth(service.keys.ingest),
        ),
        422,
    )


def _fill(service: Service, values: np.ndarray, start: datetime) -> None:
    """One message every 10 minutes with ``values`` as de_accel.velocity_rms."""
    msgs = []
    for i, v in enumerate(values):
        m = f.message(
            i, window_start=start + timedelta(minutes=10 * i), values=(float(v), 1.0, 0.5, 300.0)
        )
        msgs.append(to_readable(m, f.LAYOUT))
    assert ingest(service, msgs).json()["stored"] == len(values)


def test_history_raw_and_downsampled_match_numpy(service: Service) -> None:
    register(service)
    rng = np.random.default_rng(0)
    # f32-representable values so the stored float32 equals the reference exactly
    values = rng.normal(4.0, 0.5, size=60).astype(np.float32)
    start = datetime(2026, 5, 1, tzinfo=UTC)
    _fill(service, values, start)
    reader = service.auth(service.keys.reader)
    url = "/v1/assets/MAL-P1/indicators/de_accel.velocity_rms"
    q = {"start": "2026-05-01T00:00:00Z", "end": "2026-05-02T00:00:00Z"}
    raw = service.client.get(url, params=q, headers=reader)
    assert raw.status_code == 200, raw.text
    body = raw.json()
    assert body["unit"] == "mm/s" and body["count"] == 60
    assert [p["value"] for p in body["items"]] == [float(v) for v in values]
    assert body["items"][0]["window_start"] == "2026-05-01T00:00:00Z"
    # pages of 25 walk the same points
    seen: list[float] = []
    cursor = None
    while True:
        params = {**q, "limit": "25", **({"cursor": cursor} if cursor else {})}
        page = service.client.get(url, params=params, headers=reader).json()
        seen += [p["value"] for p in page["items"]]
        cursor = page["next_cursor"]
        if cursor is None:
            break
    assert seen == [float(v) for v in values]
    # hourly buckets: six values each; reference: numpy mean/min/max over the same groups
    hourly = service.client.get(url, params={**q, "every": "1h"}, headers=reader).json()
    groups = values.astype(float).reshape(10, 6)
    assert hourly["count"] == 10
    for bucket, ref in zip(hourly["items"], groups, strict=True):
        assert bucket["count"] == 6
        assert bucket["mean"] == pytest.approx(float(np.mean(ref)), rel=1e-12)
        assert bucket["min"] == float(ref.min()) and bucket["max"] == float(ref.max())
    assert hourly["items"][1]["start"] == "2026-05-01T01:00:00Z"
    page = service.client.get(url, params={**q, "every": "1h", "limit": "4"}, headers=reader).json()
    rest = service.client.get(
        url, params={**q, "every": "1h", "cursor": page["next_cursor"]}, headers=reader
    ).json()
    assert [b["start"] for b in page["items"] + rest["items"]] == [
        b["start"] for b in hourly["items"]
    ]
    assert_problem(service.client.get(url, params={**q, "every": "1 hour"}, headers=reader), 422)
    assert_problem(service.client.get(url, params={"start": "yesterday"}, headers=reader), 422)
    assert_problem(
        service.client.get("/v1/assets/MAL-P1/indicators/de_accel.nonexistent", headers=reader),
        404,
    )
    names = service.client.get("/v1/assets/MAL-P1/indicators", headers=reader).json()
    assert {"name": "de_accel.velocity_rms", "unit": "mm/s"} in names["items"]


def test_gateways_show_link_state(service: Service) -> None:
    register(service)
    runtime = service.client.app.state.runtime  # type: ignore[attr-defined]
    now = datetime.now(UTC)
    topic, payload = f.status(GatewayState.ONLINE, now)
    lost_topic, lost = f.status(GatewayState.LOST, None, site="gibber", gateway_id="gibber-gw1")
    with runtime.store.write() as s:
        runtime.pipeline.handle(s, [Inbound(topic, payload, now), Inbound(lost_topic, lost, now)])
    reader = service.auth(service.keys.reader)
    resp = service.client.get("/v1/gateways", headers=reader)
    assert resp.status_code == 200
    states = {g["gateway_id"]: g["link_state"] for g in resp.json()["items"]}
    assert states == {"gibber-gw1": "lost", "mallee-gw1": "online"}
    only_lost = service.client.get("/v1/gateways?state=lost", headers=reader).json()
    assert [g["gateway_id"] for g in only_lost["items"]] == ["gibber-gw1"]
    mallee = service.auth(service.keys.mallee_reader)
    assert [
        g["gateway_id"] for g in service.client.get("/v1/gateways", headers=mallee).json()["items"]
    ] == ["mallee-gw1"]
    assert_problem(service.client.get("/v1/gateways/gibber-gw1", headers=mallee), 404)
    assert_problem(service.client.get("/v1/gateways?state=asleep", headers=reader), 422)


def test_quarantine_list_inspect_readmit_purge(service: Service) -> None:
    msgs = [to_readable(f.message(i), f.LAYOUT) for i in range(3)]
    body = ingest(service, msgs).json()  # the asset is not registered yet
    assert [q["reason"] for q in body["quarantined"]] == ["unknown_asset"] * 3
    admin = service.auth(service.keys.admin)
    listing = service.client.get("/v1/quarantine?reason=unknown_asset", headers=admin).json()
    assert listing["count"] == 3
    entry_id = listing["items"][0]["id"]
    detail = service.client.get(f"/v1/quarantine/{entry_id}", headers=admin).json()
    assert json.loads(detail["payload_text"]) == msgs[0]
    assert detail["asset_id"] == f.ASSET and detail["source"] == "http"
    # re-admitting before the cause is fixed keeps it held
    held = service.client.post(f"/v1/quarantine/{entry_id}/readmit", headers=admin).json()
    assert held == {
        "readmitted": 0,
        "still_held": 1,
        "results": [{"id": entry_id, "result": "unknown_asset"}],
    }
    # registering the asset re-admits all three
    assert register(service).json()["readmitted"] == 3
    assert service.client.get("/v1/quarantine", headers=admin).json()["count"] == 0
    resolved = service.client.get("/v1/quarantine?include_resolved=true", headers=admin).json()
    assert {e["resolution"] for e in resolved["items"]} == {"readmitted"}
    reader = service.auth(service.keys.reader)
    hist = service.client.get(
        "/v1/assets/MAL-P1/indicators/de_accel.kurtosis",
        params={"start": "2026-06-01T00:00:00Z", "end": "2026-06-02T00:00:00Z"},
        headers=reader,
    ).json()
    assert hist["count"] == 3
    # purge the resolved entries
    purged = service.client.delete("/v1/quarantine", headers=admin).json()
    assert purged == {"purged": 3}
    assert_problem(service.client.get(f"/v1/quarantine/{entry_id}", headers=admin), 404)
    # a manual re-admission by reason
    runtime = service.client.app.state.runtime  # type: ignore[attr-defined]
    other = f.message(7, asset_id="MAL-P2")
    from shared_schema import encode_indicators

    with runtime.store.write() as s:
        runtime.pipeline.handle(
            s, [Inbound(f.topic("MAL-P2"), encode_indicators(other, f.LAYOUT), datetime.now(UTC))]
        )
    register(service, "MAL-P2")  # registration re-admits it already
    assert service.client.get("/v1/quarantine", headers=admin).json()["count"] == 0
    bulk = service.client.post("/v1/quarantine/readmit", json={"reason": "nonsense"}, headers=admin)
    assert_problem(bulk, 422)
    single = service.client.delete("/v1/quarantine/999999", headers=admin)
    assert_problem(single, 404)


def test_validation_errors_are_problem_details(service: Service) -> None:
    admin = service.auth(service.keys.admin)
    body = assert_problem(service.client.post("/v1/assets", json={"site": "x"}, headers=admin), 422)
    assert "asset_id" in body["detail"]
    assert_problem(service.client.get("/v1/assets?limit=0", headers=admin), 422)
    assert_problem(service.client.get("/v1/nothing-here", headers=admin), 404)
    assert_problem(service.client.put("/v1/assets", headers=admin), 405)


def test_health_metrics_and_docs(service: Service) -> None:
    register(service)
    ingest(service, [to_readable(f.message(i), f.LAYOUT) for i in range(4)])
    assert service.client.get("/livez").json() == {"status": "ok"}
    ready = service.client.get("/readyz")  # the broker URL of this fixture points nowhere
    assert assert_problem(ready, 503)["checks"] == {"store": "ok", "broker": "unreachable"}
    text = service.client.get("/metrics").text
    assert "# TYPE wellspan_ingest_messages_total counter" in text
    assert re.search(
        r'wellspan_ingest_messages_total\{kind="indicators",result="stored",source="http"\} \d',
        text,
    )
    assert "wellspan_ingest_batch_seconds_bucket" in text
    spec = service.client.get("/openapi.json").json()
    description = spec["info"]["description"]
    assert "advisory" in description and "protective trips" in description
    assert "qualified personnel" in description
    assert service.client.get("/docs").status_code == 200


def test_readable_and_binary_forms_store_the_same_message(service: Service) -> None:
    register(service)
    runtime = service.client.app.state.runtime  # type: ignore[attr-defined]
    msg = f.message(5)
    with runtime.store.write() as s:
        runtime.pipeline.handle(
            s, [Inbound(f.announcement_topic(), f.announcement(), msg.window_start)]
        )
        out = runtime.pipeline.handle(s, [Inbound(f.topic(), f.frame(msg), datetime.now(UTC))])
    assert out.stored == 1
    again = ingest(service, [to_readable(msg, f.LAYOUT)]).json()
    assert (again["stored"], again["duplicates"]) == (0, 1)
    assert encode_json(msg)  # the contract's JSON form of the same message exists too
