"""Fixtures of the decision-store tests: a store on SQLite and on a real PostgreSQL server.

The PostgreSQL tests run against ``CERTIMATCH_TEST_POSTGRES_URL`` (tests/postgres_server.py:
the server on 127.0.0.1:5432 by default). Each test gets its own schema
(``records_<random>``), dropped afterwards, so parallel runs do not collide. A missing
server FAILS these tests: it does not skip them.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from postgres_server import postgres_schema
from records_helpers import Clock

from service.records.migrate import upgrade
from service.records.signing import Signer
from service.records.store import DecisionStore, make_engine


@pytest.fixture
def postgres_url() -> Iterator[str]:
    """The URL of a fresh schema on the PostgreSQL server, dropped after the test."""
    with postgres_schema("records") as url:
        yield url


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
