"""The separator step: is the target predictable from the other invariants, does that beat
chance, and by what equation in the table's own invariants."""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from analysis.separator_equation import constant_rule_sentence, in_columns_sentence
from analysis.separator_metrics import below_baseline_text
from app import display, settings
from app.figure_view import show_figures

CONJECTURE = ("The equation holds on the rows of this table with the violations listed; "
              "it is a conjecture the table supports, not a proof.")
ROWS_SHOWN = 200


def describe(params: dict, result=None) -> str:
    """What the step predicts and with which model: once it ran, the model as fitted (a
    number target is fitted by a regression model)."""
    model = settings.words("separator", "model").get(params.get("model"), params.get("model"))
    if result is not None:
        model = model_words(result)
    if params.get("target_statement"):
        from analysis.derived import Statement

        text = Statement.from_json(params["target_statement"]).text
        return f"what sets apart the objects that break {text}, with a {model}"
    return f"predict {params.get('target')} with a {model}"


def _model_choices() -> dict:
    """Each model in the words of a class target, and what fits a number target instead,
    so that the choice says what will be computed whichever the target is."""
    from analysis.separation import REGRESSION_WORDS

    return {model: f"{words}; for a number target, {REGRESSION_WORDS[model]}"
            if model in REGRESSION_WORDS else f"{words}; classes only"
            for model, words in settings.words("separator", "model").items()}


def settings_panel(ctx: settings.StepContext) -> None:
    table = ctx.table
    left, right = st.columns(2)
    if ctx.params.get("target_statement"):
        left.caption("Target: whether an object breaks the statement above (the statement's "
                     "own columns are left out of the features).")
    else:
        settings.column(ctx, "target", settings.label_columns(table), optional=False,
                        container=left)
    settings.choice(ctx, "model", _model_choices(), container=right)
    settings.feature_block(ctx)
    left, middle, right = st.columns(3)
    settings.real_number(ctx, "train_fraction", container=left)
    settings.whole_number(ctx, "repeats", container=middle)
    settings.whole_number(ctx, "permutations", container=right)
    groups = [c.name for c in table.columns if c.role != "id"]
    left, middle, right = st.columns(3)
    settings.column(ctx, "groups", groups, container=left)
    positive = _classes(table, ctx.params.get("target"))
    if positive:
        settings.choice(ctx, "positive_class",
                        {None: "chosen automatically", **{v: str(v) for v in positive}},
                        container=middle)
    settings.choice(ctx, "penalty", container=right)
    if _numeric_target(table, ctx.params.get("target")):
        settings.choice(ctx, "reading", container=left)
    if st.toggle("More settings", key=ctx.key("more")):
        left, middle, right = st.columns(3)
        settings.real_number(ctx, "c", container=left)
        settings.whole_number(ctx, "max_terms", container=middle)
        settings.whole_number(ctx, "max_denominator", container=right)
        left, middle, right = st.columns(3)
        settings.choice(ctx, "kernel_approximation", container=left)
        settings.whole_number(ctx, "augment_permutations", container=middle)
        settings.seed(ctx, container=right)


def _numeric_target(table, target: str | None) -> bool:
    from analysis.features import is_numeric_target

    try:
        return bool(target) and is_numeric_target(table, target, "number")
    except Exception:  # noqa: BLE001 - a missing target is reported when the step runs
        return False


def _classes(table, target: str | None) -> list:
    """The target's values, when few enough to pick one as the class an equation describes."""
    if not target:
        return []
    try:
        info = table.column(target)
    except Exception:  # noqa: BLE001 - a missing target is reported when the step runs
        return []
    if info.role not in ("flag", "category") or info.distinct > 30:
        return []
    values = pd.Series(table.frame[target]).dropna().unique().tolist()
    plain = [v.item() if isinstance(v, np.generic) else v for v in values]
    return sorted(plain, key=str)


# ----------------------------------------------------------------------------------------
# Results


def show(ctx: settings.StepContext, result) -> None:
    table = ctx.table
    _verdict(result)
    if result.task == "classification":
        _classification_metrics(result)
    else:
        _regression_metrics(result)
    for warning in result.warnings:
        st.warning(warning)
    if result.reading is not None and result.reading.chosen_by == "learning curve":
        st.caption(result.reading.text)
    equations = list(result.equations) or ([result.equation] if result.equation else [])
    for number, equation in enumerate(equations):
        _equation(ctx, table, result, equation, number)
    if result.formula is not None:
        _formula(ctx, table, result.formula)
    if result.surrogate is not None:
        _surrogate(result.surrogate)
    if not equations and result.formula is None and result.surrogate is None:
        st.caption("This model gives no equation; choose the linear, logistic or degree-2 "
                   "model for one.")
    if equations or result.formula is not None or result.surrogate is not None:
        st.caption(CONJECTURE)
    options = _view_options(ctx, table, result)
    show_figures(result, table, ctx.key("figures"), vector=ctx.vector, **options)
    _open_predictions(ctx, result)
    if result.mispredicted:
        what = ("Test rows predicted furthest from their value" if result.task == "regression"
                else "Test rows the separator gets wrong")
        with st.expander(f"{what} ({len(result.mispredicted)})"):
            st.dataframe(pd.DataFrame([{k: display.cell(v) for k, v in m.items()}
                                       for m in result.mispredicted]),
                         hide_index=True, key=ctx.key("mispredicted"))
    display.names_list("Columns left out of the features", result.left_out_columns)
    display.notes(result.notes)


