"""What the page says of each step agrees with what the step computed: for every kind of
step, on a class target and on a number target, the headings, captions and figures shown
are read back and held against the result.

The table is scikit-learn's iris data (150 flowers, 4 measurements in cm, 3 species, from
scikit-learn's documentation of load_iris): species is a class target, petal width a
measured number.
"""

from __future__ import annotations

import pytest
from test_page import (
    add_step,
    iris_csv,
    open_page,
    plotly_specs,
    results,
    set_target,
    study,
    texts,
    upload,
)

from analysis.steps import KIND_TITLES

KINDS = ("overview", "projection", "clustering", "separator", "relations", "outliers")


@pytest.fixture(scope="module", params=["species", "petal width (cm)"])
def page(request):
    at = open_page("quadratic_fields.csv")
    upload(at, "iris.csv", iris_csv())
    set_target(at, request.param)
    for kind in KINDS[2:]:
        add_step(at, kind)
    at.button(key="study.run_all").click().run()
    assert not at.exception, [e.value for e in at.exception]
    found = dict(zip([s.kind for s in study(at).steps], results(at)))
    assert list(found) == list(KINDS) and all(r is not None for r in found.values())
    return at, request.param, found


def test_every_step_is_headed_by_its_number_and_kind(page):
    at, _, _ = page
    shown = texts(at.markdown)
    for number, kind in enumerate(KINDS, start=1):
        assert f"#### {number}. {KIND_TITLES[kind]}" in shown


def test_the_overview_counts_what_it_read(page):
    at, _, found = page
    overview = found["overview"]
    # scikit-learn's iris: 150 flowers; the table adds an id and the species to 4 measures.
    assert overview.rows == 150 and len(overview.columns) == 6
    assert any(m.startswith("150 objects, 6 columns, named by flower") for m in texts(at.markdown))


def test_the_projection_names_its_counts_and_the_colour_it_uses(page):
    at, target, found = page
    projection = found["projection"]
    assert projection.target == target
    facts = f"{projection.n_projected} objects drawn · {len(projection.features)} features"
    assert any(m.startswith(facts) for m in texts(at.markdown)), facts
    colour = [box for box in at.selectbox if box.label == "Colour by"]
    assert colour and colour[0].value == "target"
    assert f"target ({target})" in colour[0].options
    scatter = next(s for s in plotly_specs(at) if s["layout"].get("title", {}).get(
        "text", "").startswith("PCA of 150 rows"))
    titles = [scatter["layout"].get("legend", {}).get("title", {}).get("text")]
    titles += [t["marker"].get("colorbar", {}).get("title", {}).get("text")
               for t in scatter["data"] if "marker" in t]
    assert target in titles, titles


def test_the_clustering_shows_the_k_it_chose_and_what_it_was_compared_with(page):
    at, target, found = page
    clustering = found["clustering"]
    assert clustering.compare == target
    assert any(m.startswith("**") and f", k = {clustering.k}** on 150 objects" in m
               for m in texts(at.markdown))
    metrics = {m.label: m.value for m in at.metric}
    assert metrics["Clusters"] == str(clustering.k)
    assert f"Agreement with {target}" in metrics


def test_the_separator_names_the_model_it_fitted(page):
    at, target, found = page
    separator = found["separator"]
    # species names three classes; petal width is a length in cm, a number to regress on
    expected = "classification" if target == "species" else "regression"
    assert separator.task == expected
    captions = texts(at.caption)
    heading = [c for c in captions if c.startswith("predict ")]
    assert heading == [heading[0]] and heading[0].startswith(f"predict {target} with a ")
    verdict = [c for c in captions if f"trained on {separator.train_rows} objects, tested on "
               f"{separator.test_rows} others" in c]
    assert len(verdict) == 1
    metrics = {m.label for m in at.metric}
    if expected == "regression":
        assert "regression" in heading[0] and "support vector machine" not in heading[0]
        assert verdict[0].startswith("Linear regression (ridge)")
        assert {"R² on test rows", "Mean absolute error"} <= metrics
        assert "Accuracy on test rows" not in metrics
    else:
        assert "linear support vector machine" in heading[0]
        assert verdict[0].startswith("Linear support vector machine")
        assert {"Accuracy on test rows", "Matthews correlation"} <= metrics
        assert "R² on test rows" not in metrics
    assert separator.train_rows + separator.test_rows == 150
    # the model choice names what a number target is fitted with, whatever the target is
    uid = at.session_state["scout.page"].step_ids[KINDS.index("separator")]
    chosen = at.selectbox(key=f"s{uid}.model")
    assert chosen.value == separator.model == "linear"
    assert chosen.format_func(chosen.value) == ("linear support vector machine; for a number "
                                                "target, linear regression (ridge)")


def test_the_relations_say_what_they_searched(page):
    at, _, found = page
    relations = found["relations"]
    words = f"Searched {len(relations.columns)} columns over 150 objects."
    assert words in texts(at.markdown)


def test_the_objects_to_look_at_are_counted_and_ranked_as_computed(page):
    at, target, found = page
    outliers = found["outliers"]
    ranked = (f"**{len(outliers.outliers)} objects to look at**, of 150, ranked by "
              f"{', '.join(outliers.measures)}.")
    assert ranked in texts(at.markdown)
    heading = [c for c in texts(at.caption) if c.startswith("the ") and "stand out" in c]
    predicted = f"including those whose {target} the other invariants predict worst"
    assert len(heading) == 1
    assert (predicted in heading[0]) == ("separator" in outliers.measures)


def test_a_kernel_separator_keeps_the_case_of_its_model_words():
    """The verdict's first word is made upper case and nothing else: "RBF" stays "RBF"."""
    at = open_page("quadratic_fields.csv")
    upload(at, "iris.csv", iris_csv())
    set_target(at, "species")
    uid = add_step(at, "separator")
    at.selectbox(key=f"s{uid}.model").set_value("rbf").run()
    at.button(key=f"s{uid}.run").click().run()
    assert not at.exception, [e.value for e in at.exception]
    separator = results(at)[-1]
    assert separator.model == "rbf" and separator.task == "classification"
    captions = texts(at.caption)
    assert "predict species with a support vector machine with an RBF kernel" in captions
    verdict = [c for c in captions if c.startswith("Support vector machine with an RBF kernel, "
                                                   f"trained on {separator.train_rows}")]
    assert len(verdict) == 1, captions
