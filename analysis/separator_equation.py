"""The separator's equation: the model fitted on every row (split 1's on a large table),
stated as an exact equation in the table's own units and checked on every row (the linear
models' hyperplanes, the degree-2 kernel's polynomial, a quadratic surrogate of the RBF
kernel, an exact formula of a numeric target), with every row's decision score for figures.
"""

from __future__ import annotations

import numpy as np

from analysis.notes import Note
from analysis.separator_models import decision, fit, predictions_and_decision

# Features whose values are the table's own numbers (or sums of them): an equation in them
# is checked exactly whenever the values are integers or short decimals.
_TABLE_VALUED_KINDS = ("value", "flag", "onehot", "flat", "sorted", "row_sums", "column_sums")


def equation_part(run, split_model) -> tuple[dict, object]:
    """Fit on every row (past ``sample_rows`` rows, split 1's model serves instead), then
    state the separator as an exact equation checked on every row (the search itself runs
    on a sample of ``sample_rows`` rows past that size).

    Returns the result's fields (``equation``, ``equations``, ``surrogate`` or ``formula``,
    and ``decision``: the fields of its decision scores) and the model fitted on every row.
    """
    step = run.step
    n = len(run.y)
    fitted_on = "all rows"
    if run.big or n > step.sample_rows:
        # Past the search's sample a refit on every row only refines the starting direction
        # of a search that sees a sample anyway, at twice split 1's cost (a large share of
        # the step): split 1's model starts it, and the exact check on every row decides.
        model = split_model
        fitted_on = "split 1's training rows"
        run.log.notes.append(Note("equation_from_split", f"the table has {n} rows, more than "
                                  f"the equation's search sample of {step.sample_rows}: the "
                                  "separator fitted on split 1's training rows gives the "
                                  "equation's starting direction, the decision scores and the "
                                  "open values' predictions, instead of a refit on every row.",
                                  rows=n, sample=step.sample_rows))
    else:
        model = fit(run, np.arange(n), seed_offset=5000)
    # one evaluation gives a kernel machine's predictions and its decision values
    predicted, machine_values = predictions_and_decision(model, run.X)
    options = {"exact_columns": _exact_flags(run.fm),
               "sample_size": step.sample_rows, "seed": step.seed}
    if step.max_terms is not None:
        options["max_terms"] = step.max_terms
    if step.max_denominator is not None:
        options["max_denominator"] = step.max_denominator
    if n > step.sample_rows:
        run.log.notes.append(Note("equation_sample", f"the equation was searched on a sample "
                                  f"of {step.sample_rows} rows, then checked on all {n} rows.",
                                  sample=step.sample_rows, rows=n))

    def scores_of(source, values):
        return {"rows": run.fm.rows, "row_ids": run.fm.row_ids, "scores": values,
                "labels": run.y, "predicted": predicted, "source": source}

    if run.regression:
        from analysis import equations as eqs

        formula = eqs.find_formula(run.X, _exact_target(run), list(run.fm.names),
                                   row_ids=run.fm.row_ids, target_name=step.target, **options)
        return {"formula": formula,
                "decision": scores_of(f"prediction of the model fitted on {fitted_on}",
                                      predicted.astype(np.float64))}, model
    if step.model in ("linear", "logistic", "lda"):
        return _linear_equations(run, model, options, scores_of), model
    return _kernel_equation(run, model, predicted, machine_values, fitted_on, options,
                            scores_of), model


def _linear_equations(run, model, options: dict, scores_of) -> dict:
    """The equation of a linear model (one per class against the rest for several classes),
    each started from the fitted model's hyperplane."""
    from analysis import equations as eqs

    names = list(run.fm.names)
    ids = run.fm.row_ids
    weights, intercepts = _raw_hyperplanes(model)
    if run.n_classes == 2:
        equation = eqs.find_linear_equation(
            run.X, run.y == 1, names, row_ids=ids,
            positive_class=run.positive_class,
            hint=(weights[0], float(intercepts[0])), **options)
        equation = in_own_values(equation, run.fm.features, run.table)
        return {"equation": equation,
                "decision": scores_of("equation margin (>= 0 on the positive side)",
                                      _left_side(equation, run.X, names))}
    # one equation per class against the rest, each seeded with that class's
    # hyperplane from the fitted model
    equations = tuple(
        in_own_values(eqs.find_linear_equation(
            run.X, run.y == k, names, row_ids=ids, positive_class=label,
            hint=(weights[k], float(intercepts[k])), **options), run.fm.features, run.table)
        for k, label in enumerate(run.classes))
    columns = np.column_stack([_left_side(e, run.X, names) for e in equations])
    return {"equations": equations,
            "decision": scores_of("equation margin of each class against the rest "
                                  "(>= 0 on that class's side)", columns)}


def in_columns_sentence(text: str) -> str:
    """The sentence that gives an equation's ``in_columns`` form, for the page and report."""
    return (f"In the column's own values: {text} (the signed log is increasing, so the two "
            "say the same).")


