import pytest

from shared_schema import (
    INGEST_FILTERS,
    alarm_topic,
    alerts_topic,
    indicators_topic,
    layout_topic,
    parse_topic,
    shared_subscription,
    status_topic,
)


def _matches(topic_filter: str, topic: str) -> bool:
    """MQTT 3.1.1/5.0 topic-filter matching (OASIS MQTT v5.0, section 4.7)."""
    f, t = topic_filter.split("/"), topic.split("/")
    for i, level in enumerate(f):
        if level == "#":
            return True
        if i >= len(t) or (level != "+" and level != t[i]):
            return False
    return len(f) == len(t)


def test_topics_and_parse_round_trip() -> None:
    t = indicators_topic("saltbush-flats", "gw-mallee", "MAL-P1")
    assert t == "wellspan/v1/saltbush-flats/gw-mallee/MAL-P1/indicators"
    p = parse_topic(t)
    assert p is not None and (p.site, p.gateway_id, p.asset_id, p.kind) == (
        "saltbush-flats",
        "gw-mallee",
        "MAL-P1",
        "indicators",
    )
    s = parse_topic(status_topic("saltbush-flats", "gw-mallee"))
    assert s is not None and s.kind == "status" and s.asset_id is None
    assert parse_topic(alerts_topic("saltbush-flats", "MAL-P1")) is None
    assert parse_topic("elsewhere/v1/a/b/status") is None


def test_ingest_filters_cover_gateway_topics_but_not_alerts() -> None:
    gateway_topics = [
        layout_topic("s", "g"),
        status_topic("s", "g"),
        indicators_topic("s", "g", "a"),
        alarm_topic("s", "g", "a"),
    ]
    for topic in gateway_topics:
        assert any(_matches(f, topic) for f in INGEST_FILTERS), topic
    assert not any(_matches(f, alerts_topic("s", "a")) for f in INGEST_FILTERS)
    # Unknown versions still arrive (and are quarantined rather than silently missed).
    assert any(_matches(f, "wellspan/v7/s/g/a/indicators") for f in INGEST_FILTERS)


def test_topic_levels_are_checked() -> None:
    with pytest.raises(ValueError):
        indicators_topic("s", "g/h", "a")
    with pytest.raises(ValueError):
        status_topic("+", "g")
    assert shared_subscription("ingest", INGEST_FILTERS[0]).startswith("$share/ingest/")
