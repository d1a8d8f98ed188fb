"""Window sources: anything that yields timestamped window sets for an asset.

:class:`WindowSource` is the protocol a DAQ driver implements; three come with the agent: the
pump simulator, a drop folder and a replay of recordings.
"""

from __future__ import annotations

from datetime import datetime

from edge_agent.config import GatewayConfig
from edge_agent.sources._base import RecoverableSource, WindowSource
from edge_agent.sources.drop_folder import DropFolderSource
from edge_agent.sources.recordings import (
    RECORDING_SUFFIXES,
    RecordingError,
    parse_recording_name,
    read_recording,
    recording_name,
    write_npy_recording,
)
from edge_agent.sources.replay import ReplaySource
from edge_agent.sources.simulated import SimulatorSource, parse_scenario

__all__ = [
    "RECORDING_SUFFIXES",
    "DropFolderSource",
    "RecordingError",
    "RecoverableSource",
    "ReplaySource",
    "SimulatorSource",
    "WindowSource",
    "build_source",
    "parse_recording_name",
    "parse_scenario",
    "read_recording",
    "recording_name",
    "write_npy_recording",
]


def build_source(config: GatewayConfig, *, start: datetime) -> WindowSource:
    """The source the configuration names; ``start`` anchors simulated fault scenarios."""
    src = config.source
    if src.kind == "simulator":
        return SimulatorSource(config.assets, scenarios=src.scenarios, start=start, seed=src.seed)
    assert src.folder is not None  # checked by SourceConfig
    if src.kind == "drop_folder":
        return DropFolderSource(src.folder, config.assets)
    return ReplaySource(src.folder, config.assets, pace=src.pace)
