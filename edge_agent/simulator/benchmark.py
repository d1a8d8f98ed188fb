"""Speed of the simulator: ``python -m edge_agent.simulator.benchmark [--windows N]``.

Prints the mean wall-clock and CPU time per window set (two 25.6 kHz accelerometer windows plus
the slow channels) for a healthy pump, a bearing defect and a cavitating pump, best of five runs.
CPU time is the steadier figure on a shared machine. A benchmark measures; the tests never
assert on time.
"""

from __future__ import annotations

import argparse
import time
from datetime import timedelta

from edge_agent.simulator.fleet import saltbush_asset
from edge_agent.simulator.scenario import DEMO_START, FaultScenario
from edge_agent.simulator.simulator import PumpSimulator

__all__ = ["main", "time_per_window_set"]


def time_per_window_set(
    simulator: PumpSimulator, *, windows: int = 100, repeats: int = 5
) -> tuple[float, float]:
    """Best-of-``repeats`` mean (wall, CPU) seconds per `PumpSimulator.window` call."""
    best_wall = best_cpu = float("inf")
    for _ in range(repeats):
        wall, cpu = time.perf_counter(), time.process_time()
        for k in range(windows):
            simulator.window(DEMO_START + timedelta(days=50, minutes=k))
        best_wall = min(best_wall, (time.perf_counter() - wall) / windows)
        best_cpu = min(best_cpu, (time.process_time() - cpu) / windows)
    return best_wall, best_cpu


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m edge_agent.simulator.benchmark")
    parser.add_argument("--windows", type=int, default=100, help="window sets per run")
    args = parser.parse_args(argv)
    if args.windows < 1:
        parser.error(f"--windows must be at least 1, got {args.windows}")
    cases = {
        "healthy": FaultScenario(),
        "outer_race": FaultScenario(fault="outer_race", onset=DEMO_START, life_days=60.0),
        "cavitation": FaultScenario(fault="cavitation", onset=DEMO_START, life_days=60.0),
    }
    asset = saltbush_asset("SPI-P1")
    print(f"{'scenario':<12} {'wall ms/window set':>19} {'CPU ms/window set':>18}")
    for name, scenario in cases.items():
        sim = PumpSimulator(asset, scenario, seed=0)
        wall, cpu = time_per_window_set(sim, windows=args.windows)
        print(f"{name:<12} {wall * 1e3:>19.2f} {cpu * 1e3:>18.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
