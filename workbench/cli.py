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
COMPETING_ESTIMATORS = ("632plus", "oob", "optimism")  # workbench.competing.estimates.ESTIMATORS, kept light here


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


def _count(minimum: int):
    """argparse type: a whole number of at least ``minimum`` (argparse prints the message and exits 2)."""

    def parse(text: str) -> int:
        try:
            n = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"takes a whole number of at least {minimum}; got {text!r}") from None
        if n < minimum:
            raise argparse.ArgumentTypeError(f"takes a whole number of at least {minimum}; got {n}")
        return n

    return parse


def _pairs(items, option: str) -> dict:
    out = {}
    for item in items or ():
        if "=" not in item:
            raise WorkbenchError(f"{option} takes COLUMN=TABLE, such as age=clinical; got {item!r}.")
        k, v = item.split("=", 1)
        out[k.strip()] = v.strip()
    return out


def _add_cohort_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("input tables")
    g.add_argument("--features", metavar="FILE",
                   help="imaging features table (CSV, TSV, Parquet or Excel); leave out for a clinical-only look")
    g.add_argument("--clinical", required=True, metavar="FILE", help="clinical table with follow-up time and event")
    g.add_argument("--id", default="patient_id", metavar="COLUMN", help="patient id column in both tables (default patient_id)")
    g.add_argument("--time", required=True, metavar="COLUMN", help="follow-up time column")
    g.add_argument("--time-unit", default="months", choices=["days", "weeks", "months", "years"])
    g.add_argument("--event", required=True, metavar="COLUMN", help="event column (0/1, true/false, or codes)")
    g.add_argument("--event-codes", metavar="A,B", help="values of the event column that mean the event happened, e.g. dead")
    g.add_argument("--censor-codes", metavar="A,B", help="values that mean censored, e.g. alive")
    g.add_argument("--competing-codes", metavar="A,B",
                   help="values that mean a competing event, e.g. other (needs --event-codes)")
    g.add_argument("--centre", metavar="COLUMN", help="hospital / centre column (optional)")
    g.add_argument("--batch", metavar="COLUMN", help="scanner / batch column for harmonisation (optional)")
    g.add_argument("--keep-matched", action="store_true", help="keep only patients found in both tables instead of stopping")
    g.add_argument("--drop-unusable-features", action="store_true", help="drop constant or empty feature columns instead of stopping")
    g.add_argument("--features-sheet", metavar="SHEET", help="Excel: the sheet of the features workbook to read")
    g.add_argument("--clinical-sheet", metavar="SHEET", help="Excel: the sheet of the clinical workbook to read")
    g.add_argument("--take-from", action="append", metavar="COLUMN=TABLE",
                   help="a column found in both tables: use the copy of this table (clinical or features); repeatable")


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
        competing_codes=_split_list(args.competing_codes),
        centre=args.centre,
        batch=args.batch,
        take_from=_pairs(args.take_from, "--take-from"),
    )
    cohort = read_cohort(
        args.features,
        args.clinical,
        cols,
        on_unmatched="intersect" if args.keep_matched else "error",
        drop_unusable_features=args.drop_unusable_features,
        features_sheet=args.features_sheet,
        clinical_sheet=args.clinical_sheet,
    )
    horizons = _floats(args.horizons, "--horizons")
    summary = summarise_cohort(cohort, horizons, anticipated_r2=args.anticipated_r2)
    print(format_summary(summary))
    if args.json:
        out = Path(args.json)
        inputs = [Path(p).resolve() for p in (args.features, args.clinical) if p]
        if out.resolve() in inputs:
            raise WorkbenchError(f"--json {out} is one of the input tables; give a new file name for the summary.")
        out.parent.mkdir(parents=True, exist_ok=True)
        out.write_text(json.dumps(asdict(summary), indent=2, default=str))
        print(f"\nSummary written to {out}")
    return 0


def _protected_inputs(study_path, spec) -> list[tuple[str, object]]:
    items = [("study file", study_path), ("features table", spec.data.features), ("clinical table", spec.data.clinical)]
    if spec.external is not None:
        items += [("external features table", spec.external.features),
                  ("external clinical table", spec.external.clinical)]
    return items


