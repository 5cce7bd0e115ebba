"""Model labels of one run, saying so when a model equals another.

When the imaging signature keeps no feature, the combined model has no
signature term: its coefficients, predictions and every metric are those of the
clinical model. Every face of a run (results.json, the terminal digest, the
report, the figures) then names it "equal to the clinical model", so that nobody
reads its numbers as evidence about imaging.
"""

from __future__ import annotations

import warnings

from workbench.errors import EmptySignatureWarning

VOLUME_MODEL = "clinical_volume"
MODEL_LABELS = {
    "clinical": "Clinical Cox",
    "combined": "Clinical + imaging signature",
    "penalised_all": "Penalised Cox, clinical + all imaging",
    "forest": "Random survival forest",
    VOLUME_MODEL: "Clinical + tumour volume",
}

EQUAL_NOTE = "equal to the clinical model"


def equal_models(models: dict) -> dict[str, str]:
    """Models that equal another model of the run: ``{name: name of the model it equals}``.

    Only the combined model can: with an empty signature it is the clinical Cox model.
    """
    m = models.get("combined")
    sig = getattr(m, "signature_", None)
    # the model's own selection: empty also when every pre-validation fold's signature was
    if sig is not None and (not tuple(sig.selected_features_) or not tuple(getattr(m, "selected_features_", (1,)))):
        return {"combined": "clinical"}
    return {}


def model_labels(models: dict) -> dict[str, str]:
    """Display label of every model of the run (``MODEL_LABELS`` plus the equality note)."""
    same = equal_models(models)
    return {k: MODEL_LABELS.get(k, k) + (f" ({EQUAL_NOTE})" if k in same else "") for k in models}


def warn_empty_signatures(models: dict) -> None:
    """One :class:`EmptySignatureWarning` per fitted model whose imaging signature kept no feature."""
    for name, m in models.items():
        kept = getattr(m, "selected_features_", None)
        if kept is None or tuple(kept):
            continue
        what = ("the combined model has no signature term and is equal to the clinical model"
                if name == "combined" else f"the {MODEL_LABELS.get(name, name)} model has no imaging term")
        st = getattr(getattr(m, "signature_", None), "stability_", None)
        check = ("the screening threshold and the penalty rule" if st is None else
                 f"the stability settings: each half-sample picked only the first {st.q} feature(s) of "
                 f"{len(st.feature_names)} (the bound of {st.max_false:g} expected false selections) and none "
                 f"reached {st.threshold:.0%} of the halves (the most stable: "
                 f"{max(st.probability):.0%}); raise stability_max_false or lower stability_threshold")
        warnings.warn(
            f"{MODEL_LABELS.get(name, name)} kept no imaging feature on all patients: {what}. "
            f"Its performance and comparisons say nothing about imaging; check the feature pool, {check}.",
            EmptySignatureWarning, stacklevel=2)


def design_column_words(terms, name: str) -> str:
    """A design column as people read it: "Cell type (large)", "Age", "the imaging signature".

    ``terms`` are the fitted clinical transformer's terms (``transformer_.terms_``), which know
    the design columns of each predictor and its label; ``name`` is one design column
    ("celltype=large", "log2(cea_ng_ml)", "cea_ng_ml:below_limit", "imaging_signature"). A name
    no term holds is returned as it is.
    """
    if name == "imaging_signature":
        return "the imaging signature"
    term = next((t for t in terms if name in t.columns), None)
    if term is None:
        return name
    label = term.label or term.column
    _, eq, level = name.partition("=")
    if eq:
        return f"{label} ({level})"
    if name.endswith(":below_limit"):
        return f"{label} (below the detection limit)"
    return label
