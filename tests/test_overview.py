"""The overview step's correlations (analysis.overview)."""

import pytest

import analysis.overview as overview
from analysis.overview import OverviewStep
from analysis.table import read_table


def _line_table(n: int):
    # y = 2x + 1: Pearson's r is exactly 1 on any rows (its definition)
    text = "x,y,z\n" + "\n".join(f"{v},{2 * v + 1},{(v * 7) % 5}" for v in range(n)) + "\n"
    return read_table(text.encode(), "line.csv")


def test_correlations_past_the_sample_size_say_they_come_from_a_sample(monkeypatch):
    monkeypatch.setattr(overview, "CORRELATION_ROWS", 50)
    result = OverviewStep(seed=3).run(_line_table(200))
    assert result.correlation_rows == 50
    assert result.correlations[0][:2] == ("x", "y")
    assert result.correlations[0][2] == pytest.approx(1.0)
    assert "random sample of 50 of the 200 rows" in result.summary()
    assert result.to_json()["correlation_rows"] == 50


def test_correlations_on_every_row_below_the_sample_size():
    result = OverviewStep().run(_line_table(200))
    assert result.correlation_rows is None
    assert result.correlations[0][2] == pytest.approx(1.0)
    assert "sample" not in result.summary()
