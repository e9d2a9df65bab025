"""Exact verification: the checker never accepts a wrong answer, every answer is checkable.

One group of tests per class of defect, each with the exploit that shows it and a property
test that compares the verdict of ``POST /v1/verify`` with the exact reference checker
(``exact_reference``: Python integers and fractions, from the definitions of Ahuja, Magnanti
& Orlin 1993, section 9.4). The service is reached only through HTTP.

1. sums wrap (int64 node sums and row costs), 2. whole numbers compared exactly,
3. fractional numbers on the 10**-6 grid and solve never 500, 4. zero-flow rows,
5. the ``reject`` policy, 6. linear-time checks (behaviour only, never time).
The positive-cycle shifts and forged certificates that a correct checker must refuse, and
its acceptance of honest answers, are the controls of every class.
"""

from __future__ import annotations

import copy
import random
from fractions import Fraction

import pytest
from exact_http import (
    PROBLEM,
    PROPERTY,
    assert_agree,
    failed_detail,
    post,
    service_verdict,
    solved,
)
from exact_optimum import least_shortfall, optimum
from exact_problems import FAMILIES, instance
from exact_reference import check_answer, read_problem
from forgeries import (
    FORGERS,
    forge_certificate,
    plan_of,
    render,
    shift_positive_cycle,
    under_reject,
    with_duplicate_row,
    with_number,
    with_zero_rows,
)
from forgeries_big import beyond_grid, big_fractional, big_whole, safe_fractional
from forgeries_wrap import free_lunch, unreachable_served, wrapped_row_cost
from hypothesis import Phase, given, settings
from hypothesis import strategies as st

seeds = st.integers(0, 10**6)
families = st.sampled_from(sorted(FAMILIES))



# -- controls: honest answers pass, dearer flows and forged certificates fail ------------


@PROPERTY
@given(family=families, seed=seeds)
def test_honest_answers_and_their_exact_rewrites_are_valid(client, family, seed):
    problem = instance(family, seed)
    status, answer = post(client, "/v1/solve", problem)
    if status != 200:
        return
    assert_agree(client, problem, answer, expected=True)
    assert_agree(client, problem, render(plan_of(problem, answer)), expected=True)


@PROPERTY
@given(family=families, seed=seeds, how=st.sampled_from(FORGERS), pick=seeds)
def test_positive_cycle_shifts_and_forged_certificates_are_invalid(client, family, seed, how,
                                                                   pick):
    problem = instance(family, seed)
    status, answer = post(client, "/v1/solve", problem)
    if status != 200:
        return
    honest = plan_of(problem, answer)
    shifted = shift_positive_cycle(honest, random.Random(pick))
    if shifted is None:
        return
    assert_agree(client, problem, forge_certificate(honest, shifted, how), expected=False)


# -- 1. sums wrap --------------------------------------------------------------------------


def test_sums_wrap_free_lunch_below_the_optimum_is_invalid(client):
    problem, forged = free_lunch(random.Random(1))
    assert optimum(problem) == (0, Fraction(100))      # networkx: the paid arc is the only way
    assert solved(client, problem)["objective"] == 100
    assert_agree(client, problem, forged, expected=False)


def test_sums_wrap_unreachable_sink_claimed_served_is_invalid(client):
    problem, forged = unreachable_served(random.Random(2))
    assert least_shortfall(read_problem(problem)) == 1      # networkx: nothing reaches it
    assert solved(client, problem)["certificate"]["hard_shortfall"] == 1
    assert_agree(client, problem, forged, expected=False)


def test_sums_wrap_in_a_row_cost_is_named(client):
    # flow 2**53 x cost 2048 = 2**64, which is 0 in int64: the row claims cost 0
    problem, forged, _ = wrapped_row_cost()
    valid, reasons = check_answer(problem, forged)
    assert not valid and "allocation_costs" in {name for name, _ in reasons}
    valid, failed, doc = service_verdict(client, problem, forged)
    assert not valid
    assert "allocation_costs" in failed, doc


# Thousands of rows per example: few examples, and no shrinking (a smaller forgery does not
# wrap, so it would only end in the same example after minutes).
@settings(PROPERTY, max_examples=8, phases=[Phase.explicit, Phase.reuse, Phase.generate])
@given(scenario=st.sampled_from(["free_lunch", "unreachable_served"]),
       rows=st.integers(2048, 2300), price=st.integers(1, 10**6), pick=seeds)
