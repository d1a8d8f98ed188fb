"""Indicators of simulated Saltbush Flats pumps: the pump simulator fed through the extractor.

Shared by the forecast and anomaly benchmarks. Only the channels a benchmark needs are
synthesised, over short windows, to keep a benchmark run within minutes; the windows are
otherwise exactly what the gateway would see.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import numpy as np
from numpy.typing import NDArray

from edge_agent.extractor import Extractor
from edge_agent.simulator import FaultScenario, PumpSimulator, saltbush_asset

__all__ = ["IndicatorSeries", "simulate_indicators"]


@dataclass(frozen=True)
class IndicatorSeries:
    """Extractor output of one simulated pump at the given times.

    Attributes
    ----------
    times : list of datetime
    names : list of str
        Indicator names, columns of ``values``.
    values : ndarray (n, len(names))
        NaN where the extractor reported the indicator missing.
    operating : ndarray (n, 2)
        ``(shaft_speed_hz, load_fraction)`` as the extractor reported them (NaN if missing).
    severity : ndarray (n,)
        The simulator's true fault severity (0 healthy, 1 failure threshold).
    quality : list of dict
        Per window, the channels' quality as the service stores it:
        ``{channel: {"flags": [flag, ...], "spikes_removed": int}}`` (empty if not recorded).
    units : list of str
        Units of ``names`` as the extractor's layout gives them (empty if not recorded).
    """

    times: list[datetime]
    names: list[str]
    values: NDArray
    operating: NDArray
    severity: NDArray
    quality: list[dict[str, Any]] = field(default_factory=list)
    units: list[str] = field(default_factory=list)

    def head(self, n: int) -> IndicatorSeries:
        """The first ``n`` windows."""
        return self._rows(slice(None, n))

    def tail(self, n: int) -> IndicatorSeries:
        """The windows from index ``n`` on."""
        return self._rows(slice(n, None))

    def _rows(self, s: slice) -> IndicatorSeries:
        return IndicatorSeries(
            times=self.times[s],
            names=self.names,
            values=self.values[s],
            operating=self.operating[s],
            severity=self.severity[s],
            quality=self.quality[s],
            units=self.units,
        )

    def column(self, name: str) -> NDArray:
        return self.values[:, self.names.index(name)]


def simulate_indicators(
    asset_id: str,
    scenario: FaultScenario,
    times: Sequence[datetime],
    *,
    seed: int,
    channels: Sequence[str] = ("de_accel", "nde_accel", "motor_current"),
    indicators: Sequence[str] | None = None,
    window_s: float = 0.25,
    channel_window_s: Mapping[str, float] | None = None,
    stop: Callable[[int, IndicatorSeries], bool] | None = None,
    stop_every: int = 24,
    progress: Callable[[int], None] | None = None,
) -> IndicatorSeries:
    """Simulate ``asset_id`` under ``scenario`` at ``times`` and extract its indicators.

    ``stop(k, partial)`` is asked every ``stop_every`` windows and ends the run early when it
    returns true (e.g. once an alarm is raised). ``progress(k)`` is called after each window.
    ``channel_window_s`` gives some channels a window other than ``window_s``, s (a slow
    channel needs enough samples for the extractor's quality check).
    """
    full = saltbush_asset(asset_id, window_s=window_s)
    longer = channel_window_s or {}
    asset = full.model_copy(
        update={
            "channels": tuple(
                c.model_copy(update={"window_s": longer[c.name]}) if c.name in longer else c
                for c in full.channels
                if c.name in channels
            )
        }
    )
    sim = PumpSimulator(asset, scenario, seed=seed)
    extractor = Extractor(asset)
    names = (
        [s.name for s in extractor.layout.indicators] if indicators is None else list(indicators)
    )
    unit_of = {s.name: s.unit for s in extractor.layout.indicators}
    units = [unit_of.get(n, "") for n in names]
    rows: list[list[float]] = []
    ops: list[tuple[float, float]] = []
    sev: list[float] = []
    qual: list[dict[str, Any]] = []
    done: list[datetime] = []

    def partial() -> IndicatorSeries:
        return IndicatorSeries(
            times=list(done),
            names=names,
            values=np.asarray(rows, dtype=float).reshape(len(rows), len(names)),
            operating=np.asarray(ops, dtype=float).reshape(len(ops), 2),
            severity=np.asarray(sev, dtype=float),
            quality=list(qual),
            units=units,
        )

    for k, t in enumerate(times):
        ws = sim.window(t)
        result = extractor.compute(ws)
        rows.append([np.nan if result.values[n] is None else result.values[n] for n in names])  # type: ignore[misc]
        op = result.operating
        ops.append(
            (
                np.nan if op.shaft_speed_hz is None else op.shaft_speed_hz,
                np.nan if op.load_fraction is None else op.load_fraction,
            )
        )
        sev.append(float(ws.labels["severity"]))  # type: ignore[arg-type]
        # As the ingest stores it (prognosis_service.ingest.pipeline): flag values, sorted.
        qual.append(
            {
                q.channel: {
                    "flags": sorted(f.value for f in q.flags),
                    "spikes_removed": q.spikes_removed,
                }
                for q in result.quality.values()
            }
        )
        done.append(t)
        if progress is not None:
            progress(k + 1)
        if stop is not None and (k + 1) % stop_every == 0 and stop(k + 1, partial()):
            break
    return partial()
