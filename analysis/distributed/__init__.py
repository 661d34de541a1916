"""The steps of a study on a Dask cluster, for tables past one machine's memory.

``run_distributed(step, path)`` reads Parquet (a file or a folder of files) or CSV in
partitions, runs ``step`` on a cluster (a named scheduler, or a local one on 127.0.0.1 for
the length of the call) and returns the step's own result dataclass; its notes say what ran
on a sample. DEVELOPERS.md lists what each kind computes over every row.

Example::

    result = run_distributed(ProjectionStep(method="pca"), "invariants/")
"""

from __future__ import annotations

from pathlib import Path

from analysis.distributed.cluster import open_cluster
from analysis.distributed.source import PartitionedTable, read_partitioned, sample_table
from analysis.errors import StepError

# Step kinds this engine runs, and the module and function that run each.
HANDLERS = {
    "overview": ("analysis.distributed.overview", "run_overview"),
    "projection": ("analysis.distributed.projection", "run_projection"),
    "clustering": ("analysis.distributed.clustering", "run_clustering"),
    "separator": ("analysis.distributed.separation", "run_separator"),
    "relations": ("analysis.distributed.relations", "run_relations"),
    "outliers": ("analysis.distributed.outliers", "run_outliers"),
}


def run_distributed(step, table_path: str | Path, *, scheduler: str | None = None,
                    id_column: str | None = None, roles: dict[str, str] | None = None,
                    client=None, n_workers: int | None = None, processes: bool = False,
                    blocksize: str | int | None = None):
    """Run ``step`` on the table at ``table_path`` on a Dask cluster; return its result.

    step: any step of a study (``make_step(kind, params)``), with the same settings as in
        memory.
    table_path: a Parquet file, a folder of Parquet files (read in file order), or a CSV/TSV
        file (read in blocks of ``blocksize`` bytes, default 64 MB).
    scheduler: address of a running scheduler (``tcp://host:8786``); None starts a local
        cluster on 127.0.0.1 with ``n_workers`` single-threaded workers (default 2) as threads
        of this process (``processes=True`` for separate processes), shut down on return.
    client: an open ``distributed.Client`` to use instead (then ``scheduler``, ``n_workers``
        and ``processes`` are ignored and the client is left open).
    id_column, roles: as for :func:`analysis.table.load_table`.

    The result's notes say that it ran on Dask, over how many partitions, and what was
    exact, streamed or sampled.
    """
    import importlib

    kind = getattr(step, "kind", None)
    if kind not in HANDLERS:
        raise StepError(f"the dask engine runs the steps {', '.join(HANDLERS)}; got {kind!r}.")
    if getattr(step, "intervals", "missing") != "missing":
        raise StepError(f"{kind}: the dask engine reads interval cells as missing values; "
                        f"reading them as their {step.intervals} (intervals: "
                        f"{step.intervals}) is done by the in-memory engine. Leave intervals "
                        "at missing, or run without --engine dask.")
    module_name, function_name = HANDLERS[kind]
    handler = getattr(importlib.import_module(module_name), function_name)

    def run_with(active_client):
        from analysis.distributed.common import Context, with_notes

        options = {} if blocksize is None else {"blocksize": blocksize}
        table = read_partitioned(table_path, active_client, id_column=id_column, roles=roles,
                                 **options)
        ctx = Context(table=table, client=active_client)
        result = handler(step, ctx)
        return with_notes(result, [ctx.engine_note(), *ctx.notes])

    if client is not None:
        return run_with(client)
    with open_cluster(scheduler, n_workers=n_workers, processes=processes) as own:
        return run_with(own)


__all__ = ["HANDLERS", "PartitionedTable", "open_cluster", "read_partitioned",
           "run_distributed", "sample_table"]
