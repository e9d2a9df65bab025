"""CSV cost tables read with the wrong separator, and cells that only Python calls numbers."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from service.cli import main
from service.cli.tables import TableError, delimiter_hint, read_cost_table


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _csv(tmp_path: Path, text: str) -> str:
    path = tmp_path / "costs.csv"
    path.write_text(text, encoding="utf-8")
    return str(path)


SEMICOLONS = ";ticket-1;ticket-2\ntech-a;4;7,5\ntech-b;;2\n"
TABS = "\tticket-1\tticket-2\ntech-a\t4\t7.5\ntech-b\t\t2\n"


@pytest.mark.parametrize(("table", "named", "option"), [
    (SEMICOLONS, "';'", "--delimiter ';'"),
    (TABS, "tabs", "--delimiter 'tab'"),
])
def test_a_table_read_with_the_default_comma_names_its_separator(capsys, tmp_path, table,
                                                                 named, option):
    code, out, err = _run(capsys, "solve", _csv(tmp_path, table), "--local")
    assert code == 1
    assert out == ""
    assert f"the first row looks separated by {named}, not by ','" in err
    assert option in err


def test_the_named_separator_then_reads_the_table(capsys, tmp_path):
    # Worked by hand: tech-b can only take ticket-2 (2), tech-a then ticket-1 (4): 6.
    code, out, err = _run(capsys, "solve", _csv(tmp_path, TABS), "--local",
                          "--delimiter", "tab")
    assert code == 0, err
    assert json.loads(out)["objective"] == 6


def test_a_comma_table_read_with_semicolons_is_named_too(capsys, tmp_path):
    code, _, err = _run(capsys, "solve", _csv(tmp_path, ",t1,t2\ntech-a,1,2\n"), "--local",
                        "--delimiter", ";")
    assert code == 1
    assert "looks separated by ','" in err


def test_no_separator_hint_when_the_separator_is_right():
    # Control: a comma table with a bad cell gets the cell's message and nothing more.
    with pytest.raises(TableError) as caught:
        read_cost_table(",t1,t2\ntech-a,1,cheap\n")
    assert "'cheap' is not a number" in str(caught.value)
    assert "looks separated" not in str(caught.value)
    assert delimiter_hint(",t1,t2\n", ",") is None
    assert delimiter_hint("corner\n", ",") is None        # one cell any way it is cut


@pytest.mark.parametrize(("cell", "message"), [
    ("1_000", "'1_000' is not a number; write it without digit separators"),
    ("1_000.5", "'1_000.5' is not a number; write it without digit separators"),
    ("\u0661\u0662", "is not a number"),             # Arabic-Indic digits: int() takes them
    ("0x1A", "'0x1A' is not a number"),
    ("infinity", "'infinity' is not a finite number"),
    ("-inf", "'-inf' is not a finite number"),
    ("1e999", "'1e999' is not a finite number"),
    ("1" * 5000, "has too many digits"),
])
def test_cells_python_would_take_are_not_numbers(cell, message):
    # int("1_000") == 1000 and int("١٢") == 12 in Python (PEP 515; str.isdecimal), which
    # no spreadsheet writes for a number.
    assert int("1_000") == 1000 and int("\u0661\u0662") == 12
    with pytest.raises(TableError) as caught:
        read_cost_table(f",t1\ntech-a,{cell}\n")
    assert str(caught.value).startswith("line 2, column 2: ")
    assert message in str(caught.value)


@pytest.mark.parametrize(("cell", "value"), [
    ("12", 12), ("+3", 3), ("-4", -4), ("7.5", 7.5), (".5", 0.5), ("5.", 5.0),
    ("1e3", 1000.0), ("2E-1", 0.2),
])
def test_numbers_a_sheet_writes_are_read(cell, value):
    table = read_cost_table(f",t1\ntech-a,{cell}\n")
    assert table.problem["costs"] == [[value]]


def test_a_supply_with_digit_separators_is_refused(capsys, tmp_path):
    code, _, err = _run(capsys, "solve", _csv(tmp_path, ",t1,supply\ntech-a,1,1_0\n"),
                        "--local")
    assert code == 1
    assert "line 2, column 3: '1_0' is not a number" in err


def test_a_table_without_source_rows_is_a_day_with_no_sources():
    # Sent as it is: the service decides about an empty day (every hard demand unmet).
    table = read_cost_table(",ticket-1,ticket-2\ndemand,2,1\npenalty,,30\n")
    # built in the columnar form (README, "The columnar form"), unfilled arrays left out
    assert table.problem == {"sources": {"id": []}, "costs": [],
                             "sinks": {"id": ["ticket-1", "ticket-2"], "demand": [2, 1],
                                       "penalty": [None, 30]}}


def test_a_repeated_key_in_a_json_file_is_not_collapsed_before_it_is_sent(capsys, tmp_path):
    # The CLI must not re-write a file with a repeated key (the last one winning) and send
    # the collapsed copy: the service refuses the body as it is, naming the key.
    from service.cli import main

    path = tmp_path / "twice.json"
    path.write_text('{"sources": [{"id": "a", "supply": 1, "supply": 5}], '
                    '"sinks": [{"id": "b"}], "costs": [[3]]}')
    code = main(["solve", str(path), "--local", "--objective", "min", "-q"])
    _, err = capsys.readouterr()
    assert code == 1
    assert "/sources/0/supply" in err
