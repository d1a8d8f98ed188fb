"""The dashboard in headless Debian Chromium against a live service with real ingested data.

``live``: the whole service, three simulated pumps ingested over HTTP and assessed by the
service's own worker. ``bare``: a service without the assessment and alert routes, where the
page must say "not available yet" instead of breaking.

Screenshots (laptop 1366×768, tablet 820×1180) go to ``test-artifacts/screenshots/`` or to the
folder named by ``WELLSPAN_SCREENSHOTS`` (``docs/screenshots`` for the docs).
"""

from __future__ import annotations

import os
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest

from tests.prognosis_service.dashboard.conftest import ASSETS, HOSTILE, LiveService

pytestmark = pytest.mark.timeout(300)

ROOT = Path(__file__).resolve().parents[3]
LAPTOP = (1366, 768)
TABLET = (820, 1180)
WAIT_S = 30  # how long to wait for the page to show something, not a performance limit


def _screens() -> Path:
    folder = Path(os.environ.get("WELLSPAN_SCREENSHOTS") or ROOT / "test-artifacts/screenshots")
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def _wait(driver: Any, condition: Any, message: str) -> Any:
    from selenium.common.exceptions import StaleElementReferenceException
    from selenium.webdriver.support.ui import WebDriverWait

    # The page replaces its charts when it redraws them; an element read mid-redraw goes stale,
    # which only means "not yet".
    wait = WebDriverWait(driver, WAIT_S, ignored_exceptions=(StaleElementReferenceException,))
    return wait.until(condition, message)


def _by_id(driver: Any, element_id: str) -> Any:
    from selenium.webdriver.common.by import By

    return driver.find_element(By.ID, element_id)


def _css(driver: Any, selector: str) -> list[Any]:
    from selenium.webdriver.common.by import By

    return list(driver.find_elements(By.CSS_SELECTOR, selector))


def _viewport(driver: Any, size: tuple[int, int]) -> None:
    """The page's viewport exactly ``size`` CSS pixels (the window's own frame aside)."""
    width, height = size
    driver.execute_cdp_cmd(
        "Emulation.setDeviceMetricsOverride",
        {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False},
    )


def _open(driver: Any, svc: LiveService, key: str, *, size: tuple[int, int] = LAPTOP) -> None:
    """A fresh tab state, then the page with the key in the URL fragment."""
    _viewport(driver, size)
    driver.get(f"{svc.url}/dashboard/static/dashboard.css")  # same origin, page not run
    driver.execute_script("sessionStorage.clear()")
    driver.get(f"{svc.url}/dashboard?refresh=2#key={svc.keys[key]}")


def _fleet_ids(driver: Any) -> list[str]:
    rows = driver.execute_script(
        "return [...document.querySelectorAll('#fleet-table tbody tr')]"
        ".map(r => r.dataset.asset || '')"
    )
    return [str(r) for r in rows if r]


def _wait_fleet(driver: Any, n: int) -> list[str]:
    _wait(driver, lambda d: len(_fleet_ids(d)) >= n, "fleet table rows")
    return _fleet_ids(driver)


def _open_asset(driver: Any, asset_id: str) -> None:
    _css(driver, f"#fleet-table tr[data-asset='{asset_id}'] button")[0].click()
    _wait(driver, lambda d: _by_id(d, "asset-title").text == asset_id, "asset title")


def _shown(driver: Any, element_id: str) -> Any:
    """Wait until the element is displayed with some text; return it."""
    return _wait(
        driver,
        lambda d: (e := _by_id(d, element_id)).is_displayed() and e.text.strip() and e,
        f"#{element_id} shown",
    )


def _text_in(driver: Any, element_id: str, words: str) -> None:
    _wait(driver, lambda d: words in _by_id(d, element_id).text, f"{words!r} in #{element_id}")


def _assert_caution(driver: Any) -> None:
    caution = _by_id(driver, "caution")
    assert caution.is_displayed()
    for words in ("advisory", "do not replace protective trips", "qualified personnel decide"):
        assert words in caution.text, caution.text
    # it stays in view (sticky) when the page is scrolled to its end
    driver.execute_script("window.scrollTo(0, document.body.scrollHeight)")
    top, bottom, height = driver.execute_script(
        "const r = document.getElementById('caution').getBoundingClientRect();"
        "return [r.top, r.bottom, window.innerHeight]"
    )
    assert top >= 0 and bottom <= height
    driver.execute_script("window.scrollTo(0, 0)")


