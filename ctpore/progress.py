"""Stage-by-stage progress on standard error, silent when asked to be quiet."""

from __future__ import annotations

import sys
import time
from contextlib import contextmanager

__all__ = ["Progress", "no_step"]


class Progress:
    """Report the long steps of a run, one line each with its duration.

    Parameters
    ----------
    total : int
        Number of steps announced (shown as ``[k/total]``).
    quiet : bool
        Print nothing.
    stream : file-like
        Where to write (standard error by default, so standard output stays machine-readable).
    """

    def __init__(self, total: int, *, quiet: bool = False, stream=None, label: str = "ctpore"):
        self.total = total
        self.quiet = quiet
        self.stream = stream if stream is not None else sys.stderr
        self.label = label
        self.done = 0
        self.timings_s: dict[str, float] = {}

    @contextmanager
    def step(self, name: str):
        """Time one step and print it when it ends."""
        self.done += 1
        if not self.quiet:
            print(f"{self.label}: [{self.done}/{self.total}] {name} ...", file=self.stream,
                  flush=True)
        start = time.perf_counter()
        yield
        elapsed = time.perf_counter() - start
        self.timings_s[name] = elapsed
        if not self.quiet:
            print(f"{self.label}: [{self.done}/{self.total}] {name} done in {elapsed:.1f} s",
                  file=self.stream, flush=True)


@contextmanager
def no_step(name: str):
    """A step reporter that reports nothing (for functions called without progress)."""
    yield
