"""The command line's study commands: ``run`` and ``report``.

Bad input ends with exit status 2 and one line on stderr, never a traceback; the table file is
never changed by any command.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from analysis.cli import main
from analysis.study import (
    STUDY_VERSION,
    Study,
    load_study,
    new_step,
    run_study,
    save_study,
    without_timing,
)
from analysis.table import load_table

ROOT = Path(__file__).resolve().parent.parent
TABLES = ROOT / "sample_tables"


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture
def folder(tmp_path):
    """A folder holding a copy of a sample table and a study of it."""
    table_path = tmp_path / "fields.csv"
    table_path.write_bytes((TABLES / "quadratic_fields.csv").read_bytes())
    table = load_table(table_path)
    study = Study(table=table.name, title="fields", table_digest=table.digest,
                  steps=(new_step("overview"), new_step("projection", {"seed": 1})))
    save_study(study, tmp_path / "fields.study.json")
    return tmp_path


def _one_line_error(capsys, code) -> str:
    captured = capsys.readouterr()
    assert code == 2, f"exit status {code}, stderr {captured.err!r}"
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("error: ")
    assert "Traceback" not in captured.err + captured.out
    return lines[0]


def test_run_writes_the_report_and_the_json(folder, capsys):
    table_path = folder / "fields.csv"
    before = _digest(table_path)
    code = main(["run", str(folder / "fields.study.json"), "--out", str(folder / "r.html"),
                 "--json", str(folder / "run.json")])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "[1] Overview" in out and "[2] Projection" in out
    assert f"wrote {folder / 'r.html'}" in out
    page = (folder / "r.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>") and "not a proof" in page
    written = json.loads((folder / "run.json").read_text(encoding="utf-8"))
    expected = run_study(load_study(folder / "fields.study.json"), load_table(table_path))
    assert without_timing(written) == without_timing(expected.to_json())
    assert _digest(table_path) == before


def test_run_with_another_table_warns_and_still_runs(folder, capsys):
    other = folder / "other.csv"
    rows = (TABLES / "quadratic_fields.csv").read_bytes().splitlines(keepends=True)
    other.write_bytes(b"".join(rows[:40]))
    before = _digest(other)
    code = main(["run", str(folder / "fields.study.json"), "--table", str(other)])
    out = capsys.readouterr().out
    assert code == 0
    assert "warning: other.csv is not the table this study was saved with" in out
    assert "39 rows" in out
    assert _digest(other) == before


def test_a_failing_step_exits_2_but_writes_the_report(folder, capsys):
    table_path = folder / "fields.csv"
    before = _digest(table_path)
    table = load_table(table_path)
    study = Study(table=table.name, steps=(
        new_step("projection", {"columns": ["no_such_column"]}), new_step("overview")))
    save_study(study, folder / "broken.study.json")
    code = main(["run", str(folder / "broken.study.json"), "--out", str(folder / "r.html")])
    out = capsys.readouterr().out
    assert code == 2
    assert "could not run: fields.csv: no column named 'no_such_column'" in out
    assert "[2] Overview" in out
    assert "This step could not run" in (folder / "r.html").read_text(encoding="utf-8")
    assert _digest(table_path) == before


BAD_STUDIES = [
    ("not json", "{\"version\": ", r"line 1, column 13: not valid JSON"),
    ("json list", "[1, 2]", r"a study is a JSON object"),
    ("wrong version", {"version": "invariant-scout-study/9"}, r"study format"),
    ("unknown kind", {"steps": [{"kind": "telepathy"}]}, r"step 1: unknown step kind"),
    ("unknown setting", {"steps": [{"kind": "overview", "params": {"colour": 1}}]},
     r"step 1 \(overview\): unknown setting 'colour'"),
    ("bad type", {"steps": [{"kind": "overview"}, {"kind": "overview",
                                                    "params": {"seed": "one"}}]},
     r"step 2 \(overview\): setting 'seed' must be a whole number"),
]


def _bad_study(folder: Path, content) -> Path:
    path = folder / "bad.study.json"
    if isinstance(content, dict):
        data = {"version": STUDY_VERSION, "table": "fields.csv", "steps": []}
        data.update(content)
        content = json.dumps(data)
    path.write_text(content, encoding="utf-8")
    return path


@pytest.mark.parametrize("content, match", [b[1:] for b in BAD_STUDIES],
                         ids=[b[0] for b in BAD_STUDIES])
def test_a_malformed_study_exits_2_with_one_line(folder, capsys, content, match):
    before = _digest(folder / "fields.csv")
    path = _bad_study(folder, content)
    line = _one_line_error(capsys, main(["run", str(path), "--out", str(folder / "r.html")]))
    assert "bad.study.json" in line
    assert re.search(match, line), line
    assert not (folder / "r.html").exists()
    assert _digest(folder / "fields.csv") == before


@pytest.mark.parametrize("argv, match", [
    (["run", "{folder}/nothere.study.json"], r"nothere.study.json: no such file"),
    (["run", "{folder}/fields.study.json", "--table", "{folder}/gone.csv"],
     r"gone.csv: no such file"),
    (["run", "{folder}"], r"is a folder, not a study file"),
    (["run", "{folder}/fields.csv"], r"fields.csv, line 1, column 1: not valid JSON"),
], ids=["no study", "no table", "folder", "table given as study"])
def test_missing_files_exit_2_with_one_line(folder, capsys, argv, match):
    before = _digest(folder / "fields.csv")
    argv = [part.format(folder=folder) for part in argv]
    line = _one_line_error(capsys, main(argv))
    assert re.search(match, line), line
    assert _digest(folder / "fields.csv") == before


def test_the_table_next_to_the_study_is_found_from_anywhere(folder, capsys, monkeypatch):
    monkeypatch.chdir(folder.parent)
    code = main(["run", os.path.join(folder.name, "fields.study.json")])
    assert code == 0, capsys.readouterr().err


def _python_m_analysis(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "analysis", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=300)


def test_the_real_command_runs_a_study_and_rejects_a_bad_one(folder):
    before = _digest(folder / "fields.csv")
    done = _python_m_analysis("run", "fields.study.json", "--out", "report.html", cwd=folder)
    assert done.returncode == 0, done.stderr
    assert (folder / "report.html").stat().st_size > 0
    _bad_study(folder, {"steps": [{"kind": "overview", "params": {"seed": [1]}}]})
    bad = _python_m_analysis("run", "bad.study.json", cwd=folder)
    assert bad.returncode == 2
    assert bad.stderr.strip().splitlines() == [
        "error: bad.study.json: step 1 (overview): setting 'seed' must be a whole number, "
        "got [1]."]
    assert _digest(folder / "fields.csv") == before


def _generated_table(folder: Path) -> Path:
    """60 objects: c = a + b, the flag big = (a + 2b >= 12), and a parity category."""
    rows = ["name,a,b,c,big,kind"]
    for i in range(60):
        a, b = (7 * i) % 10, (3 * i + i // 10) % 10
        rows.append(f"o{i},{a},{b},{a + b},{str(a + 2 * b >= 12).lower()},"
                    f"{'even' if i % 2 == 0 else 'odd'}")
    path = folder / "generated.csv"
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def test_report_then_run_gives_the_same_numbers(tmp_path, capsys):
    table_path = _generated_table(tmp_path)
    before = _digest(table_path)
    code = main(["report", str(table_path), "--target", "big", "--seed", "3",
                 "--out", str(tmp_path / "first.html"),
                 "--study-out", str(tmp_path / "generated.study.json"),
                 "--json", str(tmp_path / "first.json")])
    out = capsys.readouterr().out
    assert code == 0, out
    for title in ("Overview", "Projection", "Clustering", "Separator", "Relations and bounds",
                  "Objects to look at"):
        assert f"] {title} (" in out, title
    study = load_study(tmp_path / "generated.study.json")
    assert [s.kind for s in study.steps] == [
        "overview", "projection", "clustering", "separator", "relations", "outliers"]
    assert all(s.seed == 3 for s in study.steps)
    code = main(["run", str(tmp_path / "generated.study.json"),
                 "--out", str(tmp_path / "second.html"), "--json", str(tmp_path / "second.json")])
    assert code == 0, capsys.readouterr().err
    first = json.loads((tmp_path / "first.json").read_text(encoding="utf-8"))
    second = json.loads((tmp_path / "second.json").read_text(encoding="utf-8"))
    assert without_timing(first) == without_timing(second)
    page = (tmp_path / "second.html").read_text(encoding="utf-8")
    assert "not a proof" in page and "Separating equation" in page
    assert _digest(table_path) == before


@pytest.mark.parametrize("argv, match", [
    (["report", "{table}", "--target", "colour", "--out", "{folder}/r.html"],
     r"generated.csv: no column named 'colour'"),
    (["report", "{table}", "--target", "name", "--out", "{folder}/r.html"],
     r"the id column 'name' cannot be a target"),
    (["report", "{folder}/gone.csv", "--out", "{folder}/r.html"], r"gone.csv: no such file"),
    (["report", "{table}", "--out", "{folder}/missing/r.html"],
     r"missing/r.html: cannot be written"),
], ids=["unknown target", "id as target", "no table", "no folder for the report"])
def test_report_bad_input_exits_2_with_one_line(tmp_path, capsys, argv, match):
    table_path = _generated_table(tmp_path)
    before = _digest(table_path)
    argv = [part.format(folder=tmp_path, table=table_path) for part in argv]
    line = _one_line_error(capsys, main(argv))
    assert re.search(match, line), line
    assert _digest(table_path) == before


def test_report_never_writes_over_its_table(tmp_path, capsys):
    table_path = _generated_table(tmp_path)
    before = table_path.read_bytes()
    line = _one_line_error(capsys, main(["report", str(table_path), "--out", str(table_path)]))
    assert "this is the table itself" in line
    assert table_path.read_bytes() == before


def test_table_settings_that_do_not_fit_exit_2_with_one_line(folder, capsys):
    path = _bad_study(folder, {"steps": [{"kind": "overview"}],
                               "table_settings": {"roles": {"nope": "category"}}})
    line = _one_line_error(capsys, main(["run", str(path)]))
    assert "the study's table settings do not fit fields.csv" in line
    assert "no column named 'nope'" in line


@pytest.mark.parametrize("limit, code, match", [
    ("max_rows=3", 2, r"more than 3 rows, over the limit of 3\..*--limit max_rows=N"),
    ("max_rows=100", 0, None),
    ("rows=5", 2, r"--limit rows=5: unknown limit 'rows'"),
    ("max_rows=many", 2, r"--limit max_rows=many: expected a whole number"),
    ("max_rows=0", 2, r"--limit max_rows=0: a limit must be positive"),
], ids=["under", "raised", "unknown-name", "not-a-number", "zero"])
def test_limits_can_be_raised_on_the_command_line(tmp_path, capsys, limit, code, match):
    table = tmp_path / "t.csv"
    table.write_text("a,b\n" + "\n".join(f"{i},{i % 3}" for i in range(10)) + "\n")
    assert main(["inspect", str(table), "--limit", limit]) == code
    if match:
        assert re.search(match, _one_line_error(capsys, code))
    else:
        assert "10 rows" in capsys.readouterr().out


def test_long_json_is_written_compact_and_reads_back_the_same(tmp_path, monkeypatch):
    from analysis import cli

    payload = {"coordinates": [{"row": i, "x": i / 7, "y": -i} for i in range(50)]}
    short = tmp_path / "short.json"
    cli._write_json(str(short), payload)
    assert "\n  " in short.read_text()
    monkeypatch.setattr(cli, "INDENTED_JSON_CHARS", 100)
    long = tmp_path / "long.json"
    cli._write_json(str(long), payload)
    assert "\n" not in long.read_text().rstrip("\n")
    assert json.loads(long.read_text()) == json.loads(short.read_text()) == payload


def test_interval_cells_as_features_by_their_midpoint(tmp_path, capsys):
    # the sample table gives 400 chromatic numbers only by their bounds: as missing cells the
    # column is mostly empty and left out; read by their midpoint it is a feature on every row
    table = Path(__file__).resolve().parent.parent / "sample_tables" / "graphs_as_downloaded.csv"
    plain, read = tmp_path / "plain.json", tmp_path / "read.json"
    common = ["separate", str(table), "--target", "planar", "--model", "lda", "--seed", "1"]
    assert main(common + ["--json", str(plain)]) == 0
    assert main(common + ["--intervals", "midpoint", "--json", str(read)]) == 0
    before, after = json.loads(plain.read_text()), json.loads(read.read_text())
    assert "chromatic_number" in [c["column"] if isinstance(c, dict) else c
                                  for c in before["left_out_columns"]]
    assert "chromatic_number" not in json.dumps(after["left_out_columns"])
    assert "chromatic_number" in [item["feature"] for item in after["importance"]]
    # and costs no row: the interval rows are the only ones it lacks
    assert after["rows_used"] == before["rows_used"]
    capsys.readouterr()
    with pytest.raises(SystemExit) as stopped:
        main(common + ["--intervals", "middle"])
    assert stopped.value.code == 2 and "middle" in capsys.readouterr().err
