"""The network model: node numbering, exact integers on one cost grid, cross-field errors."""

from __future__ import annotations

import numpy as np
import pytest
from examples import matrix, net_of

from service.errors import InvalidProblem, TooLarge
from service.network.model import COST_DECIMALS

# -- normalisation ----------------------------------------------------------------------------


def test_nodes_are_indexed_sources_then_nodes_then_sinks():
    net = net_of({"sources": [{"id": "b"}, {"id": "a"}], "nodes": [{"id": "h"}],
                  "sinks": [{"id": "z"}, {"id": "y"}],
                  "arcs": [{"from": "b", "to": "h", "cost": 1},
                           {"from": "h", "to": "y", "cost": 1}]})
    assert net.ids == ["b", "a", "h", "z", "y"]
    assert (net.n_sources, net.n_nodes, net.n_sinks, net.sink_offset) == (2, 1, 2, 3)
    assert net.arcs.tail.tolist() == [0, 2] and net.arcs.head.tolist() == [2, 4]


def test_matrix_becomes_its_allowed_cells_row_major():
    net = net_of(matrix([[1, None, 3], [None, 5, 6]]))
    arcs = net.arcs
    assert list(zip(arcs.tail.tolist(), arcs.head.tolist(), strict=True)) == [
        (0, 2), (0, 4), (1, 3), (1, 4)]
    # arc ids of a matrix are cell indices row * columns + column
    assert arcs.id.tolist() == [0, 2, 4, 5]
    assert arcs.cost.tolist() == [1, 3, 5, 6]
    assert not arcs.bounded.any()
    assert net.arc_exists(np.arange(-1, 7)).tolist() == [
        False, True, False, True, False, True, True, False]


def test_max_costs_are_held_negated():
    net = net_of({**matrix([[1, 2]]), "objective": "max"})
    assert net.arcs.cost.tolist() == [-1, -2] and net.sign == -1


def test_defaults_give_unit_supply_and_demand():
    net = net_of(matrix([[1]]))
    assert net.supply.tolist() == [1] and net.demand.tolist() == [1]
    assert not net.soft.any() and not net.maximize and not net.reject_unmet


def test_integer_data_stays_integer():
    net = net_of({"sources": [{"id": "s", "supply": 3}],
                  "sinks": [{"id": "t", "demand": 2, "penalty": 7}],
                  "arcs": [{"from": "s", "to": "t", "cost": -4, "capacity": 2}]})
    assert net.cost_scale == 1
    arcs = net.arcs
    for array in (arcs.cost, net.penalty, net.supply, net.demand, arcs.capacity):
        assert array.dtype == np.int64
    assert (arcs.cost.tolist(), net.penalty.tolist(), arcs.capacity.tolist()) == (
        [-4], [7], [2])


def test_whole_valued_floats_are_whole():
    # 2.0 is the number 2 in JSON: no reason to move to the fractional grid.
    assert net_of(matrix([[2.0, 3]])).cost_scale == 1


def test_fractional_costs_are_scaled_to_six_decimals():
    net = net_of({"sources": [{"id": "s"}], "sinks": [{"id": "t", "penalty": 2.25}, {"id": "u"}],
                  "costs": [[1.5, 2]]})
    assert COST_DECIMALS == 6
    assert net.cost_scale == 10**6
    # Whole costs move to the same grid, so that sums stay comparable.
    assert net.arcs.cost.tolist() == [1_500_000, 2_000_000]
    assert net.penalty.tolist() == [2_250_000, 0]
    assert net.arcs.cost.dtype == np.int64


def test_digits_beyond_the_sixth_are_rounded():
    net = net_of(matrix([[0.1234567, 0.1234564, -0.0000009]]))
    assert net.arcs.cost.tolist() == [123457, 123456, -1]


def test_a_seventh_decimal_5_is_a_tie_of_the_decimal_rounded_half_to_even():
    # The rule rounds the decimal each number stands for (its shortest repr), half to
    # even; rounding the double instead (np.rint(c * 10**6)) gives 1000001, 32123457, 125
    # and 251 for the first four, whose doubles lie off the decimal tie.
    # Reference: fractions.Fraction of the repr, rounded (Python's round is half to even).
    from fractions import Fraction
    costs = [1.0000005, 32.1234565, 0.0001255, 0.0002505, -8.0000005, 999999999.9999995]
    net = net_of(matrix([costs]))
    expected = [round(Fraction(repr(c)) * 10**6) for c in costs]
    assert expected == [1000000, 32123456, 126, 250, -8000000, 1000000000000000]   # by hand
    assert net.arcs.cost.tolist() == expected
    penalised = net_of({"sources": [{"id": "s"}], "sinks": [{"id": "t", "penalty": 0.0002535}],
                        "costs": [[1]]})
    assert penalised.penalty.tolist() == [254]


def test_a_fractional_penalty_alone_moves_costs_to_the_grid():
    net = net_of({"sources": [{"id": "s"}], "sinks": [{"id": "t", "penalty": 0.5}],
                  "costs": [[3]]})
    assert net.cost_scale == 10**6
    assert net.arcs.cost.tolist() == [3_000_000]


def test_cross_field_errors_are_collected_with_pointers():
    with pytest.raises(InvalidProblem) as info:
        net_of({"sources": [{"id": "s"}], "sinks": [{"id": "s"}],
                "arcs": [{"from": "s", "to": "s", "cost": 1}]})
    assert [e["pointer"] for e in info.value.errors] == ["/sinks/0/id"]


def test_size_limits_raise_too_large():
    with pytest.raises(TooLarge, match="MAX_NODES"):
        net_of(matrix([[1, 2], [3, 4]]), max_nodes=3)
    with pytest.raises(TooLarge, match="MAX_CELLS"):
        net_of(matrix([[1, 2], [3, 4]]), max_cells=3)
