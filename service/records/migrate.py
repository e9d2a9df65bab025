"""The decision store's schema: apply the migrations, or say how far behind it is.

``certimatch db upgrade`` calls :func:`upgrade`; the service calls
:func:`prepare` at start-up: it creates the schema on an empty database (a fresh data
directory) and otherwise refuses to start on a schema that is not at the newest revision
this version ships, saying what to run (:func:`require_current`).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from alembic.script.revision import ResolutionError
from alembic.util import CommandError
from sqlalchemy import Engine, inspect
from sqlalchemy.exc import DBAPIError

from service.records.errors import SchemaNotCurrent, StoreUnavailable

__all__ = ["SchemaStatus", "alembic_config", "prepare", "require_current", "schema_status",
           "upgrade"]

_MIGRATIONS = Path(__file__).with_name("migrations")
UPGRADE_COMMAND = "certimatch db upgrade"


def alembic_config() -> Config:
    """Alembic's configuration for the migrations shipped in this package."""
    config = Config()
    config.set_main_option("script_location", str(_MIGRATIONS))
    return config


@dataclass(frozen=True)
class SchemaStatus:
    """Where the database's schema stands against this version's newest revision."""

    current: str | None
    head: str

    @property
    def at_head(self) -> bool:
        return self.current == self.head

    def message(self) -> str:
        """A sentence for the operator: what is wrong and what to run."""
        if self.at_head:
            return f"the decision store's schema is at revision {self.head}"
        if self.current is None:
            return ("the decision store has no schema yet: run "
                    f"`{UPGRADE_COMMAND}` to create it (revision {self.head})")
        script = ScriptDirectory.from_config(alembic_config())
        try:
            known = script.get_revision(self.current) is not None
        except (CommandError, ResolutionError):
            known = False
        if not known:
            return (f"the decision store's schema is at revision {self.current}, which "
                    f"this version does not know (its newest is {self.head}): run a newer "
                    "certimatch against this database")
        return (f"the decision store's schema is at revision {self.current}, this version "
                f"needs {self.head}: run `{UPGRADE_COMMAND}`")


def schema_status(engine: Engine) -> SchemaStatus:
    """The database's revision and the newest one shipped; StoreUnavailable when the
    database cannot be reached."""
    head = ScriptDirectory.from_config(alembic_config()).get_current_head()
    assert head is not None                     # the package ships at least one revision
    try:
        with engine.connect() as conn:
            current = MigrationContext.configure(conn).get_current_revision()
    except DBAPIError as e:
        raise StoreUnavailable(f"the decision store cannot be reached: {_reason(e)}") from e
    return SchemaStatus(current, head)


def require_current(engine: Engine) -> None:
    """Return when the schema is current; SchemaNotCurrent saying what to run if not."""
    status = schema_status(engine)
    if not status.at_head:
        raise SchemaNotCurrent(status.message())


def upgrade(engine: Engine, revision: str = "head") -> SchemaStatus:
    """Apply every migration up to ``revision`` (idempotent); the resulting status."""
    config = alembic_config()
    try:
        with engine.begin() as conn:
            config.attributes["connection"] = conn
            command.upgrade(config, revision)
    except DBAPIError as e:
        raise StoreUnavailable(f"the decision store cannot be upgraded: {_reason(e)}") from e
    return schema_status(engine)


def _reason(error: DBAPIError) -> str:
    """The driver's first line, without SQLAlchemy's statement and link."""
    return str(error.orig).strip().splitlines()[0] if error.orig else type(error).__name__


def prepare(engine: Engine) -> SchemaStatus:
    """The start-up check: create the schema on an empty database (no table at all), so
    that a fresh data directory just works; refuse (SchemaNotCurrent, saying what to run)
    a schema that is behind or unknown. StoreUnavailable when the database cannot be
    reached."""
    status = schema_status(engine)
    if status.current is None and not status.at_head and _empty(engine):
        try:
            status = upgrade(engine)
        except (StoreUnavailable, CommandError):
            # Several workers start at once: one created it, the others' DDL failed.
            status = schema_status(engine)
    if not status.at_head:
        raise SchemaNotCurrent(status.message())
    return status


def _empty(engine: Engine) -> bool:
    try:
        return not inspect(engine).get_table_names()
    except DBAPIError as e:
        raise StoreUnavailable(f"the decision store cannot be reached: {_reason(e)}") from e
