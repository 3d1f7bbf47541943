"""Kernels in pieces stop cleanly on a signal (io/interrupts.py).

POSIX/Python facts used: ``signal.raise_signal`` delivers the signal to the calling process and
Python runs its handler in the main thread before the next bytecode (Python docs, ``signal``,
"Execution of Python signal handlers"); SIG_IGN means the signal is discarded.
"""

from __future__ import annotations

import signal
import threading

import pytest

from tsunamifocus.io import interrupts as I


def test_signal_is_recorded_in_the_block_and_delivered_after():
    steps = []
    with pytest.raises(KeyboardInterrupt), I.interruptible() as stopped:
        for k in range(100):
            steps.append(k)
            if k == 3:
                signal.raise_signal(signal.SIGINT)  # no exception here: only recorded
            if stopped():
                break
    assert steps == [0, 1, 2, 3]  # stopped right after the piece that saw the signal
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler  # handler restored


def test_ignored_signal_stays_ignored():
    old = signal.signal(signal.SIGTERM, signal.SIG_IGN)
    try:
        with I.interruptible() as stopped:
            signal.raise_signal(signal.SIGTERM)
            assert not stopped()
    finally:
        signal.signal(signal.SIGTERM, old)


def test_worker_threads_see_the_process_wide_stop():
    I._STOP.clear()
    seen = []

    def worker():
        with I.interruptible() as stopped:  # no handler off the main thread: the flag is polled
            seen.append(stopped())
            I.request_stop()
            seen.append(stopped())

    t = threading.Thread(target=worker)
    t.start()
    t.join()
    assert seen == [False, True]
    with I.interruptible() as stopped:  # a new kernel of the main thread starts afresh
        assert not stopped()
