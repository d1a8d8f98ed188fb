"""The contract between the agent and anything that produces raw windows."""

from __future__ import annotations

from collections.abc import Iterable
from datetime import datetime
from typing import Protocol, runtime_checkable

from edge_agent.assets import AssetConfig
from edge_agent.windows import WindowSet

__all__ = ["RecoverableSource", "WindowSource"]


@runtime_checkable
class WindowSource(Protocol):
    """A data-acquisition source: a DAQ driver, the simulator, a drop folder, a replay.

    The scheduler calls :meth:`windows` for each asset at each of its scheduled ticks. A driver
    that acquires on demand returns one window set taken at ``due``; an event-driven source
    returns whatever arrived for the asset since the last call (possibly nothing). Every window
    set returned is later passed to :meth:`settle` exactly once: with ``error=None`` once it has
    been handled durably (queued, or deliberately not sent under report-by-exception), or with
    a one-line reason when it could not be processed.
    """

    def windows(self, asset: AssetConfig, due: datetime) -> Iterable[WindowSet]: ...

    def settle(self, window_set: WindowSet, error: str | None) -> None: ...

    def close(self) -> None: ...


@runtime_checkable
class RecoverableSource(WindowSource, Protocol):
    """A source whose inputs must be taken exactly once across crashes (e.g. a drop folder).

    The agent stores :meth:`marks` of the window sets it commits in the same outbox transaction,
    and hands the marks of the last commit to :meth:`recover` when it starts again, so inputs
    that were committed but not yet settled before a crash are settled instead of taken twice.
    """

    def marks(self, window_sets: Iterable[WindowSet]) -> list[str]: ...

    def recover(self, marks: Iterable[str]) -> None: ...
