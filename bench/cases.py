"""What each benchmark measures: one of our steps and the bare library calls it stands beside.

Run as a worker by bench/run.py, one fresh process per (case, side, repeat)::

    python bench/cases.py CASE SIDE --csv T.csv --parquet T.parquet

The worker prepares its input (untimed: imports, reading the table, warm-up fits), then
times the measured call alone and prints one JSON line: seconds, the resident memory before
the call, its peak during the call, and a check of what was computed (so that the report can
show both sides computed the same thing).

Both sides get the same data: ours starts from the :class:`analysis.table.Table` the program
loads, the bare side from the frame pandas reads from the same Parquet file. Modules that a
step imports when first used are imported before the clock starts on both sides, so neither
side pays for an import inside the measured call.
"""

from __future__ import annotations

import argparse
import gc
import json
import sys
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))
HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

TARGET = "label"
SEED = 0
K = 4
# Rows at which our steps switch to their large-table methods (kept in step with
# analysis.clustering.MINIBATCH_ROWS, analysis.separation.SeparatorStep.kernel_row_limit,
# analysis.projection.SAMPLE_THRESHOLDS and analysis.outliers.OutliersStep.sample_size).
MINIBATCH_ROWS = 100_000
KERNEL_ROW_LIMIT = 20_000
UMAP_SAMPLE = 50_000
LOF_SAMPLE = 20_000
NYSTROEM_COMPONENTS = 1000
NYSTROEM_FIT_ROWS = 50_000      # analysis.separation.NYSTROEM_FIT_ROWS
PREDICT_BLOCK_ROWS = 20_000


@dataclass(frozen=True)
class Case:
    """One benchmark: what ours and the bare side do, and what the comparison means."""

    name: str
    title: str
    ours: str
    bare: str
    goal: float | None = 1.15        # ours / bare at most this, at the goal size
    goal_rows: int | None = 100_000
    note: str = ""
    # more (rows, ratio) goals of the same kind as goal and goal_rows
    more_goals: tuple[tuple[int, float], ...] = ()
    # a goal against another case's ours side instead of the bare side: (case, rows, ratio)
    goal_against: tuple[str, int, float] | None = None
    # a case on a table of its own, run once at this many rows (not at every --sizes size)
    rows: int | None = None
    # seconds the ours side may take at most (a bound, not a ratio)
    limit_seconds: float | None = None