def test_sums_wrap_property(client, scenario, rows, price, pick):
    build = free_lunch if scenario == "free_lunch" else unreachable_served
    problem, forged = build(random.Random(pick), rows, price)
    assert_agree(client, problem, forged, expected=False)


# -- 2. whole numbers compared exactly -----------------------------------------------------


def test_whole_numbers_exact_objective_off_by_one_at_1e15(client):
    problem = {"sources": [{"id": "north", "supply": 10**9}],
               "sinks": [{"id": "fridge", "demand": 10**9}], "costs": [[10**6]]}
    answer = solved(client, problem)
    assert answer["objective"] == 10**15
    forged = copy.deepcopy(answer)
    forged["objective"] += 1
    forged["certificate"]["dual_objective"] += 1
    assert_agree(client, problem, forged, expected=False)


@pytest.mark.parametrize("seed", range(3))
@pytest.mark.parametrize("off", [1, 2, 4, 8])
@pytest.mark.parametrize("where", ["objective", "row_cost"])
def test_whole_numbers_exact_near_2_53(client, seed, off, where):
    problem = big_whole(random.Random(seed))
    answer = solved(client, problem)
    assert 10**15 <= answer["objective"] < 2**53
    if where == "objective":
        forged = with_number(answer, "objective", answer["objective"] + off)
        forged = with_number(forged, "dual_objective", answer["objective"] + off)
    else:
        forged = with_number(answer, "row_cost:0", answer["allocation"][0]["cost"] - off)
    assert_agree(client, problem, forged, expected=False)


def test_whole_numbers_exact_potential_off_the_grid(client):
    problem = big_whole(random.Random(7))
    answer = solved(client, problem)
    one = with_number(answer, "potential:fridge",
                      answer["certificate"]["potentials"]["fridge"] + 0.0009)
    assert_agree(client, problem, one, expected=False)
    # every potential moved by the same 0.0009: reduced costs and the dual objective do not
    # change, but a whole-number problem has whole potentials
    shifted = copy.deepcopy(answer)
    cert = shifted["certificate"]
    for table in (cert["potentials"], cert["virtual_potentials"]):
        for key in table:
            table[key] += 0.0009
    assert_agree(client, problem, shifted, expected=False)


def test_whole_numbers_exact_potential_1_0009_on_a_small_problem(client):
    problem = {"sources": [{"id": "north"}], "sinks": [{"id": "fridge"}], "costs": [[1]]}
    answer = solved(client, problem)
    assert answer["certificate"]["potentials"]["north"] == 1
    assert_agree(client, problem, with_number(answer, "potential:north", 1.0009),
                 expected=False)


@PROPERTY
@given(seed=seeds, off=st.integers(1, 8), sign=st.sampled_from([1, -1]),
       where=st.sampled_from(["objective", "row_cost", "potential", "all_potentials"]))
def test_whole_numbers_exact_property(client, seed, off, sign, where):
    problem = big_whole(random.Random(seed))
    answer = solved(client, problem)
    assert_agree(client, problem, answer, expected=True)
    if where == "objective":
        value = answer["objective"] + sign * off
        forged = with_number(with_number(answer, "objective", value), "dual_objective", value)
    elif where == "row_cost":
        forged = with_number(answer, "row_cost:0", answer["allocation"][0]["cost"] + sign * off)
    else:
        forged = copy.deepcopy(answer)
        potentials = forged["certificate"]["potentials"]
        keys = list(potentials) if where == "all_potentials" else ["oven"]
        for key in keys:
            potentials[key] += sign * off / 10**4
    assert_agree(client, problem, forged, expected=False)


# -- 3. fractional numbers on the grid; solve never answers 500 ---------------------------


def test_fractional_grid_objective_within_a_relative_tolerance_is_invalid(client):
    problem = big_fractional(random.Random(3))
    answer = solved(client, problem)
    assert answer["objective"] > 10**8
    value = answer["objective"] + 0.05         # 50,000 grid units off
    forged = with_number(with_number(answer, "objective", value), "dual_objective", value)
    assert_agree(client, problem, forged, expected=False)


