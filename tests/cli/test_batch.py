"""Several inputs in one call: one answer file each, a summary table, the worst exit code."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import socket
from pathlib import Path
from typing import Any

import pytest

from service.cli import main, transport
from service.cli.outcome import worst

# The scipy.optimize.linear_sum_assignment docstring example; its optimum is 5.
GOOD = {"sources": [{"id": "r0"}, {"id": "r1"}, {"id": "r2"}],
        "sinks": [{"id": "c0"}, {"id": "c1"}, {"id": "c2"}],
        "costs": [[4, 1, 3], [2, 0, 5], [3, 2, 2]]}
# One van for two hard stops: a plan with stop-2 unmet (exit 3), or refused (exit 2).
SHORT_TABLE = ",stop-1,stop-2\nvan-a,3,4\n"
SHORT = {"sources": [{"id": "van-a"}], "sinks": [{"id": "stop-1"}, {"id": "stop-2"}],
         "costs": [[3, 4]], "unmet_demand": "reject"}
INVALID = {"sources": [{"id": "a"}], "sinks": [{"id": "b", "demand": -1}], "costs": [[1]]}


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _inbox(tmp_path: Path, with_invalid: bool = True) -> Path:
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    (inbox / "a-good.json").write_text(json.dumps(GOOD))
    (inbox / "b-short.csv").write_text(SHORT_TABLE)
    (inbox / "c-refused.json").write_text(json.dumps(SHORT))
    if with_invalid:
        (inbox / "d-invalid.json").write_text(json.dumps(INVALID))
    (inbox / ".hidden.json").write_text("not a problem")     # skipped: hidden
    (inbox / "notes.txt").write_text("not a problem")        # skipped: not .json or .csv
    (inbox / "sub").mkdir()                                    # skipped: not descended into
    (inbox / "sub" / "deep.json").write_text(json.dumps(GOOD))
    return inbox


def test_exit_codes_combine_in_the_documented_order():
    assert worst([0, 3, 0]) == 3
    assert worst([3, 2]) == 2
    assert worst([2, 4, 3]) == 4
    assert worst([4, 1, 0]) == 1
    assert worst([0]) == 0


def test_a_folder_gives_one_answer_file_per_input_and_the_worst_code(capsys, tmp_path):
    inbox = _inbox(tmp_path)
    out_dir = tmp_path / "answers"
    summary, unmet = tmp_path / "summary.json", tmp_path / "unmet.csv"
    code, out, err = _run(capsys, "solve", str(inbox), "--local", "--out-dir", str(out_dir),
                          "--summary-json", str(summary), "--unmet-csv", str(unmet))
    assert code == 1                                   # d-invalid: 1 beats 2, 3 and 0
    assert sorted(p.name for p in out_dir.iterdir()) == ["a-good.answer.json",
                                                         "b-short.answer.json"]
    assert json.loads((out_dir / "a-good.answer.json").read_text())["objective"] == 5
    records = json.loads(summary.read_text())["inputs"]
    assert [(Path(r["input"]).name, r["exit_code"]) for r in records] == [
        ("a-good.json", 0), ("b-short.csv", 3), ("c-refused.json", 2), ("d-invalid.json", 1)]
    assert records[0]["files"] == {"answer": str(out_dir / "a-good.answer.json")}
    assert list(csv.reader(io.StringIO(unmet.read_text()))) == [
        ["input", "id", "amount", "demand", "hard", "reason", "reduced_cost"],
        # van-a's one slot serves stop-1: stop-2 waits for capacity
        [str(inbox / "b-short.csv"), "stop-2", "1", "1", "true", "capacity", ""]]
    # stdout: the summary table; stderr: one line per input.
    lines = out.splitlines()
    assert lines[0].split() == ["input", "exit", "outcome", "objective", "routed",
                                "hard", "unmet", "answer"]
    assert lines[1].split()[:6] == [str(inbox / "a-good.json"), "0", "all-hard-demand-met",
                                    "5", "3", "0"]
    assert lines[3].split()[:6] == [str(inbox / "c-refused.json"), "2", "infeasible", "-",
                                    "-", "-"]
    assert lines[-1].startswith("exit 1: anything permanent")
    assert [line.rsplit(" ", 1)[-1] for line in err.splitlines()] == ["0", "3", "2", "1"]


def test_without_the_broken_input_the_refusal_is_worst(capsys, tmp_path):
    inbox = _inbox(tmp_path, with_invalid=False)
    code, _, _ = _run(capsys, "solve", str(inbox), "--local", "--out-dir",
                      str(tmp_path / "answers"))
    assert code == 2


def test_files_and_folders_mix_and_formats_name_the_files(capsys, tmp_path):
    inbox = _inbox(tmp_path, with_invalid=False)
    extra = tmp_path / "extra.json"
    extra.write_text(json.dumps(GOOD))
    out_dir = tmp_path / "answers"
    code, _, _ = _run(capsys, "solve", str(extra), str(inbox / "a-good.json"), "--local",
                      "--out-dir", str(out_dir), "--format", "csv")
    assert code == 0
    assert sorted(p.name for p in out_dir.iterdir()) == ["a-good.allocation.csv",
                                                         "extra.allocation.csv"]
    code, _, _ = _run(capsys, "solve", str(extra), "--local", "--out-dir", str(out_dir),
                      "--format", "table")
    assert code == 0
    assert (out_dir / "extra.answer.txt").read_text().startswith("optimal allocation")


@pytest.mark.parametrize(("extra", "message"), [
    ([], "several inputs need --out-dir DIR"),
    (["--out-dir", "{tmp}/answers", "-o", "{tmp}/plan.json"], "use --out-dir DIR"),
])
def test_several_inputs_need_an_output_folder(capsys, tmp_path, extra, message):
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    for p in (a, b):
        p.write_text(json.dumps(GOOD))
    argv = [x.format(tmp=tmp_path) for x in extra]
    code, out, err = _run(capsys, "solve", str(a), str(b), "--local", *argv)
    assert code == 1
    assert out == ""
    assert message in err


def test_two_inputs_that_would_write_the_same_file_are_refused(capsys, tmp_path):
    (tmp_path / "monday.json").write_text(json.dumps(GOOD))
    (tmp_path / "monday.csv").write_text(SHORT_TABLE)
    code, _, err = _run(capsys, "solve", str(tmp_path / "monday.json"),
                        str(tmp_path / "monday.csv"), "--local", "--out-dir",
                        str(tmp_path / "out"))
    assert code == 1
    assert "would both write monday.answer.json" in err
    assert not (tmp_path / "out").exists()


def test_the_output_folder_cannot_be_an_input_folder(capsys, tmp_path):
    inbox = _inbox(tmp_path)
    code, _, err = _run(capsys, "solve", str(inbox), "--local", "--out-dir", str(inbox))
    assert code == 1
    assert "is an input folder" in err


def test_standard_input_cannot_be_one_of_several(capsys, tmp_path):
    (tmp_path / "a.json").write_text(json.dumps(GOOD))
    code, _, err = _run(capsys, "solve", "-", str(tmp_path / "a.json"), "--local",
                        "--out-dir", str(tmp_path / "out"))
    assert code == 1
    assert "standard input" in err


def test_an_empty_folder_is_refused(capsys, tmp_path):
    code, _, err = _run(capsys, "solve", str(tmp_path), "--local", "--out-dir",
                        str(tmp_path / "out"))
    assert code == 1
    assert "holds no .json or .csv file" in err


def test_a_server_that_is_down_is_tried_once_for_the_whole_batch(capsys, tmp_path, waits):
    inbox = _inbox(tmp_path)
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    summary = tmp_path / "s.json"
    code, out, err = _run(capsys, "solve", str(inbox), "--url", f"http://127.0.0.1:{port}",
                          "--out-dir", str(tmp_path / "answers"), "--summary-json",
                          str(summary))
    assert code == 4
    assert waits == [0.5, 1.0, 2.0]              # the first input's retries, no more
    records = json.loads(summary.read_text())["inputs"]
    assert [r["exit_code"] for r in records] == [4, 4, 4, 4]
    assert all(r["message"].startswith("not sent: cannot reach") for r in records[1:])
    assert list((tmp_path / "answers").iterdir()) == []


def test_a_given_idempotency_key_becomes_one_key_per_input(capsys, tmp_path, monkeypatch):
    seen: list[tuple[bytes, str]] = []
    real = transport._local_post

    def recording() -> transport.Post:
        post = real()

        def answer(path: str, body: bytes, headers: Any = None) -> transport.Reply:
            seen.append((body, dict(headers or {})["Idempotency-Key"]))
            return post(path, body, headers)

        return answer

    monkeypatch.setattr(transport, "_local_post", recording)
    files = []
    for name, doc in (("a.json", GOOD), ("b.json", {**GOOD, "objective": "max"})):
        (tmp_path / name).write_text(json.dumps(doc))
        files.append(str(tmp_path / name))
    for _ in range(2):       # the same batch twice: the same keys again
        code, _, _ = _run(capsys, "solve", *files, "--local", "--out-dir",
                          str(tmp_path / "out"), "--idempotency-key", "run-7")
        assert code == 0
    expected = [f"run-7-{hashlib.sha256(Path(f).read_bytes()).hexdigest()[:16]}"
                for f in files]
    assert [key for _, key in seen] == expected * 2
    assert len(set(expected)) == 2
