"""One progress line on stderr: generation, evaluations/s, feasible share, hypervolume, ETA."""
from __future__ import annotations

import math
import sys
import time


def fmt_eta(seconds: float) -> str:
    if not math.isfinite(seconds) or seconds < 0:
        return "--"
    s = int(round(seconds))
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h}h{m:02d}m" if h else (f"{m}m{s:02d}s" if m else f"{s}s")


class Progress:
    """Progress of a run.

    On a terminal the line is redrawn in place; otherwise (a log file) a line
    is printed at most every ``every_s`` seconds and at the last generation.

    Parameters
    ----------
    total : int
        Generations of the run.
    label : str
    stream : file, default sys.stderr
    enabled : bool
    """

    def __init__(self, total: int, label: str = "", stream=None, enabled: bool = True, every_s: float = 5.0):
        self.total = total
        self.label = label
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = enabled
        self.every_s = every_s
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self._last = -math.inf
        self._open = False

    def line(self, gen: int, evals_per_s: float, feasible_share: float, hv: float, eta_s: float) -> str:
        width = 20
        done = int(width * gen / max(self.total, 1))
        bar = "#" * done + "." * (width - done)
        hv_s = "--" if not math.isfinite(hv) else f"{hv:.4f}"
        return (f"{self.label} [{bar}] gen {gen}/{self.total} | {evals_per_s:7.1f} eval/s | feasible "
                f"{100 * feasible_share:5.1f}% | HV {hv_s} | ETA {fmt_eta(eta_s)}")

    def update(self, gen: int, evals_per_s: float, feasible_share: float, hv: float, eta_s: float) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        last = gen >= self.total
        text = self.line(gen, evals_per_s, feasible_share, hv, eta_s)
        if self.tty:
            self.stream.write("\r" + text)
            self._open = True
        elif last or now - self._last >= self.every_s:
            self.stream.write(text + "\n")
            self._last = now
        self.stream.flush()

    def message(self, text: str) -> None:
        if not self.enabled:
            return
        self.close()
        self.stream.write(text + "\n")
        self.stream.flush()

    def close(self) -> None:
        if self._open:
            self.stream.write("\n")
            self.stream.flush()
            self._open = False
