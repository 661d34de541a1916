"""A study run rendered as one self-contained HTML file that works offline.

The file carries plotly's JavaScript once, inline, and loads nothing from the network: no
scripts, styles, fonts or MathJax from elsewhere (a Content-Security-Policy in the page says
so to the browser as well). Equations are plain monospace text. Every string that came from
the table or from the user (column names, row ids, categories, titles, notes, error messages)
is escaped, so a column named ``<script>`` shows as text. The study itself is embedded at the
end, so a collaborator can save it and re-run it to the same numbers.
"""

from __future__ import annotations

import functools
import html
import json
import math
import re
import shlex
import urllib.parse
from pathlib import Path

from analysis.steps import KIND_TITLES
from analysis.study import StepOutcome, StudyRun, study_to_json, write_text_file

CAVEAT = (
    "Everything below was found in the rows of this one table. A relation that holds on every "
    "row, a bound that no row breaks, a separator that beats chance: each is a conjecture the "
    "table supports, not a proof. Objects outside the table may break it, and a separator's "
    "accuracy was measured on held-out rows of this table only."
)
# Row ids listed in full up to this many; longer lists are cut with a count of the rest.
MAX_IDS = 20
# Rows of long tables (outliers, sweeps, relations) shown in the report.
MAX_ROWS = 50
# A list or table longer than this is folded, here and on the page: a list shows a line with
# its count and opens to every item; a table shows this many rows and opens to the rest.
FOLD_LIMIT = 30
FIGURE_HEIGHT = "460px"

# The page may run its own inline scripts and styles and nothing else: no network requests.
_POLICY = ("default-src 'none'; script-src 'unsafe-inline' 'unsafe-eval'; "
           "style-src 'unsafe-inline'; img-src data: blob:; font-src data:")

_CSS = """
:root { --ink: #1d232b; --muted: #5b6570; --line: #d9dee4; --paper: #ffffff;
        --wash: #f4f6f8; --accent: #2f5d8a; --bad: #9b2c2c; --bad-wash: #fbeeee;
        --note-wash: #fff8e6; --note-line: #e4c77a; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--wash); color: var(--ink);
       font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; }
main { max-width: 1080px; margin: 0 auto; padding: 24px 28px 48px; background: var(--paper);
       min-height: 100vh; }
h1 { font-size: 1.6em; margin: 0.2em 0 0.4em; }
h2 { font-size: 1.25em; margin: 0; }
h3 { font-size: 1.02em; margin: 1.2em 0 0.4em; color: var(--muted); }
code, pre, .mono { font-family: ui-monospace, "DejaVu Sans Mono", Menlo, Consolas, monospace;
                   font-size: 0.92em; }
pre { background: var(--wash); border: 1px solid var(--line); border-radius: 4px;
      padding: 10px 12px; overflow-x: auto; white-space: pre-wrap; }
pre.equation { background: #eef3f8; border-color: #c5d5e6; font-size: 1em; }
dl.facts { display: grid; grid-template-columns: max-content 1fr; gap: 2px 16px; margin: 0; }
dl.facts dt { color: var(--muted); }
dl.facts dd { margin: 0; overflow-wrap: anywhere; }
.caveat { border-left: 4px solid var(--note-line); background: var(--note-wash);
          padding: 10px 14px; margin: 18px 0; }
.warning { border-left: 4px solid var(--note-line); padding: 4px 12px; margin: 6px 0; }
.error { border-left: 4px solid var(--bad); background: var(--bad-wash); color: var(--bad);
         padding: 10px 14px; margin: 10px 0; }
section.step { border-top: 2px solid var(--line); margin-top: 28px; padding-top: 14px; }
.step-head { display: flex; align-items: baseline; gap: 12px; flex-wrap: wrap; }
.kind { color: var(--muted); font-size: 0.9em; }
.settings { color: var(--muted); font-size: 0.88em; margin: 4px 0 8px; }
table.data { border-collapse: collapse; margin: 6px 0 12px; font-size: 0.92em; }
table.data th, table.data td { border-bottom: 1px solid var(--line); padding: 3px 10px;
                               text-align: left; vertical-align: top; }
table.data th { background: var(--wash); font-weight: 600; }
table.data td.num { text-align: right; font-variant-numeric: tabular-nums; }
.verdict { font-weight: 600; }
.verdict.good { color: #276237; }
.verdict.weak { color: var(--bad); }
figure { margin: 12px 0 20px; }
figcaption { color: var(--muted); font-size: 0.92em; margin-bottom: 4px; }
nav ol { margin: 4px 0; padding-left: 1.6em; }
a { color: var(--accent); }
footer { border-top: 2px solid var(--line); margin-top: 36px; padding-top: 14px; }
.cut { color: var(--muted); }
details.fold > summary { color: var(--accent); cursor: pointer; }
"""