CASES: dict[str, Case] = {c.name: c for c in [
    Case("load_csv", "load CSV", "load_table(T.csv): parse, type every column, roles, "
         "distinct counts, digest", "pandas.read_csv(T.csv)",
         note="ours does more: it types each column, counts distinct values and hashes the "
              "bytes; the goal is not applied to loading."
              , goal=None),
    Case("load_parquet", "load Parquet", "load_table(T.parquet)",
         "pandas.read_parquet(T.parquet)",
         note="ours does more (typing, distinct counts, digest); no goal at this size.",
         goal=None),
    Case("pca", "PCA", "ProjectionStep(method='pca'): features, standardize, PCA, loadings",
         "StandardScaler + sklearn PCA(n_components=20).fit_transform on the same 20 columns"),
    Case("kmeans_fit", "k-means (matching part)",
         "ClusteringStep(method='kmeans', k=4) with its silhouette and cluster profiles "
         "switched off: features, standardize, k-means, clusters numbered by size",
         "StandardScaler + sklearn KMeans(4, n_init=4, random_state=0); MiniBatchKMeans("
         "batch_size=4096, n_init=3) past 100000 rows, as ours"),
    Case("kmeans", "k-means (whole step)", "ClusteringStep(method='kmeans', k=4): k-means, a "
         "silhouette on a 5000-row sample, cluster profiles", "as k-means (matching part)",
         goal=None, note="ours also scores a silhouette on 5000 rows and profiles the "
                         "clusters; no goal."),
    Case("separator_fit", "linear separator (one fit)",
         "SeparatorStep(target='label'): features, labels, split 1, the fit and its "
         "predictions (the rest of the protocol switched off)",
         "StandardScaler + LinearSVC(dual=False, class_weight='balanced') fitted on the same "
         "stratified half, predicting the other half",
         note="the matching part of the separator: one fit of its validation protocol."),
    Case("separate", "linear separator (whole step)",
         "SeparatorStep(target='label'): 5 splits, bootstrap interval, baseline, permutation "
         "p-value, learning curve, fit on every row, exact equation checked on every row",
         "one scaled LinearSVC fit on half the rows (as separator_fit)",
         goal=3.0, goal_rows=1_000_000, more_goals=((10_000, 10.0), (100_000, 10.0)),
         note="the whole protocol against one bare fit; goals 10x at 10k and 100k rows, 3x at "
              "1M rows."),
    Case("kernel_fit", "kernel separator (one fit)",
         "SeparatorStep(target='label', model='rbf', kernel_approximation='auto'): split 1, "
         "the fit and its predictions",
         "StandardScaler + SVC(rbf) on the same half; past 20000 rows StandardScaler + "
         "Nystroem(1000 components) + LinearSVC, fitted on at most 50000 training rows, as "
         "ours, and predicting through the Nystroem features in blocks of 20000 rows",
         note="the matching part of the kernel separator. Ours predicts a Nystroem machine "
              "through its kernel against the components (the same values without the "
              "features), so past 20000 rows it does less work than the bare pipeline."),
    Case("kernel_separate", "kernel separator (whole step)",
         "SeparatorStep(target='label', model='rbf', kernel_approximation='auto')",
         "one kernel fit on half the rows (as kernel_fit)", goal=10.0, goal_rows=100_000,
         more_goals=((10_000, 10.0),),
         note="the whole protocol against one bare fit; goal 10x at 10k and 100k rows."),
    Case("umap", "UMAP", "ProjectionStep(method='umap'): a 50000-row sample past 50000 rows",
         "StandardScaler + umap.UMAP(n_neighbors=15, random_state=0, n_jobs=1) on the same "
         "rows",
         note="both sides compiled beforehand by a small untimed fit in the same process."),
    Case("relations", "relations (exact relations only)",
         "RelationsStep(bounds=False, robust=False, congruences=False): the exact integer "
         "relation lattice, "
         "LLL-reduced and checked on every row",
         "numpy SVD of [columns | 1] (the real null space, in floating point)",
         note="ours is exact and checks every row; the bare call only finds the floating-"
              "point null space."),
    Case("relations_full", "relations (whole step)", "RelationsStep(): relations, robust "
         "relations, sharp bounds in pairs and triples", "numpy SVD of [columns | 1]",
         goal=None, goal_against=("relations", 100_000, 20.0),
         note="the whole step does much more than the bare call; goal: at most 20x its "
              "exact-relations part (the relations case, ours) at 100k rows."),
    Case("matrix_separate", "separator on 16x16 matrices (whole step)",
         "SeparatorStep(target='low_rank') on a 13000-row table whose column m holds a 16x16 "
         "integer matrix in every row (compact features: rank, trace, determinant, spectra), "
         "with two integer columns and the flag rank <= 13 (bench/data.py)",
         "numpy singular values of every matrix (one batched SVD), then one scaled LinearSVC "
         "fit on a stratified half of them, predicting the other half",
         goal=None, rows=13_000, limit_seconds=60.0,
         note="the whole protocol on matrix cells; goal: at most 60 s on 2 cores."),
    Case("outliers_fit", "outliers (matching part)",
         "OutliersStep(k=4, relations=False) with the distance-from-centre measure switched "
         "off: features, standardize, isolation forest, local outlier factor (fitted on a "
         "20000-row sample past that), ranking with reasons",
         "StandardScaler + IsolationForest(200 trees) + LocalOutlierFactor(20 neighbours, "
         "novelty scoring against the same 20000-row sample past that size)",
         note="ours also ranks the rows and words the reasons."),
    Case("outliers", "outliers (whole step)", "OutliersStep(k=4, relations=False): as above "
         "plus the distance from the k-means centre (a clustering step run inside)",
         "as outliers (matching part)", goal=None,
         note="ours also runs a k-means clustering step for the distance from the centre; no "
              "goal."),
]}


# ----------------------------------------------------------------------------------------
# Memory: resident set size now, and its peak since the last reset (Linux /proc)


def _status_kb(field: str) -> int | None:
    try:
        with open("/proc/self/status") as handle:
            for line in handle:
                if line.startswith(field + ":"):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


def reset_peak() -> bool:
    """Reset the kernel's record of peak resident memory (VmHWM); False where unsupported."""
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")
        return True
    except OSError:
        return False


def rss_mb() -> float:
    kb = _status_kb("VmRSS")
    if kb is None:
        import resource

        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return kb / 1024


def peak_mb() -> float:
    kb = _status_kb("VmHWM")
    if kb is None:
        import resource

        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return kb / 1024


# ----------------------------------------------------------------------------------------
# Shared preparation


