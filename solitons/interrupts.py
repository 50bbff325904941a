"""Ctrl-C (SIGINT) and SIGTERM during a run: stop at the next step boundary, keep the state.

The command installs `handling()` around its work.  Outside a relaxation a signal raises
`Interrupted` at once (nothing is lost).  Inside one (`deferred()`), the handler only
records the signal; the minimiser looks at `requested()` after each accepted step, writes
a checkpoint with its full state and returns with the status ``interrupted``; the driver
then raises `Interrupted`.  Raising from the handler in the middle of a step is what lost
signals (a handler that fires while compiled code holds the thread runs only when that
code returns) and crashed at exit (an exception thrown across a half-finished step).  A
second signal while one is pending raises at once: the user insists.

Exit status of the command: 128 + signal number (130 for SIGINT, 143 for SIGTERM), the
shell's convention for a process ended by a signal.
"""

from __future__ import annotations

import contextlib
import signal
import threading

SIGNAL_NAMES = {signal.SIGINT: "SIGINT (Ctrl-C)", signal.SIGTERM: "SIGTERM"}

_pending: list[int] = []
_deferring = [0]


class Interrupted(BaseException):
    """A run stopped by a signal; ``checkpoint`` is the file holding its state (or None)."""

    def __init__(self, signum: int, checkpoint=None, step: int | None = None):
        self.signum = int(signum)
        self.checkpoint = checkpoint
        self.step = step
        super().__init__(SIGNAL_NAMES.get(self.signum, f"signal {self.signum}"))

    @property
    def exit_code(self) -> int:
        return 128 + self.signum


def _handler(signum, _frame):
    if _deferring[0] and not _pending:
        _pending.append(signum)
        return
    _pending.clear()
    raise Interrupted(signum)


def requested() -> int | None:
    """The signal waiting to stop the current relaxation, or None."""
    return _pending[0] if _pending else None


def stop_requested() -> bool:
    """Whether a signal is waiting: the ``should_stop`` poll handed to the minimisers."""
    return bool(_pending)


def check() -> None:
    """Raise `Interrupted` if a signal is waiting."""
    if _pending:
        raise Interrupted(_pending.pop(0))


def clear() -> None:
    _pending.clear()


@contextlib.contextmanager
def deferred():
    """While inside, a first signal is only recorded (see the module docstring)."""
    _deferring[0] += 1
    try:
        yield
    finally:
        _deferring[0] -= 1


@contextlib.contextmanager
def handling():
    """Install the handler for SIGINT and SIGTERM (main thread only; elsewhere, such as
    in a worker thread of a scheduler, nothing is installed) and restore the previous
    handlers on exit."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {s: signal.signal(s, _handler) for s in SIGNAL_NAMES}
    _pending.clear()
    try:
        from solitons import EARLY_SIGNALS  # a signal during the import of jax

        if EARLY_SIGNALS:
            raise Interrupted(EARLY_SIGNALS.pop(0))
        yield
    finally:
        for s, h in previous.items():
            signal.signal(s, h)
        _pending.clear()
