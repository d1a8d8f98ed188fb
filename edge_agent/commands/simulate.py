"""``wellspan simulate OUTDIR`` — simulated pump recordings with their true labels.

This is also how users make failure data they lack: each folder holds ``asset.toml`` (readable
by ``wellspan extract --asset``), one recording per window and ``labels.jsonl`` with the truth.

Examples::

    wellspan simulate out/ --asset MAL-P2 --days 120 --every-hours 12
    wellspan simulate out/ --asset GIB-P1 --fault inner_race --days 30 --format csv
"""

from __future__ import annotations

import argparse
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path

from wellspan.clikit import EXIT_OK, UsageError, print_json

__all__ = ["add_arguments", "run"]


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("outdir", type=Path, help="folder to write (one sub-folder per asset)")
    p.add_argument(
        "--asset",
        action="append",
        metavar="ID",
        help="Saltbush Flats pump to simulate (repeatable; default all twelve)",
    )
    p.add_argument(
        "--fault",
        metavar="MODE",
        help="override the demo story: this fault starts at the beginning and reaches "
        "failure at the end of the period",
    )
    p.add_argument("--days", type=float, default=30.0, help="simulated days (default 30)")
    p.add_argument("--every-hours", type=float, default=24.0, help="hours between recordings")
    p.add_argument("--start", help="first window, ISO 8601 UTC (default: the demo's start)")
    p.add_argument("--seed", type=int, default=2026)
    p.add_argument("--format", choices=("npy", "csv"), default="npy")
    p.add_argument("--json", action="store_true", help="print what was written as JSON")


def run(args: argparse.Namespace) -> int:
    from edge_agent.simulator import (
        DEMO_START,
        FAULT_MODES,
        SALTBUSH_ASSET_IDS,
        FaultScenario,
        PumpSimulator,
        record_simulation,
        saltbush_asset,
        saltbush_scenarios,
    )

    ids = args.asset or list(SALTBUSH_ASSET_IDS)
    unknown = [a for a in ids if a not in SALTBUSH_ASSET_IDS]
    if unknown:
        raise UsageError(f"--asset must be one of {list(SALTBUSH_ASSET_IDS)}, got {unknown}")
    if args.fault is not None and args.fault not in FAULT_MODES:
        raise UsageError(f"--fault must be one of {list(FAULT_MODES)}, got {args.fault!r}")
    if not args.days > 0 or not args.every_hours > 0:
        raise UsageError("--days and --every-hours must be positive")
    if args.seed < 0:
        raise UsageError(f"--seed must be a non-negative integer, got {args.seed}")
    start = DEMO_START
    if args.start:
        try:
            start = datetime.fromisoformat(args.start.replace("Z", "+00:00"))
        except ValueError:
            raise UsageError(f"--start must be an ISO 8601 time, got {args.start!r}") from None
        start = start.replace(tzinfo=UTC) if start.tzinfo is None else start.astimezone(UTC)
    end = start + timedelta(days=args.days)
    scenarios = saltbush_scenarios(start, seed=args.seed)
    written = []
    for asset_id in ids:
        scenario = scenarios[asset_id]
        if args.fault is not None:
            scenario = (
                FaultScenario()
                if args.fault == "healthy"
                else FaultScenario(fault=args.fault, onset=start, life_days=args.days)
            )
        sim = PumpSimulator(saltbush_asset(asset_id), scenario, seed=args.seed)
        folder = args.outdir / asset_id
        try:
            count = record_simulation(
                sim,
                folder,
                start=start,
                end=end,
                interval=timedelta(hours=args.every_hours),
                fmt=args.format,
            )
        except (FileExistsError, ValueError, OSError) as exc:
            raise UsageError(str(exc)) from None
        written.append({"asset_id": asset_id, "folder": str(folder), "recordings": count})
        print(f"{asset_id}: {count} recordings in {folder}", file=sys.stderr)
    if args.json:
        print_json(written)
    return EXIT_OK
