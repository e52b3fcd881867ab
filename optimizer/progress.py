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
        Print the progress line.
    notices : bool
        Print notices (:meth:`message`) even without the progress line.
    """

    def __init__(self, total: int, label: str = "", stream=None, enabled: bool = True, every_s: float = 5.0,
                 notices: bool = True):
        self.total = total
        self.label = label
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = enabled
        self.notices = notices
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
        """A notice (stop requested, where to resume): printed unless notices are off."""
        if not self.notices:
            return
        self.close()
        self.stream.write(text + "\n")
        self.stream.flush()

    def close(self) -> None:
        if self._open:
            self.stream.write("\n")
            self.stream.flush()
            self._open = False


def read_progress(run_dir) -> dict | None:
    """A batch run's ``progress.json`` (:class:`tiltopt.optimizer.runner.Runner` writes it), or None when
    there is none yet or it cannot be read (a line is then shown as starting)."""
    import json
    from pathlib import Path

    try:
        doc = json.loads((Path(run_dir) / "progress.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return doc if isinstance(doc, dict) else None


class BatchMonitor:
    """The progress of a batch: one line per running run (run id, generation, ETA, front size).

    On a terminal the block of lines is redrawn in place about every ``refresh_s``, and a message (a run
    started, finished, failed) is printed above it; otherwise (a log file) each running run gets a line
    every ``every_s`` seconds, and messages are printed as they come. The summary table at the end
    is the command's (tiltopt/commands/runs.py).

    Parameters
    ----------
    stream : file, default sys.stdout
    every_s : float
        Seconds between the progress lines of a run in a log.
    tty : bool, optional
        Draw in place (default: when the stream is a terminal).
    """

    def __init__(self, stream=None, every_s: float = 30.0, tty: bool | None = None, refresh_s: float = 1.0):
        self.stream = stream if stream is not None else sys.stdout
        self.every_s = every_s
        self.refresh_s = refresh_s
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)()) if tty is None else tty
        self._drawn = 0
        self._last_draw = -math.inf
        self._last_log: dict[str, float] = {}
        self._lines: list[str] = []

    @staticmethod
    def line(run_id: str, p: dict | None, width: int = 16) -> str:
        """The progress line of one run from its ``progress.json`` (None: not started yet)."""
        if not p:
            return f"{run_id}  starting ..."
        g, total = int(p.get("generation") or 0), int(p.get("generations") or 0)
        done = int(width * g / max(total, 1))
        eta = p.get("eta_s")
        rate = p.get("evals_per_s")
        return (f"{run_id}  [{'#' * done}{'.' * (width - done)}] gen {g}/{total}  front {int(p.get('front_size') or 0)}"
                f"  ETA {fmt_eta(float(eta)) if eta is not None else '--'}"
                + (f"  {float(rate):.0f} eval/s" if rate is not None else ""))

    def _clear(self) -> None:
        if self.tty and self._drawn:
            self.stream.write(f"\x1b[{self._drawn}F\x1b[J")     # up to the first line, clear to the end
            self._drawn = 0

    def _draw(self) -> None:
        if self.tty and self._lines:
            self.stream.write("\n".join(self._lines) + "\n")
            self._drawn = len(self._lines)
        self.stream.flush()

    def message(self, text: str) -> None:
        """An event line (printed above the live block on a terminal)."""
        self._clear()
        self.stream.write(text + "\n")
        self._draw()

    def show(self, running: dict, force: bool = False) -> None:
        """``running``: run id -> its progress dict (or None). Redraws (terminal) or logs (every ``every_s``)."""
        now = time.monotonic()
        self._lines = [self.line(rid, p) for rid, p in running.items()]
        if self.tty:
            if force or now - self._last_draw >= self.refresh_s:
                self._clear()
                self._draw()
                self._last_draw = now
            return
        for rid, p in running.items():
            if force or now - self._last_log.get(rid, -math.inf) >= self.every_s:
                if p or force:
                    self.stream.write("progress " + self.line(rid, p) + "\n")
                    self._last_log[rid] = now
        self.stream.flush()

    def close(self) -> None:
        self._clear()
        self._lines = []
        self.stream.flush()
