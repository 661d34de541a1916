"""Objects to look at: a ranked list of rows worth checking by hand, each with plain reasons.

Several measures each score every row, higher meaning stranger:

* isolation forest: how few random cuts isolate the row;
* local outlier factor: how much sparser the row's neighbourhood is than its neighbours';
* distance from the centre of the row's k-means cluster, relative to the cluster's typical
  row (k given, or chosen by silhouette as the clustering step does);
* with a target, how confidently a cross-validated separator gets the row wrong (a scaled
  logistic regression for labels, a ridge fit for many-valued numbers);
* with ``relations``, how many relations and bounds among the invariants the row breaks
  (a listed row that attains a bound few rows attain is told so, without extra score).

With a target, objects whose target value is open (a missing cell or an interval) are
listed too, apart from the ranking, when a model fitted on the known rows predicts them
confidently: checking such an object by hand would settle its value. These are predictions
to check, not values.

The measures are combined by rank: each row's score on a measure becomes its standing, the
fraction of the other rows that score strictly lower (0 for the most ordinary, 1 for the
strangest), so that a measure counts the same whatever its units. The first three measures
all ask whether a row sits apart from the others; their standings are averaged into one
standing for position, so that a row far from the rest is not counted three times. A row's
score is its highest standing among position, separator and relations (those that take
part): an object worth a look is one that is extreme in some way, and a confidently
mislabelled row in the middle of the data is as worth a look as one far from the rest. Rows
with equal scores are ordered by the mean of the same standings. Measures on which every row
scores the same are left out.

Local outlier factor runs on a sample of ``sample_size`` rows on larger tables, the other
rows scored against that sample; the result says so.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
import pandas as pd

from analysis.clustering import sample_rows
from analysis.errors import StepError
from analysis.features import build_features, is_numeric_target, lost_classes, target_values
from analysis.notes import Note, note_code
from analysis.plain import plain, row_id
from analysis.progress import quiet
from analysis.projection import prepared, scaling_note
from analysis.settings import FEATURE_SETTINGS, SEED, Setting, check_values
from analysis.table import Table
from analysis.threads import threads_for

SETTINGS = (
    Setting("target", follows_target=True, label="Target for this step", option="--target",
            metavar="COL",
            help="Objects that a cross-validated separator for it gets wrong with confidence "
                 "rank higher."),
    *FEATURE_SETTINGS,
    Setting("top", minimum=1, page_maximum=10_000, spoken="top =", label="Objects listed",
            advice="give how many rows to list, at least 1"),
    Setting("relations", label="Count broken relations",
            help="Objects that break an exact relation among the invariants rank higher."),
    Setting("k", minimum=2, page_maximum=100, spoken="k =",
            label="Clusters for the distance from centre (0: chosen)",
            advice="give a whole number of clusters, at least 2, or leave k unset to choose it "
                   "by silhouette"),
    Setting("n_neighbors", minimum=2, page_maximum=1000,
            label="Neighbours (local outlier factor)", advice="give a whole number of at least 2"),
    SEED,
)

MEASURES = ("isolation forest", "local outlier factor", "distance from cluster centre",
            "separator", "relations")
# Measures that all ask whether a row sits apart from the others.
POSITION = ("isolation forest", "local outlier factor", "distance from cluster centre")
COMBINATION = ("the highest standing (fraction of other rows scoring strictly lower) on "
               "position (mean of isolation forest, local outlier factor and distance from "
               "cluster centre), separator and relations; ties ordered by the mean of these")


def combination_text(measures) -> str:
    """How the score of a row is made, naming only the ``measures`` that were counted (the
    words of COMBINATION when all of them were)."""
    position = [m for m in POSITION if m in measures]
    groups = []
    if position:
        named = position[0] if len(position) == 1 else \
            f"{', '.join(position[:-1])} and {position[-1]}"
        groups.append(f"position (mean of {named})" if len(position) > 1 else named)
    groups.extend(m for m in MEASURES if m in measures and m not in POSITION)
    if not groups:
        return "no measure tells the rows apart, so every row scores 0"
    listed = groups[0] if len(groups) == 1 else f"{', '.join(groups[:-1])} and {groups[-1]}"
    return ("the highest standing (fraction of other rows scoring strictly lower) on "
            f"{listed}; ties ordered by the mean of these")
# A row "stands out" on a measure when it scores higher than this fraction of rows.
STANDS_OUT = 0.95
# Labels a separator is asked to tell apart, at most.
MAX_CLASSES = 50
# A regression residual this many standard deviations from zero is worth a reason.
RESIDUAL_REASON = 3.0
# A bound attained by at most this many rows makes attaining it a reason to look.
RARELY_ATTAINED = 3
# An open value is predicted confidently when the chance of being right is at least this: the
# class probability for labels, the cross-validated share of exactly right rounded predictions
# for a whole-number target.
OPEN_CONFIDENCE = 0.9
# Open values listed, at most.
MAX_OPEN_VALUES = 200


@dataclass(frozen=True)
class OpenValue:
    """An object whose target value is open (missing, or an interval ``[low, high]``) and
    that a model fitted on the known rows predicts confidently; ``reason`` says so in words."""

    row: object
    prediction: object
    confidence: float
    interval: tuple | None
    inside: bool | None   # for an interval: whether the prediction lies in it
    reason: str

    def to_json(self) -> dict:
        return plain({"row": row_id(self.row), "prediction": self.prediction,
                      "confidence": self.confidence,
                      "interval": None if self.interval is None else list(self.interval),
                      "inside": self.inside, "reason": self.reason})


@dataclass(frozen=True)
class Outlier:
    """One row of the list: its rank (from 1), id, combined score, reasons and per-measure
    standing (the fraction of rows scoring strictly lower on that measure)."""

    rank: int
    row: object
    score: float
    reasons: tuple[str, ...]
    standing: dict[str, float]

    def to_json(self) -> dict:
        return plain({"rank": self.rank, "row": row_id(self.row), "score": self.score,
                      "reasons": list(self.reasons), "standing": self.standing})


@dataclass(frozen=True, eq=False)
class OutliersResult:
    """The ranked list (``outliers``, the top rows) and the combined score of every row.

    ``row_ids``, ``positions`` and ``scores`` cover every scored row, for colouring a
    picture by outlier score; ``measures`` are the measures that took part.
    """

    outliers: tuple[Outlier, ...]
    row_ids: np.ndarray
    positions: np.ndarray
    scores: np.ndarray
    measures: tuple[str, ...]
    target: str | None
    k: int
    n_rows: int
    top: int
    seed: int
    features: tuple[str, ...]
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()  # what the user should know first: rows or columns lost
    elapsed_seconds: float = 0.0
    combination: str = COMBINATION
    open_values: tuple[OpenValue, ...] = ()  # confident predictions that would settle a value
    kind: ClassVar[str] = "outliers"

    def _repr_html_(self) -> str:
        from analysis.notebook import result_html

        return result_html(self)

    def to_json(self) -> dict:
        return plain({
            "outliers": [o.to_json() for o in self.outliers],
            "measures": list(self.measures),
            "combination": self.combination,
            "target": self.target,
            "k": self.k,
            "n_rows": self.n_rows,
            "top": self.top,
            "seed": self.seed,
            "features": list(self.features),
            "notes": list(self.notes),
            "warnings": list(self.warnings),
            "elapsed_seconds": self.elapsed_seconds,
            "open_values": [v.to_json() for v in self.open_values],
        })

    def to_frame(self) -> pd.DataFrame:
        """rank, row, score, reasons (joined by "; "): the list as a table for CSV export.

        Objects with an open target value that a confident prediction would settle follow the
        ranked ones, with no rank and their confidence as the score."""
        return pd.DataFrame({
            "rank": [o.rank for o in self.outliers] + [None] * len(self.open_values),
            "row": [row_id(o.row) for o in (*self.outliers, *self.open_values)],
            "score": [o.score for o in self.outliers]
            + [v.confidence for v in self.open_values],
            "reasons": ["; ".join(o.reasons) for o in self.outliers]
            + [v.reason for v in self.open_values],
        })

    def summary(self) -> str:
        ranked_by = ", ".join(self.measures) or "nothing: no measure tells the rows apart"
        lines = [f"{len(self.outliers)} objects to look at, of {self.n_rows} rows, ranked by "
                 f"{ranked_by}; {self.elapsed_seconds:.1f} s."]
        for o in self.outliers[:10]:
            lines.append(f"  {o.rank:>3}. {row_id(o.row)}  score {o.score:.3f}: "
                         + "; ".join(o.reasons))
        if len(self.outliers) > 10:
            lines.append(f"  ... {len(self.outliers) - 10} more (--json or --csv for all)")
        if self.open_values:
            lines.append(f"  {len(self.open_values)} objects with an open value of "
                         f"{self.target!r} that a confident prediction would settle:")
            lines.extend(f"    {row_id(v.row)}: {v.reason}" for v in self.open_values[:10])
            if len(self.open_values) > 10:
                lines.append(f"    ... {len(self.open_values) - 10} more (--json for all)")
        lines.append(f"  score: {self.combination}.")
        lines.extend(f"  warning: {w}" for w in self.warnings)
        lines.extend(f"  note: {n}" for n in self.notes)
        return "\n".join(lines)


@dataclass(frozen=True, kw_only=True)
class OutliersStep:
    """Rank the rows by how much they stand out, with a reason for each.

    target: a label (or number) column; rows that a cross-validated separator gets wrong
        with high confidence rank higher. k: clusters for the distance-from-centre measure
        (default: chosen by silhouette over k = 2..8). relations: also count the exact
        relations among the invariants that each row breaks. top: length of the list.
    n_neighbors: neighbours for the local outlier factor. sample_size: rows past which the
        local outlier factor is fitted on a random sample.

    Example: ``OutliersStep(target="is_reflexive", top=20).run(table).to_frame()``.
    """

    target: str | None = None
    columns: list[str] | None = None
    array_encoding: str = "invariant"
    log_scale: str = "auto"
    missing: str = "drop"
    intervals: str = "missing"
    standardize: bool = True
    k: int | None = None
    relations: bool = True
    top: int = 50
    n_neighbors: int = 20
    sample_size: int = 20_000
    seed: int = 0
    kind: ClassVar[str] = "outliers"

    def run(self, table: Table, *, progress=None) -> OutliersResult:
        """Rank the objects. ``progress``: a callable (or :class:`analysis.progress.Reporter`)
        told of each measure; it may stop the step between two measures by raising
        :class:`analysis.progress.StepStopped`."""
        started = time.perf_counter()
        reporter = quiet(progress)
        reporter.phase("building features")
        self.check_table(table)
        fm = build_features(table, columns=self.columns, target=self.target,
                            array_encoding=self.array_encoding, log_scale=self.log_scale,
                            missing=self.missing, intervals=self.intervals)
        n = len(fm.rows)
        check_rows(table.name, n)
        notes = list(fm.notes)
        values = prepared(fm.values, self.standardize, table.name, "a ranking of objects")
        notes.append(scaling_note(self.standardize))
        measures: dict[str, Measure] = {}
        reporter.phase("scoring every object", total=4 + bool(self.relations))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            with threads_for(n):
                measures["isolation forest"] = _isolation(values, self.seed)
            reporter.advance()
            # neighbour searches gain from every core at any size
            measures["local outlier factor"] = _local_outlier_factor(
                values, self.n_neighbors, self.sample_size, self.seed, notes)
            reporter.advance()
            centre, k = self._centre_distance(table, fm, values, notes)
            measures["distance from cluster centre"] = centre
            reporter.advance()
            opened: tuple[OpenValue, ...] = ()
            if self.target is not None:
                guessed = _cross_validated(table, self.target, fm, self.seed)
                doubts = _separator(table, self.target, guessed, notes)
                if doubts is not None:
                    measures["separator"] = doubts
                opened = open_values(table, self, fm, guessed, notes)
        reporter.advance()
        if self.relations:
            found = self.broken_relations(table, fm.row_ids, notes, lambda s: s.run(table))
            if found is not None:
                measures["relations"] = found
        return self.ranked(measures, fm.row_ids, fm.rows, k=k, features=fm.names, notes=notes,
                           warnings=fm.warnings, started=started, open_values=opened)

    def ranked(self, measures: dict, row_ids: np.ndarray, positions: np.ndarray, *, k: int,
               features, notes: list, warnings, started: float,
               open_values: tuple = ()) -> OutliersResult:
        """The result: the rows ``row_ids`` (at ``positions`` in the table) ranked by
        ``measures`` (:func:`ranked_list`), ``k`` the clusters of the distance from centre,
        ``warnings`` those of the features, ``started`` the step's start (perf_counter)."""
        used, combined, outliers = ranked_list(measures, row_ids, self.top, notes)
        return OutliersResult(
            outliers=outliers, row_ids=row_ids, positions=positions, scores=combined,
            measures=tuple(used), target=self.target, k=k, n_rows=len(row_ids), top=self.top,
            combination=combination_text(used),
            seed=self.seed, features=tuple(features), notes=said_as_notes(notes),
            warnings=tuple(warnings) + said_as_warnings(notes),
            elapsed_seconds=time.perf_counter() - started, open_values=open_values,
        )

    def check(self) -> None:
        """Check the settings alone (no table needed); StepError names a bad one."""
        check_values(self)
        if not isinstance(self.sample_size, int) or self.sample_size <= self.n_neighbors:
            raise StepError(f"sample size {self.sample_size!r}: give a whole number of rows, "
                            f"more than n_neighbors ({self.n_neighbors}).")

    def check_table(self, table: Table) -> None:
        self.check()
        if self.target is not None:
            table.column(self.target)

    def clustering_step(self):
        """The k-means clustering the distance from cluster centre measures from: the
        clustering step on the same features chooses k (or takes the given one); the target
        is named as its comparison column so that it stays out of the features."""
        from analysis.clustering import ClusteringStep

        return ClusteringStep(method="kmeans", k=self.k, compare=self.target,
                              columns=self.columns, array_encoding=self.array_encoding,
                              log_scale=self.log_scale, missing=self.missing,
                              intervals=self.intervals,
                              standardize=self.standardize, seed=self.seed)

    def _centre_distance(self, table: Table, fm, values: np.ndarray, notes: list[str]):
        clusters = self.clustering_step().run(table)
        if not np.array_equal(clusters.positions, fm.rows):
            raise RuntimeError("the clustering used other rows than the ranking")
        notes.extend(note for note in clusters.notes if note not in fm.notes)
        notes.append(centre_clusters_note(clusters))
        return _centre_distance(values, clusters.labels, clusters.k), clusters.k

    def broken_relations(self, table, row_ids: np.ndarray, notes: list, run):
        """The relations measure (:func:`relations_measure`) over the rows ``row_ids``, from
        the relations step on the features' numeric columns (:func:`relation_columns`) run
        by ``run(step)`` on either engine; None, with a note, when it cannot run."""
        try:
            from analysis.relations import RelationsStep
        except ModuleNotFoundError as exc:
            if exc.name != "analysis.relations":
                raise
            notes.append(Note("relations_unchecked", "relations not checked: the relations "
                              "module is not available."))
            return None
        columns = relation_columns(table, self.columns, notes)
        if columns == []:
            return None
        try:
            result = run(RelationsStep(columns=columns, robust=True, seed=self.seed))
        except StepError as exc:
            notes.append(Note("relations_unchecked", f"relations not checked: {exc}",
                              reason=str(exc)))
            return None
        return relations_measure(result, row_ids)


