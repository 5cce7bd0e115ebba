"""The ``workbench`` command line.

A thin face over the library: it parses options, calls the library, prints what
comes back. A user error prints one plain message on stderr and exits with
status 2, never a traceback.
"""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from dataclasses import asdict
from pathlib import Path

from workbench import __version__
from workbench.errors import WorkbenchError

EXIT_USER_ERROR = 2


def _split_list(text: str | None) -> tuple[str, ...] | None:
    if text is None:
        return None
    items = tuple(x.strip() for x in text.split(",") if x.strip())
    return items or None


def _floats(text: str | None, option: str) -> tuple[float, ...]:
    if not text:
        return ()
    try:
        return tuple(float(x) for x in text.split(",") if x.strip())
    except ValueError:
        raise WorkbenchError(f"{option} takes numbers separated by commas, such as 12,24,36; got {text!r}.") from None


def _add_cohort_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("input tables")
    g.add_argument("--features", required=True, metavar="FILE", help="imaging features table (CSV, TSV, Parquet or Excel)")
    g.add_argument("--clinical", required=True, metavar="FILE", help="clinical table with follow-up time and event")
    g.add_argument("--id", default="patient_id", metavar="COLUMN", help="patient id column in both tables (default patient_id)")
    g.add_argument("--time", required=True, metavar="COLUMN", help="follow-up time column")
    g.add_argument("--time-unit", default="months", choices=["days", "weeks", "months", "years"])
    g.add_argument("--event", required=True, metavar="COLUMN", help="event column (0/1, true/false, or codes)")
    g.add_argument("--event-codes", metavar="A,B", help="values of the event column that mean the event happened, e.g. dead")
    g.add_argument("--censor-codes", metavar="A,B", help="values that mean censored, e.g. alive")
    g.add_argument("--centre", metavar="COLUMN", help="hospital / centre column (optional)")
    g.add_argument("--batch", metavar="COLUMN", help="scanner / batch column for harmonisation (optional)")
    g.add_argument("--keep-matched", action="store_true", help="keep only patients found in both tables instead of stopping")
    g.add_argument("--drop-unusable-features", action="store_true", help="drop constant or empty feature columns instead of stopping")


def _cmd_inspect(args) -> int:
    from workbench.cohort.io import ColumnMap, read_cohort
    from workbench.cohort.summary import format_summary, summarise_cohort

    cols = ColumnMap(
        id=args.id,
        time=args.time,
        event=args.event,
        time_unit=args.time_unit,
        event_codes=_split_list(args.event_codes),
        censor_codes=_split_list(args.censor_codes),
        centre=args.centre,
        batch=args.batch,
    )
    cohort = read_cohort(
        args.features,
        args.clinical,
        cols,
        on_unmatched="intersect" if args.keep_matched else "error",
        drop_unusable_features=args.drop_unusable_features,
    )
    horizons = _floats(args.horizons, "--horizons")
    summary = summarise_cohort(cohort, horizons, anticipated_r2=args.anticipated_r2)
    print(format_summary(summary))
    if args.json:
        out = Path(args.json)
        out.parent.mkdir(parents=True, exist_ok=True)
        out.write_text(json.dumps(asdict(summary), indent=2, default=str))
        print(f"\nSummary written to {out}")
    return 0


def _cmd_run(args) -> int:
    from workbench.cohort.summary import format_summary
    from workbench.report.results import format_results, write_results
    from workbench.study import read_study
    from workbench.validation.backends import tqdm_progress
    from workbench.workflow import run_study

    spec = read_study(args.study)
    bars: dict = {}

    def progress(done, total, stage):
        if stage not in bars:
            bars[stage] = tqdm_progress(stage, file=sys.stderr)
        bars[stage](done, total)

    result = run_study(spec, progress=None if args.quiet else progress, replicates=args.replicates, workers=args.workers)
    out = Path(args.out)
    path = write_results(result, out)
    print()
    print(format_summary(result.summary))
    print()
    print(format_results(result))
    print(f"\nResults written to {path.parent}/ (results.json, CSV tables, run.log)")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="workbench",
        description="Survival and prognostic modelling workbench: does an imaging signature add to clinical factors?",
    )
    parser.add_argument("--version", action="version", version=f"workbench {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("inspect", help="read, validate and summarise a cohort")
    _add_cohort_options(p)
    p.add_argument("--horizons", metavar="T1,T2", help="times for Kaplan-Meier survival, in the time unit (e.g. 12,24,36)")
    p.add_argument("--anticipated-r2", type=float, metavar="R2", help="anticipated Cox-Snell R-squared for the sample-size criteria")
    p.add_argument("--json", metavar="FILE", help="also write the summary as JSON")
    p.set_defaults(func=_cmd_inspect)

    p = sub.add_parser("run", help="run a study file end to end and write a results folder")
    p.add_argument("study", metavar="STUDY.toml", help="study file (see docs/study-file.md)")
    p.add_argument("--out", default="results", metavar="FOLDER", help="results folder (default: results)")
    p.add_argument("--replicates", type=int, metavar="N", help="override the number of resampling replicates")
    p.add_argument("--workers", type=int, metavar="N", help="override the number of parallel workers")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=_cmd_run)
    return parser


class _WarningPrinter:
    """Show statistical warnings as one plain line each on stderr."""

    def __call__(self, message, category, filename, lineno, file=None, line=None):
        print(f"warning ({category.__name__}): {message}", file=sys.stderr)


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_USER_ERROR
    old = warnings.showwarning
    warnings.showwarning = _WarningPrinter()
    try:
        return int(args.func(args) or 0)
    except WorkbenchError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = old


if __name__ == "__main__":
    sys.exit(main())
