"""The columnar form (schemas/columns.py): a table sent as an object of equal-length arrays.

Issue 15 fixes what it must do: the same validation and errors as the record form, with
JSON Pointers into the arrays (``/arcs/cost/1234`` for ``/arcs/1234/cost``), and the same
answer byte for byte. The reference here is therefore the record form itself: every seeded
problem of tests/reference.py is sent both ways, whole and with a bad entry put in, and
the answers (or the errors, pointers mapped) must be equal. The conversion to columns is
written in this file, not taken from the service.
"""

from __future__ import annotations

import re
import zlib
from typing import Any

import numpy as np
import orjson
import pytest
from marshmallow import ValidationError

from schemas import ProblemSchema, to_pointers
from service.errors import InvalidProblem, ServiceError
from service.network.build import build_network
from service.settings import Settings
from service.solve.pipeline import solve_body
from tests.reference import FAMILIES, instance

TABLES = ("sources", "sinks", "nodes", "arcs")
SEEDS = range(6)


def columns_of(records: list[dict[str, Any]], extra: tuple[str, ...] = ()) -> dict[str, list]:
    """The columnar form of a list of records: an array per key any record has, null where
    a record lacks it."""
    keys: dict[str, None] = dict.fromkeys(k for r in records for k in r)
    keys.update(dict.fromkeys(extra))
    return {k: [r.get(k) for r in records] for k in keys}


def columnar(body: dict[str, Any], tables: tuple[str, ...] = TABLES) -> dict[str, Any]:
    return {k: columns_of(v) if k in tables and isinstance(v, list) else v
            for k, v in body.items()}


_RECORD_POINTER = re.compile(r"/(sources|sinks|nodes|arcs)/(\d+)(?:/([a-z_]+))?")


def as_column_pointer(text: str) -> str:
    """A record pointer as the columnar form names the same entity; the whole of an arc is
    its entry of ``to`` (README, "The columnar form")."""
    return _RECORD_POINTER.sub(lambda m: f"/{m[1]}/{m[3] or 'to'}/{m[2]}", text)


def problems(family: str, seeds: range) -> list[dict[str, Any]]:
    """The seeded problems of ``family``, and those sent as a matrix also as arcs (the
    allowed cells, in row-major order), so that every shape is sent with arcs too."""
    out = []
    for seed in seeds:
        body = instance(family, seed)
        out.append(body)
        if "costs" in body:
            sources, sinks = body["sources"], body["sinks"]
            arcs = [{"from": s["id"], "to": t["id"], "cost": c}
                    for s, row in zip(sources, body["costs"], strict=True)
                    for t, c in zip(sinks, row, strict=True) if c is not None]
            out.append({**{k: v for k, v in body.items() if k != "costs"}, "arcs": arcs})
    return out


def answer_or_errors(body: dict[str, Any]) -> Any:
    """The answer as bytes, or (status, sorted errors) of a refusal."""
    try:
        return orjson.dumps(solve_body(body, Settings()))
    except InvalidProblem as e:
        return 422, sorted((x["pointer"], x["detail"]) for x in e.errors)
    except ServiceError as e:
        return e.status, e.detail


def mapped(outcome: Any) -> Any:
    if isinstance(outcome, tuple) and isinstance(outcome[1], list):
        return outcome[0], sorted((as_column_pointer(p), as_column_pointer(d))
                                  for p, d in outcome[1])
    return outcome


def errors_of(body: dict[str, Any]) -> list[tuple[str, str]]:
    try:
        data = ProblemSchema().load(body)
    except ValidationError as e:
        return [(x["pointer"], x["detail"]) for x in to_pointers(e.messages)]
    try:
        build_network(data, Settings())
    except InvalidProblem as e:
        return [(x["pointer"], x["detail"]) for x in e.errors]
    return []


# -- the same answer, byte for byte ---------------------------------------------------------


@pytest.mark.parametrize("family", FAMILIES)
def test_every_seeded_problem_has_the_same_answer_in_both_forms(family):
    for body in problems(family, SEEDS):
        record = answer_or_errors(body)
        assert isinstance(record, bytes), record
        assert answer_or_errors(columnar(body)) == record
        # each table alone in the columnar form, the others as records
        for table in TABLES:
            if table in body:
                assert answer_or_errors(columnar(body, (table,))) == record, table


