"""``wellspan ingest``: the MQTT ingest alone (scale-out with ``mqtt_share_group``)."""

from __future__ import annotations

import argparse
import logging
import signal
import threading
from types import FrameType

from prognosis_service.commands._common import add_config_argument, configure_logging, settings_from

__all__ = ["add_arguments", "run"]

log = logging.getLogger("wellspan.ingest")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument(
        "--client-id", help="MQTT client id (overrides mqtt_client_id; fixed per replica)"
    )
    parser.add_argument("--verbose", action="store_true", help="debug logging to stderr")


def run(args: argparse.Namespace) -> int:
    overrides = {"mqtt_client_id": args.client_id} if args.client_id else {}
    settings = settings_from(args, **overrides)
    configure_logging(args.verbose)
    from prognosis_service.app import start_runtime, stop_runtime

    stop = threading.Event()

    def _on_signal(signum: int, _frame: FrameType | None) -> None:
        log.info("received %s, stopping", signal.Signals(signum).name)
        stop.set()

    signal.signal(signal.SIGTERM, _on_signal)
    signal.signal(signal.SIGINT, _on_signal)
    runtime = start_runtime(settings, run_ingest=True)
    try:
        while not stop.wait(1.0):
            pass
    finally:
        stop_runtime(runtime)
    return 0
