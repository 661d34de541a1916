"""Every subcommand on one small table: exit 0, the JSON fields other programs rely on, and the
table's bytes unchanged afterwards (../shared/design.md, Command line)."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from analysis.cli import main


@pytest.fixture(scope="module")
def table_path(tmp_path_factory) -> Path:
    # a planted integer rule: label is 2*a - b >= 3 (common practice for checking a separator)
    rng = np.random.default_rng(7)
    a = rng.integers(0, 10, 80)
    b = rng.integers(0, 10, 80)
    c = a + b
    lines = ["object,a,b,c,label"]
    lines += [f"o{i},{a[i]},{b[i]},{c[i]},{'yes' if 2 * a[i] - b[i] >= 3 else 'no'}"
              for i in range(80)]
    path = tmp_path_factory.mktemp("cli") / "small.csv"
    path.write_text("\n".join(lines) + "\n")
    return path


COMMANDS = {
    "inspect": ([], ["rows", "columns", "warnings"]),
    "project": (["--method", "pca"], ["coordinates", "explained_variance_ratio"]),
    "cluster": (["--method", "kmeans", "--k", "3", "--compare", "label"],
                ["method", "k", "assignments", "sweep", "agreement"]),
    "separate": (["--target", "label", "--features", "a,b"],
                 ["metrics", "baseline", "permutation_p", "train_rows", "test_rows",
                  "equation"]),
    "relations": ([], ["relations", "bounds"]),
    "outliers": (["--target", "label"], ["outliers"]),
}


@pytest.mark.parametrize("command", list(COMMANDS), ids=list(COMMANDS))
def test_each_command_writes_its_json_and_leaves_the_table_alone(table_path, tmp_path,
                                                                 command, capsys):
    options, fields = COMMANDS[command]
    before = hashlib.sha256(table_path.read_bytes()).hexdigest()
    out = tmp_path / f"{command}.json"
    extra = ["--csv", str(tmp_path / "list.csv")] if command == "outliers" else []
    code = main([command, str(table_path), *options, "--json", str(out), *extra])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "Traceback" not in captured.err
    payload = json.loads(out.read_text())
    missing = [name for name in fields if name not in payload]
    assert not missing, f"{command}: JSON lacks {missing}"
    assert hashlib.sha256(table_path.read_bytes()).hexdigest() == before
    if command == "separate":
        equation = payload["equation"]
        assert equation["text"] == "2*a - b >= 3" and equation["violations"] == 0, equation
        assert payload["metrics"]["mcc_ci"][0] <= payload["metrics"]["mcc"]
    if command == "relations":
        texts = [r["text"] for r in payload["relations"]]
        assert any(set(t.replace(" ", "").split("=")[0].replace("-", "+").split("+")) >=
                   {"a", "b", "c"} for t in texts), texts
    if command == "outliers":
        assert (tmp_path / "list.csv").read_text().startswith("rank,row,score,reasons")
