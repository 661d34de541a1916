"""Invariant Scout from Python and in Jupyter: results shown as HTML with LaTeX and plotly
figures, a study built, run, saved and loaded from Python, and a real notebook executed by a
real kernel."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pandas as pd
import pytest

import analysis
from analysis.cli import main
from analysis.errors import StepError, StudyError
from analysis.figures import figures_for
from analysis.notebook import result_html, run_html
from analysis.study import without_timing

ROOT = Path(__file__).resolve().parents[1]
TABLES = ROOT / "sample_tables"
FIELDS = TABLES / "quadratic_fields.csv"
POLYGONS = TABLES / "lattice_polygons.csv"
PICK_LATEX = (r"\mathrm{twice\_area} - 2\,\mathrm{interior\_points} - "
              r"\mathrm{boundary\_points} = -2")


@pytest.fixture(scope="module")
def fields():
    return analysis.table_from_frame(pd.read_csv(FIELDS), name=FIELDS.name)


@pytest.fixture(scope="module")
def polygons():
    return analysis.load_table(POLYGONS)


def test_a_separator_shows_its_equation_summary_and_figures(fields):
    result = analysis.run(fields, "separator", target="class_number_odd")
    page = result._repr_html_()
    # Genus theory (Gauss): the class number is odd exactly when at most one prime divides
    # the discriminant
    assert r"$$\mathrm{prime\_divisors} \leq 1$$" in page
    assert "<code>prime_divisors &lt;= 1</code>" in page
    assert "beats chance: yes" in page
    assert page.count("plotly-graph-div") == len(figures_for(result, fields)) >= 3


def test_relations_show_picks_theorem_and_their_figures_over_the_table(polygons):
    # Pick (1899): A = I + B/2 - 1 on every lattice polygon
    result = analysis.run(polygons, "relations")
    page = result._repr_html_()
    assert f"$${PICK_LATEX}$$" in page
    drawn = figures_for(result, polygons)
    assert drawn and page.count("plotly-graph-div") == len(drawn)
    # made without run(), the result has no table to draw over, and says how to give it
    bare = analysis.make_step("relations", {}).run(polygons)
    assert "plotly-graph-div" not in result_html(bare)
    assert "analysis.show(result, table)" in result_html(bare)
    assert analysis.show(bare, polygons)._repr_html_().count("plotly-graph-div") == len(drawn)


def test_plotly_javascript_is_embedded_only_when_asked(polygons):
    result = analysis.run(polygons, "projection", method="pca")
    with_js = result_html(result, include_plotlyjs=True)
    without = result_html(result, include_plotlyjs=False)
    assert len(with_js) - len(without) > 1_000_000, "plotly.js is megabytes"
    assert "plotly-graph-div" in without


def test_names_from_the_table_are_escaped():
    frame = pd.DataFrame({"<b>v</b>": [3, 4, 5, 6, 7, 8], "e": [3, 4, 5, 6, 7, 8]})
    table = analysis.table_from_frame(frame, name="<i>graphs</i>")
    page = analysis.run(table, "overview")._repr_html_()
    assert "<b>v</b>" not in page and "&lt;b&gt;v&lt;/b&gt;" in page
    assert "<i>graphs</i>" not in page


def test_run_names_what_is_wrong(fields):
    with pytest.raises(StepError, match="run\\(\\) needs a Table, got DataFrame"):
        analysis.run(pd.read_csv(FIELDS), "overview")
    with pytest.raises(StudyError, match="unknown setting 'targte'"):
        analysis.run(fields, "separator", targte="class_number_odd")
    with pytest.raises(StudyError, match="unknown step kind 'separate'"):
        analysis.run(fields, "separate", target="class_number_odd")


def test_a_study_from_python_saves_loads_and_reruns_from_the_command_line(tmp_path, capsys):
    frame = pd.read_csv(FIELDS)
    table_path = analysis.write_frame(frame, tmp_path / "fields.csv")
    table = analysis.table_from_frame(frame, name="fields.csv")
    study = analysis.Study(table="fields.csv", table_digest=table.digest, title="Fields")
    study = analysis.add_step(study, "separator", {"target": "class_number_odd"})
    study = analysis.add_step(study, "relations")
    study = analysis.add_step(study, "projection", {"method": "pca", "seed": 3})
    first = analysis.run_study(study, table)
    assert first.ok and not first.warnings, first.warnings
    page = first._repr_html_()
    assert page.count("<h3>") == len(study.steps) and "prime\\_divisors} \\leq 1$$" in page

    analysis.save_study(study, tmp_path / "fields.study.json")
    again = analysis.load_study(tmp_path / "fields.study.json")
    assert again == study
    second = analysis.run_study(again, analysis.load_table(table_path))
    assert without_timing(second.to_json()) == without_timing(first.to_json())

    out = tmp_path / "run.json"
    assert main(["run", str(tmp_path / "fields.study.json"), "--json", str(out)]) == 0
    capsys.readouterr()
    by_command = json.loads(out.read_text(encoding="utf-8"))
    assert without_timing(by_command) == without_timing(first.to_json())


def test_a_failed_step_is_shown_with_its_message(fields):
    study = analysis.Study(table="fields", steps=[analysis.new_step("overview")])
    study = analysis.add_step(study, "separator", {"target": "no_such_column"})
    page = run_html(analysis.run_study(study, fields))
    assert "could not run:" in page and "no_such_column" in page


# ----------------------------------------------------------------------------------------
# A real notebook, executed by a real kernel

NOTEBOOK_CELLS = [
    """import json