class _Html(str):
    """Text that is already HTML (built here from escaped parts); left alone by :func:`_e`."""


def _e(value) -> str:
    """Escape anything for HTML, unless it is already :class:`_Html`."""
    if isinstance(value, _Html):
        return value
    return html.escape(_text(value), quote=True)


def _text(value) -> str:
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return "-"
        return f"{value:.4g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_text(v) for v in value)
    return str(value)


@functools.lru_cache(maxsize=1)
def _plotly_js() -> str:
    from plotly.offline import get_plotlyjs

    # The bundle holds no closing script tag today; make sure one never ends our <script>.
    return re.sub(r"</(script)", r"<\\/\1", get_plotlyjs(), flags=re.IGNORECASE)


# ----------------------------------------------------------------------------------------
# Entry points


def report_html(run: StudyRun, *, table=None) -> str:
    """The run as one self-contained HTML page (a string).

    ``table`` is the table the figures draw row details from; by default the table the run
    used. Figures come from :func:`analysis.figures.figures_for`, so they match the app's.
    """
    table = table if table is not None else run.source_table
    study = run.study
    title = study.title or f"Study of {run.table.name}"
    figures_html: list[str] = []
    for outcome in run.outcomes:
        figures_html.append(_step_section(outcome, table))
    body = [
        "<main>",
        _header(run, title),
        _contents(run),
        *figures_html,
        _footer(run),
        "</main>",
    ]
    head = (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        f"<meta http-equiv=\"Content-Security-Policy\" content=\"{_POLICY}\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<title>{_e(title)}</title>\n<style>{_CSS}</style>\n"
    )
    scripts = ""
    if any("plotly-graph-div" in part for part in figures_html):
        scripts = f"<script type=\"text/javascript\">{_plotly_js()}</script>\n"
    return head + scripts + "</head>\n<body>\n" + "\n".join(body) + "\n</body>\n</html>\n"


def write_report(run: StudyRun, path: str | Path, *, table=None) -> None:
    """Write :func:`report_html` to ``path`` (UTF-8, replacing the file in one move).

    Refuses (StudyError) to write over the table the study ran on.
    """
    write_text_file(path, report_html(run, table=table),
                    keep_safe=(run.table.name, run.table.digest))


# ----------------------------------------------------------------------------------------
# Page parts


def _header(run: StudyRun, title: str) -> str:
    info = run.table
    facts = [
        ("table", _Html(f"<span class=\"mono\">{_e(info.name)}</span>")),
        ("sha256", _Html(f"<span class=\"mono\">{_e(info.digest)}</span>")),
        ("rows", info.rows),
        ("id column", info.id_column or "none (rows are numbered from 0)"),
        ("steps", f"{len(run.outcomes)}, of which {sum(o.ok for o in run.outcomes)} ran"),
    ]
    if run.study.table_settings.roles:
        facts.append(("roles set by hand", ", ".join(
            f"{column}: {role}" for column, role in run.study.table_settings.roles)))
    parts = [f"<h1>{_e(title)}</h1>", _facts(facts),
             f"<p class=\"caveat\"><strong>Read this first.</strong> {_e(CAVEAT)}</p>"]
    parts.extend(f"<p class=\"warning\">{_e(w)}</p>" for w in run.warnings)
    return "<header>\n" + "\n".join(parts) + "\n</header>"


def _contents(run: StudyRun) -> str:
    items = []
    for outcome in run.outcomes:
        mark = "" if outcome.ok else " (could not run)"
        items.append(f"<li><a href=\"#step-{outcome.index + 1}\">{_e(outcome.title)}</a>"
                     f"{_e(mark)}</li>")
    return "<nav><h3>Steps</h3><ol>" + "".join(items) + "</ol></nav>"


