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

__all__ = ["Progress", "Reporter", "StepStopped", "Stopper", "quiet"]


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
