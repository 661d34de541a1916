"""Putting a table or a study on the page: samples, uploads, opened study files."""

from __future__ import annotations

import dataclasses
from pathlib import Path

from analysis.errors import ScoutError
from analysis.steps import STEP_KINDS, step_class
from analysis.study import (
    Study,
    StudyFile,
    TableSettings,
    add_step,
    apply_table_settings,
    read_study_file,
    restore_results,
)
from analysis.table import read_table
from app import state

SAMPLES = Path(__file__).resolve().parent.parent / "sample_tables"
SAMPLE_SUFFIXES = (".csv", ".tsv", ".json", ".jsonl", ".parquet")
FIRST_SAMPLE = "lattice_polygons.csv"
# What each sample is about, shown under the sample picker.
SAMPLE_NOTES = {
    "lattice_polygons.csv": "convex lattice polygons: areas, lattice points, reflexivity",
    "graphs_up_to_7.csv": "graphs on up to 7 vertices: degrees, cycles, spectra, adjacency",
    "quadratic_fields.csv": "quadratic fields: discriminants and class numbers",
    "symmetric_matrices.json": "integer symmetric matrices: signature and definiteness",
    "elliptic_curves.csv": "elliptic curves over small prime fields: point counts",
    "graphs_as_downloaded.csv": "the graph atlas written as a downloaded database writes it: "
                                "intervals, marker words, Y/N flags, a mostly-empty column",
}
# The study the page opens with on the first sample: a picture and an equation.
FIRST_TARGET = "is_reflexive"
UPLOAD_TYPES = ["csv", "tsv", "tab", "txt", "json", "jsonl", "ndjson", "parquet", "pq"]


def available_kinds() -> list[str]:
    """The step kinds whose modules are installed, in study order."""
    kinds = []
    for kind in STEP_KINDS:
        try:
            cls = step_class(kind)
        except (ImportError, AttributeError, ScoutError):
            continue
        if dataclasses.is_dataclass(cls):
            kinds.append(kind)
    return kinds


def sample_names() -> list[str]:
    """The sample tables shipped in sample_tables/, the opening one first."""
    names = sorted(p.name for p in SAMPLES.iterdir()
                   if p.suffix in SAMPLE_SUFFIXES and p.is_file())
    if FIRST_SAMPLE in names:
        names.remove(FIRST_SAMPLE)
        names.insert(0, FIRST_SAMPLE)
    return names


def load_bytes(name: str, data: bytes, *, sample: bool) -> state.TableState:
    """Read a table (TableError when it cannot be read); the bytes are kept unchanged."""
    base = read_table(data, name)
    return state.TableState(name=name, data=data, base=base, sample=sample, table=base,
                            settings=TableSettings(id_column=base.id_column))


def load_sample(name: str) -> state.TableState:
    return load_bytes(name, (SAMPLES / name).read_bytes(), sample=True)


def opening_study(table, *, sample: bool = False) -> Study:
    """A short first study: overview and PCA; on the opening sample also a separator for
    its flag (a real equation on the first screen) and relations and bounds."""
    study = Study(table=table.name, title=f"Study of {table.name}", table_digest=table.digest,
                  table_settings=TableSettings(id_column=table.id_column))
    target = FIRST_TARGET if sample and table.name == FIRST_SAMPLE else None
    kinds = available_kinds()
    plan = [("overview", {}), ("projection", {"method": "pca", "target": target})]
    if target is not None:
        study = dataclasses.replace(study, title=f"What decides {target}?")
        plan += [("separator", {"target": target}), ("relations", {})]
    for kind, params in plan:
        if kind in kinds:
            study = add_step(study, kind, params)
    return study


def put_table(table_state: state.TableState) -> None:
    """Show a newly loaded table. The table on the page is put aside with its study; a table
    loaded before in this session (the same bytes) comes back with its own study and
    results, any other gets a fresh short study, run at once."""
    state.page().pending = None
    state.keep_current()
    kept = state.kept_for(table_state.base.digest)
    if kept is not None:
        state.resume(kept, table_state)
        return
    state.set_table(table_state)
    study = opening_study(table_state.base, sample=table_state.sample)
    state.page().focus = {"target": _first_target(study)}
    state.start_study(study)


def _first_target(study: Study):
    for step in study.steps:
        if step.params.get("target"):
            return step.params["target"]
    return None


def read_study(name: str, data: bytes) -> StudyFile:
    """A study file from the bytes of an upload (StudyError with the file name)."""
    return read_study_file(data, name)


def open_study(opened: StudyFile | Study) -> str | None:
    """Put an opened study on the page, with its own table when it can be found.

    The study names its table: the loaded table when the name or digest agrees, else a
    sample of that name. Otherwise the study runs on the loaded table, and the returned
    sentence says so. A study saved with its results shows them at once when the table has
    the bytes they were computed on; on another table its settings are kept, nothing runs,
    and the sentence says why.
    """
    if isinstance(opened, Study):
        opened = StudyFile(study=opened)
    study = opened.study
    current = state.table_state()
    chosen = current
    note = None
    if current is None or (study.table != current.name
                           and study.table_digest != current.base.digest):
        if study.table in sample_names():
            chosen = load_sample(study.table)
        elif current is not None:
            note = (f"This study was saved with the table {study.table}, which is not loaded; "
                    f"it runs on {current.name}. Load {study.table} to repeat its numbers.")
    # Check the study's id column and roles against the table before anything changes.
    apply_table_settings(study, chosen.base)
    if chosen is not current:
        state.keep_current()
        state.set_table(chosen)
        state.page().show_sample = chosen.name
    chosen.table = chosen.base
    chosen.settings = TableSettings(id_column=chosen.base.id_column)
    state.start_study(study)
    state.page().focus = {"target": _first_target(study)}
    if opened.saved is not None:
        note = _saved_note(opened, chosen)
    return note


def _saved_note(opened: StudyFile, chosen: state.TableState) -> str:
    """Put the saved results on the page when they fit the table; nothing runs either way."""
    saved = opened.saved
    state.page().run_all = False
    restored = restore_results(opened.study, saved, state.table_state().table, state.cache())
    if restored or saved.fits(chosen.base):
        return (f"Opened with the results saved in the study file ({restored} of "
                f"{len(opened.study.steps)} steps), computed on these very contents of "
                f"{chosen.name}; nothing was run. Run a step again to compute it afresh.")
    return (f"The results saved in this study file were computed on a table with other "
            f"contents (sha256 {saved.table_digest[:12]}…) than {chosen.name} "
            f"(sha256 {chosen.base.digest[:12]}…), so they are not shown. The study's "
            "settings are kept; run every step to compute its results on this table.")