def test_fractional_grid_one_unit_off_is_invalid(client):
    problem = big_fractional(random.Random(4))
    answer = solved(client, problem)
    cost = Fraction(repr(answer["allocation"][0]["cost"]))
    forged = with_number(answer, "row_cost:0", float(cost + Fraction(1, 10**6)))
    assert_agree(client, problem, forged, expected=False)


@pytest.mark.parametrize("where", ["objective", "potential"])
def test_fractional_grid_less_than_half_a_unit_reads_as_the_rounded_value(client, where):
    # README "Numbers" as amended by the exactness rule: a reported decimal rounded to the
    # 10**-6 grid must equal the exact value; 0.4 units off rounds back onto it
    problem = big_fractional(random.Random(5))
    answer = solved(client, problem)
    if where == "objective":
        value = float(Fraction(repr(answer["objective"])) + Fraction(4, 10**7))
        near = with_number(with_number(answer, "objective", value), "dual_objective", value)
    else:
        value = answer["certificate"]["potentials"]["fridge"]
        near = with_number(answer, "potential:fridge",
                           float(Fraction(repr(value)) + Fraction(4, 10**7)))
    assert_agree(client, problem, near, expected=True)


@PROPERTY
@given(seed=seeds, units=st.sampled_from([1, 2, 7, 1000, 10**5]),
       sign=st.sampled_from([1, -1]),
       where=st.sampled_from(["objective", "row_cost", "dual_objective"]))
def test_fractional_grid_property(client, seed, units, sign, where):
    problem = big_fractional(random.Random(seed))
    answer = solved(client, problem)
    assert_agree(client, problem, answer, expected=True)
    step = Fraction(sign * units, 10**6)
    if where == "row_cost":
        key, old = "row_cost:0", answer["allocation"][0]["cost"]
    else:
        key, old = where, (answer["objective"] if where == "objective"
                           else answer["certificate"]["dual_objective"])
    forged = with_number(answer, key, float(Fraction(repr(old)) + step))
    assert_agree(client, problem, forged, expected=False)


def _answered_exactly_or_refused(client, problem) -> int:
    status, doc = post(client, "/v1/solve", problem)
    assert status in (200, 422), doc
    if status == 422:
        assert doc["type"] == PROBLEM + "out-of-range", doc
        assert "2**" in doc["detail"], doc        # the bound is named
    else:
        valid, reasons = check_answer(problem, doc)
        assert valid, reasons                      # every number exactly recoverable
    return status


def test_fractional_grid_chain_beyond_2_53_grid_units_is_never_500(client):
    hubs = [f"hub{i}" for i in range(10)]
    ends = ["depot", *hubs, "store"]
    problem = {"sources": [{"id": "depot"}], "nodes": [{"id": h} for h in hubs],
               "sinks": [{"id": "store"}],
               "arcs": [{"from": a, "to": b, "cost": 999999999.123457}
                        for a, b in zip(ends, ends[1:], strict=False)]}
    _answered_exactly_or_refused(client, problem)


def test_fractional_grid_objective_between_2_33_and_2_53_grid_units_is_exact(client):
    # 999,999,929 units at 9.000001 cost 9,000,000,360.999929: above 2**33, below 2**53 grid
    # units. Doubles there are 2**-19 (1.9e-6) apart (IEEE 754 binary64): the nearest one
    # prints as 9000000360.99993, one grid unit off, so that number cannot be the answer.
    problem = {"sources": [{"id": "north", "supply": 999_999_929}],
               "sinks": [{"id": "fridge", "demand": 999_999_929}], "costs": [[9.000001]]}
    _answered_exactly_or_refused(client, problem)


@PROPERTY
@given(seed=seeds)
def test_fractional_grid_beyond_the_exact_range_property(client, seed):
    _answered_exactly_or_refused(client, beyond_grid(random.Random(seed)))


@PROPERTY
@given(seed=seeds)
def test_fractional_grid_safe_values_are_answered_exactly(client, seed):
    problem = safe_fractional(random.Random(seed))
    assert _answered_exactly_or_refused(client, problem) == 200


# -- 4. zero-flow rows are harmless, two rows for one arc are not -------------------------


