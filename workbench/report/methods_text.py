"""The methods text of the report as a list of claims, each built from what the run did.

Every sentence of the generated methods text is a :class:`Claim`: a key naming what it
asserts (``"validation.interval"``, ``"imaging.harmonisation"``, ...) and the sentence.
The sentence is written from the run's own records -- the spec as run, the numbers of
:func:`workbench.report.results.results_dict` and the fitted objects (which models hold
a ComBat step, which penalty rule the path used, which interval the validation
computed) -- never from what a study usually does. ``tests/unit/report/test_methods_claims.py``
holds one check per key against the run and fails for a key it does not know, so a new
sentence cannot enter the report untested.

References
----------
.. [1] Harrell FE Jr, Lee KL, Mark DB. Multivariable prognostic models. Stat Med
   1996;15:361-87 (bootstrap optimism correction; C index).
.. [2] Uno H, Cai T, Pencina MJ, et al. On the C-statistics for evaluating overall
   adequacy of risk prediction procedures with censored survival data. Stat Med
   2011;30:1105-17.
.. [3] Johnson WE, Li C, Rabinovic A. Adjusting batch effects in microarray expression
   data using empirical Bayes methods. Biostatistics 2007;8:118-27 (ComBat).
"""

from __future__ import annotations

from dataclasses import dataclass

from workbench.cohort.summary import followup_text
from workbench.report.methods import (
    _censoring_clause,
    _imaging_sample_size,
    _interval_text,
    _join,
    _label,
    _steps_text,
    added_value_text,
    predictor_handling,
)
from workbench.report.results import results_dict
from workbench.units import time_phrase, unit_after_list
from workbench.validation.intervals import RESAMPLE_RULE


@dataclass(frozen=True)
class Claim:
    """One sentence (or a short run of sentences about one thing) of the methods text."""

    key: str
    text: str


def harmonised_models(result) -> tuple[str, ...]:
    """Models whose fit on all patients holds a learned ComBat step (signature or wide inputs)."""
    out = []
    for name, m in result.models.items():
        sig = getattr(m, "signature_", None)
        if getattr(m, "combat_", None) is not None or (sig is not None and getattr(sig, "combat_", None) is not None):
            out.append(name)
    return tuple(out)


def _penalised(result) -> bool:
    return any(getattr(m, "signature_", None) is not None or m.describe().kind == "penalised cox"
               for m in result.models.values())


def validation_claims(result, d: dict) -> list[Claim]:
    """How the run was validated, what was refitted and which interval was computed."""
    v = d["validation"]
    reps = v["n_replicates"]
    seed = result.spec.seed
    if v["method"] == "none":
        return [Claim("validation.method", "No internal validation was run (method 'none'); every value shown is "
                      "the apparent performance of the models fitted and evaluated on the same patients, which "
                      "is optimistic.")]
    if v["method"] == "bootstrap" and all(r == 0 for r in reps.values()):
        return [Claim("validation.method", "No resampling was run; only apparent performance is reported, which "
                      "is optimistic.")]
    steps = ["the clinical transformations, category levels, detection limits and imputation values"]
    if harmonised_models(result):
        steps.append("the ComBat harmonisation")
    if any(getattr(m, "signature_", None) is not None for m in result.models.values()):
        steps.append("the imaging feature filters")
    if _penalised(result) and result.spec.imaging.penalty.selection == "stability":
        steps.append("the stability selection of the imaging features (half-samples split by original patient "
                     "identifier)")
    elif _penalised(result):
        steps.append(f"the choice of the penalty by inner {result.spec.imaging.penalty.folds}-fold "
                     "cross-validation with folds split by original patient identifier (so copies of one "
                     "patient never sit on both sides of a fold)")
    steps.append("the model fits")
    refit = Claim("validation.refit", "In every replicate the whole modelling process was repeated on the "
                  "resampled rows: " + "; ".join(steps) + ".")
    if v["method"] == "by_centre":
        return [Claim("validation.method", f"Internal validation held out one centre at a time "
                      f"({len(result.summary.centres)} centres; seed {seed})."), refit]
    if v["method"] == "cv":
        s = v["settings"]
        return [Claim("validation.method", f"Internal validation used {s.get('folds')}-fold cross-validation "
                      f"repeated {s.get('repeats')} times with folds split by patient (seed {seed})."), refit,
                Claim("validation.interval", _interval_text(v))]
    if len(set(reps.values())) == 1:
        per = f"{next(iter(reps.values()))} replicates per model"
    else:
        per = "replicates per model: " + ", ".join(f"{_label(m)} {r}" for m, r in reps.items())
    ests = set((v.get("estimator") or {}).values()) or {"optimism"}
    if ests == {"optimism"}:
        name = "bootstrap optimism correction (Harrell et al. 1996)"
        detail = ("Optimism was the mean difference between performance on the bootstrap sample and on the "
                  "original patients; corrected estimate = apparent - optimism.")
    else:
        name = ("the .632+ bootstrap (Efron & Tibshirani 1997)" if "632plus" in ests
                else "the out-of-bootstrap estimate (Efron 1983)")
        detail = ("Each refit was evaluated on the patients not drawn into its bootstrap sample (grouped by "
                  "patient identifier), because a model that nearly interpolates its training rows (the random "
                  "survival forest) makes Harrell's optimism correction invalid. "
                  + ("The .632+ rule weighed the apparent and out-of-bootstrap values by the relative "
                     "overfitting rate (no-information value 0.5 for C and AUC, permutation value for the Brier "
                     "score; calibration measures use the out-of-bootstrap value). " if "632plus" in ests else "")
                  + "The same estimator was used for every model, so model comparisons use one method for both "
                  "arms.")
    return [Claim("validation.method", f"Internal validation used {name} with {per} (seed {seed})."), refit,
            Claim("validation.estimator", detail), Claim("validation.interval", _interval_text(v))]