def centre_clusters_note(clusters) -> Note:
    """The note naming the k-means clusters (a ClusteringResult) distances are measured in."""
    return Note("centre_clusters", "distance from centre uses k-means clusters: "
                f"{clusters.reason}", k=clusters.k)


def check_rows(table_name: str, n: int) -> None:
    """StepError when fewer than 5 rows have every feature: too few to rank."""
    if n < 5:
        raise StepError(f"{table_name}: ranking objects needs at least 5 rows with every "
                        f"feature present; {n} remain. Impute missing values or choose "
                        "other columns.")


def relation_columns(table, columns, notes: list) -> list[str] | None:
    """The columns the relations measure searches: None (the relations step's own choice)
    when the features are the default ones, else the numeric features; [] with a note when
    none of them is numeric."""
    if columns is None:
        return None
    chosen = [name for name in columns if table.column(name).role in ("invariant", "flag")
              and table.column(name).dtype in ("integer", "big integer", "rational",
                                               "boolean", "real")]
    if not chosen:
        notes.append(Note("relations_unchecked", "relations not checked: no numeric "
                          "invariant among the feature columns."))
    return chosen


def relations_measure(result, row_ids: np.ndarray) -> Measure:
    """The relations and bounds of ``result`` (a RelationsResult) each row breaks, as a
    measure over the rows ``row_ids``."""
    from analysis.relations import relation_reasons

    # relation_reasons says which rows break (or sit off) a relation or bound; bounds
    # attained by almost every row are no reason to look, so only rare attainers count
    broken_texts = {row: [t for t in texts if note_code(t) != "bound_attained"]
                    for row, texts in relation_reasons(result).items()}
    rare: dict = {}
    for bound in result.bounds:
        if 0 < bound.attained_count <= RARELY_ATTAINED:
            others = bound.attained_count - 1
            company = "alone" if others == 0 else \
                f"with {others} other row{'s' if others > 1 else ''}"
            for row in bound.attained_by:
                rare.setdefault(row_id(row), []).append(
                    f"attains the bound {bound.text} ({company})")
    texts = [broken_texts.get(row_id(r), []) + rare.get(row_id(r), []) for r in row_ids]
    # the score counts broken relations and bounds; attaining a rare bound is said but
    # not scored, since the corners of any cloud of points attain some bound
    counts = np.array([len(broken_texts.get(row_id(r), [])) for r in row_ids], dtype=float)
    return Measure(counts, None, lambda i, s: bool(texts[i]),
                   "no row breaks a relation", say_all=lambda i: list(texts[i]))


