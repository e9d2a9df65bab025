"""The checker's arithmetic against Python's exact arithmetic (``fractions``, ``int``).

The bulk reader of reported numbers (numpy, with a float fast path) must give exactly what
the rule gives when applied one number at a time in fractions: a JSON decimal stands for
``repr`` of its double, and its grid value is that decimal times 10**6 rounded half to even
(README, "Numbers"; the same rule as ``exact_reference.grid_value``). Sums and products
must equal Python's integer results whatever their size.
"""

from __future__ import annotations

import random
from fractions import Fraction

import numpy as np
import pytest
from exact_http import PROPERTY
from exact_reference import grid_value
from hypothesis import given
from hypothesis import strategies as st

from service.check.exact import _balances, _dot, _grid_values, _products, _show, _total

SCALE = 10**6
JSON_EXACT = 2**53

# Doubles of every magnitude the answer schema allows, and the hard ones: decimals of
# 6 places (what the service writes), half-unit ties and their neighbours, whole numbers.
doubles = st.one_of(
    st.floats(-JSON_EXACT, JSON_EXACT, allow_nan=False),
    st.integers(-(2**33) * SCALE, 2**33 * SCALE).map(lambda k: k / SCALE),
    st.integers(-(10**12), 10**12).map(lambda k: (k + 0.5) / SCALE),
    st.integers(-(10**12), 10**12).map(lambda k: float(np.nextafter((k + 0.5) / SCALE, 0))),
    st.integers(-(2**53), 2**53).map(float),
)


def _exact(values: list[float], scale: int) -> list[int | None]:
    return [grid_value(v, scale) for v in values]


@PROPERTY
@given(values=st.lists(doubles, max_size=40))
def test_fractional_reading_is_the_exact_rule(values):
    # reference: fractions.Fraction on repr of each double, rounded half to even
    grid, bad = _grid_values(np.array(values, np.float64), SCALE)
    assert not bad.any()
    assert [int(g) for g in grid] == _exact(values, SCALE)


@PROPERTY
@given(values=st.lists(doubles, max_size=40))
def test_whole_number_reading_is_exact_equality(values):
    # reference: a whole-number problem's number must be whole, and is itself
    grid, bad = _grid_values(np.array(values, np.float64), 1)
    expected = _exact(values, 1)
    assert bad.tolist() == [e is None for e in expected]
    assert [int(g) for g, e in zip(grid, expected, strict=True) if e is not None] == [
        e for e in expected if e is not None]


@pytest.mark.parametrize("scale", [1, SCALE])
def test_integers_are_read_exactly_at_every_magnitude(scale):
    values = [0, 1, -1, 2**33, 10**13, -(2**53), 2**53]
    grid, bad = _grid_values(np.array(values, np.int64), scale)
    assert not bad.any()
    assert [int(g) for g in grid] == [v * scale for v in values]   # exact, beyond int64 too


def test_a_tie_and_its_neighbours_are_decided_by_the_decimal():
    # 0.0000005 is a tie between 0 and 1 grid unit: half to even gives 0; 0.0000015 gives 2.
    # The doubles are not exactly those decimals, and the rule reads the decimal (repr):
    # the double of 1234.0000005 lies above the tie and that of 1234.0000015 below it, so
    # rounding the binary value would give 1234000001 for both (worked by hand with
    # fractions.Fraction).
    values = [0.0000005, 0.0000015, 0.0000025, -0.0000005, 1234.0000005, 1234.0000015]
    grid, _ = _grid_values(np.array(values), SCALE)
    assert [int(g) for g in grid] == [0, 2, 2, 0, 1234000000, 1234000002]


def test_the_service_s_own_decimals_take_the_fast_path_below_2_32():
    # An honest fractional answer (the double nearest to k / 10**6) must not fall back to
    # fractions, or a large answer would be read one number at a time.
    rng = random.Random(7)
    keys = [rng.randrange(-(2**32) * SCALE, 2**32 * SCALE) for _ in range(20_000)]
    values = np.array(keys, np.int64) / SCALE
    whole = np.trunc(values)
    units = (values - whole) * SCALE
    margin = np.spacing(np.abs(values)) * (SCALE / 2) + 1e-6
    assert (np.abs(units - np.rint(units)) < 0.5 - margin).all()
    grid, _ = _grid_values(values, SCALE)
    assert grid.dtype == np.int64 and grid.tolist() == keys


@PROPERTY
@given(a=st.lists(st.integers(0, 2**53), min_size=1, max_size=30),
       b=st.lists(st.integers(-(10**15), 10**15), min_size=30, max_size=30))
def test_products_dots_and_totals_are_python_integers(a, b):
    b = b[: len(a)]
    x, c = np.array(a, np.int64), np.array(b, np.int64)
    assert [int(p) for p in _products(x, c)] == [p * q for p, q in zip(a, b, strict=True)]
    assert _dot(x, c) == sum(p * q for p, q in zip(a, b, strict=True))
    assert _total(_products(x, c)) == sum(p * q for p, q in zip(a, b, strict=True))


@PROPERTY
@given(rows=st.lists(st.tuples(st.integers(0, 3), st.integers(0, 3), st.integers(0, 2**53)),
                     max_size=3000))
def test_node_balances_never_wrap(rows):
    # thousands of rows near 2**53 add up beyond 2**63: the balances must still be exact
    tail = np.array([r[0] for r in rows], np.int64)
    head = np.array([r[1] for r in rows], np.int64)
    x = np.array([r[2] for r in rows], np.int64)
    expected = [0] * 4
    for t, h, q in rows:
        expected[t] += q
        expected[h] -= q
    assert [int(v) for v in _balances(4, tail, head, x)] == expected


def test_node_balances_beyond_int64():
    x = np.full(2048, 2**53 - 1, np.int64)
    out = _balances(2, np.zeros(2048, np.int64), np.ones(2048, np.int64), x)
    assert [int(v) for v in out] == [2048 * (2**53 - 1), -2048 * (2**53 - 1)]


@pytest.mark.parametrize(("grid", "scale", "text"), [
    (67, 1, "67"), (-10**15, 1, "-1000000000000000"), (95_500_000, SCALE, "95.5"),
    (-1, SCALE, "-0.000001"), (9_000_000_360_999_929, SCALE, "9000000360.999929"),
])
def test_messages_show_exact_decimals(grid, scale, text):
    assert _show(grid, scale) == text
    assert Fraction(text) == Fraction(grid, scale)
