"""The Saltbush Flats story told over another span: ``time_scale`` and the scenario form
``saltbush:<story_days>[:<delay_days>]`` that the demo writes into its gateway configs."""

from __future__ import annotations

from datetime import timedelta

import pytest

from edge_agent.simulator import DEMO_START, SALTBUSH_STORY_DAYS, saltbush_scenarios
from edge_agent.sources import parse_scenario

DAY = timedelta(days=1)


def test_time_scale_moves_every_event_in_proportion() -> None:
    full = saltbush_scenarios(DEMO_START, seed=7)
    tenth = saltbush_scenarios(DEMO_START, seed=7, time_scale=0.1)
    assert full.keys() == tenth.keys()
    for asset_id, a in full.items():
        b = tenth[asset_id]
        assert b.fault == a.fault and b.bearing == a.bearing
        for ta, tb in ((a.onset, b.onset), (a.repair, b.repair)):
            assert (ta is None) == (tb is None)
            if ta is not None and tb is not None:
                assert (tb - DEMO_START) / DAY == pytest.approx((ta - DEMO_START) / DAY * 0.1)
        if a.life_days is not None:
            assert b.life_days == pytest.approx(a.life_days * 0.1)
        for ea, eb in zip(a.sensor_faults, b.sensor_faults, strict=True):
            assert (eb.start - DEMO_START) / DAY == pytest.approx(
                (ea.start - DEMO_START) / DAY / 10
            )
        # the same point of the story has the same severity
        if a.onset is not None and a.life_days is not None:
            ta = a.onset + 0.5 * a.life_days * DAY
            tb = DEMO_START + (ta - DEMO_START) * 0.1
            assert b.severity(tb) == pytest.approx(a.severity(ta), abs=1e-9)


def test_the_scenario_text_compresses_and_delays_the_story() -> None:
    got = parse_scenario("saltbush:90:5", "COO-P2", start=DEMO_START, seed=3)
    want = saltbush_scenarios(DEMO_START + 5 * DAY, seed=3, time_scale=90 / SALTBUSH_STORY_DAYS)
    assert got == want["COO-P2"]
    plain = parse_scenario("saltbush", "COO-P2", start=DEMO_START, seed=3)
    assert plain == saltbush_scenarios(DEMO_START, seed=3)["COO-P2"]


@pytest.mark.parametrize(
    "text",
    ["saltbush:", "saltbush:x", "saltbush:0", "saltbush:-5", "saltbush:5:-1", "saltbush:1:2:3"],
)
def test_bad_story_spans_are_refused_with_the_form(text: str) -> None:
    with pytest.raises(ValueError, match=r"saltbush:<story_days>\[:<delay_days>\]"):
        parse_scenario(text, "MAL-P1", start=DEMO_START, seed=0)


def test_time_scale_must_be_positive() -> None:
    with pytest.raises(ValueError, match="time_scale"):
        saltbush_scenarios(DEMO_START, time_scale=0.0)