def ranked_list(measures: dict, row_ids: np.ndarray, top: int, notes: list[str]):
    """(measures used, combined score of every row, the ``top`` Outliers) from every
    measure's scores; measures on which every row scores the same are left out, in a note."""
    n = len(row_ids)
    used = {}
    for name, measure in measures.items():
        if np.ptp(measure.scores) > 0:
            used[name] = measure
        else:
            notes.append(Note("measure_flat", f"{name}: every row scores the same "
                              f"({measure.flat_text}); not counted.", measure=name))
    standing = {name: rank_standing(m.scores) for name, m in used.items()}
    combined, breadth = combined_standing(standing, n)
    # highest score first, then the higher mean standing, then table order
    order = np.lexsort((np.arange(n), -breadth, -combined))[:top].tolist()
    outliers = tuple(
        Outlier(rank=rank, row=row_ids[i], score=float(combined[i]),
                reasons=outlier_reasons(i, used, standing),
                standing={name: float(s[i]) for name, s in standing.items()})
        for rank, i in enumerate(order, start=1))
    return used, combined, outliers


@dataclass(frozen=True)
class Measure:
    """Scores of every row on one measure (higher: stranger), and how to say why.

    ``say(i, standing)`` states row i's score in words; ``notable(i, standing)`` tells
    whether it is worth saying; ``say_all(i)`` (for relations) gives several reasons.
    """

    scores: np.ndarray
    say: object
    notable: object
    flat_text: str
    say_all: object = None

    def reasons(self, i: int, standing: float) -> list[str]:
        if self.say_all is not None:
            return self.say_all(i)
        return [self.say(i, standing)]


