"""``wellspan serve``: the HTTP API and the MQTT ingest in one process (uvicorn).

``--no-ingest`` runs the API alone (scale-out: stateless API replicas); ``wellspan ingest``
runs the ingest alone. SIGTERM shuts down cleanly: uvicorn stops accepting requests, the ingest
commits and acknowledges what it received, then disconnects.
"""

from __future__ import annotations

import argparse
import os
from types import FrameType

from prognosis_service.commands._common import add_config_argument, configure_logging, settings_from
from wellspan.clikit import UsageError

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    parser.add_argument(
        "--host", default="127.0.0.1", help="address to listen on (default: %(default)s)"
    )
    parser.add_argument("--port", type=int, default=8000, help="port (default: %(default)s)")
    parser.add_argument(
        "--no-ingest", action="store_true", help="serve the API without MQTT ingest"
    )
    parser.add_argument(
        "--workers",
        type=int,
        default=1,
        help="API worker processes (default: %(default)s); more than one needs --no-ingest",
    )
    parser.add_argument("--verbose", action="store_true", help="debug logging to stderr")


def run(args: argparse.Namespace) -> int:
    if not 0 < args.port < 65536:
        raise UsageError(f"--port must be in 1..65535, got {args.port}")
    if args.workers < 1:
        raise UsageError(f"--workers must be at least 1, got {args.workers}")
    if args.workers > 1 and not args.no_ingest:
        raise UsageError(
            "--workers > 1 needs --no-ingest: one MQTT session per client id; "
            "run 'wellspan ingest' beside the API workers"
        )
    settings = settings_from(args)
    configure_logging(args.verbose)
    import uvicorn

    if args.workers > 1:
        # Each worker process builds its own app from the environment (validated above); the
        # migrations run here once, so the workers do not race to apply them.
        from prognosis_service.store.migrate import upgrade

        upgrade(settings.database_url)
        if args.config:
            os.environ["WELLSPAN_CONFIG"] = str(args.config)
        uvicorn.run(
            "prognosis_service.app:create_app",
            factory=True,
            host=args.host,
            port=args.port,
            workers=args.workers,
            log_config=None,
            access_log=False,
        )
        return 0

    from prognosis_service.app import create_app

    app = create_app(settings, run_ingest=not args.no_ingest)
    config = uvicorn.Config(app, host=args.host, port=args.port, log_config=None, access_log=False)
    server = _server_class()(config)
    server.run()
    return 0


def _server_class() -> type:
    import uvicorn

    class Server(uvicorn.Server):
        def handle_exit(self, sig: int, frame: FrameType | None) -> None:
            super().handle_exit(sig, frame)
            # uvicorn re-raises a caught SIGTERM after its graceful shutdown, so the process
            # would die by the signal; SIGTERM is how a service is told to stop: exit 0.
            self._captured_signals.clear()

    return Server
