"""A working session on the page: each table keeps its study while other tables are open,
and a table that arrives over a study with results waits for the user's word.

Driven by streamlit's AppTest with the helpers of test_page.py; the tables are the shipped
samples and scikit-learn's iris data.
"""

from __future__ import annotations

from test_page import (
    add_step,
    arrive,
    iris_csv,
    open_page,
    results,
    step_ids,
    study,
    table,
    texts,
    upload,
    waiting_buttons,
)

from analysis.report import FOLD_LIMIT


def _choose_sample(at, name: str):
    if at.radio(key="table.source").value != "sample":
        at.radio(key="table.source").set_value("sample").run()
    if at.selectbox(key="table.sample").value != name:
        at.selectbox(key="table.sample").set_value(name).run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def test_going_back_to_a_table_brings_back_its_study_and_its_results():
    at = open_page("quadratic_fields.csv")
    uid = add_step(at, "outliers")
    at.button(key=f"s{uid}.run").click().run()
    kept_study, kept_ids, kept_results = study(at), step_ids(at), results(at)
    assert all(r is not None for r in kept_results)

    upload(at, "iris.csv", iris_csv())
    assert table(at).name == "iris.csv" and study(at).table == "iris.csv"
    iris_study, iris_results = study(at), results(at)

    _choose_sample(at, "quadratic_fields.csv")
    at.button(key="table.switch").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert table(at).name == "quadratic_fields.csv"
    assert study(at) == kept_study
    assert step_ids(at) == kept_ids
    # the very result objects: nothing was computed again
    assert all(a is b for a, b in zip(results(at), kept_results, strict=True))

    # and the iris table, uploaded again, finds its own study and results, even when the
    # page's cache has let them go meanwhile
    at.session_state["scout.cache"].clear()
    upload(at, "iris.csv", iris_csv())
    assert study(at) == iris_study
    assert all(a is b for a, b in zip(results(at), iris_results, strict=True))
    assert texts(at.error) == []


def test_a_table_arriving_over_results_waits_and_offers_the_study_file_first():
    at = open_page("quadratic_fields.csv")
    before = study(at)
    arrive(at, "iris.csv", iris_csv())
    assert study(at) is before
    assert table(at).name == "quadratic_fields.csv"
    assert waiting_buttons(at) == ["table.switch", "table.stay"]
    words = " ".join(texts(at.caption) + texts(at.markdown))
    assert "iris.csv" in words and "stays kept for quadratic_fields.csv" in words, words
    labels = [b.proto.label for b in at.get("download_button")]
    assert "Download the current study first" in labels, labels

    at.button(key="table.stay").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert waiting_buttons(at) == []
    assert study(at) is before
    assert table(at).name == "quadratic_fields.csv"


def test_staying_puts_the_sample_picker_back_on_the_table_shown():
    at = open_page("quadratic_fields.csv")
    _choose_sample(at, "elliptic_curves.csv")
    assert table(at).name == "quadratic_fields.csv"
    assert "table.stay" in waiting_buttons(at)
    at.button(key="table.stay").click().run()
    assert at.selectbox(key="table.sample").value == "quadratic_fields.csv"
    assert table(at).name == "quadratic_fields.csv"
    assert waiting_buttons(at) == []


def test_a_table_arriving_before_any_result_opens_at_once():
    at = open_page("quadratic_fields.csv")
    for uid in step_ids(at):
        at.button(key=f"s{uid}.remove").click().run()
    assert study(at).steps == ()
    arrive(at, "iris.csv", iris_csv())
    assert waiting_buttons(at) == []
    assert table(at).name == "iris.csv"
    assert all(r is not None for r in results(at))


def test_a_change_of_target_lists_the_steps_that_follow_it_and_can_be_undone():
    from analysis.study import steps_following_target

    at = open_page("quadratic_fields.csv")
    before, before_results = study(at), results(at)
    at.selectbox(key="focus.target").set_value("class_number_one").run()
    assert not at.exception, [e.value for e in at.exception]
    following = steps_following_target(before, "class_number_one")
    assert following, "the opening study has a projection, which follows the target"
    words = " ".join(texts(at.markdown))
    assert "Nothing has run yet" in words, words
    for index in following:
        assert f"{index + 1}. {before.steps[index].display_title}" in words, words
    # what re-running costs, from the time the same steps took with the target before
    from app.display import duration

    took = [getattr(before_results[i], "elapsed_seconds", None) for i in following]
    assert all(t is not None for t in took), "each step that follows the target is timed"
    said = (f"it took {duration(took[0])}." if len(took) == 1
            else f"they took {duration(sum(took))} in all.")
    assert f"With the target before, {said}" in words, words
    # nothing ran: the steps that follow the target wait, the others keep their results
    for index, (now, then) in enumerate(zip(results(at), before_results, strict=True)):
        assert (now is None) if index in following else (now is then), index

    at.button(key="target.undo").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert study(at) == before
    assert at.selectbox(key="focus.target").value is None
    assert all(a is b for a, b in zip(results(at), before_results, strict=True))
    assert not [b for b in at.button if b.key == "target.undo"]

    at.selectbox(key="focus.target").set_value("class_number_one").run()
    at.button(key="target.run").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert all(r is not None for r in results(at))
    assert results(at)[following[0]].target == "class_number_one"


