"""Loading tables: every format, typed cells, detected roles, role overrides, untouched bytes.

The same small table of invariants is written in each supported format with the standard
library, pandas or pyarrow (the reference writers), then read back with load_table; the
values that come back are compared with the Python values that went in, exactly.
"""

from __future__ import annotations

import csv
import decimal
import hashlib
import io
import json
from fractions import Fraction
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from analysis.errors import StepError, TableError
from analysis.table import ROLES, Limits, load_table, read_table, role_change

BIG = 2**200 + 12345  # far past 64 bits
NEGATIVE_BIG = -(3**90)
# One table, as Python values. "matrix" cells are integer matrices, "weights" lists of reals.
RECORDS = [
    {"object": "A1", "genus": 0, "ratio": Fraction(3, 4), "smooth": True, "family": "toric",
     "big": BIG, "matrix": [[1, 0, 2], [0, 1, 1]], "weights": [0.5, 1.5]},
    {"object": "A2", "genus": 2, "ratio": Fraction(-1, 2), "smooth": False, "family": "toric",
     "big": NEGATIVE_BIG, "matrix": [[0, 0, 1], [1, 1, 1]], "weights": [2.0, 0.25]},
    {"object": "A3", "genus": 7, "ratio": Fraction(5), "smooth": True, "family": "fano",
     "big": 17, "matrix": [[3, 3, 3], [0, 0, 0]], "weights": [1.0, -1.0]},
    {"object": "A4", "genus": 1, "ratio": Fraction(7, 3), "smooth": False, "family": "fano",
     "big": -(2**64), "matrix": [[1, 1, 0], [1, 0, 1]], "weights": [0.0, 3.5]},
]
EXPECTED = {
    "object": ("id", "text"),
    "genus": ("invariant", "integer"),
    "ratio": ("invariant", "rational"),
    "smooth": ("flag", "boolean"),
    "family": ("category", "text"),
    "big": ("invariant", "big integer"),
    "matrix": ("array", "array"),
    "weights": ("array", "array"),
}


def _cell_text(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, list):
        return json.dumps(value)
    return str(value)


def _delimited(delimiter: str) -> bytes:
    buffer = io.StringIO()
    writer = csv.writer(buffer, delimiter=delimiter, lineterminator="\n")
    writer.writerow(list(RECORDS[0]))
    for record in RECORDS:
        writer.writerow([_cell_text(v) for v in record.values()])
    return buffer.getvalue().encode("utf-8")


def _json_value(value):
    return str(value) if isinstance(value, Fraction) else value


def _json_array() -> bytes:
    # json.dumps writes Python ints of any size as exact digits
    return json.dumps([{k: _json_value(v) for k, v in r.items()} for r in RECORDS]).encode()


def _json_lines() -> bytes:
    return "\n".join(json.dumps({k: _json_value(v) for k, v in r.items()})
                     for r in RECORDS).encode() + b"\n"


def _parquet() -> bytes:
    # Decision for Parquet: an integer past 64 bits has no Parquet integer type, so it is
    # written as text of its digits (a string column); ratios as text "p/q" the same way.
    columns = {
        "object": pa.array([r["object"] for r in RECORDS]),
        "genus": pa.array([r["genus"] for r in RECORDS], pa.int64()),
        "ratio": pa.array([str(r["ratio"]) for r in RECORDS]),
        "smooth": pa.array([r["smooth"] for r in RECORDS]),
        "family": pa.array([r["family"] for r in RECORDS]),
        "big": pa.array([str(r["big"]) for r in RECORDS]),
        "matrix": pa.array([r["matrix"] for r in RECORDS], pa.list_(pa.list_(pa.int64()))),
        "weights": pa.array([r["weights"] for r in RECORDS], pa.list_(pa.float64())),
    }
    buffer = io.BytesIO()
    pq.write_table(pa.table(columns), buffer)
    return buffer.getvalue()


FORMATS = {
    "csv": ("invariants.csv", lambda: _delimited(",")),
    "tsv": ("invariants.tsv", lambda: _delimited("\t")),
    "semicolon csv": ("invariants.csv", lambda: _delimited(";")),
    "tab-separated .csv": ("invariants.csv", lambda: _delimited("\t")),
    "json array of records": ("invariants.json", _json_array),
    "json lines": ("invariants.jsonl", _json_lines),
    "parquet": ("invariants.parquet", _parquet),
}


def _write(tmp_path: Path, name: str, data: bytes) -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize("fmt", list(FORMATS), ids=list(FORMATS))
def test_every_format_gives_the_same_typed_table(tmp_path, fmt):
    name, make = FORMATS[fmt]
    path = _write(tmp_path, name, make())
    table = load_table(path)
    assert table.n_rows == len(RECORDS)
    assert [c.name for c in table.columns] == list(RECORDS[0])
    got = {c.name: (c.role, c.dtype) for c in table.columns}
    assert got == EXPECTED
    assert table.id_column == "object"
    assert list(table.row_ids) == [r["object"] for r in RECORDS]
    # exact values: Python int and Fraction equality, not float closeness
    assert table.exact("genus") == [r["genus"] for r in RECORDS]
    assert table.exact("ratio") == [r["ratio"] for r in RECORDS]
    assert table.exact("big") == [r["big"] for r in RECORDS]
    assert all(type(v) is int for v in table.exact("big"))
    assert table.exact("smooth") == [int(r["smooth"]) for r in RECORDS]
    assert table.frame["family"].tolist() == [r["family"] for r in RECORDS]
    for cell, record in zip(table.frame["matrix"], RECORDS):
        assert isinstance(cell, np.ndarray) and cell.shape == (2, 3)
        assert cell.dtype == np.int64
        assert cell.tolist() == record["matrix"]
    for cell, record in zip(table.frame["weights"], RECORDS):
        assert cell.dtype == np.float64 and cell.tolist() == record["weights"]


@pytest.mark.parametrize("fmt", list(FORMATS), ids=list(FORMATS))
def test_loading_leaves_the_file_unchanged_and_digest_is_sha256(tmp_path, fmt):
    name, make = FORMATS[fmt]
    data = make()
    path = _write(tmp_path, name, data)
    before = _sha256(path)
    table = load_table(path)
    table.with_roles({"genus": "category"})
    assert _sha256(path) == before == hashlib.sha256(data).hexdigest()
    assert path.read_bytes() == data
    # the digest is the sha256 of the bytes (hashlib is the reference)
    assert table.digest == hashlib.sha256(data).hexdigest()
    assert read_table(data, name).digest == table.digest


def test_digest_differs_for_different_bytes():
    one = read_table(b"a,b\n1,2\n3,4\n", "t.csv")
    other = read_table(b"a,b\n1,2\n3,5\n", "t.csv")
    assert one.digest != other.digest


def test_delimiter_is_sniffed_and_stated():
    table = read_table(b"p;q\n1;2\n3;4\n", "t.csv")
    assert [c.name for c in table.columns] == ["p", "q"]
    assert table.exact("q") == [2, 4]
    assert any("semicolon" in w for w in table.warnings)


