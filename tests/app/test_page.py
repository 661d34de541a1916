"""The study page driven by streamlit's AppTest, by widget key.

AppTest runs app/scout.py in this process without a browser. Uploads go through
``at.file_uploader(key=...).upload(name, data, mime)`` (present in streamlit 1.67). Charts are
not inspectable by AppTest's typed accessors; their plotly specs are read from the element
protos, and the figure builders themselves are tested by their owners.

Most tests open the page on a small sample table through the address (``?table=...``) so that
the opening study stays short; one test checks the default opening page.
"""

from __future__ import annotations

import base64
import io
import json
from pathlib import Path

import numpy as np
import pytest
from conftest import iris_csv
from streamlit.testing.v1 import AppTest

from analysis.study import result_key, study_from_json
from app import share

SCRIPT = str(Path(__file__).resolve().parents[2] / "app" / "scout.py")
TIMEOUT = 600


def open_page(table: str | None = None) -> AppTest:
    at = AppTest.from_file(SCRIPT, default_timeout=TIMEOUT)
    if table is not None:
        at.query_params["table"] = table
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def study(at: AppTest):
    return at.session_state["scout.study"]


def table(at: AppTest):
    return at.session_state["scout.table"].table


def step_ids(at: AppTest) -> list[int]:
    return list(at.session_state["scout.page"].step_ids)


def results(at: AppTest) -> list:
    """The cached result of every step of the study (None where it has none)."""
    cache = at.session_state["scout.cache"]
    return [cache.get(result_key(table(at), s.kind, s.params)) for s in study(at).steps]


def numbers(result) -> dict:
    """A result's JSON without timings, which differ from run to run."""
    def strip(value):
        if isinstance(value, dict):
            return {k: strip(v) for k, v in value.items() if k != "elapsed_seconds"}
        if isinstance(value, list):
            return [strip(v) for v in value]
        return value
    return strip(result.to_json())


def texts(elements) -> list[str]:
    return [e.value for e in elements]


def plotly_specs(at: AppTest) -> list[dict]:
    """The plotly figures on the page, as the JSON the browser receives."""
    specs = []
    for element in at.get("plotly_chart"):
        specs.append(json.loads(element.proto.spec))
    return specs


def points(values) -> int:
    """How many values a plotly array holds: a list, or a typed array (dtype, bdata)."""
    if isinstance(values, dict) and "bdata" in values:
        data = np.frombuffer(base64.b64decode(values["bdata"]), dtype=values["dtype"])
        return int(data.size)
    return len(values or [])


def open_study_file(at: AppTest, name: str, data: bytes) -> AppTest:
    """Open a study file through the share part's upload, and run the page."""
    at.file_uploader(key="share.open").upload(name, data, "application/json")
    at.run()
    return at


def arrive(at: AppTest, name: str, data: bytes, mime: str = "text/csv") -> AppTest:
    """Put a file in the table upload box (it may then wait to be opened)."""
    if at.radio(key="table.source").value != "file":
        at.radio(key="table.source").set_value("file").run()
    at.file_uploader(key="table.upload").upload(name, data, mime)
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def waiting_buttons(at: AppTest) -> list[str]:
    return [b.key for b in at.button if b.key in ("table.switch", "table.stay")]


def upload(at: AppTest, name: str, data: bytes, mime: str = "text/csv") -> AppTest:
    """Upload a table and open it (saying yes when it waits for the user's word)."""
    arrive(at, name, data, mime)
    if "table.switch" in waiting_buttons(at):
        at.button(key="table.switch").click().run()
        assert not at.exception, [e.value for e in at.exception]
    return at


def set_target(at: AppTest, name: str | None) -> AppTest:
    """Choose the study's target and run the steps that follow it."""
    at.selectbox(key="focus.target").set_value(name).run()
    assert not at.exception, [e.value for e in at.exception]
    if [b for b in at.button if b.key == "target.run" and not b.disabled]:
        at.button(key="target.run").click().run()
        assert not at.exception, [e.value for e in at.exception]
    return at


def add_step(at: AppTest, kind: str) -> int:
    at.selectbox(key="add.kind").set_value(kind)
    at.button(key="add.button").click()
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    return step_ids(at)[-1]


# ----------------------------------------------------------------------------------------


