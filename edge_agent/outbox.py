"""The durable outbox: every encoded message lives here from creation until the broker's PUBACK.

SQLite in WAL mode with ``synchronous=FULL``: a message is committed (and fsynced) before it is
offered to the uplink, and deleted only once the broker acknowledged it, so a crash or power
loss loses nothing and corrupts nothing; after restart every remaining message is offered
again, in order (alarms first, then drop reports, then routine messages, each oldest first).
Writes are batched: one transaction per group of messages, one per group of acknowledgements.

Bound and thinning rule
-----------------------
The outbox is bounded by ``max_bytes``, counted as payload bytes plus an estimated
:data:`ROW_OVERHEAD` bytes per message. When a write takes it over the bound it *thins*: it picks
the UTC day (of the window start) whose routine indicator messages are densest -- the most
routine messages held for one asset on one day, the oldest day on a tie -- and drops every second
routine message of that day for each asset (the 2nd, 4th, ... in sequence order). It repeats
until the outbox is below 95 % of the bound. When no day holds two routine messages of one asset
any more, it drops the routine messages of the oldest day. History so stays spread out over the
whole outage, getting coarser evenly. Alarms and drop reports are never dropped; messages handed
to the uplink and not yet acknowledged are not touched. Each thinning pass queues a
:class:`DropReport` naming exactly the sequence numbers dropped and the count per asset.
"""

from __future__ import annotations

import sqlite3
import threading
import uuid
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from enum import IntEnum
from pathlib import Path

from shared_schema import DropReport, encode_json

__all__ = [
    "ROW_OVERHEAD",
    "THINNING_RULE",
    "NewMessage",
    "Outbox",
    "OutboxEntry",
    "OutboxError",
    "OutboxStats",
    "Priority",
]

ROW_OVERHEAD = 64
"""Estimated bytes a stored message costs beyond its payload (row header, columns, indices)."""

THINNING_RULE = (
    "outbox full: densest UTC day first (oldest on ties), every second routine message per "
    "asset dropped; alarms and drop reports never dropped"
)
_MAX_RANGES_PER_REPORT = 2000
_LOW_WATER = 0.95

_SCHEMA = """
CREATE TABLE IF NOT EXISTS message (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    priority INTEGER NOT NULL,
    kind TEXT NOT NULL,
    asset_id TEXT,
    sequence INTEGER,
    created_at REAL NOT NULL,
    day INTEGER NOT NULL,
    payload BLOB NOT NULL
);
CREATE INDEX IF NOT EXISTS message_queue ON message (priority, id);
CREATE INDEX IF NOT EXISTS message_routine_day ON message (priority, day, asset_id, sequence);
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
"""


class OutboxError(RuntimeError):
    """The outbox file cannot be used (corrupt, or it belongs to another gateway)."""


class Priority(IntEnum):
    """Queue order: lower goes first."""

    ALARM = 0
    REPORT = 1
    ROUTINE = 2


@dataclass(frozen=True, slots=True)
class NewMessage:
    """A message to store: ``kind`` is ``indicators``, ``alarm`` or ``dropped``."""

    kind: str
    payload: bytes
    created_at: datetime
    priority: Priority = Priority.ROUTINE
    asset_id: str | None = None
    sequence: int | None = None


@dataclass(frozen=True, slots=True)
class OutboxEntry:
    id: int
    priority: Priority
    kind: str
    asset_id: str | None
    sequence: int | None
    created_at: datetime
    payload: bytes


@dataclass(frozen=True, slots=True)
class OutboxStats:
    messages: int
    bytes: int
    oldest_created_at: datetime | None
    dropped_total: int
    next_sequence: int


def _epoch(t: datetime) -> float:
    return t.timestamp()


def _ranges(seqs: Sequence[int]) -> list[tuple[int, int]]:
    out: list[tuple[int, int]] = []
    for s in sorted(seqs):
        if out and s == out[-1][1] + 1:
            out[-1] = (out[-1][0], s)
        else:
            out.append((s, s))
    return out


