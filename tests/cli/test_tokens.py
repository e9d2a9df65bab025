"""Where the bearer token comes from, and that it is never shown.

The token reaches a real server in tests/deploy/test_gunicorn.py; here a scripted stub
records the Authorization header it was sent, and every stream the command writes is
searched for the token.
"""

from __future__ import annotations

import json
import os
import threading
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import pytest

from service.cli import credentials, main, serve
from service.cli.credentials import Secret, read_token_file, redact_secrets

TOKEN = "tok-ens-ARE-long-enough-0123456789"
OTHER = "another-token-of-enough-length-42"
PROBLEM = {"sources": [{"id": "a"}], "sinks": [{"id": "x"}], "costs": [[1]]}


class _Recorder(ThreadingHTTPServer):
    daemon_threads = True

    def __init__(self) -> None:
        super().__init__(("127.0.0.1", 0), _Handler)
        self.authorizations: list[str | None] = []
        self.url = f"http://127.0.0.1:{self.server_address[1]}"


class _Handler(BaseHTTPRequestHandler):
    server: _Recorder

    def do_POST(self) -> None:  # noqa: N802 (the name http.server calls)
        self.rfile.read(int(self.headers.get("Content-Length", 0)))
        self.server.authorizations.append(self.headers.get("Authorization"))
        body = json.dumps({"type": "urn:certimatch:problem:unauthorized", "status": 401,
                           "title": "Bearer token required",
                           "detail": "the bearer token is not accepted"}).encode()
        self.send_response(401)
        self.send_header("Content-Type", "application/problem+json")
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, format: str, *args: Any) -> None:
        pass


@pytest.fixture
def recorder() -> Iterator[_Recorder]:
    server = _Recorder()
    thread = threading.Thread(target=server.serve_forever, args=(0.05,), daemon=True)
    thread.start()
    try:
        yield server
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=10)


@pytest.fixture
def problem_file(tmp_path: Path) -> str:
    path = tmp_path / "problem.json"
    path.write_text(json.dumps(PROBLEM))
    return str(path)


def _token_file(tmp_path: Path, text: str, mode: int = 0o600) -> str:
    path = tmp_path / "token"
    path.write_text(text)
    path.chmod(mode)
    return str(path)


def _run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_token_option_is_sent_as_a_bearer_token(capsys, problem_file, recorder):
    code, out, err = _run(capsys, "solve", problem_file, "--url", recorder.url,
                          "--token", TOKEN)
    assert code == 1                      # the stub refuses every token: permanent
    assert recorder.authorizations == [f"Bearer {TOKEN}"]
    assert TOKEN not in out + err


def test_token_from_the_environment(capsys, problem_file, recorder, monkeypatch):
    monkeypatch.setenv("CERTIMATCH_TOKEN", TOKEN)
    _run(capsys, "solve", problem_file, "--url", recorder.url)
    assert recorder.authorizations == [f"Bearer {TOKEN}"]


def test_token_file_wins_over_the_environment(capsys, problem_file, recorder, tmp_path,
                                              monkeypatch):
    monkeypatch.setenv("CERTIMATCH_TOKEN", OTHER)
    path = _token_file(tmp_path, f"# the dispatch bot's token\n\n  {TOKEN}  \nignored\n")
    code, out, err = _run(capsys, "solve", problem_file, "--url", recorder.url,
                          "--token-file", path)
    assert code == 1
    assert recorder.authorizations == [f"Bearer {TOKEN}"]
    assert TOKEN not in out + err and OTHER not in out + err


def test_without_a_token_no_header_is_sent(capsys, problem_file, recorder):
    _run(capsys, "solve", problem_file, "--url", recorder.url)
    assert recorder.authorizations == [None]


def test_verify_sends_the_token_too(capsys, tmp_path, recorder):
    path = tmp_path / "both.json"
    path.write_text(json.dumps({**PROBLEM, "answer": {}}))
    code, _, _ = _run(capsys, "verify", str(path), "--url", recorder.url, "--token", TOKEN)
    assert code == 1
    assert recorder.authorizations == [f"Bearer {TOKEN}"]


