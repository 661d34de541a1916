"""Every step kind is in each registry that lists the kinds (the contributor guide, "Adding a
step kind"), so a new kind cannot reach the study file but miss the report or the page."""

from __future__ import annotations

import importlib

from analysis.report import RENDERERS
from analysis.steps import KIND_TITLES, STEP_KINDS, step_class
from analysis.stored import RESULT_MODULES
from app.panels import PANELS

KINDS = set(STEP_KINDS)


def test_every_registry_lists_exactly_the_step_kinds():
    assert set(KIND_TITLES) == KINDS
    assert set(RENDERERS) == KINDS
    assert set(PANELS) == KINDS
    assert {module for module, _ in STEP_KINDS.values()} <= set(RESULT_MODULES)


def test_every_kind_has_its_panel_functions_and_its_kind_name():
    for kind in KINDS:
        assert step_class(kind).kind == kind
        module = importlib.import_module(PANELS[kind])
        for name in ("describe", "settings_panel", "show"):
            assert callable(getattr(module, name, None)), (kind, name)


def test_the_page_labels_test_covers_every_kind():
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parent / "app"))
    try:
        labels = importlib.import_module("test_labels")
    finally:
        sys.path.pop(0)
    assert set(labels.KINDS) == KINDS


def test_every_page_choice_offers_exactly_the_options_its_step_checks():
    # the page adds words to an option list; the list itself is the step module's
    from analysis import clustering, features, projection, separation
    from app import settings
    from app.panels import clustering as clustering_panel
    from app.panels import projection as projection_panel
    from app.panels import separator as separator_panel

    pairs = [
        (separator_panel.MODELS, separation.MODELS),
        (separator_panel.PENALTIES, separation.PENALTIES),
        (separator_panel.KERNEL_APPROXIMATIONS, separation.KERNEL_APPROXIMATIONS),
        (separator_panel.READINGS, separation.READINGS),
        (projection_panel.METHODS, projection.METHODS),
        (clustering_panel.METHODS, clustering.METHODS),
        (settings.ENCODINGS, features.ARRAY_ENCODINGS),
        (settings.LOG_SCALES, features.LOG_SCALES),
        (settings.MISSING, features.MISSING_POLICIES),
        (settings.INTERVALS, features.INTERVAL_READINGS),
    ]
    for words, options in pairs:
        assert tuple(words) == tuple(options), (tuple(words), options)
    assert separator_panel.MODELS == separation.MODEL_WORDS