def _table(paths):
    from analysis.table import load_table

    return load_table(paths["parquet"])


def _frame(paths):
    import pandas as pd

    return pd.read_parquet(paths["parquet"])


def _standardized(frame, columns=None):
    import numpy as np
    from sklearn.preprocessing import StandardScaler

    values = frame.to_numpy(dtype=np.float64) if columns is None \
        else frame[columns].to_numpy(dtype=np.float64)
    return StandardScaler().fit_transform(values)


def _features_and_labels(frame):
    import numpy as np

    features = [c for c in frame.columns if c != TARGET]
    return frame[features].to_numpy(dtype=np.float64), frame[TARGET].to_numpy().astype(np.int64)


def _half_split(y):
    import numpy as np
    from sklearn.model_selection import StratifiedShuffleSplit

    splitter = StratifiedShuffleSplit(n_splits=1, train_size=0.5, random_state=SEED)
    train, test = next(splitter.split(np.zeros(len(y)), y))
    return np.sort(train), np.sort(test)


def _linear_pipeline():
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import LinearSVC

    return make_pipeline(StandardScaler(), LinearSVC(C=1.0, dual=False,
                                                     class_weight="balanced", max_iter=5000))


def _kernel_pipeline(n_rows: int):
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    if n_rows > KERNEL_ROW_LIMIT:
        from sklearn.kernel_approximation import Nystroem
        from sklearn.svm import LinearSVC

        return make_pipeline(StandardScaler(),
                             Nystroem(kernel="rbf", n_components=NYSTROEM_COMPONENTS,
                                      random_state=SEED),
                             LinearSVC(C=1.0, dual=False, class_weight="balanced",
                                       max_iter=5000))
    from sklearn.svm import SVC

    return make_pipeline(StandardScaler(), SVC(kernel="rbf", C=1.0, gamma="scale",
                                               class_weight="balanced"))


def _bare_fit(frame, pipeline_of, fit_rows: int | None = None):
    """The bare side of a separator: a fit on a stratified half, predictions on the other.

    With ``fit_rows``, the fit uses a stratified sample of that many training rows when there
    are more, and predictions are made in blocks of rows (as ours does for Nystroem machines,
    whose features would otherwise take gigabytes).
    """
    import numpy as np
    from sklearn.model_selection import train_test_split

    X, y = _features_and_labels(frame)
    train, test = _half_split(y)
    if fit_rows is not None and len(train) > fit_rows:
        train, _ = train_test_split(train, train_size=fit_rows, stratify=y[train],
                                    random_state=SEED)
    model = pipeline_of(len(y)).fit(X[train], y[train])
    if fit_rows is None:
        predicted = model.predict(X[test])
    else:
        predicted = np.concatenate([model.predict(X[test[s:s + PREDICT_BLOCK_ROWS]])
                                    for s in range(0, len(test), PREDICT_BLOCK_ROWS)])
    return {"test_accuracy": round(float(np.mean(predicted == y[test])), 4),
            "train_rows": int(len(train))}


def _one_split_step(table, **settings):
    """Our separator run with its protocol cut down to split 1's fit and predictions.

    Everything before the protocol (features, labels, the choice of kernel method, the check
    whether the target follows from the features) runs as in a full run; then the real split
    function and the real fitting recipe are used once.
    """
    import numpy as np

    from analysis.progress import quiet
    from analysis.separation import SeparatorStep
    from analysis.separator_models import fit, predict
    from analysis.separator_prepare import RunLog, prepare, target_follows
    from analysis.separator_protocol import make_splits

    step = SeparatorStep(target=TARGET, seed=SEED, **settings)
    step.check()
    run = prepare(step, table, quiet(None), RunLog())
    target_follows(run)
    strata = None if run.regression else run.y
    splits, _ = make_splits(len(run.y), strata, run.group_labels, float(step.train_fraction),
                            1, step.seed, table.name)
    train, test = splits[0]
    model = fit(run, train)
    predicted = predict(model, run.X[test])
    return {"test_accuracy": round(float(np.mean(predicted == run.y[test])), 4),
            "train_rows": int(len(train))}


