"""Our own progress line for a fit while it samples: elapsed time, iterations, time left.

:class:`SamplingProgress` counts sampler iterations (warm-up and draws, all chains) and
writes one line to standard error: updated in place on a terminal (at most a few times a
second), or a new line every :data:`LINE_EVERY_S` seconds elsewhere (a log file, a
notebook's captured stderr), plus a closing line; a fit shorter than that adds nothing to a
log. The samplers' own progress bars are
switched off; :mod:`bayeszi.model.sample` feeds this display from PyMC's per-draw callback
or nutpie's progress callback.

The estimate of the time left assumes the remaining iterations run at the average pace so
far. Early warm-up is usually the slowest part, so the estimate tends to fall as the fit
goes on; it is a guide, not a promise.

Example
-------
>>> import io
>>> buf = io.StringIO()
>>> p = SamplingProgress(4000, "nutpie, 2 chains", stream=buf,
...                      clock=iter([0, 30, 50]).__next__)
>>> p.update(1000); p.close()
>>> print(buf.getvalue(), end="")
sampling (nutpie, 2 chains): 1,000 of 4,000 iterations, 0m30s elapsed, about 1m30s left
sampling (nutpie, 2 chains): 1,000 of 4,000 iterations, 0m50s elapsed, about 2m30s left
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import IO

#: without a terminal, one progress line at most this often (seconds)
LINE_EVERY_S = 30.0
#: on a terminal, redraw the line at most this often (seconds)
REDRAW_EVERY_S = 0.5


def clock_text(seconds: float) -> str:
    """``seconds`` as ``"1h02m"``, ``"4m05s"`` or ``"0m09s"``.

    Example
    -------
    >>> clock_text(245), clock_text(3725)
    ('4m05s', '1h02m')
    """
    s = max(0, int(round(seconds)))
    if s >= 3600:
        return f"{s // 3600}h{(s % 3600) // 60:02d}m"
    return f"{s // 60}m{s % 60:02d}s"


class SamplingProgress:
    """A progress line for ``total`` sampler iterations (warm-up + draws, all chains).

    ``label`` names the sampler and chains; ``stream`` defaults to standard error;
    ``clock`` (seconds) is replaceable for tests. Call :meth:`update` with the iterations
    done so far (and divergences, when known) and :meth:`close` at the end.

    Example
    -------
    >>> import io
    >>> buf = io.StringIO()
    >>> p = SamplingProgress(10, "pymc", stream=buf, clock=iter([0, 31, 40, 41]).__next__)
    >>> p.update(5); p.update(10); p.close()
    >>> buf.getvalue().splitlines()[-1]
    'sampling (pymc): 10 of 10 iterations, done in 0m41s'
    """

    def __init__(self, total: int, label: str, stream: IO[str] | None = None,
                 clock: Callable[[], float] = time.perf_counter) -> None:
        self.total = max(1, int(total))
        self.label = label
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.clock = clock
        self.t0 = clock()
        self.done = 0
        self.divergences = 0
        # on a terminal the line shows at once; elsewhere the first after LINE_EVERY_S
        self.last_shown = -float("inf") if self.tty else self.t0
        self.shown = False
        self.closed = False

    def text(self, now: float) -> str:
        """The progress line at time ``now`` (no newline)."""
        elapsed = now - self.t0
        head = f"sampling ({self.label}): {self.done:,} of {self.total:,} iterations"
        div = f", {self.divergences:,} divergent" if self.divergences else ""
        if self.done >= self.total:
            return f"{head}{div}, done in {clock_text(elapsed)}"
        left = ""
        if self.done > 0 and elapsed > 0:
            left = f", about {clock_text(elapsed * (self.total - self.done) / self.done)} left"
        return f"{head}{div}, {clock_text(elapsed)} elapsed{left}"

    def update(self, done: int, divergences: int | None = None) -> None:
        """Record ``done`` iterations so far; show the line when it is time to."""
        if self.closed:
            return
        self.done = min(int(done), self.total)
        if divergences is not None:
            self.divergences = int(divergences)
        now = self.clock()
        wait = REDRAW_EVERY_S if self.tty else LINE_EVERY_S
        if now - self.last_shown >= wait:
            self._show(self.text(now))
            self.last_shown = now

    def close(self, early: str | None = None) -> None:
        """Show the closing line (once; without a terminal only after earlier lines, so a
        short fit adds nothing to a log). ``early`` says why sampling stopped before the
        planned iterations (e.g. ``"enough draws"``); the line then says so.

        >>> import io
        >>> buf = io.StringIO()
        >>> p = SamplingProgress(100, "pymc", stream=buf, clock=iter([0, 31, 40]).__next__)
        >>> p.update(60); p.close("enough draws")
        >>> buf.getvalue().splitlines()[-1]
        'sampling (pymc): 60 iterations, stopped early (enough draws), done in 0m40s'
        """
        if self.closed:
            return
        self.closed = True
        if not (self.tty or self.shown):
            return
        now = self.clock()
        if early and self.done < self.total:
            self._show(f"sampling ({self.label}): {self.done:,} iterations, stopped early "
                       f"({early}), done in {clock_text(now - self.t0)}")
        else:
            self._show(self.text(now))
        if self.tty:
            self.stream.write("\n")
            self.stream.flush()

    def _show(self, line: str) -> None:
        self.shown = True
        if self.tty:
            self.stream.write("\r" + line + "\x1b[K")
        else:
            self.stream.write(line + "\n")
        self.stream.flush()
