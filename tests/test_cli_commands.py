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


class _FakeTerminal:
    """A text stream that says it is a terminal, keeping what is written to it."""

    def __init__(self, terminal: bool = True):
        self.terminal = terminal
        self.parts: list[str] = []

    def isatty(self) -> bool:
        return self.terminal

    def write(self, text: str) -> int:
        self.parts.append(text)
        return len(text)

    def flush(self) -> None:
        pass


def _phase_lines(text: str) -> list[str]:
    # each phase is one line; counts rewrite it after a carriage return
    return [line.split("\r")[-1].replace("\x1b[K", "") for line in text.split("\n") if line]


def test_separate_shows_its_phases_on_a_terminal_stderr_only(table_path, tmp_path, capsys):
    from contextlib import redirect_stderr

    out = tmp_path / "separate.json"
    argv = ["separate", str(table_path), "--target", "label", "--features", "a,b",
            "--json", str(out)]
    terminal = _FakeTerminal()
    with redirect_stderr(terminal):
        assert main(argv) == 0
    lines = _phase_lines("".join(terminal.parts))
    result = json.loads(out.read_text())
    # the planted rule 2*a - b >= 3 is found by every split (common practice), so the
    # permutation test runs its shuffles and the line ends at the count the result reports
    assert "fitting the splits 5 of at most 5" in lines, lines
    shuffles = [line for line in lines if line.startswith("permutation test")]
    assert shuffles == [f"permutation test {result['permutations_run']} of at most 200"], lines
    assert lines.index("searching the exact equation") > lines.index(shuffles[0]), lines
    assert capsys.readouterr().out.strip(), "the summary still goes to stdout"

    piped = _FakeTerminal(terminal=False)
    with redirect_stderr(piped):
        assert main(argv) == 0
    assert piped.parts == [], "no phases on a stderr that is not a terminal"
