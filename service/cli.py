"""Command-line entry points of the service: ``serve`` and ``keys``.

``register_serve(subparsers)`` and ``register_keys(subparsers)`` add them to an
argparse subparsers object (the ``seqtest`` command finds them through the entry-point
group ``seqtest.commands``); each sets ``func`` to a handler
taking the parsed arguments and returning an exit code. ``python -m service`` runs
the same subcommands alone.
"""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from service.config import LOG_LEVELS, SETTINGS, Settings

_ENV = {s.name: s.env for s in SETTINGS}


def _database_option(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--database-url",
        default=None,
        help=f"sqlite:///file.db, a file path, or postgresql://user@host/db "
        f"(env {_ENV['database_url']}; default ./seqtest.db)",
    )


def register(subparsers: Any) -> None:
    """Register ``serve`` and ``keys`` on ``subparsers``."""
    register_serve(subparsers)
    register_keys(subparsers)


def register_serve(subparsers: Any) -> None:
    """Register ``serve`` (the ``seqtest`` command's entry point of that name)."""
    serve = subparsers.add_parser(
        "serve",
        help="run the HTTP service",
        description="Run the HTTP service with uvicorn. Every option falls back to its "
        "environment variable, then to its default: "
        + "; ".join(f"{s.env} ({s.help}, default {s.default})" for s in SETTINGS),
    )
    serve.add_argument("--host", default=None, help=f"address to bind (env {_ENV['host']}; "
                       "default 127.0.0.1)")
    serve.add_argument("--port", type=int, default=None,
                       help=f"port (env {_ENV['port']}; default 8000; 0: any free port)")
    serve.add_argument("--workers", type=int, default=None,
                       help=f"worker processes (env {_ENV['workers']}; default 1)")
    _database_option(serve)
    serve.add_argument("--log-level", default=None, choices=LOG_LEVELS,
                       help=f"env {_ENV['log_level']}; default info")
    serve.add_argument("--no-access-log", action="store_true",
                       help="do not log one line per request")
    serve.add_argument("--header-timeout", default=None, dest="header_timeout_s",
                       help=f"seconds for a request's headers (env {_ENV['header_timeout_s']};"
                       " default 10)")
    serve.add_argument("--body-timeout", default=None, dest="body_timeout_s",
                       help=f"seconds for a request's body (env {_ENV['body_timeout_s']}; "
                       "default 30)")
    serve.add_argument("--statement-timeout", default=None, dest="statement_timeout_s",
                       help=f"seconds a database transaction may take (env "
                       f"{_ENV['statement_timeout_s']}; default 30)")
    serve.set_defaults(func=run_serve)


def register_keys(subparsers: Any) -> None:
    """Register ``keys`` (the ``seqtest`` command's entry point of that name)."""
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
    from sqlalchemy.exc import SQLAlchemyError

    from service import server
    from service.db.engine import resolve_database_url

    try:
        settings = Settings.from_env({
            "host": args.host, "port": args.port, "workers": args.workers,
            "database_url": args.database_url, "log_level": args.log_level,
            "access_log": False if args.no_access_log else None,
            "header_timeout_s": args.header_timeout_s, "body_timeout_s": args.body_timeout_s,
            "statement_timeout_s": args.statement_timeout_s,
        })
        settings = settings.with_(database_url=resolve_database_url(settings.database_url))
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    if settings.workers == 1:
        # open (and migrate) the database once here, to fail early with a message
        from service.db.engine import Database

        try:
            Database(settings).close()
        except (SQLAlchemyError, ValueError, RuntimeError) as exc:
            print(f"cannot start: {type(exc).__name__}: {str(exc).splitlines()[0]}",
                  file=sys.stderr)
            return 1
    server.run(settings)
    return 0


def _database(args: argparse.Namespace) -> Any:
    """Open the database; ValueError with a readable message when that fails."""
    from sqlalchemy.exc import SQLAlchemyError

    from service.db.engine import Database

    try:
        return Database(Settings.from_env({"database_url": args.database_url}))
    except SQLAlchemyError as exc:
        raise ValueError(f"cannot open the database: {exc.__class__.__name__}: "
                         f"{str(exc).splitlines()[0]}") from None


def run_keys_create(args: argparse.Namespace) -> int:
    from service import usecases

    try:
        db = _database(args)
        record, token = usecases.create_key(db, args.team, args.label)
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    db.close()
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
    from service import usecases

    try:
        db = _database(args)
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    record = usecases.revoke_key(db, args.key_id)
    db.close()
    if record is None:
        print(f"no key with id {args.key_id!r}; see 'keys list'", file=sys.stderr)
        return 1
    print(f"revoked {record.id} (team {record.team_name}) at {record.revoked_at}")
    return 0


def run_keys_list(args: argparse.Namespace) -> int:
    from service import usecases

    try:
        db = _database(args)
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    records = usecases.list_keys(db, args.team)
    db.close()
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
    register(sub)
    args = parser.parse_args(argv)
    return int(args.func(args))