def test_quoted_delimiters_stay_inside_their_cell():
    table = read_table(b'name,value\n"a,b",1\n"c;d",2\n"e\tf",3\n', "t.csv")
    assert table.frame["name"].tolist() == ["a,b", "c;d", "e\tf"]
    assert table.exact("value") == [1, 2, 3]


# ------------------------------------------------------------------------------------------
# Array cells


def test_json_array_text_in_csv_cells_becomes_matrices():
    data = b'id,m\nx,"[[1,0,2],[0,1,1]]"\ny,"[[5,5,5],[6,6,6]]"\nz,"[[0,0,0],[0,0,0]]"\n'
    table = read_table(data, "t.csv")
    assert table.role("m") == "array"
    assert [a.tolist() for a in table.frame["m"]] == [
        [[1, 0, 2], [0, 1, 1]], [[5, 5, 5], [6, 6, 6]], [[0, 0, 0], [0, 0, 0]]]


def test_arrays_are_parsed_as_data_and_never_evaluated():
    # a cell that would do something if evaluated as Python is rejected as not an array
    data = b'id,m\nx,"[1, 2]"\ny,"[__import__(\'os\').getpid()]"\n'
    with pytest.raises(TableError, match=r"row 2, column 'm': not a valid JSON array"):
        read_table(data, "t.csv")


def test_list_cells_of_different_lengths_load():
    table = read_table(b'[{"l": [1, 2, 3]}, {"l": [4]}, {"l": []}, {"l": null}]', "t.json")
    assert table.role("l") == "array"
    assert [None if v is None else v.tolist() for v in table.frame["l"]] == [
        [1, 2, 3], [4], [], None]
    assert table.column("l").missing == 1


def test_array_entries_beyond_64_bits_stay_exact():
    table = read_table(json.dumps([{"v": [BIG, 1]}, {"v": [2, 3]}]).encode(), "t.json")
    first = table.frame["v"].iloc[0]
    assert first.dtype == object and first.tolist() == [BIG, 1]


def test_array_limit_message_states_the_limit_and_how_to_raise_it():
    with pytest.raises(TableError, match=r"t\.csv, row 2, column 'a'.*4 entries.*limit of 3.*"
                                         r"--limit max_array=N"):
        read_table(b'a\n"[1]"\n"[1,2,3,4]"\n', "t.csv", limits=Limits(max_array=3))


# ------------------------------------------------------------------------------------------
# Numbers: big integers, rationals, exponent notation


@pytest.mark.parametrize("value", [2**63 - 1, 2**63, -(2**63), -(2**63) - 1, 2**64 - 1, 2**64,
                                   10**40 + 1, -(10**100) - 7, BIG],
                         ids=lambda v: f"{'-' if v < 0 else ''}{len(str(abs(v)))}digits")
@pytest.mark.parametrize("fmt", ["csv", "json", "jsonl"])
def test_integers_beyond_64_bits_round_trip_exactly(value, fmt):
    rows = [{"k": 1, "n": value}, {"k": 2, "n": 3}, {"k": 3, "n": -5}]
    if fmt == "csv":
        data = ("k,n\n" + "".join(f"{r['k']},{r['n']}\n" for r in rows)).encode()
    elif fmt == "json":
        data = json.dumps(rows).encode()
    else:
        data = "\n".join(json.dumps(r) for r in rows).encode()
    table = read_table(data, f"t.{fmt}")
    assert table.exact("n") == [value, 3, -5]
    dtype = table.column("n").dtype
    assert dtype == ("integer" if -(2**63) <= value < 2**63 else "big integer")


@pytest.mark.parametrize("fmt, value", [
    (fmt, value) for fmt in ("csv", "json", "parquet")
    for value in (2**53 + 1, 2**62 + 3, 2**100 + 1)
    if not (fmt == "parquet" and value >= 2**63)  # Parquet int64 cannot hold 2**100
])
def test_large_integers_with_missing_cells_are_not_rounded(fmt, value):
    # float64 holds integers exactly only up to 2**53 (IEEE 754 double precision), so a
    # column with a missing cell must not pass through float64
    if fmt == "csv":
        data, name = f"k,n\n1,{value}\n2,\n3,4\n".encode(), "t.csv"
    elif fmt == "json":
        data, name = json.dumps([{"k": 1, "n": value}, {"k": 2, "n": None},
                                 {"k": 3, "n": 4}]).encode(), "t.json"
    else:
        buffer = io.BytesIO()
        pq.write_table(pa.table({"k": [1, 2, 3], "n": pa.array([value, None, 4], pa.int64())}),
                       buffer)
        data, name = buffer.getvalue(), "t.parquet"
    table = read_table(data, name)
    assert table.exact("n") == [value, None, 4]
    assert table.column("n").missing == 1


@pytest.mark.parametrize("writer", ["digits as text", "decimal(38,0)", "decimal(76,0)"])
def test_parquet_integers_beyond_64_bits(writer):
    # Decision: Parquet has no integer type past 64 bits; such integers are stored as text of
    # their digits or as a decimal with scale 0, and both read back as exact Python ints.
    values = [10**37 + 9, -(2**100) if writer != "decimal(38,0)" else -(10**30), 5]
    if writer == "digits as text":
        column = pa.array([str(v) for v in values])
    elif writer == "decimal(38,0)":
        column = pa.array([decimal.Decimal(v) for v in values], pa.decimal128(38, 0))
    else:
        column = pa.array([decimal.Decimal(v) for v in values], pa.decimal256(76, 0))
    buffer = io.BytesIO()
    pq.write_table(pa.table({"n": column, "k": [1, 2, 3]}), buffer)
    table = read_table(buffer.getvalue(), "t.parquet")
    assert table.column("n").dtype == "big integer"
    assert table.exact("n") == values


def test_parquet_decimals_with_a_scale_are_exact_rationals():
    column = pa.array([decimal.Decimal("1.50"), decimal.Decimal("-0.25"), decimal.Decimal("3")],
                      pa.decimal128(10, 2))
    buffer = io.BytesIO()
    pq.write_table(pa.table({"x": column}), buffer)
    table = read_table(buffer.getvalue(), "t.parquet")
    assert table.column("x").dtype == "rational"
    assert table.exact("x") == [Fraction(3, 2), Fraction(-1, 4), Fraction(3)]


def test_rationals_are_exact_fractions():
    table = read_table(b"k,q\n1,3/4\n2,-1/2\n3,5\n4,\n5,10/4\n", "t.csv")
    info = table.column("q")
    assert (info.role, info.dtype, info.missing) == ("invariant", "rational", 1)
    assert table.exact("q") == [Fraction(3, 4), Fraction(-1, 2), Fraction(5), None,
                                Fraction(5, 2)]
    assert np.allclose(table.numeric("q"), [0.75, -0.5, 5.0, np.nan, 2.5], equal_nan=True)


