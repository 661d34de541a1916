"""The HTML report: self-contained, offline, escaped, and carrying its study for re-running."""

from __future__ import annotations

import hashlib
import html
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import plotly.graph_objects as go
import pytest
from plotly.offline import get_plotlyjs

import analysis.figures
from analysis.report import CAVEAT, FOLD_LIMIT, report_html, write_report
from analysis.study import Study, TableSettings, new_step, run_study, study_from_json
from analysis.table import load_table, read_table

TABLES = Path(__file__).resolve().parent.parent / "sample_tables"

HOSTILE_COLUMN = "<script>alert(1)</script>"
HOSTILE_ID = "<img src=x onerror=alert(2)>"
HOSTILE_CATEGORY = "</td><b>bold</b>"
HOSTILE_TITLE = "</title></script><script>alert(3)</script>"
HOSTILE_MISSING_COLUMN = "<svg onload=alert(4)>"
HOSTILE_CSV = (
    b"name,\"<script>alert(1)</script>\",b,kind\n"
    b"<img src=x onerror=alert(2)>,1,5,</td><b>bold</b>\n"
    b"y2,2,3,plain\n"
    b"y3,3,8,plain\n"
    b"y4,4,1,</td><b>bold</b>\n"
    b"y5,5,9,plain\n"
)

# Tags the report itself writes; anything else would have come from the table.
OWN_TAGS = {"html", "head", "meta", "title", "style", "script", "body", "main", "header",
            "nav", "h1", "h2", "h3", "ol", "ul", "li", "a", "p", "strong", "span", "dl", "dt",
            "dd", "section", "div", "pre", "code", "table", "thead", "tbody", "tr", "th",
            "td", "figure", "figcaption", "footer", "details", "summary"}


