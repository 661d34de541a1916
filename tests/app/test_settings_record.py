"""The page's step widgets are drawn from the steps' setting records: each widget's label,
help, options (in the record's words) and range are the record's, under the key
``s<step id>.<setting>``.

The table is scikit-learn's iris data (150 flowers, 4 measurements, 3 species; from
scikit-learn's documentation of load_iris), as in test_labels.py.
"""

from __future__ import annotations

import pytest
from test_page import add_step, iris_csv, open_page, step_ids, study, upload

from analysis.steps import step_settings

KINDS = ("overview", "projection", "clustering", "separator", "relations", "outliers")
ACCESSORS = ("selectbox", "multiselect", "number_input", "slider", "toggle")


@pytest.fixture(scope="module")
def page():
    at = open_page("quadratic_fields.csv")
    upload(at, "iris.csv", iris_csv())
    present = {s.kind for s in study(at).steps}
    for kind in KINDS:
        if kind not in present:
            add_step(at, kind)
    for uid in step_ids(at):
        if [t for t in at.toggle if t.key == f"s{uid}.more"]:
            at.toggle(key=f"s{uid}.more").set_value(True).run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def _widgets(at) -> dict:
    found = {}
    for accessor in ACCESSORS:
        for widget in at.get(accessor):
            found[widget.key] = (accessor, widget)
    return found


def test_every_step_widget_wears_its_record_words(page):
    widgets = _widgets(page)
    kinds = [s.kind for s in study(page).steps]
    assert set(kinds) == set(KINDS), kinds
    checked = 0
    for uid, kind in zip(step_ids(page), kinds):
        for record in step_settings(kind):
            found = widgets.get(f"s{uid}.{record.name}")
            if found is None:
                continue
            accessor, widget = found
            checked += 1
            assert widget.label == record.label, (kind, record.name, widget.label)
            assert (widget.help or None) == record.help, (kind, record.name, widget.help)
            if accessor == "number_input" and record.high is not None:
                assert widget.max == record.high, (kind, record.name, widget.max)
            if accessor == "number_input" and not record.optional and record.low is not None:
                assert widget.min == record.low, (kind, record.name, widget.min)
            if accessor == "selectbox" and record.choices and record.name != "model":
                assert widget.options == list(record.words.values()), (kind, record.name)
    # on iris with every "More settings" open, 50 step widgets are drawn (counted once on this
    # page); fewer would mean widgets no longer found by their setting's key
    assert checked >= 50, checked


def test_the_separator_choice_names_every_model_in_its_record_words(page):
    widgets = _widgets(page)
    uid = step_ids(page)[[s.kind for s in study(page).steps].index("separator")]
    _, model = widgets[f"s{uid}.model"]
    words = [w for r in step_settings("separator") if r.name == "model"
             for w in r.words.values()]
    assert len(model.options) == len(words)
    for shown, word in zip(model.options, words):
        assert shown.startswith(word + "; "), (shown, word)


def test_a_value_out_of_the_record_range_is_refused_with_what_to_use(page):
    from analysis.errors import StudyError
    from analysis.study import update_step

    index = [s.kind for s in study(page).steps].index("separator")
    with pytest.raises(StudyError, match=r"repeats 0: use a whole number of at least 1"):
        update_step(study(page), index, params={"repeats": 0})
