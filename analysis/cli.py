"""The command line: ``python -m analysis SUBCOMMAND TABLE ...``.

Every subcommand reads any supported table, prints a short human summary and, with
``--json PATH``, writes its full result as JSON. Bad input ends with one line on stderr and
exit status 2, never a traceback. The subcommands build the same steps a study holds, so the
command line and the app give the same numbers. When stderr is a terminal, a running step's
phases ("fitting the splits 2 of at most 5", "permutation test ...") are shown there, one line
rewritten in place per phase; piped or redirected, stderr gets none of them.
"""

from __future__ import annotations

import argparse
import inspect as _inspect_module
import json
import sys
from pathlib import Path

from analysis.errors import ScoutError, StepError

EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 1
# The console command `pip install` makes (pyproject.toml, [project.scripts]).
COMMAND_NAME = "invariant-scout"


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.handler(args)
    except ScoutError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:
        # the reader (e.g. `| head`) stopped listening; that is not an error of ours
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except KeyboardInterrupt:
        print("stopped.", file=sys.stderr)
        return 130
    except MemoryError:
        print("error: out of memory. Try a sample of the table, fewer columns, or "
              "--engine dask on a Parquet file.", file=sys.stderr)
        return EXIT_BAD_INPUT
    except Exception as exc:  # noqa: BLE001 - the last line of defence against a traceback
        if getattr(args, "debug", False):
            raise
        print(f"internal error ({type(exc).__name__}: {exc}). This is a bug in Invariant "
              "Scout, not in your table; run again with --debug and report the output.",
              file=sys.stderr)
        return EXIT_INTERNAL


def build_parser() -> argparse.ArgumentParser:
    """The command line's parser: every subcommand with its options (a step's from its setting
    records)."""
    parser = argparse.ArgumentParser(
        prog=_program_name(),
        description="Find patterns in a table of computed invariants.",
    )
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    inspect = _command(commands, "inspect", "columns, roles, types, missing values, warnings")
    inspect.set_defaults(handler=_inspect, kind="overview")

    project = _command(commands, "project", "a 2-d picture of the table (PCA, UMAP, t-SNE, LDA)")
    _step_options(project, "projection")
    project.set_defaults(handler=_step, kind="projection")

    cluster = _command(commands, "cluster", "groups of similar objects, with a sweep over k")
    _step_options(cluster, "clustering")
    cluster.set_defaults(handler=_step, kind="clustering")

    separate = _command(commands, "separate",
                        "is TARGET predictable from the other invariants, and by what equation")
    chosen = separate.add_mutually_exclusive_group(required=True)
    _option(chosen, _record("separator", "target"))
    chosen.add_argument("--breaks", metavar="STATEMENT",
                        help="a relation, bound or congruence as the relations step writes it "
                             "(e.g. 'h11 - num_factors >= 0'); the target is then whether an "
                             "object breaks it")
    _step_options(separate, "separator", skip=("target",))
    separate.set_defaults(handler=_step, kind="separator")

    relations = _command(commands, "relations",
                         "exact linear relations and sharp bounds among invariants")
    _step_options(relations, "relations")
    relations.set_defaults(handler=_step, kind="relations")

    outliers = _command(commands, "outliers", "a ranked list of objects to look at by hand")
    _step_options(outliers, "outliers", then=lambda: outliers.add_argument(
        "--csv", metavar="PATH", help="also write the list as CSV"))
    outliers.set_defaults(handler=_step, kind="outliers")

    run = commands.add_parser("run", help="re-run a saved study and write its report")
    run.add_argument("study", metavar="STUDY.json")
    run.add_argument("--table", metavar="TABLE", help="the table (default: the one the study "
                     "names, relative to the study file)")
    run.add_argument("--out", metavar="report.html", help="write the HTML report here")
    run.add_argument("--json", metavar="PATH", help="write every step's result as JSON")
    run.add_argument("--id", metavar="COL")
    run.add_argument("--limit", action="append", default=[], metavar="NAME=N",
                     help="raise a table limit, as for the other commands")
    run.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)
    run.set_defaults(handler=_run)

    report = _command(commands, "report", "a default study of the table as one HTML file")
    report.add_argument("--target", metavar="COL")
    report.add_argument("--out", metavar="report.html", required=True)
    report.add_argument("--study-out", metavar="STUDY.json", help="also save the study")
    report.set_defaults(handler=_report)
    return parser


def _program_name() -> str:
    """How the user started us: the installed command's name, else ``python -m analysis``."""
    called = Path(sys.argv[0]).name if sys.argv and sys.argv[0] else ""
    return called if called == COMMAND_NAME else "python -m analysis"


