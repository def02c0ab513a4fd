"""Fixtures for the storage tests: a fresh migrated database on SQLite and PostgreSQL.

``db_engine`` is parametrised over ``["sqlite", "postgresql"]``; each test gets its own
database, copied from a template migrated once per session (a file copy on SQLite,
``CREATE DATABASE … TEMPLATE`` on PostgreSQL). The PostgreSQL cluster is started on
loopback at the first use (``tests/pg_server.py``) and stopped at session end; when the
machine has no PostgreSQL the PostgreSQL cases are skipped with the reason (which the
project's conftest turns into a failure under CI=true).
"""
from __future__ import annotations

import importlib.util
import itertools
import shutil
import sys
from pathlib import Path

import pytest
import sqlalchemy as sa

from db.catalog import add_fishway, add_site, add_tag
from db.engine import make_engine
from db.migrate import upgrade

BACKENDS = ["sqlite", "postgresql"]
_counter = itertools.count()


def _load_pg_server():
    name = "fishway_tests_pg_server"
    if name in sys.modules:
        return sys.modules[name]
    path = Path(__file__).resolve().parents[1] / "pg_server.py"
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


pg_server_module = _load_pg_server()


@pytest.fixture(scope="session")
def pg_server():
    """A running throw-away PostgreSQL server (skips when the machine has none)."""
    try:
        server = pg_server_module.PgServer.start()
    except pg_server_module.PgUnavailableError as exc:
        pytest.skip(f"PostgreSQL not available on this machine: {exc}")
    yield server
    server.stop()


def _admin_execute(server, sql: str) -> None:
    eng = sa.create_engine(server.url("postgres"), isolation_level="AUTOCOMMIT")
    try:
        with eng.connect() as conn:
            conn.exec_driver_sql(sql)
    finally:
        eng.dispose()


@pytest.fixture(scope="session")
def pg_template(pg_server) -> str:
    """Name of a migrated template database."""
    _admin_execute(pg_server, "CREATE DATABASE fishway_template")
    eng = make_engine(pg_server.url("fishway_template"))
    upgrade(eng)
    eng.dispose()
    return "fishway_template"


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("sqlite-template") / "template.sqlite"
    eng = make_engine(sqlite_path=path)
    upgrade(eng)
    eng.dispose()
    return path


@pytest.fixture
def empty_db_url(request, tmp_path):
    """URL of a new, empty (not migrated) database on the backend of ``backend``."""
    backend = request.param if hasattr(request, "param") else "sqlite"
    if backend == "sqlite":
        yield f"sqlite:///{tmp_path / 'empty.sqlite'}"
        return
    server = request.getfixturevalue("pg_server")
    name = f"fishway_empty_{next(_counter)}"
    _admin_execute(server, f"CREATE DATABASE {name}")
    yield server.url(name)
    _admin_execute(server, f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")


@pytest.fixture(params=BACKENDS)
def db_engine(request, tmp_path):
    """A fresh database at the newest migration, on SQLite and on PostgreSQL."""
    if request.param == "sqlite":
        template = request.getfixturevalue("sqlite_template")
        path = tmp_path / "fishway.sqlite"
        shutil.copyfile(template, path)
        eng = make_engine(sqlite_path=path)
        yield eng
        eng.dispose()
        return
    server = request.getfixturevalue("pg_server")
    template = request.getfixturevalue("pg_template")
    name = f"fishway_test_{next(_counter)}"
    _admin_execute(server, f"CREATE DATABASE {name} TEMPLATE {template}")
    eng = make_engine(server.url(name))
    yield eng
    eng.dispose()
    _admin_execute(server, f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")


@pytest.fixture
def tags(db_engine) -> dict[str, int]:
    """Three tags of one invented fishway: level, temperature, dissolved oxygen."""
    site = add_site(db_engine, "Test site")
    fw = add_fishway(db_engine, site, "Test fishway", kind="vertical_slot")
    return {
        "level": add_tag(db_engine, fw, "T.pool1.level", "water_level", "m", poll_period_s=10),
        "temp": add_tag(db_engine, fw, "T.entrance.temp", "temperature", "degC",
                        poll_period_s=60),
        "do": add_tag(db_engine, fw, "T.entrance.do", "dissolved_oxygen", "mg/L",
                      poll_period_s=60),
    }
