"""``workbench competing-estimate``: a patient's absolute risk of each cause (command-line face).

The competing-risks results folder holds no fitted model, so the command refits the
chosen arm from the study file on the whole cohort with the study's seed (the same
fit as ``workbench competing``) and estimates with
:func:`workbench.estimate_competing.estimate_competing_patient`.
"""

from __future__ import annotations

import argparse

from workbench.errors import WorkbenchError

MODELS = ("clinical", "combined")


def add_parser(sub) -> None:
    p = sub.add_parser("competing-estimate",
                       help="absolute risk of the event of interest and of competing events for one patient "
                            "(refits the study's competing-risks model)")
    p.add_argument("study", metavar="STUDY.toml", help="study file naming competing_codes in [data]")
    p.add_argument("--model", default="clinical", choices=MODELS,
                   help="clinical, or combined (clinical + imaging signature; needs the imaging table). "
                        "Default: clinical")
    p.add_argument("--patient", metavar="FILE", help="one-row CSV or Excel file with the patient's values")
    p.add_argument("--value", action="append", metavar="FIELD=VALUE", help="a value, e.g. --value age=67 (repeatable)")
    p.add_argument("--signature-score", type=float, metavar="SCORE",
                   help="combined model: the patient's signature score, in place of the imaging values")
    p.add_argument("--ignore", action="append", metavar="FIELD[,FIELD]",
                   help="fields of the patient file the model does not use, to skip (repeatable)")
    p.add_argument("--conf-level", type=float, default=0.95, metavar="LEVEL",
                   help="confidence level of the limits (default 0.95)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from workbench.cli import _parse_values
    from workbench.competing.fitting import fit_arm
    from workbench.estimate import read_patient_file
    from workbench.estimate_competing import estimate_competing_patient, format_competing_estimate
    from workbench.prepare import prepare_cohort
    from workbench.study import read_study

    spec = read_study(args.study)
    if spec.data.competing_codes is None:
        raise WorkbenchError(f"{args.study}: [data] names no competing_codes, so there are no competing events. "
                             "Add them next to event_codes, or use 'workbench estimate' with a saved bundle.")
    patient = read_patient_file(args.patient) if args.patient else {}
    patient.update(_parse_values(args.value))
    if not patient and args.signature_score is None:
        raise WorkbenchError("give the patient's values with --patient FILE or --value FIELD=VALUE (repeatable).")
    cohort = prepare_cohort(spec).cohort
    imaging = args.model == "combined"
    if imaging and not cohort.feature_names:
        raise WorkbenchError(f"{args.study}: the study has no imaging table, so there is no combined model; "
                             "use --model clinical.")
    if args.signature_score is not None and not imaging:
        raise WorkbenchError("--signature-score needs --model combined.")
    d = spec.data
    ignore = tuple(k for k in (d.id, d.time, d.event, d.centre) if k and k in patient)
    ignore += tuple(f.strip() for item in args.ignore or () for f in item.split(",") if f.strip())
    arm = fit_arm(cohort, spec, "cause", imaging=imaging, random_state=int(spec.seed))
    est = estimate_competing_patient(arm, cohort, spec, patient, random_state=int(spec.seed),
                                     signature_score=args.signature_score, conf_level=args.conf_level,
                                     ignore=ignore)
    from workbench.plausibility import check_patient_scale

    check_patient_scale(est.checks, source=str(args.patient) if args.patient else "the patient's values")
    print(format_competing_estimate(est))
    return 0