def _no_sideways_scroll(driver: Any) -> None:
    assert driver.execute_script("return document.documentElement.scrollWidth <= innerWidth")


def _shot(driver: Any, name: str) -> Path:
    path = _screens() / name
    driver.save_screenshot(str(path))
    assert path.stat().st_size > 10_000
    return path


def _chart_width(driver: Any, figure: str) -> int:
    return int(_css(driver, f"#{figure} > svg")[0].get_attribute("width"))


# --- the whole service --------------------------------------------------------------------------


def test_fleet_lists_the_assets_in_risk_order(live: LiveService, browser: Any) -> None:
    _open(browser, live, "reader")
    ids = _wait_fleet(browser, len(ASSETS))
    assert browser.execute_script("return [innerWidth, innerHeight]") == list(LAPTOP)
    # the key left the address bar, and stays in this tab's session storage
    assert "key=" not in browser.current_url
    stored = browser.execute_script("return sessionStorage.getItem('wellspan.key')")
    assert stored == live.keys["reader"]
    assert not _by_id(browser, "key-panel").is_displayed()
    with live.client("reader") as c:
        risk = c.get("/v1/fleet/risk?horizon_h=720").json()["items"]
    assert ids == [i["asset_id"] for i in risk]  # most at risk first, as the service ranks
    assert ids[0] == "MAL-P2"  # the simulated outer-race defect
    first = _css(browser, "#fleet-table tr[data-asset='MAL-P2'] td")
    cells = [c.text for c in first]
    assert cells[2].endswith("%") and cells[3].endswith((" days", " h"))
    assert cells[5].startswith(risk[0]["likely_fault"])
    assert not _by_id(browser, "fleet-note").is_displayed()
    _assert_caution(browser)
    _shot(browser, "fleet-laptop.png")
    _viewport(browser, TABLET)
    assert browser.execute_script("return innerWidth") == TABLET[0]
    _no_sideways_scroll(browser)  # the table fits or scrolls in its own frame
    _shot(browser, "fleet-tablet.png")


def test_asset_page_draws_trend_threshold_band_and_events(live: LiveService, browser: Any) -> None:
    _open(browser, live, "reader")
    _wait_fleet(browser, len(ASSETS))
    _open_asset(browser, "MAL-P2")
    assert _by_id(browser, "view-asset").is_displayed()
    _wait(browser, lambda d: _css(d, "#health-chart svg path.trend"), "health trend")
    assert _css(browser, "#health-chart line.failure-threshold")
    assert _css(browser, "#health-chart rect.forecast-band")
    assert _css(browser, "#health-chart line.forecast-p50")
    events = _css(browser, "#health-chart g.maintenance-event")
    assert len(events) == 1
    assert HOSTILE in events[0].get_attribute("textContent")  # the notes, as text
    # the forecast facts from /time-to-failure
    _wait(browser, lambda d: "P10 / P50 / P90" in _by_id(d, "ttf-facts").text, "forecast facts")
    assert "degradation" in _by_id(browser, "ttf-status").text
    assert _by_id(browser, "diag-summary").text.startswith("outer_race")
    # the levels behind the diagnosis and the key indicators
    _wait(browser, lambda d: _css(d, "#diagnosis-chart rect.level"), "diagnosis levels")
    # each read inside _wait: a redraw between finding the elements and reading them is retried
    labels = _wait(
        browser, lambda d: [t.text for t in _css(d, "#diagnosis-chart text")], "diagnosis labels"
    )
    assert "de_accel.env_bpfo" in labels and "de_accel.order_1x" in labels
    assert "de_accel.kurtosis" not in labels  # not a defect-frequency or order line
    titles = _wait(
        browser,
        lambda d: [
            p.find_element("css selector", "title").get_attribute("textContent")
            for p in _css(d, "#indicator-chart > svg > g > svg")
        ],
        "indicator panels",
    )
    assert len(titles) == 4
    assert titles[:2] == ["de_accel.velocity_rms", "de_accel.env_bpfo"]
    paths = _wait(
        browser,
        lambda d: [p.get_attribute("d") for p in _css(d, "#indicator-chart path.trend")],
        "indicator trends",
    )
    assert len(paths) == 4 and all(d.startswith("M") for d in paths)
    _assert_caution(browser)
    _shot(browser, "asset-laptop.png")
    browser.execute_script("document.getElementById('health-chart').scrollIntoView()")
    _shot(browser, "asset-charts-laptop.png")
    _viewport(browser, TABLET)
    # the page redraws its charts for the narrower figures
    figures = ("health-chart", "diagnosis-chart", "indicator-chart")
    _wait(
        browser,
        lambda d: all(_chart_width(d, f) <= _by_id(d, f).size["width"] for f in figures),
        "charts redrawn for the tablet",
    )
    _no_sideways_scroll(browser)
    browser.execute_script("window.scrollTo(0, 0)")
    _shot(browser, "asset-tablet.png")


