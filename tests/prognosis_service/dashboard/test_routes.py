"""The dashboard's HTTP routes on both store dialects: the page, its files, capabilities and
the SVG charts."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from datetime import timedelta

from shared_schema import to_readable
from tests.prognosis_service import factories as f
from tests.prognosis_service.conftest import Service
from tests.prognosis_service.test_api import assert_problem, ingest, register

NS = {"s": "http://www.w3.org/2000/svg"}


def test_page_is_self_contained_and_states_the_caution(service: Service) -> None:
    resp = service.client.get("/dashboard")
    assert resp.status_code == 200
    assert resp.headers["content-type"].startswith("text/html")
    csp = resp.headers["content-security-policy"]
    assert "default-src 'self'" in csp and "script-src 'self'" in csp
    html = resp.text
    # nothing from elsewhere, no inline script or style for the policy to allow
    assert not re.search(r"""(src|href)=["']?(https?:)?//""", html)
    assert re.findall(r"<script[^>]*>", html) == [
        '<script src="/dashboard/static/dashboard.js" defer>'
    ]
    assert "style=" not in html and "<style" not in html
    for words in ("advisory", "do not replace protective trips", "qualified personnel decide"):
        assert words in html
    assert 'name="viewport"' in html


def test_static_files_are_served_and_nothing_else(service: Service) -> None:
    js = service.client.get("/dashboard/static/dashboard.js")
    assert js.status_code == 200 and js.headers["content-type"].startswith("text/javascript")
    # data reaches the page as text only
    assert not re.search(r"innerHTML|outerHTML|insertAdjacentHTML|document\.write", js.text)
    css = service.client.get("/dashboard/static/dashboard.css")
    assert css.status_code == 200 and css.headers["content-type"].startswith("text/css")
    assert_problem(service.client.get("/dashboard/static/index.html"), 404)
    assert service.client.get("/dashboard/static/..%2Fsvg.py").status_code == 404


def test_capabilities_follow_the_openapi_document_and_the_key(service: Service) -> None:
    assert_problem(service.client.get("/dashboard/capabilities"), 401)
    body = service.client.get(
        "/dashboard/capabilities", headers=service.auth(service.keys.reader)
    ).json()
    paths = service.client.get("/openapi.json").json()["paths"]
    assert body["routes"]["alerts"] == ("get" in paths.get("/v1/alerts", {}))
    assert body["routes"]["fleet_risk"] == ("get" in paths.get("/v1/fleet/risk", {}))
    assert body["may_operate"] is False and body["scopes"] == ["read"]
    admin = service.client.get("/dashboard/capabilities", headers=service.auth(service.keys.admin))
    assert admin.json()["may_operate"] is True


def _ingest_week(service: Service) -> None:
    assert register(service).status_code == 201
    msgs = [
        to_readable(f.message(i, window_start=f.T0 + timedelta(minutes=10 * i)), f.LAYOUT)
        for i in range(7 * 144)
    ]
    assert ingest(service, msgs).json()["stored"] == len(msgs)


def test_indicator_chart_draws_the_key_indicators(service: Service) -> None:
    _ingest_week(service)
    reader = service.auth(service.keys.reader)
    resp = service.client.get(
        f"/dashboard/assets/{f.ASSET}/indicators.svg?width=900", headers=reader
    )
    assert resp.status_code == 200
    assert resp.headers["content-type"].startswith("image/svg+xml")
    root = ET.fromstring(resp.text)
    panels = root.findall("./s:g/s:svg", NS)
    # the factory layout has four indicators, in the order of charts.KEY_INDICATOR_PATTERNS
    titles = [p.findtext("s:title", namespaces=NS) for p in panels]
    assert titles == [
        "de_accel.velocity_rms",
        "de_accel.env_bpfo",
        "de_accel.kurtosis",
        "discharge_pressure.mean",
    ]
    assert root.attrib["viewBox"] == "0 0 900 680"
    for panel in panels:
        trend = panel.find(".//s:path[@class='trend']", NS)
        assert trend is not None
        # a week in 1-hour buckets: 168 points, one unbroken line
        assert trend.attrib["d"].count("L") == 167 and trend.attrib["d"].count("M") == 1


def test_indicator_chart_errors_are_problems(service: Service) -> None:
    reader = service.auth(service.keys.reader)
    assert_problem(
        service.client.get("/dashboard/assets/NOPE-1/indicators.svg", headers=reader), 404
    )
    assert register(service).status_code == 201
    other_site = service.auth(service.keys.gibber_admin)
    path = f"/dashboard/assets/{f.ASSET}/indicators.svg"
    # another site's asset answers exactly as a missing one (domain.assets.get_asset)
    hidden = assert_problem(service.client.get(path, headers=other_site), 404)
    assert hidden["detail"] == "asset not found"
    assert_problem(service.client.get(path + "?width=10", headers=reader), 422)
    assert_problem(service.client.get(path + "?days=0", headers=reader), 422)
    # registered but silent: a panel that says so, not an error
    resp = service.client.get(path, headers=reader)
    assert resp.status_code == 200 and "sent no indicators yet" in resp.text


def test_health_and_diagnosis_charts_draw_what_the_json_routes_return(service: Service) -> None:
    _ingest_week(service)
    reader = service.auth(service.keys.reader)
    for chart, route in (("health", "health"), ("diagnosis", "diagnosis")):
        resp = service.client.get(f"/dashboard/assets/{f.ASSET}/{chart}.svg", headers=reader)
        assert resp.status_code == 200
        root = ET.fromstring(resp.text)
        # not assessed yet: the charts say so in words, as the JSON does with empty lists
        body = service.client.get(f"/v1/assets/{f.ASSET}/{route}", headers=reader).json()
        assert body.get("points", []) == [] and body.get("indicators", []) == []
        words = " ".join(root.itertext())
        assert "no health-index values yet" in words or "names no indicator levels" in words
    missing = service.client.get("/dashboard/assets/NOPE-1/health.svg", headers=reader)
    assert assert_problem(missing, 404)["detail"] == "asset not found"
    other_site = service.auth(service.keys.gibber_admin)
    hidden = service.client.get(f"/dashboard/assets/{f.ASSET}/diagnosis.svg", headers=other_site)
    assert assert_problem(hidden, 404)["detail"] == "asset not found"
