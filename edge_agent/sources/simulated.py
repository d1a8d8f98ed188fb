"""The pump simulator as a window source, one simulator per asset with its fault scenario."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from datetime import datetime, timedelta
from typing import Any

from edge_agent.assets import AssetConfig
from edge_agent.windows import WindowSet

__all__ = ["SimulatorSource", "parse_scenario"]


def parse_scenario(text: str, asset_id: str, *, start: datetime, seed: int) -> Any:
    """Build a fault scenario from its configuration form.

    ``"saltbush"``
        The demo story of this Saltbush Flats pump (``saltbush_scenarios``).
    ``"healthy"``
        No fault.
    ``"<fault>:<onset_days>:<life_days>"``
        ``fault`` develops ``onset_days`` after ``start`` and reaches the failure threshold
        ``life_days`` later, e.g. ``"outer_race:10:60"``.
    """
    from edge_agent.simulator import (
        FAULT_MODES,
        SALTBUSH_ASSET_IDS,
        FaultScenario,
        saltbush_scenarios,
    )

    if text == "saltbush":
        if asset_id not in SALTBUSH_ASSET_IDS:
            raise ValueError(
                f"scenario 'saltbush' exists only for {list(SALTBUSH_ASSET_IDS)}, not {asset_id!r}"
            )
        return saltbush_scenarios(start, seed=seed)[asset_id]
    if text == "healthy":
        return FaultScenario()
    parts = text.split(":")
    if len(parts) != 3 or parts[0] not in FAULT_MODES:
        raise ValueError(
            f"scenario must be 'saltbush', 'healthy' or '<fault>:<onset_days>:<life_days>' "
            f"with fault in {list(FAULT_MODES)}, got {text!r}"
        )
    try:
        onset, life = float(parts[1]), float(parts[2])
    except ValueError:
        raise ValueError(f"onset_days and life_days must be numbers, got {text!r}") from None
    fault: Any = parts[0]  # one of FAULT_MODES, checked above
    return FaultScenario(fault=fault, onset=start + timedelta(days=onset), life_days=life)


class SimulatorSource:
    """Takes one simulated window set per asset at each scheduled tick."""

    def __init__(
        self,
        assets: Iterable[AssetConfig],
        *,
        scenarios: Mapping[str, str],
        start: datetime,
        seed: int = 0,
    ) -> None:
        from edge_agent.simulator import SALTBUSH_ASSET_IDS, PumpSimulator

        self._sims: dict[str, Any] = {}
        for asset in assets:
            default = "saltbush" if asset.asset_id in SALTBUSH_ASSET_IDS else "healthy"
            text = scenarios.get(asset.asset_id, default)
            scenario = parse_scenario(text, asset.asset_id, start=start, seed=seed)
            self._sims[asset.asset_id] = PumpSimulator(asset, scenario, seed=seed)

    def windows(self, asset: AssetConfig, due: datetime) -> Iterable[WindowSet]:
        return [self._sims[asset.asset_id].window(due)]

    def settle(self, window_set: WindowSet, error: str | None) -> None:
        pass

    def close(self) -> None:
        pass
