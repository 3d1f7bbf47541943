"""Tests of tsunamifocus.io.progress: bars on a terminal, a few plain lines in a redirected log.

Reference: a terminal is what ``isatty()`` says (Python io, POSIX isatty); a redrawn bar writes
carriage returns, which a log file shows as one endless line (common practice, no source).
"""

from __future__ import annotations

import io

from tsunamifocus.io.progress import PLAIN_LINES, progress_bar
from tsunamifocus.propagation import wave


class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_redirected_stream_gets_a_few_plain_lines():
    buf = io.StringIO()
    bar = progress_bar(1000, "wave solver", unit="step", file=buf)
    for _ in range(1000):
        bar.update(1)
    bar.close()
    text = buf.getvalue()
    assert "\r" not in text
    lines = text.strip().splitlines()
    assert 2 <= len(lines) <= PLAIN_LINES and lines[-1].startswith("wave solver: done, 1000/1000 steps")
    assert "250/1000 steps (25 %" in text
    # the percentage printed is the fraction done (2 of 6 is 33 %), one line per update
    buf = io.StringIO()
    bar = progress_bar(6, "members", unit="member", file=buf)
    bar.update(2)
    bar.update(3)
    bar.close()
    assert len(buf.getvalue().splitlines()) == 4  # start, two updates, done
    assert "2/6 members (33 %" in buf.getvalue() and "5/6 members (83 %" in buf.getvalue()


def test_terminal_gets_a_redrawn_bar():
    buf = _Tty()
    with progress_bar(50, "members", unit="member", file=buf) as bar:
        for _ in range(50):
            bar.update(1)
    assert "\r" in buf.getvalue() and "50/50" in buf.getvalue()


def test_wave_solver_bar_in_a_captured_stderr(capsys):
    # pytest's captured stderr is not a terminal, like a log file of `tsunamifocus check 2> log`
    cb, bar = wave._progress(True, 2000)
    for step in range(0, 2001, 20):
        cb(step, 2000)
    bar.close()
    err = capsys.readouterr().err
    assert "\r" not in err and len(err.strip().splitlines()) <= PLAIN_LINES


def test_plain_lines_count_one_step_in_the_singular():
    # common practice, no source: "1/1 member", "0/2 members"
    buf = io.StringIO()
    with progress_bar(1, "members", unit="member", file=buf) as bar:
        bar.update(1)
    assert "done, 1/1 member in" in buf.getvalue() and "members in" not in buf.getvalue()
