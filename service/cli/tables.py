"""CSV in for the command line: a cost table becomes a problem (service/cli/sheets.py: out).

The cost table is the shape a spreadsheet already has::

    ,ticket-1,ticket-2,ticket-3,supply
    tech-a,10,25,,2
    tech-b,12,,15,1
    demand,1,2,1,
    penalty,,,30,

* the header row names the sinks (its first cell, the corner, is ignored);
* every other row starts with a source id followed by one cost per sink; an empty cell
  means the pair is not allowed (``null`` in the JSON wire format);
* optional: a column named ``supply`` (each source's supply), a row named ``demand`` (each
  sink's demand) and a row named ``penalty`` (cost of each unmet unit; empty = hard demand).
  Without them every supply and demand is 1 and every demand is hard. The names can be
  changed, or the feature turned off with an empty name, when a real id collides with them.
* a table with no source rows is read as a day with no sources (the service decides).

Nothing here touches the network model: the result is an ordinary JSON problem that the
service checks like any other, so the CSV path cannot accept what the JSON path refuses.
Its sources and sinks are built in the columnar form (an array per field), as a large
table is best sent.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

#: A number as a CSV cell may write it: optional sign, ASCII digits, an optional dot
#: fraction and exponent. Python's own int() and float() also take "1_000", "١٢" (other
#: scripts' digits) and "infinity", which a sheet never means as a number.
_NUMBER = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?", re.ASCII)
_NOT_FINITE = frozenset({"nan", "inf", "infinity"})

#: Separators a table may be written with, and their names in a message.
_DELIMITERS = {",": "','", ";": "';'", "\t": "tabs", "|": "'|'"}

class TableError(ValueError):
    """A cost table that cannot be read; the message names the line and the column."""


@dataclass(frozen=True)
class TableLayout:
    """Which header cells and row labels are not sinks and sources; "" turns one off."""

    supply_column: str = "supply"
    demand_row: str = "demand"
    penalty_row: str = "penalty"
    delimiter: str = ","


@dataclass
class CostTable:
    """A problem read from CSV, with the counts the progress line reports."""

    problem: dict[str, Any]
    allowed: int = 0

    @property
    def shape(self) -> tuple[int, int]:
        return len(self.problem["sources"]["id"]), len(self.problem["sinks"]["id"])


def _where(line: int, column: int) -> str:
    return f"line {line}, column {column}"


def _number(text: str, line: int, column: int) -> int | float:
    if not _NUMBER.fullmatch(text):
        if text.lstrip("+-").lower() in _NOT_FINITE:
            raise TableError(f"{_where(line, column)}: {text!r} is not a finite number")
        hint = ("; write decimals with a dot" if "," in text else
                "; write it without digit separators" if "_" in text else "")
        raise TableError(f"{_where(line, column)}: {text!r} is not a number{hint}")
    try:
        if not any(c in text for c in ".eE"):
            return int(text)
        value = float(text)
    except ValueError:       # more digits than int() converts (sys.get_int_max_str_digits)
        raise TableError(f"{_where(line, column)}: {text!r} has too many digits") from None
    if not math.isfinite(value):
        raise TableError(f"{_where(line, column)}: {text!r} is not a finite number")
    return value


def _count(text: str, line: int, column: int, what: str) -> int:
    value = _number(text, line, column)
    if value < 0 or (isinstance(value, float) and not value.is_integer()):
        raise TableError(f"{_where(line, column)}: {what} must be a whole number >= 0, "
                         f"got {text!r}")
    return int(value)


def _rows(text: str, delimiter: str) -> Iterable[tuple[int, list[str]]]:
    """(line number, stripped cells) of every row that is not blank."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
    try:
        for row in reader:
            cells = [c.strip() for c in row]
            if any(cells):
                yield reader.line_num, cells
    except csv.Error as e:
        raise TableError(f"line {reader.line_num}: {e}") from None


def _cells(line: str, delimiter: str) -> int:
    try:
        return len(next(csv.reader([line], delimiter=delimiter)))
    except (csv.Error, StopIteration):
        return 0


def delimiter_hint(text: str, delimiter: str) -> str | None:
    """Which separator the first row looks written with, when it is not ``delimiter``.

    The first non-blank line is split by every separator of ``_DELIMITERS``; one that
    gives at least two cells and more than ``delimiter`` does is named.
    """
    first = next((line for line in text.splitlines() if line.strip()), "")
    have = _cells(first, delimiter)
    counts = {d: _cells(first, d) for d in _DELIMITERS if d != delimiter}
    best = max(counts, key=lambda d: counts[d], default=None)
    if best is None or counts[best] < 2 or counts[best] <= have:
        return None
    option = "tab" if best == "\t" else best
    return (f"the first row looks separated by {_DELIMITERS[best]}, not by "
            f"{_DELIMITERS.get(delimiter, repr(delimiter))}: give --delimiter '{option}'")


