"""Every step kind is in each registry that lists the kinds (the contributor guide, "Adding a
step kind"), so a new kind cannot reach the study file but miss the report or the page."""

from __future__ import annotations

import importlib

import pytest

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


def test_every_field_of_every_step_has_one_setting_record_with_its_type_and_default():
    import dataclasses

    from analysis.steps import step_settings

    for kind in KINDS:
        fields = {f.name: f for f in dataclasses.fields(step_class(kind))}
        records = step_settings(kind)
        assert [r.name for r in records if r.name in fields] == [r.name for r in records]
        assert sorted(r.name for r in records) == sorted(fields), kind
        defaults = step_class(kind)()
        for record in records:
            assert record.type is not None, (kind, record.name)
            assert record.default == getattr(defaults, record.name), (kind, record.name)


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_every_choice_a_record_offers_is_what_the_step_checks(kind):
    # the values a record offers pass the step's own check, a value outside them does not,
    # and the message says what to use
    from analysis.errors import StepError
    from analysis.steps import step_settings

    cls = step_class(kind)
    base = {"target": "t"} if kind == "separator" else {}
    for record in step_settings(kind):
        for value in record.values:
            cls(**base, **{record.name: value}).check()
        if record.values:
            with pytest.raises(StepError, match=rf"'not-a-choice': use .*{record.values[-1]}"):
                cls(**base, **{record.name: "not-a-choice"}).check()


def test_the_option_tuples_of_the_steps_are_their_records_choices():
    from analysis import clustering, features, projection, separation
    from analysis.settings import FEATURE_SETTINGS, named
    from analysis.steps import step_settings

    pairs = [
        ("separator", "model", separation.MODELS),
        ("separator", "penalty", separation.PENALTIES),
        ("separator", "kernel_approximation", separation.KERNEL_APPROXIMATIONS),
        ("separator", "reading", separation.READINGS),
        ("projection", "method", projection.METHODS),
        ("clustering", "method", clustering.METHODS),
    ]
    for kind, name, options in pairs:
        assert named(step_settings(kind))[name].values == tuple(options), (kind, name)
    assert named(step_settings("separator"))["model"].words == separation.MODEL_WORDS
    shared = named(FEATURE_SETTINGS)
    assert shared["array_encoding"].values == features.ARRAY_ENCODINGS
    assert shared["log_scale"].values == features.LOG_SCALES
    assert shared["missing"].values == features.MISSING_POLICIES
    assert shared["intervals"].values == features.INTERVAL_READINGS


@pytest.mark.parametrize("command, kind", [
    ("project", "projection"), ("cluster", "clustering"), ("separate", "separator"),
    ("relations", "relations"), ("outliers", "outliers")])
def test_every_command_line_option_of_a_step_is_its_record(command, kind):
    # the option's choices and number type come from the record, and an option given on the
    # command line reaches the step's setting of the record's name
    from analysis.cli import build_parser
    from analysis.steps import step_settings

    parser = build_parser()
    offered = [r for r in step_settings(kind) if r.option]
    assert offered, kind
    for record in offered:
        # a separator's target is required; every other option is given alongside one
        needed = ["--target", "y"] if kind == "separator" and record.name != "target" else []
        samples = {int: "7", float: "0.25", list: "a,b"}
        for text in ([str(v) for v in record.values] or [samples.get(record.base_type, "x")]):
            args = parser.parse_args([command, "t.csv", *needed, record.option, text])
            value = getattr(args, record.name)
            expected = record.base_type(text) if record.base_type in (int, float) else text
            assert value == expected and type(value) is type(expected), (record.option, value)
        if record.values:
            with pytest.raises(SystemExit):
                parser.parse_args([command, "t.csv", *needed, record.option,
                                   "not-a-choice"])


def test_at_most_one_setting_of_a_kind_follows_the_study_target_and_it_names_a_column():
    from analysis.steps import step_settings
    from analysis.study import target_setting

    for kind in KINDS:
        following = [r for r in step_settings(kind) if r.follows_target]
        assert len(following) <= 1, kind
        assert target_setting(kind) == (following[0].name if following else None)
        for record in following:
            assert record.base_type is str and record.optional, (kind, record.name)
    # a clustering follows the target as the label it is compared with (the design notes)
    assert target_setting("clustering") == "compare"
    assert target_setting("relations") is None
