"""Reading one recording file as a table of channels: ``.wav``, ``.csv`` or ``.npy``.

One column per channel. WAV files carry their own sample rate; CSV and NPY files do not. A CSV
file may start with a header row of channel names.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import numpy.typing as npt

__all__ = ["RECORDING_SUFFIXES", "RecordingFile", "RecordingFileError", "load_recording_file"]

RECORDING_SUFFIXES = (".wav", ".csv", ".npy")


class RecordingFileError(ValueError):
    """A recording file that cannot be read; the message names the file and the problem."""


@dataclass(frozen=True, slots=True)
class RecordingFile:
    """The samples of a recording: shape (samples, channels), float64, NaN for lost samples."""

    path: Path
    table: npt.NDArray[np.float64]
    fs: float | None  # from the file itself (WAV), else None
    columns: tuple[str, ...] | None  # from a CSV header, else None


def _wav(path: Path) -> RecordingFile:
    from scipy.io import wavfile

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", wavfile.WavFileWarning)
            fs, data = wavfile.read(path)
    except (ValueError, OSError, EOFError) as exc:
        raise RecordingFileError(f"{path}: not a readable WAV file ({exc})") from None
    table = np.asarray(data)
    if np.issubdtype(table.dtype, np.integer):
        # Integer PCM is scaled to ±1 full scale; the channel sensitivity converts to units.
        info = np.iinfo(table.dtype)
        table = table.astype(float) / max(abs(info.min), info.max)
    return RecordingFile(path, _two_d(path, table), float(fs), None)


def _two_d(path: Path, table: npt.ArrayLike) -> npt.NDArray[np.float64]:
    try:
        arr = np.asarray(table, dtype=float)
    except (TypeError, ValueError):
        raise RecordingFileError(f"{path}: values are not numbers") from None
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2 or arr.shape[0] == 0 or arr.shape[1] == 0:
        raise RecordingFileError(
            f"{path}: expected a table of samples x channels, got shape {arr.shape}"
        )
    if arr.shape[1] > arr.shape[0]:
        raise RecordingFileError(
            f"{path}: {arr.shape[1]} columns but only {arr.shape[0]} rows; "
            "expected one column per channel"
        )
    return arr


def _csv(path: Path) -> RecordingFile:
    try:
        with path.open(encoding="utf-8") as fh:
            first = fh.readline()
    except (OSError, UnicodeDecodeError) as exc:
        raise RecordingFileError(f"{path}: not a readable CSV file ({exc})") from None
    cells = [c.strip() for c in first.split(",")]
    try:
        [float(c) for c in cells]
        header = None
    except ValueError:
        header = tuple(cells)
    try:
        table = np.loadtxt(path, delimiter=",", skiprows=1 if header else 0, ndmin=2)
    except ValueError as exc:
        raise RecordingFileError(f"{path}: not a numeric CSV table ({exc})") from None
    arr = _two_d(path, table)
    if header is not None and len(header) != arr.shape[1]:
        raise RecordingFileError(
            f"{path}: header names {len(header)} columns, the rows have {arr.shape[1]}"
        )
    return RecordingFile(path, arr, None, header)


def _npy(path: Path) -> RecordingFile:
    try:
        table = np.load(path, allow_pickle=False)
    except (ValueError, OSError, EOFError) as exc:
        raise RecordingFileError(f"{path}: not a readable .npy array ({exc})") from None
    return RecordingFile(path, _two_d(path, table), None, None)


_READERS = {".wav": _wav, ".csv": _csv, ".npy": _npy}


def load_recording_file(path: str | Path) -> RecordingFile:
    """Read a recording file by its suffix.

    Raises
    ------
    RecordingFileError
        If the file is missing, of an unsupported type, or not a numeric table.
    """
    p = Path(path)
    reader = _READERS.get(p.suffix.lower())
    if reader is None:
        raise RecordingFileError(
            f"{p}: unsupported recording type {p.suffix!r}; expected one of {RECORDING_SUFFIXES}"
        )
    if not p.is_file():
        raise RecordingFileError(f"{p}: no such file")
    return reader(p)
