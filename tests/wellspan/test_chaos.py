"""The chaos run, short version: the whole fleet while broker, service, gateways and PostgreSQL
are killed and restarted at random and the links are cut (wellspan.chaos).

Real processes throughout: a private persistent Mosquitto, ``wellspan serve``, four ``wellspan
edge`` gateways, a private PostgreSQL instance (initdb/pg_ctl, so killing it disturbs no other
test) and a webhook receiver in this process. One run serves every test of the module. Losses
and duplicates are counted against each gateway's own outbox sequence counter.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.brokers import require_tool
from wellspan.chaos import FAULT_KINDS, ChaosError, ChaosOptions, ChaosResult, ChaosRun
from wellspan.mosquitto import mosquitto_installed
from wellspan.postgres import postgres_bin_dir

pytestmark = [pytest.mark.slow, pytest.mark.broker, pytest.mark.postgres]

# The broker is stopped (SIGTERM) here, not killed: Mosquitto 2.0 saves its state as periodic
# snapshots, so a crash can lose messages it has acknowledged to a gateway but not yet handed on
# (see ChaosOptions.broker_fault). The long run (wellspan bench chaos) kills it and reports it.
SHORT = ChaosOptions(days=10.0, every_hours=2.0, minutes=1.2, seed=8, broker_fault="stop")


@pytest.fixture(scope="module")
def chaos(tmp_path_factory: pytest.TempPathFactory) -> Iterator[ChaosResult]:
    require_tool(mosquitto_installed(), "Mosquitto binary not installed")
    require_tool(postgres_bin_dir() is not None, "PostgreSQL server binaries not installed")
    options = ChaosOptions(
        days=SHORT.days, every_hours=SHORT.every_hours, minutes=SHORT.minutes, seed=SHORT.seed,
        broker_fault=SHORT.broker_fault, workdir=tmp_path_factory.mktemp("chaos"),
    )  # fmt: skip
    result = ChaosRun(options).run()
    print(result.summary())
    yield result


def test_every_fault_kind_was_injected(chaos: ChaosResult) -> None:
    assert set(chaos.faults) == set(FAULT_KINDS)
    for kind in FAULT_KINDS:
        assert chaos.faults[kind] >= 1, chaos.faults
    # each gateway agent was killed at least once, and each link cut
    gateways = [g.gateway_id for g in chaos.gateways]
    for gid in gateways:
        assert chaos.faults_by_target.get(f"gateway:{gid}", 0) >= 1, chaos.faults_by_target
        assert chaos.faults_by_target.get(f"link:{gid}", 0) >= 1, chaos.faults_by_target


def test_the_run_settled(chaos: ChaosResult) -> None:
    assert chaos.settled, chaos.summary()


def test_every_message_produced_is_stored_exactly_once(chaos: ChaosResult) -> None:
    assert [g.gateway_id for g in chaos.gateways] == [
        "gw-mallee", "gw-gibber", "gw-spinifex", "gw-coolibah"
    ]  # fmt: skip
    for g in chaos.gateways:
        assert g.produced > 0, g
        assert g.losses == 0, g
        assert g.duplicates == 0, g
        assert g.beyond_produced == 0, g
        assert g.duplicate_windows == 0, g  # no window computed again after a restart
        assert g.distinct_stored == g.stored_rows == g.produced, g
        # killed and restarted, each gateway still did every window of the span, no more
        assert g.windows_done == g.windows_expected, g
    assert chaos.losses == 0 and chaos.duplicates == 0
    assert chaos.messages_stored == chaos.messages_produced


def test_every_alert_event_was_delivered(chaos: ChaosResult) -> None:
    assert chaos.alert_events > 0, "the story raised no alert; the check would be empty"
    assert chaos.alerts_missing == []
    assert chaos.alert_events_delivered == chaos.alert_events
    assert chaos.deliveries_not_settled == 0
    assert chaos.unknown_deliveries == 0
    assert chaos.redeliveries >= 0  # counted, allowed: delivery is at least once


def test_the_summary_prints_the_figures(chaos: ChaosResult) -> None:
    text = chaos.summary()
    assert f"{chaos.faults_injected} faults" in text
    assert f"messages produced {chaos.messages_produced}" in text
    assert "losses 0, duplicates stored 0" in text


@pytest.mark.parametrize(
    ("options", "message"),
    [
        (ChaosOptions(gap_s=(0.0, 1.0)), "gap_s"),
        (ChaosOptions(outage_s=(3.0, 1.0)), "outage_s"),
        (ChaosOptions(calm_after=1.5), "calm_after"),
        (ChaosOptions(broker_fault="pull the plug"), "broker_fault"),
    ],
)
def test_bad_options_are_refused_in_plain_words(options: ChaosOptions, message: str) -> None:
    with pytest.raises(ChaosError, match=message):
        options.validate()


def test_without_postgresql_binaries_the_error_says_how_to_install(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    from wellspan import postgres

    monkeypatch.setattr(postgres, "postgres_bin_dir", lambda: None)
    with pytest.raises(postgres.PostgresMissingError, match="apt-get install -y postgresql"):
        postgres.PrivatePostgres()