def test_nulls_in_optional_arrays_are_their_defaults():
    # the record form's absent keys; an array of nulls is an absent array
    body = instance("penalties", 3)
    cols = columnar(body)
    n = len(body["sources"])
    cols["sources"]["supply"] = [s.get("supply") for s in body["sources"]]
    cols["arcs"]["capacity"] = [None] * len(body["arcs"])
    record = {**body, "arcs": [{k: v for k, v in a.items() if k != "capacity"}
                               for a in body["arcs"]]}
    assert answer_or_errors(cols) == answer_or_errors(record)
    assert len(cols["sources"]["id"]) == n


def test_columns_load_to_the_same_arrays_as_records():
    body = instance("transshipment", 2)
    a, b = ProblemSchema().load(body), ProblemSchema().load(columnar(body))
    for table in TABLES:
        assert not a[table].columnar and b[table].columnar
        assert a[table].columns.keys() == b[table].columns.keys()
        for key, col in a[table].columns.items():
            other = b[table].columns[key]
            assert type(col) is type(other) and np.array_equal(col, other), (table, key)
            if isinstance(col, np.ndarray):
                assert col.dtype == other.dtype, (table, key)


# -- the same errors, pointing at the same entity -------------------------------------------

#: (table, key, bad value): one entry broken, as a user might break it.
BREAKS = [
    ("arcs", "cost", "7"), ("arcs", "cost", True), ("arcs", "cost", None),
    ("arcs", "cost", 10**30), ("arcs", "capacity", -1), ("arcs", "capacity", 2.5),
    ("arcs", "capacity", False), ("arcs", "from", "nobody"), ("arcs", "to", 7),
    ("arcs", "to", ""), ("arcs", "from", None), ("arcs", "to", "<from>"),
    ("sources", "supply", "3"), ("sources", "supply", -2), ("sources", "id", ""),
    ("sources", "id", " padded"), ("sources", "id", "<duplicate>"), ("sinks", "demand", 1.5),
    ("sinks", "penalty", -4), ("sinks", "penalty", "high"), ("sinks", "id", "<duplicate>"),
    ("sinks", "id", None), ("nodes", "id", "<duplicate>"), ("nodes", "id", 3),
]


def _broken(body: dict[str, Any], table: str, key: str, bad: Any, rng: Any) -> dict | None:
    rows = body.get(table)
    if not rows:
        return None
    rows = [dict(r) for r in rows]
    i = int(rng.integers(len(rows)))
    if bad == "<from>":
        bad = rows[i]["from"]                       # a self-loop
    elif bad == "<duplicate>":
        bad = body["sources"][0]["id"]
        i = max(i, 1) if table == "sources" and len(rows) > 1 else i
    rows[i][key] = bad
    return {**body, table: rows}


@pytest.mark.parametrize("table,key,bad", BREAKS)
def test_a_broken_entry_is_named_in_both_forms(table, key, bad):
    rng = np.random.default_rng(zlib.crc32(f"{table} {key} {bad!r}".encode()))
    tried = 0
    for family in FAMILIES:
        for seed, problem in enumerate(problems(family, range(2))):
            body = _broken(problem, table, key, bad, rng)
            if body is None:
                continue
            tried += 1
            record = answer_or_errors(body)
            assert not isinstance(record, bytes), (family, seed)
            assert answer_or_errors(columnar(body)) == mapped(record), (family, seed)
    assert tried


def test_many_broken_entries_are_capped_alike():
    body = instance("sparse_arcs", 1)
    body = {**body, "arcs": [{**a, "cost": "x"} for a in body["arcs"]] * 3}
    record = errors_of(body)
    cols = errors_of(columnar(body))
    assert len(record) == len(cols) == 51       # MAX_ERRORS_PER_LIST, then one line
    assert cols[-1] == record[-1] and record[-1][0] == "/arcs"
    assert sorted(cols) == sorted((as_column_pointer(p), d) for p, d in record)


def test_a_pointer_into_the_arrays_names_the_index():
    body = columnar(instance("sparse_arcs", 0))
    body["arcs"]["cost"][3] = "cheap"
    assert errors_of(body) == [
        ("/arcs/cost/3", "must be a finite number from -1000000000 to 1000000000")]


# -- what only the columnar form can get wrong ----------------------------------------------


def _small() -> dict[str, Any]:
    return {"sources": {"id": ["a", "b"], "supply": [2, 1]},
            "sinks": {"id": ["x", "y"], "demand": [1, 2]},
            "arcs": {"from": ["a", "a", "b"], "to": ["x", "y", "y"], "cost": [4, 1, 3]}}


