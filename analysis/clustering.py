"""The clustering step: groups of similar objects, how many, and what sets each group apart.

A sweep tries each method over a range of k and scores every run: the silhouette (how much
closer a row sits to its own cluster than to the next one; computed on a random sample for
large tables) for every method, and the BIC for Gaussian mixtures. The choice is explained in
words. Each cluster gets a profile in the table's own units: its mean of every feature and
the features on which it differs most from the other rows.

Methods that do not scale exactly are replaced past a threshold, and the result says so:
k-means becomes mini-batch k-means past ``MINIBATCH_ROWS`` rows, Gaussian mixtures are fitted
on a sample of that size, and agglomerative clustering and HDBSCAN are fitted on a sample of
``sample_size`` rows, the other rows joining the nearest cluster.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from analysis.errors import StepError
from analysis.features import FeatureMatrix, build_features, target_values
from analysis.notes import Note
from analysis.plain import plain, row_id
from analysis.progress import quiet
from analysis.projection import prepared, sample_positions, scaling_note
from analysis.settings import FEATURE_SETTINGS, SEED, Choice, Setting, check_values, named
from analysis.table import Table
from analysis.threads import threads_for

SETTINGS = (
    Setting("method", spoken="clustering method", label="Method", option="--method",
            choices=(Choice("auto", "choose by a sweep (k-means, Gaussian mixture, "
                                    "agglomerative)"),
                     Choice("kmeans", "k-means", "k-means"),
                     Choice("gmm", "Gaussian mixture", "Gaussian mixture"),
                     Choice("agglomerative", "agglomerative (Ward)", "agglomerative (Ward)"),
                     Choice("hdbscan", "HDBSCAN (finds its own number)", "HDBSCAN"))),
    Setting("k", minimum=2, page_maximum=200, spoken="k =",
            label="Number of clusters (0: let the sweep choose)",
            advice="give a whole number of clusters, at least 2, or leave k unset to choose "
                   "it by a sweep",
            option="--k", option_help="number of clusters (default: chosen by sweep)"),
    Setting("compare", follows_target=True, label="Compare with", option="--compare",
            metavar="COL",
            help="A label to compare the clusters with (adjusted Rand index, normalized mutual "
                 "information). It is not used as a feature.",
            option_help="a label to compare the clusters with"),
    Setting("k_range", minimum=2, page_maximum=30, label="The sweep tries k from … to"),
    *FEATURE_SETTINGS,
    Setting("standardize", label="Standardize features"),
    Setting("sample_size", minimum=10, spoken="sample size",
            advice="give a whole number of at least 10 rows"),
    Setting("min_cluster_size", minimum=2, page_maximum=100_000,
            label="Smallest cluster (HDBSCAN)", advice="give a whole number of at least 2 rows"),
    SEED,
)
METHODS = named(SETTINGS)["method"].values
# Methods that take a number of clusters; "auto" sweeps these.
K_METHODS = ("kmeans", "gmm", "agglomerative")
METHOD_TITLES = named(SETTINGS)["method"].titles
MINIBATCH_ROWS = 100_000
# A cluster "differs" on a feature when its mean is this many standard deviations from the
# mean of the other rows (half a standard deviation: a medium effect, common practice).
NOTABLE_DIFFERENCE = 0.5
NOISE = -1


@dataclass(frozen=True)
class SweepEntry:
    """One run of the sweep: a method, the k asked for, and its scores."""

    method: str
    k: int | None
    silhouette: float | None
    bic: float | None = None
    clusters: int = 0
    noise: int = 0

    def to_json(self) -> dict:
        return plain({"method": self.method, "k": self.k, "silhouette": self.silhouette,
                      "bic": self.bic, "clusters": self.clusters, "noise": self.noise})


@dataclass(frozen=True)
class ClusterProfile:
    """One cluster: its size, its mean of each feature (table units), and what sets it apart.

    ``differences`` holds, per feature, (cluster mean - mean of the other rows) divided by the
    feature's standard deviation over all rows; ``distinguished_by`` says the largest in words.
    """

    cluster: int
    size: int
    means: dict[str, float]
    differences: dict[str, float]
    distinguished_by: tuple[str, ...]

    def to_json(self) -> dict:
        return plain({"cluster": self.cluster, "size": self.size, "means": self.means,
                      "differences": self.differences,
                      "distinguished_by": list(self.distinguished_by)})


@dataclass(frozen=True, eq=False)
class ClusteringResult:
    """Cluster labels for the clustered rows (``row_ids``, ``positions`` line up with them).

    Clusters are numbered 0, 1, ... from the largest; HDBSCAN's noise rows are cluster -1.
    """

    method: str
    k: int
    row_ids: np.ndarray
    positions: np.ndarray
    labels: np.ndarray
    sweep: tuple[SweepEntry, ...]
    profiles: tuple[ClusterProfile, ...]
    reason: str
    features: tuple[str, ...]
    standardize: bool
    n_rows: int
    seed: int
    silhouette: float | None = None
    compare: str | None = None
    agreement: dict[str, float] | None = None
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()  # what the user should know first: rows or columns lost
    elapsed_seconds: float = 0.0
    kind: ClassVar[str] = "clustering"

    def _repr_html_(self) -> str:
        from analysis.notebook import result_html

        return result_html(self)

    def to_frame(self):
        """The result as a pandas frame (see analysis.frames.clustering_frame)."""
        from analysis.frames import clustering_frame

        return clustering_frame(self)

    def to_json(self) -> dict:
        payload = {
            "method": self.method,
            "k": self.k,
            "silhouette": self.silhouette,
            "assignments": [{"row": row_id(r), "cluster": int(c)}
                            for r, c in zip(self.row_ids, self.labels)],
            "sweep": [entry.to_json() for entry in self.sweep],
            "profiles": [profile.to_json() for profile in self.profiles],
            "reason": self.reason,
            "features": list(self.features),
            "standardize": self.standardize,
            "n_rows": self.n_rows,
            "seed": self.seed,
            "notes": list(self.notes),
            "warnings": list(self.warnings),
            "elapsed_seconds": self.elapsed_seconds,
        }
        if self.compare is not None:
            payload["compare"] = self.compare
            payload["agreement"] = self.agreement
        return plain(payload)

    def summary(self) -> str:
        lines = [f"{METHOD_TITLES[self.method]}, k = {self.k}, on {self.n_rows} rows and "
                 f"{len(self.features)} features; {self.elapsed_seconds:.1f} s.",
                 f"  why: {self.reason}"]
        if self.agreement is not None:
            lines.append(f"  agreement with {self.compare!r}: adjusted Rand index "
                         f"{self.agreement['ari']:.3f}, normalized mutual information "
                         f"{self.agreement['nmi']:.3f}")
        for profile in self.profiles:
            name = "noise" if profile.cluster == NOISE else f"cluster {profile.cluster}"
            lines.append(f"  {name} ({profile.size} rows): "
                         + "; ".join(profile.distinguished_by))
        lines.extend(f"  warning: {w}" for w in self.warnings)
        lines.extend(f"  note: {n}" for n in self.notes)
        return "\n".join(lines)


@dataclass(frozen=True, kw_only=True)
class ClusteringStep:
    """Cluster the table's rows, choosing the method and k by internal scores.

    method: "auto" (k-means, Gaussian mixture and agglomerative over ``k_range``, chosen by
        silhouette), "kmeans" or "agglomerative" (k by silhouette), "gmm" (k by BIC) or
        "hdbscan" (finds its own number of clusters; rows in no cluster are noise, -1).
    k: a fixed number of clusters instead of the sweep. k_range: lowest and highest k tried.
    compare: a label column to compare the clusters with (adjusted Rand index, normalized
        mutual information); it is not used as a feature.
    sample_size: rows used for silhouettes, and for agglomerative clustering and HDBSCAN,
        on larger tables (drawn with ``seed``).

    Example: ``ClusteringStep(method="kmeans", k=3, compare="species").run(table).agreement``.
    """

    method: str = "auto"
    k: int | None = None
    k_range: tuple[int, int] = (2, 8)
    compare: str | None = None
    columns: list[str] | None = None
    array_encoding: str = "invariant"
    log_scale: str = "auto"
    missing: str = "drop"
    intervals: str = "missing"
    standardize: bool = True
    sample_size: int = 4000
    min_cluster_size: int = 10
    seed: int = 0
    kind: ClassVar[str] = "clustering"

    def run(self, table: Table, *, progress=None) -> ClusteringResult:
        """Cluster the rows. ``progress``: a callable (or :class:`analysis.progress.Reporter`)
        told of each clustering tried; it may stop the step between two of them by raising
        :class:`analysis.progress.StepStopped`."""
        started = time.perf_counter()
        reporter = quiet(progress)
        self.check_table(table)
        reporter.phase("building features")
        fm = build_features(table, columns=self.columns, target=self.compare,
                            array_encoding=self.array_encoding, log_scale=self.log_scale,
                            missing=self.missing,
                            intervals=self.intervals)
        n = len(fm.rows)
        notes = list(fm.notes)
        values = prepared(fm.values, self.standardize, table.name, "clustering")
        notes.append(scaling_note(self.standardize))
        ks = self.candidate_ks(n, table.name)
        scorer = Silhouette(values, self.sample_size, self.seed, notes)
        methods = K_METHODS if self.method == "auto" else (self.method,)
        runs: list[tuple[SweepEntry, np.ndarray]] = []
        reporter.phase("trying clusterings", total=max(1, len(methods) * len(ks)))
        with warnings.catch_warnings(), threads_for(n):
            # duplicate rows (common in tables of invariants) make k-means and mixtures warn
            # that fewer distinct clusters exist than asked; the sweep records what was found.
            warnings.simplefilter("ignore")
            for method in methods:
                for found in self._sweep(method, values, ks, scorer, notes):
                    runs.append(found)
                    reporter.advance()
        reporter.phase("describing the clusters")
        entry, labels, reason = choose_run(self.method, runs, self.k is not None)
        labels = _by_size(labels)
        agreement = None
        if self.compare is not None:
            agreement = _agreement(table, self.compare, fm.rows, labels)
        return clustering_result(
            self, entry, reason, labels, row_ids=fm.row_ids, positions=fm.rows,
            sweep=[e for e, _ in runs], profiles=_profiles(table, fm, labels),
            features=fm.names, agreement=agreement, notes=notes, warnings=fm.warnings,
            started=started)

    def check(self) -> None:
        """Check the settings alone (no table needed); StepError names a bad one."""
        check_values(self)
        bounds = tuple(self.k_range) if isinstance(self.k_range, (list, tuple)) else ()
        if len(bounds) != 2 or not all(isinstance(b, int) for b in bounds) \
                or not 2 <= bounds[0] <= bounds[1]:
            raise StepError(f"k_range {self.k_range!r}: give the lowest and highest k to try, "
                            "two whole numbers with 2 <= lowest <= highest, e.g. [2, 8].")

    def check_table(self, table: Table) -> None:
        self.check()
        if self.compare is not None:
            table.column(self.compare)
            if self.columns is not None and self.compare in self.columns:
                raise StepError(f"{table.name}: {self.compare!r} is the column to compare "
                                "with, so it cannot also be a feature; leave it out of the "
                                "feature columns.")

    def candidate_ks(self, n: int, table_name: str) -> list[int]:
        if self.method == "hdbscan":
            return []
        if self.k is not None:
            if self.k >= n:
                raise StepError(f"{table_name}: k = {self.k} clusters need more than {self.k} "
                                f"rows; {n} rows remain. Choose a smaller k.")
            return [self.k]
        low, high = self.k_range
        ks = list(range(low, min(high, n - 1) + 1))
        if not ks:
            raise StepError(f"{table_name}: {n} rows are too few to try k from {low}; give "
                            "a smaller k_range or a larger table.")
        return ks

    def _sweep(self, method: str, values: np.ndarray, ks: list[int], scorer: Silhouette,
               notes: list[str]):
        n = len(values)
        if method == "kmeans":
            if n > MINIBATCH_ROWS:
                notes.append(Note("minibatch_kmeans", f"{n} rows: mini-batch k-means (batches "
                                  "of 4096 rows) instead of exact k-means.", rows=n))
            for k in ks:
                labels = kmeans_labels(values, k, self.seed)[0]
                yield _entry(method, k, labels, scorer), labels
        elif method == "gmm":
            for k in ks:
                labels, bic = _mixture(values, k, self.seed, notes)
                yield _entry(method, k, labels, scorer, bic=bic), labels
        elif method == "agglomerative":
            for k, labels in _agglomerative(values, ks, self.sample_size, self.seed, notes):
                yield _entry(method, k, labels, scorer), labels
        else:
            if self.k is not None:
                notes.append(hdbscan_k_note(self.k))
            labels = _hdbscan(values, self.min_cluster_size, self.sample_size, self.seed,
                              notes)
            yield _entry(method, None, labels, scorer), labels


def clustering_result(step, entry: SweepEntry, reason: str, labels: np.ndarray, *, row_ids,
                      positions, sweep, profiles, features, agreement, notes, warnings,
                      started: float) -> ClusteringResult:
    """The result of ``step``: the run chosen (``entry``, and why: ``reason``), every row's
    cluster (``labels``, numbered by size, :func:`size_order`), the sweep, profiles and
    agreement; ``started`` is the step's start (perf_counter)."""
    return ClusteringResult(
        method=entry.method, k=int(len(set(labels.tolist()) - {NOISE})), row_ids=row_ids,
        positions=positions, labels=labels, sweep=tuple(sweep), profiles=profiles,
        reason=reason, features=tuple(features), standardize=step.standardize,
        n_rows=len(labels), seed=step.seed, silhouette=entry.silhouette, compare=step.compare,
        agreement=agreement, notes=tuple(dict.fromkeys(notes)), warnings=tuple(warnings),
        elapsed_seconds=time.perf_counter() - started,
    )