def test_rational_with_zero_denominator_names_row_and_column():
    with pytest.raises(TableError, match=r"t\.csv, row 2, column 'q': '1/0' divides by zero"):
        read_table(b"k,q\n1,3/4\n2,1/0\n", "t.csv")


def test_exact_values_of_a_real_column():
    table = read_table(b"k,x\n1,0.5\n2,\n3,inf\n4,-2.25\n", "t.csv")
    # an infinite value has no exact form; like a missing one it is None
    assert table.exact("x") == [Fraction(1, 2), None, None, Fraction(-9, 4)]


def test_exponent_notation_is_a_real_number():
    table = read_table(b"k,x\n1,1e3\n2,2.5E-3\n3,-4e+2\n", "t.csv")
    assert table.column("x").dtype in ("real", "integer")
    assert table.numeric("x").tolist() == [1000.0, 0.0025, -400.0]


def test_huge_integer_text_over_the_digit_limit_is_a_clear_error():
    digits = "7" * 5000  # Python reads at most 4300 digits into an int by default
    with pytest.raises(TableError, match=r"t\.csv, row 1, column 'n': an integer of 5000 "
                                         r"digits .*limit of 4300.*PYTHONINTMAXSTRDIGITS"):
        read_table(f"n,k\n{digits},1\n2,2\n".encode(), "t.csv")


def test_a_column_given_the_role_text_is_not_parsed():
    digits = "7" * 5000
    table = read_table(f"n,k\n{digits},1\n2,2\n".encode(), "t.csv", roles={"n": "text"})
    assert table.role("n") == "text"
    assert table.frame["n"].tolist() == [digits, "2"]


# ------------------------------------------------------------------------------------------
# Role detection


@pytest.mark.parametrize("cells, role, dtype", [
    (["g1", "g2", "g3", "g4"], "id", "text"),
    (["1", "5", "2", "9"], "invariant", "integer"),
    (["true", "false", "true", "true"], "flag", "boolean"),
    (["yes", "no", "no", "yes"], "flag", "boolean"),
    (["0", "1", "1", "0"], "flag", "boolean"),
    (["0", "1", "", "0"], "flag", "boolean"),
    (['"[1,2]"', '"[3]"', '"[]"', '"[4,5,6]"'], "array", "array"),
    (["x", "y", "x", "y"], "category", "text"),
    (["x", "y", "", "y"], "category", "text"),
    (["0.5", "1.25", "2", "-3"], "invariant", "real"),
    (["", "", "", ""], "text", "empty"),
], ids=["unique text is id", "integers", "true/false", "yes/no", "0/1", "0/1 with a gap",
        "arrays", "few-valued text", "few-valued text with a gap", "reals", "all empty"])
def test_detected_roles(cells, role, dtype):
    data = "k,c\n" + "".join(f"{i},{c}\n" for i, c in enumerate(cells))
    table = read_table(data.encode(), "t.csv")
    info = table.column("c")
    assert (info.role, info.dtype, info.detected_role) == (role, dtype, role)


def test_many_valued_text_is_text_not_category():
    # 60 distinct names, each twice: not unique (so not an id), too many for a category
    names = [f"word{i % 60}" for i in range(120)]
    data = "k,c\n" + "".join(f"{i},{c}\n" for i, c in enumerate(names))
    assert read_table(data.encode(), "t.csv").role("c") == "text"


def test_only_one_id_is_detected_and_integer_ids_need_an_id_like_name():
    table = read_table(b"name,label,id2\nA,p,1\nB,q,2\nC,r,3\n", "t.csv")
    assert table.id_column == "name"
    assert table.role("label") != "id"
    assert table.role("id2") == "invariant"
    numbered = read_table(b"id,x\n10,1\n20,2\n30,3\n", "t.csv")
    assert numbered.id_column == "id" and list(numbered.row_ids) == [10, 20, 30]


def test_row_ids_are_row_numbers_without_an_id_column():
    table = read_table(b"x,y\n1,2\n1,3\n2,3\n", "t.csv")
    assert table.id_column is None
    assert list(table.row_ids) == [0, 1, 2]


def test_booleans_with_a_missing_cell():
    table = read_table(b"k,b\n1,true\n2,\n3,false\n", "t.csv")
    assert table.frame["b"].tolist() == [True, None, False]
    assert table.exact("b") == [1, None, 0]
    assert np.array_equal(table.numeric("b"), [1.0, np.nan, 0.0], equal_nan=True)


# ------------------------------------------------------------------------------------------
# Overrides through Table.with_roles


@pytest.fixture(scope="module")
def mixed():
    data = (b'name,n,q,flag,kind,m,word,parity\n'
            b'A,1,1/2,true,x,"[1,2]",hello,odd\n'
            b'B,2,3/4,false,y,"[3,4]",2,even\n'
            b'C,3,5,true,x,"[5,6]","[3, 4, 5]",odd\n')
    return read_table(data, "mixed.csv")


@pytest.mark.parametrize("column, role, dtype, values", [
    ("n", "category", "text", ["1", "2", "3"]),
    ("n", "text", "text", ["1", "2", "3"]),
    ("q", "text", "text", ["1/2", "3/4", "5"]),
    ("flag", "invariant", "integer", [1, 0, 1]),
    ("flag", "category", "text", ["True", "False", "True"]),
    ("kind", "flag", "boolean", [False, True, False]),
    ("kind", "text", "text", ["x", "y", "x"]),
    ("m", "text", "text", ["[1, 2]", "[3, 4]", "[5, 6]"]),
    ("name", "category", "text", ["A", "B", "C"]),
    ("parity", "flag", "boolean", [True, False, True]),
    ("n", "id", "integer", [1, 2, 3]),
    ("n", "invariant", "integer", [1, 2, 3]),
], ids=lambda v: v if isinstance(v, str) else "")
def test_role_overrides(mixed, column, role, dtype, values):
    before_info, before_values = mixed.column(column), mixed.frame[column].tolist()
    table = mixed.with_roles({column: role})
    info = table.column(column)
    assert (info.role, info.dtype) == (role, dtype)
    assert table.frame[column].tolist() == values
    assert info.detected_role == before_info.detected_role
    # the table it came from is unchanged
    assert mixed.column(column) == before_info
    assert str(mixed.frame[column].tolist()) == str(before_values)
    if role == "id":
        assert table.id_column == column and table.role("name") != "id"


