"""Progress of long work, as counts and an estimate of the time left.

One line at a time (never a carriage-return bar), so it reads the same on a terminal, in a
log file and in CI: a line when work starts, then at most one every ``every`` seconds, and one
at the end.
"""

from __future__ import annotations

import sys
import threading
import time
from contextlib import contextmanager
from contextvars import ContextVar

#: Settings of the progress reporting in force (None: long steps report nothing).
_ACTIVE = ContextVar("corealign_progress", default=None)


@contextmanager
def reporting(stream=None, every=5.0):
    """Within this block, long steps of the library report their progress (the CLI turns it
    on; a library caller may too). Outside it they are silent."""
    token = _ACTIVE.set({"stream": stream, "every": every})
    try:
        yield
    finally:
        _ACTIVE.reset(token)


def steps(what, total, unit="steps"):
    """A started :class:`Progress` of ``total`` steps when reporting is on, else None."""
    settings = _ACTIVE.get()
    if settings is None:
        return None
    progress = Progress(what, unit=unit, **settings)
    progress.begin(total)
    return progress


class Progress:
    """Counts finished steps of a known total and reports them on a stream.

    Parameters
    ----------
    what : str
        What is being done ("survey").
    unit : str
        What a step is ("pairs").
    stream : file, optional
        Where lines go (default: ``sys.stderr`` at the time of writing).
    every : float
        Seconds between two lines (the first and last lines are always written).
    """

    def __init__(self, what, *, unit="steps", stream=None, every=5.0, clock=time.monotonic):
        self.what, self.unit, self.stream, self.every, self.clock = (what, unit, stream, every,
                                                                     clock)
        self.total = self.done = 0
        self.start = self.last = None
        self._lock = threading.Lock()

    def begin(self, total):
        """Start counting ``total`` steps."""
        with self._lock:
            self.total, self.done = int(total), 0
            self.start = self.last = self.clock()
            self._write(f"{self.what}: {self.total} {self.unit} to do")

    def step(self, n=1):
        """``n`` more steps are done (thread-safe)."""
        with self._lock:
            self.done += n
            now = self.clock()
            if self.done >= self.total or now - self.last >= self.every:
                self.last = now
                self._write(self.line(now))

    def line(self, now):
        """The progress line at time ``now``."""
        elapsed = now - self.start
        text = f"{self.what}: {self.done}/{self.total} {self.unit}, {elapsed:.0f} s elapsed"
        if 0 < self.done < self.total:
            left = elapsed / self.done * (self.total - self.done)
            text += f", about {left:.0f} s left"
        return text

    def _write(self, text):
        print(f"corealign: {text}", file=self.stream or sys.stderr, flush=True)
