"""Sentences the separator adds for its reader (analysis.separator_metrics)."""

from __future__ import annotations

import numpy as np

from analysis.separator_metrics import below_baseline_text, mcc_from_counts


def test_accuracy_below_the_majority_guess_is_explained_only_when_it_is():
    # a confusion matrix (rows: actual, columns: predicted) of 900 common and 100 rare
    # objects: 700 and 90 right. Accuracy 0.79 against 0.9 for always guessing the common
    # class, yet Matthews' correlation is clearly above 0 (its definition, computed below).
    counts = np.array([[700, 200], [10, 90]])
    accuracy = np.trace(counts) / counts.sum()
    tp, tn, fp, fn = 90, 700, 200, 10
    mcc = (tp * tn - fp * fn) / np.sqrt((tp + fp) * (tp + fn) * (tn + fp) * (tn + fn))
    assert abs(mcc_from_counts(counts) - mcc) < 1e-12 and mcc > 0.3
    said = below_baseline_text({"accuracy": accuracy}, {"accuracy": 0.9})
    assert "weighs the classes equally" in said and "Matthews correlation" in said
    assert below_baseline_text({"accuracy": 0.95}, {"accuracy": 0.9}) == ""


def test_the_interval_method_is_one_plain_sentence():
    # style (common practice): one sentence in plain words, no parentheses in it; the table
    # is Fisher's iris data as scikit-learn ships it (tests/conftest.py)
    from analysis.separation import SeparatorStep
    from analysis.table import read_table
    from tests.conftest import iris_csv

    table = read_table(iris_csv(), "iris.csv")
    said = SeparatorStep(target="species", positive_class="setosa", seed=0, permutations=0,
                         repeats=1).run(table).interval_method
    assert said.startswith("bootstrap, 1000 resamples of the ")
    assert "multinomial counts over the cells of the confusion matrix" in said
    assert "same thing" not in said and "(" not in said and said.count(".") == 0