def test_opening_page_shows_the_sample_study_with_a_picture_and_an_equation():
    at = open_page()
    assert texts(at.error) == []
    current = study(at)
    assert current.table == "lattice_polygons.csv"
    kinds = [s.kind for s in current.steps]
    assert kinds[:2] == ["overview", "projection"], kinds
    assert "separator" in kinds, kinds
    # every step ran on opening
    assert all(r is not None for r in results(at)), kinds
    # a real picture: the projection's scatter plot carries one point per polygon
    specs = plotly_specs(at)
    assert specs, "no figure on the opening page"
    drawn = sum(points(trace.get("x")) for trace in specs[0]["data"])
    assert drawn == 3000, drawn
    # a real equation, as mathematics and as text to copy, equal to the step's own
    separator = results(at)[kinds.index("separator")]
    assert separator.equation is not None
    assert any(separator.equation.latex() in shown for shown in texts(at.latex))
    assert separator.equation.text in texts(at.code)
    # the sentence saying a pattern is a conjecture, not a proof
    assert any("not a proof" in c for c in texts(at.caption))


def test_upload_a_table_replaces_table_and_study():
    at = open_page("quadratic_fields.csv")
    upload(at, "iris.csv", iris_csv())
    loaded = table(at)
    # scikit-learn's iris: 150 samples, 4 numeric features, 3 classes (sklearn documentation)
    assert loaded.n_rows == 150
    assert loaded.id_column == "flower"
    assert loaded.role("species") == "category"
    assert len(loaded.names_with_role("invariant")) == 4
    assert study(at).table == "iris.csv"
    assert all(r is not None for r in results(at))
    assert any("150 objects" in m for m in texts(at.markdown))
    assert texts(at.error) == []


@pytest.mark.parametrize("name, data, words", [
    ("ragged.csv", b"a,b\n1,2\n3,4,5\n", "row 2"),
    ("empty.csv", b"", "empty"),
    ("latin1.csv", "genus,name\n1,caf\xe9\n".encode("latin-1"), "UTF-8"),
    ("broken.json", b'[{"a": 1}, {"a": ', "JSON"),
], ids=["ragged-row", "empty-file", "not-utf8", "broken-json"])
def test_bad_upload_shows_the_table_error_and_keeps_the_page(name, data, words):
    at = open_page("quadratic_fields.csv")
    before = study(at)
    upload(at, name, data, "application/octet-stream")
    errors = texts(at.error)
    assert errors, "no error shown for a bad upload"
    assert any(name in e and words in e for e in errors), errors
    # the previous table and study stay
    assert table(at).name == "quadratic_fields.csv"
    assert study(at) is before


def _roles_key(at: AppTest) -> str:
    return next(e.key for e in at.data_editor if e.key and e.key.startswith("table.roles."))


def _edit_role(at: AppTest, column: str, role: str) -> AppTest:
    names = [c.name for c in table(at).columns]
    at.session_state[_roles_key(at)] = {
        "edited_rows": {names.index(column): {"role": role}},
        "added_rows": [], "deleted_rows": []}
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def test_changing_a_role_changes_the_table_and_the_saved_study():
    at = open_page("quadratic_fields.csv")
    assert table(at).role("disc_mod_8") == "invariant"
    _edit_role(at, "disc_mod_8", "category")
    assert table(at).role("disc_mod_8") == "category"
    assert study(at).table_settings.role_overrides == {"disc_mod_8": "category"}
    saved = json.loads(share.study_text(study(at)))
    assert saved["table_settings"]["roles"] == {"disc_mod_8": "category"}
    assert texts(at.error) == []
    # the steps are computed again for the new roles at once
    assert all(r is not None for r in results(at))


def test_a_role_the_cells_do_not_fit_is_refused_with_a_message():
    at = open_page("graphs_up_to_7.csv")
    _edit_role(at, "adjacency", "invariant")
    errors = texts(at.error)
    assert any("adjacency" in e for e in errors), errors
    assert table(at).role("adjacency") == "array"
    assert study(at).table_settings.role_overrides == {}


def test_the_id_role_moves_to_another_column():
    at = open_page("quadratic_fields.csv")
    _edit_role(at, "discriminant", "id")
    assert table(at).id_column == "discriminant"
    assert study(at).table_settings.id_column == "discriminant"
    assert table(at).role("field") != "id"


