"""``wellspan extract RECORDING`` — the indicators of one recording, as a table or as JSON.

Examples::

    wellspan extract pump.wav --rpm 1780 --bearing 9,7.94,39.04,0
    wellspan extract window.npy --rate 25600 --rpm 1780 --channel de_accel --channel nde_accel
    wellspan extract MAL-P1_20260301T000000Z_25600hz.npy --asset asset.toml --json
"""

from __future__ import annotations

import argparse
import math
from datetime import UTC, datetime
from pathlib import Path
from uuid import uuid4

from pydantic import ValidationError

from edge_agent.assets import AssetConfig, BearingGeometry, ChannelConfig
from edge_agent.recording_files import RecordingFileError, load_recording_file
from edge_agent.windows import ChannelWindow, WindowSet
from shared_schema import to_readable
from wellspan.clikit import EXIT_OK, UsageError, print_json, print_table

__all__ = ["add_arguments", "run"]

_DEFAULT_CHANNELS = ("de_accel", "nde_accel")


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recording", type=Path, help="a .wav, .csv or .npy file, one column per channel")
    p.add_argument(
        "--rate", type=float, metavar="HZ", help="sample rate (WAV files carry their own)"
    )
    p.add_argument("--rpm", type=float, metavar="RPM", help="nominal shaft speed")
    p.add_argument(
        "--bearing",
        metavar="N,d,D,ANGLE",
        help="rolling elements, element and pitch diameters in mm, contact angle in degrees",
    )
    p.add_argument("--asset", type=Path, metavar="FILE", help="an asset configuration (TOML)")
    p.add_argument(
        "--channel",
        action="append",
        metavar="NAME",
        help="name of the next column (repeat per column); default de_accel, nde_accel, ...",
    )
    p.add_argument(
        "--json", action="store_true", help="print the readable JSON form of the message"
    )


def _one_line(exc: ValidationError) -> str:
    err = exc.errors()[0]
    where = ".".join(str(p) for p in err["loc"])
    return f"{where}: {err['msg']}" if where else err["msg"]


def _bearing(text: str) -> BearingGeometry:
    parts = text.split(",")
    if len(parts) != 4:
        raise UsageError(f"--bearing takes N,d,D,ANGLE (4 numbers), got {text!r}")
    try:
        n, d, pitch, angle = (float(x) for x in parts)
    except ValueError:
        raise UsageError(f"--bearing takes numbers, got {text!r}") from None
    if n != int(n):
        raise UsageError(f"--bearing: the number of rolling elements must be whole, got {n:g}")
    try:
        return BearingGeometry(
            n_elements=int(n),
            element_diameter_mm=d,
            pitch_diameter_mm=pitch,
            contact_angle_deg=angle,
        )
    except ValidationError as exc:
        raise UsageError(f"--bearing: {_one_line(exc)}") from None


def _asset_from_args(args: argparse.Namespace, n_columns: int, fs: float) -> AssetConfig:
    names = list(args.channel or [])
    if names and len(names) != n_columns:
        raise UsageError(
            f"the recording has {n_columns} column(s) but {len(names)} --channel name(s) were given"
        )
    if not names:
        names = [
            _DEFAULT_CHANNELS[i] if i < len(_DEFAULT_CHANNELS) else f"accel_{i + 1}"
            for i in range(n_columns)
        ]
    bearings = {"bearing": _bearing(args.bearing)} if args.bearing else {}
    rpm = args.rpm if args.rpm is not None else 1780.0
    try:
        return AssetConfig(
            asset_id="recording",
            nominal_speed_rpm=rpm,
            speed_range_rpm=(rpm * 0.5, rpm * 1.5),
            bearings=bearings,
            channels=tuple(
                ChannelConfig(
                    name=name,
                    kind="accel",
                    unit="g",
                    fs_hz=fs,
                    window_s=60.0,
                    bearing="bearing" if bearings else None,
                )
                for name in names
            ),
        )
    except ValidationError as exc:
        raise UsageError(_one_line(exc)) from None


