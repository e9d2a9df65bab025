"""CSV out: the allocation, the unmet demand and the unused supply, each a sheet.

Together with the summary JSON (service/cli/outcome.py) they keep the whole answer: what
goes where, what is left waiting and whether it was hard demand, and what capacity is
idle. Every sheet has a header row, also when it has no other row.

Spreadsheet safety (on unless ``--no-spreadsheet-safe``): an id a spreadsheet would run as
a formula (it starts with ``= + - @``, a tab or a carriage return; OWASP, "CSV
Injection") is written with a ``'`` in front, and so is an id that itself starts with
``'``. A script gets the exact id back by removing one leading ``'`` from any id cell
that starts with one; with ``--no-spreadsheet-safe`` the ids are written exactly as they
are (the csv module still quotes a cell holding a comma or a quote, which every CSV
reader undoes).
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from service.report.style import format_number

ALLOCATION_COLUMNS = ("from", "to", "flow", "cost")
UNMET_COLUMNS = ("id", "amount", "demand", "hard", "reason", "reduced_cost")
UNUSED_COLUMNS = ("id", "amount", "supply")
#: First column of the unmet and unused sheets of a batch: the input the row belongs to.
INPUT_COLUMN = "input"

#: First characters that make a spreadsheet read a cell as a formula (OWASP, "CSV
#: Injection"); ids come from whoever filed the ticket, so they are defused on the way out.
#: The quote itself is on the list so that removing one leading quote is always exact.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r", "'")


def spreadsheet_text(text: str, safe: bool = True) -> str:
    """``text`` for a spreadsheet cell, with a formula-like start defused by a quote."""
    return "'" + text if safe and text.startswith(_FORMULA_START) else text


def _sheet(header: Sequence[str], rows: Iterable[Sequence[str]]) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return out.getvalue()


def _flag(value: bool | None) -> str:
    return "" if value is None else "true" if value else "false"


def allocation_csv(answer: Mapping[str, Any], safe: bool = True) -> str:
    """The allocation as CSV: a header row, then ``from,to,flow,cost`` per arc with flow."""
    return _sheet(ALLOCATION_COLUMNS, (
        [spreadsheet_text(str(r["from"]), safe), spreadsheet_text(str(r["to"]), safe),
         format_number(r["flow"]), format_number(r.get("cost", ""))]
        for r in answer.get("allocation", [])))


def unmet_csv(rows: Iterable[tuple[str | None, Mapping[str, Any]]], safe: bool = True,
              batch: bool = False) -> str:
    """Unmet demand, ``id,amount,demand,hard,reason,reduced_cost`` (``input`` first in a
    batch); ``reason`` is why the sink waits, ``reduced_cost`` given with ``penalty`` only.

    ``rows`` are (input name, row of :func:`service.cli.outcome.unmet_rows`).
    """
    header = ((INPUT_COLUMN,) if batch else ()) + UNMET_COLUMNS
    return _sheet(header, (
        ([spreadsheet_text(name or "", safe)] if batch else [])
        + [spreadsheet_text(str(r["id"]), safe), format_number(r["amount"]),
           "" if r["demand"] is None else format_number(r["demand"]), _flag(r["hard"]),
           spreadsheet_text(str(r.get("reason") or ""), safe),
           "" if r.get("reduced_cost") is None else format_number(r["reduced_cost"])]
        for name, r in rows))


def unused_csv(rows: Iterable[tuple[str | None, Mapping[str, Any]]], safe: bool = True,
               batch: bool = False) -> str:
    """Unused supply, ``id,amount,supply`` (``input`` first in a batch)."""
    header = ((INPUT_COLUMN,) if batch else ()) + UNUSED_COLUMNS
    return _sheet(header, (
        ([spreadsheet_text(name or "", safe)] if batch else [])
        + [spreadsheet_text(str(r["id"]), safe), format_number(r["amount"]),
           "" if r["supply"] is None else format_number(r["supply"])]
        for name, r in rows))
