"""Progress of a run: a tqdm bar on a terminal, sparse log lines elsewhere."""

from __future__ import annotations

import logging
import sys
import time
from typing import TextIO

from tqdm import tqdm

log = logging.getLogger("conecheck.run")

# Non-terminal output logs a line each time another tenth of the stage is done.
_LOG_STEPS = 10


def format_seconds(seconds: float) -> str:
    """Short human duration: ``4.2s``, ``3m07s``, ``2h05m``."""
    if seconds < 60:
        return f"{seconds:.1f}s"
    m, s = divmod(int(round(seconds)), 60)
    if m < 60:
        return f"{m}m{s:02d}s"
    h, m = divmod(m, 60)
    return f"{h}h{m:02d}m"


class Progress:
    """Reports how far each stage of a run has got and how long it took.

    Parameters
    ----------
    enabled : bool or None
        False shows nothing (the CLI's ``-q``); None or True report progress.
    stream : text stream
        Where the terminal line goes.  When it is not a TTY, progress is logged instead
        (logger ``conecheck.run``, INFO) every ~10 % and at the end of each stage.
    refresh_seconds : float
        Least time between two redraws of the terminal bar [s].

    Attributes
    ----------
    timings : dict of str to float
        Wall-clock seconds spent in each finished stage (summed if a stage repeats).
    """

    def __init__(self, enabled: bool | None = None, stream: TextIO | None = None,
                 refresh_seconds: float = 0.2) -> None:
        self.enabled = True if enabled is None else bool(enabled)
        self.refresh_seconds = float(refresh_seconds)
        self.stream = sys.stderr if stream is None else stream
        isatty = getattr(self.stream, "isatty", None)
        try:
            self.tty = bool(isatty and isatty())
        except (ValueError, OSError):  # closed or detached stream
            self.tty = False
        self.timings: dict[str, float] = {}
        self.stage: str | None = None
        self.total = 0
        self.done = 0
        self._t0 = 0.0
        self._logged_step = 0
        self._bar: tqdm | None = None

    def start(self, stage: str, total: int) -> None:
        """Begin ``stage`` with ``total`` units of work (ends any unfinished stage)."""
        if self.stage is not None:
            self.finish()
        self.stage, self.total, self.done = stage, max(int(total), 0), 0
        self._t0 = time.perf_counter()
        self._logged_step = 0
        if self.enabled and self.tty:
            # tqdm draws the bar, rate and remaining time; it closes without a trace
            # (leave=False) and the stage's summary line replaces it
            self._bar = tqdm(total=self.total, desc=stage, file=self.stream, leave=False,
                             dynamic_ncols=True, unit="task",
                             mininterval=self.refresh_seconds, miniters=1,
                             bar_format="{desc}: {n}/{total} {bar} [{elapsed}, eta "
                                        "{remaining}]{postfix}")

    def advance(self, n: int = 1, note: str = "") -> None:
        """Record ``n`` more units done; ``note`` says what finished (shown on a TTY)."""
        if self.stage is None:
            return
        self.done = min(self.done + int(n), self.total) if self.total else self.done + int(n)
        if not self.enabled:
            return
        if self._bar is not None:
            if note:
                self._bar.set_postfix_str(note, refresh=False)
            self._bar.update(int(n))
        elif self.total and self.done < self.total:
            step = self.done * _LOG_STEPS // self.total
            if step > self._logged_step:
                self._logged_step = step
                log.info("%s", self._text())

    def finish(self) -> None:
        """End the current stage and record its time."""
        if self.stage is None:
            return
        elapsed = time.perf_counter() - self._t0
        self.timings[self.stage] = self.timings.get(self.stage, 0.0) + elapsed
        if self.enabled:
            text = f"{self.stage}: {self.done}/{self.total} done in {format_seconds(elapsed)}"
            if self._bar is not None:
                self._bar.close()
                self._bar = None
                self.stream.write(text + "\n")
                self.stream.flush()
            else:
                log.info("%s", text)
        self.stage = None

    # ------------------------------------------------------------------ display
    def _text(self) -> str:
        elapsed = time.perf_counter() - self._t0
        eta = "eta ?"
        if 0 < self.done < self.total:
            eta = "eta " + format_seconds(elapsed / self.done * (self.total - self.done))
        elif self.total and self.done >= self.total:
            eta = "eta 0s"
        return f"{self.stage}: {self.done}/{self.total} [{format_seconds(elapsed)}, {eta}]"