def test_study_wide_target_reaches_every_step():
    at = open_page("quadratic_fields.csv")
    set_target(at, "class_number_one")
    projection = [s for s in study(at).steps if s.kind == "projection"][0]
    assert projection.params["target"] == "class_number_one"
    # once asked, the projection ran again, coloured by the new target
    assert all(r is not None for r in results(at))
    assert results(at)[1].target == "class_number_one"


@pytest.mark.parametrize("kind", ["overview", "projection", "clustering", "separator",
                                  "relations", "outliers"])
def test_add_and_run_each_kind_of_step(kind):
    from app.loading import available_kinds

    at = open_page("quadratic_fields.csv")
    upload(at, "iris.csv", iris_csv())
    if kind not in available_kinds():
        pytest.skip(f"the {kind} step is not installed in this checkout")
    at.selectbox(key="focus.target").set_value("species").run()
    steps_before = len(study(at).steps)
    uid = add_step(at, kind)
    assert len(study(at).steps) == steps_before + 1
    assert study(at).steps[-1].kind == kind
    if results(at)[-1] is None:  # a new step waits for its run action...
        at.button(key=f"s{uid}.run").click().run()
    else:  # ...unless the same step with the same settings has run already
        new = study(at).steps[-1]
        assert any(s.kind == kind and s.params == new.params for s in study(at).steps[:-1])
        assert not [b for b in at.button if b.key == f"s{uid}.run"]
    assert not at.exception, [e.value for e in at.exception]
    assert texts(at.error) == []
    assert results(at)[-1] is not None


def test_move_and_remove_steps():
    at = open_page("quadratic_fields.csv")
    kinds = [s.kind for s in study(at).steps]
    first, second = step_ids(at)[:2]
    at.button(key=f"s{second}.up").click().run()
    assert [s.kind for s in study(at).steps][:2] == kinds[1::-1]
    assert step_ids(at)[:2] == [second, first]
    at.button(key=f"s{first}.remove").click().run()
    assert first not in step_ids(at)
    assert len(study(at).steps) == len(kinds) - 1


def test_a_failing_step_shows_a_message_and_leaves_the_rest():
    at = open_page("quadratic_fields.csv")
    uid = add_step(at, "projection")
    at.selectbox(key=f"s{uid}.method").set_value("lda").run()
    at.button(key=f"s{uid}.run").click().run()
    assert not at.exception
    errors = texts(at.error)
    assert any("LDA needs a target" in e for e in errors), errors
    assert all(r is not None for r in results(at)[:-1])


def test_colour_and_hover_change_the_picture_not_the_numbers():
    at = open_page("quadratic_fields.csv")
    uid = [u for u, s in zip(step_ids(at), study(at).steps) if s.kind == "projection"][0]
    before = results(at)
    at.selectbox(key=f"s{uid}.colour").set_value("class_number").run()
    at.multiselect(key=f"s{uid}.hover").set_value(["discriminant", "units"]).run()
    after = results(at)
    assert all(a is b for a, b in zip(before, after)), "a step was recomputed"
    spec = json.dumps(plotly_specs(at))
    assert "class_number" in spec and "units" in spec


def test_a_saved_study_opened_in_a_new_session_gives_the_same_numbers():
    first = open_page("quadratic_fields.csv")
    set_target(first, "class_number_one")
    add_step(first, "separator")
    uid = step_ids(first)[-1]
    first.button(key=f"s{uid}.run").click().run()
    saved = share.study_text(study(first))
    before = [numbers(r) for r in results(first)]
    shown = texts(first.code) + [m.value for m in first.metric]

    second = open_page("graphs_up_to_7.csv")
    open_study_file(second, "fields.study.json", saved.encode())
    assert not second.exception, [e.value for e in second.exception]
    assert table(second).name == "quadratic_fields.csv"
    assert study(second) == study_from_json(json.loads(saved))
    assert [numbers(r) for r in results(second)] == before
    assert texts(second.code) + [m.value for m in second.metric] == shown


def test_a_broken_study_file_is_refused_with_a_message():
    at = open_page("quadratic_fields.csv")
    before = study(at)
    open_study_file(at, "bad.study.json", b'{"version": "x"}')
    assert not at.exception
    assert any("bad.study.json" in e and "version" in e for e in texts(at.error))
    assert study(at) is before


