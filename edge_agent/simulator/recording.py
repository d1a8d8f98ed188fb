"""Simulated recordings on disk, and the asset configuration as TOML.

Folder layout (one folder per asset)::

    <folder>/
      asset.toml                            the AssetConfig (see `asset_to_toml`)
      labels.jsonl                          one line per recording: files, process values, truth
      MAL-P1_20260301T000000Z_25600hz.npy   channels at 25,600 Hz (de_accel, nde_accel)
      MAL-P1_20260301T000000Z_1000hz.npy    channels at 1,000 Hz (pressures, motor current)
      MAL-P1_20260301T000000Z_10hz.npy      channels at 10 Hz (bearing_temp)

A *recording* is one window set. Its channels are grouped by sample rate (and sample count), and
each group is one 2-D file with one column per channel, in the asset's channel order: ``.npy``
(float64, shape ``(samples, channels)``) or ``.csv`` (a header row of channel names, then one row
per sample; a lost sample is ``nan``). Each ``labels.jsonl`` line names the recording, its start
(ISO 8601 UTC), the files with their rate and columns, the process values and the labels, e.g.::

    {"recording": "MAL-P1_20260301T000000Z", "asset_id": "MAL-P1",
     "start": "2026-03-01T00:00:00Z", "format": "npy",
     "files": [{"file": "MAL-P1_20260301T000000Z_25600hz.npy", "fs_hz": 25600.0,
                "channels": ["de_accel", "nde_accel"]}, ...],
     "process": {"drive_speed_rpm": 1566.0, ...},
     "labels": {"fault": "healthy", "severity": 0.0, ...}}

`read_recordings` reads a folder back into `WindowSet` objects.
"""

from __future__ import annotations

import json
import math
import os
import re
import tomllib
from collections.abc import Iterator, Mapping
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any, Literal, TypedDict

import numpy as np
import numpy.typing as npt
from pydantic import ValidationError

from edge_agent.assets import AssetConfig
from edge_agent.simulator.scenario import require_utc
from edge_agent.simulator.simulator import PumpSimulator
from edge_agent.windows import ChannelWindow, WindowSet

__all__ = [
    "ASSET_FILE",
    "LABELS_FILE",
    "RECORDING_FORMATS",
    "RecordingEntry",
    "RecordingFile",
    "RecordingFormat",
    "RecordingFormatError",
    "asset_from_toml",
    "asset_to_toml",
    "read_asset_toml",
    "read_recordings",
    "record_simulation",
    "toml_text",
    "write_asset_toml",
    "write_recording",
]

ASSET_FILE = "asset.toml"
LABELS_FILE = "labels.jsonl"
RecordingFormat = Literal["npy", "csv"]
RECORDING_FORMATS: tuple[str, ...] = ("npy", "csv")

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


class RecordingFile(TypedDict):
    """One file of a recording: its name, sample rate (Hz) and column channel names."""

    file: str
    fs_hz: float
    channels: list[str]


class RecordingEntry(TypedDict):
    """One line of ``labels.jsonl``."""

    recording: str
    asset_id: str
    start: str
    format: str
    files: list[RecordingFile]
    process: dict[str, float]
    labels: dict[str, object]


class RecordingFormatError(ValueError):
    """A recording folder or asset file that cannot be read; the message names file and key."""


# ---------------------------------------------------------------------------- TOML
def _toml_key(key: str) -> str:
    return key if _BARE_KEY.match(key) else json.dumps(key)


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, datetime):
        return require_utc(value).isoformat().replace("+00:00", "Z")
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} value {value!r} to TOML")


def _is_table_array(value: Any) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, dict) for v in value)


def _emit(lines: list[str], prefix: str, table: Mapping[str, Any]) -> None:
    for key, value in table.items():
        if value is None or isinstance(value, dict) or _is_table_array(value):
            continue
        lines.append(f"{_toml_key(key)} = {_toml_value(value)}")
    for key, value in table.items():
        if isinstance(value, dict):
            lines.extend(["", f"[{prefix}{_toml_key(key)}]"])
            _emit(lines, f"{prefix}{_toml_key(key)}.", value)
    for key, value in table.items():
        if _is_table_array(value):
            for item in value:
                lines.extend(["", f"[[{prefix}{_toml_key(key)}]]"])
                _emit(lines, f"{prefix}{_toml_key(key)}.", item)


def toml_text(table: Mapping[str, Any]) -> str:
    """A table of plain values (str, int, float, bool, UTC datetime, lists, tables) as TOML."""
    lines: list[str] = []
    _emit(lines, "", table)
    return "\n".join(lines).lstrip("\n") + "\n"


def asset_to_toml(asset: AssetConfig) -> str:
    """The asset configuration as TOML text; `asset_from_toml` reads it back to an equal object.

    Examples
    --------
    >>> from edge_agent.simulator.fleet import saltbush_asset
    >>> a = saltbush_asset("MAL-P1")
    >>> asset_from_toml(asset_to_toml(a)) == a
    True
    """
    lines = [f"# wellspan asset configuration: {asset.asset_id}"]
    _emit(lines, "", asset.model_dump(mode="json", exclude_none=True))
    return "\n".join(lines) + "\n"