ROW_ORDER = "(row order)"


def _view_options(ctx, table, result) -> dict:
    """What the decision-score picture shows across, and on hover (never re-runs the step)."""
    if result.decision is None or result.task != "classification":
        return {}
    names = [c.name for c in table.columns if c.role in ("invariant", "flag")
             and c.name != result.target]
    key, hover_key = ctx.key("score_by"), ctx.key("hover")
    options = [ROW_ORDER] + names
    if st.session_state.get(key) not in options:
        st.session_state[key] = ROW_ORDER
    shown = [c.name for c in table.columns if c.role not in ("array", "id")]
    if hover_key not in st.session_state or any(
            h not in shown for h in st.session_state[hover_key]):
        st.session_state[hover_key] = [result.target]
    left, right = st.columns([1, 2])
    left.selectbox("Decision score against", options, key=key)
    right.multiselect("Show on hover", shown, key=hover_key, help="Besides the object's id.")
    feature = st.session_state[key]
    return {"feature": None if feature == ROW_ORDER else feature,
            "hover": list(st.session_state[hover_key])}


def model_words(result) -> str:
    """The model the result was fitted with, in words: a regression model for a number."""
    from analysis.separation import MODEL_WORDS, REGRESSION_WORDS

    words = REGRESSION_WORDS if result.task == "regression" else MODEL_WORDS
    return words.get(result.model, result.model)


def _verdict(result) -> None:
    if result.target_follows is not None:
        st.info(f"**Finding: the target follows from the features.** "
                f"`{result.target_follows.relation}` holds on all "
                f"{display.number(result.target_follows.holds_on)} objects used, so the "
                "verdict below says nothing new. Leave out "
                f"{', '.join(f'`{c}`' for c in result.target_follows.columns)} in the feature "
                "columns to ask whether the other invariants predict it.")
    word = "yes" if result.beats_chance else "no"
    colour = "green" if result.beats_chance else "orange"
    words = model_words(result)
    st.markdown(f"#### Beats chance: :{colour}[{word}]")
    rule = result.beats_chance_rule
    if rule.startswith("beats chance: "):
        rule = "The verdict is " + rule[len("beats chance: "):]
    st.caption(f"{display.sentence(words)}, trained on {display.number(result.train_rows)} "
               f"objects, tested on {display.number(result.test_rows)} others "
               f"({result.split_method}). {rule}")


def _interval(values) -> str:
    low, high = values
    return f"{display.number(low)} to {display.number(high)}"


def _p_value(result) -> str:
    if result.permutation_p is None:
        return "not tested"
    return display.number(result.permutation_p)


def _p_floor(result) -> str | None:
    """Says so when p is the smallest value this many permutations can give."""
    count = len(result.permutation_scores)
    if result.permutation_p is None or not count:
        return None
    return f"{count} permutations"


def _classification_metrics(result) -> None:
    m, b = result.metrics, result.baseline
    columns = st.columns(4)
    columns[0].metric("Accuracy on test rows", display.number(m["accuracy"]),
                      delta=f"{m['accuracy'] - b['accuracy']:+.3f} over guessing",
                      delta_color="normal" if m["accuracy"] > b["accuracy"] else "off",
                      help="Guessing: always the most common class, "
                           f"right on {display.number(b['accuracy'])} of the same test rows.")
    columns[1].metric("Balanced accuracy", display.number(m["balanced_accuracy"]),
                      help="The mean of the accuracies on each class; 0.5 for two classes "
                           "is chance.")
    columns[2].metric("Matthews correlation", display.number(m["mcc"]),
                      delta=f"95% interval {_interval(m['mcc_ci'])}", delta_color="off",
                      delta_arrow="off",
                      help=f"0 is chance, 1 is perfect. Interval: {result.interval_method}.")
    columns[3].metric("Permutation p-value", _p_value(result), delta=_p_floor(result),
                      delta_color="off", delta_arrow="off",
                      help=f"How often shuffled targets score as well: "
                           f"{result.permutation_method}.")
    below = below_baseline_text(m, b)
    if below:
        st.caption(below)


