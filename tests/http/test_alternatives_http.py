"""``"alternatives": k`` over HTTP: the answer carries them, and a bad k is a 422 naming
/alternatives (RFC 9457 problem document)."""

from __future__ import annotations

import pytest

from schemas.problem import MAX_ALTERNATIVES

#: The scipy.optimize.linear_sum_assignment docstring example; its optimum is 5.
GOOD = {
    "sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
    "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
    "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]],
}


def test_alternatives_over_http(solve, verify):
    status, answer = solve({**GOOD, "alternatives": 5})
    assert status == 200
    # brute force by hand over the 3! = 6 permutations: 5, 6, 6, 7, 9, 11 (a tie kept)
    assert answer["objective"] == 5
    assert [a["objective"] for a in answer["alternatives"]] == [6, 6, 7, 9, 11]
    status, verdict = verify({**GOOD, "alternatives": 5}, answer)
    assert status == 200 and verdict["valid"]


def test_fewer_plans_than_asked(solve):
    # 3! = 6 plans: the optimum and 5 more, whatever is asked beyond that
    status, answer = solve({**GOOD, "alternatives": 9})
    assert status == 200 and len(answer["alternatives"]) == 5
    assert answer["partition"]["requested"] == 9


def test_no_alternatives_unless_asked(solve):
    status, answer = solve(GOOD)
    assert status == 200 and "alternatives" not in answer and "partition" not in answer


@pytest.mark.parametrize("k", [0, MAX_ALTERNATIVES + 1, -1, True, "3", 2.5, None, [2]])
def test_a_bad_k_names_the_field(solve, k):
    status, problem = solve({**GOOD, "alternatives": k})
    assert status == 422
    assert [e["pointer"] for e in problem["errors"]] == ["/alternatives"]
    if k is not None:
        assert str(MAX_ALTERNATIVES) in problem["errors"][0]["detail"]
