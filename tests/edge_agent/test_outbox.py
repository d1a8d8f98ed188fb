"""The durable outbox: order, persistence, acknowledgement, and the thinning rule when full."""

from __future__ import annotations

import itertools
import sqlite3
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from edge_agent.outbox import ROW_OVERHEAD, THINNING_RULE, NewMessage, Outbox, OutboxError, Priority
from shared_schema import DropReport, decode_json

T0 = datetime(2026, 3, 1, tzinfo=UTC)


def routine(seq: int, asset: str, t: datetime, size: int = 100) -> NewMessage:
    return NewMessage("indicators", seq.to_bytes(4, "big") * (size // 4), t, Priority.ROUTINE,
                      asset, seq)  # fmt: skip


def alarm(asset: str, t: datetime) -> NewMessage:
    return NewMessage("alarm", b'{"alarm": true}', t, Priority.ALARM, asset)


def open_box(path: Path, max_bytes: int = 10_000_000) -> Outbox:
    return Outbox(path, gateway_id="gw-test", site="test-site", max_bytes=max_bytes)


def test_queue_order_alarms_first_then_oldest_and_persistence(tmp_path: Path) -> None:
    box = open_box(tmp_path / "o.sqlite")
    box.put([routine(0, "A", T0), routine(1, "B", T0)])
    box.put([routine(2, "A", T0 + timedelta(minutes=1)), alarm("B", T0 + timedelta(minutes=1))])
    first = box.take(2)
    assert [e.kind for e in first] == ["alarm", "indicators"]
    assert first[1].sequence == 0
    assert [e.sequence for e in box.take(10)] == [1, 2]
    assert box.take(10) == []  # everything offered once
    assert box.ack([first[0].id, first[1].id]) == 2
    assert box.next_sequence == 3
    box.close()
    # after a restart every unacknowledged message is offered again, in order
    again = open_box(tmp_path / "o.sqlite")
    assert [e.sequence for e in again.take(10)] == [1, 2]
    assert again.next_sequence == 3
    assert again.stats().messages == 2
    again.close()


def test_release_offers_again_in_order(tmp_path: Path) -> None:
    box = open_box(tmp_path / "o.sqlite")
    box.put([routine(i, "A", T0 + timedelta(minutes=i)) for i in range(5)])
    taken = box.take(5)
    box.ack([taken[0].id, taken[2].id])
    box.release([taken[1].id, taken[3].id])
    assert [e.sequence for e in box.take(10)] == [1, 3]
    box.close()


def test_sequence_numbers_must_be_consecutive(tmp_path: Path) -> None:
    box = open_box(tmp_path / "o.sqlite")
    box.put([routine(0, "A", T0)])
    with pytest.raises(ValueError, match="sequence must be 1"):
        box.put([routine(2, "A", T0)])
    assert box.stats().messages == 1  # the refused write left nothing behind
    box.close()


def test_wal_full_sync_and_owner_check(tmp_path: Path) -> None:
    box = open_box(tmp_path / "o.sqlite")
    box.put([routine(0, "A", T0)])
    db = sqlite3.connect(tmp_path / "o.sqlite")
    assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    db.close()
    box.close()
    with pytest.raises(OutboxError, match="belongs to gateway 'gw-test'"):
        Outbox(tmp_path / "o.sqlite", gateway_id="gw-other", site="s", max_bytes=10**6)
    (tmp_path / "junk.sqlite").write_bytes(b"not a database at all" * 100)
    with pytest.raises(OutboxError, match="not a usable outbox"):
        open_box(tmp_path / "junk.sqlite")


def test_full_outbox_keeps_alarms_and_reports_exactly_what_it_dropped(tmp_path: Path) -> None:
    interval = timedelta(minutes=5)
    per_day = 288
    days = 3
    box = open_box(tmp_path / "o.sqlite", max_bytes=100_000)
    seq = 0
    alarms_put = 0
    in_flight = []
    batch: list[NewMessage] = []
    for k in range(per_day * days):
        t = T0 + k * interval
        for asset in ("A", "B"):
            batch.append(routine(seq, asset, t))
            seq += 1
        if k % 97 == 0:
            batch.append(alarm("A", t))
            alarms_put += 1
        if k % 6 == 5:  # one transaction per half hour of windows
            box.put(batch, now=t)
            batch = []
        if k == 11:
            in_flight = box.take(4)  # handed to the uplink, not yet acknowledged
    stats = box.stats()
    assert stats.bytes <= 100_000
    entries = in_flight + box.take(100_000)
    kept = {e.sequence for e in entries if e.kind == "indicators"}
    # alarms are never dropped
    assert sum(e.kind == "alarm" for e in entries) == alarms_put
    # messages in flight are not touched
    assert {e.sequence for e in in_flight if e.kind == "indicators"} <= kept
    # the drop reports name exactly the missing sequence numbers
    reports = [decode_json(e.payload, DropReport) for e in entries if e.kind == "dropped"]
    assert reports and all(r.rule == THINNING_RULE for r in reports)
    reported = {s for r in reports for lo, hi in r.sequence_ranges for s in range(lo, hi + 1)}
    assert reported == set(range(seq)) - kept
    assert sum(r.dropped_count for r in reports) == len(reported) == stats.dropped_total
    by_asset: dict[str, int] = {}
    for r in reports:
        for asset, n in r.asset_counts.items():
            by_asset[asset] = by_asset.get(asset, 0) + n
    assert by_asset == {"A": len([s for s in reported if s % 2 == 0]),
                        "B": len([s for s in reported if s % 2 == 1])}  # fmt: skip
    # the history stays spread out: every day of every asset keeps messages, without long holes
    for asset in ("A", "B"):
        times = sorted(
            e.created_at for e in entries if e.kind == "indicators" and e.asset_id == asset
        )
        assert {t.date() for t in times} == {(T0 + timedelta(days=d)).date() for d in range(days)}
        gaps = [b - a for a, b in itertools.pairwise(times)]
        assert max(gaps) <= 16 * interval
    # stored bytes are counted as the module documents
    assert stats.bytes == sum(len(e.payload) + ROW_OVERHEAD for e in entries)
    box.close()


def test_outbox_of_only_alarms_is_never_thinned(tmp_path: Path) -> None:
    box = open_box(tmp_path / "o.sqlite", max_bytes=10_000)
    box.put([alarm("A", T0 + timedelta(seconds=i)) for i in range(400)])
    assert sum(e.kind == "alarm" for e in box.take(1000)) == 400
    assert box.stats().dropped_total == 0
    box.close()
