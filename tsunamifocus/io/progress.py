"""Progress bars on stderr that behave in logs: a tqdm bar on a terminal, a few plain lines otherwise.

A redrawn bar written to a file or pipe leaves hundreds of carriage-return updates in the log.
:func:`progress_bar` therefore draws tqdm only when the stream is a terminal and otherwise
prints at most :data:`PLAIN_LINES` plain lines (start, every quarter, done).
"""

from __future__ import annotations

import sys
import time
from typing import Any, TextIO

__all__ = ["PLAIN_LINES", "progress_bar"]

#: Most lines a bar writes to a stream that is not a terminal.
PLAIN_LINES = 5


def _is_terminal(stream: Any) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError, OSError):
        return False


class _PlainBar:
    """tqdm-like object (``update``, ``close``, context manager) printing a few plain lines."""

    def __init__(self, total: int, desc: str, unit: str, file: TextIO) -> None:
        self.total = max(int(total), 0)
        self.desc, self.unit, self.file = desc, unit, file
        self.n = 0
        self.t0 = time.perf_counter()
        self._next_quarter = 1
        self._closed = False
        self._postfix = ""
        # "2/6 members", "1/1 member": the count is of the total
        self._units = unit if self.total == 1 or unit.endswith("s") else unit + "s"
        self._say(f"{desc}: 0/{self.total} {self._units}")

    def _say(self, text: str) -> None:
        print(text, file=self.file, flush=True)

    def update(self, k: int = 1) -> None:
        self.n += int(k)
        if self.total <= 0:
            return
        if self._next_quarter <= 3 and self.n * 4 >= self._next_quarter * self.total:
            while self._next_quarter <= 3 and self.n * 4 >= self._next_quarter * self.total:
                self._next_quarter += 1  # one line per update, however many quarters it crossed
            dt = time.perf_counter() - self.t0
            done = min(self.n, self.total)
            self._say(f"{self.desc}: {done}/{self.total} {self._units} "
                      f"({100 * done // self.total} %, {dt:.0f} s){self._postfix}")

    def set_postfix(self, **kw: Any) -> None:
        """Remember ``key=value`` notes (tqdm's postfix) for the next line printed."""
        self._postfix = " (" + ", ".join(f"{k}={v}" for k, v in kw.items()) + ")" if kw else ""

    def set_postfix_str(self, *_a: Any, **_k: Any) -> None:
        """Accepted for tqdm compatibility; nothing is printed."""

    def refresh(self) -> None:
        """Accepted for tqdm compatibility."""

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        dt = time.perf_counter() - self.t0
        self._say(f"{self.desc}: done, {self.n}/{self.total} {self._units} in {dt:.0f} s{self._postfix}")

    def __enter__(self) -> _PlainBar:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


def progress_bar(total: int, desc: str, unit: str = "it", file: TextIO | None = None, **tqdm_kwargs: Any):
    """A tqdm bar on a terminal, else a plain reporter writing at most :data:`PLAIN_LINES` lines.

    Parameters
    ----------
    total : int
        Number of steps.
    desc, unit : str
        Label and unit of the steps.
    file : text stream, optional
        Where to write (default ``sys.stderr``).
    **tqdm_kwargs
        Passed to tqdm on a terminal.
    """
    stream = sys.stderr if file is None else file
    if _is_terminal(stream):
        from tqdm import tqdm

        return tqdm(total=total, desc=desc, unit=unit, file=stream, **tqdm_kwargs)
    return _PlainBar(total, desc, unit, stream)
