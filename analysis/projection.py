"""The projection step: a 2-d picture of the table by PCA, UMAP, t-SNE or LDA.

Every projected row keeps its id, so a point in the picture can be traced back to its object.
PCA and LDA are linear: their axes are combinations of the features, reported as loadings
named by the features. UMAP and t-SNE are not linear and do not scale exactly; past a row
threshold they run on a random sample of stated size, and the result says so.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from analysis.errors import StepError
from analysis.features import build_features, target_values
from analysis.notes import Note
from analysis.plain import plain, row_id
from analysis.progress import quiet, stoppable_call
from analysis.settings import FEATURE_SETTINGS, SEED, Choice, Setting, check_values, named
from analysis.table import Table

SETTINGS = (
    Setting("method", spoken="projection method", label="Method", option="--method",
            help="PCA and LDA are linear: their axes are sums of features. UMAP and t-SNE keep "
                 "neighbours together and distort distances.",
            choices=(Choice("pca", "PCA", "PCA"), Choice("umap", "UMAP", "UMAP"),
                     Choice("tsne", "t-SNE", "t-SNE"),
                     Choice("lda", "LDA (separates the target)", "LDA"))),
    Setting("target", follows_target=True, label="Target for this step", option="--target",
            help="Colours the picture; LDA separates its classes.",
            option_help="column to colour by (needed for LDA)"),
    *FEATURE_SETTINGS,
    Setting("standardize", label="Standardize features",
            help="Scale every feature to standard deviation 1, so that no invariant dominates "
                 "by its units alone."),
    Setting("sample_size", minimum=10, spoken="sample size", label="Most rows drawn (0: default)",
            advice="give a whole number of at least 10 rows, or leave it unset for the default",
            help="Larger tables are drawn from a random sample of this size (default 50 000 "
                 "for UMAP, 20 000 for t-SNE)."),
    Setting("n_neighbors", minimum=2, page_maximum=500, label="Neighbours (UMAP)",
            advice="give a whole number of at least 2"),
    Setting("perplexity", minimum=0, above=True, page_minimum=1.0, page_maximum=500.0,
            page_step=5.0, label="Perplexity (t-SNE)", advice="give a positive number"),
    SEED,
)
METHODS = named(SETTINGS)["method"].values
METHOD_TITLES = named(SETTINGS)["method"].titles
# Rows past which a method runs on a random sample unless `sample_size` says otherwise.
SAMPLE_THRESHOLDS = {"tsne": 20_000, "umap": 50_000}
# LDA looks for directions separating classes; a target with more values than this is
# almost certainly a number, not a label.
MAX_LDA_CLASSES = 50
UMAP_COMPILE_NOTE = Note("umap_compiles", "UMAP compiles its numerical code the first time it "
                         "runs in a process; that first run takes 15 s or more, later ones are "
                         "much faster.")

# Whether UMAP has already run in this process (its first call pays for compilation).
_umap_has_run = False


def sample_positions(n: int, size: int, seed: int) -> np.ndarray:
    """``size`` distinct positions out of ``range(n)``, drawn with ``seed``, in increasing order."""
    rng = np.random.default_rng(seed)
    return np.sort(rng.choice(n, size=size, replace=False))


def require_spread(values: np.ndarray, table_name: str, what: str) -> None:
    """StepError when every row has the same features: nothing to tell apart."""
    if len(values) and not np.any(np.ptp(values, axis=0) > 0):
        _no_spread(table_name, what)


def _no_spread(table_name: str, what: str):
    raise StepError(f"{table_name}: every row has the same value in every feature column, "
                    f"so there is nothing for {what} to tell apart. Choose other columns.")


def standardized(values: np.ndarray) -> np.ndarray:
    """Columns shifted to mean 0 and scaled to standard deviation 1 (constant columns to 0).

    The same numbers as scikit-learn's StandardScaler (population standard deviation, a
    column that does not vary left at 0), in three passes over a new matrix; ``values`` is
    not changed.
    """
    out, _ = _centred_and_scaled(values)
    return out


# PCA of a single feature (both engines say it with this record)
ONE_COMPONENT_NOTE = Note("one_component", "one feature gives one principal component; y is 0.")


def scaling_note(standardize: bool) -> Note:
    """The note of whether a step's features were standardized (see :func:`prepared`)."""
    return Note("features_scaled", "features standardized to mean 0 and standard deviation 1."
                if standardize else "features used in their own units.", standardized=standardize)