def _cmd_run(args) -> int:
    from workbench.cohort.summary import format_summary
    from workbench.outfolder import atomic_folder, check_out_folder
    from workbench.report.digest import format_results
    from workbench.study import read_study
    from workbench.validation.backends import tqdm_progress
    from workbench.workflow import run_study

    spec = read_study(args.study)
    out = check_out_folder(args.out, _protected_inputs(args.study, spec))
    replacing = out.is_dir() and any(out.iterdir())
    bars: dict = {}

    def progress(done, total, stage):
        if stage not in bars:
            bars[stage] = tqdm_progress(stage, file=sys.stderr)
        bars[stage](done, total)

    result = run_study(spec, progress=None if args.quiet else progress, replicates=args.replicates, workers=args.workers,
                       permutations=args.permutations)
    args.console.show_all(result.warnings)
    with atomic_folder(out) as tmp:
        extras = _write_run_folder(result, tmp, args)
    print()
    print(format_summary(result.summary))
    print()
    print(format_results(result))
    print(f"\nResults written to {out}/ (results.json, CSV tables, run.log, {', '.join(extras)})"
          + ("; the earlier results there were replaced" if replacing else ""))
    args.console.note_hidden("run.log")
    return 0


def _cmd_competing(args) -> int:
    from workbench.competing.analysis import run_competing
    from workbench.outfolder import atomic_folder, check_out_folder
    from workbench.report.competing import format_competing, write_competing_folder
    from workbench.study import read_study
    from workbench.validation.backends import tqdm_progress

    spec = read_study(args.study)
    if spec.data.competing_codes is None:
        raise WorkbenchError(f"{args.study}: [data] names no competing_codes, so there are no competing events to "
                             "analyse. Add the codes of the competing events, e.g. competing_codes = [\"other\"] "
                             "next to event_codes, or use 'workbench run' for an ordinary analysis.")
    out = check_out_folder(args.out, _protected_inputs(args.study, spec), markers=("competing_results.json",))
    replacing = out.is_dir() and any(out.iterdir())
    bar = None if args.quiet else tqdm_progress("competing-risks bootstrap", file=sys.stderr)
    result = run_competing(spec, replicates=args.replicates, progress=bar, workers=args.workers,
                           estimator=args.estimator)
    args.console.show_all(result.warnings)
    with atomic_folder(out) as tmp:
        written = write_competing_folder(result, tmp, figures=not args.no_figures)
    print()
    print(format_competing(result))
    print(f"\nResults written to {out}/ ({', '.join(written)})"
          + ("; the earlier results there were replaced" if replacing else ""))
    return 0


def _write_run_folder(result, out: Path, args) -> list[str]:
    """Everything of a run into ``out`` (a temporary folder renamed into place afterwards)."""
    from workbench.report.bundle import save_bundle
    from workbench.report.bundle_training import summarise_training
    from workbench.report.results import write_results

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        write_results(result, out)
        extras = []
        if not args.no_figures:
            from workbench.report.figureset import write_figures

            write_figures(result, out / "figures")
            extras.append("figures/")
        training = summarise_training(result.cohort, result.models, result.spec.horizons,
                                      groups=result.spec.models.risk_groups)
        save_bundle(result.models, result.spec, training, out / "bundle", overwrite=True)
        extras.append("bundle/")
        extras += _write_report(result, out, args)
    late = list(dict.fromkeys((w.category.__name__, str(w.message)) for w in caught))
    args.console.show_all(late)
    if late:
        with open(out / "run.log", "a") as log:
            log.write("\nWarnings while writing figures, bundle and report:\n")
            log.writelines(f"  {c}: {m}\n" for c, m in late)
    return extras


def _write_report(result, out: Path, args) -> list[str]:
    if args.no_report:
        return []
    from workbench.report.html import write_report
    from workbench.report.pdf import ReportError, find_chromium

    pdf = not args.no_pdf
    if pdf:
        try:
            find_chromium()
        except ReportError as exc:
            print(f"note: the HTML report is written but not the PDF: {exc}", file=sys.stderr)
            pdf = False
    files = write_report(result, out, pdf=pdf)
    return [Path(f).name for f in (files.html, files.pdf) if f]