def test_override_to_array_parses_array_text():
    # one array among words: detected as a category; asking for arrays reads the words as
    # missing and counts them (as asking for an invariant does), and names a number misfit
    text = read_table(b'k,v\n1,"[1, 2]"\n2,none\n3,x\n4,x\n', "t.csv")
    assert text.role("v") == "category"
    asked = text.with_roles({"v": "array"})
    assert asked.column("v").markers == {"x": 2, "none": 1}
    assert asked.frame["v"].iloc[0].tolist() == [1, 2] and asked.column("v").missing == 3
    assert asked.with_roles({"v": "text"}).frame["v"].tolist() == ["[1, 2]", "none", "x", "x"]
    numbers = read_table(b'k,v\n1,"[1, 2]"\n2,5\n3,x\n4,x\n', "t.csv")
    with pytest.raises(TableError, match=r"t\.csv, row 2, column 'v': expected an array like "
                                         r"\[1, 2\], got '5'"):
        numbers.with_roles({"v": "array"})
    table = read_table(b'k,v\n1,"[1, 2]"\n2,"[3]"\n3,\n', "t.csv", roles={"v": "text"})
    assert table.role("v") == "text"
    back = table.with_roles({"v": "array"})
    assert back.column("v").dtype == "array"
    assert [None if v is None else v.tolist() for v in back.frame["v"]] == [[1, 2], [3], None]


def test_half_arrays_half_words_is_a_clear_error_unless_kept_as_text():
    data = b'k,v\n1,"[1, 2]"\n2,"[3]"\n3,none\n4,x\n'
    with pytest.raises(TableError, match=r"t\.csv, row 3, column 'v': expected an array like "
                                         r"\[1, 2\], got 'none'\. Make every cell"):
        read_table(data, "t.csv")
    assert read_table(data, "t.csv", roles={"v": "text"}).frame["v"].tolist() == [
        "[1, 2]", "[3]", "none", "x"]


@pytest.mark.parametrize("column, role, message", [
    ("name", "invariant", r"mixed\.csv, row 1, column 'name': expected a number, got 'A'"),
    ("word", "invariant", r"mixed\.csv, row 3 \(id 'C'\), column 'word': expected a number "
                          r"or an interval like \[1, 2\], got '\[3, 4, 5\]'.*mark it as text"),
    ("n", "flag", r"mixed\.csv, row 3, column 'n': a third value '3'.*a flag has two values"),
    ("kind", "array", r"mixed\.csv, row 1, column 'kind': expected an array like \[1, 2\]"),
    ("n", "array", r"mixed\.csv, row 1, column 'n': expected an array.*integer values"),
    ("m", "id", r"mixed\.csv, row 1, column 'm': an id names each row"),
    ("kind", "id", r"column 'kind' cannot be the id: the value 'x' appears in rows 1, 3"),
    ("n", "colour", r"column 'n': unknown role 'colour'\. Roles are id, invariant"),
    ("missing", "text", r"no column named 'missing'\. Columns are: 'name', 'n'"),
], ids=["text to invariant", "mixed text to invariant", "three values to flag",
        "category to array", "integer to array", "array to id",
        "repeated value to id", "unknown role", "unknown column"])
def test_role_override_rejects_cells_that_do_not_fit(mixed, column, role, message):
    with pytest.raises(TableError, match=message):
        mixed.with_roles({column: role})


def test_every_role_is_reachable_for_a_fitting_column(mixed):
    reached = set()
    for column in ("name", "n", "q", "flag", "kind", "m", "word"):
        for role in ROLES:
            try:
                reached.add(mixed.with_roles({column: role}).role(column))
            except TableError:
                pass
    assert reached == set(ROLES)


def test_id_column_moves_and_can_be_removed(mixed):
    moved = mixed.with_roles(id_column="n")
    assert moved.id_column == "n" and list(moved.row_ids) == [1, 2, 3]
    assert moved.role("name") == "text"
    none = mixed.with_roles(id_column=None)
    assert none.id_column is None and list(none.row_ids) == [0, 1, 2]
    assert "id" not in [c.role for c in none.columns]


def test_two_ids_at_once_are_rejected(mixed):
    with pytest.raises(TableError, match=r"only one column can be the id; got 'name', 'n'"):
        mixed.with_roles({"name": "id", "n": "id"})


@pytest.mark.parametrize("column, role, conversion", [
    ("n", "text", "text"),
    ("q", "category", "text"),
    ("flag", "invariant", "bool_to_int"),
    ("flag", "text", "text"),
    ("kind", "text", None),
    ("name", "category", None),
], ids=lambda v: v if isinstance(v, str) else "")
def test_role_change_gives_the_description_the_cells_give(mixed, column, role, conversion):
    # the Dask reader types a role change from the column's description alone
    # (table.role_change); where that needs no cells it must equal what the in-memory reader
    # makes of the cells, or one file would be typed two ways by the two engines
    change = role_change(mixed.name, mixed.column(column), role, mixed.n_rows)
    assert change.info == mixed.with_roles({column: role}).column(column)
    assert change.conversion == conversion


@pytest.mark.parametrize("column, role, error, message", [
    ("m", "text", StepError, r"mixed\.csv: column 'm': turning arrays into text is not done "
                             r"on the dask engine; use --engine local\."),
    ("kind", "flag", StepError, r"mixed\.csv: column 'kind' holds text values; on the dask "
                                r"engine only true/false or 0/1 columns can be flags\."),
    ("name", "invariant", StepError, r"column 'name' holds text values; on the dask engine "
                                     r"only numbers and flags can be invariants\."),
    # kind holds x, y, x: two values in three rows
    ("kind", "id", TableError, r"mixed\.csv: column 'kind' cannot be the id: it has 2 "
                               r"distinct values in 3 rows\. Choose a column with unique"),
    ("n", "array", TableError, r"mixed\.csv: column 'n' holds integer values, not arrays\."),
], ids=["array to text", "text to flag", "text to invariant", "repeated id", "number to array"])
def test_role_change_refuses_what_only_the_cells_settle(mixed, column, role, error, message):
    with pytest.raises(error, match=message):
        role_change(mixed.name, mixed.column(column), role, mixed.n_rows)


def test_an_id_column_with_empty_cells_is_refused_by_both_checks():
    # two empty cells: the cell check once took them for a repeated value and named no row
    # ("the value nan appears in rows ."); empty cells are checked first, as role_change does
    data = b"k,v\n1,5\n,6\n,7\n4,8\n"
    table = read_table(data, "t.csv")
    with pytest.raises(TableError, match=r"^t\.csv: the id column 'k' is empty in 2 rows\. "
                                         r"Every row needs an id\.$"):
        role_change(table.name, table.column("k"), "id", table.n_rows)
    with pytest.raises(TableError, match=r"^t\.csv, row 2: the id column 'k' is empty there\. "
                                         r"Every row needs an id\.$"):
        read_table(data, "t.csv", id_column="k")


def test_id_with_an_empty_cell_is_rejected():
    table = read_table(b"k,v\na,1\n,2\nc,3\n", "t.csv")
    with pytest.raises(TableError, match=r"t\.csv, row 2: the id column 'k' is empty there"):
        table.with_roles(id_column="k")


def test_load_table_applies_id_and_roles(tmp_path):
    path = _write(tmp_path, "t.csv", b"k,v,w\n10,1,a\n20,2,b\n30,3,a\n")
    table = load_table(path, id_column="k", roles={"w": "text", "v": "category"})
    assert table.id_column == "k"
    assert (table.role("w"), table.role("v")) == ("text", "category")


