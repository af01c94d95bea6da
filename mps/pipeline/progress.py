"""What a running search shows: one status line per sweep (redrawn per bond on a terminal) and
the lines of notices, to stderr or a point's log file."""

from __future__ import annotations

import math
import sys
import time

import numpy as np

from mps.solver.sweep import SweepSettings


class ProgressLine:
    """One status line on stderr, redrawn in place on a terminal, one line per sweep otherwise."""

    def __init__(self, settings: SweepSettings, stream=None):
        self.stream = stream or sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.total = sum(s.sweeps for s in settings.stages)
        self.start = time.perf_counter()
        self.sweep_times: list[float] = []
        self.last = ""

    def bond(self, step: int, steps: int, sweep: int) -> None:
        if self.tty:
            self._draw(f"sweep {sweep}: bond {step}/{steps}{self.last}", final=False)

    def sweep(self, rec, done: int) -> None:
        self.sweep_times.append(rec.seconds)
        left = max(self.total - done, 0) * float(np.mean(self.sweep_times[-3:]))
        delta = "" if math.isnan(rec.delta_energy) else f" dE {rec.delta_energy:+.2e}"
        self.last = (f" | E {rec.energy:.10f}{delta} trunc {rec.truncation:.1e} D {rec.max_bond}"
                     f" | {time.perf_counter() - self.start:.1f} s, <= {left:.0f} s left")
        self._draw(f"sweep {rec.sweep} stage {rec.stage + 1} bond {rec.bond}{self.last}", final=True)

    def _draw(self, text: str, final: bool) -> None:
        if self.tty:
            self.stream.write("\r\x1b[2K" + text + ("\n" if final else ""))
        elif final:
            self.stream.write(text + "\n")
        self.stream.flush()

    def say(self, text: str) -> None:
        self.stream.write(text + "\n")
        self.stream.flush()
