"""Duplicate keys in a JSON body: found cheaply, named exactly.

orjson, like most parsers, keeps the last of two equal keys of an object without a word.
Another reader of the same bytes may keep the first, so two readers of one body could see
two different problems, which an audit cannot allow: I-JSON (RFC 7493, section 2.3) asks
that member names be unique, and a body that breaks that is refused.

Checking every object of a 64 MB body in Python would cost more than parsing it, so the
check compares two counts that agree exactly when no key was lost:

* every member of every object in the raw text has exactly one ``:`` after its name, and
  a ``:`` byte appears nowhere else but inside strings (not in numbers, literals or
  whitespace, nor inside a multi-byte UTF-8 sequence): one C-level count of the raw bytes
  is the number of members, plus the ``:`` in strings;
* the parsed objects hold one member per key. A duplicate (``"a"`` twice, or ``"a"`` and
  ``"\\u0061"``, which decode to one key) leaves one member where the text had two, and
  the member lost takes its strings with it.

So ``members parsed + colons in parsed strings == colons in the text + colons written as
an escape (\\u003a)`` exactly when no key repeats. The tally of the parsed side may skip
whatever is costly to visit (a list that starts with a number: a cost matrix row); a
skipped part can only make the tally smaller, which makes the counts differ, never agree
falsely. First the tally without strings: in the common case (no ``:`` inside any string)
it already equals the raw count. When the counts still differ, an exact pass with the
standard library's ``object_pairs_hook`` (which sees every member, repeats included)
decides, and names each repeated key with its JSON Pointer (RFC 6901).
"""

from __future__ import annotations

import json
import re
import sys
from collections import Counter
from collections.abc import Iterable
from itertools import compress, count, repeat
from typing import Any

import numpy as np
import orjson

from schemas.numbers import MAX_ERRORS_PER_LIST
from schemas.pointers import escape_token

#: Below this many bytes bytes.count is cheaper than setting up numpy.
_NUMPY_FROM = 1 << 16
#: numpy compares the raw bytes in pieces of this size, so that the mask stays in cache.
_CHUNK = 1 << 18
_COLON = ord(":")
#: An escaped backslash (skipped whole, so that what follows is not taken for an escape)
#: or an escape that decodes to ':'.
_ESCAPES = re.compile(rb"\\\\|\\u003[aA]")
#: Deepest nesting orjson parses; the exact pass must reach as deep.
_MAX_DEPTH = 1024


def duplicate_keys(raw: bytes, doc: Any) -> list[dict[str, str]]:
    """Every key repeated within one object of ``raw`` (whose parse is ``doc``), as
    ``{"pointer", "detail"}`` in document order (at most 50); empty when there is none."""
    colons = _count(raw, _COLON)
    if _tally(doc, strings=False) == colons:
        return []
    try:
        if _tally(doc, strings=True) == colons + _escaped_colons(raw):
            return []
    except TypeError:                   # orjson writes at most 254 levels deep
        pass
    return _exact(raw)


def _count(raw: bytes, byte: int) -> int:
    """Occurrences of ``byte`` in ``raw``, with numpy in cache-sized pieces when large."""
    if len(raw) < _NUMPY_FROM:
        return raw.count(bytes((byte,)))
    data = np.frombuffer(raw, np.uint8)
    mask = np.empty(_CHUNK, bool)
    total = 0
    for start in range(0, len(data), _CHUNK):
        part = data[start:start + _CHUNK]
        hits = mask[:len(part)]
        np.equal(part, byte, out=hits)
        total += int(np.count_nonzero(hits))
    return total


def _escaped_colons(raw: bytes) -> int:
    if b"\\" not in raw:
        return 0
    return sum(1 for m in _ESCAPES.findall(raw) if m != b"\\\\")


def _colons_in(values: Iterable[Any]) -> int:
    """``:`` in the strings among ``values`` (other values are ignored)."""
    items = values if isinstance(values, list) else list(values)
    try:
        return "".join(items).count(":")
    except TypeError:                   # not all strings: keep those that are
        return "".join([v for v in items if type(v) is str]).count(":")


def _tally(doc: Any, strings: bool) -> int:
    """Members of the objects of ``doc``, plus with ``strings`` the ``:`` in its strings.

    Never more than the exact figure: lists that start with anything but an object or a
    list are not looked into, and of a list of objects only the columns that hold a
    container or a string in its first object are.
    """
    total = 0
    stack = [doc]
    while stack:
        node = stack.pop()
        kind = type(node)
        if kind is dict:
            total += len(node)
            values = node.values()
            if strings:
                total += "".join(node).count(":") + _colons_in(values)
            kinds = set(map(type, values))
            if dict in kinds or list in kinds:
                stack.extend(v for v in values if type(v) is dict or type(v) is list)
        elif kind is list and node:
            first = type(node[0])
            if first is dict and strings:
                # orjson writes every member with one ':' and never escapes one in a
                # string: the exact figure of the whole list, in one C-level pass
                total += _count(orjson.dumps(node), _COLON)
            elif first is dict:
                total += _records(node, stack)
            elif first is list:
                stack.extend(node)
            elif first is str and strings:
                total += _colons_in(node)
        elif kind is str and strings:
            total += node.count(":")
    return total


