"""Stopping long numerical kernels cleanly on SIGINT (Ctrl-C) and SIGTERM.

A compiled kernel (numba) cannot be interrupted from Python: a Python signal handler runs only
between bytecodes, so a handler that raises while a kernel holds the main thread either waits for
the whole kernel or surfaces as a ``SystemError`` from the dispatcher. Long kernels therefore run
in short pieces (well under a second each) inside :func:`interruptible`:

    with interruptible() as stopped:
        for piece in pieces:
            kernel(piece)
            if stopped():
                break
    # leaving the block delivers the recorded signal (KeyboardInterrupt, or the SIGTERM handler)

Inside the block SIGINT and SIGTERM are only recorded; the loop sees ``stopped()`` after the
current piece and leaves; on leaving the block the first recorded signal goes to the handler that
was installed before (so the command line exits 130 / 143 as usual). The recorded signal also sets
a process-wide stop flag that pieces running on other threads (the threads of an ensemble) poll,
and that the command line sets on its way out (:func:`request_stop`), so no worker thread keeps a
dying process alive.
"""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Callable, Iterator

__all__ = ["interruptible", "request_stop", "stop_requested", "KernelStopped", "PIECE_SECONDS"]

#: Target wall time of one piece of a long kernel [s]: a signal is answered within about this.
PIECE_SECONDS = 0.25

_STOP = threading.Event()


class KernelStopped(KeyboardInterrupt):
    """A kernel running on a worker thread stopped because the process is being interrupted."""


def request_stop() -> None:
    """Ask every kernel running in pieces, on any thread, to stop after its current piece."""
    _STOP.set()


def stop_requested() -> bool:
    """True once :func:`request_stop` was called or a signal was recorded by :func:`interruptible`."""
    return _STOP.is_set()


@contextlib.contextmanager
def interruptible(signums: tuple[int, ...] = (signal.SIGINT, signal.SIGTERM)) -> Iterator[Callable[[], bool]]:
    """Run a kernel in pieces: yields ``stopped()``, true once SIGINT/SIGTERM arrived.

    In the main thread the signals are recorded while the block runs and delivered to the
    previous handlers when it ends (a signal that was ignored stays ignored). On other threads
    no handler can be installed; ``stopped()`` then reports the process-wide stop flag, and the
    caller raises :class:`KernelStopped`.
    """
    if threading.current_thread() is not threading.main_thread():
        yield stop_requested
        return
    _STOP.clear()  # a new kernel of the main thread: an earlier, handled stop is over
    got: list[int] = []
    old = {s: signal.getsignal(s) for s in signums}

    def _record(signum, frame):  # noqa: ARG001
        if old.get(signum) is signal.SIG_IGN:
            return
        got.append(signum)
        _STOP.set()

    for s in signums:
        signal.signal(s, _record)
    try:
        yield lambda: bool(got) or _STOP.is_set()
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if got:
            s, h = got[0], old[got[0]]
            if callable(h):
                h(s, None)
            elif h == signal.SIG_DFL:
                signal.raise_signal(s)
