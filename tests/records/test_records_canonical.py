"""RFC 8785 canonical JSON: published examples, number vectors and an independent
implementation (the ``rfc8785`` package, used only here) as the references."""

from __future__ import annotations

import hashlib
import json
import struct

import orjson
import pytest
import rfc8785
from hypothesis import given, settings
from hypothesis import strategies as st

from service.records.canonical import (
    MAX_SAFE_INTEGER,
    CanonicalizationError,
    canonical_json,
    canonical_sha256,
    number_text,
    reference_json,
)

# Input and expected output files of cyberphone/json-canonicalization, testdata/ (the test
# data published beside RFC 8785 by its first author); the texts are copied verbatim.
PUBLISHED = {
    "values": (
        '{\n  "numbers": [1E30, 4.50, 333333333.33333329, 2e-3, 0.000000000000000000000000001],'
        '\n  "escaping": "\\u20ac$\\u000F\\u000aA\'\\u0042\\u0022\\u005c\\\\\\"\\/",\n'
        '  "literals": [null, true, false]\n}',
        '{"escaping":"€$\\u000f\\nA\'B\\"\\\\\\\\\\"/","literals":[null,true,false],'
        '"numbers":[1e+30,4.5,333333333.3333333,0.002,1e-27]}'),
    "weird": (
        '{\n  "\\u20ac": "Euro Sign",\n  "1": "One",\n  "\\u0080": "Control\\u007f",\n'
        '  "\\ud83d\\ude02": "Smiley",\n  "\\u00f6": "Latin Small Letter O With Diaeresis",\n'
        '  "\\ufb33": "Hebrew Letter Dalet With Dagesh",\n  "</script>": "Browser Challenge"\n}',
        '{"1":"One","</script>":"Browser Challenge","\u0080":"Control\u007f",'
        '"ö":"Latin Small Letter O With Diaeresis","€":"Euro Sign","\U0001f602":"Smiley",'
        '"\ufb33":"Hebrew Letter Dalet With Dagesh"}'),
    "structures": (
        '{\n  "1": {"f": {"f": "hi","F": 5} ,"\\n": 56.0},\n  "10": { },\n  "": "empty",\n'
        '  "a": { },\n  "111": [ { } ],\n  "A": { }\n}',
        '{"":"empty","1":{"\\n":56,"f":{"F":5,"f":"hi"}},"10":{},"111":[{}],"A":{},"a":{}}'),
    "french": (
        '{\n  "peach": "This sorting order",\n  "péché": "is wrong according to French",\n'
        '  "pêche": "but canonicalization MUST",\n  "sin":   "ingnore locale"\n}\n',
        '{"peach":"This sorting order","péché":"is wrong according to French",'
        '"pêche":"but canonicalization MUST","sin":"ingnore locale"}'),
    "unicode": ('{\n  "Unnormalized Unicode":"\\u1e0d\\u0307"\n}\n',
                '{"Unnormalized Unicode":"\u1e0d\u0307"}'),
}


@pytest.mark.parametrize("name", sorted(PUBLISHED))
def test_published_examples(name: str) -> None:
    # cyberphone/json-canonicalization testdata/input and testdata/output
    given_text, expected = PUBLISHED[name]
    value = json.loads(given_text)
    assert canonical_json(value) == expected.encode("utf-8")
    assert reference_json(value) == expected.encode("utf-8")


# IEEE 754 bit patterns and their RFC 8785 spelling. The first group is RFC 8785
# Appendix B as recalled from memory (recalled values, each also checked against the
# rfc8785 package below); the second is copied from cyberphone/json-canonicalization
# testdata/README.md ("Sample lines").
NUMBERS_RECALLED_RFC8785_APPENDIX_B = [
    ("0000000000000000", "0"),
    ("8000000000000000", "0"),
    ("0000000000000001", "5e-324"),
    ("8000000000000001", "-5e-324"),
    ("7fefffffffffffff", "1.7976931348623157e+308"),
    ("ffefffffffffffff", "-1.7976931348623157e+308"),
    ("4340000000000000", "9007199254740992"),
    ("c340000000000000", "-9007199254740992"),
    ("4430000000000000", "295147905179352830000"),
    ("44b52d02c7e14af5", "9.999999999999997e+22"),
    ("44b52d02c7e14af6", "1e+23"),
    ("44b52d02c7e14af7", "1.0000000000000001e+23"),
    ("444b1ae4d6e2ef4e", "999999999999999700000"),
    ("444b1ae4d6e2ef4f", "999999999999999900000"),
    ("444b1ae4d6e2ef50", "1e+21"),
    ("3eb0c6f7a0b5ed8c", "9.999999999999997e-7"),
    ("3eb0c6f7a0b5ed8d", "0.000001"),
    ("41b3de4355555553", "333333333.3333332"),
    ("41b3de4355555554", "333333333.33333325"),
    ("41b3de4355555555", "333333333.3333333"),
    ("41b3de4355555556", "333333333.3333334"),
    ("41b3de4355555557", "333333333.33333343"),
    ("becbf647612f3696", "-0.0000033333333333333333"),
    ("43143ff3c1cb0959", "1424953923781206.2"),
]
NUMBERS_CYBERPHONE_README = [
    ("4340000000000001", "9007199254740994"),
    ("4340000000000002", "9007199254740996"),
    ("444b1ae4d6e2ef50", "1e+21"),
    ("3eb0c6f7a0b5ed8d", "0.000001"),
    ("3eb0c6f7a0b5ed8c", "9.999999999999997e-7"),
    ("8000000000000000", "0"),
    ("0", "0"),
]


