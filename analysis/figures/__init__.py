"""Figure builders: pure functions from a step's result to plotly figures.

One module per step kind (``analysis/figures/<kind>.py``), each with
``figures(result, table=None, **options) -> list[tuple[str, plotly.graph_objects.Figure]]``.
The app, the report and the tests all call :func:`figures_for`, so a picture is drawn one way.
"""

from __future__ import annotations

import importlib

from analysis.errors import StepError


def figures_for(result, table=None, **options) -> list:
    """The titled figures for a step result (an empty list for kinds drawn as text only)."""
    kind = getattr(result, "kind", None)
    if kind is None:
        raise StepError(f"cannot draw {type(result).__name__}: it names no step kind.")
    try:
        module = importlib.import_module(f"analysis.figures.{kind}")
    except ModuleNotFoundError as exc:
        if exc.name == f"analysis.figures.{kind}":
            return []
        raise
    return module.figures(result, table, **options)


def picture_bytes(figure, fmt: str, attempts: int = 2) -> bytes:
    """The figure as SVG, PDF or PNG bytes, drawn by kaleido.

    Kaleido drives a headless chromium; on a busy machine its first page load now and then
    fails before the drawing code is in place, and a second attempt succeeds. The last
    failure is raised.
    """
    for attempt in range(attempts):
        try:
            return figure.to_image(format=fmt)
        except Exception:  # noqa: BLE001 - kaleido raises several kinds; retried, then raised
            if attempt == attempts - 1:
                raise
    raise ValueError("attempts must be at least 1")
