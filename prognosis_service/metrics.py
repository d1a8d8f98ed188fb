"""Prometheus text exposition (format 0.0.4), written by hand: counters, gauges, one histogram."""

from __future__ import annotations

import bisect
import threading
from collections import defaultdict
from collections.abc import Callable

__all__ = ["METRICS", "Metrics"]

LATENCY_BUCKETS_S = (0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0)

_HELP = {
    "wellspan_ingest_messages_total": ("counter", "Inbound messages by source, kind and result."),
    "wellspan_quarantine_total": ("counter", "Messages put in quarantine, by reason."),
    "wellspan_ingest_batches_total": ("counter", "Write transactions committed by ingest."),
    "wellspan_ingest_batch_failures_total": ("counter", "Write transactions that failed."),
    "wellspan_ingest_queue_depth": ("gauge", "Messages received but not yet committed."),
    "wellspan_ingest_lag_seconds": ("gauge", "Arrival-to-commit delay of the last batch."),
    "wellspan_broker_connected": ("gauge", "1 when the ingest is connected to the broker."),
}


def _labels(labels: tuple[tuple[str, str], ...]) -> str:
    if not labels:
        return ""
    inner = ",".join(
        f'{k}="{v.replace(chr(92), chr(92) * 2).replace(chr(34), chr(92) + chr(34))}"'
        for k, v in labels
    )
    return "{" + inner + "}"


class Metrics:
    """Thread-safe metric registry of one process."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._values: dict[str, dict[tuple[tuple[str, str], ...], float]] = defaultdict(dict)
        self._hist_counts = [0] * (len(LATENCY_BUCKETS_S) + 1)
        self._hist_sum = 0.0
        self._gauge_fns: dict[str, Callable[[], float]] = {}

    def inc(self, name: str, amount: float = 1.0, **labels: str) -> None:
        key = tuple(sorted(labels.items()))
        with self._lock:
            series = self._values[name]
            series[key] = series.get(key, 0.0) + amount

    def set(self, name: str, value: float, **labels: str) -> None:
        with self._lock:
            self._values[name][tuple(sorted(labels.items()))] = value

    def gauge_fn(self, name: str, fn: Callable[[], float]) -> None:
        """A gauge read when scraped (e.g. queue depth)."""
        with self._lock:
            self._gauge_fns[name] = fn

    def observe_batch_latency(self, seconds: float) -> None:
        with self._lock:
            self._hist_counts[bisect.bisect_left(LATENCY_BUCKETS_S, seconds)] += 1
            self._hist_sum += seconds

    def value(self, name: str, **labels: str) -> float:
        with self._lock:
            return self._values.get(name, {}).get(tuple(sorted(labels.items())), 0.0)

    def render(self) -> str:
        lines: list[str] = []
        with self._lock:
            values = {k: dict(v) for k, v in self._values.items()}
            fns = dict(self._gauge_fns)
            counts = list(self._hist_counts)
            total = self._hist_sum
        for name, fn in fns.items():
            try:
                values.setdefault(name, {})[()] = float(fn())
            except Exception:  # a gauge that cannot be read is left out, never breaks a scrape
                continue
        for name in sorted(set(values) | set(_HELP)):
            kind, help_text = _HELP.get(name, ("untyped", name))
            lines.append(f"# HELP {name} {help_text}")
            lines.append(f"# TYPE {name} {kind}")
            for labels, v in sorted(values.get(name, {}).items()):
                lines.append(f"{name}{_labels(labels)} {v:.17g}")
        name = "wellspan_ingest_batch_seconds"
        lines.append(f"# HELP {name} Time to decode and commit one ingest batch.")
        lines.append(f"# TYPE {name} histogram")
        cumulative = 0
        for bound, c in zip((*LATENCY_BUCKETS_S, float("inf")), counts, strict=True):
            cumulative += c
            le = "+Inf" if bound == float("inf") else f"{bound:g}"
            lines.append(f'{name}_bucket{{le="{le}"}} {cumulative}')
        lines.append(f"{name}_sum {total:.17g}")
        lines.append(f"{name}_count {cumulative}")
        return "\n".join(lines) + "\n"


METRICS = Metrics()
"""The process-wide registry that ingest and the API report to."""