def _centre_distance(values: np.ndarray, labels: np.ndarray, k: int) -> Measure:
    """Distance from the row's cluster centre over the distance of the cluster's median row.

    k-means readily gives a far-off row a cluster of its own, at distance 0 from its own
    centre; rows in such tiny clusters are measured from the nearest larger cluster instead.
    """
    clusters = np.unique(labels)
    sizes = {c: int(np.sum(labels == c)) for c in clusters}
    large = large_clusters(sizes, len(values))
    centres = {c: values[labels == c].mean(axis=0) for c in clusters}
    typical = typical_distances(values, labels, centres, large)
    relative, reference = relative_distances(values, labels, centres, typical, large)
    return centre_measure(relative, labels, reference, sizes, k)


def typical_distances(values: np.ndarray, labels: np.ndarray, centres: dict,
                      clusters) -> dict:
    """Each of ``clusters``' typical distance from its centre: the median over its rows of
    ``values`` (``labels`` giving each row's cluster; 0 for a cluster with none)."""
    return {c: float(np.median(np.linalg.norm(values[labels == c] - centres[c], axis=1)))
            if (labels == c).any() else 0.0 for c in clusters}


def large_clusters(sizes: dict, n: int) -> list:
    """The clusters (of ``sizes``, {cluster: rows}, over ``n`` rows) that rows are measured
    from: those of at least 1% of the rows (3 at least), or every nonempty one when none is."""
    tiny = max(3, n // 100)
    return [c for c in sizes if sizes[c] >= tiny] or [c for c in sizes if sizes[c]]


def relative_distances(values: np.ndarray, labels: np.ndarray, centres: dict, typical: dict,
                       large: list) -> tuple[np.ndarray, np.ndarray]:
    """(each row's distance from its reference centre over that cluster's ``typical``
    distance, the reference cluster): its own cluster, or for a row of a cluster not in
    ``large`` the nearest large one. ``centres`` maps every cluster to its centre."""
    reference = labels.copy()
    for i in np.flatnonzero(~np.isin(labels, large)):
        reference[i] = min(large, key=lambda c: np.linalg.norm(values[i] - centres[c]))
    clusters = sorted(centres)
    order = {c: j for j, c in enumerate(clusters)}
    index = np.array([order[c] for c in reference.tolist()], dtype=int)
    gap = np.linalg.norm(values - np.array([centres[c] for c in clusters])[index], axis=1)
    scale = np.array([typical.get(c, 0.0) for c in clusters])[index]
    with np.errstate(divide="ignore", invalid="ignore"):
        relative = np.where(scale > 0, gap / scale, np.where(gap > 0, np.inf, 0.0))
    return relative, reference


def centre_measure(relative: np.ndarray, labels: np.ndarray, reference: np.ndarray,
                   sizes: dict, k: int) -> Measure:
    """Distance from cluster centre as a measure: ``relative`` distances, each row's cluster
    (``labels``) and the cluster it is measured from (``reference``), clusters' ``sizes``."""
    def say(i: int, standing: float) -> str:
        times = "infinitely many" if not np.isfinite(relative[i]) else f"{relative[i]:.1f}"
        if reference[i] != labels[i]:
            return (f"in a cluster of only {sizes.get(int(labels[i]), 0)} row(s) (k-means, "
                    f"k = {k}); {times} times as far from the centre of the nearest large "
                    f"cluster {reference[i]} as that cluster's typical row")
        return (f"{times} times as far from the centre of cluster {labels[i]} as the "
                f"cluster's typical row (k-means, k = {k})")

    return Measure(np.nan_to_num(relative, posinf=np.finfo(float).max), say,
                   lambda i, s: s >= STANDS_OUT, "no spread within clusters")


def rank_standing(scores: np.ndarray) -> np.ndarray:
    """For each row, the fraction of the other rows scoring strictly lower."""
    ordered = np.sort(scores)
    below = np.searchsorted(ordered, scores, side="left")
    return below / max(len(scores) - 1, 1)


def combined_standing(standing: dict[str, np.ndarray], n: int) -> tuple[np.ndarray, np.ndarray]:
    """Scores (highest group standing) and tie-breaks (mean group standing) of every row.

    The groups are position (the mean standing on the position measures), separator and
    relations.
    """
    groups = []
    position = [standing[name] for name in POSITION if name in standing]
    if position:
        groups.append(np.mean(position, axis=0))
    groups.extend(values for name, values in standing.items() if name not in POSITION)
    if not groups:
        return np.zeros(n), np.zeros(n)
    stacked = np.vstack(groups)
    return stacked.max(axis=0), stacked.mean(axis=0)


def percent_of_rows(standing: float) -> str:
    """ "every other row", or a percentage rounded down (99.7% reads 99%, never 100%)."""
    if standing >= 1.0:
        return "every other row"
    return f"{math.floor(standing * 100)}% of rows"


def _isolation(values: np.ndarray, seed: int) -> Measure:
    model = forest_model(seed).fit(values)
    # score_samples is minus the anomaly score of the original paper: higher is stranger
    return forest_measure(-model.score_samples(values))


def forest_model(seed: int):
    """The isolation forest every row is scored by (fitted on all rows, or on a sample)."""
    from sklearn.ensemble import IsolationForest

    return IsolationForest(n_estimators=200, random_state=seed)


def forest_measure(scores: np.ndarray) -> Measure:
    """Isolation forest scores (higher: stranger) as a measure."""
    def say(i: int, standing: float) -> str:
        return (f"isolated by few random cuts: isolation forest score {scores[i]:.2f}, higher "
                f"than {percent_of_rows(standing)}")

    return Measure(scores, say, lambda i, s: s >= STANDS_OUT, "isolation forest")


def factor_measure(factor: np.ndarray, neighbours: int) -> Measure:
    """Local outlier factors against ``neighbours`` nearest neighbours as a measure."""
    def say(i: int, standing: float) -> str:
        size = "above 1000" if factor[i] > 1000 else f"{factor[i]:.1f}"
        return (f"in a sparse spot: local outlier factor {size} against its {neighbours} "
                f"nearest neighbours, higher than {percent_of_rows(standing)}")

    return Measure(factor, say, lambda i, s: s >= STANDS_OUT and factor[i] > 1.0,
                   "local outlier factor")


def factor_sample_note(fitted: int, n: int, seed: int) -> Note:
    return Note("factor_sample", f"local outlier factor fitted on a random sample of {fitted} "
                f"of the {n} rows (seed {seed}); the other rows are scored against that sample.",
                sample=fitted, rows=n, seed=seed)


def _local_outlier_factor(values: np.ndarray, n_neighbors: int, sample_size: int, seed: int,
                          notes: list[str]) -> Measure:
    n = len(values)
    neighbours = min(n_neighbors, n - 1)
    sample = sample_rows(n, sample_size, seed)
    model = factor_model(neighbours, len(sample) < n).fit(values[sample])
    if len(sample) < n:
        notes.append(factor_sample_note(sample_size, n, seed))
    return factor_measure(factor_scores(model, values, sample, np.arange(len(sample))),
                          neighbours)


def factor_model(neighbours: int, novelty: bool):
    """The local outlier factor, fitted on every row or (``novelty``) on a sample that the
    other rows are scored against."""
    from sklearn.neighbors import LocalOutlierFactor

    return LocalOutlierFactor(n_neighbors=neighbours, novelty=novelty)


def factor_scores(model, values: np.ndarray, sampled: np.ndarray,
                  where: np.ndarray) -> np.ndarray:
    """Local outlier factors of a block of rows (``values``) from a fitted
    :func:`factor_model`: the rows of its sample (positions ``sampled`` in the block, at
    ``where`` in the sample) keep their in-sample factor, since in novelty scoring a sampled
    row is its own nearest neighbour; the other rows are scored against the sample."""
    factor = -model.score_samples(values) if model.novelty else np.zeros(len(values))
    factor[sampled] = -model.negative_outlier_factor_[where]
    return factor


def number_model():
    """The separator fitted to a number target: ridge regression on scaled features."""
    from sklearn.linear_model import Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    return make_pipeline(StandardScaler(), Ridge(alpha=1.0))


def label_model():
    """The separator fitted to a label target: logistic regression on scaled features."""
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    return make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))