import pandas as pd
import analysis
from analysis.figures import figures_for""",
    f"""fields = analysis.table_from_frame(pd.read_csv({str(FIELDS)!r}), name="fields")
separator = analysis.run(fields, "separator", target="class_number_odd", seed=0)
separator""",
    f"""polygons = analysis.table_from_frame(pd.read_csv({str(POLYGONS)!r}), name="polygons")
relations = analysis.run(polygons, "relations")
relations""",
    """drawn = {kind: [(title, [trace.type for trace in figure.data],
                    sum(len(trace.x) for trace in figure.data if trace.x is not None))
                   for title, figure in figures_for(result, table)]
         for kind, result, table in [("separator", separator, fields),
                                     ("relations", relations, polygons)]}
print(json.dumps(drawn))""",
    """pd.set_option("display.max_colwidth", None)
relations.to_frame().head(3)""",
]


def _html_output(cell) -> str:
    for output in cell.outputs:
        if output.get("output_type") == "execute_result" and "text/html" in output["data"]:
            return output["data"]["text/html"]
    raise AssertionError(f"no HTML output in cell: {cell.source[:80]!r}")


@pytest.mark.slow
def test_a_notebook_builds_a_table_from_a_frame_and_shows_a_separator_and_relations(tmp_path):
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    notebook = nbformat.v4.new_notebook()
    notebook.cells = [nbformat.v4.new_code_cell(source) for source in NOTEBOOK_CELLS]
    client = nbclient.NotebookClient(notebook, timeout=600, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    # the kernel starts in an empty folder and finds the package through PYTHONPATH, as an
    # installed one would be found
    path = os.pathsep.join(p for p in (str(ROOT), os.environ.get("PYTHONPATH")) if p)
    client.execute(env={**os.environ, "PYTHONPATH": path})
    nbformat.write(notebook, tmp_path / "executed.ipynb")

    separator_page = _html_output(notebook.cells[1])
    # Genus theory (Gauss): odd class number exactly when at most one prime divides the
    # discriminant
    assert r"$$\mathrm{prime\_divisors} \leq 1$$" in separator_page
    assert "plotly.js" in separator_page.lower() and "plotly-graph-div" in separator_page
    relations_page = _html_output(notebook.cells[2])
    assert f"$${PICK_LATEX}$$" in relations_page  # Pick (1899)
    assert "plotly-graph-div" in relations_page

    printed = "".join(o.get("text", "") for o in notebook.cells[3].outputs
                      if o.get("output_type") == "stream")
    drawn = json.loads(printed)
    separator_titles = [title for title, _, _ in drawn["separator"]]
    assert "Score against chance" in separator_titles, separator_titles
    assert any(t.startswith("Confusion matrix") for t in separator_titles), separator_titles
    decision = [d for d in drawn["separator"] if d[0] == "Decision score of every row"]
    assert decision and decision[0][2] == 3043, decision  # every field of the table drawn
    bounds = [d for d in drawn["relations"] if d[0].startswith("Bound ")]
    assert bounds and all("scatter" in types or "scattergl" in types
                          for _, types, _ in bounds), drawn["relations"]
    frame_page = _html_output(notebook.cells[4])
    assert "twice_area - 2*interior_points - boundary_points = -2" in frame_page


def test_a_result_that_cannot_be_drawn_says_so_instead_of_failing():
    import types

    page = result_html(types.SimpleNamespace(summary=lambda: "three rows"))
    assert "three rows" in page
    assert "figures could not be drawn:" in page and "names no step kind" in page
