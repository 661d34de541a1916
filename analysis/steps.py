"""The kinds of step a study can hold, and how a step is made from plain JSON parameters.

Every step is a frozen, keyword-only dataclass with a class attribute ``kind`` and a method
``run(table)`` returning a frozen result with ``to_json()`` and ``summary()``. Its parameters
are exactly its fields, so ``dataclasses.asdict(step)`` is what a study file stores and
``make_step(kind, params)`` rebuilds it. Modules are imported when a kind is first used, so
that reading a table never pays for scikit-learn or UMAP.
"""

from __future__ import annotations

import dataclasses
import importlib

from analysis.errors import StudyError


@dataclasses.dataclass(frozen=True)
class StepKind:
    """What the program says once about a kind of step: where its class lives, its title (the
    page, the report, the notebook), what it finds (the page's list of kinds to add) and what it
    is doing while it runs (the page's status line)."""

    module: str
    class_name: str
    title: str
    finds: str
    running: str


KINDS: dict[str, StepKind] = {
    "overview": StepKind("analysis.overview", "OverviewStep", "Overview",
                         "columns, ranges, correlated pairs",
                         "Summarizing every column"),
    "projection": StepKind("analysis.projection", "ProjectionStep", "Projection",
                           "a 2-d picture (PCA, UMAP, t-SNE, LDA)",
                           "Building features and projecting to two dimensions"),
    "clustering": StepKind("analysis.clustering", "ClusteringStep", "Clustering",
                           "groups of similar objects",
                           "Trying clusterings and comparing their scores"),
    "separator": StepKind("analysis.separation", "SeparatorStep", "Separator",
                          "is the target predictable, and by what equation?",
                          "Fitting on training rows, testing on the others, comparing with chance"),
    "relations": StepKind("analysis.relations", "RelationsStep", "Relations and bounds",
                          "exact linear relations and sharp bounds",
                          "Searching for exact relations and sharp bounds, checking every row"),
    "outliers": StepKind("analysis.outliers", "OutliersStep", "Objects to look at",
                         "objects to look at by hand",
                         "Scoring every object"),
}

# kind -> (module, class name), and kind -> title: views of KINDS
STEP_KINDS: dict[str, tuple[str, str]] = {
    kind: (record.module, record.class_name) for kind, record in KINDS.items()}
KIND_TITLES = {kind: record.title for kind, record in KINDS.items()}


def step_class(kind: str) -> type:
    """The step class for ``kind``; StudyError for an unknown kind."""
    if kind not in STEP_KINDS:
        raise StudyError(f"unknown step kind {kind!r}; known kinds are "
                         f"{', '.join(STEP_KINDS)}.")
    module_name, class_name = STEP_KINDS[kind]
    module = importlib.import_module(module_name)
    return getattr(module, class_name)


def make_step(kind: str, params: dict | None = None):
    """Build a step from its kind and JSON parameters, naming any unknown parameter."""
    cls = step_class(kind)
    params = dict(params or {})
    known = {f.name for f in dataclasses.fields(cls)}
    unknown = sorted(set(params) - known)
    if unknown:
        raise StudyError(
            f"step {kind!r}: unknown setting {unknown[0]!r}; known settings are "
            f"{', '.join(sorted(known))}."
        )
    try:
        step = cls(**params)
    except TypeError as exc:
        raise StudyError(f"step {kind!r}: bad settings ({exc}).") from None
    check_settings(step)
    return step


def step_settings(kind: str) -> tuple:
    """The records of every setting of a step of ``kind`` (:class:`analysis.settings.Setting`,
    with the step's types and defaults), in the order the page and the command line offer
    them; StudyError for an unknown kind."""
    from analysis.settings import bound

    return bound(step_class(kind))


def check_settings(step) -> None:
    """Check a step's settings without a table: every value its records judge (choices and
    ranges, the shared feature settings and the seed among them), then its own check().

    A bad value becomes a StudyError naming the kind, so a study file with a typo fails when it
    is opened, not halfway through a run.
    """
    from analysis.errors import StepError
    from analysis.settings import check_values

    try:
        check_values(step)
        check = getattr(step, "check", None)
        if check is not None:
            check()
    except StepError as exc:
        raise StudyError(f"step {step.kind!r}: {exc}") from None


def step_params(step) -> dict:
    """The JSON parameters of a step (its fields), as stored in a study file."""
    return {f.name: _plain(getattr(step, f.name)) for f in dataclasses.fields(step)}


def _plain(value):
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    return value
