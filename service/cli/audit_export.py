"""``certimatch audit export``: the decision log as JSON lines with a signed checkpoint
(the format is described in service/records/audit.py and the README)."""

from __future__ import annotations

import argparse
import os
import sys
from datetime import UTC, date, datetime
from pathlib import Path

from service.cli.store import open_store, record_settings, stored_signer
from service.cli.talk import EXIT_OK, CliError
from service.records.audit import export
from service.records.errors import LogDamaged, StoreUnavailable
from service.records.model import rfc3339


def since_argument(text: str) -> str:
    """DATE (2026-12-01, midnight UTC) or an RFC 3339 time, as the store's fixed-width
    RFC 3339 UTC text (so that text order is time order)."""
    try:
        if len(text) == 10:
            moment = datetime.combine(date.fromisoformat(text), datetime.min.time(), UTC)
        else:
            moment = datetime.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"must be a date (2026-12-01) or an RFC 3339 time (2026-12-01T08:00:00Z), "
            f"got {text!r}") from None
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return rfc3339(moment)


def _cmd_audit_export(args: argparse.Namespace) -> int:
    settings = record_settings()
    signer = stored_signer(settings)
    store = open_store(settings)
    to_stdout = args.output == "-"
    target = Path(args.output)
    temporary = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    try:
        if to_stdout:
            count = export(store, signer, sys.stdout.buffer, args.since)
            sys.stdout.flush()
        else:
            # Written beside its name and renamed: a reader never sees half an export.
            with open(temporary, "wb") as out:
                count = export(store, signer, out, args.since)
                out.flush()
                os.fsync(out.fileno())
            os.replace(temporary, target)
    except OSError as e:
        temporary.unlink(missing_ok=True)
        raise CliError(f"cannot write {args.output}: {e.strerror or e}") from None
    except (StoreUnavailable, LogDamaged) as e:
        temporary.unlink(missing_ok=True)
        raise CliError(f"{e.detail}") from None
    finally:
        store.engine.dispose()
    if not args.quiet:
        where = "standard output" if to_stdout else args.output
        print(f"certimatch: exported {count} record{'' if count == 1 else 's'} to {where}",
              file=sys.stderr)
    return EXIT_OK
