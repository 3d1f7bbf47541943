"""Progress reporting of studies: stage messages of a run, member counts of an ensemble."""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import Any

from ..io.progress import progress_bar

__all__ = ["StageProgress", "MemberProgress"]


class StageProgress:
    """Stage messages on stderr (suppressed when quiet)."""

    def __init__(self, enabled: bool = True) -> None:
        self.enabled = enabled
        self.t0 = time.perf_counter()
        self.timings: dict[str, float] = {}
        self._stage: str | None = None
        self._ts = 0.0

    def start(self, stage: str, what: str) -> None:
        self._stage, self._ts = stage, time.perf_counter()
        if self.enabled:
            print(f"[{time.perf_counter() - self.t0:7.1f} s] {what} ...", file=sys.stderr, flush=True)

    def done(self, note: str = "") -> None:
        dt = time.perf_counter() - self._ts
        if self._stage:
            self.timings[self._stage] = self.timings.get(self._stage, 0.0) + dt
        if self.enabled and note:
            print(f"            {note} ({dt:.1f} s)", file=sys.stderr, flush=True)


class MemberProgress:
    """Ensemble members done and failed: a tqdm bar on stderr (``progress=True``) or a callback
    ``progress(done, total, elapsed_s, eta_s)``."""

    def __init__(self, total: int, progress: bool | Callable[..., Any] | None, label: str) -> None:
        self.total = total
        self.done = 0
        self.failed = 0
        self.t0 = time.perf_counter()
        self.cb = progress if callable(progress) else None
        self.bar = None
        if progress is True:  # a bar on a terminal, a few plain lines in a log
            self.bar = progress_bar(total, label, unit="member", file=sys.stderr, dynamic_ncols=True)

    def update(self, failed: bool = False) -> None:
        self.done += 1
        self.failed += int(failed)
        if self.bar is not None:
            self.bar.update(1)
            if self.failed:
                self.bar.set_postfix(failed=self.failed)
        if self.cb is not None:
            elapsed = time.perf_counter() - self.t0
            eta = elapsed / self.done * (self.total - self.done) if self.done else None
            self.cb(self.done, self.total, elapsed, eta)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
