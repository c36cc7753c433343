"""Ending a run on SIGTERM the way Ctrl-C ends it, so that no half-written output survives.

Python turns SIGINT into :class:`KeyboardInterrupt` but lets SIGTERM kill the process at once,
which would skip every ``finally`` and leave a staging folder behind. While
:func:`signals_as_exceptions` is active, SIGTERM raises :class:`Terminated` in the main thread
instead, so the same cleanup runs for both. The exit statuses follow the shell's convention of
128 + the signal number (130 for SIGINT, 143 for SIGTERM; POSIX ``wait`` / bash "EXIT STATUS").

Once the first signal has been turned into an exception, further SIGINT / SIGTERM are ignored
until the context ends, so a second Ctrl-C cannot cut the cleanup short.

Examples
--------
>>> exit_status(KeyboardInterrupt())
130
>>> exit_status(Terminated(15))
143
"""

from __future__ import annotations

import contextlib
import signal
import threading

__all__ = ["Terminated", "exit_status", "signals_as_exceptions", "signals_deferred"]

_HANDLED = (signal.SIGINT, signal.SIGTERM)
# Set by signals_deferred: a signal arriving meanwhile is kept in "pending" and raised after.
_state = {"deferring": False, "pending": None}


class Terminated(BaseException):
    """The process received SIGTERM.

    A :class:`BaseException`, like :class:`KeyboardInterrupt`, so that ``except Exception``
    in library code does not swallow it while cleanup (``finally``, ``except BaseException``)
    still runs. ``args[0]`` is the signal number.
    """

    @property
    def signum(self):
        return self.args[0] if self.args else signal.SIGTERM


def exit_status(interruption):
    """Exit status for an interruption: 128 + the signal number (130 SIGINT, 143 SIGTERM)."""
    if isinstance(interruption, Terminated):
        return 128 + int(interruption.signum)
    return 128 + int(signal.SIGINT)


def _ignore_further():
    for signum in _HANDLED:
        signal.signal(signum, signal.SIG_IGN)


def _on_signal(signum, frame):
    if _state["deferring"]:
        _state["pending"] = _state["pending"] or signum
        return
    _ignore_further()
    _raise_for(signum)


def _raise_for(signum):
    if signum == signal.SIGINT:
        raise KeyboardInterrupt
    raise Terminated(signum)


@contextlib.contextmanager
def signals_as_exceptions():
    """SIGINT raises :class:`KeyboardInterrupt`, SIGTERM :class:`Terminated`, inside the block.

    Outside the main thread (where Python cannot install handlers) this does nothing. The
    previous handlers are restored on leaving.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {signum: signal.getsignal(signum) for signum in _HANDLED}
    _state["pending"] = None
    for signum in _HANDLED:
        signal.signal(signum, _on_signal)
    try:
        yield
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler)


@contextlib.contextmanager
def signals_deferred():
    """Hold SIGINT and SIGTERM back during a short step that must not be cut in two.

    Used around the renames that put a finished output folder in place: a signal arriving
    then is raised (as under :func:`signals_as_exceptions`) when the block ends, after the
    folder is complete. Only has an effect inside :func:`signals_as_exceptions`.
    """
    outer = _state["deferring"]
    _state["deferring"] = True
    try:
        yield
    finally:
        _state["deferring"] = outer
    pending = _state["pending"]
    if pending and not outer:
        _state["pending"] = None
        _ignore_further()
        _raise_for(pending)