def number_folds(n: int, seed: int):
    """The cross-validation folds for a number target on ``n`` rows."""
    from sklearn.model_selection import KFold

    return KFold(n_splits=min(5, n), shuffle=True, random_state=seed)


def label_folds(labels: np.ndarray, seed: int, table_name: str, target: str, why=None):
    """(classes, splits, folds) of the cross-validation for a label target; StepError when
    every row has one label (``why()`` words why rows of other labels are missing)."""
    from sklearn.model_selection import StratifiedKFold

    classes, counts = np.unique(labels, return_counts=True)
    if len(classes) < 2:
        raise StepError(f"{table_name}: the target {target!r} has one value ({classes[0]!r}) "
                        "on every row used; judging how well it is predicted needs two or "
                        "more. Choose another target or leave it unset."
                        + (why() if why else ""))
    splits = int(min(5, max(2, counts.min())))
    return classes, splits, StratifiedKFold(n_splits=splits, shuffle=True, random_state=seed)


def _cross_validated(table: Table, target: str, fm, seed: int):
    """The target on the rows used and its cross-validated prediction (:func:`cross_validated`)."""
    return cross_validated(fm.values, target_values(table, target, fm.rows),
                           is_numeric_target(table, target), seed, table.name, target,
                           why=lambda: lost_classes(table, target, fm))