def _double(bits: str) -> float:
    return struct.unpack(">d", int(bits, 16).to_bytes(8, "big"))[0]


@pytest.mark.parametrize(("bits", "expected"),
                         NUMBERS_RECALLED_RFC8785_APPENDIX_B + NUMBERS_CYBERPHONE_README)
def test_number_vectors(bits: str, expected: str) -> None:
    x = _double(bits)
    assert number_text(x) == expected
    assert rfc8785.dumps(x) == expected.encode()       # the independent implementation
    # The fast path writes floats through orjson and mends them: same bytes in context.
    assert canonical_json({"x": [x, "1.0", x]}) == f'{{"x":[{expected},"1.0",{expected}]}}'.encode()


@pytest.mark.parametrize("bits", ["7fffffffffffffff", "7ff0000000000000", "fff0000000000000"])
def test_nan_and_infinities_are_refused(bits: str) -> None:
    # RFC 8785 §3.2.2.3: NaN and Infinity are not JSON numbers
    with pytest.raises(CanonicalizationError, match=r"^/a/1: "):
        canonical_json({"a": [None, _double(bits)]})


def test_integers_beyond_the_safe_range_are_refused() -> None:
    # RFC 7493 §2.2 (I-JSON): integers within ±(2**53 - 1); the rfc8785 package agrees
    edges = [MAX_SAFE_INTEGER, -MAX_SAFE_INTEGER]
    assert canonical_json(edges) == b"[9007199254740991,-9007199254740991]"
    for big in (MAX_SAFE_INTEGER + 1, -MAX_SAFE_INTEGER - 1, 10**30):
        with pytest.raises(CanonicalizationError, match=r"^/k: integer .* beyond"):
            canonical_json({"k": big})
        with pytest.raises(rfc8785.IntegerDomainError):
            rfc8785.dumps({"k": big})


def test_lone_surrogate_is_refused() -> None:
    # RFC 8785 §3.2.2.2: strings must be valid Unicode
    with pytest.raises(CanonicalizationError, match=r"^/a~1b: a lone surrogate"):
        canonical_json({"a/b": "x\ud800"})


@pytest.mark.parametrize(("value", "pointer"), [
    ({1: "x"}, "/"), ({"s": {1, 2}}, "/s"), ({"b": b"raw"}, "/b"), ([0, object()], "/1")])
def test_values_that_are_not_json_are_refused(value: object, pointer: str) -> None:
    with pytest.raises(CanonicalizationError, match=f"^{pointer}: "):
        canonical_json(value)


def test_deep_nesting_is_refused_not_crashed() -> None:
    deep: list = []
    for _ in range(100_000):
        deep = [deep]
    with pytest.raises(CanonicalizationError, match="nested too deeply"):
        canonical_json(deep)


def test_moderate_nesting_beyond_orjson_limit() -> None:
    deep: list = [1.0]
    for _ in range(300):                         # orjson stops at 254 levels
        deep = [deep]
    assert canonical_json(deep) == b"[" * 301 + b"1" + b"]" * 301


def test_strings_that_look_like_numbers_are_left_alone() -> None:
    # The mending of float tokens must never touch a string, whatever it holds: quotes,
    # escaped quotes and backslashes, delimiters around number-like text.
    tricky = ['1.0', ',1.0]', ':1e+16,', '\\', '\\"', '"1.0"', 'a\\', '\\\\"2.0', '-0.0',
              ',0.0000001}', '1.0\n', '\u2028', '\x7f']
    value = {"s": tricky, "n": [1.0, -0.0, 1e16, 1e-7, 2.5], "k": {t: 3.0 for t in tricky}}
    expected = rfc8785.dumps(value)
    assert canonical_json(value) == expected == reference_json(value)