def asset_from_toml(text: str, *, source: str = "<string>") -> AssetConfig:
    """Parse an asset configuration from TOML text.

    Raises
    ------
    RecordingFormatError
        On invalid TOML (the message gives ``source`` and the line) or an invalid or unknown key
        (the message gives ``source`` and the key path).
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RecordingFormatError(f"{source}: invalid TOML: {exc}") from None
    try:
        return AssetConfig.model_validate(data)
    except ValidationError as exc:
        problems = "; ".join(
            f"key {'.'.join(str(p) for p in err['loc']) or '<root>'}: {err['msg']}"
            for err in exc.errors()
        )
        raise RecordingFormatError(f"{source}: {problems}") from None


def write_asset_toml(path: str | os.PathLike[str], asset: AssetConfig) -> Path:
    """Write ``asset`` to ``path`` as TOML and return the path."""
    target = Path(path)
    _write_atomic(target, asset_to_toml(asset).encode())
    return target


def read_asset_toml(path: str | os.PathLike[str]) -> AssetConfig:
    """Read an asset configuration written by `write_asset_toml` (or by hand)."""
    source = Path(path)
    try:
        text = source.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise FileNotFoundError(f"asset file not found: {source}") from None
    return asset_from_toml(text, source=str(source))


# ---------------------------------------------------------------------------- recordings
def _write_atomic(target: Path, payload: bytes) -> None:
    tmp = target.with_name(f".{target.name}.tmp")
    tmp.write_bytes(payload)
    os.replace(tmp, target)


def _stem(ws: WindowSet) -> str:
    start = require_utc(ws.start, "window_set.start")
    micros = f".{start.microsecond:06d}" if start.microsecond else ""
    return f"{ws.asset_id}_{start:%Y%m%dT%H%M%S}{micros}Z"


def _iso(t: datetime) -> str:
    return require_utc(t).isoformat().replace("+00:00", "Z")


def _plain(value: object) -> object:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    return value


def _rate_groups(ws: WindowSet) -> list[tuple[float, list[ChannelWindow]]]:
    groups: dict[tuple[float, int], list[ChannelWindow]] = {}
    for window in ws.channels.values():
        groups.setdefault((window.fs, len(window.samples)), []).append(window)
    return [(fs, members) for (fs, _), members in groups.items()]


def _file_name(stem: str, fs: float, taken: set[str], fmt: str) -> str:
    base = f"{stem}_{fs:g}hz"
    name, k = f"{base}.{fmt}", 2
    while name in taken:  # same rate, different window length
        name, k = f"{base}-{k}.{fmt}", k + 1
    taken.add(name)
    return name


def write_recording(
    folder: str | os.PathLike[str], window_set: WindowSet, *, fmt: RecordingFormat = "npy"
) -> RecordingEntry:
    """Write one window set into ``folder`` and append its line to ``labels.jsonl``.

    Returns the ``labels.jsonl`` entry. Refuses to overwrite an existing recording.

    Raises
    ------
    ValueError
        If ``fmt`` is not one of ``"npy"``, ``"csv"``.
    FileExistsError
        If a file of this recording already exists.
    """
    if fmt not in RECORDING_FORMATS:
        raise ValueError(f"fmt must be one of {list(RECORDING_FORMATS)}, got {fmt!r}")
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    stem = _stem(window_set)
    files: list[RecordingFile] = []
    taken: set[str] = set()
    for fs, members in _rate_groups(window_set):
        name = _file_name(stem, fs, taken, fmt)
        target = out / name
        if target.exists():
            raise FileExistsError(f"recording file already exists, not overwriting: {target}")
        columns = [w.channel for w in members]
        table = np.column_stack([np.asarray(w.samples, dtype=float) for w in members])
        tmp = target.with_name(f".{name}.tmp")
        if fmt == "npy":
            with tmp.open("wb") as fh:
                np.save(fh, table)
        else:
            np.savetxt(
                tmp, table, delimiter=",", header=",".join(columns), comments="", fmt="%.10g"
            )
        os.replace(tmp, target)
        files.append({"file": name, "fs_hz": float(fs), "channels": columns})
    entry: RecordingEntry = {
        "recording": stem,
        "asset_id": window_set.asset_id,
        "start": _iso(window_set.start),
        "format": fmt,
        "files": files,
        "process": {str(k): float(v) for k, v in window_set.process.items()},
        "labels": {str(k): _plain(v) for k, v in window_set.labels.items()},
    }
    with (out / LABELS_FILE).open("a", encoding="utf-8") as fh:
        fh.write(json.dumps(entry, allow_nan=True) + "\n")
    return entry


def record_simulation(
    simulator: PumpSimulator,
    folder: str | os.PathLike[str],
    *,
    start: datetime,
    end: datetime,
    interval: timedelta,
    fmt: RecordingFormat = "npy",
) -> int:
    """Simulate windows every ``interval`` over ``[start, end)`` into ``folder``.

    Writes ``asset.toml`` (or checks that an existing one describes the same asset) and one
    recording per window set. Returns the number of recordings written.
    """
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    asset_file = out / ASSET_FILE
    if asset_file.exists():
        existing = read_asset_toml(asset_file)
        if existing != simulator.asset:
            raise ValueError(
                f"{asset_file} describes asset {existing.asset_id!r} with a different "
                f"configuration than the simulated {simulator.asset.asset_id!r}; use a new folder"
            )
    else:
        write_asset_toml(asset_file, simulator.asset)
    count = 0
    for window_set in simulator.windows(start, end, interval=interval):
        write_recording(out, window_set, fmt=fmt)
        count += 1
    return count


def _load_table(path: Path, fmt: str, columns: list[str]) -> npt.NDArray[np.float64]:
    if not path.exists():
        raise RecordingFormatError(f"{path}: recording file listed in {LABELS_FILE} is missing")
    try:
        if fmt == "npy":
            table = np.load(path, allow_pickle=False)
        else:
            with path.open(encoding="utf-8") as fh:
                header = fh.readline().strip().split(",")
            if header != columns:
                raise RecordingFormatError(
                    f"{path}: header {header} does not match the channels {columns} "
                    f"in {LABELS_FILE}"
                )
            table = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2)
    except (OSError, ValueError, EOFError) as exc:
        if isinstance(exc, RecordingFormatError):
            raise
        raise RecordingFormatError(f"{path}: not a readable .{fmt} table ({exc})") from None
    table = np.asarray(table, dtype=float)
    if table.ndim == 1:
        table = table[:, None]
    if table.ndim != 2 or table.shape[1] != len(columns):
        raise RecordingFormatError(
            f"{path}: expected {len(columns)} columns {columns}, got shape {table.shape}"
        )
    return table


def read_recordings(folder: str | os.PathLike[str]) -> Iterator[WindowSet]:
    """Read back every recording in ``folder`` in ``labels.jsonl`` order.

    Channel kinds and units come from the folder's ``asset.toml``.

    Raises
    ------
    FileNotFoundError
        If ``asset.toml`` or ``labels.jsonl`` is missing.
    RecordingFormatError
        If a line of ``labels.jsonl`` or a recording file does not match the format.
    """
    root = Path(folder)
    asset = read_asset_toml(root / ASSET_FILE)
    labels_path = root / LABELS_FILE
    if not labels_path.exists():
        raise FileNotFoundError(f"labels file not found: {labels_path}")
    configured = {c.name: c for c in asset.channels}
    with labels_path.open(encoding="utf-8") as fh:
        for line_no, line in enumerate(fh, start=1):
            if not line.strip():
                continue
            where = f"{labels_path}:{line_no}"
            try:
                entry = json.loads(line)
                start = datetime.fromisoformat(entry["start"].replace("Z", "+00:00"))
                fmt = entry["format"]
                files = list(entry["files"])
            except (json.JSONDecodeError, KeyError, TypeError, AttributeError, ValueError) as exc:
                raise RecordingFormatError(f"{where}: not a recording entry ({exc})") from None
            if start.tzinfo is None:
                raise RecordingFormatError(f"{where}: start must be UTC with 'Z', got {start}")
            if fmt not in RECORDING_FORMATS:
                raise RecordingFormatError(
                    f"{where}: format must be one of {list(RECORDING_FORMATS)}, got {fmt!r}"
                )
            if entry.get("asset_id", asset.asset_id) != asset.asset_id:
                raise RecordingFormatError(
                    f"{where}: recording of asset {entry.get('asset_id')!r}, but "
                    f"{root / ASSET_FILE} describes {asset.asset_id!r}"
                )
            channels: dict[str, ChannelWindow] = {}
            for spec in files:
                try:
                    columns = [str(c) for c in spec["channels"]]
                    file_name, fs_hz = str(spec["file"]), float(spec["fs_hz"])
                except (KeyError, TypeError, ValueError) as exc:
                    raise RecordingFormatError(
                        f"{where}: each file needs 'file', 'fs_hz' and 'channels' ({exc!r})"
                    ) from None
                unknown = [c for c in columns if c not in configured]
                if unknown:
                    raise RecordingFormatError(
                        f"{where}: channels {unknown} are not in {root / ASSET_FILE}"
                    )
                table = _load_table(root / file_name, fmt, columns)
                for k, name in enumerate(columns):
                    cfg = configured[name]
                    if not math.isclose(fs_hz, cfg.fs_hz):
                        raise RecordingFormatError(
                            f"{where}: channel {name!r} recorded at {fs_hz:g} Hz, but "
                            f"{root / ASSET_FILE} configures {cfg.fs_hz:g} Hz"
                        )
                    channels[name] = ChannelWindow(
                        channel=name,
                        kind=cfg.kind,
                        fs=fs_hz,
                        samples=np.ascontiguousarray(table[:, k]),
                        unit=cfg.unit,
                    )
            ordered = {c.name: channels[c.name] for c in asset.channels if c.name in channels}
            yield WindowSet(
                asset_id=asset.asset_id,
                start=start.astimezone(UTC),
                channels=ordered,
                process=dict(entry.get("process", {})),
                labels=dict(entry.get("labels", {})),
            )
