"""Render every standard figure of the demo study into docs/figures/ (PNG, 300 dpi).

Run from the repository root:

    .venv/bin/python docs/render_demo_figures.py [--out docs/figures] [--replicates 20]

The demo study (demo_cohort/study.toml, invented data) is run with a few bootstrap
replicates (enough for the selection-frequency figure) and its figures are drawn by
``workbench.report.figureset``, the same code the command line and the report use:
curves, discrimination, calibration and decision curves on the external hospital,
risk-group cut-points fixed on the training patients.
"""

from __future__ import annotations

import argparse
import time
import warnings
from pathlib import Path

from workbench.errors import WorkbenchWarning
from workbench.figures import patient_values, save_figure
from workbench.report.figureset import (
    nomogram_figure,
    patient_notes,
    showcase_patients,
    write_figures,
)
from workbench.study import read_study
from workbench.workflow import run_study

ROOT = Path(__file__).resolve().parents[1]


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(ROOT / "docs" / "figures"))
    ap.add_argument("--replicates", type=int, default=20, help="bootstrap replicates of the demo run")
    ap.add_argument("--widths", default="double", help="comma-separated: single, double (each drawn afresh)")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    result = run_study(read_study(ROOT / "demo_cohort" / "study.toml"), replicates=args.replicates)
    widths = tuple(w.strip() for w in args.widths.split(",") if w.strip())
    written = render_figures(result, Path(args.out), widths)
    for p in written:
        print(p.relative_to(ROOT) if p.is_relative_to(ROOT) else p)
    print(f"{len(written)} figures in {time.perf_counter() - t0:.1f} s")


def render_figures(result, out: Path, widths=("double",)) -> list[Path]:
    """Every standard figure of ``result`` and the two nomogram patients, as PNG files in ``out``."""
    for old in out.glob("*.png"):
        old.unlink()
    written = write_figures(result, out, formats=("png",), widths=widths)
    # two external patients overlaid on both nomograms: one from a scanner the network used,
    # one from the scanner it never saw (flagged on the figure)
    ext = result.external_prepared.cohort
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", WorkbenchWarning)  # the unseen scanner, reported in the run log
        sig = result.models["combined"].signature_score(ext)
        picks = showcase_patients(result, ext, sig)
    for kind, stem in (("typical", "nomogram_patient"), ("flagged", "nomogram_patient_flagged")):
        if kind not in picks:
            continue
        i = picks[kind]
        fig = nomogram_figure(result, patient=patient_values(ext, i, sig), notes=patient_notes(result, ext, i),
                              patient_row=(ext, i))
        for p in save_figure(fig, out / stem, widths=("double",), formats=("png",)):
            final = p.with_name(f"{stem}.png")
            p.replace(final)
            written.append(final)
    return written


if __name__ == "__main__":
    main()
