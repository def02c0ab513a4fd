"""Sub-commands of the dashboard package: ``fishway dashboard`` and ``fishway users``.

``fishway dashboard SITE [--database URL] [--host 127.0.0.1] [--port 8050] [--threads 8]
[--wall]`` serves the dashboard with waitress, a production WSGI server, binding to loopback
unless told otherwise. ``fishway users add NAME --role ROLE`` creates an account; the password
is read from the terminal twice, or from standard input with ``--password-stdin``.
"""

from __future__ import annotations

import argparse
import getpass
import sys
from typing import Any

__all__ = ["register", "serve", "serve_in_background"]


def serve(app: Any, host: str, port: int, threads: int) -> None:
    """Serve a Dash app's Flask server with waitress (blocks until interrupted)."""
    from waitress import serve as waitress_serve

    waitress_serve(app.server, host=host, port=port, threads=threads, ident="fishway-ops")


def serve_in_background(app: Any, host: str = "127.0.0.1", port: int = 0,
                        threads: int = 8) -> Any:
    """Serve a Dash app's Flask server with waitress in a daemon thread (the demo, tests,
    benchmarks). The socket listens once this returns (``port=0``: a free port; the server's
    ``effective_port`` says which); ``close()`` on the returned server stops it."""
    import threading

    from waitress.server import create_server

    server = create_server(app.server, host=host, port=port, threads=threads,
                           ident="fishway-ops")
    threading.Thread(target=server.run, name="dashboard", daemon=True).start()
    return server


def _engine(args: argparse.Namespace) -> Any:
    from db.engine import make_engine
    from db.migrate import upgrade

    engine = make_engine(args.database)
    upgrade(engine)
    return engine


def _dashboard(args: argparse.Namespace) -> int:
    from dashboard.app import create_app
    from db.site_sync import sync_site
    from ops_logic.site import load_site

    site = load_site(args.site)
    engine = _engine(args)
    sync_site(engine, site)
    app = create_app(site, engine, wall_only=args.wall)
    where = f"http://{args.host}:{args.port}/" + ("wall" if args.wall else "")
    print(f"fishway dashboard: {site.site.name} at {where} (Ctrl-C stops)", file=sys.stderr)
    serve(app, args.host, args.port, args.threads)
    return 0


def _users_add(args: argparse.Namespace) -> int:
    from dashboard.auth import create_user

    if args.password_stdin:
        password = sys.stdin.readline().rstrip("\n")
    else:
        password = getpass.getpass(f"password for {args.name}: ")
        if getpass.getpass("again: ") != password:
            print("fishway users add: the two passwords differ", file=sys.stderr)
            return 2
    try:
        create_user(_engine(args), args.name, args.role, password)
    except ValueError as exc:
        print(f"fishway users add: {args.name}: {exc}", file=sys.stderr)
        return 2
    print(f"user {args.name} added with role {args.role}")
    return 0


def register(subparsers: Any, common: argparse.ArgumentParser) -> None:
    """Add ``dashboard`` and ``users`` to the ``fishway`` command line."""
    p = subparsers.add_parser("dashboard", parents=[common], help="serve the dashboard",
                              description="Serve the operations dashboard of SITE (default: "
                              "the demo site) with a production WSGI server. Binds to "
                              "127.0.0.1 unless --host says otherwise.")
    p.add_argument("site", nargs="?", metavar="SITE", help="site file (TOML)")
    p.add_argument("--database", help="SQLAlchemy URL (default: FISHWAY_DATABASE_URL or the "
                   "embedded SQLite file)")
    p.add_argument("--host", default="127.0.0.1", help="address to bind (default 127.0.0.1)")
    p.add_argument("--port", type=int, default=8050, help="port (default 8050)")
    p.add_argument("--threads", type=int, default=8, help="worker threads (default 8)")
    p.add_argument("--wall", action="store_true", help="serve only the read-only wall display")
    p.set_defaults(handler=_dashboard)

    p = subparsers.add_parser("users", parents=[common], help="manage dashboard accounts",
                              description="Manage the accounts that sign in to the dashboard.")
    sub = p.add_subparsers(dest="users_command", metavar="ACTION", required=True)
    a = sub.add_parser("add", parents=[common], help="create an account",
                       description="Create an account with a role: viewer (read-only), "
                       "operator (acknowledge, shelve, log entries) or supervisor (targets, "
                       "limits, users).")
    a.add_argument("name", metavar="NAME")
    a.add_argument("--role", required=True, choices=("viewer", "operator", "supervisor"))
    a.add_argument("--password-stdin", action="store_true",
                   help="read the password from standard input (one line)")
    a.add_argument("--database", help="SQLAlchemy URL")
    a.set_defaults(handler=_users_add)
