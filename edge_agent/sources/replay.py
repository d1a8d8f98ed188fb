"""Replay of recordings kept in a folder, at a chosen pace; the files are left in place."""

from __future__ import annotations

import logging
from collections.abc import Iterable
from datetime import datetime
from pathlib import Path

from edge_agent.assets import AssetConfig
from edge_agent.sources.recordings import RecordingError, parse_recording_name, read_recording
from edge_agent.windows import WindowSet

__all__ = ["ReplaySource"]

log = logging.getLogger("edge_agent.sources")


class ReplaySource:
    """Recordings of each asset in time order, spaced as recorded divided by ``pace``.

    The first recording of an asset comes at the first tick; a later one comes at the first tick
    at least ``(t_recording - t_first) / pace`` after that. ``pace=0`` hands over every remaining
    recording at once. Window starts are the recorded times. An unreadable recording is logged
    and skipped.
    """

    def __init__(self, folder: Path, assets: Iterable[AssetConfig], *, pace: float = 1.0) -> None:
        if pace < 0:
            raise ValueError(f"pace must be >= 0, got {pace!r}")
        self.folder = Path(folder)
        self.pace = pace
        self._queue: dict[str, list[tuple[datetime, Path]]] = {a.asset_id: [] for a in assets}
        for p in sorted(self.folder.iterdir()):
            name = parse_recording_name(p.name)
            if name is not None and name.asset_id in self._queue and p.is_file():
                self._queue[name.asset_id].append((name.start, p))
        for q in self._queue.values():
            q.sort()
        self._origin: dict[str, tuple[datetime, datetime]] = {}

    def remaining(self, asset_id: str) -> int:
        return len(self._queue.get(asset_id, ()))

    def windows(self, asset: AssetConfig, due: datetime) -> Iterable[WindowSet]:
        q = self._queue.get(asset.asset_id, [])
        if not q:
            return []
        first_rec, first_due = self._origin.setdefault(asset.asset_id, (q[0][0], due))
        out = []
        while q:
            rec_t, p = q[0]
            if self.pace > 0 and (rec_t - first_rec) / self.pace > due - first_due:
                break
            q.pop(0)
            try:
                out.append(read_recording(p, asset))
            except (RecordingError, OSError) as exc:
                log.warning(
                    "recording skipped", extra={"fields": {"file": p.name, "reason": str(exc)}}
                )
        return out

    def settle(self, window_set: WindowSet, error: str | None) -> None:
        pass

    def close(self) -> None:
        pass
