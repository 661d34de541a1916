"""The typing rule of analysis/column_facts.py: facts of a block of cells, their merge, and
the dtype decided from them.

Exact values are held against Python's own readers (``int``, ``fractions.Fraction``,
``float``'s IEEE 754 doubles) and numpy's integer limits; true/false words against pandas'
own CSV reader. Merging the facts of two blocks must equal the facts of the block they make
together (checked with hypothesis), since the Dask engine merges partitions and the
in-memory engine reads one block.
"""

from __future__ import annotations

import io
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from analysis.column_facts import (
    FLOAT_EXACT,
    NUMBERS_AS_TEXT_SHARE,
    block_facts,
    column_type,
    integer_type,
    merge_facts,
    read_marked_cell,
    reads_as_flag,
    text_block_facts,
    text_reading,
)
from analysis.table import read_table

# ----------------------------------------------------------------------------------------
# Integers: flags, 64 bits, 2**53 with missing cells


def test_the_float_limit_is_where_python_floats_stop_holding_integers():
    # IEEE 754 doubles (Python's float) hold every integer up to 2**53 and not 2**53 + 1
    assert all(int(float(v)) == v for v in range(FLOAT_EXACT - 3, FLOAT_EXACT + 1))
    assert int(float(FLOAT_EXACT + 1)) != FLOAT_EXACT + 1
    for high in range(FLOAT_EXACT - 2, FLOAT_EXACT + 3):
        exact = all(int(float(v)) == v for v in range(high - 2, high + 1))
        dtype, _ = integer_type(0, high, complete=False, zero_one=False)
        assert (dtype == "integer") == exact, high


@pytest.mark.parametrize("low, high", [(0, 9), (-5, 2**40)])
def test_complete_integers_within_64_bits_are_integers(low, high):
    assert integer_type(low, high, complete=True, zero_one=False) == ("integer", "")


def test_integers_past_64_bits_are_big_at_numpys_int64_limits():
    top, bottom = int(np.iinfo(np.int64).max), int(np.iinfo(np.int64).min)   # from numpy
    assert integer_type(bottom, top, complete=True, zero_one=False)[0] == "integer"
    assert integer_type(0, top + 1, complete=True, zero_one=False)[0] == "big integer"
    assert integer_type(bottom - 1, 0, complete=True, zero_one=False)[0] == "big integer"


def test_zero_one_is_a_flag_with_or_without_missing_cells_unless_flags_are_off():
    for complete in (True, False):
        assert integer_type(0, 1, complete=complete, zero_one=True)[0] == "boolean"
    assert integer_type(0, 1, complete=True, zero_one=True, flags=False)[0] == "integer"


@pytest.mark.parametrize("cells, dtype", [
    (["0", "1", None, "1"], "boolean"),
    ([str(2**60), None, "5"], "big integer"),
    ([str(2**70), "3", "4"], "big integer"),
    (["3", None, "7"], "integer"),
    (["1e3", "2.5", None], "real"),
], ids=["0/1 with a blank", "past 2**53 with a blank", "past 64 bits", "small with a blank",
        "decimals"])
def test_csv_cells_get_one_dtype_whether_in_memory_or_from_facts(cells, dtype):
    series = pd.Series(cells, dtype=object, name="x")
    assert column_type(block_facts(series, from_text=True), "csv")[0] == dtype
    text = "k,x\n" + "".join(f"{k},{'' if c is None else c}\n" for k, c in enumerate(cells))
    assert read_table(text.encode(), "t.csv").column("x").dtype == dtype


# ----------------------------------------------------------------------------------------
# Text cells: rationals, true/false words, marked numbers, arrays


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(-10**30, 10**30), st.integers(1, 10**6)), min_size=2,
                max_size=12))
def test_rationals_written_p_over_q_read_as_pythons_fractions(pairs):
    texts = [f"{p}/{q}" for p, q in pairs]
    facts = text_block_facts(pd.Series(texts, dtype=object))
    expected = [Fraction(p, q) for p, q in pairs]   # Python's own exact rationals
    if all(v.denominator == 1 for v in expected) and all(q == 1 for _, q in pairs):
        return
    assert text_reading(facts) == "rational"
    table = read_table(("x\n" + "\n".join(texts) + "\n").encode(), "t.csv")
    assert table.exact("x") == expected


def test_integer_text_reads_as_pythons_int_past_64_bits():
    texts = [str(3**50), "-" + str(2**64), "17"]
    assert text_reading(text_block_facts(pd.Series(texts, dtype=object))) == "integer"
    table = read_table(("x\n" + "\n".join(texts) + "\n").encode(), "t.json".replace(
        "json", "csv"))
    assert table.exact("x") == [int(t) for t in texts]


