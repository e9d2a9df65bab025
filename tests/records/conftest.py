"""Fixtures of the decision-store tests: a store on SQLite and on a real PostgreSQL server.

The PostgreSQL tests run against ``CERTIMATCH_TEST_POSTGRES_URL`` (default: the server on
127.0.0.1:5432, trust authentication, database ``test``, user ``postgres``). Each test
gets its own schema (``records_<random>``), dropped afterwards, so parallel runs do not
collide. A missing server FAILS these tests: it does not skip them.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from pathlib import Path

import psycopg
import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from records_helpers import Clock

from service.records.migrate import upgrade
from service.records.signing import Signer
from service.records.store import DecisionStore, make_engine

POSTGRES_URL = os.environ.get("CERTIMATCH_TEST_POSTGRES_URL",
                              "postgresql+psycopg://postgres@127.0.0.1:5432/test")


def _libpq(url: str) -> str:
    return url.replace("postgresql+psycopg://", "postgresql://", 1)


@pytest.fixture
def postgres_url() -> Iterator[str]:
    """The URL of a fresh schema on the PostgreSQL server, dropped after the test."""
    schema = f"records_{uuid.uuid4().hex[:12]}"
    try:
        admin = psycopg.connect(_libpq(POSTGRES_URL), autocommit=True, connect_timeout=5)
    except psycopg.OperationalError as e:
        pytest.fail(f"PostgreSQL is required by the decision-store tests and is not "
                    f"reachable at {POSTGRES_URL}: {e}", pytrace=False)
    with admin:
        admin.execute(f'CREATE SCHEMA "{schema}"')
        try:
            yield f"{POSTGRES_URL}?options=-csearch_path%3D{schema}"
        finally:
            admin.execute(f'DROP SCHEMA "{schema}" CASCADE')


@pytest.fixture(params=["sqlite", "postgresql"])
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """Each test that takes it runs on both backends."""
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'decisions.sqlite3'}"
    return request.getfixturevalue("postgres_url")


@pytest.fixture
def clock() -> Clock:
    return Clock()


@pytest.fixture
def store(database_url: str, clock: Clock) -> Iterator[DecisionStore]:
    engine = make_engine(database_url)
    upgrade(engine)
    yield DecisionStore(engine, clock=clock)
    engine.dispose()


@pytest.fixture(scope="session")
def signer() -> Signer:
    return Signer(Ed25519PrivateKey.generate())
