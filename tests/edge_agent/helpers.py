"""Test helpers for the gateway agent: a small asset, a synthetic source, a subscriber."""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import paho.mqtt.client as mqtt

from edge_agent.assets import AssetConfig, BearingGeometry, ChannelConfig
from edge_agent.config import GatewayConfig
from edge_agent.windows import ChannelWindow, WindowSet
from shared_schema import (
    EdgeAlarm,
    IndicatorLayout,
    IndicatorMessage,
    LayoutAnnouncement,
    decode_indicators,
    decode_json,
    parse_topic,
    split_batch,
)

GATEWAY = "gw-test"
SITE = "test-site"
FS_ACCEL = 5120.0
FS_PRESSURE = 500.0
WINDOW_S = 0.25


def small_asset(asset_id: str) -> AssetConfig:
    """A pump with one accelerometer and a suction pressure: fast to extract."""
    return AssetConfig(
        asset_id=asset_id,
        power_kw=37.0,
        bearings={
            "de": BearingGeometry(n_elements=8, element_diameter_mm=15.0, pitch_diameter_mm=70.0)
        },
        channels=(
            ChannelConfig(name="de_accel", kind="accel", unit="g", fs_hz=FS_ACCEL,
                          window_s=WINDOW_S, bearing="de"),
            ChannelConfig(name="suction_pressure", kind="pressure", unit="kPa",
                          fs_hz=FS_PRESSURE, window_s=WINDOW_S),
        ),
    )  # fmt: skip


def asset_toml(asset_id: str) -> str:
    return f"""
[[assets]]
asset_id = "{asset_id}"
power_kw = 37.0

[assets.bearings.de]
n_elements = 8
element_diameter_mm = 15.0
pitch_diameter_mm = 70.0

[[assets.channels]]
name = "de_accel"
kind = "accel"
unit = "g"
fs_hz = {FS_ACCEL}
window_s = {WINDOW_S}
bearing = "de"

[[assets.channels]]
name = "suction_pressure"
kind = "pressure"
unit = "kPa"
fs_hz = {FS_PRESSURE}
window_s = {WINDOW_S}
"""


def gateway_config(
    tmp_path: Path,
    broker_url: str,
    *,
    assets: Iterable[str] = ("TST-P1", "TST-P2"),
    **sections: dict[str, Any],
) -> GatewayConfig:
    """A validated configuration for tests; ``sections`` override whole tables' keys."""
    data: dict[str, Any] = {
        "gateway_id": GATEWAY,
        "site": SITE,
        "broker": {"url": broker_url, "reconnect_min_s": 0.2, "reconnect_max_s": 1.0},
        "schedule": {
            "interval_s": 60,
            "clock": "simulated",
            "simulated_start": "2026-03-01T00:00:00Z",
            "simulated_speed": 0,
        },
        "budget": {"bytes_per_day": 100_000_000, "default_relative": 0.0, "adapt": False},
        "outbox": {"path": str(tmp_path / "outbox.sqlite")},
        "alarms": {"zone_change": False, "sensor_fault_windows": 0},
        "assets": [small_asset(a).model_dump() for a in assets],
    }
    for name, values in sections.items():
        data.setdefault(name, {}).update(values)
    return GatewayConfig.model_validate(data)


def synthetic_window(
    asset: AssetConfig, t: datetime, *, velocity_scale: float = 1.0, seed: int = 0
) -> WindowSet:
    """A shaft-rate sine plus noise on the accelerometer, steady suction pressure."""
    rng = np.random.default_rng([seed, int(t.timestamp())])
    n = round(FS_ACCEL * WINDOW_S)
    tt = np.arange(n) / FS_ACCEL
    x = velocity_scale * 0.05 * np.sin(2 * np.pi * 29.6 * tt) + 0.01 * rng.standard_normal(n)
    p = 80.0 + rng.standard_normal(round(FS_PRESSURE * WINDOW_S))
    return WindowSet(
        asset.asset_id,
        t,
        {
            "de_accel": ChannelWindow("de_accel", "accel", FS_ACCEL, x, "g"),
            "suction_pressure": ChannelWindow(
                "suction_pressure", "pressure", FS_PRESSURE, p, "kPa"
            ),
        },
    )


