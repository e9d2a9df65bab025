"""Ids: what a declared id may hold, and ids that only look different.

The character classes are held against Python's Unicode database (``unicodedata``,
``str.isspace``) over every code point; the rules themselves are the wire format's
(README, "Errors"; openapi.yaml, Source.id).
"""

from __future__ import annotations

import re
import unicodedata
from typing import Any

import numpy as np
import pytest
import yaml

from service.network import build
from tests.servers import ROOT

BIDI = "\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"
SPEC = yaml.safe_load((ROOT / "openapi.yaml").read_text(encoding="utf-8"))
ID_PATTERN = SPEC["components"]["schemas"]["Source"]["properties"]["id"]["pattern"]


def _problem(sources: list[str], sinks: list[str], nodes: list[str] | None = None) -> dict:
    body: dict[str, Any] = {"sources": [{"id": s} for s in sources],
                            "sinks": [{"id": t} for t in sinks]}
    if nodes is None:
        body["costs"] = [[1] * len(sinks) for _ in sources]
    else:
        body["nodes"] = [{"id": n} for n in nodes]
        body["arcs"] = [{"from": sources[0], "to": nodes[0], "cost": 1},
                        {"from": nodes[0], "to": sinks[0], "cost": 1}]
    return body


def _errors(client: Any, body: dict, path: str = "/v1/solve") -> list[dict[str, str]]:
    response = client.post(path, json=body)
    assert response.status_code == 422, response.get_json()
    doc = response.get_json()
    assert doc["type"] == "urn:certimatch:problem:invalid-problem"
    return doc["errors"]


BAD = {
    "only spaces": ("   ", "more than whitespace"),
    "only a tab": ("\t", "more than whitespace"),
    "a leading space": (" north", "begin or end with whitespace"),
    "a trailing space": ("north ", "begin or end with whitespace"),
    "a trailing no-break space": ("north\u00a0", "begin or end with whitespace"),
    "a leading ideographic space": ("\u3000north", "begin or end with whitespace"),
    "a trailing line separator": ("north\u2028", "begin or end with whitespace"),
    "a NUL": ("nor\x00th", "control characters"),
    "a newline inside": ("nor\nth", "control characters"),
    "DEL": ("north\x7f", "control characters"),
    "a C1 control": ("nor\x9bth", "control characters"),
    "NEL, a C1 control and a space": ("north\x85", "control characters"),
    **{f"U+{ord(c):04X}": (f"a{c}b", "bidirectional formatting characters") for c in BIDI},
}

GOOD = {
    "inner spaces": "north depot",
    "accents": "técnico-7",
    "decomposed accents, kept as sent": "te\u0301cnico-8",
    "a zero-width joiner in an emoji sequence": "\U0001f469\u200d\U0001f527",
    "a character beyond U+FFFF": "\U0001d538-depot",
    "a soft hyphen": "north\u00adeast",
    "Cyrillic": "техник",
    "quotes and slashes": 'a/"b"~c\\d',
}


@pytest.mark.parametrize("where", ["sources", "sinks", "nodes"])
@pytest.mark.parametrize("case", sorted(BAD))
def test_a_bad_id_is_422_naming_it(client, where, case):
    bad, words = BAD[case]
    ids = {"sources": ["s0", "s1"], "sinks": ["t0", "t1"], "nodes": ["hub"]}
    ids[where][-1] = bad
    errors = _errors(client, _problem(ids["sources"], ids["sinks"], ids["nodes"]))
    index = len(ids[where]) - 1
    assert {e["pointer"] for e in errors} == {f"/{where}/{index}/id"}
    assert any(words in e["detail"] for e in errors)
    assert not re.search(ID_PATTERN, bad)      # the contract refuses it too


@pytest.mark.parametrize("case", sorted(GOOD))
def test_a_good_id_is_kept_exactly(client, case):
    good = GOOD[case]
    response = client.post("/v1/solve", json=_problem([good], ["t0"]))
    assert response.status_code == 200, response.get_json()
    assert response.get_json()["allocation"][0]["from"] == good
    assert re.search(ID_PATTERN, good)


def test_the_bad_character_is_named_by_code_point_and_position(client):
    (error,) = _errors(client, _problem(["ab\u202ecd"], ["t0"]))
    assert error["detail"].endswith("U+202E is at position 2")


