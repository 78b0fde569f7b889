"""`drawyard keys create|revoke|list`: manage API keys in the store named by the settings."""

from __future__ import annotations

import argparse
import sys

from sqlalchemy.orm import Session, sessionmaker

from service.timestamps import rfc3339


def add_keys_command(commands: argparse._SubParsersAction) -> None:
    keys = commands.add_parser(
        "keys",
        help="create, revoke and list API keys",
        description=(
            "API keys for the store in DRAWYARD_DATABASE_URL (or --database-url). Once any key "
            "exists, every request to /v1/jobs needs one."
        ),
    )
    keys.add_argument("--database-url", default=None,
                      help="store URL (default: DRAWYARD_DATABASE_URL)")
    actions = keys.add_subparsers(dest="keys_command", required=True, metavar="ACTION")
    create = actions.add_parser("create", help="make a key; its secret is printed once")
    create.add_argument("--tenant", required=True, help="the tenant the key belongs to")
    create.add_argument("--scopes", default="submit,read",
                        help="comma-separated scopes: submit, read, metrics "
                        "(default: submit,read)")
    create.add_argument("--label", default=None, help="a note on what the key is for")
    create.set_defaults(run=run_create)
    revoke = actions.add_parser("revoke", help="revoke a key by its id")
    revoke.add_argument("key_id", help="the key id printed by create and list")
    revoke.set_defaults(run=run_revoke)
    listing = actions.add_parser("list", help="list keys (ids, tenants, scopes; never secrets)")
    listing.set_defaults(run=run_list)


def _sessions(args: argparse.Namespace) -> sessionmaker[Session]:
    from service.config import load_settings
    from service.store.engine import make_engine, make_sessions

    url = args.database_url or load_settings().database_url
    return make_sessions(make_engine(url))


def run_create(args: argparse.Namespace) -> int:
    from service.access.keys import create_key

    try:
        made = create_key(_sessions(args), args.tenant, args.scopes, args.label)
    except ValueError as error:
        print(f"drawyard keys create: {error}", file=sys.stderr)
        return 2
    # The secret alone on stdout, so `KEY=$(drawyard keys create ...)` holds the key itself.
    print(
        f"key id:  {made.key_id}\ntenant:  {made.tenant}\nscopes:  {','.join(made.scopes)}\n"
        "The secret (on stdout) is shown only now; the store keeps its SHA-256 alone.",
        file=sys.stderr,
    )
    print(made.secret)
    return 0


def run_revoke(args: argparse.Namespace) -> int:
    from service.access.keys import revoke_key

    if revoke_key(_sessions(args), args.key_id):
        print(f"revoked {args.key_id}")
        return 0
    print(f"drawyard keys revoke: no active key {args.key_id!r}", file=sys.stderr)
    return 1


def run_list(args: argparse.Namespace) -> int:
    from service.access.keys import list_keys

    print("key_id\ttenant\tscopes\tcreated_at\trevoked_at\tlabel")
    for key in list_keys(_sessions(args)):
        print(
            f"{key.id}\t{key.tenant}\t{','.join(key.scopes)}\t{rfc3339(key.created_at)}\t"
            f"{rfc3339(key.revoked_at) or '-'}\t{key.label or ''}"
        )
    return 0


LOOPBACK_HOSTS = ("127.0.0.1", "localhost", "::1")


def serve_host(database_url: str, host: str) -> tuple[str, str | None]:
    """Where `drawyard serve` may listen, and a warning to print loudly when it is open.

    With no key in the store (and DRAWYARD_REQUIRE_KEYS unset) anyone who reaches the port can
    submit and read every job, so the service is kept to this machine.
    """
    from service.access.keys import keys_configured
    from service.config import load_settings
    from service.store.engine import make_engine, make_sessions

    if load_settings().require_keys:
        return host, None
    engine = make_engine(database_url)
    try:
        configured = keys_configured(make_sessions(engine))
    finally:
        engine.dispose()
    if configured:
        return host, None
    warning = (
        "No API keys are configured: this drawyard is OPEN to anyone who can reach it, so it "
        "listens on 127.0.0.1 only. Create a key with `drawyard keys create --tenant NAME "
        "--scopes submit,read` to serve other machines."
    )
    if host not in LOOPBACK_HOSTS:
        warning += f" (--host {host} was asked for and is not used.)"
    return "127.0.0.1" if host not in LOOPBACK_HOSTS else host, warning
