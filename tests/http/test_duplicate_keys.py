"""Keys repeated within one JSON object are refused with 400, each named by JSON Pointer.

The reference for "is a key repeated" is the standard library's parser with
``object_pairs_hook``, which hands over every member of an object, repeats included
(Python documentation, json.loads); the service's own check counts bytes and members
instead (service/http/duplicates.py) and must agree with it on any text.
"""

from __future__ import annotations

import json
from collections import Counter
from typing import Any

import orjson
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.http import duplicates
from service.http.duplicates import duplicate_keys
from tests.servers import GOOD

ROUTES = ("/v1/solve", "/v1/verify", "/v1/report")


def _post(client: Any, path: str, raw: bytes) -> Any:
    return client.post(path, data=raw, content_type="application/json")


def _reference(raw: bytes) -> list[str]:
    """Pointers of the repeated keys, by the standard library's parser and a plain walk."""
    found: list[str] = []

    def walk(node: Any, at: str) -> None:
        if isinstance(node, _Pairs):
            counts = Counter(k for k, _ in node)
            found.extend(f"{at}/{_token(k)}" for k, n in counts.items() if n > 1)
            for k, v in node:
                walk(v, f"{at}/{_token(k)}")
        elif isinstance(node, list):
            for i, v in enumerate(node):
                walk(v, f"{at}/{i}")

    walk(json.loads(raw, object_pairs_hook=_Pairs), "")
    return found


class _Pairs(list):  # type: ignore[type-arg]
    pass


def _token(key: str) -> str:
    return key.replace("~", "~0").replace("/", "~1")   # RFC 6901, section 3


def _found(raw: bytes) -> list[str]:
    return [e["pointer"] for e in duplicate_keys(raw, orjson.loads(raw))]


# --- the answer -----------------------------------------------------------------------------

@pytest.mark.parametrize("path", ROUTES)
def test_a_repeated_key_is_400_naming_it_and_its_pointer(client, path):
    raw = (b'{"sources": [{"id": "r0"}, {"id": "r1", "supply": 1, "supply": 2}],'
           b' "sinks": [{"id": "c0"}], "costs": [[1], [2]]}')
    response = _post(client, path, raw)
    assert response.status_code == 400
    assert response.content_type == "application/problem+json"
    doc = response.get_json()
    assert doc["type"] == "urn:certimatch:problem:malformed-json"
    assert doc["errors"] == [{"pointer": "/sources/1/supply", "detail": doc["errors"][0]["detail"]}]
    assert '"supply"' in doc["errors"][0]["detail"] and "2 times" in doc["errors"][0]["detail"]
    assert doc["detail"].startswith("/sources/1/supply: ")


def test_every_repeated_key_is_listed_in_document_order(client):
    raw = (b'{"objective": "min", "sources": [{"id": "r0", "id": "r0"}], "sinks": [{"id": "c0"}],'
           b' "costs": [[1]], "objective": "max"}')
    doc = _post(client, "/v1/solve", raw).get_json()
    assert [e["pointer"] for e in doc["errors"]] == ["/objective", "/sources/0/id"]
    assert doc["detail"].endswith("(and 1 more)")


def test_the_same_body_without_the_repeat_is_solved(client):
    response = _post(client, "/v1/solve", json.dumps(GOOD).encode())
    assert response.status_code == 200


def test_at_most_fifty_are_listed():
    raw = json.dumps({f"k{i}": 0 for i in range(60)}).encode()
    raw = raw[:-1] + b"," + b",".join(f'"k{i}": 1'.encode() for i in range(60)) + b"}"
    assert len(_found(raw)) == 50


# --- spellings and places a count could be fooled by ----------------------------------------

@pytest.mark.parametrize(("raw", "pointers"), [
    # one key written two ways: the escape decodes to the same name (RFC 8259, section 7)
    (b'{"a": 1, "\\u0061": 2}', ["/a"]),
    (b'{"id": 1, "\\u0069\\u0064": 2}', ["/id"]),
    (b'{"\\ud83d\\ude00": 1, "\xf0\x9f\x98\x80": 2}', ["/\U0001f600"]),
    # keys inside strings are text, not keys
    (b'{"a": "{\\"b\\": 1, \\"b\\": 2}"}', []),
    (b'{"note": "a: 1, a: 2", "a": 1}', []),
    # colons in strings, raw and escaped, and an escaped backslash before a u
    (b'{"id": "tech:42", "at": "10:30"}', []),
    (b'{"id": "tech\\u003a42", "x": "\\u003A"}', []),
    (b'{"a\\\\u003a": 1, "k": "\\\\\\u003a"}', []),
    (b'{"a": "\\u003a", "a": 2}', ["/a"]),
    (b'{"k": "\\\\", "k": "\\""}', ["/k"]),
    # where a tally that skips things must not miss: a matrix cell, a later record, a
    # list led by a number, a repeat whose first value held another repeat
    (b'{"costs": [[1, 2], [3, {"a": 1, "a": 2}]]}', ["/costs/1/1/a"]),
    (b'{"arcs": [{"from": "a"}, {"from": "b", "x": {"y": 1, "y": 1}}]}', ["/arcs/1/x/y"]),
    (b'{"arcs": [{"from": "a"}, "text", {"b": 1, "b": 2}]}', ["/arcs/2/b"]),
    (b'[1, "x:y", {"a": 1, "a": 1}]', ["/2/a"]),
    (b'{"a": {"b": 1, "b": 2}, "a": 3}', ["/a", "/a/b"]),
    (b'{"a/b~c": {"k": 1, "k": 2, "k": 3}}', ["/a~1b~0c/k"]),
    # repeats in a long list of records whose ids hold colons
    (b'{"arcs": [' + b",".join(b'{"from": "s:%d", "to": "t:%d"}' % (i, i) for i in range(300))
     + b', {"from": "s", "from": "t"}]}', ["/arcs/300/from"]),
    (b'"a:b"', []),
    (b"[]", []),
])
def test_repeats_are_found_however_they_are_written(raw, pointers):
    assert _reference(raw) == pointers     # the cases say what they mean
    assert _found(raw) == pointers