def cross_validated(values: np.ndarray, raw, numeric: bool, seed: int, table_name: str,
                    target: str, why=None):
    """The target (cells ``raw`` of the rows of ``values``) and its cross-validated
    prediction: for a number (``numeric``) ``(truth, predicted, None, splits)``, for labels
    ``(labels, probability, classes, splits)``. StepError for one label or too many."""
    from sklearn.model_selection import cross_val_predict

    if numeric:
        truth = np.asarray(raw, dtype=float)
        folds = number_folds(len(truth), seed)
        return truth, cross_val_predict(number_model(), values, truth, cv=folds), None, \
            folds.n_splits
    labels = np.array([label_text(v) for v in raw], dtype=object)
    classes, splits, folds = label_folds(labels, seed, table_name, target, why=why)
    if len(classes) > MAX_CLASSES:
        raise StepError(f"{table_name}: the target {target!r} has {len(classes)} distinct "
                        f"labels; a separator can judge at most {MAX_CLASSES}. Choose a flag, "
                        "a category or a numeric invariant.")
    probability = cross_val_predict(label_model(), values, labels, cv=folds,
                                    method="predict_proba")
    return labels, probability, classes, splits


def _clearly_positive(gains: np.ndarray) -> tuple[bool, float, float]:
    """Whether per-row gains have a mean clearly above 0 (the low end of its 95% normal
    interval), with the mean and that low end."""
    from scipy.stats import norm

    mean = float(np.mean(gains))
    half = float(norm.ppf(0.975)) * float(np.std(gains, ddof=1)) / np.sqrt(len(gains)) \
        if len(gains) > 1 else np.inf
    return mean - half > 0, mean, mean - half


# Notes of the ranking that the user must read first: the target asked for was not used.
WARNING_CODES = ("separator_left_out",)


def said_as_notes(notes: list) -> tuple:
    """The ranking's notes that stay notes (each once, in order)."""
    return tuple(dict.fromkeys(n for n in notes if note_code(n) not in WARNING_CODES))


def said_as_warnings(notes: list) -> tuple:
    """The ranking's notes that are warnings (WARNING_CODES)."""
    return tuple(dict.fromkeys(n for n in notes if note_code(n) in WARNING_CODES))


