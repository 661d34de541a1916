"""Studies: the versioned JSON file, editing steps, and running a study on a table."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import stat
from pathlib import Path

import pytest

from analysis.errors import StepError, StudyError, TableError
from analysis.overview import OverviewStep
from analysis.study import (
    STUDY_VERSION,
    ResultCache,
    Study,
    StudyStep,
    TableSettings,
    add_step,
    check_step,
    default_study,
    load_study,
    move_step,
    new_step,
    remove_step,
    run_study,
    save_study,
    steps_following_target,
    study_from_json,
    study_to_json,
    update_step,
    with_target,
    without_timing,
)
from analysis.table import load_table, read_table

TABLES = Path(__file__).resolve().parent.parent / "sample_tables"

SMALL_CSV = (
    b"name,a,b,c,kind,same\n"
    b"x1,1,2,3,even,one\n"
    b"x2,2,3,5,odd,one\n"
    b"x3,3,5,8,even,one\n"
    b"x4,4,4,8,odd,one\n"
    b"x5,5,1,6,even,one\n"
    b"x6,6,9,15,odd,one\n"
    b"x7,7,2,9,even,one\n"
    b"x8,8,8,16,odd,one\n"
)


@pytest.fixture(scope="module")
def small():
    return read_table(SMALL_CSV, "small.csv")


@pytest.fixture(scope="module")
def fields():
    return load_table(TABLES / "quadratic_fields.csv")


def _study(table, *steps: StudyStep, **changes) -> Study:
    base = Study(table=table.name, steps=steps, title="a test study",
                 table_digest=table.digest)
    return dataclasses.replace(base, **changes)


def _two_steps(table) -> Study:
    return _study(table, new_step("overview", {"seed": 3}),
                  new_step("projection", {"method": "pca", "seed": 3}, title="PCA picture"))


def _valid() -> dict:
    return {
        "version": STUDY_VERSION,
        "title": "t",
        "table": "small.csv",
        "table_digest": None,
        "table_settings": {"id_column": None, "roles": {}},
        "steps": [{"kind": "overview", "title": None, "params": {"seed": 0}}],
    }


def _with(change) -> dict:
    data = _valid()
    change(data)
    return data


# ----------------------------------------------------------------------------------------
# The file


def test_round_trip_through_a_file_keeps_the_study(tmp_path, small):
    study = _two_steps(small)
    path = tmp_path / "small.study.json"
    save_study(study, path)
    loaded = load_study(path)
    assert loaded == study
    assert study_to_json(loaded) == study_to_json(study)
    # The file is plain JSON (RFC 8259): the standard library reads it back unchanged.
    assert json.loads(path.read_text(encoding="utf-8")) == study_to_json(study)


def test_a_study_stores_every_setting_defaults_included(small):
    study = _two_steps(small)
    params = study.steps[0].params
    fields = {f.name for f in dataclasses.fields(OverviewStep)}
    assert set(params) == fields
    assert params["seed"] == 3
    assert study.steps[0].build() == OverviewStep(seed=3)


def test_json_without_defaults_reads_the_same_as_with_them():
    data = _valid()
    data["steps"][0]["params"] = {}
    short = study_from_json(data)
    data["steps"][0]["params"] = {"seed": 0, "top_correlations": 10}
    assert study_from_json(data) == short


def test_table_path_is_next_to_the_study_file(tmp_path):
    study = study_from_json(_valid())
    assert study.table_path(tmp_path / "studies" / "a.study.json") == \
        tmp_path / "studies" / "small.csv"


def test_table_settings_round_trip_and_apply(tmp_path, fields):
    study = _study(fields, new_step("overview"),
                   table_settings=TableSettings(id_column="field",
                                                roles={"disc_mod_8": "category"}))
    path = tmp_path / "fields.study.json"
    save_study(study, path)
    loaded = load_study(path)
    assert loaded.table_settings.role_overrides == {"disc_mod_8": "category"}
    run = run_study(loaded, fields)
    assert run.ok, run.summary()
    columns = {c["name"]: c for c in run.outcomes[0].result.to_json()["columns"]}
    assert columns["disc_mod_8"]["role"] == "category"
    assert run.table.id_column == "field"


def test_settings_that_do_not_fit_the_table_are_a_study_error(small):
    study = _study(small, new_step("overview"),
                   table_settings=TableSettings(roles={"no such column": "category"}))
    with pytest.raises(StudyError, match="table settings do not fit small.csv.*no such column"):
        run_study(study, small)


MALFORMED = [
    ("unknown kind", lambda d: d["steps"][0].update(kind="telepathy"),
     r"step 1: unknown step kind 'telepathy'; known kinds are overview"),
    ("unknown setting", lambda d: d["steps"][0]["params"].update(colour="red"),
     r"step 1 \(overview\): unknown setting 'colour'"),
    ("seed as text", lambda d: d["steps"][0]["params"].update(seed="7"),
     r"step 1 \(overview\): setting 'seed' must be a whole number, got \"7\""),
    ("seed as true", lambda d: d["steps"][0]["params"].update(seed=True),
     r"setting 'seed' must be a whole number, got true"),
    ("seed as a fraction", lambda d: d["steps"][0]["params"].update(seed=1.5),
     r"setting 'seed' must be a whole number, got 1.5"),
    ("negative seed", lambda d: d["steps"][0]["params"].update(seed=-1),
     r"setting 'seed' must be a whole number from 0"),
    ("count as text", lambda d: d["steps"][0]["params"].update(top_correlations="ten"),
     r"setting 'top_correlations' must be a whole number"),
    ("params not an object", lambda d: d["steps"][0].update(params=[1, 2]),
     r"step 1 \(overview\): 'params' must be an object"),
    ("step not an object", lambda d: d["steps"].append("overview"),
     r"step 2: a step is an object"),
    ("step without kind", lambda d: d["steps"].append({"params": {}}),
     r"step 2: no 'kind'"),
    ("unknown step key", lambda d: d["steps"][0].update(colour="red"),
     r"step 1: unknown key 'colour'"),
    ("steps not a list", lambda d: d.update(steps={"kind": "overview"}),
     r"'steps' must be a list"),
    ("no table", lambda d: d.pop("table"), r"'table' must name the table file"),
    ("bad digest", lambda d: d.update(table_digest="abc"), r"'table_digest' must be a sha256"),
    ("unknown top key", lambda d: d.update(colour="red"), r"unknown key 'colour'"),
    ("unknown role", lambda d: d["table_settings"]["roles"].update(a="colour"),
     r"column 'a': unknown role \"colour\""),
    ("id column as number", lambda d: d["table_settings"].update(id_column=3),
     r"'id_column' must be a column name"),
    ("newer version", lambda d: d.update(version="invariant-scout-study/3"),
     r"study format 'invariant-scout-study/3' is not one this version"),
    ("foreign version", lambda d: d.update(version="1.0"), r"unknown version \"1.0\""),
    ("no version", lambda d: d.pop("version"), r"no 'version'"),
    ("title as number", lambda d: d.update(title=5), r"'title' must be text"),
]


@pytest.mark.parametrize("change, match", [m[1:] for m in MALFORMED],
                         ids=[m[0] for m in MALFORMED])
def test_malformed_study_is_rejected_with_the_step_and_setting(change, match):
    with pytest.raises(StudyError, match=match):
        study_from_json(_with(change), source="bad.study.json")


@pytest.mark.parametrize("data, match", [
    ([], r"a study is a JSON object .* got a list"),
    ("overview", r"got text"),
    (None, r"got null"),
], ids=["list", "string", "null"])
def test_json_that_is_not_an_object_is_rejected(data, match):
    with pytest.raises(StudyError, match=match):
        study_from_json(data, source="bad.study.json")


@pytest.mark.parametrize("content, match", [
    (b"{\"version\": ", r"bad.study.json, line 1, column 13: not valid JSON"),
    (b"version: 1\nsteps: []\n", r"not valid JSON"),
    (b"", r"not valid JSON"),
    (b"\xff\xfe\x00{", r"not UTF-8 text"),
    (b"[1, 2, 3]", r"a study is a JSON object"),
    (b"{\"version\": NaN}", r"NaN is not a JSON number"),
], ids=["cut short", "yaml", "empty", "not utf-8", "json list", "nan"])
def test_a_file_that_is_not_a_study_is_rejected(tmp_path, content, match):
    path = tmp_path / "bad.study.json"
    path.write_bytes(content)
    with pytest.raises(StudyError, match=match):
        load_study(path)


def test_a_missing_study_file_is_named(tmp_path):
    with pytest.raises(StudyError, match=r"nothere.study.json: no such file"):
        load_study(tmp_path / "nothere.study.json")


def test_an_unknown_setting_in_code_is_a_study_error():
    with pytest.raises(StudyError, match=r"unknown setting 'colour'"):
        check_step("overview", {"colour": "red"})


# ----------------------------------------------------------------------------------------
# Editing


def test_add_remove_and_move_steps_return_new_studies(small):
    study = _study(small, new_step("overview"))
    longer = add_step(study, "projection", {"method": "pca"}, title="picture")
    assert [s.kind for s in study.steps] == ["overview"]
    assert [s.kind for s in longer.steps] == ["overview", "projection"]
    first = add_step(longer, "overview", {"seed": 5}, index=0)
    assert [s.seed for s in first.steps] == [5, 0, 0]
    moved = move_step(first, 0, 2)
    assert [(s.kind, s.seed) for s in moved.steps] == [
        ("overview", 0), ("projection", 0), ("overview", 5)]
    shorter = remove_step(moved, 1)
    assert [s.kind for s in shorter.steps] == ["overview", "overview"]
    changed = update_step(shorter, 1, params={"top_correlations": 2}, title="short overview")
    assert changed.steps[1].params == {"top_correlations": 2, "seed": 5}
    assert changed.steps[1].display_title == "short overview"
    assert shorter.steps[1].params["top_correlations"] == 10


@pytest.mark.parametrize("edit, match", [
    (lambda s: remove_step(s, 3), r"cannot remove step 3: the study has steps 0 to 0"),
    (lambda s: move_step(s, 0, -1), r"cannot move to step -1"),
    (lambda s: update_step(s, 0, params={"seed": "x"}), r"'seed' must be a whole number"),
    (lambda s: add_step(s, "telepathy"), r"unknown step kind 'telepathy'"),
], ids=["remove out of range", "move out of range", "bad update", "unknown kind"])
def test_bad_edits_are_study_errors(small, edit, match):
    with pytest.raises(StudyError, match=match):
        edit(_study(small, new_step("overview")))


def test_a_study_step_cannot_be_changed_through_its_params(small):
    params = {"seed": 1}
    step = new_step("overview", params)
    params["seed"] = 2
    assert step.params["seed"] == 1
    assert study_to_json(_study(small, step))["steps"][0]["params"] is not step.params


# ----------------------------------------------------------------------------------------
# Running


def test_rerunning_a_study_gives_identical_numbers(small, tmp_path):
    study = _two_steps(small)
    path = tmp_path / "s.study.json"
    save_study(study, path)
    first = run_study(study, small).to_json()
    second = run_study(load_study(path), small).to_json()
    assert first["timing"]["steps"] and "timing" not in without_timing(first)
    assert without_timing(first) == without_timing(second)
    # The run JSON is strict JSON (no NaN), as the command line writes it.
    json.dumps(first, allow_nan=False)


def test_the_run_reports_the_table_by_its_sha256(fields):
    data = (TABLES / "quadratic_fields.csv").read_bytes()
    run = run_study(_study(fields, new_step("overview")), fields)
    # Independent digest from the standard library (hashlib, FIPS 180-4 SHA-256).
    assert run.table.digest == hashlib.sha256(data).hexdigest()
    assert run.to_json()["table"]["rows"] == data.count(b"\n") - 1
    assert run.warnings == ()


def test_a_different_table_warns_but_runs(small, fields):
    study = _study(small, new_step("overview"))
    run = run_study(study, fields)
    assert run.ok
    assert len(run.warnings) == 1
    assert "is not the table this study was saved with" in run.warnings[0]
    assert "quadratic_fields.csv" in run.summary()


@pytest.mark.parametrize("kind, params, message", [
    ("projection", {"columns": ["no such column"]}, "no column named 'no such column'"),
    ("separator", {"target": "same", "permutations": 10}, "the target 'same' has one class"),
], ids=["projection on a missing column", "separator on a one-class target"])
def test_a_failing_step_leaves_the_others_intact(small, kind, params, message):
    good = new_step("overview")
    bad = new_step(kind, params)
    study = _study(small, good, bad, new_step("projection", {"method": "pca"}))
    run = run_study(study, small)
    assert not run.ok
    assert [o.ok for o in run.outcomes] == [True, False, True]
    assert message in run.outcomes[1].error and not run.outcomes[1].internal
    assert run.outcomes[1].result is None
    alone = run_study(_study(small, good, study.steps[2]), small)
    ran = [o.to_json() for o in run.outcomes if o.ok]
    assert without_timing([dict(r, index=None) for r in ran]) == without_timing(
        [dict(o.to_json(), index=None) for o in alone.outcomes])
    data = run.to_json()
    assert data["ok"] is False
    assert data["steps"][1]["error"] == run.outcomes[1].error
    assert "could not run: " in run.summary()


def test_an_unexpected_exception_is_recorded_not_raised(small, monkeypatch):
    def broken(self, table, *, progress=None):
        raise ZeroDivisionError("division by zero")

    monkeypatch.setattr(OverviewStep, "run", broken)
    study = _study(small, new_step("overview"), new_step("projection"))
    run = run_study(study, small)
    assert run.outcomes[0].internal
    assert run.outcomes[0].error.startswith("internal error (ZeroDivisionError: division by zero)")
    assert run.outcomes[1].ok


def test_a_step_error_from_a_step_is_recorded(small, monkeypatch):
    def refuses(self, table, *, progress=None):
        raise StepError("small.csv: this step refuses.")

    monkeypatch.setattr(OverviewStep, "run", refuses)
    run = run_study(_study(small, new_step("overview")), small)
    assert run.outcomes[0].error == "small.csv: this step refuses."
    assert not run.outcomes[0].internal


def test_results_come_from_the_cache_on_a_second_run(small, monkeypatch):
    study = _two_steps(small)
    cache = ResultCache()
    first = run_study(study, small, cache=cache)
    assert len(cache) == 2 and not any(o.cached for o in first.outcomes)
    calls = []
    original = OverviewStep.run

    def counted(self, table, *, progress=None):
        calls.append(self)
        return original(self, table, progress=progress)

    monkeypatch.setattr(OverviewStep, "run", counted)
    second = run_study(study, small, cache=cache)
    assert calls == [] and all(o.cached for o in second.outcomes)
    assert without_timing(second.to_json()) == without_timing(first.to_json())
    # Another seed is another key: the step runs again.
    reseeded = update_step(study, 0, params={"seed": 4})
    run_study(reseeded, small, cache=cache)
    assert len(calls) == 1


def test_other_roles_are_another_cache_key(small):
    cache = ResultCache()
    study = _study(small, new_step("overview"))
    run_study(study, small, cache=cache)
    as_category = dataclasses.replace(study, table_settings=TableSettings(roles={"a": "category"}))
    run = run_study(as_category, small, cache=cache)
    assert not run.outcomes[0].cached
    assert len(cache) == 2


def test_the_cache_keeps_at_most_its_bound_dropping_the_least_recently_used():
    cache = ResultCache(max_entries=2)
    cache.put("a", 1)
    cache.put("b", 2)
    assert cache.get("a") == 1
    cache.put("c", 3)
    assert "b" not in cache and cache.get("a") == 1 and cache.get("c") == 3
    assert len(cache) == 2
    cache.clear()
    assert len(cache) == 0 and cache.get("a") is None


def test_progress_is_reported_per_step(small):
    calls = []
    run_study(_two_steps(small), small, progress=lambda *a: calls.append(a))
    assert calls == [("step 1 of 2: Overview", 0, 2), ("step 2 of 2: PCA picture", 1, 2),
                     ("done", 2, 2)]


def test_running_never_changes_the_table_file(tmp_path):
    path = tmp_path / "fields.csv"
    path.write_bytes((TABLES / "quadratic_fields.csv").read_bytes())
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    table = load_table(path)
    columns, frame = table.columns, table.frame.copy()
    study = _study(table, new_step("overview"), new_step("projection"),
                   table_settings=TableSettings(id_column="field", roles={"units": "category"}))
    run = run_study(study, table)
    assert run.source_table.role("units") == "category"
    save_study(study, tmp_path / "fields.study.json")
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before
    # The Table the caller holds is not changed either: roles are applied to a new one.
    assert table.columns == columns and table.role("units") == "invariant"
    assert table.frame.equals(frame)


def test_one_step_runs_alone_to_the_same_result_as_in_a_study(small):
    from analysis.study import run_step

    study = _two_steps(small)
    alone = run_step(study.steps[1], small, index=1)
    in_study = run_study(study, small).outcomes[1]
    assert without_timing(alone.to_json()) == without_timing(in_study.to_json())
    failed = run_step(new_step("projection", {"columns": ["nope"]}), small)
    assert failed.result is None and "no column named 'nope'" in failed.error


# ----------------------------------------------------------------------------------------
# The default study and writing files


def test_the_default_study_without_a_target(small):
    study = default_study(small, seed=7)
    assert [s.kind for s in study.steps] == [
        "overview", "projection", "clustering", "relations", "outliers"]
    assert all(s.seed == 7 for s in study.steps)
    assert study.steps[1].params["method"] == "pca"
    assert study.steps[2].params["method"] == "auto"
    assert study.table == "small.csv" and study.table_digest == small.digest
    assert study.table_settings.id_column == "name"


def test_the_default_study_with_a_target(small):
    study = default_study(small, target="kind")
    assert [s.kind for s in study.steps] == [
        "overview", "projection", "clustering", "separator", "relations", "outliers"]
    assert study.steps[3].params["target"] == "kind"
    assert study.steps[5].params["target"] == "kind"
    assert study.steps[1].params["target"] == "kind"
    assert study.steps[2].params["compare"] == "kind"
    assert "kind" in study.title
    assert study_from_json(study_to_json(study)) == study


def test_the_default_study_keeps_roles_set_by_hand(small):
    table = small.with_roles({"a": "category"})
    study = default_study(table)
    assert study.table_settings.role_overrides == {"a": "category"}


@pytest.mark.parametrize("target, error, match", [
    ("colour", TableError, r"small.csv: no column named 'colour'"),
    ("name", StudyError, r"the id column 'name' cannot be a target"),
], ids=["missing column", "id column"])
def test_the_default_study_rejects_a_bad_target(small, target, error, match):
    with pytest.raises(error, match=match):
        default_study(small, target=target)


def test_files_are_written_with_the_usual_permissions(tmp_path, small):
    previous = os.umask(0o022)
    try:
        save_study(_two_steps(small), tmp_path / "s.study.json")
    finally:
        os.umask(previous)
    assert stat.S_IMODE((tmp_path / "s.study.json").stat().st_mode) == 0o644
    assert [p.name for p in tmp_path.iterdir()] == ["s.study.json"], "no temporary file left"


def test_the_table_is_never_written_over(tmp_path):
    path = tmp_path / "small.csv"
    path.write_bytes(SMALL_CSV)
    table = load_table(path)
    with pytest.raises(StudyError, match=r"small.csv: this is the table itself"):
        save_study(_study(table, new_step("overview")), path)
    assert path.read_bytes() == SMALL_CSV


def test_writing_into_a_missing_folder_is_a_study_error(tmp_path, small):
    with pytest.raises(StudyError, match=r"nowhere/s.study.json: cannot be written"):
        save_study(_two_steps(small), tmp_path / "nowhere" / "s.study.json")


@pytest.mark.parametrize("kind, params, match", [
    ("projection", {"method": "xyz"}, r"step 1: step 'projection': projection method 'xyz'"),
    ("clustering", {"k": 1}, r"step 1: step 'clustering': k = 1"),
    ("separator", {"target": "t", "model": "quartic"}, r"model 'quartic': use one of"),
    ("separator", {"target": "t", "train_fraction": 1.5}, r"train fraction 1\.5"),
    ("outliers", {"top": 0}, r"top = 0: give how many rows to list"),
    ("relations", {"max_coefficient": 0}, r"step 1: step 'relations'"),
    ("projection", {"array_encoding": "zigzag"},
     r"array encoding 'zigzag': use one of invariant, compact, full, flat, both"),
    ("separator", {"target": "t", "kernel_approximation": "fast"},
     r"kernel approximation 'fast': use one of exact, auto, nystroem, sample"),
    ("overview", {"top_correlations": -1},
     r"top_correlations -1: use a whole number of at least 0"),
], ids=["projection-method", "clustering-k", "separator-model", "train-fraction", "top",
        "relations-coefficient", "array-encoding", "kernel-approximation", "top-correlations"])
def test_a_bad_setting_value_is_refused_when_the_study_is_read(kind, params, match):
    data = {"version": "invariant-scout-study/1", "table": "t.csv",
            "steps": [{"kind": kind, "params": params}]}
    with pytest.raises(StudyError, match=match):
        study_from_json(data)


def test_run_step_passes_progress_to_steps_that_report_it():
    from analysis.study import new_step, run_step
    from analysis.table import read_table

    rows = "\n".join(f"{i},{i % 7},{i % 3},{'true' if i % 7 > 3 else 'false'}"
                     for i in range(120))
    table = read_table(f"k,a,b,f\n{rows}\n".encode(), "small.csv")
    seen = []
    step = new_step("separator", {"target": "f", "permutations": 19, "repeats": 2})
    outcome = run_step(step, table, progress=seen.append)
    assert outcome.ok, outcome.error
    assert any(p.phase == "permutation test" for p in seen)
    quiet = run_step(new_step("overview", {}), table, progress=seen.append)
    assert quiet.ok


def _target_plan() -> Study:
    """Every kind of step, one separator explaining the breakers of a statement."""
    plan = Study(table="graphs_up_to_7.csv")
    for kind, params in [("overview", {}), ("projection", {"columns": ["edges", "planar"]}),
                         ("clustering", {}), ("separator", {"target": "tree"}),
                         ("relations", {}), ("outliers", {})]:
        plan = add_step(plan, kind, params)
    return plan


def test_the_steps_that_follow_the_target_are_those_whose_settings_change():
    plan = _target_plan()
    # projection, clustering (compared with it), separator, objects to look at
    assert steps_following_target(plan, "planar") == (1, 2, 3, 5)
    changed = with_target(plan, "planar")
    for index, (old, new) in enumerate(zip(plan.steps, changed.steps, strict=True)):
        assert (old != new) == (index in (1, 2, 3, 5)), index
    assert changed.steps[1].params["target"] == "planar"
    assert changed.steps[1].params["columns"] == ["edges"]  # the target is no feature
    assert changed.steps[2].params["compare"] == "planar"
    # once given, nothing more follows; and a separator keeps its target when it is cleared
    assert steps_following_target(changed, "planar") == ()
    assert steps_following_target(changed, None) == (1, 2, 5)
    assert with_target(changed, None).steps[3].params["target"] == "planar"


def test_a_separator_explaining_a_statement_does_not_follow_the_target():
    statement = {"kind": "bound", "terms": [{"column": "edges", "coef": "1"}],
                 "relation": "<=", "constant": "21", "text": "edges <= 21"}
    plan = add_step(Study(table="graphs_up_to_7.csv"), "separator",
                    {"target_statement": statement})
    assert steps_following_target(plan, "planar") == ()
    assert with_target(plan, "planar") == plan


# ----------------------------------------------------------------------------------------
# A study file that carries its results


@pytest.fixture(scope="module")
def saved_once(tmp_path_factory):
    """The first study of the class-number table run once and saved with its results."""
    from analysis.study import saved_results

    table = load_table(TABLES / "quadratic_fields.csv")
    study = default_study(table, target="class_number_one", seed=5)
    cache = ResultCache()
    first = run_study(study, table, cache=cache)
    assert first.ok, [o.error for o in first.outcomes]
    path = tmp_path_factory.mktemp("saved") / "fields.study.json"
    save_study(study, path, saved_results(study, first.source_table, cache))
    return table, study, path


def test_a_study_saved_with_results_gives_them_back_and_a_fresh_run_the_same_figures(
        saved_once):
    from analysis.study import load_study_file, restore_results

    table, study, path = saved_once
    opened = load_study_file(path)
    assert opened.study == study and load_study(path) == study
    assert opened.saved.fits(table) and opened.saved.count == len(study.steps)
    stored = json.loads(path.read_text(encoding="utf-8"))["results"]["steps"]
    fresh = run_study(opened.study, table)  # no cache: every step computed again
    assert [without_timing(s["json"]) for s in stored] == \
        [without_timing(o["result"]) for o in fresh.to_json()["steps"]]
    cache = ResultCache()
    assert restore_results(opened.study, opened.saved, fresh.source_table, cache) == 6
    shown = run_study(opened.study, table, cache=cache)
    assert all(o.cached for o in shown.outcomes)
    assert without_timing(shown.to_json()) == without_timing(fresh.to_json())
    # The class number is 1 for exactly nine imaginary quadratic fields (the Baker-Heegner-
    # Stark theorem); the table lists fields far past the largest, -163.
    flag = [c for c in stored[0]["json"]["columns"] if c["name"] == "class_number_one"]
    assert ["True", 9] in flag[0]["common"]


def test_saved_results_are_not_restored_on_a_table_with_other_bytes(saved_once):
    from analysis.study import load_study_file, restore_results

    table, _, path = saved_once
    changed = read_table((TABLES / "quadratic_fields.csv").read_bytes() + b"\n",
                         "quadratic_fields.csv")
    opened = load_study_file(path)
    assert changed.digest != table.digest and not opened.saved.fits(changed)
    cache = ResultCache()
    assert restore_results(opened.study, opened.saved, changed, cache) == 0 and len(cache) == 0


def test_a_study_with_results_has_a_format_of_its_own_and_older_files_still_read(
        saved_once, tmp_path):
    from analysis.study import RESULTS_VERSION, read_study_file

    _, study, path = saved_once
    data = json.loads(path.read_text(encoding="utf-8"))
    # settings only: format 1, which every earlier version reads; with results: format 2,
    # which a reader from before results existed refuses by its format, not by a key
    assert data["version"] == RESULTS_VERSION != STUDY_VERSION
    plain = tmp_path / "plain.study.json"
    save_study(study, plain)
    assert json.loads(plain.read_text(encoding="utf-8"))["version"] == STUDY_VERSION
    # a file with results written as format 1 (before format 2 existed) is read with them
    data["version"] = STUDY_VERSION
    opened = read_study_file(json.dumps(data).encode(), "older.study.json")
    assert opened.study == study and opened.saved.count == len(study.steps)


def _edit_saved(path, change) -> bytes:
    data = json.loads(path.read_text(encoding="utf-8"))
    change(data)
    return json.dumps(data).encode()


@pytest.mark.parametrize("change, words", [
    (lambda d: d["results"]["steps"][0]["json"].update(rows=999), "does not give the figures"),
    (lambda d: d["results"]["steps"].pop(), "one entry per step"),
    (lambda d: d["results"].update(table_digest="abc"), "sha256 digest"),
    (lambda d: d["results"]["steps"][1]["params"].update(seed=6), "other settings"),
    (lambda d: d["results"]["steps"][1].update(stored={"$dataclass": "os.system",
                                                       "fields": {}}), "not a record"),
    (lambda d: d["results"]["steps"][0].update(stored=d["results"]["steps"][1]["stored"]),
     r"not the result of its step \(Overview\)"),
    (lambda d: d["results"].update(extra=1), "'results' must be an object"),
])
def test_a_damaged_saved_result_is_refused_naming_the_step(saved_once, change, words):
    from analysis.study import read_study_file

    _, _, path = saved_once
    with pytest.raises(StudyError, match=words) as caught:
        read_study_file(_edit_saved(path, change), "sent.study.json")
    assert str(caught.value).startswith("sent.study.json")


def test_the_command_line_runs_a_study_saved_with_its_results(saved_once, tmp_path,
                                                               capsys):
    from analysis.cli import main

    table, _, saved_path = saved_once
    path = tmp_path / saved_path.name
    path.write_bytes(saved_path.read_bytes())
    (tmp_path / table.name).write_bytes((TABLES / table.name).read_bytes())
    out_json = tmp_path / "run.json"
    assert main(["run", str(path), "--json", str(out_json)]) == 0, capsys.readouterr()
    stored = json.loads(path.read_text(encoding="utf-8"))["results"]["steps"]
    ran = json.loads(out_json.read_text(encoding="utf-8"))["steps"]
    assert [without_timing(s["json"]) for s in stored] == \
        [without_timing(o["result"]) for o in ran]


# ----------------------------------------------------------------------------------------
# A step on a thread of its own, and stopping it


def _wait_for_a_report(job):
    import time as clock

    for _ in range(600):
        if job.latest is not None or job.done:
            return
        clock.sleep(0.05)


@pytest.mark.parametrize("kind, params, phase", [
    ("separator", {"target": "class_number_one", "seed": 2}, None),
    ("clustering", {"seed": 2}, "trying clusterings"),
    ("outliers", {"target": "class_number_one", "seed": 2}, "scoring every object"),
])
def test_a_running_step_stops_at_its_next_report_and_keeps_no_result(kind, params, phase):
    from analysis.study import StepJob

    table = load_table(TABLES / "quadratic_fields.csv")
    job = StepJob(new_step(kind, params), table).start()
    _wait_for_a_report(job)
    # every one of these kinds reports again after its first report, so the stop lands
    assert not job.done, "the step ended before it could be stopped"
    job.stop()
    assert job.wait(120)
    assert job.outcome.stopped and job.outcome.result is None
    assert job.outcome.error.startswith("Stopped by request during ")
    if phase is not None:
        assert job.outcome.error == f"Stopped by request during {phase}."


def test_a_step_left_alone_on_its_thread_gives_what_the_runner_gives(small):
    from analysis.study import StepJob, run_step

    step = new_step("overview", {"seed": 0})
    job = StepJob(step, small).start()
    assert job.wait(120) and job.outcome.ok and not job.outcome.stopped
    assert job.outcome.result.to_json() == run_step(step, small).result.to_json()
    # Every row of the small table is read: eight objects x1 to x8.
    assert job.outcome.result.rows == 8


def test_every_kind_reports_and_a_stop_asked_before_it_starts_keeps_no_result(small):
    import inspect

    from analysis.steps import STEP_KINDS, step_class
    from analysis.study import StepJob

    for kind in STEP_KINDS:
        # the page's stop action relies on it: every kind takes a progress callback
        assert "progress" in inspect.signature(step_class(kind).run).parameters, kind
    job = StepJob(new_step("overview", {"seed": 0}), small)
    job.stop()
    job.start()
    assert job.wait(120)
    assert job.outcome.stopped and job.outcome.result is None
    assert job.outcome.error == "Stopped by request during describing the columns."
