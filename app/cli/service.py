"""Service commands of ``landlift``: ``serve``, ``worker``, ``token`` and ``db``.

:func:`add_commands` registers them on the sub-parsers of :mod:`app.cli.main`; each command sets
``func(args) -> int``. Settings come from ``LANDLIFT_*`` environment variables
(:class:`app.settings.Settings`); ``--data-dir`` and ``--database-url`` override them.

Schema policy: ``landlift db upgrade`` migrates any database. ``serve``, ``worker`` and ``token``
upgrade an SQLite database by themselves (the embedded default has no separate operator); on
PostgreSQL they refuse to run against an out-of-date schema and say to run ``landlift db
upgrade``, so several nodes never migrate behind an operator's back.
"""

from __future__ import annotations

import argparse
import signal
import sys
import threading
from typing import Any

from app.errors import LandliftError

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8000


def _settings(args: argparse.Namespace, **extra: Any) -> Any:
    from app.settings import Settings

    overrides: dict[str, Any] = {k: v for k, v in extra.items() if v is not None}
    if getattr(args, "data_dir", None):
        overrides["data_dir"] = args.data_dir
    if getattr(args, "database_url", None):
        overrides["database_url"] = args.database_url
    return Settings(**overrides)


def _ensure_schema(settings: Any) -> None:
    """Upgrade SQLite in place; on PostgreSQL require the newest revision."""
    from app.store.migrate import current_revision, head_revision, upgrade

    if settings.is_sqlite:
        upgrade(settings.url)
        return
    current, head = current_revision(settings.url), head_revision()
    if current != head:
        raise LandliftError(
            f"database schema is at revision {current!r}, not {head!r}; "
            "run `landlift db upgrade` first",
            code="schema_out_of_date",
        )


def _add_store_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--data-dir", help="data folder: database and artifact store (default $LANDLIFT_DATA_DIR)"
    )
    parser.add_argument(
        "--database-url", help="SQLAlchemy database URL (default $LANDLIFT_DATABASE_URL)"
    )


# ------------------------------------------------------------------------------- commands


def cmd_serve(args: argparse.Namespace) -> int:
    from app.api.server import run_server

    settings = _settings(args)
    _ensure_schema(settings)
    run_server(settings, host=args.host, port=args.port, with_worker=not args.no_worker)
    return 0


def cmd_worker(args: argparse.Namespace) -> int:
    from app.jobs.worker import run_worker

    settings = _settings(args, dask_scheduler=args.scheduler)
    _ensure_schema(settings)
    stop = threading.Event()

    def _stop(signum: int, _frame: Any) -> None:
        print(f"landlift worker: signal {signum}, stopping after handing back the job",
              file=sys.stderr)
        stop.set()

    previous = {s: signal.signal(s, _stop) for s in (signal.SIGTERM, signal.SIGINT)}
    try:
        done = run_worker(
            settings,
            stop_event=stop,
            once=args.once,
            max_jobs=args.max_jobs,
            drain=args.drain,
            name=args.name,
        )
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
    print(f"landlift worker: {done} job(s) processed", file=sys.stderr)
    return 0


def cmd_token_create(args: argparse.Namespace) -> int:
    from app.store import Store, token_rows

    settings = _settings(args)
    _ensure_schema(settings)
    store = Store.open(settings)
    try:
        token, info = token_rows.create_token(store, name=args.name, scope=args.scope)
    finally:
        store.close()
    print(token)
    print(
        f"landlift: token {info['id']} ({info['prefix']}..., scope {info['scope']}) created; "
        "it is shown only once",
        file=sys.stderr,
    )
    return 0


def cmd_token_list(args: argparse.Namespace) -> int:
    from app.store import Store, token_rows

    settings = _settings(args)
    _ensure_schema(settings)
    store = Store.open(settings)
    try:
        rows = token_rows.list_tokens(store)
    finally:
        store.close()
    for row in rows:
        state = "revoked" if row["revoked_at"] else "active"
        print(f"{row['id']}\t{row['prefix']}...\t{row['scope']}\t{state}\t{row['name']}")
    return 0