def prepared(values: np.ndarray, standardize: bool, table_name: str, what: str) -> np.ndarray:
    """The matrix a step works on: standardized or as it is, refused if no column varies."""
    if not standardize:
        require_spread(values, table_name, what)
        return values
    out, varies = _centred_and_scaled(values)
    if len(values) and not varies.any():
        _no_spread(table_name, what)
    return out


def varying(n: int, mean: np.ndarray, variance: np.ndarray) -> np.ndarray:
    """Which columns of ``n`` rows, with these means and population variances, vary.

    A column of one repeated value has a mean that rounding may put a hair away from the
    value, so its variance is not exactly 0: a variance within rounding of the mean's own
    error counts as none (common practice; StandardScaler does the same).
    """
    eps = np.finfo(np.float64).eps
    return variance > n * eps * variance + (n * eps * mean) ** 2


def _centred_and_scaled(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    n = len(values)
    if n == 0:
        return np.array(values, dtype=np.float64), np.zeros(values.shape[1], dtype=bool)
    mean = values.mean(axis=0)
    out = np.subtract(values, mean, dtype=np.float64)
    variance = np.einsum("ij,ij->j", out, out) / n
    scale, varies = spread(n, mean, variance)
    out[:, ~varies] = 0.0
    out /= scale
    return out, varies


def spread(n: int, mean: np.ndarray, variance: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(scale, varies): each column's population standard deviation, 1 for a column that
    does not vary (:func:`varying`), as StandardScaler scales; and which columns vary."""
    varies = varying(n, mean, variance)
    return np.where(varies, np.sqrt(variance), 1.0), varies


# ----------------------------------------------------------------------------------------
# Moments: what a pass over blocks of rows keeps of the features, merged block by block


def moments(values: np.ndarray) -> tuple[int, np.ndarray, np.ndarray]:
    """(rows, mean, centred Gram matrix) of a block of features."""
    n = len(values)
    if n == 0:
        p = values.shape[1]
        return 0, np.zeros(p), np.zeros((p, p))
    mean = values.mean(axis=0)
    centred = values - mean
    return n, mean, centred.T @ centred


def merge_moments(a, b):
    """Merge two (rows, mean, centred Gram) triples (Chan, Golub and LeVeque's update)."""
    na, mean_a, m2_a = a
    nb, mean_b, m2_b = b
    n = na + nb
    if na == 0:
        return b
    if nb == 0:
        return a
    delta = mean_b - mean_a
    mean = mean_a + delta * (nb / n)
    m2 = m2_a + m2_b + np.outer(delta, delta) * (na * nb / n)
    return n, mean, m2


def moment_scale(n: int, mean: np.ndarray, m2: np.ndarray) -> np.ndarray:
    """Each feature's scale (:func:`spread`) from its moments."""
    return spread(n, mean, np.diag(m2) / n)[0]


def standardizing(standardize: bool, n, mean, m2, notes: list):
    """(shift, scale) that standardize the features with these moments, or leave them in
    their own units, and the note saying which (:func:`scaling_note`) added to ``notes``."""
    notes.append(scaling_note(standardize))
    if standardize:
        return mean, moment_scale(n, mean, m2)
    return np.zeros(len(mean)), np.ones(len(mean))


def pca_from_moments(n: int, mean: np.ndarray, m2: np.ndarray, *, standardize: bool = True):
    """Explained variance ratios, principal axes (rows) and feature scales, from moments.

    The scales are those ``StandardScaler`` uses (population standard deviation; 1 for a
    column it counts as constant), so the axes and ratios are those of scikit-learn's PCA on
    the standardized features. Axes are signed so that each one's largest entry is positive.
    """
    scale = moment_scale(n, mean, m2) if standardize else np.ones(len(mean))
    covariance = m2 / n / np.outer(scale, scale)
    eigenvalues, eigenvectors = np.linalg.eigh(covariance)
    order = np.argsort(eigenvalues)[::-1]
    eigenvalues = np.clip(eigenvalues[order], 0.0, None)
    components = eigenvectors[:, order].T
    keep = min(n, len(mean))
    eigenvalues, components = eigenvalues[:keep], components[:keep]
    total = float(np.trace(covariance))
    ratio = eigenvalues / total if total > 0 else np.zeros_like(eigenvalues)
    largest = np.argmax(np.abs(components), axis=1)
    signs = np.sign(components[np.arange(len(components)), largest])
    signs[signs == 0] = 1.0
    components = components * signs[:, None]
    return ratio, components, scale


@dataclass(frozen=True, eq=False)
class ProjectionResult:
    """Two coordinates per projected row, with the row ids and what the axes mean.

    ``row_ids`` and ``positions`` (row positions in the table) line up with ``x`` and ``y``.
    ``explained_variance_ratio`` (PCA only) covers every principal component; the first two
    are the x and y axes. ``loadings`` maps each feature name to its weight on (x, y), for
    PCA (principal axes, unit vectors) and LDA (discriminant scalings).
    """

    method: str
    row_ids: np.ndarray
    positions: np.ndarray
    x: np.ndarray
    y: np.ndarray
    features: tuple[str, ...]
    standardize: bool
    target: str | None
    n_rows: int
    sampled: bool
    seed: int
    explained_variance_ratio: tuple[float, ...] | None = None
    loadings: dict[str, tuple[float, float]] | None = None
    axis_titles: tuple[str, str] = ("x", "y")
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()  # what the user should know first: rows or columns lost
    elapsed_seconds: float = 0.0
    kind: ClassVar[str] = "projection"

    def _repr_html_(self) -> str:
        from analysis.notebook import result_html

        return result_html(self)

    def to_frame(self):
        """The result as a pandas frame (see analysis.frames.projection_frame)."""
        from analysis.frames import projection_frame

        return projection_frame(self)

    @property
    def n_projected(self) -> int:
        return len(self.row_ids)

    def to_json(self) -> dict:
        loadings = None
        if self.loadings is not None:
            loadings = [{"feature": name, "x": wx, "y": wy}
                        for name, (wx, wy) in self.loadings.items()]
        # a million coordinates are built as plain values directly rather than walked by
        # plain(): ids through row_id, coordinates as floats (None where not finite)
        ids = [row_id(r) for r in self.row_ids.tolist()] if len(self.row_ids) else []
        xs = [v if math.isfinite(v) else None for v in np.asarray(self.x, float).tolist()]
        ys = [v if math.isfinite(v) else None for v in np.asarray(self.y, float).tolist()]
        coordinates = [{"row": r, "x": a, "y": b} for r, a, b in zip(ids, xs, ys)]
        data = plain({
            "method": self.method,
            "explained_variance_ratio": (list(self.explained_variance_ratio)
                                         if self.explained_variance_ratio is not None
                                         else None),
            "loadings": loadings,
            "axis_titles": list(self.axis_titles),
            "features": list(self.features),
            "standardize": self.standardize,
            "target": self.target,
            "n_rows": self.n_rows,
            "n_projected": self.n_projected,
            "sampled": self.sampled,
            "seed": self.seed,
            "notes": list(self.notes),
            "warnings": list(self.warnings),
            "elapsed_seconds": self.elapsed_seconds,
        })
        return {"method": data.pop("method"), "coordinates": coordinates, **data}

    def summary(self) -> str:
        title = METHOD_TITLES[self.method]
        scale = "standardized" if self.standardize else "in their own units"
        lines = [f"{title} of {self.n_projected} rows"
                 + (f" (a random sample of {self.n_rows})" if self.sampled else "")
                 + f" on {len(self.features)} features, {scale}; "
                 f"{self.elapsed_seconds:.1f} s."]
        if self.explained_variance_ratio is not None:
            ratios = self.explained_variance_ratio
            shown = ", ".join(f"{r:.3f}" for r in ratios[:5])
            lines.append(f"  explained variance ratio: {shown}"
                         + (" ..." if len(ratios) > 5 else "")
                         + f"; the picture shows {sum(ratios[:2]):.1%}.")
        if self.loadings:
            for axis, index in (("x", 0), ("y", 1)):
                top = sorted(self.loadings.items(), key=lambda kv: -abs(kv[1][index]))[:3]
                words = ", ".join(f"{name} ({w[index]:+.2f})" for name, w in top)
                lines.append(f"  {axis} ({self.axis_titles[index]}) is mostly {words}")
        lines.extend(f"  warning: {w}" for w in self.warnings)
        lines.extend(f"  note: {n}" for n in self.notes)
        return "\n".join(lines)


@dataclass(frozen=True, kw_only=True)
class ProjectionStep:
    """Project the table's rows to two dimensions.

    method: "pca", "umap", "tsne" or "lda" (LDA needs ``target``, a label with two or more
        classes). standardize: scale every feature to standard deviation 1 first (default),
        so that no invariant dominates by its units alone.
    sample_size: for UMAP and t-SNE, the most rows projected; larger tables are sampled at
        random with ``seed``. Default 50000 for UMAP and 20000 for t-SNE.
    n_neighbors (UMAP) and perplexity (t-SNE) are reduced for tiny tables, with a note.

    Example: ``ProjectionStep(method="pca").run(table).explained_variance_ratio``.
    """

    method: str = "pca"
    target: str | None = None
    columns: list[str] | None = None
    array_encoding: str = "invariant"
    log_scale: str = "auto"
    missing: str = "drop"
    intervals: str = "missing"
    standardize: bool = True
    sample_size: int | None = None
    n_neighbors: int = 15
    perplexity: float = 30.0
    seed: int = 0
    kind: ClassVar[str] = "projection"

    def run(self, table: Table, *, progress=None) -> ProjectionResult:
        """Project the rows to two coordinates. ``progress``: a callable (or
        :class:`analysis.progress.Reporter`) that receives the phases and may stop the step
        with :class:`analysis.progress.StepStopped`."""
        started = time.perf_counter()
        reporter = quiet(progress)
        self.check_table(table)
        reporter.phase("reading the features")
        # LDA needs the target on every row it uses; the other methods only colour by it, so
        # rows without a target value are still drawn
        needs_target = self.method == "lda"
        fm = build_features(table, columns=self.columns,
                            target=self.target if needs_target else None,
                            exclude=(self.target,) if self.target and not needs_target else (),
                            array_encoding=self.array_encoding, log_scale=self.log_scale,
                            missing=self.missing,
                            intervals=self.intervals)
        notes = list(fm.notes) + self.setting_notes()
        n = len(fm.rows)
        check_rows(table.name, n)
        values = prepared(fm.values, self.standardize, table.name, "a projection")
        notes.append(scaling_note(self.standardize))
        keep = np.arange(n)
        sampled = False
        if self.method in SAMPLE_THRESHOLDS:
            limit = self.sample_size or SAMPLE_THRESHOLDS[self.method]
            if n > limit:
                keep = sample_positions(n, limit, self.seed)
                sampled = True
                notes.append(Note("projection_sample", f"{METHOD_TITLES[self.method]} ran on a "
                                  f"random sample of {limit} of the {n} rows (seed "
                                  f"{self.seed}); {METHOD_TITLES[self.method]} does not scale "
                                  "exactly to large tables.", method=self.method,
                                  sample=limit, rows=n, seed=self.seed))
        # every row projected: no copy of the matrix (PCA and LDA never sample)
        work = values[keep] if sampled else values
        extra: dict = {}
        if self.method != "umap":
            reporter.phase(f"{METHOD_TITLES[self.method]} on {len(work)} rows")
        if self.method == "pca":
            coordinates, extra = stoppable_call(reporter, _pca, work, fm.names)
            if len(extra["explained_variance_ratio"]) < 2:
                notes.append(ONE_COMPONENT_NOTE)
        elif self.method == "lda":
            labels = target_values(table, self.target, fm.rows)
            coordinates, extra = stoppable_call(reporter, _lda, work, labels, fm.names,
                                                self.target, table.name, notes)
        elif self.method == "tsne":
            coordinates = stoppable_call(reporter, _tsne, work, self.perplexity, self.seed,
                                         notes)
        else:
            coordinates = _umap(work, self.n_neighbors, self.seed, notes, reporter)
        elapsed = time.perf_counter() - started
        return ProjectionResult(
            method=self.method, row_ids=fm.row_ids[keep], positions=fm.rows[keep],
            x=np.asarray(coordinates[:, 0], dtype=float),
            y=np.asarray(coordinates[:, 1], dtype=float),
            features=tuple(fm.names), standardize=self.standardize, target=self.target,
            n_rows=n, sampled=sampled, seed=self.seed, notes=tuple(notes),
            warnings=tuple(fm.warnings),
            elapsed_seconds=elapsed, **extra,
        )

    def setting_notes(self) -> list[str]:
        """What the settings do not do: a sample size for a method that uses every row."""
        if self.sample_size is not None and self.method not in SAMPLE_THRESHOLDS:
            return [Note("sample_size_unused", f"{METHOD_TITLES[self.method]} uses every "
                         "row; the sample size applies to UMAP and t-SNE only.",
                         method=self.method)]
        return []

    def check(self) -> None:
        """Check the settings alone (no table needed); StepError names a bad one."""
        check_values(self)

    def check_table(self, table: Table) -> None:
        """Check the settings and that the table has the columns they name."""
        self.check()
        if self.method == "lda" and self.target is None:
            raise StepError(f"{table.name}: LDA needs a target: the column whose classes the "
                            "picture should separate (choose a target, e.g. is_reflexive). "
                            "Without one, use PCA, UMAP or t-SNE.")
        if self.target is not None:
            table.column(self.target)


def check_rows(table_name: str, n: int) -> None:
    """StepError when fewer than 3 rows have every feature: too few to project."""
    if n < 3:
        raise StepError(f"{table_name}: a projection needs at least 3 rows with every "
                        f"feature present; {n} remain. Impute missing values or choose "
                        "other columns.")


def _pca(values: np.ndarray, names: list[str]):
    from sklearn.decomposition import PCA

    model = PCA(n_components=min(values.shape)).fit(values)
    components = model.components_
    # only the two coordinates drawn: a (rows x 2) product instead of every component's scores
    shown = components[:2]
    coordinates = _two_columns(values @ shown.T - model.mean_ @ shown.T)
    return coordinates, pca_fields(components, model.explained_variance_ratio_, names)


def pca_fields(components: np.ndarray, ratio, names: list[str]) -> dict:
    """The fields of a PCA's result from its principal axes (rows of ``components``) and
    explained variance ratios: the ratios, each feature's loadings on x and y, the titles."""
    second = components[1] if len(components) > 1 else np.zeros(len(names))
    loadings = {name: (float(components[0, j]), float(second[j]))
                for j, name in enumerate(names)}
    return {"explained_variance_ratio": tuple(float(r) for r in ratio), "loadings": loadings,
            "axis_titles": ("first principal component", "second principal component")}


def _lda(values: np.ndarray, labels: np.ndarray, names: list[str], target: str,
         table_name: str, notes: list[str]):
    from sklearn.discriminant_analysis import LinearDiscriminantAnalysis

    classes = np.array([str(v) for v in labels], dtype=object)
    distinct = sorted(set(classes.tolist()))
    if len(distinct) < 2:
        raise StepError(f"{table_name}: LDA needs at least two classes of the target "
                        f"{target!r}, but every row used has the value {distinct[0]!r}. "
                        "Choose another target or use PCA.")
    if len(distinct) > MAX_LDA_CLASSES:
        raise StepError(f"{table_name}: the target {target!r} has {len(distinct)} distinct "
                        f"values; LDA separates classes, at most {MAX_LDA_CLASSES}. Choose a "
                        "flag or category column, or use PCA.")
    model = LinearDiscriminantAnalysis(solver="svd")
    with warnings.catch_warnings():
        # collinear invariants (e.g. twice_area and area) are common in these tables and
        # are handled by the SVD solver; the warning would only alarm.
        warnings.simplefilter("ignore", UserWarning)
        scores = model.fit(values, classes).transform(values)
    scalings = model.scalings_[:, : scores.shape[1]]
    if scores.shape[1] >= 2:
        coordinates = scores[:, :2]
        titles = ("first discriminant axis", "second discriminant axis")
        second = scalings[:, 1]
    else:
        # two classes give one discriminant axis; the other axis shows the direction of
        # greatest spread, so that points on the same discriminant value are told apart
        from sklearn.decomposition import PCA

        spread = PCA(n_components=1).fit(values)
        coordinates = np.column_stack([scores[:, 0], spread.transform(values)[:, 0]])
        titles = ("discriminant axis", "first principal component")
        second = spread.components_[0]
        notes.append(Note("one_discriminant", "two classes give one discriminant axis (x); y "
                          "is the first principal component of the same features."))
    loadings = {name: (float(scalings[j, 0]), float(second[j])) for j, name in enumerate(names)}
    return coordinates, {"loadings": loadings, "axis_titles": titles}


def _tsne(values: np.ndarray, perplexity: float, seed: int, notes: list[str]) -> np.ndarray:
    from sklearn.manifold import TSNE

    n = len(values)
    # t-SNE needs perplexity below the number of rows; a third of it keeps neighbourhoods
    # meaningful on tiny tables
    usable = min(perplexity, max(1.0, (n - 1) / 3))
    if usable < perplexity:
        notes.append(Note("perplexity_lowered", f"perplexity lowered from {perplexity:g} to "
                          f"{usable:.3g} for {n} rows.", asked=perplexity, used=usable, rows=n))
    # the PCA start needs two features; with one, start from random positions
    start = "pca" if values.shape[1] >= 2 else "random"
    model = TSNE(n_components=2, perplexity=usable, init=start, random_state=seed)
    return model.fit_transform(values)


def _umap(values: np.ndarray, n_neighbors: int, seed: int, notes: list[str],
          reporter) -> np.ndarray:
    global _umap_has_run
    try:
        from analysis.warmup import import_umap

        # with numba's disk cache set up first, a later process loads UMAP's compiled code
        umap = import_umap()
    except ImportError:
        raise StepError("UMAP needs the package umap-learn, which is not installed; install "
                        "it (pip install umap-learn) or use PCA or t-SNE.") from None
    n = len(values)
    usable = min(n_neighbors, n - 1)
    if usable < n_neighbors:
        notes.append(Note("neighbours_lowered", f"n_neighbors lowered from {n_neighbors} to "
                          f"{usable} for {n} rows.", asked=n_neighbors, used=usable, rows=n))
    if not _umap_has_run:
        notes.append(UMAP_COMPILE_NOTE)
    reporter.phase(f"UMAP: nearest neighbours of {n} rows")
    neighbours = stoppable_call(reporter, _exact_neighbours, values, usable)
    # a fixed random_state makes UMAP deterministic only on one thread
    model = umap.UMAP(n_neighbors=usable, n_components=2, random_state=seed, n_jobs=1,
                      init="spectral" if n > usable + 2 else "random",
                      precomputed_knn=neighbours)
    reporter.phase(f"UMAP: layout of {n} rows")
    coordinates = stoppable_call(reporter, _quiet_fit, model, values)
    _umap_has_run = True
    return np.asarray(coordinates, dtype=float)


def _quiet_fit(model, values: np.ndarray) -> np.ndarray:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return model.fit_transform(values)


def _exact_neighbours(values: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray, None]:
    """Each row's ``k`` nearest rows (itself included) and their distances, found exactly.

    UMAP's own search is approximate and, in a fresh process, compiles for longer than the
    whole projection then takes; a brute-force search by scikit-learn is exact, deterministic
    and, on the 50000-row samples UMAP runs on, faster (bench/RESULTS.md).
    """
    from sklearn.neighbors import NearestNeighbors

    index = NearestNeighbors(n_neighbors=k, algorithm="brute").fit(values).kneighbors(
        values, return_distance=False)
    # distances recomputed from differences: the search's shortcut through dot products
    # leaves rounding noise, and UMAP takes each row's nearest non-zero distance as its
    # scale, so the distance to itself or to a copy of itself must be exactly 0
    distances = np.empty(index.shape, dtype=np.float64)
    for start in range(0, len(values), 10_000):
        block = index[start:start + 10_000]
        differences = values[block] - values[start:start + 10_000, None, :]
        distances[start:start + 10_000] = np.sqrt(np.einsum("ijk,ijk->ij", differences,
                                                            differences))
    # the types UMAP's own search returns, so the same compiled code serves both
    return index.astype(np.int32), distances.astype(np.float32), None


def _two_columns(scores: np.ndarray) -> np.ndarray:
    if scores.shape[1] >= 2:
        return scores[:, :2]
    return np.column_stack([scores[:, 0], np.zeros(len(scores))])


__all__ = ["METHODS", "ProjectionResult", "ProjectionStep", "merge_moments", "moment_scale",
           "moments", "pca_fields", "pca_from_moments", "prepared", "require_spread",
           "sample_positions", "spread", "standardized", "standardizing", "varying"]