def test_a_repeat_as_deep_as_orjson_parses_is_found():
    depth = 1000
    raw = b'{"a":' * depth + b'{"k": 1, "k": 2}' + b"}" * depth
    assert _found(raw) == ["/a" * depth + "/k"]


@pytest.mark.parametrize("repeat", [b"", b', "k": 2'])
def test_records_nested_deeper_than_orjson_writes_are_decided_too(repeat):
    # the second count writes lists of objects back with orjson, which stops at 254 levels
    raw = (b'{"a": [' + b'{"k": [' * 300 + b"1" + b"]}" * 299 + b"]" + repeat + b"}"
           + b'], "s": "x:y"}')
    # the repeat, when there is one, is in the outermost record
    assert _found(raw) == _reference(raw) == ([] if not repeat else ["/a/0/k"])


def test_a_common_body_is_decided_without_the_exact_pass(monkeypatch):
    # the cheap counts must settle bodies without repeats, colons in ids or not
    def refuse(raw: bytes) -> list[dict[str, str]]:
        raise AssertionError("the exact pass ran")

    monkeypatch.setattr(duplicates, "_exact", refuse)
    arcs = [{"from": f"s:{i % 7}", "to": f"t\u00e9:{i}", "cost": i} for i in range(2000)]
    body = {"sources": [{"id": f"s:{i}"} for i in range(7)],
            "sinks": [{"id": f"t\u00e9:{i}"} for i in range(2000)], "arcs": arcs,
            "answer": {"certificate": {"potentials": {f"s:{i}": 0 for i in range(7)}}}}
    for raw in (orjson.dumps(body), json.dumps(body).encode(), json.dumps(body, indent=1).encode()):
        assert duplicate_keys(raw, orjson.loads(raw)) == []


# --- any text ---------------------------------------------------------------------------------

_KEYS = st.sampled_from(["a", "b", "id", "a:b", ":", 'q"', "\\", "/", "~", "\u00e9"])
_SCALARS = st.one_of(st.integers(-5, 5), st.none(), st.booleans(),
                     st.text(alphabet=':"\\{}ab\u00e9', max_size=4))


def _containers(inner: st.SearchStrategy[Any]) -> st.SearchStrategy[Any]:
    """Lists and objects (as _Pairs, repeats allowed) of ``inner``."""
    return st.one_of(st.lists(inner, max_size=4),
                     st.lists(st.tuples(_KEYS, inner), max_size=4).map(_Pairs))


def _documents() -> st.SearchStrategy[Any]:
    return st.recursive(_SCALARS, _containers, max_leaves=20)


def _write(node: Any, rng: st.DataObject) -> str:
    """JSON text of ``node`` with each character of each string written plainly or as a
    \\u escape, as the draw decides; a _Pairs becomes an object with every pair kept."""
    if isinstance(node, _Pairs):
        return "{" + ",".join(f"{_string(k, rng)}:{_write(v, rng)}" for k, v in node) + "}"
    if isinstance(node, list):
        return "[" + ",".join(_write(v, rng) for v in node) + "]"
    if isinstance(node, str):
        return _string(node, rng)
    return json.dumps(node)


def _string(text: str, rng: st.DataObject) -> str:
    out = []
    for ch in text:
        if rng.draw(st.booleans()):
            out.append(f"\\u{ord(ch):04{rng.draw(st.sampled_from('xX'))}}")
        else:
            out.append(json.dumps(ch)[1:-1])
    return '"' + "".join(out) + '"'


@settings(max_examples=400, deadline=None, derandomize=True)
@given(st.data())
def test_the_check_agrees_with_the_standard_librarys_parser(data):
    raw = _write(data.draw(_documents()), data).encode()
    assert _found(raw) == _reference(raw)