class _Page(HTMLParser):
    """Tags, attributes, visible text and script bodies of a page (Python's html.parser)."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []
        self.scripts: list[tuple[dict, str]] = []
        self._in_script: dict | None = None

    def handle_starttag(self, tag, attrs):
        attributes = dict(attrs)
        self.tags.append((tag, attributes))
        if tag == "script":
            self._in_script = attributes
            self.scripts.append((attributes, ""))

    def handle_endtag(self, tag):
        if tag == "script":
            self._in_script = None

    def handle_data(self, data):
        if self._in_script is not None:
            attributes, body = self.scripts[-1]
            self.scripts[-1] = (attributes, body + data)
        else:
            self.text.append(data)


def _parse(page: str) -> _Page:
    parser = _Page()
    parser.feed(page)
    parser.close()
    return parser


@pytest.fixture(scope="module")
def hostile():
    return read_table(HOSTILE_CSV, "hostile.csv", id_column="name")


def _hostile_run(table):
    study = Study(
        table=table.name, title=HOSTILE_TITLE, table_digest=table.digest,
        table_settings=TableSettings(id_column="name"),
        steps=(new_step("overview", title="<i>first look</i>"),
               new_step("projection", {"columns": [HOSTILE_MISSING_COLUMN]}),
               new_step("projection", {"method": "pca"})),
    )
    return run_study(study, table)


def _scatter_figures(result, table=None, **options):
    """Figures carrying the table's strings, standing in for any step's builder."""
    ids = [str(i) for i in table.row_ids]
    figure = go.Figure(go.Scatter(x=list(range(len(ids))), y=list(range(len(ids))),
                                  name=HOSTILE_COLUMN, text=ids, customdata=ids))
    figure.update_layout(title=HOSTILE_COLUMN)
    return [(f"{HOSTILE_COLUMN} by row", figure)]


@pytest.fixture(scope="module")
def hostile_page(hostile):
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(analysis.figures, "figures_for", _scatter_figures)
        return report_html(_hostile_run(hostile))


def test_hostile_strings_show_as_text_and_never_as_markup(hostile_page):
    page = _parse(hostile_page)
    tags = {tag for tag, _ in page.tags}
    assert tags <= OWN_TAGS, f"tags from the table leaked into the page: {tags - OWN_TAGS}"
    text = "".join(page.text)
    for hostile_text in (HOSTILE_COLUMN, HOSTILE_ID, HOSTILE_CATEGORY, HOSTILE_TITLE,
                         HOSTILE_MISSING_COLUMN, "<i>first look</i>"):
        assert hostile_text in text, f"{hostile_text!r} is not shown as text"
        assert hostile_text not in hostile_page, f"{hostile_text!r} appears unescaped"
    # The column name as the page source shows it: escaped by html.escape.
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in hostile_page
    assert "&lt;img src=x onerror=alert(2)&gt;" in hostile_page


def test_hostile_strings_in_scripts_stay_inside_their_json(hostile_page):
    page = _parse(hostile_page)
    for attributes, body in page.scripts:
        assert "src" not in attributes
        assert attributes.get("type") in ("text/javascript", "application/json", None)
        assert "alert(" not in body or "\\u003c" in body, "a table string ran as a script"
    # Every inline script body is what the report wrote: plotly, a figure call, or the study.
    kinds = [("plotly" if len(body) > 1_000_000 else attributes.get("type") or "figure")
             for attributes, body in page.scripts]
    assert kinds.count("plotly") == 1
    assert kinds.count("application/json") == 1


def test_no_network_loads(hostile_page):
    # Offline means: no element that fetches (script src, link href, img/iframe src), no CSS
    # import or font from elsewhere, no MathJax.
    assert not re.search(r"<script[^>]*\ssrc\s*=", hostile_page, re.IGNORECASE)
    assert not re.search(r"<link[^>]*\shref\s*=", hostile_page, re.IGNORECASE)
    assert not re.search(r"<(img|iframe|embed|object|source)\b", hostile_page, re.IGNORECASE)
    assert not re.search(r"@import|@font-face|url\(\s*['\"]?https?:", hostile_page)
    assert "MathJax.js" not in hostile_page and "cdn.plot.ly" not in _outside_plotly(
        hostile_page)
    page = _parse(hostile_page)
    policy = [a["content"] for t, a in page.tags
              if t == "meta" and a.get("http-equiv") == "Content-Security-Policy"]
    assert policy and "default-src 'none'" in policy[0]


def _outside_plotly(page: str) -> str:
    return page.replace(get_plotlyjs(), "")


def test_plotly_is_embedded_once_for_many_figures(hostile_page):
    bundle = get_plotlyjs()
    assert hostile_page.count(bundle[:2000]) == 1
    assert hostile_page.count("Plotly.newPlot(") == 2, "two steps ran, one figure each"


def test_a_report_without_figures_carries_no_plotly(hostile):
    study = Study(table=hostile.name, steps=(new_step("overview"),))
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(analysis.figures, "figures_for", lambda result, table=None: [])
        page = report_html(run_study(study, hostile))
    assert get_plotlyjs()[:2000] not in page
    assert "<script type=\"text/javascript\">" not in page


def test_the_report_states_the_caveat_and_the_table(hostile, hostile_page):
    text = " ".join("".join(_parse(hostile_page).text).split())
    assert "conjecture the table supports, not a proof" in CAVEAT
    assert " ".join(CAVEAT.split()) in text
    assert hostile.digest in text
    assert "hostile.csv" in text
    assert "rows5" in text.replace(" ", "")


def test_failed_steps_show_their_message_and_the_rest_show_results(hostile_page):
    text = "".join(_parse(hostile_page).text)
    assert "This step could not run" in text
    assert "no column named" in text
    assert text.count("This step could not run") == 1
    assert "PCA of 5 rows" in text
    # The overview's column table lists every column, the hostile one included.
    assert text.count(HOSTILE_COLUMN) >= 3


def test_the_embedded_study_reads_back_to_the_same_study(hostile):
    run = _hostile_run(hostile)
    page = _parse(report_html(run))
    bodies = [body for attributes, body in page.scripts
              if attributes.get("type") == "application/json"]
    assert len(bodies) == 1
    assert "</" not in bodies[0]
    assert study_from_json(json.loads(bodies[0])) == run.study
    text = "".join(page.text)
    assert "python -m analysis run hostile.study.json --table hostile.csv --out report.html" \
        in text


def test_a_report_with_real_figures(tmp_path):
    table_path = tmp_path / "fields.csv"
    table_path.write_bytes((TABLES / "quadratic_fields.csv").read_bytes())
    before = hashlib.sha256(table_path.read_bytes()).hexdigest()
    table = load_table(table_path)
    study = Study(table=table.name, table_digest=table.digest,
                  steps=(new_step("overview"),
                         new_step("projection", {"target": "class_number_one"}),
                         new_step("separator", {"target": "class_number_one",
                                                "columns": ["discriminant", "prime_divisors"],
                                                "permutations": 10, "repeats": 1})))
    run = run_study(study, table)
    assert run.ok, run.summary()
    out = tmp_path / "report.html"
    write_report(run, out)
    page = out.read_text(encoding="utf-8")
    figures = [figure for outcome in run.outcomes
               for figure in analysis.figures.figures_for(outcome.result, run.source_table)]
    assert figures, "the separator draws at least one figure"
    assert page.count("Plotly.newPlot(") == len(figures)
    assert page.count(get_plotlyjs()[:2000]) == 1
    for caption, _ in figures:
        assert f"<figcaption>{html.escape(caption)}</figcaption>" in page
    assert "explained variance ratio" in page
    assert hashlib.sha256(table_path.read_bytes()).hexdigest() == before


def _linear_table():
    """Objects with the flag big = (a + 2b >= 12), a rule a linear separator can state."""
    rows = ["name,a,b,big,same"]
    for i in range(80):
        a, b = (7 * i) % 10, (3 * i + i // 10) % 10
        rows.append(f"o{i},{a},{b},{str(a + 2 * b >= 12).lower()},one")
    return read_table("\n".join(rows).encode(), "linear.csv")


def test_separator_equation_verdict_and_a_failing_separator(tmp_path):
    table = _linear_table()
    study = Study(table=table.name, steps=(
        new_step("overview"),
        new_step("separator", {"target": "big", "permutations": 20, "repeats": 2}),
        new_step("separator", {"target": "same", "permutations": 20}),
        new_step("projection"),
    ))
    run = run_study(study, table)
    assert [o.ok for o in run.outcomes] == [True, True, False, True]
    assert "one class" in run.outcomes[2].error
    write_report(run, tmp_path / "r.html")
    page = (tmp_path / "r.html").read_text(encoding="utf-8")
    text = " ".join("".join(_parse(page).text).split())
    equation = run.outcomes[1].result.to_json()["equation"]
    # The equation is shown as monospace text, escaped (">=" becomes "&gt;="), exactly as the
    # step states it; the step's own tests check that it finds a + 2*b >= 12 here.
    assert f"<pre class=\"equation\">{html.escape(equation['text'])}</pre>" in page
    assert equation["text"] in text
    assert f"Rows on the wrong side ({equation['violations']})" in text
    assert "Beats chance: " in text
    assert "This step could not run: linear.csv: the target 'same' has one class" in text
    assert text.count("This step could not run") == 1
    assert "PCA of 80 rows" in text


def test_relations_and_bounds_with_the_rows_that_attain_them():
    # c = a + b on every row (built so); the row ids are markup that must stay text.
    ids = ["<b>x1</b>", "x2", "x3", "x4", "x5", "<u>x6</u>", "x7", "x8&amp;"]
    pairs = [(1, 2), (2, 3), (3, 5), (4, 4), (5, 1), (6, 9), (7, 2), (8, 8)]
    lines = ["name,a,b,c"] + [f"{i},{a},{b},{a + b}" for i, (a, b) in zip(ids, pairs)]
    table = read_table("\n".join(lines).encode(), "sums.csv", id_column="name")
    run = run_study(Study(table=table.name, steps=(new_step("relations"),)), table)
    assert run.ok, run.summary()
    data = run.outcomes[0].result.to_json()
    page = report_html(run)
    parsed = _parse(page)
    assert {tag for tag, _ in parsed.tags} <= OWN_TAGS
    text = "".join(parsed.text)
    assert data["relations"], "c = a + b holds on every row"
    for relation in data["relations"]:
        assert f"<code>{html.escape(relation['text'])}</code>" in page
    assert data["bounds"]
    rows = re.findall(r"<tr>(.*?)</tr>", page)
    for bound in data["bounds"]:
        row = next(r for r in rows if f"<code>{html.escape(bound['text'])}</code>" in r)
        for attained in bound["attained_by"][:20]:
            assert html.escape(str(attained)) in row, (bound["text"], attained)
    for hostile_id in ("<b>x1</b>", "<u>x6</u>", "x8&amp;"):
        assert hostile_id not in page.replace(html.escape(hostile_id), "")
    attained = {str(i) for b in data["bounds"] for i in b["attained_by"]}
    assert attained & {"<b>x1</b>", "<u>x6</u>"}, "a marked-up id attains some bound"
    assert all(i in text for i in attained)


def test_open_values_follow_the_objects_to_look_at():
    # planted truth: the flag is x > 10 on two groups of points 20 apart; blank flags are open
    rng = __import__("numpy").random.default_rng(4)
    lines = ["name,x,y,big"]
    for i in range(80):
        x = float(rng.normal(0 if i % 2 else 20, 1))
        flag = "" if i % 10 == 3 else str(x > 10)
        lines.append(f"o{i},{x:.3f},{rng.normal():.3f},{flag}")
    table = read_table("\n".join(lines).encode(), "open.csv", id_column="name")
    step = new_step("outliers", {"target": "big", "relations": False})
    run = run_study(Study(table=table.name, steps=(step,)), table)
    assert run.ok, run.summary()
    data = run.outcomes[0].result.to_json()
    assert data["open_values"], "the open flags sit deep inside their group"
    page = report_html(run)
    assert "a confident prediction would settle" in page
    rows = re.findall(r"<tr>(.*?)</tr>", page)
    for value in data["open_values"]:
        row = next(r for r in rows if f">{value['row']}<" in r)
        assert html.escape(value["reason"]) in row


class _Folds(HTMLParser):
    """Rows and items in view (outside every <details>), and the summary line of each fold."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.depth = 0
        self.in_view = 0
        self.summaries: list[str] = []
        self._summary: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        if tag == "details":
            self.depth += 1
        elif tag == "summary":
            self._summary = []
        elif tag in ("tr", "li") and not self.depth:
            self.in_view += 1

    def handle_endtag(self, tag):
        if tag == "details":
            self.depth -= 1
        elif tag == "summary" and self._summary is not None:
            self.summaries.append("".join(self._summary).strip())
            self._summary = None

    def handle_data(self, data):
        if self._summary is not None:
            self._summary.append(data)


