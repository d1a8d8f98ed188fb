"""deploy/gateways/: one sample gateway configuration per Saltbush Flats pad, each valid for the
agent's configuration loader and describing exactly that pad's pumps."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from edge_agent.config import load_config
from edge_agent.extractor import Extractor
from edge_agent.simulator import saltbush_fleet
from edge_agent.sources import parse_scenario

GATEWAYS = Path(__file__).resolve().parents[2] / "deploy" / "gateways"
PADS = {p.pad_id: p for p in saltbush_fleet()}


def test_there_is_one_sample_config_per_pad() -> None:
    assert sorted(p.stem for p in GATEWAYS.glob("*.toml")) == sorted(PADS)


@pytest.mark.parametrize("pad_id", sorted(PADS))
def test_the_pad_config_loads_and_matches_the_fleet(pad_id: str) -> None:
    pad = PADS[pad_id]
    path = GATEWAYS / f"{pad_id}.toml"
    cfg = load_config(path)
    assert cfg.gateway_id == pad.gateway_id
    assert cfg.site == pad.site_id
    assert cfg.assets == pad.assets
    assert cfg.client_id == f"wellspan-{pad.gateway_id}"
    assert str(cfg.outbox.path) == f"/var/lib/wellspan/{pad.gateway_id}/outbox.sqlite"
    assert sorted(cfg.source.scenarios) == sorted(pad.asset_ids)
    for asset_id, text in cfg.source.scenarios.items():
        parse_scenario(text, asset_id, start=cfg.schedule.simulated_start, seed=cfg.source.seed)
    for asset in cfg.assets:
        names = set(Extractor(asset).layout.names)
        assert set(cfg.budget.deadbands) <= names
        assert set(cfg.alarms.thresholds) <= names


@pytest.mark.parametrize("pad_id", sorted(PADS))
def test_the_commented_broker_user_is_site_slash_gateway(pad_id: str) -> None:
    # the broker's ACL pattern (deploy/mosquitto/wellspan.acl) expects "<site>/<gateway_id>"
    text = (GATEWAYS / f"{pad_id}.toml").read_text()
    users = re.findall(r'^# username = "([^"]+)"', text, flags=re.MULTILINE)
    assert users == [f"saltbush-flats/{PADS[pad_id].gateway_id}"]
