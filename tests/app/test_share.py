"""Sharing a study with its results: the file opened with the same table shows them without
running; opened with another table it says so, keeps the settings and offers to run.

Driven by streamlit's AppTest with the helpers of test_page.py, on the shipped table of
imaginary quadratic fields.
"""

from __future__ import annotations

from test_page import (
    add_step,
    numbers,
    open_page,
    open_study_file,
    results,
    study,
    table,
    texts,
)

from analysis.study import read_study_file
from app import share
from app.loading import SAMPLES


def _saved_from_a_first_session() -> tuple[str, list]:
    first = open_page("quadratic_fields.csv")
    uid = add_step(first, "outliers")
    first.button(key=f"s{uid}.run").click().run()
    assert "share.study_results" in [b.key for b in first.get("download_button")]
    ran = results(first)
    assert ran and all(r is not None for r in ran)
    text = share.study_with_results_text(study(first), table(first),
                                         first.session_state["scout.cache"])
    return text, ran


def test_a_study_with_results_opened_on_its_table_shows_them_without_running():
    text, ran = _saved_from_a_first_session()
    second = open_page("graphs_up_to_7.csv")
    open_study_file(second, "fields.study.json", text.encode())
    assert not second.exception, [e.value for e in second.exception]
    assert table(second).name == "quadratic_fields.csv"
    shown = results(second)
    assert [numbers(r) for r in shown] == [numbers(r) for r in ran]
    # The results are the saved ones, timings included: nothing ran again.
    assert [getattr(r, "elapsed_seconds", None) for r in shown] == \
        [getattr(r, "elapsed_seconds", None) for r in ran]
    notes = texts(second.info)
    assert any("saved in the study file" in n and "nothing was run" in n for n in notes), notes
    assert "study.run_all" not in [b.key for b in second.button]
    # The table of fields lists every imaginary quadratic field of class number 1, nine by
    # the Baker-Heegner-Stark theorem; the overview shown counts them.
    flag = [c for c in shown[0].to_json()["columns"] if c["name"] == "class_number_one"]
    assert ["True", 9] in flag[0]["common"]


def test_a_study_with_results_opened_on_other_contents_keeps_the_settings_only():
    text, ran = _saved_from_a_first_session()
    saved = read_study_file(text.encode(), "fields.study.json")
    changed = (SAMPLES / "quadratic_fields.csv").read_bytes() + b"\n"
    second = open_page("graphs_up_to_7.csv")
    second.radio(key="table.source").set_value("file").run()
    second.file_uploader(key="table.upload").upload("quadratic_fields.csv", changed,
                                                    "text/csv")
    second.run()
    if "table.switch" in [b.key for b in second.button]:
        second.button(key="table.switch").click().run()
    open_study_file(second, "fields.study.json", text.encode())
    assert not second.exception, [e.value for e in second.exception]
    assert study(second) == saved.study
    # The opening study ran on the changed table before; the step it lacked has no result.
    assert results(second)[-1] is None
    notes = texts(second.info)
    assert any("other contents" in n and "not shown" in n and "settings are kept" in n
               for n in notes), notes
    second.button(key="study.run_all").click().run()
    assert not second.exception, [e.value for e in second.exception]
    again = results(second)
    assert all(r is not None for r in again)
    # A trailing empty line changes the bytes (the digest the overview names), not the rows:
    # the numbers agree.
    def figures(found):
        return [{k: v for k, v in numbers(r).items() if k != "digest"} for r in found]
    assert figures(again) == figures(ran)
