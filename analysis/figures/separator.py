"""Figures for the separator step: confusion matrix, learning curve, score against chance,
and the decision score of every row against a feature or the row order.

Every builder is a pure function of a :class:`~analysis.separation.SeparatorResult` (and, for
feature values and hover text, the table), so the app, the report and the tests draw the same
pictures.
"""

from __future__ import annotations

import numpy as np

from analysis.errors import StepError
from analysis.figures.style import PALETTE, apply_style, escaped

MAX_POINTS = 20_000
CLASS_COLOURS = PALETTE
GREY = "#8a939b"
# Shares from 0 to 1: near-white to our blue.
SHARE_SCALE = [[0.0, "#f7f8fa"], [1.0, PALETTE[0]]]


def figures(result, table=None, **options) -> list:
    """Titled plotly figures for a separator result.

    Options: ``feature`` (a table column or feature name for the x axis of the decision
    score plot; default the row order), ``class_label`` (which class's score to draw when
    there are several), ``hover`` (table columns to show on hover), ``max_points`` (points
    drawn in the scatter; a seeded sample beyond it).
    """
    out = []
    if result.task == "classification" and result.confusion_matrix:
        out.append(("Confusion matrix (split 1, test rows)", confusion_figure(result)))
    else:
        out.append(("Predicted against actual (model fitted on all rows)",
                    predicted_figure(result, table, hover=options.get("hover"))))
    if result.learning_curve:
        out.append(("Learning curve", learning_curve_figure(result)))
    out.append(("Score against chance", chance_figure(result)))
    if getattr(result, "importance", ()):
        out.append(("What the prediction rests on", importance_figure(result)))
    if result.decision is not None and result.task == "classification":
        out.append(("Decision score of every row",
                    decision_figure(result, table, feature=options.get("feature"),
                                    class_label=options.get("class_label"),
                                    hover=options.get("hover"),
                                    max_points=options.get("max_points", MAX_POINTS))))
    return out


IMPORTANCE_BARS = 20


def importance_figure(result):
    """Horizontal bars: the drop in score when each feature (or whole matrix column) is
    shuffled on the test rows, with the spread over the repeats; largest at the top."""
    import plotly.graph_objects as go

    shown = list(result.importance[:IMPORTANCE_BARS])[::-1]
    names = [(f"{r.feature} (whole column)" if r.whole_column else r.feature) for r in shown]
    figure = go.Figure(go.Bar(
        x=[r.mean for r in shown], y=names, orientation="h",
        error_x={"type": "data", "array": [r.std for r in shown], "visible": True},
        marker={"color": [PALETTE[1] if r.whole_column else PALETTE[0] for r in shown]},
        hovertemplate="%{y}: drop %{x:.3f}<extra></extra>"))
    statistic = "R^2" if result.task == "regression" else "Matthews correlation"
    more = len(result.importance) - len(shown)
    apply_style(figure, title=escaped(f"{result.target}: drop in {statistic} when a feature is "
                                      "shuffled on the test rows"
                                      + (f" (top {len(shown)}, {more} more)" if more else "")),
                x_title=f"drop in {statistic} (mean and spread over repeats)", y_title="")
    figure.update_layout(height=max(260, 26 * len(shown) + 120))
    return figure


def confusion_figure(result):
    """Heatmap of the test rows' counts: actual class down, predicted class across."""
    import plotly.graph_objects as go

    labels = [str(v) for v in result.confusion_matrix["labels"]]
    counts = np.asarray(result.confusion_matrix["counts"])
    totals = counts.sum(axis=1, keepdims=True)
    share = np.divide(counts, totals, out=np.zeros(counts.shape), where=totals > 0)
    text = [[f"{counts[i, j]}<br>{share[i, j]:.0%} of actual" for j in range(len(labels))]
            for i in range(len(labels))]
    figure = go.Figure(go.Heatmap(
        z=share, x=labels, y=labels, text=text, texttemplate="%{text}",
        colorscale=SHARE_SCALE, zmin=0, zmax=1, colorbar={"title": "share of row"},
        hovertemplate="actual %{y}<br>predicted %{x}<br>%{text}<extra></extra>"))
    apply_style(figure, title=f"{result.target}: confusion matrix on the {result.test_rows} "
                "test rows", x_title="predicted class", y_title="actual class")
    figure.update_layout(yaxis={"autorange": "reversed", "type": "category", "showgrid": False},
                         xaxis={"type": "category", "showgrid": False})
    return figure


