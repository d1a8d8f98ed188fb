"""The guards of docs/SECURITY.md (OWASP API Security Top 10, 2023 edition), one test each.

Routes are enumerated from the app itself, so routes added later are covered without editing
this file: every ``/v1`` route must require a scope, and the scope matrix is checked for all.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import fastapi.routing
import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient
from sqlalchemy import func, select

from prognosis_service.api.ratelimit import TokenBuckets
from prognosis_service.app import create_app
from prognosis_service.auth import create_key, revoke_key
from prognosis_service.ingest.pipeline import Inbound
from prognosis_service.settings import SettingsError, load_settings
from prognosis_service.store.models import ApiKey, MessageRow, QuarantineRow
from shared_schema import GatewayState, to_readable
from tests.prognosis_service import factories as f
from tests.prognosis_service.conftest import Service
from tests.prognosis_service.test_api import assert_problem, register

# Routes that answer without a key: probes, metrics, the API's own documentation, and the
# dashboard's page and static files (they hold no data; the page's script asks for a key).
OPEN_ROUTES = {"/livez", "/readyz", "/metrics", "/docs", "/docs/oauth2-redirect", "/openapi.json",
               "/redoc", "/dashboard", "/dashboard/static/1"}  # fmt: skip
# What each kind of key may do (auth.py: admin implies every scope, operate implies read).
GRANTS = {
    "read": {"read"},
    "ingest": {"ingest"},
    "operate": {"operate", "read"},
    "admin": {"read", "ingest", "operate", "admin"},
}


def _scopes(dependant: Any) -> set[str]:
    found: set[str] = set()
    for dep in dependant.dependencies:
        scope = getattr(dep.call, "required_scope", None)
        if scope is not None:
            found.add(scope)
        found |= _scopes(dep)
    return found


def _sample_path(path: str) -> str:
    return re.sub(r"\{[^}]+\}", "1", path)


def _contexts(app: FastAPI) -> list[Any]:
    """Every route the app serves, routers flattened (FastAPI's own walk where it has one)."""
    walk = getattr(fastapi.routing, "iter_route_contexts", None)
    return list(walk(app.routes)) if walk is not None else list(app.routes)


def _answers(ctx: Any, method: str, path: str) -> bool:
    return bool(ctx.path_regex.match(path)) and method in (ctx.methods or ())


def api_routes(app: FastAPI) -> Iterator[tuple[str, str, set[str]]]:
    """(method, sample path, required scopes) of every API route; a sample path that another,
    earlier route would answer is skipped (that route is listed itself)."""
    contexts = _contexts(app)
    for ctx in contexts:
        if getattr(ctx, "dependant", None) is None:
            continue  # the documentation pages
        path = _sample_path(ctx.path)
        for method in sorted(ctx.methods):
            first = next(c for c in contexts if _answers(c, method, path))
            if first is ctx or first.path == ctx.path:
                yield method, path, _scopes(ctx.dependant)


def _operator_token(service: Service) -> str:
    with service.store.write() as s:
        return create_key(s, name="operator", scopes=["operate"])[1]


# -- API5 broken function-level authorisation ---------------------------------------------------


def test_every_v1_route_requires_a_scope_and_only_probes_and_docs_are_open(
    service: Service,
) -> None:
    app: FastAPI = service.client.app  # type: ignore[assignment]
    routes = list(api_routes(app))
    assert len(routes) >= 14
    for method, path, scopes in routes:
        if path.startswith("/v1/"):
            assert len(scopes) == 1, (method, path, scopes)
        else:
            assert len(scopes) == 1 or path in OPEN_ROUTES, (method, path, scopes)
    admin = {(m, p) for m, p, s in routes if s == {"admin"}}
    assert {("POST", "/v1/assets"), ("GET", "/v1/quarantine"), ("DELETE", "/v1/quarantine"),
            ("POST", "/v1/quarantine/readmit")} <= admin  # fmt: skip


def test_each_route_refuses_keys_without_its_scope(service: Service) -> None:
    """The full matrix: every route × read, ingest, operate and admin keys."""
    tokens = {
        "read": service.keys.reader,
        "ingest": service.keys.ingest,
        "operate": _operator_token(service),
        "admin": service.keys.admin,
    }
    app: FastAPI = service.client.app  # type: ignore[assignment]
    checked = 0
    for method, path, scopes in api_routes(app):
        if not scopes:
            continue
        (needed,) = scopes
        for kind, token in tokens.items():
            resp = service.client.request(method, path, headers=service.auth(token))
            if needed in GRANTS[kind]:
                assert resp.status_code not in (401, 403), (kind, method, path, resp.text)
            else:
                body = assert_problem(resp, 403)
                assert body["type"] == "urn:wellspan:problem:insufficient-scope", (method, path)
                assert needed in body["detail"]
            checked += 1
    assert checked >= 4 * 12


# -- API2 broken authentication ------------------------------------------------------------------


def test_no_malformed_wrong_or_revoked_key_gets_in_and_all_answer_alike(service: Service) -> None:
    admin_id = service.keys.admin.split("_")[1]
    forged = f"wsk_{admin_id}_" + "B" * 43  # a real key id with a wrong secret
    bad: dict[str, dict[str, str]] = {
        "no key": {},
        "malformed": {"Authorization": "Bearer wsk_nothex_short"},
        "wrong secret": {"Authorization": f"Bearer {forged}"},
        "unknown key id": {"Authorization": "Bearer wsk_000000000000_" + "A" * 43},
        "other scheme": {"Authorization": f"Basic {service.keys.admin}"},
        "revoked": service.auth(service.keys.revoked),
    }
    app: FastAPI = service.client.app  # type: ignore[assignment]
    for method, path, scopes in api_routes(app):
        if not scopes:
            continue
        details = set()
        for label, headers in bad.items():
            resp = service.client.request(method, path, headers=headers)
            body = assert_problem(resp, 401)
            assert resp.headers["www-authenticate"] == 'Bearer realm="wellspan"', (label, path)
            if label not in ("no key", "other scheme"):  # those send no bearer key at all
                details.add(body["detail"])
        # one answer for every bad key: no oracle for which key ids exist or were revoked
        assert len(details) == 1, (path, details)
        # a key in the query string is not a credential
        resp = service.client.request(method, f"{path}?api_key={service.keys.admin}")
        assert_problem(resp, 401)


def test_revocation_takes_effect_on_the_next_request(service: Service) -> None:
    with service.store.write() as s:
        principal, token = create_key(s, name="short-lived", scopes=["read"])
    headers = service.auth(token)
    assert service.client.get("/v1/assets", headers=headers).status_code == 200
    with service.store.write() as s:
        assert revoke_key(s, principal.key_id)
    assert_problem(service.client.get("/v1/assets", headers=headers), 401)


def test_keys_are_stored_only_as_a_digest(service: Service) -> None:
    with service.store.read() as s:
        rows = list(s.query(ApiKey))
    tokens = [service.keys.admin, service.keys.reader, service.keys.ingest]
    stored = json.dumps([[str(v) for v in vars(r).values()] for r in rows])
    for token in tokens:
        assert token.split("_", 2)[2] not in stored


# -- API1 broken object-level authorisation --------------------------------------------------------


def _two_sites(service: Service) -> dict[str, int]:
    """MAL-P1 at mallee and GIB-P1 at gibber, with history, gateways and a quarantined message
    each; returns the quarantine entry id per site."""
    assert register(service).status_code == 201
    assert register(service, "GIB-P1", "gibber").status_code == 201
    mal = f.message(1)
    gib = f.message(1, asset_id="GIB-P1", site="gibber", gateway_id="gibber-gw1")
    lost_mal = f.message(2, asset_id="MAL-P9")
    lost_gib = f.message(2, asset_id="GIB-P9", site="gibber", gateway_id="gibber-gw1")
    body = {
        "layouts": [f.LAYOUT.model_dump(mode="json")],
        "messages": [to_readable(m, f.LAYOUT) for m in (mal, gib, lost_mal, lost_gib)],
    }
    resp = service.client.post(
        "/v1/indicators", json=body, headers=service.auth(service.keys.admin)
    )
    assert resp.status_code == 200 and resp.json()["stored"] == 2, resp.text
    runtime = service.client.app.state.runtime  # type: ignore[attr-defined]
    now = datetime.now(UTC)
    with runtime.store.write() as s:
        runtime.pipeline.handle(
            s,
            [
                Inbound(*f.status(GatewayState.ONLINE, now), now),
                Inbound(
                    *f.status(GatewayState.ONLINE, now, site="gibber", gateway_id="gibber-gw1"), now
                ),
            ],
        )
    entries = service.client.get("/v1/quarantine", headers=service.auth(service.keys.admin)).json()
    return {e["site"]: e["id"] for e in entries["items"]}


def _same_answer(a: Any, b: Any, status: int) -> None:
    """Two responses that must not be told apart (but for the path echoed in ``instance``)."""
    body_a, body_b = assert_problem(a, status), assert_problem(b, status)
    body_a.pop("instance", None)
    body_b.pop("instance", None)
    assert body_a == body_b


def test_site_limited_keys_cannot_reach_another_sites_objects(service: Service) -> None:
    entry = _two_sites(service)
    get = service.client.get
    mallee = service.auth(service.keys.mallee_reader)
    # their own site works
    assert get("/v1/assets/MAL-P1", headers=mallee).status_code == 200
    assert get("/v1/gateways/mallee-gw1", headers=mallee).status_code == 200
    hist = get(
        "/v1/assets/MAL-P1/indicators/de_accel.kurtosis",
        params={"start": "2026-06-01T00:00:00Z", "end": "2026-06-02T00:00:00Z"},
        headers=mallee,
    )
    assert hist.status_code == 200 and hist.json()["count"] == 1
    # another site's objects answer exactly as objects that do not exist
    for there, nowhere in [
        ("/v1/assets/GIB-P1", "/v1/assets/NOPE-P1"),
        ("/v1/assets/GIB-P1/indicators", "/v1/assets/NOPE-P1/indicators"),
        ("/v1/assets/GIB-P1/indicators/de_accel.kurtosis",
         "/v1/assets/NOPE-P1/indicators/de_accel.kurtosis"),
        ("/v1/gateways/gibber-gw1", "/v1/gateways/nope-gw1"),
    ]:  # fmt: skip
        _same_answer(get(there, headers=mallee), get(nowhere, headers=mallee), 404)
    # and lists hold only their own site
    assert [a["asset_id"] for a in get("/v1/assets", headers=mallee).json()["items"]] == ["MAL-P1"]
    gws = get("/v1/gateways", headers=mallee).json()["items"]
    assert [g["gateway_id"] for g in gws] == ["mallee-gw1"]
    # asking for a site outside the key's limits: the same answer whether the site exists or not
    for path in ("/v1/assets", "/v1/gateways"):
        there = assert_problem(get(f"{path}?site=gibber", headers=mallee), 403)
        nowhere = assert_problem(get(f"{path}?site=no-such-site", headers=mallee), 403)
        assert there["detail"].replace("gibber", "S") == nowhere["detail"].replace(
            "no-such-site", "S"
        )

    # quarantine, with an admin key limited to gibber
    gibber = service.auth(service.keys.gibber_admin)
    listed = get("/v1/quarantine", headers=gibber).json()["items"]
    assert [e["site"] for e in listed] == ["gibber"]
    mal_id, missing = entry["mallee"], 999_999
    _same_answer(
        get(f"/v1/quarantine/{mal_id}", headers=gibber),
        get(f"/v1/quarantine/{missing}", headers=gibber),
        404,
    )
    for method, path, body in [
        ("POST", "/v1/quarantine/{}/readmit", None),
        ("DELETE", "/v1/quarantine/{}", None),
        ("POST", "/v1/quarantine/readmit", "ids"),
    ]:
        answers = [
            service.client.request(
                method,
                path.format(i),
                json={"ids": [i]} if body else None,
                headers=gibber,
            )
            for i in (mal_id, missing)
        ]
        _same_answer(*answers, 404)
    admin = service.auth(service.keys.admin)
    assert get(f"/v1/quarantine/{mal_id}", headers=admin).status_code == 200  # still there
    # a bulk purge by a site-limited key touches only its own sites
    purged = service.client.delete("/v1/quarantine?resolved_only=false", headers=gibber).json()
    assert purged == {"purged": 1}
    assert get(f"/v1/quarantine/{mal_id}", headers=admin).status_code == 200
    # registering a taken asset id does not name a site the key may not see
    taken = service.client.post(
        "/v1/assets", json={"asset_id": "MAL-P1", "site": "gibber"}, headers=gibber
    )
    assert "mallee" not in assert_problem(taken, 409)["detail"]
    # writing into another site is refused outright
    resp = service.client.post(
        "/v1/indicators", json=[to_readable(f.message(9), f.LAYOUT)], headers=gibber
    )
    assert "mallee" in assert_problem(resp, 403)["detail"]


# -- API4 unrestricted resource consumption --------------------------------------------------------


def test_body_over_the_cap_is_refused_before_parsing(
    service: Service, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr("prognosis_service.api.indicators.MAX_BODY_BYTES", 1000)
    monkeypatch.setattr("prognosis_service.domain.http_ingest.MAX_BODY_BYTES", 1000)
    register(service)
    body = json.dumps([to_readable(f.message(i), f.LAYOUT) for i in range(10)]).encode()
    assert len(body) > 1000
    headers = {**service.auth(service.keys.ingest), "content-type": "application/json"}
    declared = service.client.post("/v1/indicators", content=body, headers=headers)
    assert "exceeds 1000" in assert_problem(declared, 413)["detail"]
    # without a Content-Length (chunked), the body read is checked too
    chunked = service.client.post("/v1/indicators", content=iter([body]), headers=headers)
    assert_problem(chunked, 413)
    with service.store.read() as s:  # nothing of the refused bodies was stored or quarantined
        assert s.scalar(select(func.count()).select_from(MessageRow)) == 0
        assert s.scalar(select(func.count()).select_from(QuarantineRow)) == 0


def test_batch_over_the_cap_is_refused(service: Service, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("prognosis_service.domain.http_ingest.MAX_MESSAGES", 3)
    msgs = [to_readable(f.message(i), f.LAYOUT) for i in range(4)]
    resp = service.client.post(
        "/v1/indicators", json=msgs, headers=service.auth(service.keys.ingest)
    )
    assert "4 messages exceed 3" in assert_problem(resp, 413)["detail"]
    resp = service.client.post(
        "/v1/indicators", json=msgs[:3], headers=service.auth(service.keys.ingest)
    )
    assert resp.status_code == 200


def test_page_sizes_are_capped(service: Service) -> None:
    reader, admin = service.auth(service.keys.reader), service.auth(service.keys.admin)
    for path, headers in [
        ("/v1/assets?limit=1001", reader),
        ("/v1/gateways?limit=1001", reader),
        ("/v1/quarantine?limit=1001", admin),
        ("/v1/assets/MAL-P1/indicators/de_accel.kurtosis?limit=10001", reader),
    ]:
        assert_problem(service.client.get(path, headers=headers), 422)


class _Clock:
    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now


def test_token_bucket_refills_at_its_rate() -> None:
    clock = _Clock()
    buckets = TokenBuckets(0.5, 2, clock=clock)  # one token every 2 s, two at once
    assert buckets.take("k") == 0.0 and buckets.take("k") == 0.0
    assert buckets.take("k") == pytest.approx(2.0)
    assert buckets.take("other") == 0.0  # buckets are per key
    clock.now += 1.0
    assert buckets.take("k") == pytest.approx(1.0)
    clock.now += 1.0
    assert buckets.take("k") == 0.0
    clock.now += 3600.0  # a quiet hour refills to the burst, no further
    assert [buckets.take("k") for _ in range(3)][:2] == [0.0, 0.0]
    assert TokenBuckets.retry_after(0.2) == "1" and TokenBuckets.retry_after(2.5) == "3"
    off = TokenBuckets(0.0, 1, clock=clock)
    assert all(off.take("k") == 0.0 for _ in range(100))


@pytest.fixture
def limited(tmp_path: Path) -> Iterator[tuple[TestClient, dict[str, str], _Clock]]:
    """The app on SQLite with a limit of 1 request/s and a burst of 3 per key, on a fake clock."""
    settings = load_settings(
        database_url=f"sqlite:///{tmp_path / 'w.db'}",
        mqtt_url="mqtt://127.0.0.1:9",
        rate_limit_per_s=1.0,
        rate_limit_burst=3,
    )
    app = create_app(settings)
    clock = _Clock()
    with TestClient(app, raise_server_exceptions=False) as client:
        runtime = app.state.runtime
        assert (runtime.limiter.rate_per_s, runtime.limiter.burst) == (1.0, 3)  # from settings
        runtime.limiter.clock = clock
        with runtime.store.write() as s:
            tokens = {n: create_key(s, name=n, scopes=["read"])[1] for n in ("a", "b")}
        yield client, tokens, clock


def test_rate_limit_answers_429_with_retry_after(
    limited: tuple[TestClient, dict[str, str], _Clock],
) -> None:
    client, tokens, clock = limited
    a, b = ({"Authorization": f"Bearer {tokens[k]}"} for k in ("a", "b"))
    assert [client.get("/v1/assets", headers=a).status_code for _ in range(3)] == [200] * 3
    resp = client.get("/v1/assets", headers=a)
    body = assert_problem(resp, 429)
    assert body["type"] == "urn:wellspan:problem:rate-limited"
    assert resp.headers["retry-after"] == "1"
    assert client.get("/v1/assets", headers=b).status_code == 200  # another key is not held up
    assert client.get("/livez").status_code == 200  # probes are not limited
    clock.now += 1.0
    assert client.get("/v1/assets", headers=a).status_code == 200
    assert_problem(client.get("/v1/assets", headers=a), 429)


def test_rate_limit_settings_are_validated() -> None:
    with pytest.raises(SettingsError, match="rate_limit_burst"):
        load_settings(rate_limit_burst=0)
    with pytest.raises(SettingsError, match="rate_limit_per_s"):
        load_settings(rate_limit_per_s=-1)


# -- API8 security misconfiguration ----------------------------------------------------------------


def test_an_unexpected_error_is_a_bare_500_problem(
    service: Service, monkeypatch: pytest.MonkeyPatch
) -> None:
    def boom(*_a: Any, **_k: Any) -> Any:
        raise RuntimeError("connection to db:5432 as wellspan/hunter2 failed")

    monkeypatch.setattr("prognosis_service.domain.assets.list_assets", boom)
    resp = service.client.get("/v1/assets", headers=service.auth(service.keys.reader))
    body = assert_problem(resp, 500)
    assert body["type"] == "urn:wellspan:problem:internal-error"
    assert "hunter2" not in resp.text and "Traceback" not in resp.text


def test_no_cross_origin_access_is_granted(service: Service) -> None:
    origin = {"Origin": "https://evil.example", "Access-Control-Request-Method": "GET"}
    pre = service.client.options("/v1/assets", headers=origin)
    assert "access-control-allow-origin" not in pre.headers
    got = service.client.get("/v1/assets", headers={**origin, **service.auth(service.keys.reader)})
    assert "access-control-allow-origin" not in got.headers


# -- API9 improper inventory management ------------------------------------------------------------


def test_the_openapi_document_lists_every_route_the_app_serves(service: Service) -> None:
    app: FastAPI = service.client.app  # type: ignore[assignment]
    spec = service.client.get("/openapi.json").json()
    documented = {(m.upper(), p) for p, ops in spec["paths"].items() for m in ops}
    routes = [r for r in _contexts(app) if getattr(r, "dependant", None) is not None]
    assert all(r.include_in_schema for r in routes if r.path.startswith("/v1/"))
    served = {(m, r.path) for r in routes if r.include_in_schema for m in r.methods}
    assert served - documented == set()
    assert documented - served == set()
    for path, ops in spec["paths"].items():
        if path.startswith("/v1/"):
            for op in ops.values():
                assert op.get("security") or spec.get("security"), path
