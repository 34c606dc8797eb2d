"""Fixtures: a real SQLite file per test, and a real PostgreSQL schema per test.

PostgreSQL: the server at ``BENCHWRIGHT_TEST_PG_URL`` (tests skip with the reason when it is unset).
Each test gets its own schema ``bw_test_<session>_<n>`` selected through the connection's
``search_path`` (libpq ``options``), dropped after the test; the session drops any leftover.
"""

from __future__ import annotations

import itertools
import os
import uuid
from collections.abc import Iterator

import pytest
import sqlalchemy as sa

PG_ENV = "BENCHWRIGHT_TEST_PG_URL"
SESSION = uuid.uuid4().hex[:8]
_counter = itertools.count()


@pytest.fixture
def sqlite_url(tmp_path) -> str:
    return f"sqlite:///{tmp_path / 'results.db'}"


@pytest.fixture(scope="session")
def pg_admin() -> Iterator[sa.Engine]:
    base = os.environ.get(PG_ENV)
    if not base:
        pytest.skip(f"{PG_ENV} is not set: no PostgreSQL server to test against")
    engine = sa.create_engine(base, isolation_level="AUTOCOMMIT")
    try:
        with engine.connect() as conn:
            conn.execute(sa.text("SELECT 1"))
    except sa.exc.OperationalError as exc:
        pytest.fail(f"{PG_ENV} is set but the server does not answer: {exc}")
    yield engine
    with engine.connect() as conn:
        leftovers = conn.execute(
            sa.text("SELECT nspname FROM pg_namespace WHERE nspname LIKE :p"),
            {"p": f"bw_test_{SESSION}_%"},
        ).scalars()
        for name in list(leftovers):
            conn.execute(sa.text(f'DROP SCHEMA "{name}" CASCADE'))
    engine.dispose()


@pytest.fixture
def pg_url(pg_admin: sa.Engine) -> Iterator[str]:
    schema = f"bw_test_{SESSION}_{next(_counter)}"
    with pg_admin.connect() as conn:
        conn.execute(sa.text(f'CREATE SCHEMA "{schema}"'))
    url = pg_admin.url.update_query_dict({"options": f"-csearch_path={schema}"})
    yield url.render_as_string(hide_password=False)
    with pg_admin.connect() as conn:
        conn.execute(sa.text(f'DROP SCHEMA "{schema}" CASCADE'))


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def db_url(request) -> str:
    """The same test against a real SQLite file and a real PostgreSQL schema."""
    return request.getfixturevalue("sqlite_url" if request.param == "sqlite" else "pg_url")


@pytest.fixture
def store(db_url):
    from sequencer.store import Store

    with Store.open(db_url) as s:
        yield s