def test_a_study_opened_on_a_changed_table_says_the_numbers_may_differ():
    first = open_page("quadratic_fields.csv")
    upload(first, "iris.csv", iris_csv())
    saved = share.study_text(study(first))

    changed = iris_csv().replace(b"5.1,3.5,1.4,0.2", b"5.2,3.5,1.4,0.2", 1)
    assert changed != iris_csv()
    second = open_page("quadratic_fields.csv")
    upload(second, "iris.csv", changed)
    open_study_file(second, "iris.study.json", saved.encode())
    assert not second.exception
    warnings = texts(second.warning)
    assert any("differ" in w and "iris.csv" in w for w in warnings), warnings
    assert all(r is not None for r in results(second))


def test_a_study_of_a_table_not_on_the_page_runs_on_the_loaded_one_and_says_so():
    first = open_page("quadratic_fields.csv")
    upload(first, "iris.csv", iris_csv())
    saved = share.study_text(study(first))

    second = open_page("quadratic_fields.csv")
    upload(second, "other_flowers.csv", iris_csv().replace(b"5.1,", b"5.0,", 1))
    open_study_file(second, "iris.study.json", saved.encode())
    assert not second.exception
    assert any("iris.csv" in i and "not loaded" in i for i in texts(second.info))
    assert table(second).name == "other_flowers.csv"
    assert all(r is not None for r in results(second))


def test_a_study_whose_roles_do_not_fit_the_table_is_refused():
    first = open_page("quadratic_fields.csv")
    upload(first, "iris.csv", iris_csv())
    saved = share.study_text(study(first))  # names its id column, flower

    second = open_page("graphs_up_to_7.csv")
    before = study(second)
    open_study_file(second, "iris.study.json", saved.encode())
    assert not second.exception
    errors = texts(second.error)
    assert any("flower" in e and "graphs_up_to_7.csv" in e for e in errors), errors
    assert study(second) is before


def test_relations_list_the_objects_that_attain_a_bound():
    from fractions import Fraction

    at = open_page("quadratic_fields.csv")
    uid = add_step(at, "relations")
    at.button(key=f"s{uid}.run").click().run()
    assert not at.exception
    result = results(at)[-1]
    attained = [b for b in result.bounds if b.attained_by]
    assert attained, "no bound with extremal objects on this table"
    bound = attained[0]
    choice = at.selectbox(key=f"s{uid}.rows_of")
    choice.set_value(f"attain {bound.text}").run()
    assert not at.exception
    # the listing is the last table on the page: the objects' ids and the bound's columns
    loaded = table(at)
    listed = at.dataframe[-1].value
    assert list(listed.columns) == [loaded.id_column] + [name for name, _ in bound.terms]
    assert len(listed) == min(len(bound.attained_by), 200)
    # each listed object meets the bound with equality, in exact arithmetic on the table
    ids = list(loaded.row_ids)
    for _, row in listed.iterrows():
        position = ids.index(row[loaded.id_column])
        total = sum(Fraction(coef) * loaded.exact(name)[position] for name, coef in bound.terms)
        assert total == bound.constant, (row[loaded.id_column], bound.text)


def _iris_in(fmt: str) -> tuple[str, bytes]:
    """The iris CSV written again as TSV, JSON, JSON Lines or Parquet (with pandas)."""
    import pandas as pd

    frame = pd.read_csv(io.BytesIO(iris_csv()))
    if fmt == "csv":
        return "iris.csv", iris_csv()
    if fmt == "tsv":
        return "iris.tsv", frame.to_csv(sep="\t", index=False).encode()
    if fmt == "json":
        return "iris.json", frame.to_json(orient="records").encode()
    if fmt == "jsonl":
        return "iris.jsonl", frame.to_json(orient="records", lines=True).encode()
    buffer = io.BytesIO()
    frame.to_parquet(buffer, index=False)
    return "iris.parquet", buffer.getvalue()


@pytest.mark.parametrize("fmt", ["csv", "tsv", "json", "jsonl", "parquet"])
def test_upload_every_table_format(fmt):
    at = open_page("quadratic_fields.csv")
    name, data = _iris_in(fmt)
    upload(at, name, data, "application/octet-stream")
    assert texts(at.error) == []
    loaded = table(at)
    assert loaded.name == name
    # iris: 150 flowers, 4 measurements, 3 species (scikit-learn's documentation)
    assert loaded.n_rows == 150
    assert len(loaded.names_with_role("invariant")) == 4
    assert loaded.column("species").distinct == 3