def _regression_metrics(result) -> None:
    m, b = result.metrics, result.baseline
    columns = st.columns(4)
    columns[0].metric("R² on test rows", display.number(m["r2"]),
                      delta=f"95% interval {_interval(m['r2_ci'])}", delta_color="off",
                      delta_arrow="off", help=result.interval_method)
    columns[1].metric("Mean absolute error", display.number(m["mean_absolute_error"]),
                      help="Predicting the training mean instead: "
                           f"{display.number(b['mean_absolute_error'])}.")
    columns[2].metric("R² of predicting the mean", display.number(b["r2"]))
    columns[3].metric("Permutation p-value", _p_value(result), delta=_p_floor(result),
                      delta_color="off", delta_arrow="off", help=result.permutation_method)
    if "exact" in m:
        from analysis.separation import exact_text

        columns = st.columns(4)
        columns[0].metric("Exactly right on test rows", f"{m['exact']:.1%}",
                          delta=f"95% interval {m['exact_ci'][0]:.1%} to {m['exact_ci'][1]:.1%}",
                          delta_color="off", delta_arrow="off",
                          help="The share of test rows whose rounded prediction equals the "
                               "whole-number target (Wilson's interval).")
        common = b["most_common_value"]
        # a whole-number target's most common value, whole even when JSON made it a real
        if isinstance(common, float) and common.is_integer():
            common = int(common)
        columns[1].metric(f"Most common value ({display.number(common)})",
                          f"{b['exact']:.1%}")
        if "formula_exact" in b:
            columns[2].metric("Closest formula", f"{b['formula_exact']:.1%}",
                              help=b["formula"])
        st.caption(display.sentence(exact_text(result)) + ".")


def _equation(ctx, table, result, equation, number: int) -> None:
    positive = equation.positive_class
    st.markdown(f"**Equation.** An object is predicted `{result.target} = {positive}` "
                "exactly when")
    st.latex(equation.latex())
    st.code(equation.text, language=None)
    if getattr(equation, "in_columns", ""):
        st.text(in_columns_sentence(equation.in_columns))
    total = getattr(equation, "n_rows", None) or result.rows_used
    broken = equation.violations
    if broken == 0:
        st.markdown(f"No object of the {display.number(total)} breaks it.")
        return
    st.markdown(f"**{display.number(broken)}** of {display.number(total)} objects break it.")
    rule = constant_rule_sentence(positive, total, getattr(equation, "positives", None), broken)
    if rule:
        st.caption(rule)
    ids = list(equation.violating_rows)[:ROWS_SHOWN]
    if ids:
        columns = [result.target] + [c for c in _equation_columns(equation)
                                     if c != result.target]
        label = f"The objects that break it ({len(ids)}" + \
            (f" of {broken} shown)" if broken > len(ids) else ")")
        with st.expander(label):
            st.dataframe(display.rows_frame(table, ids, columns), hide_index=True,
                         key=ctx.key(f"violations{number}"))


def _equation_columns(equation) -> list[str]:
    names = []
    for term in equation.terms:
        for name in (getattr(term, "factors", ()) or (term.feature,)):
            if name not in names:
                names.append(name)
    return names


def _formula(ctx, table, formula) -> None:
    right = formula.n_rows - formula.rows_off
    st.markdown(f"**Closest formula** in the table's own invariants, exactly right on "
                f"{display.number(right)} of {display.number(formula.n_rows)} objects "
                f"({right / max(formula.n_rows, 1):.1%}):")
    st.latex(formula.latex())
    st.code(formula.text, language=None)
    if formula.rows_off:
        st.markdown(f"**{display.number(formula.rows_off)}** of "
                    f"{display.number(formula.n_rows)} objects are off it.")
        ids = list(formula.off_rows)[:ROWS_SHOWN]
        if ids:
            with st.expander(f"The objects off the formula ({len(ids)} shown)"):
                st.dataframe(display.rows_frame(table, ids), hide_index=True,
                             key=ctx.key("formula_off"))
    else:
        st.markdown(f"Every one of the {display.number(formula.n_rows)} objects fits it.")


def _open_predictions(ctx, result) -> None:
    """Objects whose target is open, with the model's guesses and a CSV download."""
    found = result.open_predictions
    if not found:
        return
    with st.expander(f"Predictions for {display.number(len(found))} objects whose "
                     f"{result.target} is not known"):
        st.caption("Predictions to check by hand, not values: the model fitted on the "
                   "objects whose value is known, applied to the others.")
        frame = pd.DataFrame([{"object": p["row"], "prediction": display.cell(p["prediction"]),
                               "confidence": p["confidence"],
                               "known interval": None if p["interval"] is None
                               else f"[{p['interval'][0]:g}, {p['interval'][1]:g}]",
                               "inside it": p["inside"]} for p in found])
        st.dataframe(frame, hide_index=True, key=ctx.key("open"))
        st.download_button("Download these predictions (CSV)",
                           data=frame.to_csv(index=False).encode("utf-8"),
                           file_name=f"predicted_{result.target}.csv", mime="text/csv",
                           key=ctx.key("open_csv"), on_click="ignore")


def _surrogate(surrogate) -> None:
    agreement = getattr(surrogate, "agreement", None)
    st.markdown("**A quadratic inequality close to the kernel machine**"
                + (f" (agrees with it on {agreement:.1%} of rows)" if agreement else "") + ":")
    latex = getattr(surrogate, "latex", None)
    if callable(latex):
        st.latex(latex())
    st.code(str(getattr(surrogate, "text", surrogate)), language=None)
