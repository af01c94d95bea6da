"""Stop requests: Ctrl-C from a terminal and SIGTERM from a batch scheduler, handled alike.

The first SIGINT or SIGTERM asks the work to stop at its next safe point (a run: after the current
bond step, with a checkpoint; a scan: every running point does that); a second one stops at once,
as a ``KeyboardInterrupt``, keeping the last checkpoint. Either way the command exits with
:data:`EXIT_STOPPED` so that job scripts can requeue ("stopped, resumable"). Batch schedulers
send SIGTERM some seconds before SIGKILL at the wall-time limit, which leaves time for one bond.
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Callable

EXIT_STOPPED = 3
SIGNALS = (signal.SIGINT, signal.SIGTERM)


class StopSignals:
    """Within a ``with`` block, SIGINT and SIGTERM set a flag (read by calling the object) and
    ``say`` a notice; a second signal raises ``KeyboardInterrupt``. With ``at_once`` set, even the
    first signal does (for work that has no safe point of its own, e.g. writing tables that the
    next ``resume`` writes again). Outside the main thread nothing is installed."""

    def __init__(self, say: Callable[[str], None], notice: str):
        self.say = say
        self.notice = notice
        self.requested = False
        self.at_once = False
        self.previous: dict[int, object] = {}

    def __enter__(self) -> "StopSignals":
        if threading.current_thread() is threading.main_thread():
            for sig in SIGNALS:
                self.previous[sig] = signal.signal(sig, self._handle)
        return self

    def _handle(self, signum, frame) -> None:
        if self.requested or self.at_once:
            raise KeyboardInterrupt
        self.requested = True
        name = "SIGTERM" if signum == signal.SIGTERM else "Ctrl-C"
        try:
            self.say(f"\n{name}: {self.notice}")
        except RuntimeError:   # the signal arrived inside a write to the same stream
            pass

    def __call__(self) -> bool:
        return self.requested

    def __exit__(self, *exc) -> None:
        for sig, handler in self.previous.items():
            signal.signal(sig, handler)
        self.previous.clear()