def _cohort_claims(result, d: dict) -> list[Claim]:
    spec, s, c = result.spec, d["cohort"]["summary"], d["cohort"]
    u = s["time_unit"]
    where = ""
    if s["centres"]:
        where += f" from {len(s['centres'])} centres"
    if s["batches"]:
        where += f" imaged on {len(s['batches'])} scanners or protocols"
    out = [Claim("cohort.patients", f"Of {c['n_read']} patients read{where}, {c['n_analysed']} entered the "
                 "analysis.")]
    if c["n_incomplete_dropped"]:
        out.append(Claim("cohort.excluded", f"{c['n_incomplete_dropped']} patients missing a predictor handled "
                         "by complete-case analysis were excluded."))
    codes = spec.data.event_codes
    event = f"coded {_join(repr(e) for e in codes)}" if codes else "as recorded in the event column"
    out += [
        Claim("outcome.definition", f"The outcome was time to event in {u}, with the event {event} and all other "
              f"patients censored at their last follow-up; {s['n_events']} events were observed and "
              f"{s['n_censored']} patients were censored."),
        Claim("outcome.followup", f"Median follow-up by the reverse Kaplan-Meier method was "
              f"{followup_text(s['median_followup'], s['median_followup_ci'], u, s['max_followup'])}."),
        Claim("outcome.horizons", f"Predictions were made at {_join(f'{h:g}' for h in spec.horizons)} {unit_after_list(spec.horizons, u)}."),
    ]
    return out


def _predictor_claims(result, d: dict) -> list[Claim]:
    s = d["cohort"]["summary"]
    handling = []
    for r in predictor_handling(result):
        bits = [r["kind"]]
        if r["transform"] not in ("none", "not applicable"):
            bits.append(r["transform"])
        if r["detection_limit"].startswith("limit"):
            bits.append("detection " + r["detection_limit"])
        bits.append(r["missing"])
        handling.append(f"{r['label']} ({'; '.join(bits)})")
    ss = s["sample_size"]
    out = [
        Claim("predictors", f"The clinical predictors were {'; '.join(handling)}."),
        Claim("sample_size.epp", f"The cohort had {s['events_per_clinical_parameter']:.1f} events per candidate "
              f"clinical parameter ({s['n_events']} events, {s['n_clinical_parameters']} parameters)."),
        Claim("sample_size.riley", f"By the criteria of Riley et al. (2019), with an anticipated Cox-Snell "
              f"R-squared of {ss['r2_cs']:.3f} ({ss['r2_cs_source'].replace(' (', ', ').replace(')', '')}), at "
              f"least {ss['n_required']} patients ({ss['events_required']} events) were required for the clinical "
              f"model; {ss['n_available']} were available."),
    ]
    imaging = _imaging_sample_size(s).strip()
    if imaging:
        out.append(Claim("sample_size.imaging", imaging))
    return out