def test_arrays_of_unequal_length_name_the_longer_and_the_shorter():
    body = _small()
    body["arcs"]["cost"] = [4, 1]
    assert errors_of(body) == [("/arcs/cost", "has 2 entries, fewer than 'from' (3): the "
                                "arrays of one table must be of equal length")]
    body = _small()
    body["sinks"]["demand"] = [1, 2, 3]
    assert errors_of(body) == [("/sinks/demand", "has 3 entries, more than 'id' (2): the "
                                "arrays of one table must be of equal length")]


def test_unequal_lengths_of_an_optional_array_are_named_too():
    body = _small()
    body["arcs"]["capacity"] = [1, None]
    assert [p for p, _ in errors_of(body)] == ["/arcs/capacity"]


@pytest.mark.parametrize("table,key", [("arcs", "from"), ("arcs", "cost"), ("sources", "id"),
                                       ("sinks", "id")])
def test_a_missing_required_array_is_named(table, key):
    body = _small()
    del body[table][key]
    assert errors_of(body) == [(f"/{table}/{key}", "missing")]


@pytest.mark.parametrize("value", ["4,1,3", 3, {"0": 4}, True])
def test_an_array_that_is_no_array_is_named(value):
    body = _small()
    body["arcs"]["cost"] = value
    assert errors_of(body) == [("/arcs/cost", "must be an array (one entry per record)")]


def test_an_unknown_array_is_named():
    body = _small()
    body["arcs"]["colour"] = ["red", "red", "blue"]
    assert errors_of(body) == [("/arcs/colour", "unknown field")]


def test_an_optional_array_given_as_null_is_absent():
    body = _small()
    body["arcs"]["capacity"] = None
    body["sinks"]["penalty"] = None
    assert errors_of(body) == []


def test_empty_arrays_are_an_empty_table():
    body = {"sources": {"id": []}, "sinks": {"id": []}, "arcs": {"from": [], "to": [],
                                                                 "cost": []}}
    record = {"sources": [], "sinks": [], "arcs": []}
    assert answer_or_errors(body) == answer_or_errors(record)


def test_a_cost_matrix_stays_a_list_of_rows():
    body = {"sources": {"id": ["a"]}, "sinks": {"id": ["x"]}, "costs": {"0": [1]}}
    assert [p for p, _ in errors_of(body)] == ["/costs"]


def test_a_table_that_is_neither_form_says_both():
    body = _small()
    body["arcs"] = "a->x"
    assert errors_of(body) == [("/arcs", "must be a list of objects or an object of "
                                "equal-length arrays")]


def test_arc_ends_resolve_against_ids_sent_as_arrays():
    body = _small()
    body["arcs"]["to"][2] = "z"
    assert errors_of(body) == [("/arcs/to/2", "unknown id 'z'")]
    body = _small()
    body["sources"]["id"][1] = 5        # the ids cannot be read: the ends are checked alone
    body["arcs"]["from"][0] = None
    assert errors_of(body) == [("/sources/id/1", "must be a non-empty string"),
                               ("/arcs/from/0", "must be a non-empty string")]


def test_a_data_array_travels_like_the_records_data():
    # any further field of a record is one more array: here the free-form `data` objects
    body = instance("transshipment", 4)
    body["sources"][0]["data"] = {"van": "v-12", "skills": ["gas", "oven"]}
    body["sinks"][-1]["data"] = {"floor": 3}
    record = answer_or_errors(body)
    assert isinstance(record, bytes) and b'"floor":3' in record
    assert answer_or_errors(columnar(body)) == record
    body["nodes"][0]["data"] = {"note": "x" * 5000}          # over the 4096-byte bound
    body["sinks"][0]["data"] = ["not", "an", "object"]
    record = answer_or_errors(body)
    assert {p for p, _ in record[1]} == {"/nodes/0/data", "/sinks/0/data"}
    assert answer_or_errors(columnar(body)) == mapped(record)


def test_load_costs_travel_as_an_array_of_lists():
    # a field whose value is a list per record is one array of lists in the columnar form
    body = problems("transportation", range(1))[1]          # the arc version
    body["sources"] = [{**s, "load_costs": [0, 2 * i, 5 * i + 1]} if i % 2 else s
                       for i, s in enumerate(body["sources"])]
    record = answer_or_errors(body)
    assert isinstance(record, bytes), record
    assert answer_or_errors(columnar(body)) == record
    body["sources"][1] = {**body["sources"][1], "load_costs": [3, 1]}   # decreasing: refused
    record = answer_or_errors(body)
    assert [p for p, _ in record[1]] == ["/sources/1/load_costs/1"]
    assert answer_or_errors(columnar(body)) == mapped(record)