def test_ids_equal_after_nfc_are_refused_with_both_pointers(client):
    # U+00E9 and e + U+0301 are canonically equivalent (Unicode Standard Annex #15)
    errors = _errors(client, _problem(["caf\u00e9", "x"], ["y", "cafe\u0301"]))
    assert {e["pointer"] for e in errors} == {"/sources/0/id", "/sinks/1/id"}
    by_pointer = {e["pointer"]: e["detail"] for e in errors}
    assert "/sinks/1/id" in by_pointer["/sources/0/id"]
    assert "/sources/0/id" in by_pointer["/sinks/1/id"]
    assert "NFC" in by_pointer["/sources/0/id"]


def test_three_spellings_name_the_first_for_each_other(client):
    # A + U+030A (decomposed), U+00C5 (precomposed), U+212B ANGSTROM SIGN: one NFC form
    errors = _errors(client, _problem(["A\u030a", "\u00c5"], ["\u212b"]))
    assert sorted(e["pointer"] for e in errors) == ["/sinks/0/id", "/sources/0/id",
                                                    "/sources/1/id"]


def test_an_exact_repeat_is_still_a_duplicate(client):
    errors = _errors(client, _problem(["caf\u00e9"], ["caf\u00e9"]))
    assert errors == [{"pointer": "/sinks/0/id",
                       "detail": "duplicate id 'café' (first at /sources/0/id)"}]


@pytest.mark.parametrize("path", ["/v1/verify", "/v1/report"])
def test_verify_and_report_refuse_bad_ids_too(client, path):
    body = {**_problem([" north"], ["t0"]), "answer": {
        "objective": 1, "allocation": [], "unmet": [], "unused": [],
        "certificate": {"negated": False, "potentials": {}, "hard_shortfall": 0,
                        "virtual_potentials": {"super_source": 0, "super_sink": 0,
                                               "hard_pool": 0},
                        "cut": {"sink_side": []}, "dual_objective": 1}}}
    errors = _errors(client, body, path)
    assert "/sources/0/id" in [e["pointer"] for e in errors]


@pytest.mark.parametrize(("spoil", "words"), [(" {}", "whitespace"), ("{}\u3000", "whitespace"),
                                              ("{}\x07", "control"), ("{}\u2067", "bidirectional")])
@pytest.mark.parametrize("alphabet", ["t-{}", "técnico-{}", "техник-{}"])
def test_one_bad_id_among_many_is_found_in_bulk(client, alphabet, spoil, words):
    sinks = [alphabet.format(j) for j in range(3000)]
    sinks[500] = spoil.format(sinks[500])
    errors = _errors(client, _problem(["s"], sinks))
    assert [e["pointer"] for e in errors] == ["/sinks/500/id"]
    assert words in errors[0]["detail"]


@pytest.mark.parametrize("alphabet", ["t-{}", "técnico-{}", "техник-{}", "\U0001d538-{}"])
def test_many_good_ids_pass_the_bulk_check(client, alphabet):
    sinks = [alphabet.format(j) for j in range(3000)]
    response = client.post("/v1/solve", json={**_problem(["s"], sinks),
                                              "sources": [{"id": "s", "supply": 3000}]})
    assert response.status_code == 200


# --- the character classes against the Unicode database --------------------------------------

def test_the_whitespace_table_is_what_str_strip_strips():
    # reference: Python's Unicode database behind str.isspace, over every code point
    spaces = {c for c in range(0x110000) if chr(c).isspace()}
    assert set(np.flatnonzero(build._IS_SPACE).tolist()) == spaces


def test_the_control_class_is_unicode_category_cc():
    # reference: unicodedata.category, over every code point
    cc = {c for c in range(0x110000) if unicodedata.category(chr(c)) == "Cc"}
    assert cc == {c for c in range(0x110000) if re.fullmatch(f"[{build._CONTROL}]", chr(c))}


def test_the_bidirectional_class_is_the_unicode_bidi_controls():
    # Unicode Standard Annex #9, table 4 (explicit directional formatting characters) and
    # section 2.6 (implicit marks); each of them has bidirectional class LRE..PDI, LRM, RLM
    # or AL-mark in the Unicode database
    classes = {"LRE", "RLE", "LRO", "RLO", "PDF", "LRI", "RLI", "FSI", "PDI"}
    marks = {c for c in range(0x110000)
             if unicodedata.bidirectional(chr(c)) in classes}
    assert marks == {0x202A, 0x202B, 0x202C, 0x202D, 0x202E, 0x2066, 0x2067, 0x2068, 0x2069}
    assert set(np.flatnonzero(build._IS_BIDI).tolist()) == marks | {0x061C, 0x200E, 0x200F}
    assert {ord(c) for c in BIDI} == marks | {0x061C, 0x200E, 0x200F}