def kmeans_labels(values: np.ndarray, k: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """k-means labels and centres; mini-batch k-means past ``MINIBATCH_ROWS`` rows."""
    from sklearn.cluster import KMeans, MiniBatchKMeans

    if len(values) > MINIBATCH_ROWS:
        model = MiniBatchKMeans(n_clusters=k, random_state=seed, batch_size=4096, n_init=3)
    else:
        model = KMeans(n_clusters=k, random_state=seed, n_init=4)
    labels = model.fit_predict(values)
    return labels, model.cluster_centers_


class Silhouette:
    """Silhouette scores on one fixed set of rows (a random sample for large tables).

    The distances between those rows are computed once and shared by every run of the sweep.
    """

    def __init__(self, values: np.ndarray, sample_size: int, seed: int, notes: list[str]):
        from sklearn.metrics import pairwise_distances

        n = len(values)
        self.rows = np.arange(n)
        if n > sample_size:
            self.rows = sample_positions(n, sample_size, seed)
            notes.append(silhouette_note(sample_size, n, seed))
        self.distances = pairwise_distances(values[self.rows])

    @classmethod
    def of_rows(cls, values: np.ndarray) -> Silhouette:
        """Silhouettes on exactly these rows (an engine that draws the sample itself)."""
        return cls(values, len(values), 0, [])

    def __call__(self, labels: np.ndarray) -> float | None:
        from sklearn.metrics import silhouette_score

        labels = labels[self.rows]
        clustered = labels != NOISE
        if not silhouette_defined(labels):
            return None
        distances = self.distances
        if not clustered.all():
            distances = distances[np.ix_(clustered, clustered)]
        return float(silhouette_score(distances, labels[clustered], metric="precomputed"))


def silhouette_note(size: int, n: int, seed: int) -> Note:
    """The note for silhouettes computed on a sample of ``size`` of ``n`` rows."""
    return Note("silhouette_sample", f"silhouettes computed on a random sample of {size} of "
                f"the {n} rows (seed {seed}).", sample=size, rows=n, seed=seed)


def silhouette_defined(labels: np.ndarray) -> bool:
    """Whether the silhouette of ``labels`` is defined: from 2 clusters to one fewer than the
    rows, noise rows left out."""
    clustered = labels != NOISE
    distinct = len(set(labels[clustered].tolist()))
    return 2 <= distinct < int(clustered.sum())


def _entry(method: str, k: int | None, labels: np.ndarray, scorer: Silhouette,
           bic: float | None = None) -> SweepEntry:
    clusters, sizes = np.unique(labels, return_counts=True)
    return sweep_entry(method, k, dict(zip(clusters.tolist(), sizes.tolist())),
                       scorer(labels), bic)


def sweep_entry(method: str, k: int | None, sizes: dict, silhouette: float | None,
                bic: float | None = None) -> SweepEntry:
    """A run of the sweep from its clusters' ``sizes`` ({cluster: rows}, noise -1)."""
    return SweepEntry(method=method, k=k, silhouette=silhouette, bic=bic,
                      clusters=len([c for c in sizes if c != NOISE]),
                      noise=int(sizes.get(NOISE, 0)))


def sample_rows(n: int, size: int, seed: int) -> np.ndarray:
    """``size`` of ``n`` rows drawn with ``seed`` (increasing), or every row when there are no
    more: the rows a step fits or scores on past a size."""
    return np.arange(n) if n <= size else sample_positions(n, size, seed)


def _mixture(values: np.ndarray, k: int, seed: int, notes: list[str]):

    fit_rows = values
    if len(values) > MINIBATCH_ROWS:
        fit_rows = values[sample_positions(len(values), MINIBATCH_ROWS, seed)]
        notes.append(mixture_note(MINIBATCH_ROWS, len(values)))
    model = mixture_model(fit_rows, k, seed)
    return MixtureAssigner(model)(values), float(model.bic(fit_rows))


def mixture_model(values: np.ndarray, k: int, seed: int):
    """A Gaussian mixture of ``k`` full-covariance components fitted to ``values``."""
    from sklearn.mixture import GaussianMixture

    return GaussianMixture(n_components=k, covariance_type="full", random_state=seed).fit(values)


def mixture_note(fitted: int, n: int) -> Note:
    """Gaussian mixtures fitted on ``fitted`` of the ``n`` rows."""
    return Note("mixture_sample", f"Gaussian mixtures fitted on a random sample of {fitted} of "
                f"the {n} rows; every row then joins its most likely component.",
                sample=fitted, rows=n)


def agglomerative_note(fitted: int, n: int) -> Note:
    """Ward's tree built on ``fitted`` of the ``n`` rows."""
    return Note("agglomerative_sample", f"agglomerative clustering (Ward) built on a random "
                f"sample of {fitted} of the {n} rows; the other rows join the cluster with the "
                "nearest mean.", sample=fitted, rows=n)


def hdbscan_size_note(size: int) -> Note:
    return Note("hdbscan_size", f"HDBSCAN with a smallest cluster of {size} rows; rows in no "
                "cluster are noise (cluster -1).", size=size)


def hdbscan_sample_note(fitted: int, n: int) -> Note:
    return Note("hdbscan_sample", f"HDBSCAN ran on a random sample of {fitted} of the {n} "
                "rows; each other row takes the cluster (or noise) of its nearest sampled row.",
                sample=fitted, rows=n)


def hdbscan_k_note(k: int) -> Note:
    return Note("hdbscan_k_unused",
                f"HDBSCAN finds its own number of clusters; k = {k} was not used.", k=k)


def hdbscan_size(min_cluster_size: int, fitted: int) -> int:
    """The smallest cluster HDBSCAN is asked for on ``fitted`` rows."""
    return min(min_cluster_size, max(2, fitted // 2))


def _agglomerative(values: np.ndarray, ks: list[int], sample_size: int, seed: int,
                   notes: list[str]):

    n = len(values)
    fit = sample_rows(n, sample_size, seed)
    if len(fit) < n:
        notes.append(agglomerative_note(sample_size, n))
    for k, sample_labels, centres in ward_cuts(values[fit], ks):
        if len(fit) == n:
            yield k, sample_labels
            continue
        yield k, NearestCentre(centres)(values)


def ward_cuts(values: np.ndarray, ks: list[int]):
    """For each k: Ward clustering of ``values`` into k clusters, as (k, labels, centres)."""
    from scipy.cluster.hierarchy import fcluster, linkage

    # one Ward tree serves every k: cutting it at k clusters is Ward clustering with k
    tree = linkage(values, method="ward")
    for k in ks:
        labels = fcluster(tree, t=k, criterion="maxclust") - 1
        centres = np.array([values[labels == c].mean(axis=0) for c in range(labels.max() + 1)])
        yield k, labels, centres


def _hdbscan(values: np.ndarray, min_cluster_size: int, sample_size: int, seed: int,
             notes: list[str]) -> np.ndarray:
    n = len(values)
    fit = sample_rows(n, sample_size, seed)
    sample_labels = hdbscan_fit(values[fit], min_cluster_size, notes)
    if len(fit) == n:
        return sample_labels
    notes.append(hdbscan_sample_note(sample_size, n))
    labels = NearestSampled(values[fit], sample_labels)(values)
    labels[fit] = sample_labels
    return labels


def hdbscan_fit(values: np.ndarray, min_cluster_size: int, notes: list[str]) -> np.ndarray:
    """HDBSCAN's labels of ``values`` (noise -1), and the note of the smallest cluster."""
    from sklearn.cluster import HDBSCAN

    size = hdbscan_size(min_cluster_size, len(values))
    labels = HDBSCAN(min_cluster_size=size, copy=True).fit_predict(values)
    notes.append(hdbscan_size_note(size))
    return labels


class NearestCentre:
    """Assigns each row to its nearest centre (Euclidean): how a row that a clustering was
    not fitted on joins one of its clusters."""

    def __init__(self, centres: np.ndarray):
        self.centres = np.asarray(centres, dtype=np.float64)

    def __call__(self, values: np.ndarray) -> np.ndarray:
        from sklearn.metrics import pairwise_distances_argmin

        if len(values) == 0:
            return np.zeros(0, dtype=int)
        return pairwise_distances_argmin(values, self.centres)


class MixtureAssigner:
    """Assigns each row to its most likely component of a fitted Gaussian mixture."""

    def __init__(self, model):
        self.model = model

    def __call__(self, values: np.ndarray) -> np.ndarray:
        return self.model.predict(values) if len(values) else np.zeros(0, dtype=int)


class NearestSampled:
    """Gives each row the label of its nearest row of ``sample`` (noise stays noise): how a
    row joins a clustering fitted on a sample that has no centres."""

    def __init__(self, sample: np.ndarray, labels: np.ndarray):
        from sklearn.neighbors import NearestNeighbors

        self.labels = labels
        self.index = NearestNeighbors(n_neighbors=1).fit(sample)

    def __call__(self, values: np.ndarray) -> np.ndarray:
        if len(values) == 0:
            return np.zeros(0, dtype=int)
        return self.labels[self.index.kneighbors(values, return_distance=False)[:, 0]]


def choose_run(method: str, runs: list, fixed_k: bool):
    """The chosen run and why, in words."""
    scored = [(e, labels) for e, labels in runs if e.silhouette is not None]
    if method == "hdbscan":
        entry, labels = runs[0]
        quality = (f"silhouette {entry.silhouette:.3f} on the clustered rows"
                   if entry.silhouette is not None else "no silhouette (fewer than 2 clusters)")
        return entry, labels, (f"HDBSCAN found {entry.clusters} clusters and {entry.noise} "
                               f"noise rows; {quality}.")
    if fixed_k and len(runs) == 1:
        entry, labels = runs[0]
        quality = f"silhouette {entry.silhouette:.3f}" if entry.silhouette is not None \
            else "no silhouette"
        return entry, labels, f"k = {entry.k} as asked; {quality}."
    if method == "gmm":
        best = min(runs, key=lambda r: r[0].bic)
        ks = [e.k for e, _ in runs]
        entry = best[0]
        sil = f"; its silhouette is {entry.silhouette:.3f}" if entry.silhouette is not None \
            else ""
        return entry, best[1], (f"the Gaussian mixture with k = {entry.k} has the lowest BIC "
                                f"({entry.bic:.1f}) of k = {_span(ks)}{sil}.")
    if not scored:
        entry, labels = runs[0]
        return entry, labels, (f"no run gave two or more clusters a silhouette could score; "
                               f"kept {METHOD_TITLES[entry.method]} with k = {entry.k}.")
    # the highest silhouette wins; on a tie the earlier run (fewer clusters, simpler method)
    best_index = max(range(len(scored)), key=lambda i: (scored[i][0].silhouette, -i))
    entry, labels = scored[best_index]
    others = sorted((e for i, (e, _) in enumerate(scored) if i != best_index),
                    key=lambda e: -e.silhouette)
    ks = sorted({e.k for e, _ in runs})
    methods = ", ".join(METHOD_TITLES[m] for m in dict.fromkeys(e.method for e, _ in runs))
    tried = f"{len(runs)} runs ({methods}; k = {_span(ks)})"
    text = (f"{METHOD_TITLES[entry.method]} with k = {entry.k} has the highest silhouette "
            f"({entry.silhouette:.3f}) of {tried}")
    if others:
        runner = others[0]
        text += (f"; next best: {METHOD_TITLES[runner.method]} with k = {runner.k} "
                 f"({runner.silhouette:.3f})")
    return entry, labels, text + "."


def _span(ks: list[int]) -> str:
    ks = sorted(ks)
    if len(ks) == 1:
        return str(ks[0])
    if ks == list(range(ks[0], ks[-1] + 1)):
        return f"{ks[0]}..{ks[-1]}"
    return ", ".join(map(str, ks))


def size_order(labels: np.ndarray) -> dict:
    """Old cluster number -> new: 0 for the largest cluster (ties by first row), noise -1."""
    labels = np.asarray(labels)
    found = [c for c in dict.fromkeys(labels.tolist()) if c != NOISE]
    order = sorted(found, key=lambda c: -int(np.sum(labels == c)))
    mapping = {old: new for new, old in enumerate(order)}
    mapping[NOISE] = NOISE
    return mapping


def _by_size(labels: np.ndarray) -> np.ndarray:
    """Renumber clusters 0, 1, ... from the largest (ties by first row); noise stays -1."""
    mapping = size_order(labels)
    return np.array([mapping[c] for c in np.asarray(labels).tolist()], dtype=int)


def agreement_scores(truth, labels: np.ndarray) -> dict:
    """Adjusted Rand index and normalized mutual information of ``labels`` with the label
    column's values ``truth`` (compared as text)."""
    from sklearn.metrics import adjusted_rand_score, normalized_mutual_info_score

    truth = np.array([str(v) for v in truth], dtype=object)
    return {"ari": float(adjusted_rand_score(truth, labels)),
            "nmi": float(normalized_mutual_info_score(truth, labels))}


def _agreement(table: Table, column: str, rows: np.ndarray, labels: np.ndarray) -> dict:
    return agreement_scores(target_values(table, column, rows), labels)


def profile_values(table: Table, fm: FeatureMatrix) -> tuple[list[str], np.ndarray, list[str]]:
    """Feature columns in the table's own units: names, values (rows x features) and kinds.

    Features on the signed log scale are replaced by the column's own values when every one
    fits in a float; otherwise they stay on the log scale, under their log name.
    """
    names, columns, kinds = [], [], []
    for j, feature in enumerate(fm.features):
        column = fm.values[:, j]
        name = feature.name
        if feature.kind == "log":
            raw = table.numeric(feature.column)[fm.rows]
            if np.all(np.isfinite(raw)):
                column, name = raw, feature.column
        names.append(name)
        columns.append(column)
        kinds.append(feature.kind)
    return names, np.column_stack(columns), kinds


def _profiles(table: Table, fm: FeatureMatrix, labels: np.ndarray) -> tuple:
    names, values, kinds = profile_values(table, fm)
    sums = {cluster: (size, inside, values[labels != cluster].sum(axis=0))
            for cluster, (size, inside) in cluster_sums(values, labels).items()}
    return profiles_from_sums(sums, len(labels), names, kinds, values.std(axis=0))


def cluster_sums(values: np.ndarray, labels: np.ndarray) -> dict:
    """{cluster: (its rows, the sum of each column of ``values`` over them)} of a block of
    rows, ``labels`` giving each row's cluster; blocks' sums add (:func:`add_cluster_sums`)."""
    out = {}
    for cluster in np.unique(labels).tolist():
        inside = labels == cluster
        out[cluster] = (int(inside.sum()), values[inside].sum(axis=0))
    return out


def add_cluster_sums(a: dict, b: dict) -> dict:
    """Two blocks' :func:`cluster_sums` as one."""
    out = dict(a)
    for key, (size, total) in b.items():
        out[key] = (out[key][0] + size, out[key][1] + total) if key in out else (size, total)
    return out


def profiles_from_sums(sums: dict, n: int, names, kinds, spread: np.ndarray) -> tuple:
    """The clusters' profiles (noise last) from ``sums``, {cluster: (its rows, the sums of
    each feature over its rows, over the other rows)} of ``n`` rows, and each feature's
    standard deviation over every row (``spread``)."""
    profiles = []
    for cluster in sorted(sums, key=lambda c: (c == NOISE, c)):
        size, inside, outside = sums[cluster]
        means = inside / size
        rest = means if size == n else outside / (n - size)
        profiles.append(cluster_profile(int(cluster), int(size), names, kinds, means, rest,
                                        spread))
    return tuple(profiles)


def cluster_profile(cluster: int, size: int, names, kinds, means: np.ndarray, rest: np.ndarray,
                    spread: np.ndarray) -> ClusterProfile:
    """A cluster's profile from its feature means, those of the other rows (``rest``) and
    each feature's standard deviation over every row."""
    with np.errstate(divide="ignore", invalid="ignore"):
        difference = np.where(spread > 0, (means - rest) / spread, 0.0)
    return ClusterProfile(
        cluster=cluster, size=size,
        means={name: float(m) for name, m in zip(names, means)},
        differences={name: float(d) for name, d in zip(names, difference)},
        distinguished_by=distinguishing_columns(names, kinds, means, rest, difference),
    )


def distinguishing_columns(names, kinds, means, rest, difference, top: int = 3) -> tuple[str, ...]:
    order = [j for j in np.argsort(-np.abs(difference), kind="stable")
             if abs(difference[j]) >= NOTABLE_DIFFERENCE][:top]
    if not order:
        return (f"close to the other rows on every feature (no standardized difference "
                f"reaches {NOTABLE_DIFFERENCE})",)
    words = []
    for j in order:
        if kinds[j] in ("flag", "onehot"):
            words.append(f"{names[j]} in {means[j]:.0%} of rows (vs {rest[j]:.0%} elsewhere)")
        else:
            side = "high" if difference[j] > 0 else "low"
            words.append(f"{names[j]} {side} (mean {_number(means[j])} vs {_number(rest[j])})")
    return tuple(words)


def _number(value: float) -> str:
    return f"{value:.3g}"
