"""``wellspan train-diagnosis``: train the fault classifier and save it where the service loads it.

Training rows: the simulator's labelled fault data (every fault mode at several severities and
operating regimes, reproducible from ``--seed``) plus, unless ``--simulated-only``, the
operator's own history in the store, labelled by its maintenance events (windows shortly before a
repair or failure that names a failure mode carry that mode; windows after a repair, once
settled, are healthy). Prints the macro-F1 on held-out units (grouped split: no unit is in both
halves), then fits on every row and writes the model. The simulated rows come from the launcher
package (``wellspan.training_data``), imported only when this command runs.

Diagnoses are advisory: they support, and do not replace, inspection by qualified personnel.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from prognosis_service.commands._common import add_config_argument, settings_from
from wellspan.clikit import EXIT_OK, EXIT_PROBLEM, UsageError, print_json

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument(
        "--database-url", help="store to read labelled history from (default: the settings')"
    )
    parser.add_argument(
        "--output",
        metavar="FILE",
        help="where to write the model (default: the diagnosis_model_path setting)",
    )
    parser.add_argument("--seed", type=int, default=2026, help="seed of the simulated data")
    parser.add_argument(
        "--simulated-only", action="store_true", help="leave out the store's labelled history"
    )
    parser.add_argument(
        "--test-fraction",
        type=float,
        default=0.25,
        help="fraction of units held out to measure macro-F1 (default 0.25)",
    )
    parser.add_argument("--C", type=float, default=1.0, help="inverse L2 penalty (default 1.0)")
    parser.add_argument("--json", action="store_true", help="machine-readable output")


def _history_tables(
    database_url: str, names_expected: Sequence[str]
) -> tuple[list[Any], list[str]]:
    """Labelled rows of every asset with maintenance events and a fitted baseline."""
    from sqlalchemy import select

    from prognosis_service.assessment.baseline import FittedBaseline
    from prognosis_service.assessment.models import AssetAssessment, MaintenanceEventRow
    from prognosis_service.assessment.windows import load_windows
    from prognosis_service.store.engine import Store
    from prognosis_service.store.migrate import upgrade
    from shared_schema import MaintenanceEvent
    from wellspan.training_data import history_training_table

    upgrade(database_url)
    store = Store(database_url)
    tables, notes = [], []
    try:
        with store.read() as session:
            asset_ids = sorted(
                set(session.scalars(select(MaintenanceEventRow.asset_id).distinct()))
            )
            for asset_id in asset_ids:
                row = session.get(AssetAssessment, asset_id)
                state = (row.state or {}) if row is not None else {}
                if not state.get("baseline"):
                    notes.append(f"{asset_id}: no fitted baseline yet, left out")
                    continue
                baseline = FittedBaseline.from_state(state["baseline"])
                events = [
                    MaintenanceEvent(
                        asset_id=e.asset_id,
                        at=e.at,
                        kind=e.kind,
                        component=e.component,
                        failure_mode=e.failure_mode,
                        notes=e.notes,
                    )
                    for e in session.scalars(
                        select(MaintenanceEventRow).where(MaintenanceEventRow.asset_id == asset_id)
                    )
                ]
                windows = [w for w in load_windows(session, asset_id) if w.excluded_reason is None]
                if not windows:
                    continue
                names = baseline.names
                regimes = [s.regime for s in baseline.score(windows)]
                table = history_training_table(
                    names,
                    np.vstack([w.aligned(names) for w in windows]),
                    [w.window_start for w in windows],
                    events,
                    baseline=[baseline.baseline_for(r) for r in regimes],
                    unit_id=asset_id,
                    shaft_speed_hz=[
                        np.nan if w.shaft_speed_hz is None else w.shaft_speed_hz for w in windows
                    ],
                    regime=[str(r) for r in regimes],
                )
                if len(table):
                    tables.append(table)
                    notes.append(f"{asset_id}: {len(table)} labelled windows")
    finally:
        store.dispose()
    return tables, notes


def _align(table: Any, names: Sequence[str]) -> Any:
    """The table with its features reordered to ``names`` (missing features: 0, no change)."""
    from prognosis_service.diagnosis import DiagnosisTable

    index = {n: i for i, n in enumerate(table.feature_names)}
    X = np.zeros((len(table), len(names)))
    for j, n in enumerate(names):
        if n in index:
            X[:, j] = table.X[:, index[n]]
    return DiagnosisTable(tuple(names), X, table.y, table.regime, table.unit_id)


def run(args: argparse.Namespace) -> int:
    if not 0.0 < args.test_fraction < 1.0:
        raise UsageError(f"--test-fraction must lie in (0, 1); got {args.test_fraction!r}")
    if not args.C > 0:
        raise UsageError(f"--C must be > 0; got {args.C!r}")
    if args.seed < 0:
        raise UsageError(f"--seed must be >= 0; got {args.seed!r}")
    overrides = {"database_url": args.database_url} if args.database_url else {}
    settings = settings_from(args, **overrides)
    output = args.output or settings.diagnosis_model_path
    if not output:
        raise UsageError("give --output FILE or set diagnosis_model_path in the settings")
    out_path = Path(output)
    if not out_path.parent.is_dir():
        raise UsageError(f"--output: folder {str(out_path.parent)!r} does not exist")

    from sklearn.metrics import f1_score
    from sklearn.model_selection import GroupShuffleSplit

    from prognosis_service.assessment.diagnosis_model import save_classifier
    from prognosis_service.diagnosis import DiagnosisTable, FaultClassifier
    from wellspan.training_data import simulated_training_table

    print("simulating labelled fault windows ...", file=sys.stderr)
    table = simulated_training_table(seed=args.seed)
    notes: list[str] = [f"simulated: {len(table)} windows (seed {args.seed})"]
    if not args.simulated_only:
        try:
            extra, more = _history_tables(settings.database_url, table.feature_names)
        except Exception as exc:  # a store that cannot be read is the user's to fix
            print(f"wellspan train-diagnosis: cannot read the store: {exc}", file=sys.stderr)
            return EXIT_PROBLEM
        notes += more
        if extra:
            table = DiagnosisTable.concatenate(
                [table, *(_align(t, table.feature_names) for t in extra)]
            )
    groups = table.unit_id
    split = GroupShuffleSplit(n_splits=1, test_size=args.test_fraction, random_state=args.seed)
    train_idx, test_idx = next(split.split(table.X, table.y, groups))
    clf = FaultClassifier(C=args.C).fit(
        table.X[train_idx], table.y[train_idx], feature_names=table.feature_names
    )
    predicted = clf.predict(table.X[test_idx])
    macro_f1 = float(f1_score(table.y[test_idx], predicted, average="macro"))
    final = FaultClassifier(C=args.C).fit(table.X, table.y, feature_names=table.feature_names)
    meta = {
        "seed": args.seed,
        "rows": len(table),
        "classes": sorted(set(table.y.tolist())),
        "held_out_units": sorted(set(groups[test_idx].tolist())),
        "held_out_macro_f1": round(macro_f1, 4),
        "simulated_only": bool(args.simulated_only),
    }
    save_classifier(final, out_path, meta)
    record = {**meta, "output": str(out_path), "notes": notes}
    if args.json:
        print_json(record)
    else:
        for note in notes:
            print(note)
        print(
            f"held-out macro-F1 {macro_f1:.3f} on units {', '.join(meta['held_out_units'])}; "
            f"model written to {out_path}"
        )
        print("Diagnoses are advisory; qualified personnel decide what is done on the machine.")
    return EXIT_OK
