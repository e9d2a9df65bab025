"""The command line's wire forms: --columnar, the CSV path's columns, and --gzip.

The reference is the command's own plain output: the same problem sent in another form
or compressed must print the same answer. What went over the wire is recorded by wrapping
the in-process transport, and read back with Python's gzip module.
"""

from __future__ import annotations

import gzip
import json
import re
from typing import Any

import pytest

from service.cli import main, transport
from tests.reference import instance

#: The answer's decision object: its id and time differ from run to run, so outputs are
#: compared without it (README, "Determinism": the rest is the same bytes).
_DECISION = re.compile(r',"decision":\{[^{}]*\}')


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, _DECISION.sub("", out), err


@pytest.fixture
def sent(monkeypatch: pytest.MonkeyPatch) -> list[tuple[bytes, dict[str, str]]]:
    """Every (body, headers) the command sends, as it leaves for the service."""
    seen: list[tuple[bytes, dict[str, str]]] = []
    real = transport._local_post

    def recording() -> transport.Post:
        post = real()

        def send(path: str, body: bytes, headers: Any = None) -> transport.Reply:
            seen.append((body, dict(headers or {})))
            return post(path, body, headers)

        return send

    monkeypatch.setattr(transport, "_local_post", recording)
    return seen


def _file(tmp_path: Any, doc: Any, name: str = "p.json") -> str:
    path = tmp_path / name
    path.write_text(json.dumps(doc))
    return str(path)


@pytest.mark.parametrize("family", ["transshipment", "penalties", "sparse_arcs"])
def test_columnar_prints_the_answer_of_the_records(capsys, tmp_path, sent, family):
    path = _file(tmp_path, instance(family, 2))
    plain = _run(capsys, "solve", path, "--local")
    assert plain[0] in (0, 3), plain[2]          # 3: hard demand unmet, as the data has it
    # the summary line on stderr reads unmet and unused rows from the problem too
    assert _run(capsys, "solve", path, "--local", "--columnar") == plain
    body = json.loads(sent[-1][0])
    for table in ("sources", "sinks", "nodes", "arcs"):
        if table in body:
            first = "from" if table == "arcs" else "id"
            assert isinstance(body[table], dict) and isinstance(body[table][first], list)


def test_a_columnar_file_gets_its_table_printed(capsys, tmp_path):
    # the table view reads the sinks' demands from the file, in whichever form it holds them
    problem = instance("penalties", 1)
    plain = _run(capsys, "solve", _file(tmp_path, problem), "--local", "--format", "table")
    cols = {**problem, "sinks": {k: [s.get(k) for s in problem["sinks"]]
                                 for k in ("id", "demand", "penalty")}}
    columnar = _run(capsys, "solve", _file(tmp_path, cols, "c.json"), "--local",
                    "--format", "table")
    assert plain[0] in (0, 3)
    assert columnar[:2] == plain[:2]
    assert columnar[2].replace("c.json", "p.json") == plain[2]


def test_verify_and_report_take_columnar(capsys, tmp_path):
    problem = instance("transshipment", 5)
    path = _file(tmp_path, problem)
    code, out, _ = _run(capsys, "solve", path, "--local", "-o", str(tmp_path / "a.json"))
    assert code == 0
    code, out, err = _run(capsys, "verify", path, "--answer", str(tmp_path / "a.json"),
                          "--local", "--columnar")
    assert code == 0, err
    code, _, err = _run(capsys, "report", path, "--answer", str(tmp_path / "a.json"),
                        "--columnar", "-o", str(tmp_path / "r.html"))
    assert code == 0, err
    assert "VALID" in (tmp_path / "r.html").read_text()


def test_a_csv_table_is_sent_in_columns(capsys, tmp_path, sent):
    path = tmp_path / "t.csv"
    path.write_text(",t1,t2,supply\na,1,,2\nb,3,4,\npenalty,,9,\n")
    code, out, err = _run(capsys, "solve", str(path), "--local")
    assert code == 0, err
    body = json.loads(sent[-1][0])
    assert body["sources"] == {"id": ["a", "b"], "supply": [2, None]}
    assert body["sinks"] == {"id": ["t1", "t2"], "penalty": [None, 9]}
    assert body["costs"] == [[1, None], [3, 4]]


@pytest.mark.parametrize("extra", [["--gzip"], ["--gzip", "--columnar"]])
def test_gzip_sends_a_compressed_body_and_prints_the_same_answer(capsys, tmp_path, sent,
                                                                 extra):
    path = _file(tmp_path, instance("sparse_arcs", 3))
    plain = _run(capsys, "solve", path, "--local")
    packed = _run(capsys, "solve", path, "--local", *extra)
    assert packed[:2] == plain[:2]
    body, headers = sent[-1]
    assert headers["Content-Encoding"] == "gzip"
    assert "Content-Encoding" not in sent[-2][1]
    inflated = json.loads(gzip.decompress(body))
    if extra == ["--gzip"]:
        assert inflated == json.loads(sent[-2][0])
    else:
        assert isinstance(inflated["arcs"], dict)


def test_no_gzip_and_the_default_in_this_process_send_it_plain(capsys, tmp_path, sent):
    path = _file(tmp_path, instance("sparse_arcs", 3))
    for extra in ([], ["--no-gzip"]):
        assert _run(capsys, "solve", path, "--local", *extra)[0] in (0, 3)
        assert "Content-Encoding" not in sent[-1][1]


@pytest.mark.parametrize("choice,url,size,wanted", [
    (None, "https://plans.example.net", transport.GZIP_BYTES, True),
    (None, "https://plans.example.net", transport.GZIP_BYTES - 1, False),
    (None, "http://127.0.0.1:8080", 10**8, False),       # loopback: nothing to save
    (None, "http://localhost:8080", 10**8, False),
    (None, "http://[::1]:8080", 10**8, False),
    (None, "http://10.0.0.7:8080", 10**8, True),
    (None, None, 10**8, False),                          # this process
    (True, "http://127.0.0.1:8080", 10, True),
    (False, "https://plans.example.net", 10**8, False),
])
def test_gzip_by_default_only_for_large_bodies_to_another_machine(choice, url, size, wanted):
    assert transport.gzip_wanted(choice, url, size) is wanted
