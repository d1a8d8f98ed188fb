"""A drop folder: recordings written by another program, each picked up once.

Processed files move to ``done/``; unusable ones to ``failed/`` beside a ``<name>.reason.txt``
holding the one-line reason. A bad file never stops the agent. The names of the files whose
windows the agent committed are stored with them in the outbox, so a file committed just before a
crash (and not yet moved) is moved to ``done/`` after restart instead of being processed twice.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable
from datetime import datetime
from pathlib import Path

from edge_agent.assets import AssetConfig
from edge_agent.sources.recordings import (
    RECORDING_SUFFIXES,
    RecordingError,
    parse_recording_name,
    read_recording,
)
from edge_agent.windows import WindowSet

__all__ = ["DropFolderSource"]

log = logging.getLogger("edge_agent.sources")


def _ignored(p: Path) -> bool:
    return (
        not p.is_file()
        or p.name.startswith(".")
        or p.suffix in (".tmp", ".part")
        or p.name.endswith(".reason.txt")
    )


class DropFolderSource:
    """Recordings appearing in ``folder``; see :mod:`edge_agent.sources.recordings` for formats."""

    def __init__(self, folder: Path, assets: Iterable[AssetConfig]) -> None:
        self.folder = Path(folder)
        self.done_dir = self.folder / "done"
        self.failed_dir = self.folder / "failed"
        for d in (self.folder, self.done_dir, self.failed_dir):
            d.mkdir(parents=True, exist_ok=True)
        self._assets = {a.asset_id: a for a in assets}
        self._pending: dict[int, Path] = {}
        self._claimed: set[Path] = set()

    def _scan(self, asset_id: str) -> list[Path]:
        found = []
        for p in sorted(self.folder.iterdir()):
            if _ignored(p) or p in self._claimed:
                continue
            name = parse_recording_name(p.name)
            if name is None:
                pattern = f"{{asset_id}}_{{YYYYMMDDTHHMMSS}}Z{p.suffix}"
                reason = (
                    f"unsupported suffix {p.suffix!r} (expected one of {list(RECORDING_SUFFIXES)})"
                    if p.suffix not in RECORDING_SUFFIXES
                    else f"file name {p.name!r} is not '{pattern}'"
                )
                self._fail(p, reason)
            elif name.asset_id not in self._assets:
                self._fail(
                    p,
                    f"asset {name.asset_id!r} is not configured on this gateway "
                    f"({sorted(self._assets)})",
                )
            elif name.asset_id == asset_id:
                found.append((name.start, p))
        return [p for _, p in sorted(found)]

    def windows(self, asset: AssetConfig, due: datetime) -> Iterable[WindowSet]:
        out = []
        for p in self._scan(asset.asset_id):
            try:
                ws = read_recording(p, asset)
            except RecordingError as exc:
                self._fail(p, str(exc))
                continue
            except Exception as exc:  # a bad file must never stop the agent
                self._fail(p, f"unexpected error reading the file: {type(exc).__name__}: {exc}")
                continue
            self._pending[id(ws)] = p
            self._claimed.add(p)
            out.append(ws)
        return out

    def settle(self, window_set: WindowSet, error: str | None) -> None:
        p = self._pending.pop(id(window_set), None)
        if p is None:
            return
        self._claimed.discard(p)
        if error is None:
            self._move(p, self.done_dir)
        else:
            self._fail(p, error)

    def _move(self, p: Path, folder: Path) -> Path | None:
        target = folder / p.name
        try:
            p.replace(target)
        except OSError as exc:
            log.error("could not move %s to %s: %s", p, folder, exc)
            return None
        return target

    def _fail(self, p: Path, reason: str) -> None:
        log.warning("recording refused", extra={"fields": {"file": p.name, "reason": reason}})
        if self._move(p, self.failed_dir) is not None:
            try:
                (self.failed_dir / f"{p.name}.reason.txt").write_text(reason + "\n", "utf-8")
            except OSError as exc:
                log.error("could not write the reason for %s: %s", p.name, exc)

    def marks(self, window_sets: Iterable[WindowSet]) -> list[str]:
        return [p.name for ws in window_sets if (p := self._pending.get(id(ws))) is not None]

    def recover(self, marks: Iterable[str]) -> None:
        for name in marks:
            p = self.folder / name
            if p.is_file():
                log.info(
                    "recording already queued before a restart", extra={"fields": {"file": name}}
                )
                self._move(p, self.done_dir)

    def close(self) -> None:
        self._pending.clear()
        self._claimed.clear()