def _imaging_claims(result, d: dict) -> list[Claim]:
    s, c, im = d["cohort"]["summary"], d["cohort"], result.spec.imaging
    if not c["n_imaging_pool"]:
        return [Claim("imaging.pool", "The study used clinical predictors only (no imaging table).")]
    fam = ", ".join(f"{k} {v}" for k, v in sorted(s["feature_families"].items()))
    out = [Claim("imaging.pool", f"The imaging pool held {c['n_imaging_pool']} features ({fam}).")]
    rp = d.get("reproducibility")
    if rp:
        out.append(Claim("imaging.reproducibility", f"Before any modelling, {rp['n_removed']} of {rp['n_features']} "
                         f"candidate features were removed because their {rp['form']} between the first and a "
                         f"repeat measurement of {rp['n_patients']} patients was below {rp['min_icc']:g} (Shrout & "
                         "Fleiss 1979; McGraw & Wong 1996); the outcome was not used."))
    harm = harmonised_models(result)
    imaging_models = [k for k, m in d["models"].items() if k != "clinical" and
                      (m["kind"] != "cox" or "signature" in m)]
    if harm:
        prot = f", preserving the effects of {_join(im.harmonise.protect)}" if im.harmonise.protect else ""
        eb = ("without empirical Bayes shrinkage" if im.harmonise.empirical_bayes == "none"
              else f"{im.harmonise.empirical_bayes} empirical Bayes")
        checks = (" Scanner effects were checked before and after harmonisation: per-feature location (F) and "
                  "scale (Brown-Forsythe) tests with Benjamini-Hochberg control of the false discovery rate, and "
                  "the cross-validated AUC of a classifier predicting the scanner from the features."
                  if d.get("harmonisation") else "")
        ref = (f", with {im.harmonise.reference_scanner} as the reference scanner (its features unchanged)"
               if im.harmonise.reference_scanner else "")
        out.append(Claim("imaging.harmonisation", f"Imaging features were harmonised across scanners by ComBat "
                         f"({eb}{prot}{ref}; Johnson et al. 2007), learned "
                         + (f"inside each fit of the {_label(harm[0])} model." if len(harm) == 1 else
                            "inside each fit of these models: " + "; ".join(_label(k) for k in harm) + ".")
                         + checks))
    elif imaging_models:
        why = ("the study names no scanner (batch) column" if not result.spec.data.batch
               else "harmonisation was switched off ([imaging.harmonise] method = 'none')")
        out.append(Claim("imaging.harmonisation", f"Imaging features were not harmonised across scanners ({why})."))
    combined = d["models"].get("combined")
    if combined and "signature" in combined:
        sig = combined["signature"]
        out.append(Claim("imaging.steps", "On all analysis rows the number of features at each step of the "
                         f"signature was: {_steps_text(sig['steps'])}."))
        pen = sig["penalty"]
        if pen is not None:
            rule = ("the one-standard-error rule (the largest penalty within one standard error of the "
                    "minimum)") if pen["rule"] == "1se" else "the minimum"
            out.append(Claim("imaging.penalty", f"The penalty (l1 ratio {im.penalty.l1_ratio:g}) was chosen by "
                             f"{im.penalty.folds}-fold cross-validation with folds split by patient, on the "
                             "cross-validated partial-likelihood deviance (Verweij and van Houwelingen 1993) with "
                             f"{rule}: alpha {pen['alpha']:.4g} ({pen['alpha_over_max']:.3f} x alpha_max, the "
                             "smallest penalty that keeps every feature out)."))
        st = sig.get("stability")
        if st is not None:
            out.append(Claim("imaging.penalty", f"Features were chosen by complementary-pairs stability selection "
                             f"(Meinshausen and Buehlmann 2010; Shah and Samworth 2013): {st['pairs']} random splits "
                             "of the patients into two halves, on each half the first "
                             f"{st['q']} features to enter the lasso path of the Cox model, and a feature kept when "
                             f"picked in at least {st['threshold']:.0%} of the {2 * st['pairs']} halves; this bounds "
                             f"the expected number of falsely selected features by {st['bound']:.2f}."))
        weights = ("their unpenalised Cox coefficients on the development rows" if st is not None
                   else "the penalised coefficients")
        k = len(sig['selected'])
        kept = (f"The {k} kept features formed a signature score (their standardised values weighted by {weights})"
                if k != 1 else f"The one kept feature formed the signature score (its standardised value weighted by "
                f"{weights.replace('their', 'its').replace('coefficients', 'coefficient')})")
        out.append(Claim("imaging.signature", f"{kept}, which entered "
                         "a Cox model beside the clinical terms."))
        vc = combined.get("volume_correlation")
        if vc:
            out.append(Claim("imaging.volume", f"The signature's correlation with {vc['feature']} was Pearson "
                             f"{vc['pearson']:.2f}, Spearman {vc['spearman']:.2f}."))
        if combined.get("collinearity"):
            out.append(Claim("imaging.collinearity", "The signature score's Pearson correlation with each clinical "
                             "design column, and each column's variance inflation factor without and with the "
                             "signature, were computed on the development cohort."))
        if not sig["selected"]:
            out.append(Claim("imaging.empty", "The signature kept no feature, so the combined model had no "
                             "signature term and was equal to the clinical model."))
    return out