def constant_rule_sentence(positive_class, n_rows: int, positives: int | None,
                           violations: int) -> str:
    """How an equation compares with the better rule that predicts ``positive_class`` for
    no object or for every object (it breaks on ``positives`` or the other rows), for the
    page, the report and the command line; "" when the class was not counted or the
    equation breaks on no row."""
    if positives is None or violations == 0:
        return ""
    from analysis.equations import constant_rule

    which, count = constant_rule(n_rows, positives)
    whom = "no object" if which == "none" else "every object"
    rows = f"{count} row{'s' if count != 1 else ''}"
    if violations >= count:
        return (f"No better than predicting {positive_class!r} for {whom}, which breaks on "
                f"{rows}: the equation says nothing about this class.")
    return f"Predicting {positive_class!r} for {whom} would break on {rows}."


def in_own_values(equation, features, table):
    """``equation`` with its ``in_columns`` text set when its one term is a log-scaled
    feature ``k*slog(c)`` and the inequality reads exactly in the column's own values
    (:func:`analysis.features.signed_log_threshold`); otherwise ``equation`` itself."""
    from dataclasses import replace
    from fractions import Fraction

    from analysis.features import signed_log_threshold

    if len(equation.terms) != 1 or equation.terms[0].degree != 1:
        return equation
    term = equation.terms[0]
    feature = next((f for f in features if f.name == term.feature), None)
    if feature is None or feature.kind != "log":
        return equation
    relation = equation.relation
    if term.coef < 0:
        relation = "<=" if relation == ">=" else ">="
    whole = table.column(feature.column).dtype in ("integer", "big integer")
    threshold = signed_log_threshold(Fraction(equation.constant) / term.coef, relation, whole)
    if threshold is None:
        return equation
    return replace(equation, in_columns=f"{feature.column} {relation} {threshold}")


def _kernel_equation(run, model, predicted, machine_values, fitted_on: str, options: dict,
                     scores_of) -> dict:
    """The expanded polynomial of an exact degree-2 machine, else a quadratic surrogate of
    the machine's predictions (two classes only)."""
    from analysis import equations as eqs

    names = list(run.fm.names)
    ids = run.fm.row_ids
    if machine_values is None:
        machine_values = decision(model, run.X)
    machine_scores = scores_of(f"decision value of the kernel machine fitted on "
                               f"{fitted_on}", machine_values)
    if run.n_classes != 2:
        run.log.notes.append(Note("no_kernel_equation", "no equation for a kernel machine "
                                  "over several classes; choose a positive class to get one "
                                  "for that class against the rest."))
        return {"decision": machine_scores}
    if run.step.model == "poly2" and run.kernel_mode != "nystroem":
        equation = eqs.poly2_equation(model, None, names, run.X, run.y == 1, row_ids=ids,
                                      positive_class=run.positive_class, **options)
        return {"equation": equation,
                "decision": scores_of("polynomial equation margin (>= 0 on the "
                                      "positive side)", _left_side(equation, run.X, names))}
    surrogate = eqs.surrogate_quadratic(run.X, predicted == 1, names, row_ids=ids,
                                        positive_class=run.positive_class, **options)
    return {"surrogate": surrogate, "decision": machine_scores}


def _exact_target(run) -> np.ndarray:
    """The numeric target as exact values when the column is integer or rational."""
    info = run.table.column(run.step.target)
    if info.dtype in ("integer", "big integer", "rational"):
        exact = run.table.exact(run.step.target)
        values = [exact[i] for i in run.fm.rows]
        if all(v is not None for v in values):
            return np.array(values, dtype=object)
    return run.y


def _exact_flags(fm) -> tuple[bool, ...]:
    """Per feature: may the equation search treat it as exact? Integer features always;
    decimals from the table when they are short (the search checks); never derived floats
    such as singular values, eigenvalues or the signed log."""
    return tuple(bool(exact or feature.kind in _TABLE_VALUED_KINDS)
                 for exact, feature in zip(fm.exact_columns, fm.features))


def _raw_hyperplanes(pipeline) -> tuple[np.ndarray, np.ndarray]:
    """Hyperplanes of a scaler + linear model in the table's own units.

    With z = (x - mean) / scale, w.z + b = (w / scale).x + (b - (w / scale).mean).
    For two classes, one row: positive decision means class code 1.
    """
    scaler, model = pipeline[0], pipeline[-1]
    weights = np.atleast_2d(np.asarray(model.coef_, dtype=np.float64)) / scaler.scale_
    intercepts = np.atleast_1d(np.asarray(model.intercept_, dtype=np.float64)) \
        - weights @ scaler.mean_
    return weights, intercepts


def _left_side(equation, X: np.ndarray, names: list[str]) -> np.ndarray:
    """The equation's left side minus its constant on every row, signed so that a row is
    predicted positive exactly when the value is >= 0."""
    position = {name: j for j, name in enumerate(names)}
    total = np.zeros(len(X))
    for term in equation.terms:
        column = np.ones(len(X))
        for factor in term.factor_names():
            column = column * X[:, position[factor]]
        total = total + float(term.coef) * column
    total = total - float(equation.constant)
    return -total if equation.relation == "<=" else total