def _command(commands, name: str, help_text: str) -> argparse.ArgumentParser:
    sub = commands.add_parser(name, help=help_text, description=help_text)
    sub.add_argument("table", metavar="TABLE", help="CSV, TSV, JSON, JSON Lines or Parquet")
    sub.add_argument("--id", metavar="COL", help="the column that names each object")
    sub.add_argument("--seed", type=int, default=0)
    sub.add_argument("--json", metavar="PATH", help="write the full result as JSON")
    sub.add_argument("--engine", choices=["local", "dask"], default="local")
    sub.add_argument("--scheduler", metavar="ADDRESS",
                     help="dask scheduler address (default: a local cluster on 127.0.0.1)")
    sub.add_argument("--limit", action="append", default=[], metavar="NAME=N",
                     help="raise a table limit, e.g. --limit max_rows=50000000 "
                          "(max_rows, max_columns, max_bytes, max_cell, max_array, max_depth)")
    sub.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)
    return sub


def _records(kind: str) -> tuple:
    from analysis.steps import step_settings

    return tuple(record for record in step_settings(kind) if record.option)


def _record(kind: str, name: str):
    return next(record for record in _records(kind) if record.name == name)


def _step_options(sub: argparse.ArgumentParser, kind: str, *, skip: tuple = (),
                  then=None) -> None:
    """The options of a kind's settings that the command line offers, from the step's
    records: its own settings first, then ``then()`` (the subcommand's other options), then
    the shared feature settings."""
    from analysis.settings import FEATURE_SETTINGS

    shared = {record.name for record in FEATURE_SETTINGS}
    records = [record for record in _records(kind) if record.name not in skip]
    for record in records:
        if record.name not in shared:
            _option(sub, record)
    if then is not None:
        then()
    for record in records:
        if record.name in shared:
            _option(sub, record)


def _option(sub, record) -> None:
    """One option from a setting's record: its choices, its number type, its words. The
    default stays the step's own (an option not given is not passed)."""
    kind = record.base_type
    extra: dict = {}
    if record.choices:
        extra["choices"] = record.values
    elif kind in (int, float):
        extra["type"] = kind
    if record.metavar:
        extra["metavar"] = record.metavar
    if record.option_help:
        extra["help"] = record.option_help
    sub.add_argument(record.option, dest=record.name, **extra)


def _split(text: str | None) -> list[str] | None:
    if text is None:
        return None
    names = [part.strip() for part in text.split(",") if part.strip()]
    if not names:
        raise StepError("an empty column list; name columns separated by commas.")
    return names


def _params(args: argparse.Namespace) -> dict:
    """Step parameters from the options the subcommand has."""
    params: dict = {"seed": args.seed}
    for record in _records(args.kind):
        value = getattr(args, record.name, None)
        if record.base_type is list:
            if value:
                params[record.name] = _split(value)
        elif value is not None:
            params[record.name] = value
    if getattr(args, "breaks", None):
        from analysis.derived import Statement

        params["target_statement"] = Statement.parse(args.breaks).to_json()
    return params


def _limits(args: argparse.Namespace):
    """Table limits from repeated --limit NAME=N options."""
    import dataclasses

    from analysis.table import Limits

    names = [f.name for f in dataclasses.fields(Limits)]
    changes = {}
    for item in getattr(args, "limit", None) or []:
        name, _, value = item.partition("=")
        name = name.strip()
        if name not in names:
            raise StepError(f"--limit {item}: unknown limit {name!r}; limits are "
                            f"{', '.join(names)}.")
        try:
            number = int(value.replace("_", ""))
        except ValueError:
            raise StepError(f"--limit {item}: expected a whole number after '='.") from None
        if number <= 0:
            raise StepError(f"--limit {item}: a limit must be positive.")
        changes[name] = number
    return Limits(**changes)


def _load(args: argparse.Namespace):
    from analysis.table import load_table

    return load_table(args.table, id_column=args.id, limits=_limits(args))


# JSON longer than this is written without indentation: the indenting encoder is pure
# Python, many times slower on a million coordinates than the compact one.
INDENTED_JSON_CHARS = 2_000_000


def _write_json(path: str | None, payload: dict) -> None:
    if path:
        text = json.dumps(payload, allow_nan=False)
        if len(text) <= INDENTED_JSON_CHARS:
            text = json.dumps(payload, indent=2, allow_nan=False)
        Path(path).write_text(text + "\n", encoding="utf-8")