def _read_asset(path: Path) -> AssetConfig:
    from edge_agent.simulator.recording import RecordingFormatError, read_asset_toml

    try:
        return read_asset_toml(path)
    except FileNotFoundError:
        raise UsageError(f"--asset: no such file: {path}") from None
    except RecordingFormatError as exc:
        raise UsageError(str(exc)) from None


def _window_set(args: argparse.Namespace) -> tuple[AssetConfig, WindowSet]:
    try:
        rec = load_recording_file(args.recording)
    except RecordingFileError as exc:
        raise UsageError(str(exc)) from None
    if args.rate is not None and not (math.isfinite(args.rate) and args.rate > 0):
        raise UsageError(f"--rate must be a positive number of Hz, got {args.rate:g}")
    if rec.fs is not None and args.rate is not None and abs(rec.fs - args.rate) > 1e-9:
        raise UsageError(
            f"--rate {args.rate:g} Hz contradicts the {rec.fs:g} Hz stored in {args.recording}"
        )
    n_columns = rec.table.shape[1]
    names = args.channel or (list(rec.columns) if rec.columns else None)
    if args.asset is not None:
        asset = _read_asset(args.asset)
        if names is None:
            names = [c.name for c in asset.channels if c.kind == "accel"][:n_columns]
        unknown = [n for n in names if n not in {c.name for c in asset.channels}]
        if unknown:
            raise UsageError(f"channels {unknown} are not in the asset file {args.asset}")
        if len(names) != n_columns:
            raise UsageError(f"the recording has {n_columns} column(s), names given: {names}")
        fs = rec.fs or args.rate or asset.channel(names[0]).fs_hz
        configs = [asset.channel(n) for n in names]
        wrong = [c.name for c in configs if abs(c.fs_hz - fs) > 1e-9]
        if wrong and args.rate is None and rec.fs is None:
            raise UsageError(
                f"channels {wrong} have other sample rates in {args.asset}; give --rate"
            )
        channels = tuple(
            c.model_copy(update={"fs_hz": fs, "window_s": 60.0}) if c.name in names else c
            for c in asset.channels
        )
        asset = asset.model_copy(update={"channels": channels})
    else:
        fs = rec.fs or args.rate
        if fs is None:
            raise UsageError(f"{args.recording.suffix} files carry no sample rate; give --rate HZ")
        if args.channel is None and rec.columns is not None:
            args.channel = list(rec.columns)
        asset = _asset_from_args(args, n_columns, fs)
        names = [c.name for c in asset.channels]
    if rec.table.shape[0] / fs > 60.0:
        raise UsageError(
            f"the recording lasts {rec.table.shape[0] / fs:.1f} s; extract takes windows up to 60 s"
        )
    windows = {
        name: ChannelWindow(
            channel=name,
            kind=asset.channel(name).kind,
            fs=fs,
            samples=rec.table[:, i],
            unit=asset.channel(name).unit,
        )
        for i, name in enumerate(names)
    }
    return asset, WindowSet(asset_id=asset.asset_id, start=datetime.now(UTC), channels=windows)


def run(args: argparse.Namespace) -> int:
    from edge_agent.extractor import Extractor

    asset, window_set = _window_set(args)
    try:
        extractor = Extractor(asset)
        message = extractor.extract(
            window_set, gateway_id="local", site="local", sequence=0, message_id=uuid4()
        )
    except ValueError as exc:
        raise UsageError(str(exc).splitlines()[0]) from None
    layout = extractor.layout
    if args.json:
        print_json(to_readable(message, layout))
        return EXIT_OK
    op = message.operating
    if op.shaft_speed_hz is not None:
        print(
            f"shaft speed {op.shaft_speed_hz:.3f} Hz ({op.shaft_speed_hz * 60:.1f} rpm, "
            f"from {op.shaft_speed_source})"
        )
    for q in message.quality:
        spikes = f", {q.spikes_removed} spikes removed" if q.spikes_removed else ""
        print(f"quality {q.channel}: {', '.join(sorted(q.flags))}{spikes}")
    rows = [
        (spec.name, spec.unit, value)
        for spec, value in zip(layout.indicators, message.values, strict=True)
    ]
    print_table(("indicator", "unit", "value"), rows)
    return EXIT_OK
