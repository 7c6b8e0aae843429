"""Progress of a job run on stderr: a tqdm bar on a terminal, plain lines in logs, or nothing.

Every progress object takes ``update(status)`` once per finished task (a status of
``manifest.STATUSES``) and ``close()`` at the end; ``make_progress`` picks one for a mode. The
label and unit name the run and what it counts (the defaults are the batch's: "stobuilder
batch", items; the bench passes "stobuilder bench", calculations).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable

from stobuilder.core.errors import InputError
from stobuilder.jobs.manifest import STATUSES


class LineProgress:
    """Plain progress lines, at most one per ``interval`` seconds and one at the end, for logs."""

    def __init__(self, total: int, stream=None, interval: float = 10.0, clock: Callable[[], float] = time.monotonic,
                 label: str = "stobuilder batch", unit: str = "items"):
        self.total, self.stream, self.interval, self.clock = total, stream or sys.stderr, interval, clock
        self.label, self.unit = label, unit
        self.counts = dict.fromkeys(STATUSES, 0)
        self.start = self.clock()
        self.last = self.start
        self.computed = 0

    def update(self, status: str) -> None:
        self.counts[status] += 1
        if status != "skipped":
            self.computed += 1
        now = self.clock()
        if now - self.last >= self.interval:
            self.last = now
            self._line(now)

    def _line(self, now: float) -> None:
        finished = sum(self.counts.values())
        elapsed = max(now - self.start, 1e-9)
        rate = self.computed / elapsed
        left = self.total - finished
        eta = f", about {left / rate:.0f} s left" if rate > 0 and left else ""
        print(
            f"{self.label}: {finished}/{self.total} (done {self.counts['done']}, skipped "
            f"{self.counts['skipped']}, failed {self.counts['failed']}), {rate:.1f} {self.unit}/s{eta}",
            file=self.stream,
            flush=True,
        )

    def close(self) -> None:
        self._line(self.clock())


class BarProgress:
    """A tqdm progress bar (count, rate, estimate) with the done/skipped/failed counts."""

    def __init__(self, total: int, stream=None, label: str = "stobuilder batch", unit: str = "items"):
        from tqdm import tqdm

        self.counts = dict.fromkeys(STATUSES, 0)
        self.bar = tqdm(total=total, file=stream or sys.stderr, unit=unit.rstrip("s"), desc=label, dynamic_ncols=True)

    def update(self, status: str) -> None:
        self.counts[status] += 1
        self.bar.set_postfix(self.counts, refresh=False)
        self.bar.update(1)

    def close(self) -> None:
        self.bar.close()


class NoProgress:
    def update(self, status: str) -> None:
        pass

    def close(self) -> None:
        pass


PROGRESS_MODES = ("auto", "bar", "lines", "off")


def make_progress(total: int, mode: str = "auto", stream=None, interval: float = 10.0,
                  label: str = "stobuilder batch", unit: str = "items"):
    """"bar" (tqdm), "lines" (LineProgress), "off", or "auto": a bar when ``stream`` (stderr) is a
    terminal and tqdm is installed, plain lines otherwise. ``label`` and ``unit`` name the run
    and what it counts ("stobuilder bench", "calculations")."""
    stream = stream or sys.stderr
    if mode == "auto":
        tty = hasattr(stream, "isatty") and stream.isatty()
        try:
            import tqdm  # noqa: F401
        except ImportError:
            tty = False
        mode = "bar" if tty else "lines"
    if mode == "bar":
        try:
            return BarProgress(total, stream, label, unit)
        except ImportError:
            raise InputError("--progress bar needs tqdm: pip install tqdm") from None
    if mode == "lines":
        return LineProgress(total, stream, interval, label=label, unit=unit)
    if mode == "off":
        return NoProgress()
    raise InputError(f"unknown progress mode {mode!r}; choose auto, bar, lines or off")


__all__ = ["BarProgress", "LineProgress", "NoProgress", "PROGRESS_MODES", "make_progress"]
