"""Shared fixtures: one app per test, a test client, and JSON round trips that return data.

Every app and server a test session starts keeps its decision store in one temporary
folder (``CERTIMATCH_DATA_DIR``, set here before any app is built, kept by the cleaners
of tests/servers.py), removed when the session ends: never in ./certimatch-data.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from collections.abc import Callable
from dataclasses import fields
from pathlib import Path
from typing import Any

import pytest

from service.app import create_app
from service.settings import ENV_PREFIX, Settings

#: (status, parsed JSON body) of one request.
Reply = tuple[int, Any]

SESSION_DATA_DIR = tempfile.mkdtemp(prefix="certimatch-test-data-")
os.environ[ENV_PREFIX + "DATA_DIR"] = SESSION_DATA_DIR
_REPO_DATA_DIR = Path(__file__).resolve().parents[1] / "certimatch-data"
_REPO_DATA_DIR_BEFORE = _REPO_DATA_DIR.exists()


def pytest_sessionfinish(session: pytest.Session, exitstatus: int) -> None:
    shutil.rmtree(SESSION_DATA_DIR, ignore_errors=True)
    if _REPO_DATA_DIR.exists() and not _REPO_DATA_DIR_BEFORE:
        # A test built an app without the session's store: it wrote into the checkout.
        session.exitstatus = pytest.ExitCode.TESTS_FAILED
        print(f"\nFAILED: a test wrote the decision store into {_REPO_DATA_DIR}; build apps "
              "with the session's CERTIMATCH_DATA_DIR (tests/conftest.py)")


@pytest.fixture
def app(monkeypatch: pytest.MonkeyPatch):
    # A CERTIMATCH_* variable left in the shell would silently change the limits under test.
    for f in fields(Settings):
        if f.name != "data_dir":        # the session's temporary store (see below)
            monkeypatch.delenv(ENV_PREFIX + f.name.upper(), raising=False)
    return create_app({"TESTING": True})


@pytest.fixture
def client(app):
    return app.test_client()


def _post(client: Any, path: str, body: Any) -> Reply:
    """POST ``body`` as application/json; the status and the parsed answer."""
    # The standard library writes integers of any size, which bad-input tests need.
    resp = client.post(path, data=json.dumps(body), content_type="application/json")
    return resp.status_code, json.loads(resp.data)


@pytest.fixture
def post_json(client) -> Callable[[str, Any], Reply]:
    """``post_json(path, body) -> (status, json)`` with the test client."""
    return lambda path, body: _post(client, path, body)


@pytest.fixture
def solve(client) -> Callable[[dict[str, Any]], Reply]:
    """``solve(problem) -> (status, json)`` against POST /v1/solve."""
    return lambda problem: _post(client, "/v1/solve", problem)


@pytest.fixture
def verify(client) -> Callable[[dict[str, Any], dict[str, Any]], Reply]:
    """``verify(problem, answer) -> (status, json)`` against POST /v1/verify."""
    return lambda problem, answer: _post(client, "/v1/verify", {**problem, "answer": answer})


@pytest.fixture
def objective_off_by_one(monkeypatch: pytest.MonkeyPatch) -> None:
    """A bug after solving, simulated: every answer built reports its objective plus one,
    which the self-check must catch (a certificate failure, 500)."""
    import service.solve.pipeline

    build = service.solve.pipeline.build_answer

    def off_by_one(*args: Any, **kwargs: Any) -> dict[str, Any]:
        answer = build(*args, **kwargs)
        answer["objective"] += 1
        return answer

    monkeypatch.setattr(service.solve.pipeline, "build_answer", off_by_one)
