"""Interrupts (Ctrl-C, SIGTERM) and the phases of a run.

A run passes through phases (reading, compiling, sampling, summarising,
writing). :func:`guard` turns SIGINT and SIGTERM into a ``KeyboardInterrupt``
and *remembers* that a signal came, because some libraries catch the
interrupt themselves and carry on: nutpie returns the draws it has so far as
if sampling had finished, and a compiler may swallow it. :func:`checkpoint`,
called at every phase boundary, re-raises a remembered interrupt, so a
partial sample is never summarised or written. Inside :func:`deferred` (the
final move of a finished result into place) a signal is only remembered, so
an interrupt never leaves half a folder.

For tests, the environment variable ``BAYES_RR_PAUSE_AT=<phase>`` makes a run
print ``pausing at <phase>`` on stderr and sleep there, so a test can send a
signal at a phase it chooses; ``BAYES_RR_ANNOUNCE_PHASES=1`` prints
``phase: <phase>`` on stderr at the start of every phase.
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
import time
from collections.abc import Callable, Iterator

PHASES = ("reading", "compiling", "sampling", "summarising", "writing")
PAUSE_ENV = "BAYES_RR_PAUSE_AT"
ANNOUNCE_ENV = "BAYES_RR_ANNOUNCE_PHASES"
PAUSE_SECONDS = 60.0
INTERRUPT_EXIT_CODE = 130


class _State:
    received: int | None = None
    deferring: bool = False
    active: bool = False
    reporter: Callable[[str], None] | None = None


_state = _State()


def _handler(signum, frame) -> None:
    _state.received = signum
    if not _state.deferring:
        raise KeyboardInterrupt


@contextlib.contextmanager
def guard(reporter: Callable[[str], None] | None = None) -> Iterator[None]:
    """Handle SIGINT and SIGTERM as interrupts for the duration of a command.

    ``reporter`` receives one short line per phase (``"sampling ..."``).
    Only the main thread can install signal handlers; elsewhere (a worker
    thread, a notebook kernel's executor) the guard only tracks phases.
    """
    previous = {}
    main = _is_main_thread()
    if main:
        for sig in (signal.SIGINT, signal.SIGTERM):
            previous[sig] = signal.signal(sig, _handler)
    previous_hook = sys.unraisablehook
    sys.unraisablehook = _quiet_about_signals(previous_hook)
    _state.received, _state.active, _state.reporter = None, True, reporter
    try:
        yield
    finally:
        _state.active, _state.reporter = False, None
        sys.unraisablehook = previous_hook
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def _quiet_about_signals(previous_hook):
    """An unraisable-exception hook that drops the interrupt our handler raised where
    Python cannot raise (a garbage-collector callback of a library, a finaliser): it
    would print a traceback, and the signal is remembered anyway, so the next
    checkpoint acts on it. Anything else goes to ``previous_hook``."""

    def hook(unraisable) -> None:
        if isinstance(unraisable.exc_value, KeyboardInterrupt) and _state.received is not None:
            return
        previous_hook(unraisable)

    return hook


def _is_main_thread() -> bool:
    import threading

    return threading.current_thread() is threading.main_thread()


def interrupted() -> bool:
    """Whether a signal arrived since the guard was entered."""
    return _state.received is not None


def raise_if_interrupted() -> None:
    """Re-raise an interrupt that a library caught and swallowed (inside a guard only: a
    signal remembered by an earlier command of the same process is not this one's)."""
    if _state.active and _state.received is not None:
        raise KeyboardInterrupt


def checkpoint(phase: str, detail: str = "") -> None:
    """Mark the start of ``phase``: act on a pending interrupt, report, pause for tests."""
    if phase not in PHASES:
        raise ValueError(f"unknown phase {phase!r}; expected one of {PHASES}")
    raise_if_interrupted()
    if _state.reporter is not None:
        _state.reporter(f"{phase}{' ' + detail if detail else ''} ...")
    if os.environ.get(ANNOUNCE_ENV):
        sys.stderr.write(f"phase: {phase}\n")
        sys.stderr.flush()
    if os.environ.get(PAUSE_ENV) == phase:
        sys.stderr.write(f"pausing at {phase}\n")
        sys.stderr.flush()
        deadline = time.monotonic() + PAUSE_SECONDS
        while time.monotonic() < deadline:
            time.sleep(0.05)
            raise_if_interrupted()


@contextlib.contextmanager
def deferred() -> Iterator[None]:
    """A block that a signal does not cut short (moving a finished result into place).

    A signal received inside it stays pending: the next :func:`checkpoint` or
    :func:`raise_if_interrupted` acts on it.
    """
    was = _state.deferring
    _state.deferring = True
    try:
        yield
    finally:
        _state.deferring = was


class LateInterrupt(KeyboardInterrupt):
    """A signal arrived while a finished result was being moved into place: the result
    is complete (``args[0]`` is where it is), the run stops here."""