def test_zero_rows_on_an_arc_of_positive_reduced_cost_are_valid(client):
    problem = {"sources": [{"id": "north", "supply": 2}, {"id": "south", "supply": 1}],
               "sinks": [{"id": "fridge"}, {"id": "oven"}, {"id": "washer", "penalty": 50}],
               "costs": [[20, 35, 60], [30, 25, None]]}
    answer = solved(client, problem)
    # README, "The certificate": north -> washer has reduced cost 10 and carries nothing
    answer["allocation"].append({"from": "north", "to": "washer", "flow": 0, "cost": 0})
    assert_agree(client, problem, answer, expected=True)


@PROPERTY
@given(family=families, seed=seeds, pick=seeds, k=st.integers(1, 3))
def test_zero_rows_property(client, family, seed, pick, k):
    problem = instance(family, seed)
    status, answer = post(client, "/v1/solve", problem)
    if status != 200:
        return
    assert_agree(client, problem, with_zero_rows(problem, answer, random.Random(pick), k),
                 expected=True)


@PROPERTY
@given(family=families, seed=seeds, pick=seeds)
def test_zero_rows_two_rows_for_one_arc_stay_invalid(client, family, seed, pick):
    problem = instance(family, seed)
    status, answer = post(client, "/v1/solve", problem)
    if status != 200:
        return
    rng = random.Random(pick)
    doubled = with_duplicate_row(problem, answer, rng)
    if doubled is None:         # no row to double: double a zero row instead
        doubled = with_zero_rows(problem, answer, rng, 1)
        if not doubled["allocation"]:
            return
        doubled["allocation"].append(dict(doubled["allocation"][0]))
    assert_agree(client, problem, doubled, expected=False)


# -- 5. the reject policy ------------------------------------------------------------------


def test_reject_policy_answer_with_unmet_hard_demand_is_invalid(client):
    problem = {"sources": [{"id": "north"}], "sinks": [{"id": "fridge"}, {"id": "oven"}],
               "costs": [[20, 35]]}
    answer = solved(client, problem)
    assert answer["certificate"]["hard_shortfall"] == 1
    status, doc = post(client, "/v1/solve", under_reject(problem))
    assert status == 422 and doc["type"] == PROBLEM + "infeasible", doc
    valid, failed = assert_agree(client, under_reject(problem), answer, expected=False)
    assert "unmet_demand_policy" in failed, failed


@PROPERTY
@given(seed=seeds)
def test_reject_policy_property(client, seed):
    problem = instance("unmet_hard", seed)
    status, answer = post(client, "/v1/solve", problem)
    if status != 200:
        return
    strict = under_reject(problem)
    if answer["certificate"]["hard_shortfall"] == 0:
        assert_agree(client, strict, answer, expected=True)
        return
    valid, failed = assert_agree(client, strict, answer, expected=False)
    assert "unmet_demand_policy" in failed, failed


# -- 6. linear-time checks: behaviour on the inputs that were slow --------------------------


def test_linear_time_one_missing_potential_among_16000_ids(client):
    n = 8000
    problem = {"sources": [{"id": f"tech{i}"} for i in range(n)],
               "sinks": [{"id": f"job{i}"} for i in range(n)],
               "arcs": [{"from": f"tech{i}", "to": f"job{i}", "cost": i % 7} for i in range(n)]}
    answer = solved(client, problem)
    del answer["certificate"]["potentials"]["job4711"]
    valid, failed, doc = service_verdict(client, problem, answer)
    assert not valid and "potentials" in failed, failed
    assert "job4711" in failed_detail(doc, "potentials"), doc
    assert not check_answer(problem, answer)[0]


def test_linear_time_chain_of_12000_nodes_is_solved_and_certified(client):
    n = 12_000
    hubs = [f"hub{i}" for i in range(n)]
    ends = ["depot", *hubs, "store"]
    problem = {"sources": [{"id": "depot"}], "nodes": [{"id": h} for h in hubs],
               "sinks": [{"id": "store"}],
               "arcs": [{"from": a, "to": b, "cost": 1}
                        for a, b in zip(ends, ends[1:], strict=False)]}
    answer = solved(client, problem)
    assert answer["objective"] == n + 1
    valid, reasons = check_answer(problem, answer)
    assert valid, reasons