def read_cost_table(text: str, layout: TableLayout | None = None) -> CostTable:
    """Read a CSV cost table (see the module docstring) into a JSON problem.

    Raises TableError naming the line and column of the first thing that is wrong, and
    the separator the table looks written with when it is not the one given.
    """
    layout = layout or TableLayout()
    try:
        return _read_cost_table(text, layout)
    except TableError as e:
        hint = delimiter_hint(text, layout.delimiter)
        if hint is None:
            raise
        raise TableError(f"{e}; {hint}") from None


def _read_cost_table(text: str, layout: TableLayout) -> CostTable:
    rows = iter(_rows(text, layout.delimiter))
    try:
        header_line, header = next(rows)
    except StopIteration:
        raise TableError("the file has no rows; the first row must name the sinks") from None

    supply_at = [k for k, name in enumerate(header) if k and layout.supply_column
                 and name == layout.supply_column]
    if len(supply_at) > 1:
        raise TableError(f"line {header_line}: two columns are named "
                         f"{layout.supply_column!r}")
    supply_col = supply_at[0] if supply_at else None
    sink_cols = [k for k in range(1, len(header)) if k != supply_col]
    if not sink_cols:
        raise TableError(f"line {header_line}: the first row names no sinks (it should be "
                         "a corner cell, then one sink id per column)")
    seen: dict[str, str] = {}
    # the problem is built in the columnar form: one array per field (README, "The
    # columnar form"); arrays nobody fills are left out at the end
    sinks: dict[str, list[Any]] = {"id": [], "demand": [None] * len(sink_cols),
                                   "penalty": [None] * len(sink_cols)}
    sources: dict[str, list[Any]] = {"id": [], "supply": []}
    for k in sink_cols:
        sid = header[k]
        if not sid:
            raise TableError(f"{_where(header_line, k + 1)}: the column has no sink id")
        if sid in seen:
            raise TableError(f"{_where(header_line, k + 1)}: id {sid!r} appears twice")
        seen[sid] = _where(header_line, k + 1)
        sinks["id"].append(sid)

    table = CostTable({"sources": sources, "sinks": sinks, "costs": []})
    special: dict[str, list[int]] = {name: [] for name in (layout.demand_row,
                                                           layout.penalty_row) if name}
    width = len(header)
    for line, cells in rows:
        if len(cells) < width:
            raise TableError(f"line {line}: {len(cells)} cells, but the first row has {width}; "
                             "leave a cell empty to mark a pair as not allowed")
        if any(cells[width:]):
            raise TableError(f"line {line}: more cells than the first row has ({width})")
        label = cells[0]
        if not label:
            raise TableError(f"{_where(line, 1)}: the row has no source id")
        if label in special:
            if special[label]:
                raise TableError(f"line {line}: a second row named {label!r}")
            special[label].append(line)
            _read_sink_row(label, layout, cells, line, sink_cols, supply_col, sinks)
            continue
        if label in seen:
            raise TableError(f"{_where(line, 1)}: id {label!r} appears twice "
                             f"(first at {seen[label]})")
        seen[label] = _where(line, 1)
        sources["id"].append(label)
        sources["supply"].append(
            _count(cells[supply_col], line, supply_col + 1, "supply")
            if supply_col is not None and cells[supply_col] else None)
        row: list[int | float | None] = []
        for k in sink_cols:
            row.append(_number(cells[k], line, k + 1) if cells[k] else None)
        table.allowed += sum(c is not None for c in row)
        table.problem["costs"].append(row)
    for columns in (sources, sinks):
        for key in [k for k, col in columns.items() if k != "id" and
                    all(v is None for v in col)]:
            del columns[key]
    # No source rows is a day on which nobody is available: sent as it is, the service
    # decides (every hard demand then stays unmet). No sinks is refused above instead:
    # a header of one cell is far more often a table cut with the wrong separator.
    return table


def _read_sink_row(label: str, layout: TableLayout, cells: Sequence[str], line: int,
                   sink_cols: Sequence[int], supply_col: int | None,
                   sinks: dict[str, list[Any]]) -> None:
    if supply_col is not None and cells[supply_col]:
        raise TableError(f"{_where(line, supply_col + 1)}: the {label!r} row has no "
                         "supply; leave this cell empty")
    for j, k in enumerate(sink_cols):
        if not cells[k]:
            continue                    # empty: demand 1, or hard demand
        if label == layout.demand_row:
            sinks["demand"][j] = _count(cells[k], line, k + 1, "demand")
        else:
            penalty = _number(cells[k], line, k + 1)
            if penalty < 0:
                raise TableError(f"{_where(line, k + 1)}: a penalty must be >= 0, "
                                 f"got {cells[k]!r}")
            sinks["penalty"][j] = penalty
