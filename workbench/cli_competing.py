"""``workbench competing-estimate``: patients' absolute risk of each cause (command-line face).

The competing-risks results folder holds no fitted model, so the command refits the
chosen arm from the study file on the whole cohort with the study's seed (the same
fit as ``workbench competing``) and estimates with
:func:`workbench.estimate_competing.estimate_competing_patient`. For the clinical +
signature model given imaging values, the limits come from a bootstrap refitting the
whole model (``--refits``, :mod:`workbench.competing.refit_limits`); every patient of a
several-row patient file is estimated from the same refits.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from workbench.errors import WorkbenchError

MODELS = ("clinical", "combined")
DEFAULT_REFITS = 200  # workbench.competing.refit_limits.DEFAULT_REFITS, kept light here
MIN_REFITS = 50  # workbench.competing.refit_limits.MIN_REFITS


def add_parser(sub) -> None:
    p = sub.add_parser("competing-estimate",
                       help="absolute risk of the event of interest and of competing events for patients "
                            "(refits the study's competing-risks model)")
    p.add_argument("study", metavar="STUDY.toml", help="study file naming competing_codes in [data]")
    p.add_argument("--model", default="clinical", choices=MODELS,
                   help="clinical, or combined (clinical + imaging signature; needs the imaging table). "
                        "Default: clinical")
    p.add_argument("--patient", metavar="FILE",
                   help="CSV or Excel file with the patients' values (header row, one row per patient)")
    p.add_argument("--value", action="append", metavar="FIELD=VALUE", help="a value, e.g. --value age=67 (repeatable)")
    p.add_argument("--signature-score", type=float, metavar="SCORE",
                   help="combined model: the patient's signature score, in place of the imaging values "
                        "(no limits: the refit limits need the imaging values)")
    p.add_argument("--ignore", action="append", metavar="FIELD[,FIELD]",
                   help="fields of the patient file the model does not use, to skip (repeatable)")
    p.add_argument("--conf-level", type=float, default=0.95, metavar="LEVEL",
                   help="confidence level of the limits (default 0.95)")
    p.add_argument("--refits", type=int, metavar="B",
                   help=f"combined model: bootstrap refits of the whole model for the limits (default {DEFAULT_REFITS}; "
                        f"at least {MIN_REFITS}; 0 for none). One refit of the demo study (500 patients, 240 "
                        "features) takes about 0.7-1.4 s on one core: 200 refits 1-3 minutes on 2 workers")
    p.add_argument("--workers", type=int, metavar="N",
                   help="parallel workers of the refits (default: the study's [validation] workers)")
    p.add_argument("--json", metavar="FILE", help="also write the estimates, their limits and notes as JSON")
    p.set_defaults(func=run)


def _refits_asked(args, imaging: bool) -> int:
    if args.refits is None:
        return DEFAULT_REFITS if imaging and args.signature_score is None else 0
    if args.refits < 0 or (0 < args.refits < MIN_REFITS):
        raise WorkbenchError(f"--refits {args.refits}: give 0 (no limits for the combined model) or at least "
                             f"{MIN_REFITS} refits (default {DEFAULT_REFITS}).")
    if args.refits and not imaging:
        raise WorkbenchError("--refits is for --model combined; the clinical model's limits come from influence "
                             "functions (leave --refits out).")
    if args.refits and args.signature_score is not None:
        raise WorkbenchError("--refits needs the patient's imaging values, not --signature-score: every refit "
                             "selects its own signature, so the full-data score cannot be carried to it. Give the "
                             "imaging values (--patient FILE) or leave --refits out.")
    return int(args.refits)


def estimate_json(est) -> dict:
    """One estimate as JSON-ready data (risks in [0, 1]; None where there are no limits)."""
    from workbench.estimate_competing import risk_table

    def num(x):
        x = float(x)
        return x if x == x else None

    rows = [{"route": r.route, "quantity": r.quantity, "horizon": num(r.horizon), "estimate": num(r.estimate),
             "lower": num(r.lower), "upper": num(r.upper)} for r in risk_table(est).itertuples()]
    return {"model": est.model, "time_unit": est.time_unit, "conf_level": est.cause_specific.conf_level,
            "limits_method": est.limits_method, "signature_score": est.signature_score, "risks": rows,
            "flags": [f.message for f in est.checks.flags], "notes": list(est.notes), "caution": est.caution}


def run(args: argparse.Namespace) -> int:
    from workbench.cli import _parse_values
    from workbench.competing.fitting import fit_arm
    from workbench.estimate import read_patient_rows
    from workbench.estimate_competing import (
        arm_training_design,
        estimate_competing_patient,
        format_competing_estimate,
    )
    from workbench.plausibility import check_patient_scale
    from workbench.prepare import prepare_cohort
    from workbench.study import read_study

    spec = read_study(args.study)
    if spec.data.competing_codes is None:
        raise WorkbenchError(f"{args.study}: [data] names no competing_codes, so there are no competing events. "
                             "Add them next to event_codes, or use 'workbench estimate' with a saved bundle.")
    extra = _parse_values(args.value)
    patients = [{**row, **extra} for row in read_patient_rows(args.patient)] if args.patient else [extra]
    if not patients[0] and args.signature_score is None:
        raise WorkbenchError("give the patient's values with --patient FILE or --value FIELD=VALUE (repeatable).")
    if args.workers is not None and args.workers < 1:
        raise WorkbenchError(f"--workers {args.workers}: give a whole number of at least 1.")
    if args.json and Path(args.json).suffix.lower() != ".json":
        raise WorkbenchError(f"--json {args.json}: give a file name ending in .json.")
    imaging = args.model == "combined"
    if args.signature_score is not None and not imaging:
        raise WorkbenchError("--signature-score needs --model combined.")
    B = _refits_asked(args, imaging)
    cohort = prepare_cohort(spec).cohort
    if imaging and not cohort.feature_names:
        raise WorkbenchError(f"{args.study}: the study has no imaging table, so there is no combined model; "
                             "use --model clinical.")
    d = spec.data
    seed = int(spec.seed)
    arm = fit_arm(cohort, spec, "cause", imaging=imaging, random_state=seed)
    X = arm_training_design(arm, cohort, spec, random_state=seed)
    from workbench.competing.refit_limits import refit_arms

    def estimate(patient, refits):
        ignore = tuple(c for c in (d.id, d.time, d.event, d.centre) if c and c in patient)
        ignore += tuple(f.strip() for item in args.ignore or () for f in item.split(",") if f.strip())
        return estimate_competing_patient(arm, cohort, spec, patient, random_state=seed,
                                          signature_score=args.signature_score, conf_level=args.conf_level,
                                          ignore=ignore, training_design=X, refits=refits)

    refits = None
    if B and arm.n_selected:
        from workbench.validation.backends import tqdm_progress

        for patient in patients:  # every patient's values are checked before minutes go to the refits
            estimate(patient, None)
        refits = refit_arms(cohort, spec, imaging=True, replicates=B, random_state=seed, workers=args.workers,
                            progress=tqdm_progress("refits", leave=False))
    out = []
    for k, patient in enumerate(patients):
        est = estimate(patient, refits)
        where = f"{args.patient}, row {k + 1}" if args.patient else "the patient's values"
        check_patient_scale(est.checks, source=where)
        if len(patients) > 1:
            print(f"{'' if k == 0 else chr(10)}=== Patient {k + 1} of {len(patients)} ({where}) ===")
        print(format_competing_estimate(est))
        out.append(estimate_json(est))
    if args.json:
        meta = {"study": str(args.study), "seed": seed, "refits": None if refits is None else
                {"replicates": refits.replicates, "succeeded": len(refits.arms), "failed": refits.failed,
                 "empty_signature": refits.empty, "seconds": round(refits.seconds, 1)}}
        Path(args.json).write_text(json.dumps({**meta, "patients": out}, indent=2))
    return 0