def test_a_token_file_every_user_may_read_is_refused(capsys, problem_file, recorder,
                                                    tmp_path):
    path = _token_file(tmp_path, TOKEN, mode=0o644)
    code, _, err = _run(capsys, "solve", problem_file, "--url", recorder.url,
                        "--token-file", path)
    assert code == 1
    assert recorder.authorizations == []          # nothing was sent
    assert "can be read by every user (mode 644)" in err and "chmod 600" in err
    assert TOKEN not in err


def test_a_group_readable_token_file_is_accepted(tmp_path):
    assert read_token_file(_token_file(tmp_path, TOKEN, mode=0o640)).reveal() == TOKEN


@pytest.mark.parametrize(("text", "message"), [
    ("# only a comment\n\n", "holds no token"),
    ("two words\n", "not a usable bearer token"),
    (b"\xff\xfe".decode("latin-1"), "not a usable bearer token"),
])
def test_unusable_token_files_are_refused_without_showing_them(tmp_path, text, message):
    with pytest.raises(credentials.CliError) as caught:
        read_token_file(_token_file(tmp_path, text))
    assert message in str(caught.value)
    assert "two" not in str(caught.value)


def test_a_missing_token_file_names_the_file(capsys, problem_file, tmp_path):
    code, _, err = _run(capsys, "solve", problem_file, "--token-file",
                        str(tmp_path / "nope"))
    assert code == 1
    assert "cannot read --token-file" in err


def test_token_and_token_file_together_are_a_usage_error(capsys, problem_file, tmp_path):
    code, _, err = _run(capsys, "solve", problem_file, "--token", TOKEN, "--token-file",
                        _token_file(tmp_path, TOKEN))
    assert code == 1
    assert "not allowed with" in err
    assert TOKEN not in err


def test_a_token_with_a_line_break_is_refused_without_echo(capsys, problem_file):
    code, _, err = _run(capsys, "solve", problem_file, "--token", TOKEN + "\nX-Evil: 1")
    assert code == 1
    assert "not a usable bearer token" in err
    assert TOKEN not in err


@pytest.mark.parametrize("argv", [
    ["solve", "p.json", "--tokne", TOKEN],                 # misspelt: "unrecognized"
    ["solve", "p.json", f"--tokn={TOKEN}"],
    ["verify", "p.json", "--token", TOKEN, "--nonsense"],
    ["report", "p.json", "--token", TOKEN],                # report talks to no server
])
def test_usage_errors_never_echo_the_token(capsys, argv):
    code, out, err = _run(capsys, *argv)
    assert code == 1
    assert TOKEN not in out + err
    assert "<hidden>" in err or "unrecognized" in err


def test_redaction_replaces_every_value_given_to_a_token_option():
    argv = ["--token", "s3cret-value-one", "--tok=second-secret"]
    message = "unrecognized arguments: s3cret-value-one --tok=second-secret"
    assert redact_secrets(message, argv) == "unrecognized arguments: <hidden> --tok=<hidden>"


def test_secret_hides_itself_in_repr_str_and_format():
    secret = Secret(TOKEN)
    assert TOKEN not in repr(secret) + str(secret) + f"{secret}" + repr([secret])
    assert secret.reveal() == TOKEN


def test_help_shows_no_token_and_warns_about_ps(capsys, monkeypatch):
    monkeypatch.setenv("CERTIMATCH_TOKEN", TOKEN)
    code, out, _ = _run(capsys, "solve", "--help")
    assert code == 0
    assert TOKEN not in out
    assert "`ps`" in out and "--token-file" in out


def test_servers_started_by_the_command_do_not_get_the_client_token(monkeypatch):
    monkeypatch.setenv("CERTIMATCH_TOKEN", TOKEN)
    env = serve._child_env()
    assert "CERTIMATCH_TOKEN" not in env
    assert TOKEN not in " ".join(serve._gunicorn_argv(None, 9000, 1))
    assert os.environ["CERTIMATCH_TOKEN"] == TOKEN      # ours is left as it was


def test_local_needs_no_token_even_when_the_environment_configures_server_tokens(
        capsys, problem_file, monkeypatch):
    monkeypatch.setenv("CERTIMATCH_TOKENS", OTHER)
    code, out, _ = _run(capsys, "solve", problem_file, "--local")
    assert code == 0
    assert json.loads(out)["objective"] == 1
