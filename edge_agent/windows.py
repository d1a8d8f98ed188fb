"""Raw channel windows as they come off a data-acquisition source.

A *window* is one contiguous block of samples from one channel; a *window set* is the group of
windows taken together from one asset, which the extractor turns into one indicator message.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime
from typing import Literal

import numpy as np
import numpy.typing as npt

__all__ = ["ChannelKind", "ChannelWindow", "WindowSet"]

ChannelKind = Literal["accel", "pressure", "current", "temperature", "tacho"]
"""What a channel measures: acceleration (g), pressure (kPa), motor current (A),
temperature (degC) or a once-per-revolution tachometer pulse train (V)."""


@dataclass(frozen=True, slots=True)
class ChannelWindow:
    """One channel's samples over one window, already scaled to engineering units.

    Parameters
    ----------
    channel : str
        Channel name as configured for the asset, e.g. ``"de_accel"``.
    kind : ChannelKind
        What the channel measures.
    fs : float
        Sample rate in Hz.
    samples : ndarray, shape (n,)
        Samples in ``unit``; NaN marks a dropped sample.
    unit : str
        Engineering unit of ``samples`` (``"g"``, ``"kPa"``, ``"A"``, ``"degC"``, ``"V"``).
    """

    channel: str
    kind: ChannelKind
    fs: float
    samples: npt.NDArray[np.float64]
    unit: str

    @property
    def duration_s(self) -> float:
        return float(len(self.samples)) / self.fs


@dataclass(frozen=True, slots=True)
class WindowSet:
    """The windows taken together from one asset, with their common start time.

    ``process`` carries operating values the gateway reads from the process side rather than
    computing from a waveform (e.g. the drive's speed reference or a flow meter), keyed by
    operating-condition field name (``"flow_m3_per_h"``, ``"fluid_temperature_c"``, ...).
    ``labels`` is filled only by the simulator: the true fault and severity of the window.
    """

    asset_id: str
    start: datetime
    channels: Mapping[str, ChannelWindow]
    process: Mapping[str, float] = field(default_factory=dict)
    labels: Mapping[str, object] = field(default_factory=dict)