def test_study_wide_group_column_and_encoding_reach_new_and_existing_steps():
    at = open_page("graphs_up_to_7.csv")
    at.selectbox(key="focus.target").set_value("planar").run()
    at.selectbox(key="focus.groups").set_value("adjacency").run()
    at.selectbox(key="focus.encoding").set_value("both").run()
    assert not at.exception
    projection = [s for s in study(at).steps if s.kind == "projection"][0]
    assert projection.params["array_encoding"] == "both"
    uid = add_step(at, "separator")
    separator = study(at).steps[step_ids(at).index(uid)]
    assert separator.params["target"] == "planar"
    assert separator.params["groups"] == "adjacency"
    assert separator.params["array_encoding"] == "both"


def test_apply_focus_changes_every_step_that_has_the_setting():
    from analysis.study import Study
    from analysis.study import add_step as add
    from analysis.table import load_table
    from app.table_section import apply_focus

    graphs = load_table(Path(SCRIPT).parents[1] / "sample_tables" / "graphs_up_to_7.csv")
    plan = Study(table=graphs.name)
    for kind, params in [("overview", {}), ("projection", {}),
                         ("separator", {"target": "planar", "columns": ["edges", "tree"]}),
                         ("clustering", {}), ("relations", {})]:
        plan = add(plan, kind, params)
    moved = apply_focus(plan, graphs, "target", "tree")
    kinds = {s.kind: s.params for s in moved.steps}
    assert kinds["projection"]["target"] == "tree"
    assert kinds["separator"]["target"] == "tree"
    assert kinds["separator"]["columns"] == ["edges"]  # a target is never its own feature
    assert kinds["clustering"]["compare"] == "tree"
    grouped = apply_focus(moved, graphs, "groups", "adjacency")
    assert [s.params.get("groups") for s in grouped.steps if s.kind == "separator"] == \
        ["adjacency"]
    chosen = apply_focus(grouped, graphs, "columns", ["edges", "vertices", "planar"])
    kinds = {s.kind: s.params for s in chosen.steps}
    assert kinds["relations"]["columns"] == ["edges", "vertices"]  # invariants only
    assert kinds["projection"]["columns"] == ["edges", "vertices", "planar"]
    assert "columns" not in kinds["overview"]


def test_a_hand_edited_setting_out_of_range_is_reported_by_its_step():
    first = open_page("quadratic_fields.csv")
    saved = json.loads(share.study_text(study(first)))
    projection = next(s for s in saved["steps"] if s["kind"] == "projection")
    projection["params"].update(method="umap", n_neighbors=1)

    second = open_page("graphs_up_to_7.csv")
    open_study_file(second, "edited.study.json", json.dumps(saved).encode())
    assert not second.exception, [e.value for e in second.exception]
    errors = texts(second.error)
    assert any("n_neighbors" in e for e in errors), errors
    kinds = [s.kind for s in study(second).steps]
    assert results(second)[kinds.index("overview")] is not None


def test_study_wide_feature_columns_narrow_the_steps_and_empty_means_all():
    at = open_page("quadratic_fields.csv")
    at.multiselect(key="focus.features").set_value(["discriminant", "units"]).run()
    projection = [s for s in study(at).steps if s.kind == "projection"][0]
    assert projection.params["columns"] == ["discriminant", "units"]
    assert results(at)[1].features == ("discriminant", "units")
    at.multiselect(key="focus.features").set_value([]).run()
    projection = [s for s in study(at).steps if s.kind == "projection"][0]
    assert projection.params["columns"] is None
    assert len(results(at)[1].features) > 2


def test_a_sample_study_whose_roles_do_not_fit_leaves_the_page_as_it_was():
    first = open_page("quadratic_fields.csv")
    saved = json.loads(share.study_text(study(first)))
    saved["table_settings"]["roles"] = {"units": "flag"}  # units are 2, 4 or 6: no flag

    second = open_page("graphs_up_to_7.csv")
    before = study(second)
    open_study_file(second, "fields.study.json", json.dumps(saved).encode())
    assert not second.exception
    assert any("units" in e for e in texts(second.error)), texts(second.error)
    assert table(second).name == "graphs_up_to_7.csv"
    assert study(second) is before


