"""Command-line entry points of the service: ``serve`` and ``keys``.

``add_subcommands(subparsers)`` registers them on an argparse subparsers
object (the ``seqtest`` command calls it); each sets ``func`` to a handler
taking the parsed arguments and returning an exit code.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from typing import Any

ENV_HOST = "SEQTEST_HOST"
ENV_PORT = "SEQTEST_PORT"
ENV_WORKERS = "SEQTEST_WORKERS"
ENV_DATABASE_URL = "SEQTEST_DATABASE_URL"


def _env_int(name: str, default: int) -> int:
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    try:
        return int(raw)
    except ValueError:
        raise SystemExit(f"{name}={raw!r}: give a whole number") from None


def _database_option(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--database-url",
        default=None,
        help=f"sqlite:///file.db, a file path, or postgresql://user@host/db "
        f"(env {ENV_DATABASE_URL}; default ./seqtest.db)",
    )


def add_subcommands(subparsers: Any) -> None:
    """Register ``serve`` and ``keys`` on ``subparsers``."""
    serve = subparsers.add_parser(
        "serve",
        help="run the HTTP service",
        description="Run the HTTP service with uvicorn. Options fall back to the "
        f"environment: {ENV_HOST}, {ENV_PORT}, {ENV_WORKERS}, {ENV_DATABASE_URL}.",
    )
    serve.add_argument("--host", default=None, help=f"address to bind (env {ENV_HOST}; "
                       "default 127.0.0.1)")
    serve.add_argument("--port", type=int, default=None,
                       help=f"port (env {ENV_PORT}; default 8000)")
    serve.add_argument("--workers", type=int, default=None,
                       help=f"worker processes (env {ENV_WORKERS}; default 1)")
    _database_option(serve)
    serve.add_argument("--log-level", default="info",
                       choices=["critical", "error", "warning", "info", "debug"])
    serve.add_argument("--no-access-log", action="store_true",
                       help="do not log one line per request")
    serve.set_defaults(func=run_serve)

    keys = subparsers.add_parser(
        "keys", help="create, revoke and list API keys", description="Manage team API keys."
    )
    keys_sub = keys.add_subparsers(dest="keys_command", required=True, metavar="ACTION")

    create = keys_sub.add_parser("create", help="create a key for a team (shown once)")
    create.add_argument("--team", required=True, help="team name (created if new)")
    create.add_argument("--label", default="", help="what the key is for, e.g. 'pipeline'")
    create.add_argument("--json", action="store_true", help="print JSON")
    _database_option(create)
    create.set_defaults(func=run_keys_create)

    revoke = keys_sub.add_parser("revoke", help="revoke a key by its id")
    revoke.add_argument("key_id", help="the key's id (key_...), as shown by 'keys list'")
    _database_option(revoke)
    revoke.set_defaults(func=run_keys_revoke)

    lst = keys_sub.add_parser("list", help="list keys (never the tokens)")
    lst.add_argument("--team", default=None, help="only this team's keys")
    lst.add_argument("--json", action="store_true", help="print JSON")
    _database_option(lst)
    lst.set_defaults(func=run_keys_list)


# ------------------------------------------------------------------ handlers


def run_serve(args: argparse.Namespace) -> int:
    import uvicorn

    from service.storage import resolve_database_url

    host = args.host or os.environ.get(ENV_HOST) or "127.0.0.1"
    port = args.port if args.port is not None else _env_int(ENV_PORT, 8000)
    workers = args.workers if args.workers is not None else _env_int(ENV_WORKERS, 1)
    if not 0 <= port <= 65535:
        print(f"port: got {port}; allowed is 0 to 65535", file=sys.stderr)
        return 2
    if workers < 1:
        print(f"workers: got {workers}; allowed is 1 or more", file=sys.stderr)
        return 2
    try:
        url = resolve_database_url(args.database_url)
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    # The workers build the app from the environment (uvicorn's factory mode).
    os.environ[ENV_DATABASE_URL] = url
    if workers == 1:
        from sqlalchemy.exc import SQLAlchemyError

        from service.app import create_app

        try:
            app = create_app(url)
        except (SQLAlchemyError, ValueError, RuntimeError) as exc:
            print(f"cannot start: {str(exc).splitlines()[0]}", file=sys.stderr)
            return 1
        uvicorn.run(app, host=host, port=port, log_level=args.log_level,
                    access_log=not args.no_access_log)
    else:
        uvicorn.run(
            "service.app:create_app",
            factory=True,
            host=host,
            port=port,
            workers=workers,
            log_level=args.log_level,
            access_log=not args.no_access_log,
        )
    return 0


def _storage(args: argparse.Namespace) -> Any:
    """Open the storage; ValueError with a readable message when that fails."""
    from sqlalchemy.exc import SQLAlchemyError

    from service.storage import Storage

    try:
        return Storage(args.database_url)
    except SQLAlchemyError as exc:
        raise ValueError(f"cannot open the database: {exc.__class__.__name__}: "
                         f"{str(exc).splitlines()[0]}") from None


def run_keys_create(args: argparse.Namespace) -> int:
    try:
        storage = _storage(args)
        record, token = storage.create_key(args.team, args.label)
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    storage.close()
    if args.json:
        print(json.dumps({"id": record.id, "team": record.team_name, "label": record.label,
                          "created_at": record.created_at, "key": token}))
    else:
        print(f"key id:  {record.id}")
        print(f"team:    {record.team_name}")
        print(f"key:     {token}")
        print("The key is shown only now; the database keeps only its hash.")
    return 0


def run_keys_revoke(args: argparse.Namespace) -> int:
    try:
        storage = _storage(args)
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    record = storage.revoke_key(args.key_id)
    storage.close()
    if record is None:
        print(f"no key with id {args.key_id!r}; see 'keys list'", file=sys.stderr)
        return 1
    print(f"revoked {record.id} (team {record.team_name}) at {record.revoked_at}")
    return 0


def run_keys_list(args: argparse.Namespace) -> int:
    try:
        storage = _storage(args)
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    records = storage.list_keys(args.team)
    storage.close()
    if args.json:
        print(json.dumps([
            {"id": r.id, "team": r.team_name, "label": r.label, "created_at": r.created_at,
             "revoked_at": r.revoked_at}
            for r in records
        ]))
        return 0
    if not records:
        print("no keys")
        return 0
    for r in records:
        status = f"revoked {r.revoked_at}" if r.revoked_at else "active"
        print(f"{r.id}  {r.team_name}  {r.label or '-'}  created {r.created_at}  {status}")
    return 0


def main(argv: list[str] | None = None) -> int:
    """``python -m service``: the same subcommands without the rest of the CLI."""
    parser = argparse.ArgumentParser(prog="python -m service", description="seqtest service")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    add_subcommands(sub)
    args = parser.parse_args(argv)
    return int(args.func(args))
