"""Invariant Scout from Python: run a step by its kind and settings, and see its result in
Jupyter.

The steps and results are the ones the app and the command line use; nothing here computes.
In a notebook::

    import pandas as pd
    import analysis

    table = analysis.table_from_frame(frame, id_column="polygon")   # or analysis.load_table(path)
    result = analysis.run(table, "separator", target="is_reflexive", seed=0)
    result                      # summary, the equation in LaTeX, the figures (plotly)
    result.to_frame()           # every row's actual class, prediction and decision score

A result shows itself through ``_repr_html_``: the step's summary, its equation, formula,
relations or bounds in LaTeX (with the plain text to copy), and its figures drawn by
:mod:`analysis.figures`. Figures drawn over the table's values (the relations step's, the
hover text of a projection) need the table: :func:`run` remembers the table of each result it
returns, and :func:`show` takes one explicitly. plotly's JavaScript (about 4 MB) is embedded
in the first figure shown in a Python process and reused by later ones, so a notebook works
offline; pass ``include_plotlyjs=True`` to :func:`show` to embed it again.
"""

from __future__ import annotations

import html
import weakref

from analysis.errors import ScoutError, StepError
from analysis.steps import KIND_TITLES, make_step
from analysis.table import Table

# Statements of a relations result shown in LaTeX; the rest are in its summary and frame.
MAX_STATEMENTS = 12
FIGURE_HEIGHT = 420

_tables: dict[int, Table] = {}
_plotly_embedded = False


def run(table: Table, kind: str, **settings):
    """Run the step ``kind`` (overview, projection, clustering, separator, relations,
    outliers) with ``settings`` (the step's fields, as in a study file) on ``table``.

    Returns the step's result object, the one the app and the command line use. Unknown or
    bad settings raise StudyError naming them; a step that cannot run on the table raises
    StepError or TableError saying why.

    >>> result = run(table, "relations")                        # doctest: +SKIP
    >>> [r.text for r in result.relations][:1]                  # doctest: +SKIP
    ['twice_area - 2*interior_points - boundary_points = -2']
    """
    if not isinstance(table, Table):
        raise StepError(f"run() needs a Table, got {type(table).__name__}; build one with "
                        "analysis.table_from_frame(frame) or analysis.load_table(path).")
    result = make_step(kind, settings).run(table)
    remember_table(result, table)
    return result


def remember_table(result, table: Table) -> None:
    """Keep ``table`` with ``result`` (for as long as the result lives), for its figures."""
    key = id(result)
    _tables[key] = table
    weakref.finalize(result, _tables.pop, key, None)


class Shown:
    """A result together with its table, displayed richly by Jupyter."""

    def __init__(self, result, table: Table | None = None, *,
                 include_plotlyjs: bool | None = None):
        self.result = result
        self.table = table
        self.include_plotlyjs = include_plotlyjs

    def _repr_html_(self) -> str:
        return result_html(self.result, self.table, include_plotlyjs=self.include_plotlyjs)


def show(result, table: Table | None = None, *, include_plotlyjs: bool | None = None) -> Shown:
    """Display ``result`` with figures drawn over ``table``; the last line of a cell."""
    return Shown(result, table, include_plotlyjs=include_plotlyjs)


def result_html(result, table: Table | None = None, *,
                include_plotlyjs: bool | None = None) -> str:
    """The HTML Jupyter shows for a step result: title, mathematics, summary, figures."""
    if table is None:
        table = _tables.get(id(result))
    kind = getattr(result, "kind", "")
    parts = [f"<h3>{_e(KIND_TITLES.get(kind, kind))}</h3>"]
    parts.extend(_statement_html(latex, text, note) for latex, text, note in _mathematics(result))
    parts.append(f"<pre style='white-space:pre-wrap'>{_e(_summary(result))}</pre>")
    parts.extend(_figures_html(result, table, include_plotlyjs))
    if kind == "relations" and table is None:
        parts.append("<p><em>Figures over the table's values: analysis.show(result, "
                     "table).</em></p>")
    return f"<div class='invariant-scout-result'>{''.join(parts)}</div>"


def run_html(study_run) -> str:
    """The HTML Jupyter shows for a study run: each step's result or why it could not run."""
    title = study_run.study.title or f"Study of {study_run.table.name}"
    parts = [f"<h2>{_e(title)}</h2>",
             f"<p>{_e(study_run.table.name)}: {study_run.table.rows} rows, "
             f"{len(study_run.outcomes)} steps</p>"]
    parts.extend(f"<p><strong>warning:</strong> {_e(w)}</p>" for w in study_run.warnings)
    for outcome in study_run.outcomes:
        if outcome.ok:
            parts.append(result_html(outcome.result, study_run.source_table))
        else:
            parts.append(f"<h3>{_e(outcome.title)}</h3><p><strong>could not run:</strong> "
                         f"{_e(outcome.error)}</p>")
    return f"<div class='invariant-scout-run'>{''.join(parts)}</div>"


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _summary(result) -> str:
    try:
        return result.summary()
    except Exception as exc:  # noqa: BLE001 - a display must not fail on one bad summary
        return f"(no summary: {type(exc).__name__}: {exc})"


def _mathematics(result) -> list[tuple[str, str, str]]:
    """(LaTeX, plain text, a few words) for each statement the result makes."""
    kind = getattr(result, "kind", "")
    if kind == "separator":
        return _separator_mathematics(result)
    if kind == "relations":
        return _relations_mathematics(result)
    return []


def _separator_mathematics(result) -> list[tuple[str, str, str]]:
    out = []
    if result.formula is not None:
        out.append((result.formula.latex(), result.formula.text,
                    f"{result.formula.rows_off} of {result.formula.n_rows} rows off"))
    equations = list(result.equations) or ([result.equation] if result.equation else [])
    for equation in equations:
        words = f"{equation.violations} violating rows; predicts {equation.positive_class!r}"
        out.append((equation.latex(), equation.text, words))
    return out


def _relations_mathematics(result) -> list[tuple[str, str, str]]:
    from analysis.equations import latex_statement

    out = []
    for relation in result.relations:
        if relation.trivial:
            continue
        words = f"holds on {relation.holds_on} rows"
        if relation.violations:
            words += f", broken by {len(relation.violations)}"
        out.append((latex_statement(relation.terms, "=", relation.constant), relation.text,
                    words))
    for bound in result.bounds:
        words = f"attained by {bound.attained_count} rows"
        if bound.violations:
            words += f", broken by {len(bound.violations)}"
        out.append((latex_statement(bound.terms, bound.relation, bound.constant), bound.text,
                    words))
    return out[:MAX_STATEMENTS]


def _statement_html(latex: str, text: str, note: str) -> str:
    return (f"<div class='statement'>$${_e(latex)}$$"
            f"<div><code>{_e(text)}</code> <small>({_e(note)})</small></div></div>")


def _figures_html(result, table, include_plotlyjs: bool | None) -> list[str]:
    global _plotly_embedded
    from analysis.figures import figures_for

    try:
        drawn = figures_for(result, table)
    except ScoutError as exc:
        return [f"<p><strong>figures could not be drawn:</strong> {_e(exc)}</p>"]
    out = []
    for title, figure in drawn:
        embed = (not _plotly_embedded) if include_plotlyjs is None else include_plotlyjs
        out.append(f"<h4>{_e(title)}</h4>")
        out.append(figure.to_html(full_html=False, include_plotlyjs=embed,
                                  default_height=f"{FIGURE_HEIGHT}px"))
        _plotly_embedded = _plotly_embedded or embed
    return out
