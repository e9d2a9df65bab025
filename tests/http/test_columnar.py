"""The columnar form over HTTP: /v1/solve, /v1/verify and /v1/report take it as they take
records (issue 15). The reference is the record form: the same problem sent both ways must
get the same bytes back."""

from __future__ import annotations

import json
import re
from typing import Any

import pytest

from tests.reference import instance
from tests.wire.test_columns import columnar, problems

#: The decision object a 200 of /v1/solve ends with: its id and time differ from request to
#: request (README, "Determinism": the rest of the answer is the same bytes).
_DECISION = re.compile(rb',"decision":\{[^{}]*\}')


def without_decision(answer: bytes) -> bytes:
    """The answer's bytes without its decision object."""
    return _DECISION.sub(b"", answer)


def _post(client: Any, path: str, body: Any, query: str = "") -> Any:
    return client.post(path + query, data=json.dumps(body), content_type="application/json")


@pytest.mark.parametrize("family", ["sparse_arcs", "transshipment", "penalties", "max"])
def test_solve_answers_the_same_bytes(client, family):
    for body in problems(family, range(2)):
        record, cols = _post(client, "/v1/solve", body), _post(client, "/v1/solve",
                                                               columnar(body))
        assert record.status_code == cols.status_code == 200
        assert b'"decision":' in record.data
        assert without_decision(record.data) == without_decision(cols.data)


def test_verify_takes_a_columnar_problem(client):
    body = instance("transshipment", 1)
    answer = _post(client, "/v1/solve", body).get_json()
    record = _post(client, "/v1/verify", {**body, "answer": answer})
    cols = _post(client, "/v1/verify", {**columnar(body), "answer": answer})
    assert cols.status_code == 200 and cols.get_json()["valid"] is True
    assert cols.data == record.data
    # a forged objective is refused the same way in both forms
    forged = {**answer, "objective": answer["objective"] + 1}
    assert (_post(client, "/v1/verify", {**columnar(body), "answer": forged}).data
            == _post(client, "/v1/verify", {**body, "answer": forged}).data)


@pytest.mark.parametrize("fmt", ["html", "svg"])
def test_report_draws_a_columnar_problem_as_the_records(client, fmt):
    body = instance("sparse_arcs", 2)
    answer = _post(client, "/v1/solve", body).get_json()
    record = _post(client, "/v1/report", {**body, "answer": answer}, f"?format={fmt}")
    cols = _post(client, "/v1/report", {**columnar(body), "answer": answer}, f"?format={fmt}")
    assert record.status_code == cols.status_code == 200
    assert cols.data == record.data


def test_a_columnar_error_is_a_problem_document_pointing_into_the_array(client):
    body = columnar(instance("sparse_arcs", 0))
    body["arcs"]["capacity"] = [None] * len(body["arcs"]["from"])
    body["arcs"]["capacity"][2] = -1
    reply = _post(client, "/v1/solve", body)
    assert reply.status_code == 422
    assert reply.content_type == "application/problem+json"
    assert [e["pointer"] for e in reply.get_json()["errors"]] == ["/arcs/capacity/2"]
