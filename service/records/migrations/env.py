"""Alembic environment of the decision store.

Run by :func:`service.records.migrate.upgrade`, which hands over an open connection
(``config.attributes["connection"]``); from the alembic command line the URL comes from
``CERTIMATCH_DATABASE_URL``. Only online migrations: a schema change of an audit log is
applied to the database, not printed.
"""

from __future__ import annotations

import os

from alembic import context
from sqlalchemy import text

from service.records.tables import metadata

#: Taken by every migration run on PostgreSQL, so that two replicas upgrading at once
#: apply each revision once (any fixed number; this one spells "CMDB").
_MIGRATION_LOCK = 0x434D4442


def _run(connection) -> None:  # type: ignore[no-untyped-def]
    context.configure(connection=connection, target_metadata=metadata,
                      render_as_batch=connection.dialect.name == "sqlite")
    with context.begin_transaction():
        if connection.dialect.name == "postgresql":
            connection.execute(text("SELECT pg_advisory_xact_lock(:k)"),
                               {"k": _MIGRATION_LOCK})
        context.run_migrations()


connection = context.config.attributes.get("connection")
if connection is not None:
    _run(connection)
else:
    from service.records.store import make_engine

    engine = make_engine(os.environ["CERTIMATCH_DATABASE_URL"])
    with engine.connect() as opened:
        _run(opened)
    engine.dispose()
