"""The service through its public HTTP surface only, and the verdict comparison.

Tests in this folder reach the service through the Flask test client of
``service.app.create_app`` and nothing else, so that they share no code with it.
"""

from __future__ import annotations

import json
from typing import Any

from exact_reference import check_answer
from hypothesis import HealthCheck, settings

PROBLEM = "urn:certimatch:problem:"

#: Property tests: the same cases on every machine and run, no time assertion, nothing left
#: in the work tree.
PROPERTY = settings(
    derandomize=True,
    database=None,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                           HealthCheck.filter_too_much],
)


def post(client: Any, path: str, body: Any) -> tuple[int, Any]:
    """POST ``body`` as JSON (the standard library writes integers of any size)."""
    resp = client.post(path, data=json.dumps(body), content_type="application/json")
    return resp.status_code, json.loads(resp.data)


def solved(client: Any, problem: dict[str, Any]) -> dict[str, Any]:
    """The 200 answer of POST /v1/solve, as a caller keeps it (through JSON and back)."""
    status, answer = post(client, "/v1/solve", problem)
    assert status == 200, answer
    return answer


def service_verdict(client: Any, problem: dict[str, Any], answer: Any
                    ) -> tuple[bool, list[str], dict[str, Any]]:
    """(valid, names of the failed checks, the document) of POST /v1/verify.

    A 422 ``invalid-problem`` naming only fields of the answer is a rejection too (a number
    out of the answer's documented range): its failed checks are those pointers.
    """
    status, doc = post(client, "/v1/verify", {**problem, "answer": answer})
    if status == 422 and doc.get("type") == PROBLEM + "invalid-problem":
        pointers = [e["pointer"] for e in doc["errors"]]
        assert pointers and all(p.startswith("/answer") for p in pointers), doc
        return False, pointers, doc
    assert status == 200, doc
    failed = [c["name"] for c in doc["checks"] if not c["passed"]]
    assert doc["valid"] is (not failed), doc
    return doc["valid"], failed, doc


def failed_detail(doc: dict[str, Any], name: str) -> str:
    """The detail of the failed check ``name`` of a verify document ('' when it passed)."""
    return next((c["detail"] for c in doc.get("checks", [])
                 if c["name"] == name and not c["passed"]), "")


def assert_agree(client: Any, problem: dict[str, Any], answer: Any,
                 expected: bool | None = None) -> tuple[bool, list[str]]:
    """The service's verdict equals the exact reference's (and ``expected`` when given);
    an invalid answer has at least one named failed check. Returns the service's verdict."""
    as_sent = json.loads(json.dumps(answer))
    ref_valid, reasons = check_answer(problem, as_sent)
    if expected is not None:
        assert ref_valid is expected, f"the reference itself: {reasons}"
    valid, failed, doc = service_verdict(client, problem, as_sent)
    assert valid is ref_valid, (
        f"service says valid={valid} (failed {failed}), exact reference says "
        f"valid={ref_valid} ({reasons})")
    if not valid:
        assert failed, doc
    return valid, failed
