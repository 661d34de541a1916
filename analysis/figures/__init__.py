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