def test_a_statement_few_objects_break_adds_a_separator_on_its_breakers():
    # Quadratic fields: the relations step lists bounds a few fields break; its action adds a
    # separator whose target is "breaks: <statement>", kept in the study by the statement.
    at = open_page("quadratic_fields.csv")
    uid = add_step(at, "relations")
    at.button(key=f"s{uid}.run").click().run()
    assert not at.exception
    choice = at.selectbox(key=f"s{uid}.breaks_choice")
    statement = choice.value
    at.button(key=f"s{uid}.breaks_add").click().run()
    assert not at.exception, [e.value for e in at.exception]
    added = study(at).steps[-1]
    assert added.kind == "separator"
    from analysis.derived import Statement

    assert Statement.from_json(added.params["target_statement"]).text == \
        Statement.parse(statement).text
    new_uid = step_ids(at)[-1]
    at.button(key=f"s{new_uid}.run").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert results(at)[-1].target == "breaks: " + Statement.parse(statement).text


def test_a_statement_of_ones_own_adds_a_separator_on_its_breakers():
    # Brooks' theorem: a connected graph other than a complete graph or an odd cycle has
    # chromatic number at most its largest degree; the user types the bound to ask about
    # the graphs that break it
    from app.panels.relations import OWN_STATEMENT

    at = open_page("graphs_up_to_7.csv")
    uid = add_step(at, "relations")
    at.button(key=f"s{uid}.run").click().run()
    at.selectbox(key=f"s{uid}.breaks_choice").set_value(OWN_STATEMENT).run()
    at.text_input(key=f"s{uid}.breaks_text").input("chromatic_number - girth <= 0").run()
    assert any("no column 'girth'" in e for e in texts(at.error)), texts(at.error)
    at.text_input(key=f"s{uid}.breaks_text").input("chromatic_number - max_degree <= 0").run()
    assert not at.error
    at.button(key=f"s{uid}.breaks_add").click().run()
    assert not at.exception, [e.value for e in at.exception]
    added = study(at).steps[-1]
    assert added.kind == "separator"
    from analysis.derived import Statement

    assert Statement.from_json(added.params["target_statement"]).text == \
        "chromatic_number - max_degree <= 0"


def test_a_whole_number_target_offers_its_reading_and_says_which_was_used():
    from analysis.separation import READINGS
    from app.settings import words

    WORDS = words("separator", "reading")
    assert list(WORDS) == list(READINGS)
    at = open_page("graphs_up_to_7.csv")
    uid = add_step(at, "separator")
    at.selectbox(key=f"s{uid}.target").set_value("chromatic_number").run()
    assert not at.exception, [e.value for e in at.exception]
    reading = at.selectbox(key=f"s{uid}.reading")
    assert reading.options == [WORDS[r] for r in READINGS]
    reading.set_value("classes").run()
    assert study(at).steps[-1].params["reading"] == "classes"
    at.button(key=f"s{uid}.run").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert results(at)[-1].task == "classification"
    # the flag target has no reading to choose
    at.selectbox(key=f"s{uid}.target").set_value("bipartite").run()
    assert not [s for s in at.selectbox if s.key == f"s{uid}.reading"]


def test_interval_cells_can_be_read_by_one_value_where_the_table_has_them():
    from analysis.features import INTERVAL_READINGS
    from app.settings import words

    assert list(words("projection", "intervals")) == list(INTERVAL_READINGS)
    at = open_page("graphs_as_downloaded.csv")
    uid = add_step(at, "projection")
    choice = at.selectbox(key=f"s{uid}.intervals")
    choice.set_value("midpoint").run()
    assert not at.exception, [e.value for e in at.exception]
    assert study(at).steps[-1].params["intervals"] == "midpoint"
    at.button(key=f"s{uid}.run").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert any("interval cells of 'chromatic_number' read as their midpoint" in n
               for n in results(at)[-1].notes)
    plain = open_page("graphs_up_to_7.csv")
    uid = add_step(plain, "projection")
    assert not [s for s in plain.selectbox if s.key == f"s{uid}.intervals"]
