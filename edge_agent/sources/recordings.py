"""Recording files in a folder: one asset's window set per ``.npy``, ``.csv`` or ``.wav`` file.

File name: ``{asset_id}_{YYYYMMDDTHHMMSS[.ffffff]Z}.{npy|csv|wav}``, the time being the window
start in UTC, e.g. ``MAL-P1_20260301T120000Z.npy``. The contents are a table of samples x channels
as :mod:`edge_agent.recording_files` reads it, in engineering units:

``.npy`` and ``.csv`` without a header
    One column per channel of the asset, in configuration order. Each column holds that channel's
    ``round(fs_hz * window_s)`` samples, padded at the end with NaN (empty CSV cells are not
    allowed; write ``nan``) up to the longest channel.
``.csv`` with a header row
    The header names the columns' channels: any subset of the asset's channels, any order.
``.wav``
    Its channels are, in order, the asset's channels sampled at the WAV's rate (typically the
    accelerometers). Samples (PCM scaled to ±1 full scale) are taken as volts and multiplied by
    each channel's ``sensitivity`` (engineering units per volt).

A NaN inside a channel's samples marks a lost sample (the extractor flags the dropout). Writers
should write under a temporary name (a leading dot, or a ``.tmp``/``.part`` suffix) and rename
when complete; such names are ignored.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import numpy.typing as npt

from edge_agent.assets import AssetConfig, ChannelConfig
from edge_agent.recording_files import RecordingFileError, load_recording_file
from edge_agent.windows import ChannelWindow, WindowSet

__all__ = [
    "RECORDING_SUFFIXES",
    "RecordingError",
    "RecordingName",
    "parse_recording_name",
    "read_recording",
    "recording_name",
    "write_npy_recording",
]

RECORDING_SUFFIXES = (".npy", ".csv", ".wav")
_NAME = re.compile(
    r"^(?P<asset>[A-Za-z0-9][A-Za-z0-9_.-]*?)_(?P<stamp>\d{8}T\d{6}(?:\.\d{1,6})?)Z"
    r"\.(?P<ext>npy|csv|wav)$"
)


class RecordingError(ValueError):
    """A recording file cannot be turned into a window set; the message is one line."""


@dataclass(frozen=True, slots=True)
class RecordingName:
    asset_id: str
    start: datetime
    suffix: str


def recording_name(asset_id: str, start: datetime, suffix: str = ".npy") -> str:
    """The file name for a recording of ``asset_id`` starting at ``start``."""
    t = start.astimezone(UTC)
    frac = f".{t.microsecond:06d}" if t.microsecond else ""
    return f"{asset_id}_{t:%Y%m%dT%H%M%S}{frac}Z{suffix}"


def parse_recording_name(name: str) -> RecordingName | None:
    """The asset and window start encoded in a file name, or None if it is not a recording."""
    m = _NAME.match(name)
    if not m:
        return None
    stamp = m.group("stamp")
    fmt = "%Y%m%dT%H%M%S.%f" if "." in stamp else "%Y%m%dT%H%M%S"
    try:
        start = datetime.strptime(stamp, fmt).replace(tzinfo=UTC)
    except ValueError:
        return None
    return RecordingName(m.group("asset"), start, "." + m.group("ext"))


def _expected(c: ChannelConfig) -> int:
    return round(c.fs_hz * c.window_s)


def _window(c: ChannelConfig, samples: npt.NDArray[np.float64], where: str) -> ChannelWindow:
    n = _expected(c)
    if len(samples) < n:
        raise RecordingError(
            f"{where}: channel {c.name!r} has {len(samples)} samples, expected {n} "
            f"({c.fs_hz:g} Hz x {c.window_s:g} s)"
        )
    body, pad = samples[:n], samples[n:]
    if pad.size and not np.isnan(pad).all():
        raise RecordingError(
            f"{where}: channel {c.name!r} has {len(samples)} samples, expected {n} "
            f"({c.fs_hz:g} Hz x {c.window_s:g} s)"
        )
    if np.isinf(body).any():
        raise RecordingError(f"{where}: channel {c.name!r} holds infinite values")
    if np.isnan(body).all():
        raise RecordingError(f"{where}: channel {c.name!r} holds no samples (all NaN)")
    return ChannelWindow(c.name, c.kind, c.fs_hz, np.ascontiguousarray(body), c.unit)


def _columns(
    table: npt.NDArray[np.float64], channels: list[ChannelConfig], where: str
) -> dict[str, ChannelWindow]:
    if table.shape[1] != len(channels):
        raise RecordingError(
            f"{where} has {table.shape[1]} columns, expected {len(channels)} "
            f"({[c.name for c in channels]})"
        )
    return {c.name: _window(c, table[:, i], f"column {c.name!r}") for i, c in enumerate(channels)}


def _read(path: Path, asset: AssetConfig) -> dict[str, ChannelWindow]:
    try:
        rec = load_recording_file(path)
    except RecordingFileError as exc:
        raise RecordingError(str(exc).removeprefix(f"{path}: ")) from None
    table = rec.table
    if rec.fs is not None:  # WAV: the channels sampled at its rate, scaled by sensitivity
        matching = [c for c in asset.channels if math.isclose(c.fs_hz, rec.fs)]
        if not matching:
            raise RecordingError(
                f"WAV rate {rec.fs:g} Hz matches none of the channels of {asset.asset_id} "
                f"({sorted({c.fs_hz for c in asset.channels})} Hz)"
            )
        if table.shape[1] > len(matching):
            raise RecordingError(
                f"WAV has {table.shape[1]} channels; {asset.asset_id} has {len(matching)} "
                f"channels at {rec.fs:g} Hz ({[c.name for c in matching]})"
            )
        chosen = matching[: table.shape[1]]
        scale = np.array([c.sensitivity for c in chosen])
        return _columns(table * scale, chosen, "WAV")
    if rec.columns is not None:
        known = {c.name: c for c in asset.channels}
        unknown = [h for h in rec.columns if h not in known]
        if unknown or len(set(rec.columns)) != len(rec.columns):
            raise RecordingError(
                f"CSV header {list(rec.columns)} must name distinct channels of "
                f"{asset.asset_id} ({sorted(known)}); unknown: {unknown}"
            )
        return _columns(table, [known[h] for h in rec.columns], "CSV")
    return _columns(table, list(asset.channels), "table")


def read_recording(path: str | Path, asset: AssetConfig) -> WindowSet:
    """Read one recording file of ``asset`` into a window set.

    Raises
    ------
    RecordingError
        With a one-line reason when the name, the format or the contents do not fit.
    """
    p = Path(path)
    name = parse_recording_name(p.name)
    if name is None:
        raise RecordingError(
            f"file name {p.name!r} is not '{{asset_id}}_{{YYYYMMDDTHHMMSS}}Z.npy|csv|wav'"
        )
    if name.asset_id != asset.asset_id:
        raise RecordingError(f"file is for asset {name.asset_id!r}, not {asset.asset_id!r}")
    channels = _read(p, asset)
    return WindowSet(asset_id=asset.asset_id, start=name.start, channels=channels)


def write_npy_recording(folder: str | Path, window_set: WindowSet, asset: AssetConfig) -> Path:
    """Write ``window_set`` in the ``.npy`` form (atomically: temporary name, then rename)."""
    cols = [window_set.channels[c.name].samples for c in asset.channels]
    arr = np.full((max(len(c) for c in cols), len(cols)), np.nan)
    for i, c in enumerate(cols):
        arr[: len(c), i] = c
    target = Path(folder) / recording_name(asset.asset_id, window_set.start, ".npy")
    tmp = target.with_name("." + target.name)
    with tmp.open("wb") as fh:
        np.save(fh, arr)
    tmp.replace(target)
    return target
