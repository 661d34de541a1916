"""Robustness: hostile and broken table files.

For every case the program either refuses with one TableError whose message names the file
and, where it applies, the row and the column and says what to do, or loads the table
correctly and states a warning. The command line answers a refusal with exit status 2 and
one line on stderr, never a traceback. The file itself is never changed.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import re
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from analysis.cli import main
from analysis.errors import TableError
from analysis.features import build_features
from analysis.table import Limits, load_table, read_table

ROOT = Path(__file__).resolve().parent.parent
EXTENSIONS = (".csv", ".tsv", ".json", ".jsonl", ".parquet")


@dataclass(frozen=True)
class Case:
    """A file, and what must happen to it: ``error`` (regexes that must all match the
    message) or ``warning`` (a regex one of the warnings must match; None: no warning
    needed)."""

    name: str
    data: bytes
    error: tuple[str, ...] = ()
    warning: str | None = None


def _deep(depth: int) -> bytes:
    return b"[" * depth + b"]" * depth


MEGABYTE_CELL = "x" * (1024 * 1024)

CASES = {
    "empty file": Case("empty.csv", b"", error=(r"empty\.csv", r"the file is empty",
                                              r"needs a header and rows")),
    "only blanks": Case("blank.csv", b"  \n\n \n", error=(r"blank\.csv: the file is empty",)),
    "header only": Case("header.csv", b"a,b,c\n", error=(r"header\.csv",
                                                        r"a header but no rows",
                                                        r"Add at least two rows")),
    "one row": Case("one.csv", b"a,b\n1,2\n", warning=r"one\.csv: only one row"),
    "too many cells": Case("long.csv", b"a,b\n1,2\n3,4,5\n6,7\n", error=(
        r"long\.csv", r"row 2 \(line 3\) has 3 cells but the header names 2 columns",
        r"Fix that row, or quote cells that contain the delimiter")),
    # the first row longer than the header: pandas alone would make an index of its first
    # cells and shift every column by one, so that each name labels its neighbour's values
    "an unquoted interval in the first row": Case("interval.csv", b"n,rank,t\n1,[0,2],3\n4,5,6\n",
                                                  error=(
        r"interval\.csv, row 1 \(line 2\): 4 cells but the header names 3 columns",
        r"an interval such as \[0,2\] .* must be in double quotes")),
    "too few cells": Case("short.csv", b"a,b,c\n1,2,3\n4,5\n6,7,8\n", error=(
        r"short\.csv, row 2 \(line 3\): 2 cells but the header names 3 columns",
        r"Fill the missing cells")),
    "duplicated column names": Case("dup.csv", b"a,b,a\n1,2,3\n4,5,6\n", error=(
        r"dup\.csv", r"column name 'a' appears twice \(columns 1 and 3\)",
        r"Rename one of them")),
    "unnamed column with values": Case("unnamed.csv", b"a,,c\n1,2,3\n4,5,6\n", error=(
        r"unnamed\.csv", r"column 2 has no name in the header", r"row 1: 2",
        r"Name it in the header")),
    "trailing delimiter on every line": Case(
        "trailing.csv", b"a,b,\n1,2,\n3,4,\n",
        warning=r"trailing\.csv: column 3 has no name and no values; ignored"),
    "non-UTF-8 bytes": Case("bytes.csv", b"a,b\n1,2\n3,\xff\xfe\x80\n", error=(
        r"bytes\.csv, line 3", r"not UTF-8", r"Re-save the file as UTF-8")),
    "latin-1 text": Case("latin.csv", "name,x\ncaf\u00e9,1\nna\u00efve,2\n".encode("latin-1"),
                         error=(r"latin\.csv, line 2", r"b'\\xe9", r"not UTF-8",
                                r"Re-save the file as UTF-8")),
    "UTF-16 with a byte-order mark": Case(
        "wide.csv", "name,x\ncaf\u00e9,1\nna\u00efve,2\n".encode("utf-16"),
        warning=r"wide\.csv: read as UTF-16 \(byte-order mark found\)"),
    "UTF-8 byte-order mark": Case("bom.csv", b"\xef\xbb\xbfa,b\n1,2\n3,4\n"),
    "semicolons": Case("semi.csv", b"a;b\n1;2\n3;4\n", warning=r"separated by semicolon"),
    "tabs in a .csv": Case("tabs.csv", b"a\tb\n1\t2\n3\t4\n", warning=r"separated by tab"),
    "quoted delimiters": Case("quoted.csv", b'a,b\n"x,y",1\n"z,w",2\n'),
    "carriage returns as line ends": Case("mac.csv", b"a,b\r1,2\r3,\r"),
    "a lone carriage return in an unquoted cell": Case(
        "cr.csv", b"a,b\n1,x\ry\n3,\n",
        error=(r"cr\.csv, row 2 \(line 3\): 1 cells but the header names 2 columns",)),
    "unclosed quote": Case("quote.csv", b'a,b\n"x,1\n2,3\n', error=(
        r"quote\.csv", r"a quoted cell is never closed", r"Close the quote or remove it")),
    "NUL bytes": Case("nul.csv", b"a,b\n1,\x002\n", error=(r"nul\.csv: contains NUL bytes",)),
    "NaN, inf and empty cells": Case("gaps.csv", b"a,b,t\n1,nan,x\ninf,2,\n3,4,y\n,5,x\n"),
    "target with one class": Case("one_class.csv", b"a,t\n1,yes\n2,yes\n3,yes\n",
                                  warning=r"column 't' is constant"),
    "constant column": Case("const.csv", b"a,b\n1,5\n2,5\n3,5\n",
                            warning=r"const\.csv: column 'b' is constant"),
    "all columns constant": Case("flat.csv", b"a,b,c\n1,x,2.5\n1,x,2.5\n1,x,2.5\n",
                                 warning=r"column 'c' is constant"),
    "integers beyond 64 bits": Case(
        "big.csv", b"a,b\n1,123456789012345678901234567890\n2,-98765432109876543210\n",
        warning=r"column 'b' has integers beyond 64 bits; they are kept exact"),
    "integer past the digit limit": Case("digits.csv", b"a,b\n1," + b"9" * 5000 + b"\n2,3\n",
                                         error=(r"digits\.csv, row 1, column 'b'",
                                                r"5000 digits", r"PYTHONINTMAXSTRDIGITS=0")),
    "exponent notation": Case("exp.csv", b"a,b\n1e3,1\n2.5e-3,2\n-4E2,3\n"),
    "a 1 MB cell": Case("cell.csv", f"a,b\n1,{MEGABYTE_CELL}\n2,y\n".encode(), error=(
        r"cell\.csv, row 1, column 'b'", r"a cell of 1048576 characters",
        r"over the limit of 1000000", r"raise it with --limit max_cell=N")),
    "JSON object, not an array": Case("object.json", b'{"a": 1, "b": 2}', error=(
        r"object\.json", r"expected a JSON array of records", r"got a JSON object",
        r"Export the table as an array of records")),
    "JSON array of numbers": Case("numbers.json", b"[1, 2, 3]", error=(
        r"numbers\.json, row 1: expected a record", r"got 1")),
    "JSON array of arrays": Case("rows.json", b"[[1, 2], [3, 4]]", error=(
        r"rows\.json, row 1: expected a record", r"got \[1, 2\]")),
    "JSON string": Case("string.json", b'"a table"', error=(r"got a JSON str",)),
    "truncated JSON": Case("cut.json", b'[{"a": 1}, {"a": 2', error=(
        r"cut\.json, line 1, column \d+: invalid JSON", r"the file may be cut short",
        r"Fix the file or export it again")),
    "truncated JSON Lines": Case("cut.jsonl", b'{"a": 1}\n{"a": \n', error=(
        r"cut\.jsonl, line 2, column 7: invalid JSON", r"cut short")),
    "JSON nested thousands deep": Case("deep.json", _deep(20_000), error=(
        r"deep\.json: JSON nested more than 64 levels deep",)),
    "deep nesting inside a cell": Case("deepcell.json", b'[{"a": ' + _deep(5000) + b"}]",
                                       error=(r"deepcell\.json: JSON nested more than 64",)),
    "JSON Lines nested thousands deep": Case("deep.jsonl", b'{"a": 1}\n{"a": ' + _deep(5000)
                                             + b"}\n", error=(r"deep\.jsonl, line 2",
                                                              r"nested more than 64")),
    "deep array text in a CSV cell": Case("deep.csv", b'a,m\n1,"' + _deep(5000) + b'"\n'
                                          b'2,"[1]"\n', error=(r"deep\.csv, row 1, column 'm'",
                                                               r"nested more than 2 deep")),
    "ragged matrix": Case("ragged.json", b'[{"m": [[1, 2], [3, 4]]}, {"m": [[1, 2], [3]]}]',
                          error=(r"ragged\.json, row 2, column 'm'",
                                 r"a ragged matrix \(rows of lengths \[1, 2\]\)",
                                 r"Every row of a matrix needs the same length")),
    "ragged matrix text in CSV": Case("ragged.csv", b'k,m\n1,"[[1,2],[3,4]]"\n'
                                      b'2,"[[1],[2,3]]"\n',
                                      error=(r"ragged\.csv, row 2, column 'm'",
                                             r"a ragged matrix")),
    # (a two-element list beside plain numbers is an interval, so the list here has three)
    "arrays mixed with scalars": Case("mixed.json", b'[{"m": [1, 2, 5]}, {"m": 3}]', error=(
        r"mixed\.json, row 2, column 'm': expected an array like \[1, 2\]",
        r"\(row 1 holds one\), got 3", r"Make every cell of the column an array")),
    "array text mixed with numbers": Case("mixed.csv", b'k,m\n1,"[1,2]"\n2,3\n3,"[4]"\n',
                                          error=(r"mixed\.csv, row 2, column 'm'",
                                                 r"expected an array like \[1, 2\], got '3'")),
    "text inside an array": Case("words.json", b'[{"m": [1, "two"]}, {"m": [3]}]', error=(
        r"words\.json, row 1, column 'm': array entries must be numbers, got 'two'",)),
    "a record inside a cell": Case("record.json", b'[{"m": {"x": 1}}, {"m": {"x": 2}}]',
                                   error=(r"record\.json, row 1, column 'm': a cell holds a "
                                          r"JSON object", r"Flatten the record")),
    "NaN in JSON": Case("nan.json", b'[{"a": NaN, "b": 1}, {"a": 2, "b": 3}]',
                        warning=r"nan\.json: found NaN, which standard JSON does not allow"),
    "a zipped workbook": Case("sheet.xlsx", b"PK\x03\x04\x14\x00\x06\x00" + bytes(64), error=(
        r"sheet\.xlsx: a zip archive", r"Save the sheet as CSV")),
    "broken Parquet": Case("broken.parquet", b"PAR1 this is not parquet PAR1", error=(
        r"broken\.parquet: not a readable Parquet file", r"export it again")),
}


def _message(excinfo) -> str:
    return str(excinfo.value)


def _check_refusal(message: str, case: Case) -> None:
    assert "\n" not in message, f"a message of more than one line: {message!r}"
    for pattern in case.error:
        assert re.search(pattern, message), f"{pattern!r} not in {message!r}"


@pytest.mark.parametrize("case", list(CASES.values()), ids=list(CASES))
def test_each_case_is_refused_clearly_or_loaded_with_a_warning(tmp_path, case):
    path = tmp_path / case.name
    path.write_bytes(case.data)
    before = hashlib.sha256(case.data).hexdigest()
    if case.error:
        with pytest.raises(TableError) as excinfo:
            load_table(path)
        _check_refusal(_message(excinfo), case)
    else:
        table = load_table(path)
        assert table.n_rows >= 1
        if case.warning:
            assert any(re.search(case.warning, w) for w in table.warnings), table.warnings
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


@pytest.mark.parametrize("case", list(CASES.values()), ids=list(CASES))
def test_command_line_inspect(tmp_path, capsys, case):
    path = tmp_path / case.name
    path.write_bytes(case.data)
    out = tmp_path / "inspect.json"
    status = main(["inspect", str(path), "--json", str(out)])
    captured = capsys.readouterr()
    assert "Traceback" not in captured.err + captured.out
    if case.error:
        assert status == 2
        lines = captured.err.splitlines()
        assert len(lines) == 1, captured.err
        assert lines[0].startswith("error: ") and case.name in lines[0]
        _check_refusal(lines[0], case)
        assert not out.exists()
    else:
        assert status == 0, captured.err
        summary = json.loads(out.read_text())
        assert summary["rows"] >= 1
        assert {"name", "role", "dtype", "missing"} <= set(summary["columns"][0])
        if case.warning:
            assert any(re.search(case.warning, w) for w in summary["warnings"])
    assert path.read_bytes() == case.data


@pytest.mark.parametrize("case_id", ["empty file", "too many cells", "latin-1 text",
                                     "JSON nested thousands deep", "arrays mixed with scalars"])
def test_command_line_in_a_fresh_process(tmp_path, case_id):
    case = CASES[case_id]
    path = tmp_path / case.name
    path.write_bytes(case.data)
    done = subprocess.run(
        [sys.executable, "-m", "analysis", "inspect", str(path)], cwd=ROOT,
        capture_output=True, text=True, timeout=300,
        env={**os.environ, "PYTHONPATH": str(ROOT)},
    )
    assert done.returncode == 2, done.stderr
    assert "Traceback" not in done.stderr
    lines = done.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ")
    _check_refusal(lines[0], case)
    assert path.read_bytes() == case.data


# ------------------------------------------------------------------------------------------
# What the loaded cases hold


def test_utf16_and_bom_load_the_same_cells():
    text = "name,x\ncaf\u00e9,1\nna\u00efve,2\n"
    utf16 = read_table(text.encode("utf-16"), "t.csv")
    bom = read_table(b"\xef\xbb\xbf" + text.encode("utf-8"), "t.csv")
    for table in (utf16, bom):
        assert [c.name for c in table.columns] == ["name", "x"]  # no BOM in the first name
        assert table.frame["name"].tolist() == ["caf\u00e9", "na\u00efve"]
        assert table.exact("x") == [1, 2]
    assert not bom.warnings


@pytest.mark.parametrize("data, delimiter", [
    (b"a;b;c\n1;2,5;x\n3;4,5;y\n", "semicolon"),
    (b"a\tb\tc\n1\t2,5\tx\n3\t4,5\ty\n", "tab"),
], ids=["semicolon", "tab"])
def test_other_delimiters_keep_commas_inside_cells(data, delimiter):
    table = read_table(data, "t.csv")
    assert [c.name for c in table.columns] == ["a", "b", "c"]
    assert table.frame["b"].tolist() == ["2,5", "4,5"]  # a decimal comma stays text
    assert any(delimiter in w for w in table.warnings)


def test_quoted_delimiters_load_exactly():
    table = read_table(CASES["quoted delimiters"].data, "quoted.csv")
    assert table.frame["a"].tolist() == ["x,y", "z,w"]


def test_nan_inf_and_empty_cells_in_features_and_target():
    table = read_table(CASES["NaN, inf and empty cells"].data, "gaps.csv")
    assert table.column("a").note == "has infinite values"
    assert (table.column("a").missing, table.column("b").missing) == (1, 1)
    fm = build_features(table, columns=["a", "b"], target="t")
    # row 1: b is NaN; row 2: a is inf and t empty; row 4: a empty
    assert list(fm.rows) == [2]
    assert fm.warnings[0].startswith(
        "Dropped 3 of 4 rows with a missing value (3 in features, 1 in the target)")
    assert "1 rows have an infinite feature value; treated as missing." in fm.notes
    imputed = build_features(table, columns=["a", "b"], target="t", missing="impute")
    assert list(imputed.rows) == [0, 2, 3]
    assert any("filled 3 missing feature cells" in n for n in imputed.notes)


def test_integers_beyond_64_bits_stay_exact():
    table = read_table(CASES["integers beyond 64 bits"].data, "big.csv")
    assert table.exact("b") == [123456789012345678901234567890, -98765432109876543210]


def test_exponent_notation_loads_as_numbers():
    table = read_table(CASES["exponent notation"].data, "exp.csv")
    assert table.numeric("a").tolist() == [1000.0, 0.0025, -400.0]


def test_a_cell_under_the_limit_loads_as_text():
    cell = "y" * 999_000
    table = read_table(f"a,b\n1,{cell}\n2,z\n".encode(), "t.csv")
    assert table.frame["b"].tolist() == [cell, "z"]
    raised = read_table(CASES["a 1 MB cell"].data, "cell.csv",
                        limits=Limits(max_cell=2 * 1024 * 1024))
    assert len(raised.frame["b"].iloc[0]) == 1024 * 1024


# ------------------------------------------------------------------------------------------
# Resource limits: each message states the limit and how to raise it


def _wide(columns: int) -> bytes:
    header = ",".join(f"h{j}" for j in range(columns))
    rows = [",".join(str(j * k + k) for j in range(columns)) for k in (1, 2, 3)]
    return ("\n".join([header, *rows]) + "\n").encode()


def test_tens_of_thousands_of_columns_over_the_limit():
    with pytest.raises(TableError, match=r"wide\.csv: 30000 columns is over the limit of "
                                         r"10000\. Select the columns you need first, or raise "
                                         r"it with --limit max_columns=N"):
        read_table(_wide(30_000), "wide.csv")


def test_many_columns_under_the_limit_load():
    table = read_table(_wide(12_000), "wide.csv", limits=Limits(max_columns=12_000))
    assert len(table.columns) == 12_000
    assert table.exact("h11999") == [12_000, 24_000, 36_000]


@pytest.mark.parametrize("name, data, limits, message", [
    ("rows.csv", b"a\n" + b"1\n" * 30, Limits(max_rows=20),
     r"rows\.csv: more than 20 rows, over the limit of 20\. .*raise it with --limit max_rows=N"),
    ("rows.jsonl", b'{"a": 1}\n' * 30, Limits(max_rows=20),
     r"rows\.jsonl: more than 20 rows.*--limit max_rows=N"),
    ("cols.json", b'[{"a": 1, "b": 2, "c": 3}]', Limits(max_columns=2),
     r"cols\.json: 3 columns is over the limit of 2\..*raise it with --limit max_columns=N"),
    ("cell.json", b'[{"a": "abcdef"}, {"a": "b"}]', Limits(max_cell=5),
     r"cell\.json, row 1, column 'a': a cell of 6 characters is over the limit of 5\. "
     r"Shorten it or raise it with --limit max_cell=N"),
    ("array.csv", b'a\n"[1,2,3]"\n"[1]"\n', Limits(max_array=2),
     r"array\.csv, row 1, column 'a': an array of 3 entries is over the limit of 2\. "
     r"Raise it with --limit max_array=N"),
    ("bytes.csv", b"a\n1\n2\n", Limits(max_bytes=4),
     r"bytes\.csv: 6 bytes is over the limit of 4 bytes\. Raise it with --limit max_bytes=N"),
    ("depth.json", b'[{"a": [[[[1]]]]}]', Limits(max_depth=3),
     r"depth\.json: JSON nested more than 3 levels deep"),
], ids=["rows", "rows in JSON Lines", "columns", "cell size", "array size", "file size",
        "nesting depth"])
def test_resource_limits(name, data, limits, message):
    with pytest.raises(TableError, match=message):
        read_table(data, name, limits=limits)


def test_file_size_limit_through_load_table(tmp_path):
    path = tmp_path / "big.csv"
    path.write_bytes(b"a\n" + b"12345\n" * 1000)
    with pytest.raises(TableError, match=r"big\.csv: the file is 0\.0 GB, over the limit.*"
                                         r"raise it with --limit max_bytes=N"):
        load_table(path, limits=Limits(max_bytes=1000))


# ------------------------------------------------------------------------------------------
# Random bytes and generated tables: a load or a TableError, nothing else


@pytest.mark.parametrize("extension", EXTENSIONS)
def test_random_bytes_under_every_extension(tmp_path, extension):
    rng = np.random.default_rng(sum(map(ord, extension)))
    for size in (1, 7, 64, 512, 4096):
        data = rng.integers(0, 256, size=size, dtype=np.uint8).tobytes()
        path = tmp_path / f"noise{extension}"
        path.write_bytes(data)
        try:
            load_table(path)
        except TableError as error:
            assert "noise" in str(error) and "\n" not in str(error)
        assert path.read_bytes() == data


def _valid_parquet() -> bytes:
    buffer = io.BytesIO()
    pq.write_table(pa.table({"a": [1, 2, 3], "b": ["x", "y", "z"]}), buffer)
    return buffer.getvalue()


def test_damaged_parquet_files():
    good = _valid_parquet()
    rng = np.random.default_rng(1)
    damaged = [good[: len(good) // 2], good[:-10], good[4:]]
    for _ in range(10):
        flipped = bytearray(good)
        for position in rng.integers(0, len(good), size=5):
            flipped[position] ^= 0xFF
        damaged.append(bytes(flipped))
    for data in damaged:
        try:
            read_table(data, "damaged.parquet")
        except TableError as error:
            assert "damaged.parquet" in str(error)


_CELLS = st.one_of(
    st.integers(min_value=-(10**45), max_value=10**45).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.fractions(max_denominator=60).map(str),
    st.text(alphabet=st.characters(codec="utf-8"), max_size=10),
    st.sampled_from(["", "[1, 2]", "[[1,0],[0,1]]", "[[1],[2,3]]", "[1,[2]]", '"', "a,b",
                     "[", "]", "NaN", "inf", "true", "no", "1/0", "3/4", "=1+1", "\r", "\n",
                     "\t", ";", "1e400", "-0", "{}", "[{}]"]),
)


@st.composite
def _delimited_tables(draw):
    width = draw(st.integers(1, 5))
    header = draw(st.lists(st.text(max_size=6), min_size=width, max_size=width))
    rows = draw(st.lists(st.lists(_CELLS, min_size=width, max_size=width), max_size=6))
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    buffer = io.StringIO()
    writer = csv.writer(buffer, delimiter=delimiter)
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue().encode("utf-8"), draw(st.sampled_from(["t.csv", "t.tsv"]))


@st.composite
def _json_tables(draw):
    scalar = st.one_of(st.none(), st.booleans(), st.integers(-(10**30), 10**30),
                       st.floats(allow_nan=False), st.text(max_size=6))
    value = st.one_of(scalar, st.lists(scalar, max_size=3),
                      st.lists(st.lists(st.integers(-5, 5), max_size=3), max_size=3))
    records = draw(st.lists(st.dictionaries(st.text(max_size=4), value, max_size=4),
                            max_size=6))
    if draw(st.booleans()):
        return json.dumps(records).encode(), "t.json"
    return "\n".join(json.dumps(r) for r in records).encode(), "t.jsonl"


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_delimited_tables())
def test_generated_delimited_tables_load_or_raise_table_error(table):
    data, name = table
    try:
        loaded = read_table(data, name)
    except TableError as error:
        assert "\n" not in str(error)
        return
    assert loaded.n_rows >= 1 and len(loaded.digest) == 64


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_json_tables())
def test_generated_json_tables_load_or_raise_table_error(table):
    data, name = table
    try:
        read_table(data, name)
    except TableError as error:
        assert "\n" not in str(error)


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=400), st.sampled_from(EXTENSIONS))
def test_junk_bytes_load_or_raise_table_error(data, extension):
    try:
        read_table(data, "junk" + extension)
    except TableError as error:
        assert "junk" in str(error)