def test_refresh_keeps_the_selected_asset(live: LiveService, browser: Any) -> None:
    _open(browser, live, "reader")
    _wait_fleet(browser, len(ASSETS))
    _open_asset(browser, "GIB-P1")
    stamp = _by_id(browser, "updated").text
    with live.client("admin") as admin:
        resp = admin.post("/v1/assets", json={"asset_id": "COO-P1", "site": "saltbush-flats"})
        assert resp.status_code in (200, 201), resp.text
    # the page refreshes itself (every 2 s here) and picks up the new asset ...
    _wait(browser, lambda d: "COO-P1" in _fleet_ids(d), "refreshed fleet")
    assert _by_id(browser, "updated").text != stamp
    # ... without leaving the asset view or the selected asset
    assert _by_id(browser, "view-asset").is_displayed()
    assert _by_id(browser, "asset-title").text == "GIB-P1"
    assert _css(browser, "#fleet-table tr.selected")[0].get_attribute("data-asset") == "GIB-P1"
    # a reload in the same tab keeps key, view and asset (session storage)
    browser.get(f"{live.url}/dashboard")
    _wait(browser, lambda d: _by_id(d, "asset-title").text == "GIB-P1", "asset after reload")
    assert not _by_id(browser, "key-panel").is_displayed()


def test_bad_key_is_refused_in_plain_words(live: LiveService, browser: Any) -> None:
    _viewport(browser, LAPTOP)
    browser.get(f"{live.url}/dashboard/static/dashboard.css")
    browser.execute_script("sessionStorage.clear()")
    browser.get(f"{live.url}/dashboard#key=wsk_000000000000_not-a-real-key")
    error = _shown(browser, "key-error")
    assert "The API key was refused" in error.text
    assert "not valid or has been revoked" in error.text
    assert _by_id(browser, "key-panel").is_displayed()
    assert not _by_id(browser, "main").is_displayed()
    _assert_caution(browser)
    _shot(browser, "bad-key-laptop.png")
    # entering a good key in the form recovers
    _by_id(browser, "key-input").send_keys(live.keys["reader"] + "\n")
    _wait_fleet(browser, len(ASSETS))


def test_names_from_data_stay_text(live: LiveService, browser: Any) -> None:
    _open(browser, live, "reader")
    _wait_fleet(browser, len(ASSETS))
    _open_asset(browser, "MAL-P1")
    meta = _wait(
        browser, lambda d: HOSTILE in (e := _by_id(d, "asset-meta")).text and e, "description"
    )
    assert not meta.find_elements("tag name", "img")
    assert browser.execute_script("return window.__pwned") is None


def _raise_alerts(live: LiveService) -> int:
    """Silence alerts through the service's own rules, judged two hours from now (the default
    rule raises after an hour without indicators)."""
    later = datetime.now(UTC) + timedelta(hours=2)
    return len(live.app.state.runtime.alerts.check_silence(now=later))