@pytest.mark.parametrize("true, false", [("True", "False"), ("TRUE", "FALSE"),
                                         ("true", "false")])
def test_words_pandas_reads_as_booleans_are_flags(true, false):
    # pandas' CSV reader makes these spellings a bool column by itself
    read = pd.read_csv(io.StringIO(f"x\n{true}\n{false}\n{true}\n"))
    assert read["x"].dtype == bool
    assert reads_as_flag({true, false})
    facts = text_block_facts(pd.Series([true, false, None, true], dtype=object))
    assert text_reading(facts) == "flag"


def test_two_spellings_of_one_value_are_not_a_flag():
    assert not reads_as_flag({"yes", "y", "no"})


def test_marked_numbers_intervals_and_words():
    cells = ["1", "2", "[1, 2]", "Not Hyperbolic", "5", "7", None, "9"]
    facts = text_block_facts(pd.Series(cells, dtype=object))
    assert text_reading(facts) == "marked"
    assert text_reading(facts, marked=False) == "text"
    marked = facts["marked"]
    assert (marked["numbers"], marked["intervals"], marked["words"]) == \
        (5, 1, {"Not Hyperbolic": 1})
    assert read_marked_cell("[1, 3/2]") == ("interval", (1, Fraction(3, 2)))


def test_json_array_text_reads_as_arrays():
    cells = ["[1, 2]", "[3, 4]", None, "[[1, 0], [0, 1]]"]
    assert text_reading(text_block_facts(pd.Series(cells, dtype=object))) == "array"


# ----------------------------------------------------------------------------------------
# Merging two blocks equals reading them as one


def _comparable(facts: dict) -> dict:
    """Facts without the float sum (blocks add in another order), with arrays as lists and
    the flags a merge writes out (an absent flag is False)."""
    out = {"decimal": False, "parsed": False}
    for key, value in facts.items():
        if key == "total":
            continue
        if isinstance(value, np.ndarray):
            value = value.tolist()
        if key == "marked" and value is not None:
            value = {k: v for k, v in value.items() if k != "total"}
        out[key] = value
    return out


CELLS = st.one_of(
    st.none(),
    st.integers(-20, 20).map(str),
    st.tuples(st.integers(-9, 9), st.integers(1, 9)).map(lambda pq: f"{pq[0]}/{pq[1]}"),
    st.sampled_from(["infty", "D.N.E.", "Y", "N", "[1,2]", " toric", "toric", "2.5",
                     "249,525", "\u22127", "2^3 * 3"]),
)


@settings(max_examples=150, deadline=None)
@given(st.lists(CELLS, min_size=1, max_size=30), st.data())
def test_merged_text_facts_equal_the_facts_of_one_block(cells, data):
    split = data.draw(st.integers(0, len(cells)))
    series = pd.Series(cells, dtype=object)
    whole = block_facts(series, from_text=True, as_text=True)
    parts = [block_facts(series.iloc[:split].reset_index(drop=True), True, True),
             block_facts(series.iloc[split:].reset_index(drop=True), True, True)]
    merged = merge_facts(*parts)
    assert _comparable(merged) == _comparable(whole)
    if whole["kind"] is not None:
        assert text_reading(merged) == text_reading(whole)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.one_of(st.none(), st.integers(-3, 2**62)), min_size=1, max_size=30),
       st.data())
def test_merged_number_facts_equal_the_facts_of_one_block(values, data):
    # pandas' nullable integers, as Parquet gives them
    series = pd.Series(pd.array(values, dtype="Int64"))
    split = data.draw(st.integers(0, len(values)))
    whole = block_facts(series, from_text=False)
    merged = merge_facts(block_facts(series.iloc[:split], False),
                         block_facts(series.iloc[split:], False))
    assert _comparable(merged) == _comparable(whole)
    assert column_type(merged, "parquet") == column_type(whole, "parquet")
    present = [v for v in values if v is not None]
    if present and len(set(present)) > 2:
        # the one integer rule, from Python's own ints
        expected = integer_type(min(present), max(present), complete=len(present) == len(values),
                                zero_one=False)
        assert column_type(whole, "parquet")[:2] == expected


# ----------------------------------------------------------------------------------------
# Numbers written in ways no reading takes


def _odd_numbers_csv() -> bytes:
    # common practice in copied tables: thousands separators, the typographic minus, group
    # orders as products of prime powers (sympy.factorint writes each one here)
    import sympy

    lines = ["order,disc,order_factored"]
    for i in range(60):
        n = 1000 + 37 * i
        order = f"{n:,}" if i % 6 == 5 else str(n)
        disc = f"\u2212{n}" if i % 10 == 3 else str(-n)
        factored = " * ".join(f"{p}^{e}" if e > 1 else str(p)
                              for p, e in sorted(sympy.factorint(n).items()))
        lines.append(f'"{order}",{disc},{factored}')
    return ("\n".join(lines) + "\n").encode()