def test_unknown_column_in_numeric_names_the_columns(mixed):
    with pytest.raises(TableError, match=r"mixed\.csv: column 'kind' holds text values, not "
                                         r"numbers"):
        mixed.numeric("kind")


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(TableError, match=r"no such file\. Check the path"):
        load_table(tmp_path / "absent.csv")
    with pytest.raises(TableError, match=r"is a folder, not a table file"):
        load_table(tmp_path)


def test_integer_columns_are_kept_in_the_smallest_exact_type(tmp_path):
    # a column of values near the top of int8 (so that 2*a - b would wrap if any later
    # arithmetic stayed in int8), one needing int16, one past 32 bits, and an unsigned one
    a = np.arange(100, 128, dtype=np.int64)
    frame = {"a": a, "b": 3 * a, "c": a * 2**40, "u": a.astype(np.uint64)}
    path = tmp_path / "small.parquet"
    pq.write_table(pa.table(frame), path)
    table = load_table(path)
    dtypes = {name: table.frame[name].dtype for name in frame}
    assert dtypes == {"a": np.int8, "b": np.int16, "c": np.int64, "u": np.int8}
    assert [c.dtype for c in table.columns] == ["integer"] * 4
    assert table.exact("c") == [int(v) * 2**40 for v in a]
    assert table.numeric("b").tolist() == [float(3 * v) for v in a]


def test_relations_on_narrow_integer_columns_do_not_wrap(tmp_path):
    # b = 3a holds on every row; in int8 arithmetic 3*127 would wrap to 125 and break it
    from analysis.relations import RelationsStep

    a = np.arange(60, 128, dtype=np.int64)
    path = tmp_path / "narrow.parquet"
    pq.write_table(pa.table({"a": a, "b": 3 * a, "c": (a * 7) % 11}), path)
    table = load_table(path)
    assert table.frame["a"].dtype == np.int8
    result = RelationsStep(bounds=False).run(table)
    texts = [r.text for r in result.relations if not getattr(r, "trivial", False)]
    assert any("3*a" in text and "b" in text for text in texts), texts
    found = [r for r in result.relations if "3*a" in r.text]
    assert all(r.exact and not r.violations and r.holds_on == len(a) for r in found)


# ------------------------------------------------------------------------------------------
# Marked numbers: intervals and marker words among the numbers of a column

# A small table written the way public databases write unknown and non-applicable values
# (common practice: an open value as [lower bound, upper bound], a word where the invariant
# does not apply). Twelve objects; the id column names them.
MARKED_CELLS = [
    # object, colours (intervals), volume (words), family (stray spaces), hyperbolic (Y/N)
    ("K1", "[3,4]", "2.0299", "torus", "N"),
    ("K2", "3", "Not Hyperbolic", " torus", "N"),
    ("K3", "4", "2.8281", "twist", "Y"),
    ("K4", "[2, 3]", "3.1640", "twist ", "Y"),
    ("K5", "5", "D.N.E.", "torus", "N"),
    ("K6", "3", "4.4008", "twist", "Y"),
    ("K7", "4", "2.8281", "pretzel", "Y"),
    ("K8", "[7/2, 5]", "3.1640", "pretzel", "Y"),
    ("K9", "6", "Not Hyperbolic", "torus", "N"),
    ("K10", "3", "5.1379", "twist", "Y"),
    ("K11", "", "4.4008", "pretzel", "Y"),
    ("K12", "4", "2.0299", "twist", "Y"),
]
MARKED_HEADER = ["object", "colours", "volume", "family", "hyperbolic"]


def _marked_csv(cells=MARKED_CELLS) -> bytes:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")  # quotes the cells holding commas
    writer.writerow(MARKED_HEADER)
    writer.writerows(cells)
    return buffer.getvalue().encode()


def _marked_json(lines: bool = False) -> bytes:
    # the same cells as JSON records: numbers as JSON numbers, intervals and words as strings
    records = []
    for row in MARKED_CELLS:
        record = {}
        for key, cell in zip(MARKED_HEADER, row):
            try:
                record[key] = int(cell) if key == "colours" else float(cell) \
                    if key == "volume" else cell
            except ValueError:
                record[key] = cell if cell else None
        records.append(record)
    if lines:
        return "\n".join(json.dumps(r) for r in records).encode() + b"\n"
    return json.dumps(records).encode()


@pytest.fixture(scope="module")
def marked():
    return read_table(_marked_csv(), "knots.csv")


def test_intervals_are_kept_and_missing_in_the_typed_frame(marked):
    info = marked.column("colours")
    assert (info.role, info.dtype, info.intervals, info.markers) == (
        "invariant", "rational", 3, {})
    # interval rows and the empty cell are missing; the plain numbers are exact
    assert marked.exact("colours") == [None, 3, 4, None, 5, 3, 4, None, 6, 3, None, 4]
    assert info.missing == 4
    found = marked.intervals("colours")
    assert found.positions.tolist() == [0, 3, 7]
    assert found.row_ids.tolist() == ["K1", "K4", "K8"]
    # exact ends: integers stay ints, 7/2 is a Fraction (sympy's Rational agrees)
    assert found.low == (3, 2, Fraction(7, 2)) and found.high == (4, 3, 5)
    assert found.exact("midpoint") == [Fraction(7, 2), Fraction(5, 2), Fraction(17, 4)]
    assert found.numeric("high").tolist() == [4.0, 3.0, 5.0]
    with pytest.raises(TableError, match=r"column 'colours': an interval end is 'low', "
                                         r"'high' or 'midpoint', not 'middle'"):
        found.exact("middle")


def test_an_integer_column_with_integer_intervals_stays_integer():
    table = read_table(b'k,c\na,"[1,2]"\nb,3\nc,4\nd,3\ne,"[5 ,6]"\n', "t.csv")
    info = table.column("c")
    assert (info.dtype, info.intervals) == ("integer", 2)
    assert table.intervals("c").low == (1, 5) and table.intervals("c").high == (2, 6)
    assert table.exact("c") == [None, 3, 4, 3, None]


def test_marker_words_are_missing_and_counted(marked):
    info = marked.column("volume")
    assert (info.role, info.dtype, info.intervals) == ("invariant", "real", 0)
    assert info.markers == {"Not Hyperbolic": 2, "D.N.E.": 1}
    assert np.isnan(marked.numeric("volume")[[1, 4, 8]]).all()
    assert marked.numeric("volume")[0] == 2.0299
    assert "Not Hyperbolic" in info.note
    assert marked.marked_lines() == [
        "numbers with marks (intervals and words are missing values in the typed columns):",
        "  colours: 3 intervals [low, high] kept apart",
        "  volume: read as missing: 'Not Hyperbolic' in 2 rows, 'D.N.E.' in 1 row"]
    assert len(marked.intervals("volume")) == 0


