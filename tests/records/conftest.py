"""Fixtures of the decision-store tests: a store on SQLite and on a real PostgreSQL server.

The PostgreSQL tests run against ``CERTIMATCH_TEST_POSTGRES_URL`` (tests/postgres_server.py:
the server on 127.0.0.1:5432 by default). Each test gets its own schema
(``records_<random>``), dropped afterwards, so parallel runs do not collide. A missing
server FAILS these tests: it does not skip them.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from flask.testing import FlaskClient
from postgres_server import postgres_schema
from records_helpers import Clock
from servers import clean_app

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


class BufferedClient(FlaskClient):
    """A test client whose answers are read whole and closed at once, as a server sends
    them: the view's clean-up (the collector back on) runs before the test goes on."""

    def open(self, *args: Any, **kwargs: Any) -> Any:
        kwargs.setdefault("buffered", True)
        return super().open(*args, **kwargs)


@pytest.fixture
def new_app():
    """``new_app(config)``: ``clean_app`` with a :class:`BufferedClient`, its store closed
    after the test (a pooled PostgreSQL connection left open warns when collected)."""
    made: list[Any] = []

    def build(config: dict[str, Any]) -> Any:
        made.append(clean_app(config))
        made[-1].test_client_class = BufferedClient
        return made[-1]

    yield build
    for app in made:
        app.extensions["certimatch.recorder"].close()


@pytest.fixture
def make_app(database_url: str, tmp_path: Path, new_app):
    """``make_app(**settings)``: an app on this test's database and data folder."""
    def build(**config: Any) -> Any:
        return new_app({"DATABASE_URL": database_url, "DATA_DIR": str(tmp_path / "data"),
                        **config})
    return build
