"""Progress of the long steps of a run on standard error: a bar on a terminal, lines in a log.

On an interactive terminal a tqdm bar counts the steps (or pieces, or chunks) and names the one
running; when standard error is a file or a pipe (a log, a CI job) each step prints one line
when it starts and one with its duration when it ends, so logs stay readable. ``quiet`` prints
nothing; the command line sets it with ``--quiet`` and whenever the ``CI`` environment variable
is set. Standard output stays free for machine-readable output (``--json``).
"""

from __future__ import annotations

import sys
import time
from contextlib import contextmanager

__all__ = ["Progress", "no_step"]


def _is_terminal(stream) -> bool:
    isatty = getattr(stream, "isatty", None)
    try:
        return bool(isatty and isatty())
    except (OSError, ValueError):  # closed or detached stream
        return False


class Progress:
    """Report the long steps of a run.

    Parameters
    ----------
    total : int
        Number of steps announced (shown as ``[k/total]`` or as the bar's length).
    quiet : bool
        Print nothing.
    stream : file-like
        Where to write (standard error by default, so standard output stays machine-readable).
    label : str
        Prefix of every line, or the bar's description.
    bar : bool, optional
        Force the bar (True) or the lines (False); by default a bar exactly when ``stream`` is
        a terminal.

    Attributes
    ----------
    timings_s : dict
        Seconds spent in each finished step, by step name (recorded even when quiet).
    """

    def __init__(self, total: int, *, quiet: bool = False, stream=None, label: str = "ctpore",
                 bar: bool | None = None):
        self.total = total
        self.quiet = quiet
        self.stream = stream if stream is not None else sys.stderr
        self.label = label
        self.done = 0
        self.timings_s: dict[str, float] = {}
        self.bar = (not quiet) and (_is_terminal(self.stream) if bar is None else bool(bar))
        self._tqdm = None

    def _bar(self):
        if self._tqdm is None:
            from tqdm import tqdm

            self._tqdm = tqdm(total=self.total, desc=self.label, file=self.stream, leave=True,
                              unit="step", dynamic_ncols=True,
                              bar_format="{desc}: {n_fmt}/{total_fmt} |{bar}| {elapsed}"
                                         "{postfix}")
        return self._tqdm

    @contextmanager
    def step(self, name: str):
        """Time one step and report it."""
        self.done += 1
        if self.bar:
            self._bar().set_postfix_str(name, refresh=True)
        elif not self.quiet:
            print(f"{self.label}: [{self.done}/{self.total}] {name} ...", file=self.stream,
                  flush=True)
        start = time.perf_counter()
        try:
            yield
        finally:
            elapsed = time.perf_counter() - start
            self.timings_s[name] = elapsed
            if self.bar:
                bar = self._bar()
                bar.update(1)
                if self.done >= self.total:
                    self.close()
            elif not self.quiet:
                print(f"{self.label}: [{self.done}/{self.total}] {name} done in {elapsed:.1f} s",
                      file=self.stream, flush=True)

    def advance(self, message: str) -> None:
        """Count one unit of work done outside :meth:`step` (a batch piece, a chunk)."""
        self.done += 1
        if self.bar:
            bar = self._bar()
            bar.set_postfix_str(message, refresh=False)
            bar.update(1)
            if self.done >= self.total:
                self.close()
        elif not self.quiet:
            print(f"{self.label}: [{self.done}/{self.total}] {message}", file=self.stream,
                  flush=True)

    def close(self) -> None:
        """Finish the bar (a no-op in line mode)."""
        if self._tqdm is not None:
            self._tqdm.close()
            self._tqdm = None


@contextmanager
def no_step(name: str):
    """A step reporter that reports nothing (for functions called without progress)."""
    yield
