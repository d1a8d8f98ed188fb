"""``wellspan edge CONFIG``: run the gateway agent, or ``--check`` its configuration."""

from __future__ import annotations

import argparse
import logging
import os
import sys
from typing import Any

from edge_agent.config import ConfigError, GatewayConfig, load_config
from wellspan.clikit import EXIT_OK, UsageError, print_json, print_table

__all__ = ["add_arguments", "describe", "run"]

ADVISORY = (
    "Edge alarms are advisory: they do not replace the machine's protective trips; local codes "
    "and qualified personnel decide."
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("config", metavar="CONFIG", help="the gateway's TOML configuration file")
    parser.add_argument(
        "--check",
        action="store_true",
        help="validate the configuration and print what the agent would do, then exit",
    )
    parser.add_argument("--json", action="store_true", help="with --check: print JSON")
    parser.add_argument(
        "--max-windows",
        type=int,
        metavar="N",
        help="stop (cleanly) after N window sets",
    )
    parser.add_argument(
        "--speed",
        type=float,
        metavar="FACTOR",
        help="run on a simulated clock FACTOR times faster than real time (0 = as fast as "
        "possible), starting at schedule.simulated_start",
    )
    parser.add_argument(
        "--drain-timeout",
        type=float,
        default=5.0,
        metavar="S",
        help="at shutdown, wait up to S seconds for queued messages to be delivered (default 5)",
    )
    parser.add_argument(
        "--log-format", choices=("json", "kv"), default="json", help="stderr log format"
    )
    parser.add_argument("--verbose", "-v", action="store_true", help="debug logging")


def _load(path: str) -> GatewayConfig:
    try:
        return load_config(path)
    except ConfigError as exc:
        raise UsageError(str(exc)) from None


def describe(config: GatewayConfig, layouts: dict[str, Any] | None = None) -> dict[str, Any]:
    """What the agent would do with ``config`` (the ``--check`` report)."""
    assets = []
    for a in config.assets:
        layout = (layouts or {}).get(a.asset_id)
        assets.append(
            {
                "asset_id": a.asset_id,
                "asset_class": a.asset_class,
                "channels": [
                    {
                        "name": c.name,
                        "kind": c.kind,
                        "unit": c.unit,
                        "fs_hz": c.fs_hz,
                        "window_s": c.window_s,
                        "bearing": c.bearing,
                    }
                    for c in a.channels
                ],
                "bearings": sorted(a.bearings),
                "interval_s": config.schedule.interval_for(a.asset_id),
                "scenario": config.source.scenarios.get(a.asset_id),
                "layout_digest": layout.digest if layout else None,
                "indicators": len(layout.indicators) if layout else None,
            }
        )
    b = config.broker
    windows_per_day = sum(86400 / config.schedule.interval_for(a.asset_id) for a in config.assets)
    return {
        "gateway_id": config.gateway_id,
        "site": config.site,
        "assets": assets,
        "schedule": {
            "clock": config.schedule.clock,
            "interval_s": config.schedule.interval_s,
            "jitter_s": config.schedule.jitter_s,
            "windows_per_day": round(windows_per_day),
        },
        "budget": {
            "bytes_per_day": config.budget.bytes_per_day,
            "heartbeat_s": config.budget.heartbeat_s,
            "default_relative_deadband": config.budget.default_relative,
            "deadbands": {
                k: v.model_dump(exclude_none=True) for k, v in config.budget.deadbands.items()
            },
            "adapt": config.budget.adapt,
            "bytes_per_window_allowed": round(
                config.budget.bytes_per_day
                * (1 - config.budget.reserve_fraction)
                / max(windows_per_day, 1),
                1,
            ),
        },
        "broker": {
            "url": b.url,
            "client_id": config.client_id,
            "tls": b.tls,
            "username": b.username,
            "password": (
                "from WELLSPAN_BROKER_PASSWORD"
                if os.environ.get("WELLSPAN_BROKER_PASSWORD")
                else "from password_file"
                if b.password_file
                else "none"
            ),
            "session_expiry_s": b.session_expiry_s,
            "keepalive_s": b.keepalive_s,
            "reconnect_s": [b.reconnect_min_s, b.reconnect_max_s],
        },
        "outbox": {
            "path": str(config.outbox.path),
            "max_bytes": config.outbox.max_bytes,
            "batch_frames": config.outbox.batch_frames,
        },
        "source": config.source.model_dump(mode="json", exclude_defaults=False),
        "alarms": {
            "thresholds": {
                k: v.model_dump(exclude_none=True) for k, v in config.alarms.thresholds.items()
            },
            "zone_change": config.alarms.zone_change,
            "sensor_fault_windows": config.alarms.sensor_fault_windows,
        },
        "advisory": ADVISORY,
    }


def _check(config: GatewayConfig, as_json: bool) -> int:
    from edge_agent.alarms import EdgeAlarmDetector
    from edge_agent.extractor import Extractor

    try:
        layouts = {a.asset_id: Extractor(a).layout for a in config.assets}
        EdgeAlarmDetector(
            config.alarms,
            {a.asset_id: a for a in config.assets},
            layouts,
            gateway_id=config.gateway_id,
            site=config.site,
        )
    except ValueError as exc:
        raise UsageError(f"configuration does not fit the extractor: {exc}") from None
    if config.source.kind == "simulator":
        from edge_agent.agent import DEFAULT_SIMULATED_START
        from edge_agent.sources import parse_scenario

        start = config.schedule.simulated_start or DEFAULT_SIMULATED_START
        for asset_id, text in config.source.scenarios.items():
            try:
                parse_scenario(text, asset_id, start=start, seed=config.source.seed)
            except ValueError as exc:
                raise UsageError(f"source.scenarios.{asset_id}: {exc}") from None
    known = set().union(*(set(la.names) for la in layouts.values()))
    unknown = sorted(set(config.budget.deadbands) - known)
    if unknown:
        raise UsageError(f"budget.deadbands names indicators {unknown} that no asset computes")
    report = describe(config, layouts)
    if as_json:
        print_json(report)
        return EXIT_OK
    out = sys.stdout
    out.write(f"gateway {config.gateway_id} at site {config.site}: configuration is valid\n\n")
    print_table(
        ["asset", "class", "channels", "interval_s", "layout", "indicators"],
        [
            [a["asset_id"], a["asset_class"], ", ".join(c["name"] for c in a["channels"]),
             a["interval_s"], a["layout_digest"], a["indicators"]]
            for a in report["assets"]
        ],
    )  # fmt: skip
    out.write("\n")
    rows: list[list[Any]] = []
    for section in ("schedule", "budget", "broker", "outbox", "source"):
        for k, v in report[section].items():
            if isinstance(v, dict):
                v = ", ".join(f"{kk}={vv}" for kk, vv in v.items()) or "-"
            rows.append([section, k, v])
    for k, v in report["alarms"].items():
        rows.append(["alarms", k, v if not isinstance(v, dict) else (
            ", ".join(f"{kk}={vv}" for kk, vv in v.items()) or "-")])  # fmt: skip
    print_table(["section", "key", "value"], rows)
    out.write(f"\n{ADVISORY}\n")
    return EXIT_OK


def run(args: argparse.Namespace) -> int:
    config = _load(args.config)
    if args.check:
        return _check(config, args.json)
    if args.max_windows is not None and args.max_windows < 1:
        raise UsageError(f"--max-windows must be >= 1, got {args.max_windows}")
    if args.speed is not None and args.speed < 0:
        raise UsageError(f"--speed must be >= 0 (0 = as fast as possible), got {args.speed:g}")
    from edge_agent.agent import Agent, AgentError
    from edge_agent.logs import configure_logging

    configure_logging(args.log_format, logging.DEBUG if args.verbose else logging.INFO)
    try:
        agent = Agent(
            config,
            speed=args.speed,
            max_windows=args.max_windows,
            drain_timeout_s=args.drain_timeout,
        )
    except AgentError as exc:
        raise UsageError(f"{args.config}: {exc}") from None
    print(ADVISORY, file=sys.stderr)
    agent.run()
    return EXIT_OK
