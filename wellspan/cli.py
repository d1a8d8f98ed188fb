"""The ``wellspan`` command: one entry point, one sub-command per job.

Sub-command modules live beside the code they drive (``edge_agent.commands.*`` on the gateway,
``prognosis_service.commands.*`` in the service, ``wellspan.demo`` for the demo) and are imported
only when chosen, so a gateway never loads the service's dependencies.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import sys
from collections.abc import Sequence

from wellspan.clikit import EXIT_BAD_INPUT, UsageError

__all__ = ["main"]

# name -> (module, one-line help). Each module defines add_arguments(parser) and run(args) -> int.
COMMANDS: dict[str, tuple[str, str]] = {
    "demo": ("wellspan.demo", "run the Saltbush Flats demo of the whole job"),
    "extract": ("edge_agent.commands.extract", "compute indicators from a recording"),
    "simulate": ("edge_agent.commands.simulate", "write simulated pump recordings to a folder"),
    "edge": ("edge_agent.commands.edge", "run (or --check) the gateway agent"),
    "serve": ("prognosis_service.commands.serve", "run the prognosis service (API and ingest)"),
    "ingest": ("prognosis_service.commands.ingest", "run the MQTT ingest alone"),
    "keys": ("prognosis_service.commands.keys", "create, list and revoke API keys"),
    "train-diagnosis": (
        "prognosis_service.commands.train_diagnosis",
        "train the fault classifier on simulated and maintenance-labelled data",
    ),
    "bench": ("wellspan.bench_command", "run the benchmarks and write docs/BENCHMARKS.md"),
}


def _available() -> dict[str, tuple[str, str]]:
    found = {}
    for name, (module, help_text) in COMMANDS.items():
        if importlib.util.find_spec(module.rsplit(".", 1)[0]) is None:
            continue
        try:
            spec = importlib.util.find_spec(module)
        except ModuleNotFoundError:
            spec = None
        if spec is not None:
            found[name] = (module, help_text)
    return found


def build_parser() -> tuple[argparse.ArgumentParser, dict[str, str]]:
    parser = argparse.ArgumentParser(
        prog="wellspan",
        description="Condition monitoring and prognostics for remote pumps. Forecasts are "
        "advisory; alarms do not replace protective trips.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    modules = {}
    for name, (module, help_text) in _available().items():
        p = sub.add_parser(name, help=help_text, description=help_text)
        importlib.import_module(module).add_arguments(p)
        modules[name] = module
    return parser, modules


def main(argv: Sequence[str] | None = None) -> int:
    parser, modules = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    try:
        return int(importlib.import_module(modules[args.command]).run(args))
    except UsageError as exc:
        print(f"wellspan {args.command}: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print(f"wellspan {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