def learning_curve_figure(result):
    """Test score against training fraction, mean with a band of one standard deviation."""
    import plotly.graph_objects as go

    points = result.learning_curve
    x = [p["train_fraction"] for p in points]
    mean = np.array([p["mean"] for p in points])
    std = np.array([p["std"] for p in points])
    metric = "R^2" if points and points[0]["metric"] == "r2" else "Matthews correlation"
    figure = go.Figure()
    figure.add_trace(go.Scatter(x=x + x[::-1], y=list(mean + std) + list((mean - std)[::-1]),
                                fill="toself", fillcolor="rgba(43,108,176,0.18)",
                                line={"width": 0, "color": PALETTE[0]}, hoverinfo="skip",
                                name="mean +- 1 sd"))
    figure.add_trace(go.Scatter(
        x=x, y=mean, mode="lines+markers", name=f"test {metric}",
        line={"color": PALETTE[0]}, marker={"color": PALETTE[0]},
        customdata=[[p["train_rows"], p["std"]] for p in points],
        hovertemplate=("training fraction %{x}<br>%{customdata[0]} training rows<br>"
                       f"{metric} " + "%{y:.3f} +- %{customdata[1]:.3f}<extra></extra>")))
    figure.add_hline(y=0, line_dash="dot", annotation_text="chance",
                     annotation_position="bottom right")
    apply_style(figure, title=f"{result.target}: learning curve", x_title="training fraction",
                y_title=f"test {metric}")
    return figure


