"""Shared fixtures: small generated images and recipes (nothing large is stored)."""

from __future__ import annotations

import os

import numpy as np
import pytest


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


# ------------------------------------------------------------- PostgreSQL

#: Set by CI: a PostgreSQL server that cannot be started fails the tests instead of skipping them.
REQUIRE_POSTGRES = os.environ.get("SURFINSPECT_REQUIRE_POSTGRES") == "1"


@pytest.fixture(scope="session")
def pg_server():
    """One real PostgreSQL server for the session (initdb in a temporary folder, loopback), stopped at the end."""
    from pg_server import start_server

    try:
        import psycopg  # noqa: F401
    except ImportError:
        reason = "psycopg is not installed (pip install -e '.[test]')"
    else:
        try:
            server = start_server()
        except RuntimeError as exc:
            reason = str(exc)
        else:
            yield server
            server.stop()
            return
    if REQUIRE_POSTGRES:
        pytest.fail(f"PostgreSQL is required here and cannot be started: {reason}")
    pytest.skip(f"needs a PostgreSQL server: {reason}")


@pytest.fixture
def pg_database(pg_server):
    """A fresh database on the session's server, dropped after the test; yields its name."""
    name = pg_server.create_database()
    yield name
    pg_server.drop_database(name)