def _separator_check(result) -> dict:
    check = {"mcc": round(float(result.metrics.get("mcc", float("nan"))), 4),
             "permutation_p": result.permutation_p}
    equation = result.equation
    if equation is not None:
        check["equation"] = equation.text
        check["violations"] = int(equation.violations)
    elif result.surrogate is not None:
        check["surrogate"] = result.surrogate.text
    if result.kernel_method:
        check["kernel"] = result.kernel_method
    notes = [n for n in result.notes if "sample" in n or "approximate" in n]
    if notes:
        check["large_table_notes"] = notes[:4]
    if result.phase_seconds and result.elapsed_seconds > 0:
        # each part's share of the whole step, largest first
        shares = sorted(result.phase_seconds, key=lambda kv: -kv[1])
        check["shares"] = {name: round(seconds / result.elapsed_seconds, 3)
                           for name, seconds in shares}
    return check


def _svd_relations(frame):
    import numpy as np

    values = frame.to_numpy(dtype=np.float64)
    matrix = np.column_stack([values, np.ones(len(values))])
    _, singular, right = np.linalg.svd(matrix, full_matrices=False)
    null = int(np.sum(singular < singular[0] * 1e-10))
    return {"relations": null}


def _umap_warm(fit: Callable) -> None:
    """A small untimed fit in this process, so neither side's timing includes compiling."""
    fit()


# ----------------------------------------------------------------------------------------
# The cases: each returns (prepare, run) for a side; prepare is untimed


