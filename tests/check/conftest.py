"""The exact-verification tests' client: one app per module, with no setting left in the
shell (``CERTIMATCH_*``) but the session's temporary store."""

from __future__ import annotations

import os
from collections.abc import Iterator
from typing import Any

import pytest
from servers import shell_setting

from service.app import create_app


@pytest.fixture(scope="module")
def client() -> Iterator[Any]:
    with pytest.MonkeyPatch.context() as mp:
        for name in list(os.environ):
            if shell_setting(name):
                mp.delenv(name)
        yield create_app({"TESTING": True}).test_client()