def test_inspect_json_names_intervals_and_markers(marked):
    by_name = {c["name"]: c for c in marked.summary()["columns"]}
    assert by_name["colours"]["intervals"] == 3 and by_name["colours"]["markers"] == {}
    assert by_name["volume"]["markers"] == {"Not Hyperbolic": 2, "D.N.E.": 1}
    assert by_name["object"]["intervals"] == 0
    json.dumps(marked.summary())  # plain JSON


@pytest.mark.parametrize("fmt", ["json", "jsonl"])
def test_csv_and_json_give_the_same_typing(fmt, marked):
    table = read_table(_marked_json(lines=fmt == "jsonl"), f"knots.{fmt}")
    for info in marked.columns:
        other = table.column(info.name)
        assert (other.role, other.dtype, other.missing, other.intervals, other.markers) == (
            info.role, info.dtype, info.missing, info.intervals, info.markers), info.name
    assert table.intervals("colours").low == marked.intervals("colours").low
    assert table.exact("colours") == marked.exact("colours")


def test_json_lists_mixed_with_numbers_are_intervals_and_lists_alone_an_array():
    mixed = read_table(json.dumps([{"c": [1, 2]}, {"c": 3}, {"c": 4}, {"c": 4}]).encode(),
                       "t.json")
    assert (mixed.role("c"), mixed.column("c").intervals) == ("invariant", 1)
    alone = read_table(json.dumps([{"c": [1, 2]}, {"c": [3, 4]}, {"c": [0, 9]}]).encode(),
                       "t.json")
    assert alone.role("c") == "array"


def test_two_element_arrays_alone_stay_an_array_column():
    # every filled cell a two-element list, no plain number: a list column, not intervals
    table = read_table(b'k,p\na,"[1, 2]"\nb,"[3, 4]"\nc,\nd,"[0, 9]"\n', "t.csv")
    assert (table.role("p"), table.column("p").dtype, table.column("p").intervals) == (
        "array", "array", 0)
    assert table.frame["p"].iloc[0].tolist() == [1, 2]
    # plain numbers beside them: intervals
    mixed = read_table(b'k,p\na,"[1, 2]"\nb,"[3, 4]"\nc,5\nd,"[0, 9]"\n', "t.csv")
    assert (mixed.role("p"), mixed.column("p").intervals) == ("invariant", 3)


def test_a_reversed_interval_names_file_row_column_and_object():
    data = b'object,c\nA,3\nB,"[5,2]"\nC,4\nD,1\n'
    with pytest.raises(TableError, match=r"knots\.csv, row 2 \(id 'B'\), column 'c': the "
                                         r"interval '\[5,2\]' has its low end 5 above its "
                                         r"high end 2\. Write intervals as \[low, high\]"):
        read_table(data, "knots.csv")
    # without an id column the row alone places it
    with pytest.raises(TableError, match=r"t\.csv, row 2, column 'c': the interval"):
        read_table(b'c,d\n3,1\n"[5,2]",1\n4,2\n1,1\n', "t.csv")


def test_an_interval_dividing_by_zero_is_refused():
    with pytest.raises(TableError, match=r"t\.csv, row 1, column 'c': '\[1/0, 2\]' divides "
                                         r"by zero"):
        read_table(b'c,d\n"[1/0, 2]",1\n4,2\n1,1\n', "t.csv")


@pytest.mark.parametrize("cells, marked_reading", [
    (["1", "2", "3", "-", "4", "5"], True),
    (["1", "2", "3", "a", "b", "c", "d", "e", "f", "4", "5", "6", "7", "8"], False),
    (["1", "-", "-", "2"], False),
    (["1", "x", "y", "1", "1", "1", "1"], False),
    (["[1,2]", "[3,4]", "-"], False),
], ids=["one word", "six words", "words in half the cells", "more words than numbers",
        "no plain number"])
def test_the_marker_rule_thresholds(cells, marked_reading):
    data = "k,c\n" + "".join(f'{i},"{c}"\n' for i, c in enumerate(cells))
    try:
        table = read_table(data.encode(), "t.csv")
    except TableError:
        table = None  # half arrays, half words: a clear error, as for any array column
    assert (table is not None and table.role("c") == "invariant") == marked_reading


def test_the_rule_function_is_the_one_the_loader_follows():
    from analysis.column_facts import MARKER_RULE, reads_as_marked_numbers

    assert (MARKER_RULE.max_words, MARKER_RULE.max_share) == (5, Fraction(1, 3))
    assert reads_as_marked_numbers(numbers=2, intervals=0, words={"-": 1}, distinct_numbers=2)
    assert not reads_as_marked_numbers(numbers=2, intervals=0, words={"-": 2},
                                       distinct_numbers=2)  # more than a third
    # numbers only, some written as text: read as numbers
    assert reads_as_marked_numbers(numbers=3, intervals=0, words={}, distinct_numbers=3)
    assert reads_as_marked_numbers(numbers=0, intervals=4, words={}, distinct_numbers=0,
                                   requested=True)
    words = {f"w{i}": 1 for i in range(6)}
    assert not reads_as_marked_numbers(numbers=100, intervals=0, words=words,
                                       distinct_numbers=100, requested=True)


def test_a_marked_column_can_be_given_another_role_and_back(marked):
    as_text = marked.with_roles({"colours": "text", "volume": "category"})
    # the cells as the file wrote them (the interval and word texts come back)
    assert as_text.frame["colours"].tolist()[:4] == ["[3,4]", "3", "4", "[2, 3]"]
    assert as_text.frame["volume"].tolist()[1] == "Not Hyperbolic"
    assert as_text.column("colours").intervals == 0 and as_text.column("volume").markers == {}
    assert len(as_text.intervals("colours")) == 0
    back = as_text.with_roles({"colours": "invariant", "volume": "invariant"})
    assert back.column("colours").intervals == 3
    assert back.intervals("colours").high == marked.intervals("colours").high
    assert back.column("volume").markers == {"Not Hyperbolic": 2, "D.N.E.": 1}


def test_override_to_invariant_reads_intervals_of_an_array_or_text_column():
    # detected as an array (two-element lists only); asked for as an invariant: intervals
    table = read_table(b'k,p\na,"[1, 2]"\nb,"[3, 4]"\nc,"[0, 9]"\n', "t.csv")
    interval = table.with_roles({"p": "invariant"})
    assert (interval.role("p"), interval.column("p").dtype) == ("invariant", "integer")
    assert interval.intervals("p").exact("midpoint") == [Fraction(3, 2), Fraction(7, 2),
                                                          Fraction(9, 2)]
    # more words than the rule allows when detecting: text, but the user may ask
    words = read_table(b"k,v\n1,2\n2,unknown\n3,open\n4,5\n", "t.csv")
    assert words.role("v") != "invariant"
    asked = words.with_roles({"v": "invariant"})
    assert asked.exact("v") == [2, None, None, 5]
    assert asked.column("v").markers == {"open": 1, "unknown": 1}