def _inspect(args: argparse.Namespace) -> int:
    from analysis.overview import OverviewStep

    if args.engine == "dask":
        return _step(args)
    table = _load(args)
    result = OverviewStep(seed=args.seed).run(table)
    print(result.summary())
    for line in table.marked_lines():
        print(line)
    if args.json:
        payload = table.summary()
        payload.update({"summary": result.to_json()})
        _write_json(args.json, payload)
    return 0


def _step(args: argparse.Namespace) -> int:
    from analysis.steps import make_step

    params = _params(args)
    if args.kind == "overview":
        params = {"seed": args.seed}
    step = make_step(args.kind, params)
    if args.engine == "dask":
        from analysis.distributed import run_distributed

        result = run_distributed(step, args.table, scheduler=args.scheduler,
                                 id_column=args.id)
    else:
        table = _load(args)
        shown = phase_printer()
        if shown is not None and "progress" in _inspect_module.signature(step.run).parameters:
            result = step.run(table, progress=shown)
            shown.finish()
        else:
            result = step.run(table)
    print(result.summary())
    if args.json:
        _write_json(args.json, result.to_json())
    if getattr(args, "csv", None):
        from analysis.export import write_csv

        write_csv(result.to_frame(), args.csv)
        print(f"wrote {args.csv}")
    return 0


def _run(args: argparse.Namespace) -> int:
    from analysis.study import load_study
    from analysis.table import load_table

    study_path = Path(args.study)
    study = load_study(study_path)
    table_path = Path(args.table) if args.table else study.table_path(study_path)
    table = load_table(table_path, id_column=args.id, limits=_limits(args))
    outcome = _study_with_phases(study, table)
    print(outcome.summary())
    if args.json:
        _write_json(args.json, outcome.to_json())
    if args.out:
        from analysis.report import write_report

        write_report(outcome, args.out)
        print(f"wrote {args.out}")
    return 0 if outcome.ok else EXIT_BAD_INPUT


def _report(args: argparse.Namespace) -> int:
    from analysis.report import write_report
    from analysis.study import default_study, save_study

    table = _load(args)
    study = default_study(table, target=args.target, seed=args.seed)
    outcome = _study_with_phases(study, table)
    print(outcome.summary())
    write_report(outcome, args.out)
    print(f"wrote {args.out}")
    if args.study_out:
        save_study(study, args.study_out)
        print(f"wrote {args.study_out}")
    if args.json:
        _write_json(args.json, outcome.to_json())
    return 0 if outcome.ok else EXIT_BAD_INPUT


def _study_with_phases(study, table):
    """Run a study, showing which step runs on stderr when it is a terminal."""
    from analysis.study import run_study

    shown = phase_printer()
    if shown is None:
        return run_study(study, table)
    outcome = run_study(study, table, progress=shown.stage)
    shown.finish()
    return outcome


class PhasePrinter:
    """Writes a running step's phases to a terminal stream, one line per phase.

    Called with :class:`analysis.progress.Progress` records (a step's ``progress``) or, through
    :meth:`stage`, with a study's ``(stage, done, total)``. A phase's counts rewrite its line
    in place (carriage return); a new phase starts a new line.
    """

    def __init__(self, stream):
        self._stream = stream
        self._phase: str | None = None

    def __call__(self, record) -> None:
        self._show(record.phase, record.text)

    def stage(self, stage: str, done: int, total: int) -> None:
        """A study's report before each step ("step 2 of 5: separator") and at the end."""
        if stage != "done":
            self._show(stage, stage)

    def finish(self) -> None:
        """End the last phase's line."""
        if self._phase is not None:
            self._stream.write("\n")
            self._stream.flush()
            self._phase = None

    def _show(self, phase: str, text: str) -> None:
        if phase != self._phase:
            if self._phase is not None:
                self._stream.write("\n")
            self._phase = phase
        # \x1b[K clears what a longer earlier text of the same phase left on the line
        self._stream.write(f"\r{text}\x1b[K")
        self._stream.flush()


def phase_printer(stream=None) -> PhasePrinter | None:
    """A :class:`PhasePrinter` on ``stream`` (default stderr) when it is a terminal, else None:
    phases are for a person watching, not for a log or a pipe."""
    stream = sys.stderr if stream is None else stream
    isatty = getattr(stream, "isatty", None)
    try:
        terminal = bool(isatty()) if callable(isatty) else False
    except ValueError:
        # a closed stream
        terminal = False
    return PhasePrinter(stream) if terminal else None


if __name__ == "__main__":
    sys.exit(main())
