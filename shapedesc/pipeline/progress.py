"""Progress display of a study run: a bar on a terminal, plain log lines otherwise.

Used by the command line (the library itself only calls the ``progress`` callback of
:func:`shapedesc.pipeline.run.run_study`).
"""

from __future__ import annotations

import logging
import sys
import time

from shapedesc.defaults import PROGRESS_LOG_INTERVAL_S

__all__ = ["ProgressReporter"]

logger = logging.getLogger("shapedesc.pipeline.progress")


class ProgressReporter:
    """Callable that shows :class:`~shapedesc.pipeline.run.ProgressEvent` s.

    Parameters
    ----------
    stream : file, optional
        Where the bar goes (default ``sys.stderr``).  A bar (tqdm: counts, rate, time
        left) when it is a terminal, else INFO log lines at most every ``interval`` s
        and at the end.
    bar : bool, optional
        Force the bar on or off.
    interval : float
        Seconds between log lines (s).
    """

    def __init__(self, *, stream=None, bar: bool | None = None,
                 interval: float = PROGRESS_LOG_INTERVAL_S):
        self.stream = stream if stream is not None else sys.stderr
        isatty = getattr(self.stream, "isatty", None)
        self.use_bar = bool(isatty and isatty()) if bar is None else bar
        self.interval = float(interval)
        self._bar = None
        self._t0 = time.monotonic()
        self._last = -float("inf")
        self._n0 = 0

    def __call__(self, event) -> None:
        if event.status == "cached":
            self._n0 = event.done
        if self.use_bar:
            if self._bar is None:
                from tqdm import tqdm

                self._bar = tqdm(total=event.total, initial=0, unit="item",
                                 file=self.stream, dynamic_ncols=True, desc="describe")
            self._bar.update(event.count)
            self._bar.set_postfix(failed=event.failed, refresh=False)
            if event.done >= event.total:
                self.close()
            return
        now = time.monotonic()
        if event.done < event.total and now - self._last < self.interval:
            return
        self._last = now
        elapsed = max(now - self._t0, 1e-9)
        fresh = event.done - self._n0
        rate = fresh / elapsed
        left = (event.total - event.done) / rate if rate > 0 else float("nan")
        logger.info("%d/%d done (%d failed, %d from cache), %.2f item/s, about %s left",
                    event.done, event.total, event.failed, self._n0, rate,
                    "?" if left != left else f"{left:.0f} s")

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
            self._bar = None
