"""The chaos run as a benchmark: faults injected, messages, losses, duplicates, alert delivery.

`wellspan.chaos.ChaosRun` runs the whole Saltbush Flats fleet (private persistent Mosquitto,
``wellspan serve`` on a private PostgreSQL instance, four gateway agents behind cuttable links,
a webhook receiver) while it kills and restarts the broker, the service, each gateway and
PostgreSQL at seeded random times and cuts the links. The long version (default) keeps the
faults coming for about 12 minutes of wall time; ``quick`` is the CI-sized run (about 1 minute
of faults). Needs Mosquitto and the PostgreSQL server binaries.
"""

from __future__ import annotations

from bench.harness import Figure, Report, Target
from wellspan.chaos import FAULT_KINDS, ChaosOptions, ChaosProgress, ChaosRun

__all__ = ["run"]

QUICK = ChaosOptions(days=10.0, every_hours=2.0, minutes=1.2, seed=8)
LONG = ChaosOptions(days=60.0, every_hours=2.0, minutes=12.0, seed=2026)
# Both kill the broker (SIGKILL). Mosquitto 2.0 saves its state as periodic snapshots, so a crash
# can lose messages already acknowledged to a gateway; the losses figure counts them.


def run(*, quick: bool = False, report: Report | None = None) -> list[Figure]:
    """Run the chaos run once and return its figures."""
    options = QUICK if quick else LONG

    def progress(p: ChaosProgress) -> None:
        if report is not None:
            n = sum(p.faults.values())
            report(p.fraction, 1.0, f"{p.phase}: {n} faults, {p.stored}/{p.produced} stored")

    result = ChaosRun(options).run(progress)
    scope = (
        f"seed {options.seed}, {options.days:g} simulated days every {options.every_hours:g} h, "
        f"{result.wall_s:.0f} s wall; fault gap {options.gap_s[0]:g}–{options.gap_s[1]:g} s, "
        f"outage {options.outage_s[0]:g}–{options.outage_s[1]:g} s"
        + ("" if result.settled else "; NOT SETTLED within the hang guard")
    )
    zero = Target(text="= 0", op="<=", value=0.0)
    by_kind = ", ".join(f"{k} {result.faults.get(k, 0)}" for k in FAULT_KINDS)
    figures = [
        Figure(name="faults injected", value=float(result.faults_injected), unit="1",
               notes=f"{by_kind}; {scope}", digits=0),
        Figure(name="messages produced", value=float(result.messages_produced), unit="1",
               notes="every gateway's outbox sequences 0 .. n-1", digits=0),
        Figure(name="messages stored", value=float(result.messages_stored), unit="1",
               notes="distinct (gateway, sequence) in the store", digits=0),
        Figure(name="losses", value=float(result.losses), unit="1", target=zero,
               notes="produced sequences missing from the store; the broker is killed "
               "(SIGKILL), and Mosquitto 2.0's snapshot persistence can lose what it had "
               "acknowledged to a gateway but not yet handed to the service", digits=0),
        Figure(name="duplicates stored", value=float(result.duplicates), unit="1", target=zero,
               notes="rows minus distinct (gateway, sequence)", digits=0),
        Figure(name="alert events missing", value=float(len(result.alerts_missing)), unit="1",
               target=zero,
               notes=f"of {result.alert_events} alert events stored for the receiver's "
               "subscription", digits=0),
        Figure(name="alert redeliveries", value=float(result.redeliveries), unit="1",
               notes="extra deliveries of an event id already received (at-least-once "
               "delivery; receivers de-duplicate by id)", digits=0),
    ]  # fmt: skip
    return figures
