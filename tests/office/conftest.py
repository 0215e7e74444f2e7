"""A real PostgreSQL for the archive tests: one throw-away server per test session (initdb +
pg_ctl as an unprivileged user, Unix socket only), a fresh database per test."""

from __future__ import annotations

import itertools

import pytest

from tests.pgserver import PASSWORD_ROLE, PgServer

_names = itertools.count(1)
OFFICE_PASSWORD = "larkspur-archive-test-only"


@pytest.fixture(scope="session")
def pg():
    server = PgServer()
    server.start()
    server.wait_ready()
    import psycopg

    with psycopg.connect(server.conninfo(), autocommit=True) as conn:
        conn.execute(f"CREATE ROLE {PASSWORD_ROLE} LOGIN PASSWORD '{OFFICE_PASSWORD}'")
    yield server
    server.stop()


@pytest.fixture
def db(pg):
    """conninfo of a fresh, empty database."""
    return pg.create_database(f"archive_{next(_names)}")