def _cmd_apply(args) -> int:
    from workbench.external import apply_bundle, write_external
    from workbench.outfolder import atomic_folder, check_out_folder
    from workbench.report.bundle import load_bundle
    from workbench.report.digest import fmt_estimate

    out = check_out_folder(args.out, [("bundle", args.bundle), ("features table", args.features),
                                      ("clinical table", args.clinical)], markers=("external_results.json",))
    bundle = load_bundle(args.bundle)
    try:
        res = apply_bundle(bundle, args.features, args.clinical, replicates=args.replicates,
                           features_sheet=args.features_sheet, clinical_sheet=args.clinical_sheet)
    except WorkbenchError:
        _explain_scale(bundle, args)
        raise
    with atomic_folder(out) as tmp:
        write_external(res, tmp)
        if args.save_recalibrated:
            from workbench.external import save_recalibrated_bundle

            name = f"bundle_recalibrated_{args.save_recalibrated}"
            save_recalibrated_bundle(bundle, res, args.save_recalibrated, tmp / name, overwrite=True)
    if args.save_recalibrated:
        print(f"Recalibrated models ({args.save_recalibrated}) saved as a bundle in {out / name}")
    c = res.prepared.cohort
    from workbench.models.labels import MODEL_LABELS

    print(f"Applied {', '.join(MODEL_LABELS.get(m, m) for m in bundle.models)} to {c.n} patients "
          f"({c.n_events} events).")
    if res.prepared.incomplete_ids:
        print(f"{len(res.prepared.incomplete_ids)} patient(s) left out for a missing complete-case predictor.")
    from workbench.units import time_phrase

    labels = {name: MODEL_LABELS.get(name, name) for name in res.validation.estimates}
    wide = max([16, *(len(v) + 2 for v in labels.values())])
    print(f"\n{'model':<{wide}s}{'Harrell C':>24s}{'Uno C':>24s}{'IBS':>24s}")
    for name, est in res.validation.estimates.items():
        print(f"{labels[name]:<{wide}s}{fmt_estimate(est.get('harrell_c')):>24s}{fmt_estimate(est.get('uno_c')):>24s}"
              f"{fmt_estimate(est.get('ibs')):>24s}")
    import numpy as np

    notes = {e.note for est in res.validation.estimates.values() for e in est.values() if e.note}
    if not any(np.isfinite(e.ci_lower) for est in res.validation.estimates.values() for e in est.values()):
        reason = next(iter(sorted(notes)), "no interval could be computed")
        print(f"{reason[0].upper()}{reason[1:]}.")
    if not res.recalibration.empty:
        print("\nCalibration (ICI) after recalibration on this cohort (apparent):")
        table = res.recalibration.pivot_table(index=["model", "recalibration"], columns="horizon", values="ici").round(3)
        table.columns = [time_phrase(h, c.time_unit) for h in table.columns]
        print(table.rename(index=labels, level="model").to_string())
    args.console.show_all(res.warnings)
    args.console.note_hidden("external_results.json")
    from workbench.cohort.summary import CAUTION

    print(f"\nPredictions and tables written to {out}/\nCaution: {CAUTION}")
    return 0


def _explain_scale(bundle, args) -> None:
    """After a failed apply, show the unit warnings that may explain it (they were recorded, not shown)."""
    from workbench.errors import UnitWarning
    from workbench.external import read_new_cohort
    from workbench.plausibility import check_bundle_cohort

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            new = read_new_cohort(bundle, args.features, args.clinical, features_sheet=args.features_sheet,
                                  clinical_sheet=args.clinical_sheet)
            check_bundle_cohort(bundle, new.cohort, args.clinical)
        except WorkbenchError:
            return
    args.console.show_all((w.category.__name__, str(w.message)) for w in caught if issubclass(w.category, UnitWarning))


def _parse_values(items) -> dict:
    out = {}
    for item in items or ():
        if "=" not in item:
            raise WorkbenchError(f"--value takes FIELD=VALUE, such as age=67 or stage=III; got {item!r}.")
        k, v = item.split("=", 1)
        out[k.strip()] = v.strip()
    return out


def _cmd_estimate(args) -> int:
    from workbench.estimate import (
        estimate_patient,
        format_estimate,
        ranges_from_bundle,
        read_patient_file,
    )
    from workbench.report.bundle import load_bundle

    bundle = load_bundle(args.bundle)
    if args.model not in bundle.models:
        raise WorkbenchError(f"the bundle has no model {args.model!r}; it has {', '.join(bundle.models)}.")
    patient = read_patient_file(args.patient) if args.patient else {}
    patient.update(_parse_values(args.value))
    if not patient:
        raise WorkbenchError("give the patient's values with --patient FILE or --value FIELD=VALUE (repeatable).")
    d = bundle.spec.data
    ignore = tuple(k for k in (d.id, d.time, d.event, d.centre) if k and k in patient)
    ignore += tuple(f.strip() for item in args.ignore or () for f in item.split(",") if f.strip())
    est = estimate_patient(bundle.models[args.model], patient, bundle.spec.horizons,
                           training_ranges=ranges_from_bundle(bundle, args.model), ignore=ignore,
                           alive_at=args.alive_at)
    from workbench.plausibility import check_patient_scale

    check_patient_scale(est.checks, source=str(args.patient) if args.patient else "the patient's values")
    print(format_estimate(est))
    return 0


