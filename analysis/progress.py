"""What a running step is doing: phases, counts, and a way to ask it to stop.

A step's ``run(table, progress=...)`` takes an optional callable that receives
:class:`Progress` records ("permutation test", 40 of at most 200, ...). The page draws them in
the step's own box with a bar; the command line prints them to stderr on a terminal. The same
callable may raise :class:`StepStopped` (through :class:`Stopper`) to end the step between two
units of work; nothing the step has not finished is kept.

Example::

    seen = []
    reporter = Reporter(seen.append)
    reporter.phase("permutation test", total=200)
    reporter.advance()          # 1 of 200
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass

from analysis.errors import ScoutError

__all__ = ["Progress", "Reporter", "StepStopped", "Stopper", "quiet", "stoppable_call"]

# How often a step waiting on one long library call asks whether it should stop (seconds).
STOP_POLL_SECONDS = 0.2


class StepStopped(ScoutError):
    """Raised inside a step when the user asked it to stop; the step's result is not kept."""


@dataclass(frozen=True)
class Progress:
    """One report of a running step.

    phase: what the step is doing, in the user's words ("permutation test").
    done: units of the phase finished so far.
    total: units the phase will take at most (None when it cannot be counted).
    first_figures: plain figures already final (e.g. split 1's accuracy and baseline), so the
        page can show them before the slower parts end; empty when there are none yet.
    """

    phase: str
    done: int = 0
    total: int | None = None
    first_figures: tuple[tuple[str, float], ...] = ()

    @property
    def share(self) -> float | None:
        """Share of the phase done, between 0 and 1; None when the phase is not counted."""
        if not self.total:
            return None
        return min(1.0, self.done / self.total)

    @property
    def text(self) -> str:
        """The report as one line: "permutation test 40 of at most 200"."""
        if self.total is None:
            return self.phase
        return f"{self.phase} {self.done} of at most {self.total}"


class Reporter:
    """Sends :class:`Progress` records of one step to a callable (or nowhere).

    The callable may raise :class:`StepStopped` to stop the step; the reporter also asks an
    optional :class:`Stopper` before every report.
    """

    def __init__(self, callback: Callable[[Progress], None] | None = None, *,
                 stopper: Stopper | None = None):
        self._callback = callback
        self._stopper = stopper
        self._phase = ""
        self._done = 0
        self._total: int | None = None
        self._figures: tuple[tuple[str, float], ...] = ()

    def phase(self, name: str, *, total: int | None = None) -> None:
        """Start a phase of ``total`` units (None when uncounted) and report it."""
        self._phase, self._done, self._total = name, 0, total
        self._send()

    def advance(self, count: int = 1) -> None:
        """Report ``count`` more units of the current phase done."""
        self._done += count
        self._send()

    def first_figures(self, **figures: float) -> None:
        """Report figures that are already final, for the page to show early."""
        merged = dict(self._figures)
        merged.update({name: float(value) for name, value in figures.items()})
        self._figures = tuple(merged.items())
        self._send()

    def check(self) -> None:
        """Raise StepStopped if the user asked to stop; call it between units of work."""
        if self._stopper is not None and self._stopper.requested:
            raise StepStopped(f"stopped by request during {self._phase or 'the step'}.")

    @property
    def listened_to(self) -> bool:
        """True when someone reads the reports or may ask the step to stop."""
        return self._callback is not None or self._stopper is not None

    def _send(self) -> None:
        self.check()
        if self._callback is not None:
            self._callback(Progress(self._phase, self._done, self._total, self._figures))


class Stopper:
    """A flag the page sets from another thread to stop a running step."""

    def __init__(self):
        self._event = threading.Event()

    def request(self) -> None:
        """Ask the running step to stop at its next report."""
        self._event.set()

    @property
    def requested(self) -> bool:
        return self._event.is_set()


def quiet(progress: Reporter | Callable[[Progress], None] | None) -> Reporter:
    """A Reporter for whatever a caller passed: a Reporter, a callable, or None (silent)."""
    if isinstance(progress, Reporter):
        return progress
    return Reporter(progress)


def stoppable_call(reporter: Reporter, work: Callable, *args, **kwargs):
    """``work(*args, **kwargs)`` for a step that waits on one long library call (a UMAP
    layout, a t-SNE fit) with no units of its own to report between.

    When the reporter is listened to, the call runs on a thread of its own while the step
    asks every STOP_POLL_SECONDS whether to stop, so a stop request ends the step at once
    (StepStopped). The library call itself cannot be cut short: it runs to its end on its
    thread and what it returns is set aside. Exceptions of ``work`` reach the caller.
    """
    if not reporter.listened_to:
        return work(*args, **kwargs)
    outcome: dict = {}

    def call():
        try:
            outcome["value"] = work(*args, **kwargs)
        except BaseException as exc:  # noqa: BLE001 - handed to the waiting step as it is
            outcome["error"] = exc

    worker = threading.Thread(target=call, daemon=True, name="long library call")
    worker.start()
    while worker.is_alive():
        reporter.check()
        worker.join(STOP_POLL_SECONDS)
    if "error" in outcome:
        raise outcome["error"]
    return outcome["value"]