def chance_figure(result):
    """The scores next to the baseline (left), and the permutation null with the observed
    score (right)."""
    import plotly.graph_objects as go
    from plotly.subplots import make_subplots

    figure = make_subplots(rows=1, cols=2, subplot_titles=(
        "separator and baseline (split 1, test rows)", "permutation null distribution"))
    m, b = result.metrics, result.baseline
    if result.task == "classification":
        names = ["accuracy", "majority-class baseline", "balanced accuracy",
                 "Matthews correlation"]
        values = [m["accuracy"], b["accuracy"], m["balanced_accuracy"], m["mcc"]]
        low, high = m["mcc_ci"]
        error_plus = [0, 0, 0, high - m["mcc"]]
        error_minus = [0, 0, 0, m["mcc"] - low]
        statistic = "Matthews correlation"
    else:
        names = ["R^2", "R^2 of the training mean"]
        values = [m["r2"], b["r2"]]
        low, high = m["r2_ci"]
        error_plus = [high - m["r2"], 0]
        error_minus = [m["r2"] - low, 0]
        statistic = "R^2"
    colours = [PALETTE[0], GREY, PALETTE[0], PALETTE[2]][: len(names)]
    figure.add_trace(go.Bar(
        x=names, y=values, marker_color=colours, showlegend=False,
        error_y={"type": "data", "symmetric": False, "array": error_plus,
                 "arrayminus": error_minus},
        hovertemplate="%{x}: %{y:.3f}<extra></extra>"), row=1, col=1)
    scores = np.asarray(result.permutation_scores, dtype=float)
    if len(scores):
        figure.add_trace(go.Histogram(x=scores, nbinsx=min(40, max(5, len(scores) // 5)),
                                      marker_color=GREY, name="permuted labels",
                                      hovertemplate="%{x}: %{y} permutations<extra></extra>"),
                         row=1, col=2)
        observed = result.permutation_observed
        if observed is not None:
            figure.add_vline(x=observed, line_color=PALETTE[3], row=1, col=2,
                             annotation_position="top left",
                             annotation_text=f"observed {observed:.3f}, "
                                             f"p = {result.permutation_p:.3g}")
    else:
        figure.add_annotation(text="no permutation test", showarrow=False, row=1, col=2,
                              x=0.5, y=0.5, xref="x2 domain", yref="y2 domain")
    apply_style(figure, title=f"{result.target}: beats chance: {result.beats_chance_text}")
    figure.update_xaxes(title_text=f"test {statistic}", row=1, col=2)
    figure.update_yaxes(title_text="permutations", row=1, col=2)
    figure.update_layout(bargap=0.2)
    return figure


def decision_figure(result, table=None, *, feature: str | None = None,
                    class_label=None, hover: list[str] | None = None,
                    max_points: int = MAX_POINTS):
    """Each row's decision score (the equation's left side minus its constant, or the
    machine's decision value) against a feature or the row order, coloured by actual class,
    with the threshold at 0."""
    import plotly.graph_objects as go

    decision = result.decision
    if decision is None:
        raise StepError("this separator result holds no decision scores to draw.")
    scores = np.asarray(decision.scores, dtype=float)
    column_word = ""
    if scores.ndim == 2:
        labels = list(result.classes)
        pick = 0 if class_label is None else _class_index(labels, class_label)
        scores = scores[:, pick]
        column_word = f" ({labels[pick]} against the rest)"
        colour_codes = np.asarray(decision.labels)
        colour_names = [str(v) for v in labels]
    else:
        colour_codes = np.asarray(decision.labels)
        colour_names = [str(v) for v in result.classes]
    n = len(scores)
    x, x_title = _x_values(result, table, feature, n)
    shown = np.arange(n)
    if n > max_points:
        shown = np.sort(np.random.default_rng(0).choice(n, max_points, replace=False))
    hover_text = _hover_text(table, decision.rows[shown], hover)
    figure = go.Figure()
    for code, name in enumerate(colour_names):
        mine = shown[colour_codes[shown] == code]
        if len(mine) == 0:
            continue
        keep = np.isin(shown, mine)
        figure.add_trace(go.Scattergl(
            x=x[mine], y=scores[mine], mode="markers", name=f"{result.target} = {name}",
            marker={"size": 5, "color": CLASS_COLOURS[code % len(CLASS_COLOURS)],
                    "opacity": 0.7},
            customdata=np.array([_plain_id(v) for v in decision.row_ids[mine]],
                                dtype=object)[:, None],
            text=None if hover_text is None else [hover_text[i] for i in np.flatnonzero(keep)],
            hovertemplate=("row %{customdata[0]}<br>score %{y:.4g}<br>" + x_title
                           + " %{x}" + ("<br>%{text}" if hover_text is not None else "")
                           + "<extra></extra>")))
    figure.add_hline(y=0, line_dash="dash", line_color="#1f2328",
                     annotation_text="threshold", annotation_position="top left")
    sampled = f" (a sample of {len(shown)} of {n} rows)" if len(shown) < n else ""
    equation = _equation_for(result, class_label)
    if equation:
        sampled += f"<br><sup>{escaped(equation)}</sup>"
    apply_style(figure, title=f"{result.target}: decision score{column_word}{sampled}",
                x_title=x_title, y_title=decision.source, legend_title="actual class")
    return figure


def predicted_figure(result, table=None, *, hover: list[str] | None = None,
                     max_points: int = MAX_POINTS):
    """For a numeric target: the model's prediction against the actual value, with y = x."""
    import plotly.graph_objects as go

    decision = result.decision
    figure = go.Figure()
    if decision is None:
        return figure
    actual = np.asarray(decision.labels, dtype=float)
    predicted = np.asarray(decision.scores, dtype=float)
    n = len(actual)
    shown = np.arange(n)
    if n > max_points:
        shown = np.sort(np.random.default_rng(0).choice(n, max_points, replace=False))
    hover_text = _hover_text(table, decision.rows[shown], hover)
    figure.add_trace(go.Scattergl(
        x=actual[shown], y=predicted[shown], mode="markers",
        marker={"size": 5, "color": PALETTE[0], "opacity": 0.7},
        customdata=np.array([_plain_id(v) for v in decision.row_ids[shown]],
                            dtype=object)[:, None], text=hover_text, name="rows",
        hovertemplate="row %{customdata[0]}<br>actual %{x}<br>predicted %{y:.4g}"
                      + ("<br>%{text}" if hover_text is not None else "") + "<extra></extra>"))
    low, high = float(np.min(actual)), float(np.max(actual))
    figure.add_trace(go.Scatter(x=[low, high], y=[low, high], mode="lines",
                                line={"dash": "dash", "color": "#1f2328"}, name="y = x"))
    apply_style(figure, title=f"{result.target}: predicted against actual",
                x_title=f"actual {result.target}", y_title=f"predicted {result.target}")
    return figure


def _equation_for(result, class_label) -> str:
    """The text of the equation whose left side the scores are (shortened for a title)."""
    equation = result.equation
    if result.equations:
        labels = list(result.classes)
        pick = 0 if class_label is None else _class_index(labels, class_label)
        equation = result.equations[pick]
    text = getattr(equation, "text", "") if equation is not None else ""
    return text if len(text) <= 140 else text[:137] + "..."




def _class_index(labels: list, wanted) -> int:
    for i, v in enumerate(labels):
        if v == wanted or str(v) == str(wanted):
            return i
    raise StepError(f"class {wanted!r} is not one of {', '.join(map(str, labels))}.")


def _x_values(result, table, feature: str | None, n: int):
    if feature is None:
        return np.arange(n), "row order"
    if table is None:
        raise StepError(f"to draw the score against {feature!r} the table is needed.")
    rows = np.asarray(result.decision.rows)
    names = [c.name for c in table.columns]
    if feature not in names:
        raise StepError(f"{table.name}: no column named {feature!r} to draw the score "
                        "against; name a numeric or flag column.")
    info = table.column(feature)
    if info.dtype in ("integer", "real", "big integer", "rational", "boolean"):
        return table.numeric(feature)[rows], feature
    return np.array([str(v) for v in table.frame[feature].to_numpy()[rows]]), feature


def _hover_text(table, rows: np.ndarray, hover: list[str] | None):
    if not hover or table is None:
        return None
    parts = []
    for name in hover:
        table.column(name)
        values = table.frame[name].to_numpy()[rows]
        parts.append([f"{name} = {v}" for v in values])
    return ["<br>".join(items) for items in zip(*parts)]


def _plain_id(value):
    if isinstance(value, np.integer):
        return int(value)
    return value if isinstance(value, (int, str)) else str(value)