class Outbox:
    """SQLite-backed durable queue of encoded messages (thread-safe: one lock, one connection).

    Parameters
    ----------
    path : path
        The database file (created with its folder if missing).
    gateway_id, site : str
        The owner; opening another gateway's outbox is refused.
    max_bytes : int
        The bound (see the module docs for how it is counted and enforced).
    """

    def __init__(self, path: str | Path, *, gateway_id: str, site: str, max_bytes: int) -> None:
        self.path = Path(path)
        self.gateway_id = gateway_id
        self.site = site
        self.max_bytes = max_bytes
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._lock = threading.RLock()
        try:
            self._db = sqlite3.connect(self.path, isolation_level=None, check_same_thread=False)
            mode = self._db.execute("PRAGMA journal_mode=WAL").fetchone()[0]
            if mode != "wal":
                raise OutboxError(f"{self.path}: cannot use WAL journal mode (got {mode!r})")
            self._db.execute("PRAGMA synchronous=FULL")
            ok = self._db.execute("PRAGMA quick_check").fetchone()[0]
            if ok != "ok":
                raise OutboxError(f"{self.path}: outbox database failed its check: {ok}")
            self._db.executescript(_SCHEMA)
        except sqlite3.DatabaseError as exc:
            raise OutboxError(f"{self.path}: not a usable outbox database: {exc}") from None
        owner = self.meta("gateway_id")
        if owner is None:
            self._set_meta({"gateway_id": gateway_id, "site": site})
        elif owner != gateway_id:
            raise OutboxError(
                f"{self.path}: outbox belongs to gateway {owner!r}, not {gateway_id!r}"
            )
        count, payload = self._db.execute(
            "SELECT COUNT(*), COALESCE(SUM(LENGTH(payload)), 0) FROM message"
        ).fetchone()
        self._count = int(count)
        self._bytes = int(payload) + ROW_OVERHEAD * self._count
        self._next_sequence = int(self.meta("next_sequence") or 0)
        self._dropped_total = int(self.meta("dropped_total") or 0)
        self._cursor = {p: 0 for p in Priority}
        self._offered: dict[int, int] = {}

    # -- meta ------------------------------------------------------------------------------

    def meta(self, key: str) -> str | None:
        with self._lock:
            row = self._db.execute("SELECT value FROM meta WHERE key = ?", (key,)).fetchone()
            return None if row is None else str(row[0])

    def _set_meta(self, values: Mapping[str, str]) -> None:
        with self._lock:
            self._db.execute("BEGIN IMMEDIATE")
            try:
                self._write_meta(values)
                self._db.execute("COMMIT")
            except BaseException:
                self._db.execute("ROLLBACK")
                raise

    def _write_meta(self, values: Mapping[str, str]) -> None:
        self._db.executemany(
            "INSERT INTO meta (key, value) VALUES (?, ?) "
            "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
            list(values.items()),
        )

    @property
    def next_sequence(self) -> int:
        """The sequence number the next queued indicator message must carry."""
        return self._next_sequence

    # -- writing ---------------------------------------------------------------------------

    def put(
        self,
        messages: Sequence[NewMessage],
        *,
        meta: Mapping[str, str] | None = None,
        now: datetime | None = None,
    ) -> list[int]:
        """Store ``messages`` (and ``meta`` values) in one durable transaction; thin if full.

        Indicator messages must carry consecutive sequence numbers starting at
        :attr:`next_sequence`, in order.
        """
        with self._lock:
            seq = self._next_sequence
            for m in messages:
                if m.kind == "indicators":
                    if m.sequence != seq:
                        raise ValueError(
                            f"sequence must be {seq} (the next free one), got {m.sequence}"
                        )
                    seq += 1
            values = dict(meta or {})
            if seq != self._next_sequence:
                values["next_sequence"] = str(seq)
            ids: list[int] = []
            added = 0
            self._db.execute("BEGIN IMMEDIATE")
            try:
                for m in messages:
                    at = _epoch(m.created_at)
                    cur = self._db.execute(
                        "INSERT INTO message (priority, kind, asset_id, sequence, created_at, "
                        "day, payload) VALUES (?, ?, ?, ?, ?, ?, ?)",
                        (int(m.priority), m.kind, m.asset_id, m.sequence, at, int(at // 86400),
                         m.payload),
                    )  # fmt: skip
                    ids.append(int(cur.lastrowid or 0))
                    added += len(m.payload) + ROW_OVERHEAD
                if values:
                    self._write_meta(values)
                self._db.execute("COMMIT")
            except BaseException:
                self._db.execute("ROLLBACK")
                raise
            self._next_sequence = seq
            self._count += len(messages)
            self._bytes += added
            if self._bytes > self.max_bytes:
                self._thin(now or datetime.now(UTC))
            return ids

    def _thin(self, now: datetime) -> None:
        while self._bytes > self.max_bytes * _LOW_WATER:
            rows = self._db.execute(
                "SELECT day, MAX(n) FROM (SELECT day, asset_id, COUNT(*) AS n FROM message "
                "WHERE priority = ? GROUP BY day, asset_id) GROUP BY day ORDER BY day",
                (int(Priority.ROUTINE),),
            ).fetchall()
            if not rows:
                return  # only alarms and reports left: never dropped
            day, densest = max(rows, key=lambda r: (r[1], -r[0]))
            candidates = self._db.execute(
                "SELECT id, asset_id, sequence, LENGTH(payload) FROM message "
                "WHERE priority = ? AND day = ? ORDER BY asset_id, sequence",
                (int(Priority.ROUTINE), day),
            ).fetchall()
            victims: list[tuple[int, str, int, int]] = []
            if densest > 1:
                position: dict[str, int] = {}
                for row in candidates:
                    if row[0] in self._offered:
                        continue
                    k = position.get(row[1], 0)
                    position[row[1]] = k + 1
                    if k % 2 == 1:
                        victims.append(row)
            else:
                oldest = rows[0][0]
                victims = [
                    r
                    for r in self._db.execute(
                        "SELECT id, asset_id, sequence, LENGTH(payload) FROM message "
                        "WHERE priority = ? AND day = ?",
                        (int(Priority.ROUTINE), oldest),
                    ).fetchall()
                    if r[0] not in self._offered
                ]
            if not victims:
                return  # everything left is in flight
            self._drop(victims, now)

    def _drop(self, victims: Sequence[tuple[int, str, int, int]], now: datetime) -> None:
        counts: dict[str, int] = {}
        for _, asset_id, _, _ in victims:
            counts[asset_id] = counts.get(asset_id, 0) + 1
        ranges = _ranges([v[2] for v in victims])
        reports = []
        for i in range(0, len(ranges), _MAX_RANGES_PER_REPORT):
            chunk = ranges[i : i + _MAX_RANGES_PER_REPORT]
            chunk_seqs = {s for lo, hi in chunk for s in range(lo, hi + 1)}
            chunk_counts: dict[str, int] = {}
            for _, asset_id, s, _ in victims:
                if s in chunk_seqs:
                    chunk_counts[asset_id] = chunk_counts.get(asset_id, 0) + 1
            report = DropReport(
                message_id=uuid.uuid4(),
                gateway_id=self.gateway_id,
                site=self.site,
                at=now,
                dropped_count=sum(hi - lo + 1 for lo, hi in chunk),
                sequence_ranges=tuple(chunk),
                asset_counts=chunk_counts,
                rule=THINNING_RULE,
            )
            reports.append(encode_json(report))
        freed = sum(v[3] + ROW_OVERHEAD for v in victims)
        at = _epoch(now)
        self._db.execute("BEGIN IMMEDIATE")
        try:
            self._db.executemany("DELETE FROM message WHERE id = ?", [(v[0],) for v in victims])
            for payload in reports:
                self._db.execute(
                    "INSERT INTO message (priority, kind, asset_id, sequence, created_at, day, "
                    "payload) VALUES (?, 'dropped', NULL, NULL, ?, ?, ?)",
                    (int(Priority.REPORT), at, int(at // 86400), payload),
                )
            self._dropped_total += len(victims)
            self._write_meta({"dropped_total": str(self._dropped_total)})
            self._db.execute("COMMIT")
        except BaseException:
            self._db.execute("ROLLBACK")
            self._dropped_total -= len(victims)
            raise
        self._count += len(reports) - len(victims)
        self._bytes += sum(len(p) + ROW_OVERHEAD for p in reports) - freed

    # -- reading and acknowledging ---------------------------------------------------------

    def take(self, limit: int) -> list[OutboxEntry]:
        """Up to ``limit`` entries not yet offered, in queue order; they count as offered."""
        out: list[OutboxEntry] = []
        with self._lock:
            for p in Priority:
                while len(out) < limit:
                    rows = self._db.execute(
                        "SELECT id, kind, asset_id, sequence, created_at, payload FROM message "
                        "WHERE priority = ? AND id > ? ORDER BY id LIMIT ?",
                        (int(p), self._cursor[p], limit - len(out)),
                    ).fetchall()
                    if not rows:
                        break
                    for r in rows:
                        self._cursor[p] = r[0]
                        if r[0] in self._offered:
                            continue  # released entries behind it had moved the cursor back
                        out.append(
                            OutboxEntry(r[0], p, r[1], r[2], r[3],
                                        datetime.fromtimestamp(r[4], UTC), bytes(r[5]))
                        )  # fmt: skip
                        self._offered[r[0]] = len(r[5]) + ROW_OVERHEAD
        return out

    def pending(self) -> int:
        """Entries stored and not yet offered (a cheap estimate for the sender's pacing)."""
        with self._lock:
            return self._count - len(self._offered)

    def ack(self, ids: Iterable[int]) -> int:
        """Delete acknowledged entries in one transaction; returns how many were deleted."""
        ids = list(ids)
        if not ids:
            return 0
        with self._lock:
            self._db.execute("BEGIN IMMEDIATE")
            try:
                deleted = 0
                for i in ids:
                    deleted += self._db.execute("DELETE FROM message WHERE id = ?", (i,)).rowcount
                self._db.execute("COMMIT")
            except BaseException:
                self._db.execute("ROLLBACK")
                raise
            freed = 0
            for i in ids:
                freed += self._offered.pop(i, 0)
            self._count -= deleted
            self._bytes -= freed
            return deleted

    def release(self, ids: Iterable[int]) -> None:
        """Offered entries that were not delivered: offer them again (in order)."""
        with self._lock:
            rows = {}
            for i in ids:
                if self._offered.pop(i, None) is not None:
                    rows[i] = True
            if not rows:
                return
            placeholders = ",".join("?" * len(rows))
            for prio, lowest in self._db.execute(
                f"SELECT priority, MIN(id) FROM message WHERE id IN ({placeholders}) "
                "GROUP BY priority",
                list(rows),
            ).fetchall():
                p = Priority(prio)
                self._cursor[p] = min(self._cursor[p], lowest - 1)

    def stats(self) -> OutboxStats:
        with self._lock:
            row = self._db.execute(
                "SELECT created_at FROM message WHERE priority = ? ORDER BY id LIMIT 1",
                (int(Priority.ROUTINE),),
            ).fetchone()
            oldest = None if row is None else datetime.fromtimestamp(row[0], UTC)
            return OutboxStats(
                self._count, self._bytes, oldest, self._dropped_total, self._next_sequence
            )

    def checkpoint(self) -> None:
        """Fold the write-ahead log back into the main file (at clean shutdown)."""
        with self._lock:
            self._db.execute("PRAGMA wal_checkpoint(TRUNCATE)")

    def close(self) -> None:
        with self._lock:
            try:
                self.checkpoint()
            finally:
                self._db.close()

    def __repr__(self) -> str:
        return f"Outbox(path={str(self.path)!r}, messages={self._count}, bytes={self._bytes})"