def _wide_table(width: int, rows: int = 30):
    """A table of ``width`` integer invariants (seeded random digits), an id and a flag."""
    import numpy as np

    rng = np.random.default_rng(7)
    values = rng.integers(0, 10, size=(rows, width))
    lines = [",".join(["object", *(f"x{j}" for j in range(width)), "big"])]
    for i in range(rows):
        lines.append(",".join([f"o{i}", *map(str, values[i]),
                               "true" if values[i, 0] >= 5 else "false"]))
    return read_table(("\n".join(lines) + "\n").encode(), "wide.csv")


def test_a_study_of_four_thousand_feature_columns_keeps_its_report_readable():
    width = 4000
    table = _wide_table(width)
    study = Study(table="wide.csv", table_digest=table.digest,
                  steps=(new_step("overview"), new_step("projection", {"target": "big"})))
    run = run_study(study, table)
    assert run.ok, [o.error for o in run.outcomes]
    assert len(run.outcomes[1].result.features) == width  # every invariant but the target
    page = report_html(run)
    folds = _Folds()
    folds.feed(page)
    # the feature list is one line with its count, every name behind it
    assert f"{width} features" in folds.summaries, folds.summaries
    assert "x0, x1, x2" in page and "x3998, x3999" in page
    # the overview's column table: FOLD_LIMIT rows in view, the rest folded with a count
    assert any(s.endswith("more rows") for s in folds.summaries), folds.summaries
    # readable: a few hundred rows and items in view at most, whatever the width
    # (common practice: a page a reader scrolls through, not thousands of lines)
    assert folds.in_view <= 300, folds.in_view


def test_a_short_feature_list_stays_in_view():
    table = _wide_table(FOLD_LIMIT)
    study = Study(table="wide.csv", table_digest=table.digest,
                  steps=(new_step("projection", {"target": "big"}),))
    folds = _Folds()
    page = report_html(run_study(study, table))
    folds.feed(page)
    assert not [s for s in folds.summaries if s.endswith("features")], folds.summaries
    assert ", ".join(f"x{j}" for j in range(FOLD_LIMIT)) in page


def test_the_report_says_what_the_prediction_rests_on():
    # genus theory (Gauss): the class number is odd exactly when the discriminant has one
    # prime divisor, so that column carries the separator
    table = load_table(TABLES / "quadratic_fields.csv")
    step = new_step("separator", {"target": "class_number_odd", "repeats": 2})
    run = run_study(Study(table=table.name, steps=(step,)), table)
    assert run.ok, run.summary()
    page = report_html(run)
    section = page[page.index("<h3>What the prediction rests on</h3>"):]
    first = re.search(r"<tr><td><code>(.*?)</code></td>", section).group(1)
    assert first == "prime_divisors"
