"""Clean stops on Ctrl-C (SIGINT) and SIGTERM: keep every point, then write.

The command line installs :func:`catching_signals` around a run. The first
signal only *requests* a stop: from then on every call into the model raises
:class:`Interrupted`, which the continuation engine treats like any numerical
trouble at a point, so the curve ends at once with every accepted point kept
(no change to the engine loop is needed). A signal that arrives while the
model itself is computing (a slow Python rhs, say) interrupts that call
directly, so the stop takes effect within the current step. The runner then
skips what is left and marks the run ``interrupted``; the command line writes
what was computed and exits 128 + the signal number (130 for SIGINT, 143 for
SIGTERM). A second signal stops at once (KeyboardInterrupt), nothing written.
"""

from __future__ import annotations

import contextlib
import dataclasses
import math
import signal
import threading
import time
from collections.abc import Callable, Iterator
from typing import Any

from branchline.continuation.engine import ObservationFailed

# The model's callables that a stop request cuts off (every hot-path and
# normal-form derivative, and the observables).
WATCHED_CALLABLES = (
    "rhs",
    "jacobian",
    "parameter_jacobian",
    "derivatives",
    "second",
    "third",
    "jacobian_parameter_derivative",
    "observables",
)
HANDLED_SIGNALS = ("SIGINT", "SIGTERM")
# The "signal name" of a stop by the run's time limit.
TIME_LIMIT = "time limit"
# Model calls between two readings of the clock for the time limit: a call takes
# microseconds to seconds, so the limit is still seen within a fraction of a second
# of a fast model's run, and reading the clock at every call would cost a few per cent.
CLOCK_EVERY = 64


class Interrupted(ObservationFailed):
    """Raised inside model calls once a stop was requested (ends the curve there)."""


class StopRequest:
    """Whether a stop was requested, by which signal, and whether the model is running.

    With ``time_limit`` (seconds, the scan's ``time_limit``) the request is
    also made once that much wall-clock time has passed since it was created:
    checked at every model call, and by an alarm (SIGALRM, main thread only)
    under :func:`catching_signals`, so that a model call that never returns is
    cut off too. A stop by the time limit is not an interrupt: the runner
    reports it as a failure (exit 1) with the reason.
    """

    def __init__(self, time_limit: float | None = None) -> None:
        self.signal_name: str | None = None
        self.signal_number: int | None = None
        self.inside_model = 0
        self.time_limit = time_limit
        self.deadline = time.monotonic() + time_limit if time_limit is not None else math.inf
        self._countdown = 1

    @property
    def requested(self) -> bool:
        """True once a stop was requested (or the time limit has passed)."""
        if self.signal_name is None and time.monotonic() > self.deadline:
            self.request(TIME_LIMIT, int(getattr(signal, "SIGALRM", 14)))
        return self.signal_name is not None

    @property
    def by_time_limit(self) -> bool:
        """True when the stop came from the time limit, not from a signal."""
        return self.signal_name == TIME_LIMIT

    def request(self, name: str = "SIGINT", number: int = int(signal.SIGINT)) -> None:
        """Ask the run to stop (what the signal handler does; tests call it directly)."""
        self.signal_name, self.signal_number = name, number

    @property
    def reason(self) -> str:
        """Plain words for messages: 'interrupted (SIGINT)', or the time limit reached."""
        if self.by_time_limit:
            return f"the run's time limit of {self.time_limit:g} s was reached (time_limit)"
        return f"interrupted ({self.signal_name})"

    def raise_if_requested(self) -> None:
        """Raise :class:`Interrupted` if a stop was requested or the time is up
        (the clock is read every CLOCK_EVERY calls: this runs at every model call)."""
        if self.signal_name is None:
            self._countdown -= 1
            if self._countdown > 0:
                return
            self._countdown = CLOCK_EVERY
            if not self.requested:
                return
        raise Interrupted(self.reason)


def _watch(function: Callable | None, stop: StopRequest) -> Callable | None:
    if function is None:
        return None

    def call(*args: Any) -> Any:
        stop.raise_if_requested()
        stop.inside_model += 1
        try:
            return function(*args)
        finally:
            stop.inside_model -= 1

    return call


def watched_model(model: Any, stop: StopRequest) -> Any:
    """A copy of ``model`` whose callables raise :class:`Interrupted` once ``stop`` is requested."""
    changes = {
        name: _watch(getattr(model, name), stop)
        for name in WATCHED_CALLABLES
        if hasattr(model, name)
    }
    return dataclasses.replace(model, **changes)


@contextlib.contextmanager
def catching_signals(stop: StopRequest) -> Iterator[StopRequest]:
    """Turn SIGINT and SIGTERM into stop requests while the block runs.

    Only in the main thread (Python delivers signals there); elsewhere the
    block runs unchanged. The previous handlers are restored afterwards.
    """
    if threading.current_thread() is not threading.main_thread():
        yield stop
        return

    def handler(number: int, frame: Any) -> None:
        if stop.requested:
            raise KeyboardInterrupt  # a second signal: stop at once
        stop.request(signal.Signals(number).name, number)
        if stop.inside_model:
            raise Interrupted(stop.reason)

    def alarm(number: int, frame: Any) -> None:
        if stop.signal_name is not None:  # already stopping (not `requested`: the time is up)
            return
        stop.request(TIME_LIMIT, number)
        if stop.inside_model:  # a model call that does not return: cut it off
            raise Interrupted(stop.reason)

    previous = {}
    for name in HANDLED_SIGNALS:
        number = getattr(signal, name)
        previous[number] = signal.signal(number, handler)
    timed = stop.time_limit is not None and hasattr(signal, "setitimer")
    if timed:
        previous[signal.SIGALRM] = signal.signal(signal.SIGALRM, alarm)
        signal.setitimer(signal.ITIMER_REAL, max(stop.deadline - time.monotonic(), 1e-3))
    try:
        yield stop
    finally:
        if timed:
            signal.setitimer(signal.ITIMER_REAL, 0.0)
        for number, old in previous.items():
            signal.signal(number, old)