def test_acknowledging_an_alert_changes_its_state(live: LiveService, browser: Any) -> None:
    assert _raise_alerts(live) > 0
    with live.client("reader") as c:
        open_alerts = c.get("/v1/alerts?state=open&limit=200").json()["items"]
    first = open_alerts[0]
    row = f"#alerts-table tr[data-alert='{first['alert_id']}']"

    # a read-only key sees the alerts, and a refusal in plain words when it tries to act
    _open(browser, live, "reader")
    _wait_fleet(browser, len(ASSETS))
    _by_id(browser, "tab-alerts").click()
    _wait(browser, lambda d: _css(d, row), "alert row")
    assert "operate scope" in _by_id(browser, "alerts-note").text
    assert _by_id(browser, "alert-count").text == str(len(open_alerts))
    _by_id(browser, "actor").send_keys("R. Tester")
    _css(browser, f"{row} button[data-action='acknowledge']")[0].click()
    assert "lacks the operate scope" in _shown(browser, "alert-action").text

    # an operator acknowledges it: the row and the API both say acknowledged, by whom
    _open(browser, live, "operator")
    _wait_fleet(browser, len(ASSETS))
    _by_id(browser, "tab-alerts").click()
    _wait(browser, lambda d: _css(d, row), "alert row")
    assert not _by_id(browser, "alerts-note").is_displayed()
    _by_id(browser, "actor").clear()
    _by_id(browser, "actor").send_keys("R. Tester")
    _shot(browser, "alerts-laptop.png")
    _css(browser, f"{row} button[data-action='acknowledge']")[0].click()
    _wait(
        browser,
        lambda d: _css(d, f"{row} .alert-state")[0].text == "acknowledged",
        "acknowledged state",
    )
    assert _shown(browser, "alert-action").text.startswith("Acknowledged: ")
    assert not _css(browser, f"{row} button[data-action='acknowledge']")
    with live.client("reader") as c:
        after = c.get(f"/v1/alerts/{first['alert_id']}").json()
    assert after["state"] == "acknowledged" and after["acknowledged_by"] == "R. Tester"
    # resolving it takes it off the list of live alerts
    _css(browser, f"{row} button[data-action='resolve']")[0].click()
    _wait(browser, lambda d: not _css(d, row), "resolved alert gone")
    _assert_caution(browser)
    _viewport(browser, TABLET)
    _no_sideways_scroll(browser)
    _shot(browser, "alerts-tablet.png")


# --- a service without the assessment and alert routes ------------------------------------------


def test_without_assessment_routes_the_page_says_not_available(
    bare: LiveService, browser: Any
) -> None:
    _open(browser, bare, "operator")
    ids = _wait_fleet(browser, len(ASSETS))
    assert ids == sorted(ids)  # listed by name from /v1/assets
    assert "Forecasts not available yet" in _shown(browser, "fleet-note").text
    _open_asset(browser, "MAL-P2")
    _text_in(browser, "health-chart", "Health-index trend and forecasts not available yet")
    _text_in(browser, "ttf-status", "Forecasts not available yet")
    _text_in(browser, "diagnosis-chart", "Diagnosis indicator levels not available yet")
    # what the service has still shows: the key indicators
    _wait(browser, lambda d: _css(d, "#indicator-chart path.trend"), "indicator chart")
    _assert_caution(browser)
    _by_id(browser, "tab-alerts").click()
    assert "Alerts not available yet" in _shown(browser, "alerts-note").text
    assert not _by_id(browser, "status").is_displayed()  # nothing reported as broken


def test_health_svg_draws_every_point_of_the_health_route(live: LiveService) -> None:
    import xml.etree.ElementTree as ET

    ns = {"s": "http://www.w3.org/2000/svg"}
    with live.client("reader") as c:
        body = c.get("/v1/assets/MAL-P2/health", params={"limit": 10_000}).json()
        resp = c.get("/dashboard/assets/MAL-P2/health.svg", params={"days": 3660})
    assert resp.status_code == 200
    root = ET.fromstring(resp.text)
    trend = root.find(".//s:path[@class='trend']", ns)
    assert trend is not None
    drawn = [p for p in body["points"] if not p["excluded"] and p["health_index"] is not None]
    vertices = trend.attrib["d"].count("M") + trend.attrib["d"].count("L")
    assert vertices == len(drawn) > 100
    assert body["forecast"] is not None  # so the band is drawn
    assert root.find(".//s:rect[@class='forecast-band']", ns) is not None
    events = root.findall(".//s:g[@class='maintenance-event']", ns)
    assert len(events) == len(body["maintenance_events"]) == 1
