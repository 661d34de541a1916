"""One panel per step kind: ``describe(params, result=None)`` (the caption under the step's
title; with the result at hand it names what was computed), ``settings_panel(ctx)`` and
``show(ctx, result)``. A panel reads widgets, and draws a result that analysis/ computed."""

from __future__ import annotations

import importlib

PANELS = {
    "overview": "app.panels.overview",
    "projection": "app.panels.projection",
    "clustering": "app.panels.clustering",
    "separator": "app.panels.separator",
    "relations": "app.panels.relations",
    "outliers": "app.panels.outliers",
}


def panel(kind: str):
    """The panel module for a step kind (imported on first use)."""
    return importlib.import_module(PANELS[kind])