def label_doubts_note(target: str, p_own: np.ndarray, own: np.ndarray) -> str | None:
    """None when the cross-validated label model is worth its doubts: its probability of
    each row's own label (``p_own``; ``own`` the label's index) beats the label's share of
    the rows, on the log score (a proper scoring rule, fair to a rare label), by a mean gain
    per row clearly above 0. Otherwise the note that leaves the separator out of the
    ranking: a model no better than the shares alone doubts labels at random."""
    shares = np.bincount(own) / len(own)
    gains = np.log(np.clip(p_own, 1e-12, 1.0)) - np.log(shares[own])
    clear, mean, low = _clearly_positive(gains)
    if clear:
        return None
    return Note("separator_left_out",
                f"separator: left out of the ranking: a cross-validated logistic regression "
                f"gives the labels of {target!r} no clearly higher probability than their "
                f"shares of the rows do (log score gain per object {mean:+.3f}, 95% interval "
                f"from {low:+.3f}); its doubts about single objects would be noise.",
                gain=mean, low=low)


def number_doubts_note(target: str, truth: np.ndarray, predicted: np.ndarray) -> str | None:
    """None when the cross-validated fit's squared errors are clearly smaller than those of
    the mean of the target; otherwise the note that leaves the separator out of the ranking."""
    gains = (truth - truth.mean()) ** 2 - (truth - predicted) ** 2
    clear, _, _ = _clearly_positive(gains)
    if clear:
        return None
    spread = float(np.sum((truth - truth.mean()) ** 2))
    r2 = 1.0 - float(np.sum((truth - predicted) ** 2)) / spread if spread > 0 else 0.0
    return Note("separator_left_out",
                f"separator: left out of the ranking: a cross-validated ridge regression "
                f"predicts {target!r} no clearly better than its mean does (R^2 = {r2:.3f}); "
                "its residuals would rank objects at random.", r2=r2)


def _separator(table: Table, target: str, guessed: tuple,
               notes: list[str]) -> Measure | None:
    truth, predicted, classes, splits = guessed
    if classes is None:
        scores = number_scores(truth, predicted, float(np.std(truth - predicted)) or 1.0)
        how = "ridge regression on standardized features."
    else:
        scores = label_scores(truth, predicted, classes)
        how = ("logistic regression on standardized features; a row scores 1 minus the "
               "probability given to its own class.")
    measure = separator_measure(target, scores, table.column(target).dtype == "boolean", notes)
    if measure is not None:
        notes.append(Note("separator_measure", f"separator: {target!r} predicted by a "
                          f"{splits}-fold cross-validated {how}", target=target, folds=splits))
    return measure


def number_scores(truth: np.ndarray, predicted: np.ndarray, spread: float) -> dict:
    """A number target's separator scores on a block of rows: the residuals in units of
    ``spread`` (their standard deviation), with what the reasons quote. Blocks' scores are
    joined row by row, then judged by :func:`separator_measure`."""
    z = (truth - predicted) / spread
    return {"separator": np.abs(z), "truth": truth, "predicted": predicted, "z": z}


def label_scores(labels: np.ndarray, probability: np.ndarray, classes) -> dict:
    """A label target's separator scores on a block of rows: 1 minus the probability the
    model gives each row's own label (``probability`` has a column per class of ``classes``,
    in the model's order; a label it never saw has probability 0), its guess, the
    probability of the guess, and whether the guess is wrong."""
    index_of = {c: j for j, c in enumerate(classes)}
    own = np.array([index_of.get(c, -1) for c in labels], dtype=int)
    rows = np.arange(len(labels))
    guess = probability.argmax(axis=1)
    p_own = np.where(own >= 0, probability[rows, np.maximum(own, 0)], 0.0)
    return {"separator": 1.0 - p_own, "p_own": p_own, "own": own,
            "guess": np.asarray(classes, dtype=object)[guess],
            "guess_probability": probability[rows, guess], "labels": labels,
            "wrong": guess != own}


def separator_measure(target: str, scores: dict, flag: bool, notes: list) -> Measure | None:
    """The separator's measure from every row's scores (:func:`number_scores` or
    :func:`label_scores`), or None, with the note that leaves it out, when its model is no
    better than the plain guess. ``flag``: the target is a flag."""
    if "z" in scores:
        empty = number_doubts_note(target, scores["truth"], scores["predicted"])
        measure = None if empty is not None else residual_measure(
            target, scores["truth"], scores["predicted"], scores["z"])
    else:
        known = scores["own"] >= 0
        empty = label_doubts_note(target, scores["p_own"][known], scores["own"][known])
        measure = None if empty is not None else label_measure(
            target, scores["separator"], lambda i: scores["guess"][i],
            scores["guess_probability"], scores["labels"], scores["wrong"], flag)
    if empty is not None:
        notes.append(empty)
    return measure


def residual_measure(target: str, truth: np.ndarray, predicted: np.ndarray,
                     z: np.ndarray) -> Measure:
    """A number target's cross-validated residuals (``z`` in standard deviations) as a
    measure."""
    def say(i: int, standing: float) -> str:
        return (f"{target} is {number_text(truth[i])} but the other invariants predict "
                f"{predicted[i]:.3g} ({abs(z[i]):.1f} residual standard deviations, "
                "cross-validated linear fit)")

    return Measure(np.abs(z), say, lambda i, s: abs(z[i]) >= RESIDUAL_REASON, "separator")


