"""The PostgreSQL server the store's tests run against, one fresh schema per use.

``CERTIMATCH_TEST_POSTGRES_URL`` (default: the server on 127.0.0.1:5432, trust
authentication, database ``test``, user ``postgres``). Each use gets its own schema
(``<prefix>_<random>``), dropped afterwards, so parallel runs do not collide. A missing
server FAILS the test that asked for it: it never skips.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from contextlib import contextmanager

import psycopg
import pytest

POSTGRES_URL = os.environ.get("CERTIMATCH_TEST_POSTGRES_URL",
                              "postgresql+psycopg://postgres@127.0.0.1:5432/test")


def _libpq(url: str) -> str:
    return url.replace("postgresql+psycopg://", "postgresql://", 1)


@contextmanager
def postgres_schema(prefix: str = "records") -> Iterator[str]:
    """The SQLAlchemy URL of a fresh schema on the server, dropped on the way out."""
    schema = f"{prefix}_{uuid.uuid4().hex[:12]}"
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
