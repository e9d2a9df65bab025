"""``certimatch db upgrade``: bring the decision store's schema to this version's newest
revision (Alembic migrations shipped in service/records/migrations)."""

from __future__ import annotations

import argparse
from typing import Any

from alembic.util import CommandError

from service.cli.store import open_engine, record_settings
from service.cli.talk import EXIT_OK, CliError
from service.records.errors import StoreUnavailable
from service.records.migrate import schema_status, upgrade
from service.settings import ENV_PREFIX

DB_EPILOG = f"""\
The database is the service's: {ENV_PREFIX}DATABASE_URL, else the SQLite file
decisions.sqlite3 in {ENV_PREFIX}DATA_DIR (default ./certimatch-data), made if
missing. Upgrading is idempotent and safe to run before every start; the service
refuses to start on a schema that is behind and names this command.

exit codes: 0 the schema is at the newest revision; 1 it is not (the database cannot
be reached, or it holds a revision this version does not know: run a newer one).
"""


def add_db(sub: Any, raw: type[argparse.HelpFormatter]) -> None:
    db = sub.add_parser("db", help="the decision store's database: apply migrations",
                        description="Manage the decision store's database.",
                        formatter_class=raw, epilog=DB_EPILOG)
    actions = db.add_subparsers(dest="db_command", required=True, metavar="ACTION")
    up = actions.add_parser("upgrade", help="apply every migration this version ships",
                            description="Apply the Alembic migrations of the decision store "
                            "up to the newest revision.", formatter_class=raw,
                            epilog=DB_EPILOG)
    up.set_defaults(handler=_cmd_db_upgrade)


def _cmd_db_upgrade(args: argparse.Namespace) -> int:
    settings = record_settings()
    engine = open_engine(settings)
    try:
        try:
            status = upgrade(engine)
        except CommandError:
            # Alembic cannot walk from a revision it does not know; say which and why.
            raise CliError(schema_status(engine).message()) from None
        except StoreUnavailable as e:
            raise CliError(str(e)) from None
    finally:
        engine.dispose()
    print(f"certimatch: {status.message()}")
    return EXIT_OK