def _metric_claims(result, d: dict) -> list[Claim]:
    spec, u = result.spec, d["cohort"]["summary"]["time_unit"]
    tau = spec.validation.tau if spec.validation.tau is not None else float(spec.horizons[-1])
    method = d["validation"]["method"]
    where = ("the held-out centre's own rows" if method == "by_centre"
             else "the rows each model was fitted on")
    return [
        Claim("metrics.discrimination", "Discrimination was measured by Harrell's C over all comparable pairs "
              f"(not truncated), by Uno's C truncated at {time_phrase(tau, u)} and by the cumulative/dynamic AUC at each "
              "horizon."),
        Claim("metrics.censoring_weights", "The inverse-probability-of-censoring weights of Uno's C, the AUC and "
              f"the Brier score came from a Kaplan-Meier estimate of the censoring distribution on {where}."),
        Claim("metrics.accuracy_calibration", "Overall accuracy was measured by the Brier score, its integral and "
              "the index of prediction accuracy; calibration by smoothed calibration curves (ICI, E50, E90; "
              "Austin et al. 2020), the calibration slope and the observed/expected ratio."),
    ]


def _models_claims(result, d: dict) -> list[Claim]:
    models = []
    for m in d["models"].values():
        if m["kind"] == "cox":
            models.append(f"{m['label']} (Cox, {m['details'].get('ties', 'efron')} ties, "
                          f"{len(m['coefficients'])} parameters)")
        elif m["kind"] == "penalised cox":
            models.append(f"{m['label']} (clinical terms unpenalised, {m['details']['n_imaging_selected']} "
                          "imaging features kept, penalty chosen as above)")
        else:
            det = m["details"]
            models.append(f"{m['label']} ({det.get('trees')} trees, minimum leaf {det.get('min_leaf')}, "
                          f"{det.get('max_features')} features per split)")
    out = [Claim("models.fitted", f"Models fitted: {'; '.join(models)}.")]
    vm = result.models.get("clinical_volume")
    if vm is not None:
        scale = "on the log2 scale" if getattr(vm, "volume_transform_", None) == "log2" else "untransformed"
        out.append(Claim("models.volume", "To ask whether imaging adds more than tumour volume, a Cox model of the "
                         f"clinical terms plus the volume feature {vm.volume_feature} ({scale}; missing values "
                         "given the training median) was fitted and validated with the same resamples and "
                         "estimator as the other models"
                         + (", and the combined model was compared with it by paired differences."
                            if d.get("volume_comparison") else ".")))
    if d["comparison"]:
        out.append(Claim("comparison", f"Each model was compared with the {_label(d['baseline'])} model by "
                         "paired differences within the same replicates, the category-free net reclassification "
                         "index and integrated discrimination improvement by component, and decision curves."))
    return out


def _external_claims(result, d: dict) -> list[Claim]:
    e = d["external"]
    if e is None:
        return []
    out = [Claim("external.applied", f"The fitted models were applied unchanged to an external cohort of {e['n']} "
                 f"patients ({e['n_events']} events); intervals come from bootstrap resamples of that cohort "
                 f"(predictions fixed), each the {RESAMPLE_RULE}."),
           Claim("external.censoring", "Inverse probability of censoring weights and the Kaplan-Meier reference "
                 "of the Brier score were estimated on the external cohort itself and re-estimated in every "
                 "resample" + _censoring_clause(e.get("censoring")) + ".")]
    if e.get("by_group"):
        how = ("REML" if any(g.get("pooling_method") == "reml" for g in e["by_group"].values())
               else "DerSimonian-Laird")
        out.append(Claim("external.pooling", "Performance was also estimated in each "
                         + _join(sorted(e["by_group"])) + " of the external cohort and pooled by random-effects "
                         f"meta-analysis (C on the logit scale, O/E on the log scale; {how} with the Hartung-Knapp "
                         "interval; Debray et al. 2017), with a 95% prediction interval for a new site from the "
                         "posterior predictive distribution under a half-normal prior on the between-site SD."))
    return out


def methods_claims(result, data: dict | None = None) -> list[list[Claim]]:
    """The methods text as paragraphs of claims (see the module docstring)."""
    d = data if data is not None else results_dict(result)
    paras = [_cohort_claims(result, d), _predictor_claims(result, d), _imaging_claims(result, d),
             _models_claims(result, d)[:1] + validation_claims(result, d) + _metric_claims(result, d)
             + _models_claims(result, d)[1:]]
    av = added_value_text(d)
    if av:
        paras.append([Claim("added_value", av)])
    paras.append(_external_claims(result, d))
    v = d["provenance"]["versions"]
    libs = _join(f"{k} {v[k]}" for k in ("numpy", "scipy", "pandas", "scikit-learn", "scikit-survival",
                                         "lifelines") if k in v)
    paras.append([Claim("software", f"Analyses used survival-workbench {v.get('survival-workbench', '')} on "
                        f"Python {v.get('python', '')} with {libs}; random seed {result.spec.seed}.")])
    return [p for p in paras if p]
