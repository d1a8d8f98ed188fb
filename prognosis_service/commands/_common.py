"""What the service's commands share: the --config option and loading settings."""

from __future__ import annotations

import argparse
import logging
import sys

from prognosis_service.settings import Settings, SettingsError, load_settings
from wellspan.clikit import UsageError

__all__ = ["add_config_argument", "configure_logging", "settings_from"]


def add_config_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--config",
        metavar="FILE",
        help="service settings TOML (default: $WELLSPAN_CONFIG); WELLSPAN_* variables override",
    )


def settings_from(args: argparse.Namespace, **overrides: object) -> Settings:
    try:
        return load_settings(getattr(args, "config", None), **overrides)
    except SettingsError as exc:
        raise UsageError(str(exc)) from None


def configure_logging(verbose: bool = False) -> None:
    logging.basicConfig(
        level=logging.DEBUG if verbose else logging.INFO,
        stream=sys.stderr,
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
    )