def _records(rows: list[Any], stack: list[Any]) -> int:
    """_tally's members of a list that starts with an object; containers found go on
    ``stack``. A list of objects (sources, arcs, allocation rows) is counted in one C-level
    pass; anything else in it is looked at one by one.

    ``dict.__len__`` counts objects only (``len`` would count the characters of a string
    among them too), so the one pass both counts and checks.
    """
    try:
        total = sum(map(dict.__len__, rows))
    except TypeError:                   # not only objects: each item on its own
        stack.extend(rows)
        return 0
    # Containers are looked for in the columns where the first object has one.
    for key, value in rows[0].items():
        if type(value) is dict or type(value) is list:
            column = map(dict.get, rows, repeat(key))
            stack.extend(v for v in column if type(v) is dict or type(v) is list)
    return total


class _Repeated(list):  # type: ignore[type-arg]
    """The members of an object with a repeated key, in order, repeats included."""


class _Holds(dict):  # type: ignore[type-arg]
    """An object without a repeated key of its own that holds one further in."""


_MARKS = frozenset((_Repeated, _Holds))
_WALKED = frozenset((_Repeated, _Holds, list))


def _exact(raw: bytes) -> list[dict[str, str]]:
    """The repeated keys, found by the standard library's parser, which hands every member
    to ``object_pairs_hook``, then named by a walk down to them only."""
    memo: dict[int, bool] = {}          # id of a list -> whether it holds a repeat

    def hook(pairs: list[tuple[str, Any]]) -> Any:
        obj = dict(pairs)
        if len(obj) < len(pairs):
            return _Repeated(pairs)
        kinds = set(map(type, obj.values()))
        if kinds & _MARKS or (list in kinds and any(
                _holds(v, memo) for v in obj.values() if type(v) is list)):
            return _Holds(obj)
        return obj

    limit = sys.getrecursionlimit()
    sys.setrecursionlimit(limit + _MAX_DEPTH + 100)  # orjson parsed it as deep as this
    try:
        # The values do not matter here: numbers are not converted (no digit limit).
        doc = json.loads(raw, object_pairs_hook=hook, parse_int=len, parse_float=len)
    finally:
        sys.setrecursionlimit(limit)
    found: list[dict[str, str]] = []
    stack: list[tuple[Any, str]] = [(doc, "")]
    while stack and len(found) < MAX_ERRORS_PER_LIST:
        node, at = stack.pop()
        kind = type(node)
        if kind is _Repeated:
            counts = Counter(k for k, _ in node)
            found.extend({"pointer": f"{at}/{escape_token(k)}",
                          "detail": f"key {json.dumps(k)} appears {n} times in one object; "
                                    "each key may appear once (I-JSON, RFC 7493)"}
                         for k, n in counts.items() if n > 1)
            members: Iterable[tuple[Any, Any]] = node
        elif kind is _Holds:
            members = node.items()
        elif kind is list and _holds(node, memo):
            picked = compress(count(), map(_WALKED.__contains__, map(type, node)))
            members = ((i, node[i]) for i in picked)
        else:
            continue
        stack.extend(reversed([(v, f"{at}/{escape_token(str(k))}") for k, v in members
                               if type(v) in _WALKED and (type(v) is not list
                                                          or _holds(v, memo))]))
    return found[:MAX_ERRORS_PER_LIST]


def _holds(items: list[Any], memo: dict[int, bool]) -> bool:
    """Whether the list ``items`` of the parsed document holds, directly or through nested
    lists, a marked object.

    Each list is scanned once (C-level, by type) and remembered in ``memo``, however often
    it is asked about: by the hook of the object around it and again by the walk. The keys
    are ids, so only lists that live as long as the document may be asked about.
    """
    key = id(items)
    if key in memo:
        return memo[key]
    stack: list[tuple[list[Any], list[list[Any]] | None]] = [(items, None)]
    while stack:
        lst, subs = stack.pop()
        if subs is not None:            # second visit: the nested lists are known
            memo[id(lst)] = any(memo[id(sub)] for sub in subs)
            continue
        if id(lst) in memo:
            continue
        kinds = set(map(type, lst))
        if kinds & _MARKS or list not in kinds:
            memo[id(lst)] = bool(kinds & _MARKS)
            continue
        nested = [v for v in lst if type(v) is list]
        stack.append((lst, nested))
        stack.extend((sub, None) for sub in nested)
    return memo[key]