def test_mostly_numbers_read_as_text_say_which_cell_and_why():
    import csv

    data = _odd_numbers_csv()
    rows = list(csv.DictReader(io.StringIO(data.decode())))
    table = read_table(data, "groups.csv")
    said = {w.figures["column"]: w for w in table.warnings
            if getattr(w, "code", None) == "numbers_as_text"}
    assert set(said) == {"order", "disc", "order_factored"}
    assert all(table.column(c).dtype == "text" for c in said)
    # the first odd cell, counted by the csv module (rows from 1 after the header)
    first = next(k for k, r in enumerate(rows) if "," in r["order"])
    assert f"row {first + 1} holds '{rows[first]['order']}'" in said["order"]
    assert "write " + rows[first]["order"].replace(",", "") in said["order"]
    assert said["order"].figures["numbers"] == sum("," not in r["order"] for r in rows)
    assert "typographic U+2212" in said["disc"]
    assert "product of powers" in said["order_factored"]
    assert said["order_factored"].figures["numbers"] + said["order_factored"].figures[
        "spelled"] == len(rows)


def test_numbers_in_other_spellings_count_toward_the_share():
    # common practice in downloaded tables: a third of the discriminants printed with
    # thousands separators; plain numbers alone fall short of the share, so only counting
    # the grouped ones as numbers brings the note
    import csv

    lines = ["disc"] + [f'"{-(5000 + 11 * i):,}"' if i % 3 == 0 else str(-(5000 + 11 * i))
                        for i in range(90)]
    data = ("\n".join(lines) + "\n").encode()
    rows = list(csv.DictReader(io.StringIO(data.decode())))
    grouped = sum("," in r["disc"] for r in rows)
    assert len(rows) - grouped < NUMBERS_AS_TEXT_SHARE * len(rows)
    table = read_table(data, "fields.csv")
    said = [w for w in table.warnings if getattr(w, "code", None) == "numbers_as_text"]
    assert len(said) == 1 and said[0].figures["spelled"] == grouped
    assert f"{grouped} of them written in a way no reading takes" in said[0]


def test_a_text_column_of_words_gets_no_numbers_warning():
    data = b"name,n\n" + b"".join(f"K{i}a1,{i}\n".encode() for i in range(30))
    table = read_table(data, "knots.csv")
    assert not [w for w in table.warnings if getattr(w, "code", None) == "numbers_as_text"]


# dask's Parquet reader calls a pandas method pandas 3.1 deprecates; not ours to change
@pytest.mark.filterwarnings("ignore:The inplace keyword in DataFrame.reset_index")
def test_the_dask_reader_words_the_same_warnings_across_blocks(tmp_path):
    pytest.importorskip("dask.dataframe")
    pytest.importorskip("distributed")
    from analysis.distributed import open_cluster, read_partitioned

    path = tmp_path / "groups.csv"
    path.write_bytes(_odd_numbers_csv())
    memory = [str(w) for w in read_table(path.read_bytes(), "groups.csv").warnings]
    with open_cluster(n_workers=1) as client:
        partitioned = read_partitioned(path, client, blocksize=400)
        assert partitioned.npartitions > 2
        dask = [str(w) for w in partitioned.warnings]
    odd = [w for w in memory if "is read as text" in w]
    assert len(odd) == 3 and [w for w in dask if "is read as text" in w] == odd


def test_a_typographic_minus_is_no_marker_word():
    # common practice in copied tables: the Moebius function printed with U+2212 in a third
    # of its cells (sympy.mobius gives the values). Read as a marker word, every -1 would
    # silently become missing; the column stays text and the warning says why.
    import sympy

    values = [int(sympy.mobius(n)) for n in range(2, 92)]
    minus = "\u2212"
    lines = ["n,mobius"] + [f"{n},{minus + str(-m) if m < 0 else m}"
                            for n, m in zip(range(2, 92), values)]
    table = read_table(("\n".join(lines) + "\n").encode(), "mobius.csv")
    info = table.column("mobius")
    assert info.dtype == "text" and info.markers == {}
    assert table.frame["mobius"].tolist() == [
        ("\u2212" + str(-m)) if m < 0 else str(m) for m in values]
    said = [w for w in table.warnings if getattr(w, "code", None) == "numbers_as_text"]
    assert len(said) == 1 and "typographic U+2212" in said[0]
    assert said[0].figures["spelled"] == values.count(-1)