@dataclass
class SyntheticSource:
    """One synthetic window set per asset and tick; ``scale(asset_id, t)`` sets the vibration."""

    scale: Callable[[str, datetime], float] = lambda asset_id, t: 1.0
    produced: int = 0

    def windows(self, asset: AssetConfig, due: datetime) -> list[WindowSet]:
        self.produced += 1
        return [synthetic_window(asset, due, velocity_scale=self.scale(asset.asset_id, due))]

    def settle(self, window_set: WindowSet, error: str | None) -> None:
        pass

    def close(self) -> None:
        pass


@dataclass
class Received:
    topic: str
    payload: bytes
    retain: bool


@dataclass
class Receiver:
    """A paho subscriber to everything a gateway publishes."""

    host: str
    port: int
    username: str | None = None
    password: str | None = None
    ca_file: Path | None = None
    messages: list[Received] = field(default_factory=list)

    def __post_init__(self) -> None:
        self._lock = threading.Lock()
        self._subscribed = threading.Event()
        self.client = mqtt.Client(
            mqtt.CallbackAPIVersion.VERSION2, client_id="", protocol=mqtt.MQTTv5
        )
        if self.username:
            self.client.username_pw_set(self.username, self.password)
        if self.ca_file is not None:
            self.client.tls_set(ca_certs=str(self.ca_file))
        self.client.on_connect = self._on_connect
        self.client.on_subscribe = lambda *a: self._subscribed.set()
        self.client.on_message = self._on_message
        self.client.reconnect_delay_set(0.05, 0.2)  # type: ignore[arg-type]

    def _on_connect(
        self, client: mqtt.Client, userdata: Any, flags: Any, rc: Any, props: Any
    ) -> None:
        if not rc.is_failure:
            client.subscribe("wellspan/#", qos=1)

    def _on_message(self, client: mqtt.Client, userdata: Any, msg: mqtt.MQTTMessage) -> None:
        with self._lock:
            self.messages.append(Received(msg.topic, bytes(msg.payload), bool(msg.retain)))

    def start(self) -> Receiver:
        self._subscribed.clear()
        self.client.connect(self.host, self.port)
        self.client.loop_start()
        assert self._subscribed.wait(10), "subscriber did not get its SUBACK"
        return self

    def wait_subscribed(self, timeout: float = 10) -> None:
        assert self._subscribed.wait(timeout), "subscriber did not (re)subscribe"

    def stop(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()

    def snapshot(self) -> list[Received]:
        with self._lock:
            return list(self.messages)

    def layouts(self) -> dict[str, IndicatorLayout]:
        out = {}
        for m in self.snapshot():
            parts = parse_topic(m.topic)
            if parts and parts.kind == "layout":
                for la in decode_json(m.payload, LayoutAnnouncement).layouts:
                    out[la.digest] = la
        return out

    def indicators(self) -> list[IndicatorMessage]:
        """Every indicator message received, in arrival order (batches unpacked)."""
        layouts = self.layouts()
        out = []
        for m in self.snapshot():
            parts = parse_topic(m.topic)
            if parts is None or parts.kind != "indicators":
                continue
            for frame in split_batch(m.payload):
                out.append(
                    decode_indicators(
                        frame, layouts, site=parts.site, gateway_id=parts.gateway_id,
                        asset_id=parts.asset_id or "",
                    )
                )  # fmt: skip
        return out

    def alarms(self) -> list[EdgeAlarm]:
        return [
            decode_json(m.payload, EdgeAlarm)
            for m in self.snapshot()
            if (p := parse_topic(m.topic)) is not None and p.kind == "alarm"
        ]

    def of_kind(self, kind: str) -> list[Received]:
        return [
            m for m in self.snapshot() if (p := parse_topic(m.topic)) is not None and p.kind == kind
        ]

    def wait_for(self, predicate: Callable[[Receiver], bool], timeout: float = 60) -> None:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if predicate(self):
                return
            time.sleep(0.05)
        raise AssertionError(f"condition not met within {timeout} s")


def unique_by_id(messages: Iterable[IndicatorMessage]) -> Iterator[IndicatorMessage]:
    seen = set()
    for m in messages:
        if m.message_id not in seen:
            seen.add(m.message_id)
            yield m
