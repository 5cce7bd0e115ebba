"""The terminal digest of a study run.

:func:`format_results` writes the short plain-text summary ``workbench run`` prints:
cohort and validation method, reproducibility and harmonisation lines, the signature's
stability, each model's C-indices, AUC and ICI, the comparisons with the added-value
test, the external cohort and the per-centre lines, and the caution.
:func:`fmt_estimate` prints one validated estimate with its interval.
"""

from __future__ import annotations

import numpy as np

from workbench.cohort.summary import CAUTION
from workbench.figures.wording import chi_squared_text
from workbench.models.labels import equal_models, model_labels
from workbench.units import time_phrase, unit_after_list


def _group_digest(result) -> list[str]:
    from workbench.report.heterogeneity import digest_lines

    lead = "combined" if "combined" in result.models else next(iter(result.models))
    h = result.spec.horizons[-1]
    lines = []
    for v, title in ((result.validation, "Leave-one-centre-out"), (result.external, "External cohort")):
        block = getattr(v, "groups", None) if v is not None else None
        if block:
            lines += [""] + digest_lines(block, lead, h, title)
    for name, rows in (getattr(result, "new_site", None) or {}).items():
        if rows:
            r = rows[-1]
            lines.append(f"To validate {name} at a new site (horizon {time_phrase(r.horizon, result.spec.data.time_unit)}): "
                         f"{r.n_required} patients, about {r.events_expected:.0f} events (the most of: {r.n_oe} for "
                         f"the O/E ratio, {r.n_slope} for the calibration slope, {r.n_c} for the C-index).")
    ch = getattr(result.external, "censoring", None) if result.external is not None else None
    if ch is not None:
        lines.append(f"External censoring weights: {ch.method} ({ch.reason}).")
    return lines


def harmonisation_digest(result) -> list[str]:
    """Console lines: ComBat before/after (share of features with a scanner effect, classifier AUC), new scanners."""
    h = getattr(result, "harmonisation", None)
    if not h:
        return []

    def pair(block):
        b, a = block["before"], block["after"]
        return (f"features with a scanner location effect {b['location_share']:.0%} -> {a['location_share']:.0%}, "
                f"scanner classifier AUC {b['classifier_auc']:.2f} -> {a['classifier_auc']:.2f}")

    lines = [f"Harmonisation (ComBat), development: {pair(h['development'])}."]
    if "external" in h:
        lines.append(f"Harmonisation, external cohort: {pair(h['external'])}.")
    if result.external_prepared is not None:
        nb = result.new_batches or {}
        for r in (r for r in nb.get("scanners", []) if r["model"] == h["model"]):
            lines.append(f"  new scanner {r['scanner']} ({r['n']} patients): "
                         + (f"harmonised from its own features (mean shift {r['mean_abs_shift_sd']:.2f} SD, "
                            f"SD ratio {r['median_sd_ratio']:.2f})" if r["adjusted"] else "left unadjusted"))
            cal = [c for c in nb.get("calibration", []) if c["scanner"] == r["scanner"] and c["model"] == h["model"]]
            if cal:
                unit = result.spec.data.time_unit
                hs = "/".join(f"{c['horizon']:g}" for c in cal)
                lines.append(f"    its O/E at {hs} {unit_after_list([c['horizon'] for c in cal], unit)}: " + "/".join(f"{c['oe_unadjusted']:.2f}" for c in cal)
                             + " left unadjusted -> " + "/".join(f"{c['oe_harmonised']:.2f}" for c in cal)
                             + " harmonised")
    return lines


def fmt_estimate(e, digits: int = 3, *, apparent_only: bool = False) -> str:
    """A validated estimate with its interval; with ``apparent_only`` the apparent value, marked so."""
    if apparent_only and e is not None and np.isfinite(getattr(e, "apparent", np.nan)):
        return f"{e.apparent:.{digits}f} (apparent)"
    if e is None or not np.isfinite(e.estimate):
        return "n/a"
    ci = ""
    if np.isfinite(e.ci_lower) and np.isfinite(e.ci_upper):
        ci = f" ({e.ci_lower:.{digits}f} to {e.ci_upper:.{digits}f})"
    return f"{e.estimate:.{digits}f}{ci}"


def _replicate_text(n_replicates: dict) -> str:
    counts = sorted(set(n_replicates.values()), reverse=True)
    if len(counts) == 1:
        return f"{counts[0]} replicates"
    main = counts[0]
    fewer = ", ".join(f"{k} {n}" for k, n in n_replicates.items() if n != main)
    return f"{main} replicates ({fewer}: budgeted separately, slower to refit)"