def test_override_to_invariant_names_row_object_column_and_cell():
    data = ("name,v\n" + "".join(f"N{i},{i}\n" for i in range(1, 8))
            + "".join(f"W{i},word{i}\n" for i in range(6))).encode()
    table = read_table(data, "t.csv")
    assert table.role("v") == "text"
    with pytest.raises(TableError, match=r"t\.csv, row 13 \(id 'W5'\), column 'v': expected a "
                                         r"number or an interval like \[1, 2\], got 'word5'; "
                                         r"a column of numbers may hold at most 5 different "
                                         r"words.*mark it as text"):
        table.with_roles({"v": "invariant"})


def test_marked_bytes_are_unchanged(tmp_path):
    data = _marked_csv()
    path = tmp_path / "knots.csv"
    path.write_bytes(data)
    table = load_table(path)
    table.with_roles({"colours": "text"}).with_roles({"colours": "invariant"})
    assert path.read_bytes() == data
    assert table.digest == hashlib.sha256(data).hexdigest()  # hashlib is the reference


# ------------------------------------------------------------------------------------------
# Flags and category labels


@pytest.mark.parametrize("words", [("Y", "N"), ("y", "n"), ("T", "F"), ("yes", "no"),
                                   ("YES", "No"), ("true", "FALSE")],
                         ids=lambda w: "/".join(w))
def test_two_flag_words_in_any_case_are_a_flag(words):
    yes, no = words
    data = f"k,f\n1,{yes}\n2,{no}\n3,{no}\n4,\n5,{yes}\n".encode()
    table = read_table(data, "t.csv")
    assert (table.role("f"), table.column("f").dtype) == ("flag", "boolean")
    assert table.frame["f"].tolist() == [True, False, False, None, True]


def test_true_false_words_in_two_spellings_are_a_category_with_a_warning_until_made_a_flag():
    cells = ["Y", "N", "True", "False", "N", "", "Y", "false"]
    data = ("k,f\n" + "".join(f"{i},{c}\n" for i, c in enumerate(cells))).encode()
    table = read_table(data, "t.csv")
    assert table.role("f") == "category" and table.column("f").distinct == 5
    said = [w for w in table.warnings if "'f'" in w]
    assert len(said) == 1 and "holds only true/false words, in more than one spelling " \
        "(False, N, True, Y, false)" in said[0] and "role flag" in said[0], said
    flag = table.with_roles({"f": "flag"})
    assert (flag.column("f").dtype, flag.column("f").distinct) == ("boolean", 2)
    assert flag.frame["f"].tolist() == [True, False, True, False, False, None, True, False]
    # 0 and 1 beside the words (common practice when tables from two sources are joined)
    mixed = ["True", "1", "false", "0", "0", "", "true", "False"]
    joined = read_table(("k,f\n" + "".join(f"{i},{c}\n" for i, c in enumerate(mixed))).encode(),
                        "t.csv")
    said = [w for w in joined.warnings if "'f'" in w]
    assert len(said) == 1 and "true/false words and 0/1" in said[0], said
    made = joined.with_roles({"f": "flag"})
    assert made.frame["f"].tolist() == [True, True, False, False, False, None, True, False]
    # two spellings in all are a flag already, and a category of other words gives no warning
    assert read_table(b"k,f\n1,Y\n2,N\n3,Y\n", "t.csv").role("f") == "flag"
    plain = read_table(("k,f\n" + "".join(f"{i},{'AB'[i % 2]}\n" for i in range(30))).encode(),
                       "t.csv")
    assert plain.role("f") == "category" and not [w for w in plain.warnings if "'f'" in w]


def test_the_flag_words_are_one_public_set():
    from analysis.column_facts import FALSE_WORDS, TRUE_WORDS, reads_as_flag

    assert {"y", "t", "yes", "true"} == TRUE_WORDS and {"n", "f", "no", "false"} == FALSE_WORDS
    assert reads_as_flag({"Y", "n"}) and not reads_as_flag({"yes", "y"})
    assert not reads_as_flag({"x", "y"})


def test_labels_differing_by_spaces_are_one_label_with_a_warning(marked, tmp_path):
    assert marked.role("family") == "category"
    assert marked.frame["family"].tolist()[:4] == ["torus", "torus", "twist", "twist"]
    assert marked.column("family").distinct == 3
    warning = next(w for w in marked.warnings if "'family'" in w)
    assert "2 cells have spaces around the label" in warning
    assert "5 labels as written are 3 labels" in warning
    # padded labels that never meet their unpadded spelling: no merge to speak of
    padded = "k,c\n" + "".join(f"{i},{'A ' if i % 2 else ' B'}\n" for i in range(40))
    said = [w for w in read_table(padded.encode(), "p.csv").warnings if "'c'" in w]
    assert said == ["p.csv: column 'c': 40 cells have spaces around the label, read without "
                    "them."], said
    # a column of free text keeps its cells as written
    names = "k,t\n" + "".join(f"{i}, name {i}\n" for i in range(40))
    assert read_table(names.encode(), "t.csv").frame["t"].iloc[0] == " name 0"


def test_infinite_cells_are_named_in_a_warning():
    # "inf" and "-inf" are the spellings Python's float() reads as infinities (the Python
    # documentation of float); a real column holding them warns once, naming the column
    table = read_table(b"k,exponent,order\n1,2,4\n2,inf,8\n3,-inf,16\n4,8,32\n", "g.csv")
    infinite = [w for w in table.warnings if getattr(w, "code", None) == "infinite_cells"]
    assert len(infinite) == 1 and "'exponent'" in infinite[0]
    assert [c.note for c in table.columns if c.name == "exponent"] == ["has infinite values"]
    finite = read_table(b"k,exponent\n1,2\n2,1e3\n", "g.csv")
    assert not [w for w in finite.warnings if getattr(w, "code", None) == "infinite_cells"]