def label_measure(target: str, scores: np.ndarray, said, probability: np.ndarray, labels,
                  wrong: np.ndarray, flag: bool) -> Measure:
    """A label target's cross-validated doubt as a measure: ``said(i)`` is the label the
    model gives row i, with ``probability[i]``; ``wrong`` marks rows it gets wrong; ``flag``
    whether the target is a flag (then True and False are said in words)."""
    def say(i: int, standing: float) -> str:
        guess = said(i)
        return label_reason(target, guess, probability[i], labels[i],
                            flag and guess in ("True", "False"))

    return Measure(scores, say, lambda i, s: wrong[i], "separator")


def open_values(table: Table, step, fm, guessed: tuple,
                notes: list[str]) -> tuple[OpenValue, ...]:
    """The objects whose ``step.target`` is open (missing or an interval) that a model fitted
    on the known rows predicts with a chance of being right of at least ``OPEN_CONFIDENCE``.

    Labels: a scaled logistic regression, the chance being its class probability. A
    whole-number target: a ridge fit rounded to the nearest whole number, the chance being
    the cross-validated share of known rows it gets exactly right. A real-valued target is
    not settled by a prediction, and gives none. ``guessed`` is what ``_cross_validated``
    gave for the known rows."""
    target = step.target
    try:
        every = build_features(table, columns=list(fm.columns),
                               array_encoding=step.array_encoding, log_scale=step.log_scale,
                               missing=step.missing, intervals=step.intervals)
    except StepError:
        return ()
    wanted = ~np.isin(every.rows, fm.rows)
    if not wanted.any() or every.names != fm.names:
        return ()
    positions = every.rows[wanted]
    X = every.values[wanted]
    truth, predicted, classes, _ = guessed
    if classes is None:
        if not np.all(truth == np.round(truth)):
            return ()
        chance = float(np.mean(np.round(predicted) == truth))
        guesses = np.round(number_model().fit(fm.values, truth).predict(X))
        said = [int(g) for g in guesses]
        chances = np.full(len(said), chance)
        how = [f"a ridge fit on the other invariants, rounded, predicts {s} (exactly right on "
               f"{chance:.0%} of the known rows, cross-validated)" for s in said]
    else:
        model = label_model().fit(fm.values, truth)
        probability = model.predict_proba(X)
        said = [str(c) for c in model.classes_[probability.argmax(axis=1)]]
        chances = probability.max(axis=1)
        how = [f"a logistic regression on the other invariants predicts {s} with probability "
               f"{p:.2f}" for s, p in zip(said, chances)]
    marks = table.intervals(target)
    spans = {int(p): (lo, hi) for p, lo, hi in zip(marks.positions, marks.low, marks.high)}
    out = []
    for k in np.flatnonzero(chances >= OPEN_CONFIDENCE)[:MAX_OPEN_VALUES]:
        span = spans.get(int(positions[k]))
        known, inside = "unknown", None
        if span is not None:
            inside = _inside(said[k], span)
            known = f"known only to lie in [{span[0]}, {span[1]}]"
        where = {None: "", True: " (inside the interval)",
                 False: " (outside the interval: the table or the model is wrong here)"}[inside]
        reason = (f"{target} is {known}; {how[k]}{where}: checking it by hand would settle "
                  "it; a prediction, not a value")
        out.append(OpenValue(row=table.row_ids[positions[k]], prediction=said[k],
                             confidence=float(chances[k]), interval=span, inside=inside,
                             reason=reason))
    if out:
        notes.append(Note("open_values", f"{len(out)} objects with an open value of {target!r} "
                          f"are predicted with a chance of at least {OPEN_CONFIDENCE:.0%} by a "
                          "model fitted on the known rows; they follow the ranked list, to be "
                          "checked by hand.", objects=len(out), target=target))
    return tuple(out)


def _inside(said, span: tuple) -> bool | None:
    try:
        return bool(span[0] <= float(said) <= span[1])
    except (TypeError, ValueError):
        return None


def label_text(value) -> str:
    """A target value as a class label: whole floats without their ".0"."""
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def label_reason(target: str, said: str, probability: float, table_says: str,
                 flag: bool) -> str:
    """Why a row whose label a cross-validated model doubts is worth a look, in words."""
    if flag:
        words = target if said == "True" else f"not {target}"
        return (f"a cross-validated logistic regression predicts {words} with probability "
                f"{probability:.2f}")
    return (f"a cross-validated logistic regression predicts {target} = {said} with "
            f"probability {probability:.2f} (the table says {table_says})")


def number_text(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else f"{x:.4g}"


def outlier_reasons(i: int, used: dict, standing: dict) -> tuple[str, ...]:
    if not used:
        return ("no measure tells the rows apart",)
    words: list[str] = []
    for name, measure in used.items():
        if measure.notable(i, standing[name][i]):
            words.extend(measure.reasons(i, standing[name][i]))
    if words:
        return tuple(words)
    # no single measure stands out: say where the row stands highest
    name = max(used, key=lambda m: standing[m][i])
    measure = used[name]
    if measure.say is None:
        return (f"above the median of rows on most measures; highest on {name}",)
    return (f"no single measure stands out; highest: {measure.say(i, standing[name][i])}",)