def test_a_change_of_one_steps_target_is_listed_in_that_step_and_can_be_undone():
    at = open_page("quadratic_fields.csv")
    uid = add_step(at, "separator")
    at.button(key=f"s{uid}.run").click().run()
    before, before_results = study(at), results(at)
    old = before.steps[-1].params["target"]
    at.selectbox(key=f"s{uid}.target").set_value("class_number_one").run()
    assert not at.exception, [e.value for e in at.exception]
    assert study(at).steps[-1].params["target"] == "class_number_one"
    words = " ".join(texts(at.markdown))
    assert "This step's target is now **class_number_one**" in words, words
    assert f"{len(before.steps)}. Separator" in words, words
    assert results(at)[-1] is None  # waits for its run action
    at.button(key="target.undo").click().run()
    assert study(at) == before
    assert study(at).steps[-1].params["target"] == old
    assert results(at)[-1] is before_results[-1]


def _wide_csv(width: int, rows: int = 30) -> bytes:
    """A table of ``width`` integer invariants (seeded random digits) and an id."""
    import numpy as np

    values = np.random.default_rng(3).integers(0, 10, size=(rows, width))
    lines = [",".join(["object", *(f"x{j}" for j in range(width))])]
    lines += [",".join([f"o{i}", *map(str, values[i])]) for i in range(rows)]
    return ("\n".join(lines) + "\n").encode()


def test_a_long_feature_list_is_folded_on_the_page_and_a_short_one_is_not():
    width = 3 * FOLD_LIMIT
    at = open_page("quadratic_fields.csv")
    upload(at, "wide.csv", _wide_csv(width))
    assert table(at).name == "wide.csv"
    assert all(r is not None for r in results(at))
    labels = [e.label for e in at.expander]
    assert f"Features used ({width})" in labels, labels
    assert not [m for m in texts(at.markdown) if m.startswith("Features used:")]

    upload(at, "narrow.csv", _wide_csv(FOLD_LIMIT))
    assert not [e.label for e in at.expander if e.label.startswith("Features used")]
    assert any(m.startswith("Features used: `x0`") for m in texts(at.markdown))


def test_a_stopped_step_says_so_keeps_the_others_and_runs_again():
    """A click of a running step's stop action ends that pass of the script at its next
    drawing; the next pass finds the step on its thread and watches it end. Here the step
    was asked to stop before its thread started, so it stops at its first report."""
    from analysis.study import StepJob, result_key

    at = open_page("quadratic_fields.csv")
    before = results(at)
    uid = add_step(at, "separator")
    step = study(at).steps[-1]
    key = result_key(table(at), step.kind, step.params)
    job = StepJob(step, table(at))
    job.stop()
    at.session_state["scout.jobs"] = {key: job.start()}
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    warnings = texts(at.warning)
    assert any(w.startswith("Stopped by request during ") and "keep their results" in w
               for w in warnings), warnings
    assert results(at)[:-1] == before and results(at)[-1] is None
    assert f"s{uid}.run" in [b.key for b in at.button]
    assert key not in at.session_state["scout.jobs"]

    at.button(key=f"s{uid}.run").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert results(at)[-1] is not None
    assert not any(w.startswith("Stopped") for w in texts(at.warning))
    # nine imaginary quadratic fields of class number 1 (the Baker-Heegner-Stark theorem):
    # the separator predicts the flag those nine carry.
    assert set(results(at)[-1].classes) == {False, True}


def _iris_without(count: int) -> bytes:
    """The iris table less its last ``count`` flowers: other bytes, another table."""
    lines = iris_csv().decode().splitlines()
    return ("\n".join(lines[:len(lines) - count]) + "\n").encode()


def test_past_the_kept_limit_the_oldest_table_keeps_its_study_but_not_its_results():
    from app.state import KEPT_WHOLE

    at = open_page("quadratic_fields.csv")
    first_study = study(at)
    first = table(at).digest
    assert all(r is not None for r in results(at))
    for count in range(KEPT_WHOLE):
        upload(at, f"iris_{count}.csv", _iris_without(count))
        assert at.session_state["scout.kept"][first].whole
    # one more table: the table put aside first is the one whose results go, and the waiting
    # box says so before anything is let go
    arrive(at, "iris_last.csv", _iris_without(KEPT_WHOLE))
    words = " ".join(texts(at.caption))
    assert "the results of the study on quadratic_fields.csv will be let go" in words, words
    at.button(key="table.switch").click().run()
    kept = at.session_state["scout.kept"]
    assert not kept[first].whole and kept[first].results == {}
    assert sum(k.whole for k in kept.values()) == KEPT_WHOLE
    assert any("results of the study on quadratic_fields.csv were let go" in t
               for t in texts(at.info)), texts(at.info)

    # opened again, the table finds its study: the same steps and settings, nothing computed
    _choose_sample(at, "quadratic_fields.csv")
    at.button(key="table.switch").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert table(at).digest == first and study(at) == first_study
    assert all(r is None for r in results(at))
    assert any("back with its steps and settings" in t for t in texts(at.info)), texts(at.info)
