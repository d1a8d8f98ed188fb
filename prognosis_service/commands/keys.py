"""``wellspan keys create|list|revoke``: API keys of the service (stored hashed)."""

from __future__ import annotations

import argparse
import sys

from prognosis_service.commands._common import add_config_argument, settings_from
from wellspan.clikit import EXIT_OK, EXIT_PROBLEM, UsageError, print_json, print_table

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    sub = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    create = sub.add_parser("create", help="create a key and print its token once")
    create.add_argument("--name", required=True, help="who or what uses the key")
    create.add_argument(
        "--scope",
        action="append",
        required=True,
        choices=("read", "ingest", "operate", "admin"),
        help="repeatable; operate (acknowledge alerts, log maintenance) implies read; admin: all",
    )
    create.add_argument("--site", action="append", help="limit the key to a site (repeatable)")
    create.add_argument("--json", action="store_true", help="machine-readable output")
    lister = sub.add_parser("list", help="list keys (never their tokens)")
    lister.add_argument("--json", action="store_true", help="machine-readable output")
    revoke = sub.add_parser("revoke", help="revoke a key by its id")
    revoke.add_argument("key_id", help="the 12-hex-digit id shown by 'keys list'")
    revoke.add_argument("--json", action="store_true", help="machine-readable output")


def run(args: argparse.Namespace) -> int:
    settings = settings_from(args)
    from prognosis_service.auth import create_key, list_keys, revoke_key
    from prognosis_service.store.engine import Store
    from prognosis_service.store.migrate import upgrade

    upgrade(settings.database_url)
    store = Store(settings.database_url)
    try:
        if args.action == "create":
            try:
                with store.write() as session:
                    principal, token = create_key(
                        session, name=args.name, scopes=args.scope, sites=args.site
                    )
            except ValueError as exc:
                raise UsageError(str(exc)) from None
            scopes = sorted(principal.scopes)
            sites = sorted(principal.sites) if principal.sites else None
            record: dict[str, object] = {
                "key_id": principal.key_id,
                "name": principal.name,
                "scopes": scopes,
                "sites": sites,
                "token": token,
            }
            if args.json:
                print_json(record)
            else:
                print_table(
                    ["key_id", "name", "scopes", "sites"],
                    [
                        [
                            principal.key_id,
                            principal.name,
                            " ".join(scopes),
                            " ".join(sites) if sites else "all",
                        ]
                    ],
                )
                print(f"\ntoken (shown once, store it now): {token}")
            return EXIT_OK
        if args.action == "list":
            with store.read() as session:
                rows: list[dict[str, object]] = [
                    {
                        "key_id": k.key_id,
                        "name": k.name,
                        "scopes": k.scopes.split(),
                        "sites": k.sites.split() if k.sites else None,
                        "created_at": k.created_at.isoformat().replace("+00:00", "Z"),
                        "revoked_at": k.revoked_at.isoformat().replace("+00:00", "Z")
                        if k.revoked_at
                        else None,
                    }
                    for k in list_keys(session)
                ]
            if args.json:
                print_json(rows)
            else:
                print_table(
                    ["key_id", "name", "scopes", "sites", "created_at", "revoked_at"],
                    [
                        [
                            r["key_id"],
                            r["name"],
                            " ".join(r["scopes"]),  # type: ignore[arg-type]
                            " ".join(r["sites"]) if r["sites"] else "all",  # type: ignore[arg-type]
                            r["created_at"],
                            r["revoked_at"],
                        ]
                        for r in rows
                    ],
                )
            return EXIT_OK
        with store.write() as session:
            found = revoke_key(session, args.key_id)
        if args.json:
            print_json({"key_id": args.key_id, "revoked": found})
        elif found:
            print(f"revoked {args.key_id}")
        if not found:
            print(f"wellspan keys: no key with id {args.key_id!r}", file=sys.stderr)
            return EXIT_PROBLEM
        return EXIT_OK
    finally:
        store.dispose()