def _cmd_app(args) -> int:
    from workbench.app.launch import main as launch

    return launch(args.app_args)


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
    p.add_argument("--replicates", type=_count(1), metavar="N", help="override the number of resampling replicates (also caps the two-stage interval: outer samples at N, inner at N/10)")
    p.add_argument("--permutations", type=_count(0), metavar="K",
                   help="override [added_value] permutations (0 skips the added-value test)")
    p.add_argument("--workers", type=_count(1), metavar="N", help="override the number of parallel workers")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--no-figures", action="store_true", help="skip the figures")
    p.add_argument("--no-report", action="store_true", help="skip the HTML/PDF report")
    p.add_argument("--no-pdf", action="store_true", help="write the HTML report only")
    p.set_defaults(func=_cmd_run)

    p = sub.add_parser("competing", help="competing-risks analysis of a study file with [data] competing_codes")
    p.add_argument("study", metavar="STUDY.toml", help="study file naming competing_codes in [data]")
    p.add_argument("--out", default="competing", metavar="FOLDER", help="results folder (default: competing)")
    p.add_argument("--replicates", type=_count(0), metavar="N",
                   help="override the number of bootstrap replicates (0: apparent performance only)")
    p.add_argument("--workers", type=_count(1), metavar="N", help="override the number of parallel workers")
    p.add_argument("--estimator", choices=COMPETING_ESTIMATORS, default="632plus",
                   help="how the bootstrap replicates turn into validated metrics: 632plus (default; Efron and "
                        "Tibshirani's .632+ rule), oob (refits judged only on the patients left out of each "
                        "replicate) or optimism (Harrell's optimism correction). The choice is written to the "
                        "summary and to competing_results.json")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--no-figures", action="store_true", help="skip the figures")
    p.set_defaults(func=_cmd_competing)

    p = sub.add_parser("apply", help="apply a saved model bundle to a new cohort and validate it there")
    p.add_argument("bundle", metavar="BUNDLE", help="bundle folder or .zip written by 'workbench run'")
    p.add_argument("--features", metavar="FILE",
                   help="the new cohort's imaging features table (leave out for a clinical-only bundle)")
    p.add_argument("--clinical", required=True, metavar="FILE", help="the new cohort's clinical table")
    p.add_argument("--features-sheet", metavar="SHEET", help="Excel: the sheet of the features workbook to read")
    p.add_argument("--clinical-sheet", metavar="SHEET", help="Excel: the sheet of the clinical workbook to read")
    p.add_argument("--out", default="external", metavar="FOLDER", help="output folder (default: external)")
    p.add_argument("--replicates", type=_count(0), default=None, metavar="N",
                   help="bootstrap resamples for the intervals (default: the study's number, as in run; 0: no intervals)")
    p.add_argument("--save-recalibrated", choices=("intercept", "slope"), default=None, metavar="METHOD",
                   help="also save the Cox-type models recalibrated on this cohort as a bundle "
                        "(intercept: baseline hazard only; slope: baseline and calibration slope)")
    p.set_defaults(func=_cmd_apply)

    p = sub.add_parser("estimate", help="survival estimate for one patient from a saved model bundle")
    p.add_argument("bundle", metavar="BUNDLE")
    p.add_argument("--model", default="combined", help="which model of the bundle (default: combined)")
    p.add_argument("--patient", metavar="FILE", help="one-row CSV or Excel file with the patient's values")
    p.add_argument("--value", action="append", metavar="FIELD=VALUE", help="a value, e.g. --value age=67 (repeatable)")
    p.add_argument("--ignore", action="append", metavar="FIELD[,FIELD]",
                   help="fields of the patient file the model does not use, to skip (repeatable)")
    p.add_argument("--alive-at", type=float, metavar="TIME",
                   help="the patient is known to be alive at this time (a follow-up visit): also print the "
                        "chance of reaching each later horizon given that (conditional survival)")
    p.set_defaults(func=_cmd_estimate)

    from workbench.cli_competing import add_parser as add_competing_estimate

    add_competing_estimate(sub)

    p = sub.add_parser("app", help="start the browser front end on this computer")
    p.add_argument("app_args", nargs=argparse.REMAINDER, help="--port N, --open")
    p.set_defaults(func=_cmd_app)
    return parser


def _terminate(signum, frame):
    # a polite stop (kill, Ctrl-Break) unwinds like Ctrl-C, so a half-written results folder is removed
    raise KeyboardInterrupt


def main(argv=None) -> int:
    import signal

    from workbench.cli_console import ConsoleWarnings

    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_USER_ERROR
    args.console = ConsoleWarnings()
    old = warnings.showwarning
    warnings.showwarning = args.console
    old_term = signal.signal(signal.SIGTERM, _terminate) if _main_thread() else None
    try:
        return int(args.func(args) or 0)
    except WorkbenchError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("interrupted (an unfinished results folder is not kept)", file=sys.stderr)
        return 130
    finally:
        warnings.showwarning = old
        if old_term is not None:
            signal.signal(signal.SIGTERM, old_term)


def _main_thread() -> bool:
    import threading

    return threading.current_thread() is threading.main_thread()


if __name__ == "__main__":
    sys.exit(main())