def _nilpotency_table(words: int, numbers: int):
    # a nilpotency class column as group tables print it: a number, or a word where the group
    # is not nilpotent (common practice in downloaded tables: '-' or a phrase)
    cells = [str(1 + i % 3) for i in range(numbers)] + ["-", "not nilpotent"] * (words // 2)
    body = "".join(f"G{i},{c}\n" for i, c in enumerate(cells))
    return read_table(("label,nilpotency\n" + body).encode(), "groups.csv")


@pytest.mark.parametrize("words, numbers, warned", [(4, 12, False), (8, 12, True),
                                                     (10, 8, False)],
                         ids=["marked numbers", "mostly numbers", "mostly words"])
def test_a_column_of_numbers_with_many_words_is_named(words, numbers, warned):
    table = _nilpotency_table(words, numbers)
    said = [w for w in table.warnings if getattr(w, "code", None) == "mostly_numbers"]
    assert bool(said) == warned, table.warnings
    if warned:
        assert "'nilpotency'" in said[0] and "role invariant" in said[0]
        asked = table.with_roles({"nilpotency": "invariant"})
        column = next(c for c in asked.columns if c.name == "nilpotency")
        assert (column.dtype, column.missing) == ("integer", words)
        assert column.markers == {"-": words // 2, "not nilpotent": words // 2}


def test_a_column_with_one_value_in_a_few_rows_is_not_called_constant():
    # a remark filled in for 3 of 40 objects: its value never varies, but which rows hold
    # it may matter (the counts are those of the file's own cells)
    lines = ["n,remark"] + [f"{i},{'checked by hand' if i % 13 == 5 else ''}" for i in range(40)]
    table = read_table("\n".join(lines).encode() + b"\n", "remarks.csv")
    said = [w for w in table.warnings if getattr(w, "code", None) == "column_constant"]
    assert len(said) == 1 and said[0].figures["filled"] == 3
    assert "holds one value, in 3 rows, and no value in the other 37" in said[0]



def test_json_numbers_quoted_now_and_then_are_numbers():
    # some databases' JSON writes a number as a string in a few records; Python's json and
    # float() read every cell as the same number
    from conftest import records_table

    records = [{"n": i, "regulator": str(i / 8) if i % 4 == 0 else i / 8,
                "conductor": str(11 * i + 11) if i % 3 == 0 else 11 * i + 11}
               for i in range(40)]
    table = records_table(records, "curves.json")
    assert table.column("regulator").dtype == "real"
    assert table.column("regulator").role == "invariant"
    assert table.numeric("regulator").tolist() == [float(r["regulator"]) for r in records]
    assert table.column("conductor").dtype == "integer"
    assert table.exact("conductor") == [int(r["conductor"]) for r in records]
    assert json.loads(json.dumps(records)) == records   # the reference reading round-trips


def _divisor_lists_csv() -> bytes:
    # common practice in exported tables: long lists cut short with an ellipsis, and a
    # marker word where a list is unknown; the full lists come from sympy.divisors
    import sympy

    lines = ["n,divisors"]
    for n in range(2, 62):
        full = sympy.divisors(n)
        if n % 7 == 0:
            cell = "?"
        elif len(full) > 6:
            cell = "[" + ", ".join(map(str, full[:3])) + (", \u2026]" if n % 2 else ", ...]")
        else:
            cell = json.dumps(full)
        lines.append(f'{n},"{cell}"')
    return ("\n".join(lines) + "\n").encode()


def test_cut_off_lists_and_marker_words_in_an_array_column_are_missing_and_counted():
    import sympy

    data = _divisor_lists_csv()
    rows = list(csv.DictReader(io.StringIO(data.decode())))
    table = read_table(data, "divisors.csv")
    info = table.column("divisors")
    assert (info.role, info.dtype) == ("array", "array")
    cut = sum(r["divisors"].startswith("[") and ("\u2026" in r["divisors"]
                                                 or "..." in r["divisors"]) for r in rows)
    unknown = sum(r["divisors"] == "?" for r in rows)
    assert cut > 0 and unknown > 0
    assert info.markers == {"[\u2026]": cut, "?": unknown}
    assert info.missing == cut + unknown
    assert "read as missing" in info.note
    for row, cell in zip(rows, table.frame["divisors"]):
        if row["divisors"].startswith("[") and row["divisors"].endswith("]") \
                and "." not in row["divisors"] and "\u2026" not in row["divisors"]:
            assert cell.tolist() == sympy.divisors(int(row["n"]))
        else:
            assert cell is None
    assert any(line.startswith("  divisors: read as missing:") and f"'[\u2026]' in {cut} rows"
               in line and f"'?' in {unknown} rows" in line for line in table.marked_lines())
    # nothing the file gave is lost: shown as text, every cell is as written
    as_text = table.with_roles({"divisors": "text"})
    assert as_text.frame["divisors"].tolist() == [
        json.dumps(json.loads(r["divisors"])) if r["divisors"] not in {"?"}
        and "." not in r["divisors"] and "\u2026" not in r["divisors"] else r["divisors"]
        for r in rows]


def _brace_lists_tsv() -> bytes:
    # lists and matrices in braces, as computer algebra systems print them and database dumps
    # write arrays (common practice); the degree sequences and adjacency matrices are
    # networkx's graph atlas
    import networkx as nx

    lines = ["name\tdegrees\tadjacency\tnote"]
    for i, g in enumerate(nx.graph_atlas_g()[1:40]):
        degrees = sorted((d for _, d in g.degree()), reverse=True)
        rows = nx.to_numpy_array(g, dtype=int).tolist()
        braces = "{" + ", ".join("{" + ",".join(map(str, r)) + "}" for r in rows) + "}"
        note = '{"seen": 1}' if i % 2 else "{a, b}"
        lines.append(f"G{i + 1}\t{{{','.join(map(str, degrees))}}}\t{braces}\t{note}")
    return ("\n".join(lines) + "\n").encode()


def test_lists_and_matrices_in_braces_are_arrays():
    import networkx as nx

    table = read_table(_brace_lists_tsv(), "atlas.tsv")
    assert (table.column("degrees").dtype, table.column("adjacency").dtype) == ("array",
                                                                                "array")
    for g, degrees, adjacency in zip(nx.graph_atlas_g()[1:40], table.frame["degrees"],
                                     table.frame["adjacency"]):
        assert degrees.tolist() == sorted((d for _, d in g.degree()), reverse=True)
        assert adjacency.tolist() == nx.to_numpy_array(g, dtype=int).tolist()
    # records and sets of words in braces are no lists: the column stays text, as written
    assert table.column("note").dtype == "text"
    assert set(table.frame["note"]) == {'{"seen": 1}', "{a, b}"}


@pytest.mark.parametrize("cell, read", [
    ("{2., .5, +1}", [2.0, 0.5, 1.0]),      # machine reals as some systems print them
    ("{1.5e-3, -2}", [0.0015, -2.0]),
    ("{}", []),
])
def test_numbers_in_brace_lists_are_read_in_their_usual_spellings(cell, read):
    data = f"n,v\n1,\"{cell}\"\n2,\"{{3, 4}}\"\n".encode()
    table = read_table(data, "t.csv")
    assert table.column("v").dtype == "array"
    assert table.frame["v"][0].tolist() == read


def test_a_cut_off_brace_list_is_missing_and_counted():
    data = b'n,v\n1,"{1, 2}"\n2,"{1, 2, ...}"\n3,"{4}"\n'
    info = read_table(data, "t.csv").column("v")
    assert (info.dtype, info.missing, info.markers) == ("array", 1, {"[\u2026]": 1})


def test_a_broken_list_cell_still_names_its_row():
    data = b'n,divisors\n2,"[1, 2]"\n3,"[1, 3"\n4,"[1, 2, 4]"\n'
    with pytest.raises(TableError, match=r"t.csv, row 2, column 'divisors': not a valid JSON "
                                         r"array"):
        read_table(data, "t.csv")