def _footer(run: StudyRun) -> str:
    data = study_to_json(run.study)
    text = json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False)
    stem = Path(run.table.name).stem or "study"
    study_file = f"{stem}.study.json"
    command = (f"python -m analysis run {shlex.quote(study_file)} "
               f"--table {shlex.quote(run.table.name)} --out report.html")
    href = "data:application/json;charset=utf-8," + urllib.parse.quote(text, safe="")
    return (
        "<footer>\n<h2>Re-run this study</h2>\n"
        f"<p>Save the study (<a download=\"{_e(study_file)}\" href=\"{_e(href)}\">"
        f"{_e(study_file)}</a>) next to the table <span class=\"mono\">{_e(run.table.name)}"
        "</span>, then run:</p>\n"
        f"<pre>{_e(command)}</pre>\n"
        "<p>The same study on the same table gives the same numbers; the study records the "
        "table's sha256 digest and warns when the table differs.</p>\n"
        "<details><summary>The study</summary>\n"
        f"<pre>{_e(text)}</pre>\n</details>\n"
        f"<script type=\"application/json\" id=\"study-json\">{_script_json(data)}</script>\n"
        "<p class=\"kind\">Made by Invariant Scout.</p>\n</footer>"
    )


def _script_json(data) -> str:
    """JSON that cannot end the script element it sits in (nor open a comment)."""
    text = json.dumps(data, ensure_ascii=False, allow_nan=False)
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def _step_section(outcome: StepOutcome, table) -> str:
    number = outcome.index + 1
    kind_title = KIND_TITLES.get(outcome.kind, outcome.kind)
    head = (f"<div class=\"step-head\"><h2>{number}. {_e(outcome.title)}</h2>"
            f"<span class=\"kind\">{_e(kind_title)} step</span></div>")
    settings = ", ".join(f"{name} = {_setting(value)}" for name, value in outcome.params.items())
    parts = [head, f"<p class=\"settings mono\">{_e(settings)}</p>"]
    if not outcome.ok:
        what = "An internal error stopped this step" if outcome.internal else \
            "This step could not run"
        parts.append(f"<p class=\"error\">{_e(what)}: {_e(outcome.error)}</p>")
    else:
        result = outcome.result
        data = _result_json(result)
        renderer = RENDERERS.get(outcome.kind)
        if renderer is not None and data is not None:
            try:
                parts.append(renderer(data))
            except Exception as exc:  # noqa: BLE001 - show what we can of the step
                parts.append(f"<p class=\"error\">Part of this step could not be shown "
                             f"({_e(type(exc).__name__)}: {_e(exc)}).</p>")
        if outcome.kind != "overview":  # the overview's summary repeats its column table
            parts.append(f"<h3>Summary</h3><pre>{_e(_summary(result))}</pre>")
        notes = data.get("notes") if isinstance(data, dict) else None
        if notes:
            parts.append("<h3>Notes</h3><ul>" + "".join(f"<li>{_e(n)}</li>" for n in notes)
                         + "</ul>")
        parts.append(_figures(result, table, number))
    return f"<section class=\"step\" id=\"step-{number}\">\n" + "\n".join(parts) + "\n</section>"


def _setting(value) -> str:
    if isinstance(value, str):
        return value
    return json.dumps(value, ensure_ascii=False)


def _result_json(result):
    try:
        return result.to_json()
    except Exception:  # noqa: BLE001 - the summary and figures may still be shown
        return None


def _summary(result) -> str:
    try:
        return result.summary()
    except Exception as exc:  # noqa: BLE001
        return f"(no summary: {type(exc).__name__}: {exc})"


def _figures(result, table, number: int) -> str:
    from analysis.figures import figures_for

    try:
        figures = figures_for(result, table)
    except Exception as exc:  # noqa: BLE001 - a figure that fails must not lose the report
        return (f"<p class=\"error\">The figures of this step could not be drawn "
                f"({_e(type(exc).__name__)}: {_e(exc)}).</p>")
    parts = []
    for position, (caption, figure) in enumerate(figures, start=1):
        try:
            div = figure.to_html(
                full_html=False, include_plotlyjs=False, include_mathjax=False,
                div_id=f"figure-{number}-{position}", default_height=FIGURE_HEIGHT,
                config={"displaylogo": False, "responsive": True},
            )
        except Exception as exc:  # noqa: BLE001
            div = (f"<p class=\"error\">This figure could not be drawn "
                   f"({_e(type(exc).__name__)}: {_e(exc)}).</p>")
        parts.append(f"<figure><figcaption>{_e(caption)}</figcaption>{div}</figure>")
    return "\n".join(parts)


# ----------------------------------------------------------------------------------------
# Small builders


