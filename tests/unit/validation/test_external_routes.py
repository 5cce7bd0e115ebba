"""`workbench run` with an [external] block and `workbench apply` of the saved bundle give the same numbers.

Both routes call :func:`workbench.validation.external.validate_external` with
:func:`workbench.workflow.external_settings`; censoring weights and the null model
come from the external cohort. Checked on the demo (invented data) with a reduced
replicate count: every metric of every model, estimate and interval, and the
per-centre / per-scanner blocks, to 1e-10.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from workbench.cli import main
from workbench.models.registry import COMPARISON_MODELS

DEMO = Path(__file__).resolve().parents[3] / "demo_cohort"

pytestmark = pytest.mark.slow  # one demo run (external resamples only) and one apply


def _close(a, b, path=""):
    if isinstance(a, dict):
        assert set(a) == set(b), path
        for k in a:
            _close(a[k], b[k], f"{path}/{k}")
    elif isinstance(a, list):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            _close(x, y, f"{path}[{i}]")
    elif isinstance(a, float) and isinstance(b, (int, float)):
        assert math.isclose(a, b, rel_tol=0, abs_tol=1e-10), (path, a, b)
    else:
        assert a == b, (path, a, b)


def _without(block, names):
    """The block with every entry keyed by one of ``names`` (models apply does not have) left out."""
    if isinstance(block, dict):
        return {k: _without(v, names) for k, v in block.items() if k not in names}
    if isinstance(block, list):
        return [_without(v, names) for v in block]
    return block


def _demo_study(folder: Path) -> Path:
    """The demo study with its four models, made lighter for a test: no internal validation (only
    the external numbers are compared), a 25-tree forest and a 30-value penalty path."""
    from dataclasses import replace

    from workbench.study import read_study, write_study

    spec = read_study(DEMO / "study.toml")
    spec = replace(
        spec,
        validation=replace(spec.validation, method="none"),
        models=replace(spec.models, forest=replace(spec.models.forest, trees=25)),
        imaging=replace(spec.imaging, penalty=replace(spec.imaging.penalty, n_alphas=30)),
    )
    return write_study(spec, folder / "demo_light.toml")


def test_run_and_apply_give_identical_external_numbers(tmp_path, capsys):
    run = tmp_path / "run"
    assert main(["run", str(_demo_study(tmp_path)), "--out", str(run), "--replicates", "2", "--quiet",
                 "--permutations", "0", "--no-report", "--no-figures"]) == 0  # the added-value test is not compared here
    assert main(["apply", str(run / "bundle"), "--features", str(DEMO / "external_imaging.csv"),
                 "--clinical", str(DEMO / "external_clinical.csv"), "--out", str(tmp_path / "ext")]) == 0
    capsys.readouterr()
    res = json.loads((run / "results.json").read_text())
    ext = json.loads((tmp_path / "ext" / "external_results.json").read_text())
    # the bundle holds the four models of the study; the clinical + volume comparison model is
    # validated by `run` but never bundled (registry.COMPARISON_MODELS), so apply cannot have it
    models = [m for m in res["models"] if m not in COMPARISON_MODELS]
    assert set(ext["performance"]) == set(models) and len(models) == 4
    assert set(res["models"]) - set(models) == set(COMPARISON_MODELS)
    n_checked = 0
    for m in models:
        ours, theirs = res["models"][m]["external_performance"], ext["performance"][m]
        assert set(ours) == set(theirs)
        for metric in ours:
            _close(ours[metric], theirs[metric], f"{m}/{metric}")
            n_checked += 1
        assert ours["harrell_c"]["n_used"] == 2  # intervals really came from the resamples
        # two resamples give no interval (the rule needs 10), and the table says why
        hc = ours["harrell_c"]
        assert hc["ci_lower"] is None and "fewer than 10 usable resamples" in hc["note"]
    assert n_checked > 100
    _close(_without(res["external"]["by_group"], COMPARISON_MODELS), ext["by_group"], "by_group")
    _close(res["external"]["censoring"], ext["censoring"], "censoring")
    # the scanner the development data never had (scanner_D, 83 patients) is harmonised from its own
    # features on both routes ([imaging.harmonise] unseen_batch = "estimate"), with the same estimates
    _close(res["external"]["new_batches"], ext["new_batches"], "new_batches")
    rows = [r for r in ext["new_batches"]["scanners"] if r["scanner"] == "scanner_D"]
    assert rows and all(r["adjusted"] and r["n"] == 83 for r in rows)
    # ... and its calibration-in-the-large is then in line with the seen scanners (left unadjusted,
    # O/E at 12 months was 1.50: predicted survival far too high, see DEVELOPERS.md)
    oe = {lev: v["oe_ratio@12"]["estimate"]
          for lev, v in res["external"]["by_group"]["scanner"]["estimates"]["combined"].items()}
    assert abs(oe["scanner_D"] - 1) < 0.15, oe
    # the run shows what harmonising it changed: the same fitted models with scanner_D left unadjusted
    # (validation/new_scanner.py), on its own 83 patients
    cal = {(c["model"], c["horizon"]): c for c in ext["new_batches"]["calibration"]}
    c12 = cal[("combined", 12.0)]
    assert c12["oe_harmonised"] == pytest.approx(oe["scanner_D"], abs=1e-12)
    assert c12["oe_unadjusted"] > 1.3 and c12["ici_unadjusted"] > 2 * c12["ici_harmonised"]