def cmd_token_revoke(args: argparse.Namespace) -> int:
    from app.store import Store, token_rows

    settings = _settings(args)
    _ensure_schema(settings)
    store = Store.open(settings)
    try:
        info = token_rows.revoke_token(store, args.token_id)
    finally:
        store.close()
    print(f"landlift: token {info['id']} revoked", file=sys.stderr)
    return 0


def cmd_db_upgrade(args: argparse.Namespace) -> int:
    from app.store.migrate import upgrade

    settings = _settings(args)
    revision = upgrade(settings.url)
    print(f"landlift: database at revision {revision}", file=sys.stderr)
    return 0


def cmd_db_current(args: argparse.Namespace) -> int:
    from app.store.migrate import current_revision, head_revision

    settings = _settings(args)
    current, head = current_revision(settings.url), head_revision()
    print(f"{current or 'empty'} (newest {head})")
    return 0 if current == head else 1


# ------------------------------------------------------------------------------- parsers


def _positive_int(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must be >= 1")
    return value


def _port(text: str) -> int:
    value = int(text)
    if not 0 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"port {text!r} must be in 0..65535")
    return value


def add_commands(subparsers: Any) -> None:
    """Register ``serve``, ``worker``, ``token create|list|revoke`` and ``db upgrade|current``."""
    serve = subparsers.add_parser(
        "serve", help="run the HTTP API with an in-process worker (the embedded default)"
    )
    serve.add_argument("--host", default=DEFAULT_HOST, help=f"bind address (default {DEFAULT_HOST})")
    serve.add_argument("--port", type=_port, default=DEFAULT_PORT,
                       help=f"port (default {DEFAULT_PORT})")
    serve.add_argument("--no-worker", action="store_true",
                       help="API only: leave the jobs to standalone `landlift worker` processes")
    _add_store_options(serve)
    serve.set_defaults(func=cmd_serve)

    worker = subparsers.add_parser("worker", help="run a standalone job worker")
    mode = worker.add_mutually_exclusive_group()
    mode.add_argument("--once", action="store_true", help="run at most one job, then exit")
    mode.add_argument("--drain", action="store_true",
                      help="run jobs until none is waiting, then exit")
    worker.add_argument("--max-jobs", type=_positive_int, help="exit after this many jobs")
    worker.add_argument("--name", help="worker name in the job history (default host:pid:n)")
    worker.add_argument("--scheduler",
                        help="dask.distributed scheduler address (default $LANDLIFT_DASK_SCHEDULER)")
    _add_store_options(worker)
    worker.set_defaults(func=cmd_worker)

    token = subparsers.add_parser("token", help="manage API tokens")
    token_sub = token.add_subparsers(dest="token_command", metavar="{create,list,revoke}")
    token_sub.required = True
    create = token_sub.add_parser("create", help="create a token and print it (shown once)")
    create.add_argument("--scope", required=True, choices=("read", "write", "admin"))
    create.add_argument("--name", required=True, help="who or what the token is for")
    _add_store_options(create)
    create.set_defaults(func=cmd_token_create)
    listing = token_sub.add_parser("list", help="list tokens (prefixes only)")
    _add_store_options(listing)
    listing.set_defaults(func=cmd_token_list)
    revoke = token_sub.add_parser("revoke", help="revoke a token by id")
    revoke.add_argument("token_id")
    _add_store_options(revoke)
    revoke.set_defaults(func=cmd_token_revoke)

    db = subparsers.add_parser("db", help="database schema")
    db_sub = db.add_subparsers(dest="db_command", metavar="{upgrade,current}")
    db_sub.required = True
    up = db_sub.add_parser("upgrade", help="migrate the database to the newest schema")
    _add_store_options(up)
    up.set_defaults(func=cmd_db_upgrade)
    current = db_sub.add_parser("current", help="show the schema revision (exit 1 if behind)")
    _add_store_options(current)
    current.set_defaults(func=cmd_db_current)