def test_non_bmp_keys_sort_by_utf16_code_units() -> None:
    # RFC 8785 §3.2.3: U+1F600 (surrogates D83D DE00) sorts before U+FB33 in UTF-16,
    # after it in code points.
    value = {"\ufb33": 1, "\U0001f600": 2, "\ue000": 3.0}
    assert canonical_json(value) == '{"\U0001f600":2,"\ue000":3,"\ufb33":1}'.encode()
    assert canonical_json(value) == rfc8785.dumps(value)


def test_characters_beyond_the_bmp_in_values_keep_the_fast_path(monkeypatch) -> None:
    # Only member names sort differently; an id with an emoji must not cost the walk.
    import service.records.canonical as module

    value = {"arcs": [{"from": "depot-\U0001f69a", "to": 't"\U0001f527', "cost": 2.0}],
             "b": "\\\U0001f600:"}
    expected = rfc8785.dumps(value)
    monkeypatch.setattr(module, "reference_json", lambda v: pytest.fail("walked"))
    assert canonical_json(value) == expected


def test_null_beside_floats_is_not_mistaken_for_nan() -> None:
    value = {"capacity": None, "cost": [0.5, None, 2.0]}
    assert canonical_json(value) == b'{"capacity":null,"cost":[0.5,null,2]}'
    assert canonical_json(value, parsed=True) == b'{"capacity":null,"cost":[0.5,null,2]}'


def test_a_parsed_body_cannot_hold_nan() -> None:
    # orjson.loads refuses NaN and Infinity, which is what parsed=True relies on
    for text in (b'{"a":NaN}', b'{"a":Infinity}', b'{"a":-Infinity}', b'{"a":1e999}'):
        with pytest.raises(orjson.JSONDecodeError):
            orjson.loads(text)


def test_sha256_matches_hashlib_of_canonical_bytes() -> None:
    # SHA-256 of the RFC 8785 bytes as computed by the independent package
    value = {"b": [1.0, 2], "a": "x"}
    assert canonical_sha256(value) == hashlib.sha256(rfc8785.dumps(value)).hexdigest()


_scalars = (st.none() | st.booleans()
            | st.integers(min_value=-MAX_SAFE_INTEGER, max_value=MAX_SAFE_INTEGER)
            | st.floats(allow_nan=False, allow_infinity=False)
            | st.text(alphabet=st.characters(exclude_categories=("Cs",))))
_json = st.recursive(_scalars, lambda inner: st.lists(inner, max_size=6) | st.dictionaries(
    st.text(alphabet=st.characters(exclude_categories=("Cs",)), max_size=6), inner,
    max_size=6), max_leaves=40)


@settings(max_examples=300, deadline=None)
@given(_json)
def test_agrees_with_the_rfc8785_package(value: object) -> None:
    expected = rfc8785.dumps(value)
    assert canonical_json(value) == expected
    assert reference_json(value) == expected


@settings(max_examples=1000, deadline=None)
@given(st.floats(allow_nan=False, allow_infinity=False))
def test_every_float_agrees_with_the_rfc8785_package(x: float) -> None:
    assert number_text(x).encode() == rfc8785.dumps(x)
    assert canonical_json([x, "x", x]) == rfc8785.dumps([x, "x", x])
    assert float(number_text(x)) == x                  # the spelling round-trips


def test_bulk_body_equals_the_walk() -> None:
    # A body of the service's shape, with every spelling of float orjson may write, some
    # ids holding delimiters and escapes: the fast path must equal the plain walk.
    arcs = []
    specials = [3.0, 2.25, -0.0, 0.0, 1e16, 1e-7, 1e-6, 123456789.0, 1e21, 5e-324, -7.5]
    for i in range(3000):
        arcs.append({"from": f"a{i % 97}" + ('",1.0' if i % 13 == 0 else ""),
                     "to": f"t{i}" + ("\\" if i % 17 == 0 else ""),
                     "cost": specials[i % len(specials)] if i % 3 else i,
                     "capacity": None if i % 5 == 0 else i})
    body = {"sources": [{"id": "a0", "supply": 3}], "arcs": arcs, "time_limit_s": 2.0}
    assert canonical_json(body) == reference_json(body) == rfc8785.dumps(body)
