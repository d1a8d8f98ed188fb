"""Labels from maintenance history: the operator's own windows become training rows.

A failure, repair or replacement that names a failure mode labels the windows shortly before it
with that mode; a repair or replacement labels the windows shortly after it (once the machine
has settled) as healthy. Windows outside these spans stay unlabelled, and a window that two
events would label differently is left unlabelled rather than guessed.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime, timedelta

import numpy as np
from numpy.typing import NDArray

from prognosis_service.diagnosis.evidence import DIAGNOSED_MODES
from shared_schema import MaintenanceEvent, MaintenanceKind

__all__ = ["label_maintenance_history"]

_LABELLING_KINDS = frozenset(
    {MaintenanceKind.FAILURE, MaintenanceKind.REPAIR, MaintenanceKind.REPLACEMENT}
)
_RENEWING_KINDS = frozenset({MaintenanceKind.REPAIR, MaintenanceKind.REPLACEMENT})


def _epoch(t: datetime, what: str) -> float:
    if not isinstance(t, datetime):
        raise TypeError(f"{what} must be a datetime; got {type(t).__name__}")
    if t.tzinfo is None or t.utcoffset() is None:
        raise ValueError(f"{what} must be timezone-aware (UTC); got naive {t.isoformat()}")
    return t.timestamp()


def _positive(name: str, value: timedelta) -> float:
    if not isinstance(value, timedelta) or value < timedelta(0):
        raise ValueError(f"{name} must be a timedelta >= 0; got {value!r}")
    return value.total_seconds()


def label_maintenance_history(
    timestamps: Sequence[datetime],
    events: Sequence[MaintenanceEvent],
    *,
    asset_id: str | None = None,
    lookback: timedelta = timedelta(days=14),
    settle: timedelta = timedelta(days=1),
    healthy_span: timedelta = timedelta(days=14),
) -> NDArray:
    """Label one asset's windows from its maintenance events.

    Parameters
    ----------
    timestamps : sequence of datetime
        Start of each window (timezone-aware), any order.
    events : sequence of MaintenanceEvent
        The asset's maintenance events. Failures, repairs and replacements whose
        ``failure_mode`` is a diagnosed fault label the windows in ``[at - lookback, at)`` with
        it, but never windows before the previous repair or replacement. Repairs and
        replacements label ``[at + settle, at + settle + healthy_span)`` healthy, up to the
        start of the next event's fault span. Inspections, and ``failure_mode`` "other" or
        unset, label nothing before the event.
    asset_id : str, optional
        Keep only the events of this asset; without it every event must be of one asset.
    lookback, settle, healthy_span : timedelta
        Span before a failure or repair that shows the fault; time after a repair before the
        machine counts as settled; span after that labelled healthy.

    Returns
    -------
    ndarray of object, shape (n_windows,)
        The fault mode of each window (``"healthy"``, ``"outer_race"``, ...) or None.

    Examples
    --------
    >>> from datetime import UTC
    >>> t0 = datetime(2026, 3, 1, tzinfo=UTC)
    >>> times = [t0 + timedelta(days=d) for d in (0, 10, 19, 21, 25, 40)]
    >>> repair = MaintenanceEvent(asset_id="MAL-P2", at=t0 + timedelta(days=20),
    ...                           kind="repair", failure_mode="outer_race")
    >>> label_maintenance_history(times, [repair]).tolist()
    [None, 'outer_race', 'outer_race', 'healthy', 'healthy', None]
    """
    look = _positive("lookback", lookback)
    settle_s = _positive("settle", settle)
    span = _positive("healthy_span", healthy_span)
    t = np.array([_epoch(x, f"timestamps[{i}]") for i, x in enumerate(timestamps)], dtype=float)
    chosen = [e for e in events if asset_id is None or e.asset_id == asset_id]
    assets = {e.asset_id for e in chosen}
    if len(assets) > 1:
        raise ValueError(
            f"events belong to several assets {sorted(assets)}; pass asset_id to choose one"
        )
    chosen = sorted(chosen, key=lambda e: e.at)
    labels: list[set[str]] = [set() for _ in range(t.size)]
    fault_modes = set(DIAGNOSED_MODES) - {"healthy"}

    # Where each event's span of "not healthy" starts: its fault span, or the event itself for a
    # failure, repair or replacement without a diagnosed mode; inspections change nothing.
    boundaries: list[float | None] = []
    previous_renewal = -np.inf
    for e in chosen:
        at = e.at.timestamp()
        start = max(at - look, previous_renewal)
        mode = None if e.failure_mode is None else str(e.failure_mode)
        if e.kind in _LABELLING_KINDS and mode in fault_modes:
            for i in np.flatnonzero((t >= start) & (t < at)):
                labels[i].add(str(mode))
            boundaries.append(start)
        else:
            boundaries.append(at if e.kind in _LABELLING_KINDS else None)
        if e.kind in _RENEWING_KINDS:
            previous_renewal = at

    for k, e in enumerate(chosen):
        if e.kind not in _RENEWING_KINDS:
            continue
        begin = e.at.timestamp() + settle_s
        later = [b for b in boundaries[k + 1 :] if b is not None]
        end = min([begin + span, *later])
        for i in np.flatnonzero((t >= begin) & (t < end)):
            labels[i].add("healthy")

    out = np.empty(t.size, dtype=object)
    for row, found in enumerate(labels):
        out[row] = next(iter(found)) if len(found) == 1 else None
    return out