def format_results(result) -> str:
    """A short plain-text digest of a run for the terminal."""
    v = result.validation
    u = result.spec.data.time_unit
    labels = model_labels(result.models)
    same = equal_models(result.models)
    horizons = [f"{h:g}" for h in result.spec.horizons]
    ests = set(getattr(v, "estimator", {}).values()) or {"optimism"}
    boot = {frozenset({"optimism"}): "optimism-corrected (bootstrap)", frozenset({"632plus"}): ".632+ (bootstrap)",
            frozenset({"oob"}): "out-of-bootstrap"}.get(frozenset(ests), "bootstrap")
    method = {"bootstrap": boot, "cv": "cross-validated",
              "by_centre": "leave-one-centre-out",
              "none": "none (apparent performance only, optimistic)"}.get(v.method, v.method)
    app = v.method == "none"
    lines = [
        f"Study: {result.spec.name}",
        f"{result.prepared.cohort.n} patients, {result.prepared.cohort.n_events} events; "
        f"validation {method}" + ("" if app else f", {_replicate_text(v.n_replicates)}"),
    ]
    icc_table = getattr(result.prepared, "reproducibility", None)
    if icc_table is not None:
        r = result.spec.imaging.reproducibility
        lines.append(f"Reproducibility: {len(result.prepared.unreproducible)} of {len(icc_table)} imaging features "
                     f"removed ({r.form} below {r.min_icc:g} on {int(icc_table['n'].max())} repeat measurements; "
                     "feature_icc.csv).")
    lines += harmonisation_digest(result)
    sel = result.validation.selection.get("combined")
    if sel is not None and sel.n_fits and sel.apparent:
        shaky = sel.unstable
        lines.append(f"Signature: {len(sel.apparent)} feature{'s' if len(sel.apparent) != 1 else ''}; "
                     + (f"kept by fewer than half of the {sel.n_fits} refits (unstable): {', '.join(shaky)}."
                        if shaky else f"each kept by at least half of the {sel.n_fits} refits."))
    wide = max([40, *(len(labels[name]) + 2 for name in result.models)])  # a long label keeps the columns
    lines += [
        "",
        f"{'model':<{wide}s}{'Harrell C':>24s}{'Uno C':>24s}{'IBS':>24s}",
    ]
    for name in result.models:
        est = v.estimates[name]
        lines.append(
            f"{labels[name]:<{wide}s}{fmt_estimate(est.get('harrell_c'), apparent_only=app):>24s}"
            f"{fmt_estimate(est.get('uno_c'), apparent_only=app):>24s}{fmt_estimate(est.get('ibs'), apparent_only=app):>24s}"
        )
    cs = [v.estimates[m].get("harrell_c") for m in result.models]
    why = sorted({c.note for c in cs if c is not None and not np.isfinite(c.ci_lower) and c.note})
    if not app and why and all(c is None or not np.isfinite(c.ci_lower) for c in cs):
        lines.append(f"No intervals: {'; '.join(why)} (more replicates, or [validation] outer_replicates, "
                     "give them).")
    lines.append("")
    lines.append(f"AUC and calibration (ICI) at {', '.join(horizons)} {unit_after_list(result.spec.horizons, u)}:")
    for name in result.models:
        est = v.estimates[name]
        aucs = "  ".join(fmt_estimate(est.get(f"auc@{h}"), 2, apparent_only=app) for h in horizons)
        icis = "  ".join(fmt_estimate(est.get(f"ici@{h}"), 3, apparent_only=app).split(" ")[0] for h in horizons)
        lines.append(f"  {name:<16s} AUC {aucs}   ICI {icis}")
    for name, comp in result.comparisons.items():
        d = comp.differences.get("harrell_c")
        lr = comp.lr_test
        lines.append("")
        lines.append(f"{labels.get(name, name)} vs {labels.get(comp.baseline, comp.baseline)}:")
        lines.append(f"  difference in Harrell C {fmt_estimate(d, apparent_only=app)}")
        av = getattr(result, "added_value", {}).get(name)
        if name in same:
            lines.append("  the signature kept no feature: this model is the clinical model, so the comparison "
                         "says nothing about imaging")
        elif av is not None:
            lines.append(f"  added value of imaging given clinical (permutation test): CV log-likelihood gain "
                         f"{av.observed:.1f}, p = {av.p_value:.3g} (MC SE {av.mc_se:.3f}, {av.permutations} permutations)")
        if name not in same and lr.nested and np.isfinite(lr.statistic) and lr.df > 0 and np.isfinite(lr.p_value):
            lines.append(f"  likelihood-ratio {chi_squared_text(lr.statistic, lr.df, lr.p_value)} "
                         "(prespecified terms)")
    vc = (getattr(result, "volume_comparisons", None) or {}).get("internal")
    if vc is not None:
        lines.append("")
        lines.append(f"{labels.get(vc.model, vc.model)} vs {labels.get(vc.baseline, vc.baseline)} "
                     "(is the signature more than volume?):")
        lines.append(f"  difference in Harrell C {fmt_estimate(vc.differences.get('harrell_c'), apparent_only=app)}")
    if result.external is not None:
        lines.append("")
        lines.append(f"External cohort ({result.external_prepared.cohort.n} patients):")
        for name in result.models:
            lines.append(f"  {name:<16s} Harrell C {fmt_estimate(result.external.estimates[name].get('harrell_c'))}")
    lines += _group_digest(result)
    lines += ["", f"Caution: {CAUTION}"]
    return "\n".join(lines)
