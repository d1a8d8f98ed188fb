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
        The demo story of this Saltbush Flats pump (``saltbush_scenarios``), about 180 days.
    ``"saltbush:<story_days>[:<delay_days>]"``
        The same story told in ``story_days`` (compressed or stretched), starting
        ``delay_days`` after ``start`` (default 0), e.g. ``"saltbush:20"`` or ``"saltbush:20:2"``.
    ``"healthy"``
        No fault.
    ``"<fault>:<onset_days>:<life_days>"``
        ``fault`` develops ``onset_days`` after ``start`` and reaches the failure threshold
        ``life_days`` later, e.g. ``"outer_race:10:60"``.
    """
    from edge_agent.simulator import (
        FAULT_MODES,
        SALTBUSH_ASSET_IDS,
        SALTBUSH_STORY_DAYS,
        FaultScenario,
        saltbush_scenarios,
    )

    if text == "saltbush" or text.startswith("saltbush:"):
        if asset_id not in SALTBUSH_ASSET_IDS:
            raise ValueError(
                f"scenario 'saltbush' exists only for {list(SALTBUSH_ASSET_IDS)}, not {asset_id!r}"
            )
        scale, delay = 1.0, 0.0
        if text != "saltbush":
            parts = text.split(":")[1:]
            try:
                scale = float(parts[0]) / SALTBUSH_STORY_DAYS
                delay = float(parts[1]) if len(parts) == 2 else 0.0 if len(parts) == 1 else -1.0
            except ValueError:
                scale = float("nan")
            if not scale > 0 or not delay >= 0:
                raise ValueError(
                    "'saltbush:<story_days>[:<delay_days>]' needs story_days > 0 and "
                    f"delay_days >= 0, got {text!r}"
                )
        story_start = start + timedelta(days=delay)
        return saltbush_scenarios(story_start, seed=seed, time_scale=scale)[asset_id]
    if text == "healthy":
        return FaultScenario()
    parts = text.split(":")
    if len(parts) != 3 or parts[0] not in FAULT_MODES:
        raise ValueError(
            f"scenario must be 'saltbush[:<story_days>[:<delay_days>]]', 'healthy' or "
            f"'<fault>:<onset_days>:<life_days>' "
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
