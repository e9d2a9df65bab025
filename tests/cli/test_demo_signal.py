"""``certimatch demo`` and SIGTERM, in this process: the handler and its held moment.

The whole demo under SIGTERM, with a real gunicorn, is in tests/deploy/test_gunicorn.py.
"""

from __future__ import annotations

import signal

import pytest

from service.cli import demo


def test_sigterm_raises_inside_the_installed_handler_and_is_restored_after():
    before = signal.getsignal(signal.SIGTERM)
    with pytest.raises(demo._Terminated), demo._Sigterm().installed():
        signal.raise_signal(signal.SIGTERM)  # the handler runs before this returns
    assert signal.getsignal(signal.SIGTERM) == before


def test_sigterm_while_held_is_raised_on_release():
    sigterm = demo._Sigterm()
    sigterm.hold = True
    with sigterm.installed():
        signal.raise_signal(signal.SIGTERM)
        assert sigterm.pending                 # noted, not raised, while the server starts
        with pytest.raises(demo._Terminated):
            sigterm.release()


def test_a_second_sigterm_does_not_interrupt_the_stop():
    sigterm = demo._Sigterm()
    with sigterm.installed():
        with pytest.raises(demo._Terminated):
            sigterm.handler(signal.SIGTERM, None)
        assert signal.getsignal(signal.SIGTERM) == signal.SIG_IGN