def _facts(pairs) -> str:
    rows = "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in pairs)
    return f"<dl class=\"facts\">{rows}</dl>"


def _table(headers, rows, *, numeric=(), limit: int = MAX_ROWS) -> str:
    """A table of at most ``limit`` rows; past :data:`FOLD_LIMIT` rows the rest is folded
    under a line that counts them."""
    rows = list(rows)
    head = "".join(f"<th>{_e(h)}</th>" for h in headers)
    body = []
    for row in rows[:limit]:
        cells = []
        for position, value in enumerate(row):
            css = " class=\"num\"" if position in numeric else ""
            cells.append(f"<td{css}>{_e(value)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    cut = ""
    if len(rows) > limit:
        cut = f"<p class=\"cut\">The first {limit} of {len(rows)} rows are shown.</p>"
    shown = f"<table class=\"data\"><thead><tr>{head}</tr></thead>" \
        f"<tbody>{''.join(body[:FOLD_LIMIT])}</tbody></table>"
    if len(body) > FOLD_LIMIT:
        shown += (f"<details class=\"fold\"><summary>{len(body) - FOLD_LIMIT} more rows"
                  f"</summary><table class=\"data\"><thead><tr>{head}</tr></thead>"
                  f"<tbody>{''.join(body[FOLD_LIMIT:])}</tbody></table></details>")
    return shown + cut


def _names(names, noun: str) -> _Html:
    """Names (features, columns) in one line; more than :data:`FOLD_LIMIT` of them are
    folded under a line that counts them."""
    names = [str(n) for n in names or []]
    if not names:
        return _Html("none")
    listed = f"<span class=\"mono\">{_e(', '.join(names))}</span>"
    if len(names) <= FOLD_LIMIT:
        return _Html(listed)
    return _Html(f"<details class=\"fold\"><summary>{len(names)} {_e(noun)}</summary>"
                 f"{listed}</details>")


def _ids(ids, limit: int = MAX_IDS) -> _Html:
    """Row ids as monospace text, cut after ``limit`` with a count of the rest."""
    ids = list(ids or [])
    if not ids:
        return _Html("none")
    shown = ", ".join(_e(i) for i in ids[:limit])
    rest = f" <span class=\"cut\">and {len(ids) - limit} more</span>" if len(ids) > limit else ""
    return _Html(f"<span class=\"mono\">{shown}</span>{rest}")


def _code(text) -> _Html:
    return _Html(f"<code>{_e(text)}</code>")


def _generic_rows(items: list) -> tuple[list, list]:
    """Headers and rows for a list of flat JSON objects (keys in first-seen order)."""
    headers: list[str] = []
    for item in items:
        for key in item:
            if key not in headers:
                headers.append(key)
    return headers, [[item.get(h) for h in headers] for item in items]


# ----------------------------------------------------------------------------------------
# One renderer per step kind, reading the result's JSON (the fields in the design notes)


def _overview(data: dict) -> str:
    rows = []
    for c in data.get("columns", []):
        if c.get("min") is not None:
            shown = f"{_text(c['min'])} .. {_text(c['max'])}"
        else:
            shown = ", ".join(f"{v} ({n})" for v, n in c.get("common", []))
        rows.append([c.get("name"), c.get("role"), c.get("dtype"), c.get("missing"),
                     c.get("distinct"), shown])
    parts = [_facts([("rows", data.get("rows")), ("columns", len(data.get("columns", [])))]),
             "<h3>Columns</h3>",
             _table(["column", "role", "type", "missing", "distinct", "range or common values"],
                    rows, numeric=(3, 4), limit=500)]
    pairs = data.get("correlations") or []
    if pairs:
        parts.append("<h3>Strongly correlated pairs</h3>")
        parts.append(_table(["column", "column", "Pearson r"],
                            [[p.get("a"), p.get("b"), p.get("pearson")] for p in pairs],
                            numeric=(2,)))
        if data.get("correlation_rows"):
            parts.append(f"<p>Computed on a random sample of {_e(data['correlation_rows'])} "
                         f"of the {_e(data.get('rows'))} rows.</p>")
    warnings = data.get("warnings") or []
    parts.extend(f"<p class=\"warning\">{_e(w)}</p>" for w in warnings)
    return "\n".join(parts)


def _projection(data: dict) -> str:
    facts = [("method", data.get("method")),
             ("rows shown", data.get("n_projected", len(data.get("coordinates", []))))]
    ratio = data.get("explained_variance_ratio")
    if ratio:
        facts.append(("explained variance ratio", ", ".join(_text(r) for r in ratio[:6])))
    if data.get("features"):
        facts.append(("features", _names(data["features"], "features")))
    return _warnings(data) + _facts(facts)


def _clustering(data: dict) -> str:
    facts = [("method", data.get("method")), ("clusters (k)", data.get("k"))]
    if data.get("silhouette") is not None:
        facts.append(("silhouette", data["silhouette"]))
    if data.get("reason"):
        facts.append(("why this choice", data["reason"]))
    agreement = data.get("agreement")
    if isinstance(agreement, dict):
        label = agreement.get("column") or data.get("compare") or "the label"
        facts.append((f"agreement with {_text(label)}",
                      f"adjusted Rand index {_text(agreement.get('ari'))}, normalized mutual "
                      f"information {_text(agreement.get('nmi'))}"))
    parts = [_warnings(data), _facts(facts)]
    profiles = [p for p in data.get("profiles") or [] if isinstance(p, dict)]
    if profiles:
        parts.append("<h3>What sets each cluster apart</h3>")
        parts.append(_table(
            ["cluster", "rows", "distinguished by"],
            [[p.get("cluster"), p.get("size"), "; ".join(map(str, p.get("distinguished_by")
                                                              or []))] for p in profiles],
            numeric=(1,)))
    sweep = data.get("sweep") or []
    if sweep and all(isinstance(s, dict) for s in sweep):
        headers, rows = _generic_rows(sweep)
        numeric = tuple(i for i, h in enumerate(headers)
                        if all(isinstance(r[i], (int, float)) for r in rows if r[i] is not None))
        parts.append("<h3>Methods and k tried</h3>")
        parts.append(_table(headers, rows, numeric=numeric))
    return "\n".join(parts)


_METRIC_WORDS = {
    "accuracy": "accuracy",
    "balanced_accuracy": "balanced accuracy",
    "mcc": "Matthews correlation (MCC)",
    "mcc_ci": "MCC 95% interval",
    "r2": "R\u00b2",
    "r2_ci": "R\u00b2 95% interval",
    "mean_absolute_error": "mean absolute error",
    "exact": "share predicted exactly",
    "exact_ci": "share predicted exactly, 95% interval",
    "formula_exact": "share the closest formula gets exactly",
}


def _separator(data: dict) -> str:
    parts = []
    follows = data.get("target_follows")
    if isinstance(follows, dict):
        parts.append(f"<p class=\"verdict\">Finding: the target follows from the features: "
                     f"{_code(follows.get('relation'))} holds on all {_e(follows.get('holds_on'))}"
                     " objects used, so the verdict below says nothing new.</p>")
    parts.append(f"<p class=\"verdict {_verdict_class(data)}\">{_e(_verdict(data))}</p>")
    for warning in data.get("warnings") or []:
        parts.append(f"<p class=\"settings\">Warning: {_e(warning)}</p>")
    if data.get("beats_chance_rule"):
        parts.append(f"<p class=\"settings\">{_e(data['beats_chance_rule'])}</p>")
    rows = []
    for name, value in (data.get("metrics") or {}).items():
        rows.append([_METRIC_WORDS.get(name, name.replace("_", " ")), _measure(value)])
    for name, value in (data.get("baseline") or {}).items():
        words = _METRIC_WORDS.get(name, name.replace("_", " "))
        rows.append([f"{words} of the baseline (same test rows)", _measure(value)])
    if data.get("permutation_p") is not None:
        rows.append(["permutation p-value", data["permutation_p"]])
    for key, label in (("train_rows", "training rows"), ("test_rows", "test rows")):
        value = data.get(key)
        if value is not None:
            rows.append([label, len(value) if isinstance(value, list) else value])
    if rows:
        parts.append(_table(["measure", "value"], rows, numeric=(1,)))
    if data.get("left_out_columns"):
        parts.append(_facts([("columns left out of the features",
                              _names(data["left_out_columns"], "columns"))]))
    equations = [e for e in [data.get("equation"), *(data.get("equations") or [])]
                 if isinstance(e, dict)]
    if equations:
        parts.append("<h3>Separating equation" + ("s" if len(equations) > 1 else "") + "</h3>")
    for equation in equations:
        parts.append(f"<pre class=\"equation\">{_e(_equation_text(equation))}</pre>")
        if equation.get("in_columns"):
            from analysis.separator_equation import in_columns_sentence

            parts.append(f"<p>{_e(in_columns_sentence(equation['in_columns']))}</p>")
        positive = equation.get("positive_class")
        if positive is not None:
            parts.append(f"<p>A row is predicted {_code(_setting(positive))} exactly when this "
                         "holds.</p>")
        violating = equation.get("violating_rows") or []
        count = equation.get("violations", len(violating))
        parts.append(f"<p>Rows on the wrong side ({_e(count)}): {_ids(violating)}</p>")
        if equation.get("positives") is not None:
            from analysis.separator_equation import constant_rule_sentence

            rule = constant_rule_sentence(positive, equation["rows_checked"],
                                          equation["positives"], count)
            parts.append(f"<p>{_e(rule)}</p>")
    formula = data.get("formula")
    if isinstance(formula, dict):
        parts.append("<h3>Closest formula for the target</h3>")
        parts.append(f"<pre class=\"equation\">{_e(_equation_text(formula))}</pre>")
        parts.append(f"<p>Objects it does not get exactly right ({_e(formula.get('rows_off'))}):"
                     f" {_ids(formula.get('off_rows'))}</p>")
    surrogate = data.get("surrogate")
    if isinstance(surrogate, dict):
        parts.append("<h3>Quadratic stand-in for the kernel machine</h3>")
        parts.append(f"<pre class=\"equation\">{_e(_equation_text(surrogate))}</pre>")
        if surrogate.get("agreement") is not None:
            parts.append(f"<p>It agrees with the machine on "
                         f"{_e(_text(100 * surrogate['agreement']))}% of rows.</p>")
    if not equations and not isinstance(formula, dict) and not isinstance(surrogate, dict):
        parts.append("<p>No equation was found.</p>")
    importance = [i for i in data.get("importance") or [] if isinstance(i, dict)]
    if importance:
        parts.append("<h3>What the prediction rests on</h3>")
        parts.append("<p>Permutation importance on the test rows: how much the score drops "
                     "when a feature (or a whole matrix column) is shuffled, with the spread "
                     "over repeats.</p>")
        parts.append(_table(["feature", "drop in score", "spread"],
                            [[_code(i.get("feature")), i.get("mean"), i.get("std")]
                             for i in importance], numeric=(1, 2)))
    opened = [p for p in data.get("open_predictions") or [] if isinstance(p, dict)]
    if opened:
        parts.append(f"<h3>Predictions for {_e(len(opened))} objects with no known value</h3>")
        parts.append("<p>Predictions to check by hand, not values.</p>")
        parts.append(_table(["object", "prediction", "confidence", "interval", "inside it"],
                            [[p.get("row"), p.get("prediction"), p.get("confidence"),
                              p.get("interval"), p.get("inside")] for p in opened[:50]],
                            numeric=(2,)))
    mispredicted = data.get("mispredicted")
    if mispredicted:
        parts.append(f"<p>Mispredicted test rows ({len(mispredicted)}): "
                     f"{_ids(mispredicted)}</p>")
    parts.extend(f"<p class=\"warning\">{_e(w)}</p>" for w in data.get("warnings") or [])
    return "\n".join(parts)


def _measure(value):
    if isinstance(value, list) and len(value) == 2:
        return f"[{_text(value[0])}, {_text(value[1])}]"
    return value


def _verdict(data: dict) -> str:
    """The separator's verdict in words: the step's own when it gives one."""
    stated = data.get("beats_chance", data.get("verdict"))
    if isinstance(stated, (str, bool)) and stated != "":
        answer = stated if isinstance(stated, str) else ("yes" if stated else "no")
        return f"Beats chance: {answer}."
    p = data.get("permutation_p")
    interval = (data.get("metrics") or {}).get("mcc_ci")
    if p is None and not interval:
        return "No test against chance was made."
    beats = (p is None or p < 0.05) and (not interval or (interval[0] or 0) > 0)
    detail = []
    if p is not None:
        detail.append(f"permutation p = {_text(p)}")
    if interval:
        detail.append(f"MCC 95% interval [{_text(interval[0])}, {_text(interval[1])}]")
    return f"Beats chance: {'yes' if beats else 'no'} ({'; '.join(detail)})."


def _verdict_class(data: dict) -> str:
    return "good" if _verdict(data).startswith("Beats chance: yes") else "weak"


def _equation_text(equation: dict) -> str:
    if equation.get("text"):
        return str(equation["text"])
    terms = " + ".join(f"{t.get('coef')}*{t.get('feature', t.get('column'))}"
                       for t in equation.get("terms", []))
    return f"{terms} {equation.get('relation', '')} {equation.get('constant', '')}"


def _relations(data: dict) -> str:
    parts = []
    relations = data.get("relations") or []
    bounds = data.get("bounds") or []
    consistent = any(s.get("consistent_with") for s in (*relations, *bounds))
    extra = ["consistent rows known by an interval"] if consistent else []

    def also(statement):
        return [len(statement.get("consistent_with") or [])] if consistent else []

    parts.append("<h3>Exact relations</h3>")
    if relations:
        parts.append(_table(
            ["relation", "holds on", "rows breaking it", *extra],
            [[_code(_equation_text(r)), r.get("holds_on"), _ids(r.get("violations")), *also(r)]
             for r in relations],
            numeric=(1, 3)))
    else:
        parts.append("<p>No exact linear relation was found.</p>")
    approximate = data.get("approximate_relations") or []
    if approximate:
        parts.append("<h3>Relations that hold up to rounding (real-valued columns)</h3>")
        parts.append(_table(
            ["relation", "holds on", "rows breaking it"],
            [[_code(_equation_text(r)), r.get("holds_on"), _ids(r.get("violations"))]
             for r in approximate],
            numeric=(1,)))
    holding = [b for b in bounds if not b.get("violations")]
    near = [b for b in bounds if b.get("violations")]
    parts.append("<h3>Bounds that hold on every row</h3>")
    if holding:
        parts.append(_table(
            ["bound", "attained by (count)", "some rows attaining it", *extra],
            [[_code(_equation_text(b)), b.get("attained_count"), _ids(b.get("attained_by")),
              *also(b)] for b in holding], numeric=(1, 3)))
    else:
        parts.append("<p>No sharp bound was found.</p>")
    if near:
        parts.append("<h3>Bounds that all but a few rows obey</h3>")
        parts.append(_table(
            ["bound", "attained by (count)", "rows breaking it", *extra],
            [[_code(_equation_text(b)), b.get("attained_count"), _ids(b.get("violations")),
              *also(b)] for b in near], numeric=(1, 3)))
    if consistent:
        parts.append("<p>A row known only by an interval breaks a statement only when every "
                     "value in its interval does; otherwise it is consistent with it.</p>")
    congruences = data.get("congruences") or []
    if congruences:
        parts.append("<h3>Congruences</h3>")
        parts.append(_table(
            ["congruence", "holds on", "rows breaking it"],
            [[_code(c.get("text")), c.get("holds_on"), _ids(c.get("violations"))]
             for c in congruences], numeric=(1,)))
    return "\n".join(parts)


def _warnings(data: dict) -> str:
    """A step's warnings (rows or columns it lost), first in its section."""
    return "\n".join(f"<p class=\"warning\">{_e(w)}</p>" for w in data.get("warnings") or [])


def _outliers(data: dict) -> str:
    return _warnings(data) + _ranked(data)


def _ranked(data: dict) -> str:
    ranked = data.get("outliers") or []
    rows = []
    for position, item in enumerate(ranked, start=1):
        reasons = item.get("reasons") or []
        rows.append([item.get("rank", position), _Html(f"<span class=\"mono\">"
                                                       f"{_e(item.get('row'))}</span>"),
                     item.get("score"), "; ".join(map(str, reasons))])
    opened = [v for v in data.get("open_values") or [] if isinstance(v, dict)]
    if not rows and not opened:
        return "<p>No object stands out.</p>"
    parts = [_table(["rank", "row", "score", "why"], rows, numeric=(0, 2))] if rows else []
    if opened:
        parts.append(f"<p>{len(opened)} objects have an open value of "
                     f"{_e(data.get('target'))} that a confident prediction would settle "
                     "(predictions to check by hand, not values):</p>")
        parts.append(_table(
            ["row", "prediction", "chance of being right", "why"],
            [[_Html(f"<span class=\"mono\">{_e(v.get('row'))}</span>"), v.get("prediction"),
              v.get("confidence"), v.get("reason")] for v in opened], numeric=(2,)))
    return "\n".join(parts)


RENDERERS = {
    "overview": _overview,
    "projection": _projection,
    "clustering": _clustering,
    "separator": _separator,
    "relations": _relations,
    "outliers": _outliers,
}