def prepare(case: str, side: str, paths: dict):
    """Return the zero-argument function to time, after untimed preparation."""
    import numpy as np  # noqa: F401 - imported before the clock for both sides

    import analysis.features  # noqa: F401
    import analysis.table  # noqa: F401

    if case == "load_csv":
        if side == "ours":
            from analysis.table import load_table

            return lambda: _shape(load_table(paths["csv"]).frame)
        import pandas as pd

        return lambda: _shape(pd.read_csv(paths["csv"]))
    if case == "load_parquet":
        if side == "ours":
            from analysis.table import load_table

            return lambda: _shape(load_table(paths["parquet"]).frame)
        import pandas as pd

        return lambda: _shape(pd.read_parquet(paths["parquet"]))
    if case == "pca":
        import sklearn.decomposition  # noqa: F401
        import sklearn.preprocessing  # noqa: F401

        if side == "ours":
            from analysis.projection import ProjectionStep

            table = _table(paths)

            def ours():
                result = ProjectionStep(method="pca", seed=SEED).run(table)
                return {"explained_variance_ratio": [round(r, 6) for r in
                                                     result.explained_variance_ratio[:3]]}
            return ours
        frame = _frame(paths)

        def bare():
            from sklearn.decomposition import PCA

            model = PCA(n_components=frame.shape[1])
            model.fit_transform(_standardized(frame))
            return {"explained_variance_ratio": [round(float(r), 6) for r in
                                                 model.explained_variance_ratio_[:3]]}
        return bare
    if case in ("kmeans", "kmeans_fit"):
        import sklearn.cluster  # noqa: F401
        import sklearn.metrics  # noqa: F401

        if side == "ours":
            from analysis import clustering
            from analysis.clustering import ClusteringStep

            table = _table(paths)
            if case == "kmeans_fit":
                # the matching part: no silhouette (no distances between sampled rows, and a
                # scorer that says "none") and no profiles
                class NoSilhouette:
                    def __init__(self, *args, **kwargs):
                        pass

                    def __call__(self, labels):
                        return None

                for name in ("Silhouette", "_profiles"):
                    if not hasattr(clustering, name):   # a renamed part would go unmeasured
                        raise RuntimeError(f"analysis.clustering has no {name} to switch off")
                clustering.Silhouette = NoSilhouette
                clustering._profiles = lambda table, fm, labels: ()

            def ours():
                result = ClusteringStep(method="kmeans", k=K, seed=SEED).run(table)
                sizes = np.bincount(result.labels[result.labels >= 0])
                return {"sizes": sorted(sizes.tolist(), reverse=True),
                        "notes": [n for n in result.notes if "mini-batch" in n]}
            return ours
        frame = _frame(paths)

        def bare():
            from sklearn.cluster import KMeans, MiniBatchKMeans

            values = _standardized(frame)
            if len(values) > MINIBATCH_ROWS:
                model = MiniBatchKMeans(n_clusters=K, random_state=SEED, batch_size=4096,
                                        n_init=3)
            else:
                model = KMeans(n_clusters=K, random_state=SEED, n_init=4)
            labels = model.fit_predict(values)
            return {"sizes": sorted(np.bincount(labels).tolist(), reverse=True)}
        return bare
    if case in ("separator_fit", "separate", "kernel_fit", "kernel_separate"):
        import scipy.optimize  # noqa: F401 - the exact equation search's linear programs
        import sklearn.compose  # noqa: F401
        import sklearn.discriminant_analysis  # noqa: F401
        import sklearn.inspection  # noqa: F401 - permutation importance
        import sklearn.kernel_approximation  # noqa: F401
        import sklearn.model_selection  # noqa: F401
        import sklearn.pipeline  # noqa: F401
        import sklearn.svm  # noqa: F401

        # the modules the step imports when it first needs them (the target check, the
        # permutation test, importance): their import, and with no bytecode cached their
        # compiling, is no part of the step's time
        import analysis.derived  # noqa: F401
        import analysis.equations  # noqa: F401
        import analysis.importance  # noqa: F401
        import analysis.leakage  # noqa: F401
        import analysis.permutation  # noqa: F401
        import analysis.refits  # noqa: F401
        import analysis.relations  # noqa: F401
        import analysis.scaling  # noqa: F401
        import analysis.separation  # noqa: F401

        kernel = case.startswith("kernel")
        settings = {"model": "rbf", "kernel_approximation": "auto"} if kernel else {}
        if side == "ours":
            table = _table(paths)
            if case.endswith("_fit"):
                return lambda: _one_split_step(table, **settings)
            from analysis.separation import SeparatorStep

            return lambda: _separator_check(
                SeparatorStep(target=TARGET, seed=SEED, **settings).run(table))
        frame = _frame(paths)
        if kernel:
            return lambda: _bare_fit(frame, _kernel_pipeline, fit_rows=NYSTROEM_FIT_ROWS)
        return lambda: _bare_fit(frame, lambda n: _linear_pipeline())
    if case == "matrix_separate":
        return _matrix_case(side, paths)
    if case == "umap":
        from analysis.warmup import configure_numba_cache

        configure_numba_cache()
        if side == "ours":
            from analysis.projection import ProjectionStep
            from analysis.table import read_table

            table = _table(paths)
            small = read_table(_small_csv(), "warm.csv")
            _umap_warm(lambda: ProjectionStep(method="umap", seed=SEED).run(small))

            def ours():
                result = ProjectionStep(method="umap", seed=SEED).run(table)
                return {"rows_projected": int(result.n_projected), "sampled": result.sampled}
            return ours
        import umap

        frame = _frame(paths)
        values = _standardized(frame)
        n = len(values)
        if n > UMAP_SAMPLE:
            rng = np.random.default_rng(SEED)
            values = values[np.sort(rng.choice(n, size=UMAP_SAMPLE, replace=False))]
        warm = np.random.default_rng(1).normal(size=(300, values.shape[1]))

        def fit(data, force=False):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return umap.UMAP(n_neighbors=15, random_state=SEED, n_jobs=1,
                                 force_approximation_algorithm=force).fit_transform(data)

        # compile both of UMAP's neighbour paths (exact for small data, NN-descent for large)
        _umap_warm(lambda: (fit(warm), fit(warm, force=True)))
        return lambda: {"rows_projected": int(len(fit(values)))}
    if case in ("relations", "relations_full"):
        if side == "ours":
            # imports outside the clock, as for the other cases: the bound search's hulls and
            # its few linear programmes
            import scipy.optimize  # noqa: F401
            import scipy.spatial  # noqa: F401

            import analysis.congruences  # noqa: F401
            from analysis.relations import RelationsStep

            table = _table(paths)
            # the exact part alone: no bounds, no robust relations, no congruences (which the
            # step searches too, since a later change, and which took most of its second)
            settings = {"bounds": False, "robust": False, "congruences": False} \
                if case == "relations" else {}

            def ours():
                result = RelationsStep(seed=SEED, **settings).run(table)
                return {"relations": [r.text for r in result.relations
                                      if not getattr(r, "trivial", False)][:4],
                        "bounds": len(getattr(result, "bounds", ()))}
            return ours
        frame = _frame(paths)
        return lambda: _svd_relations(frame)
    if case in ("outliers", "outliers_fit"):
        import sklearn.cluster  # noqa: F401
        import sklearn.ensemble  # noqa: F401
        import sklearn.neighbors  # noqa: F401

        if side == "ours":
            from analysis import outliers
            from analysis.outliers import OutliersStep

            table = _table(paths)
            if case == "outliers_fit":
                # the matching part: the distance-from-centre measure gives every row 0, so
                # the step leaves it out, as it does any measure that tells no rows apart
                def no_centre(self, table, fm, values, notes):
                    return outliers.Measure(np.zeros(len(values)), None, None,
                                             "switched off for the benchmark"), None

                OutliersStep._centre_distance = no_centre

            def ours():
                result = OutliersStep(k=K, relations=False, seed=SEED).run(table)
                return {"measures": list(result.measures), "top_rows": [
                    int(o.row) for o in result.outliers[:3]]}
            return ours
        frame = _frame(paths)

        def bare():
            from sklearn.ensemble import IsolationForest
            from sklearn.neighbors import LocalOutlierFactor

            values = _standardized(frame)
            n = len(values)
            forest = -IsolationForest(n_estimators=200, random_state=SEED).fit(
                values).score_samples(values)
            if n <= LOF_SAMPLE:
                factor = -LocalOutlierFactor(n_neighbors=20).fit(values).negative_outlier_factor_
            else:
                rng = np.random.default_rng(SEED)
                sample = np.sort(rng.choice(n, size=LOF_SAMPLE, replace=False))
                model = LocalOutlierFactor(n_neighbors=20, novelty=True).fit(values[sample])
                factor = -model.score_samples(values)
            return {"strangest_by_forest": int(np.argmax(forest)),
                    "strangest_by_factor": int(np.argmax(factor))}
        return bare
    raise SystemExit(f"unknown case {case!r}; cases are {', '.join(CASES)}")


def _matrix_case(side: str, paths: dict):
    """The separator on the matrix table (bench/data.py, ensure_matrix_table)."""
    import numpy as np
    import scipy.optimize  # noqa: F401 - the exact equation search's linear programs
    import sklearn.model_selection  # noqa: F401
    import sklearn.svm  # noqa: F401
    from data import MATRIX_COLUMN, MATRIX_TARGET

    import analysis.equations  # noqa: F401
    import analysis.separation  # noqa: F401

    if side == "ours":
        from analysis.separation import SeparatorStep
        from analysis.table import load_table

        table = load_table(paths["csv"])
        return lambda: _separator_check(SeparatorStep(target=MATRIX_TARGET, seed=SEED)
                                        .run(table))
    import pandas as pd

    frame = pd.read_csv(paths["csv"])
    matrices = np.array([json.loads(cell) for cell in frame[MATRIX_COLUMN]], dtype=np.float64)
    y = (frame[MATRIX_TARGET].astype(str).str.lower() == "true").to_numpy().astype(np.int64)

    def bare():
        singular = np.linalg.svd(matrices, compute_uv=False)
        train, test = _half_split(y)
        model = _linear_pipeline().fit(singular[train], y[train])
        predicted = model.predict(singular[test])
        return {"test_accuracy": round(float(np.mean(predicted == y[test])), 4),
                "train_rows": int(len(train))}
    return bare


def _shape(frame) -> dict:
    return {"rows": int(frame.shape[0]), "columns": int(frame.shape[1]),
            "frame_mb": round(float(frame.memory_usage(index=True, deep=True).sum()) / 2**20,
                              1)}


def _small_csv() -> bytes:
    import numpy as np

    rng = np.random.default_rng(1)
    values = rng.integers(2, 40, size=(300, 20))
    lines = [",".join(f"c{j:02d}" for j in range(20))]
    lines += [",".join(map(str, row)) for row in values.tolist()]
    return ("\n".join(lines) + "\n").encode()


def measure(case: str, side: str, paths: dict) -> dict:
    """Prepare (untimed), then time one call and record its memory."""
    work = prepare(case, side, paths)
    gc.collect()
    exact_peak = reset_peak()
    before = rss_mb()
    cpu_started = time.process_time()
    started = time.perf_counter()
    check = work()
    seconds = time.perf_counter() - started
    cpu_seconds = time.process_time() - cpu_started
    peak = peak_mb()
    return {"case": case, "side": side, "seconds": seconds, "cpu_seconds": cpu_seconds,
            "rss_before_mb": round(before, 1),
            "peak_mb": round(peak, 1), "peak_increase_mb": round(max(0.0, peak - before), 1),
            "peak_is_exact": exact_peak, "check": check}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("case", choices=sorted(CASES))
    parser.add_argument("side", choices=["ours", "bare"])
    parser.add_argument("--csv", required=True)
    parser.add_argument("--parquet", required=True)
    args = parser.parse_args(argv)
    outcome = measure(args.case, args.side, {"csv": args.csv, "parquet": args.parquet})
    print(json.dumps(outcome, default=str))
    return 0


if __name__ == "__main__":
    sys.exit(main())
