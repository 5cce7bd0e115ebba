"""Signature: how the imaging pool was reduced, which features were kept, and how stable that choice is."""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from workbench.app import charts, state, tables

RULES = {"1se": "one-standard-error rule", "min": "smallest deviance"}


def _figure(name: str, *args, **kwargs):
    """A figure from the figures layer when it offers ``name``, else None."""
    mod = state.load_module("workbench.figures.signature")
    fn = getattr(mod, name, None) if mod is not None else None
    if fn is None:
        return None
    try:
        return fn(*args, **kwargs)
    except Exception:  # noqa: BLE001 - fall back to the app's own plain chart
        return None


def _path(sig) -> None:
    path = sig.path_
    if path is None:
        st.info("No feature survived the filters, so no penalised path was fitted.")
        return
    st.markdown("**Coefficient path** (standardised features; the chosen penalty is marked)")
    fig = _figure("plot_coefficient_path", path)
    if fig is None:
        coefs = np.asarray(path.coefs, float)
        kept = np.flatnonzero(coefs[:, path.index] != 0)
        order = kept[np.argsort(-np.abs(coefs[kept, path.index]))][:8]
        series = {path.feature_names[j]: coefs[j] for j in order}
        fig = charts.line_figure(np.asarray(path.alphas, float), series, xlabel="Penalty (log scale)",
                                 ylabel="Coefficient", hline=0.0, logx=True)
        fig.axes[0].axvline(float(path.alpha), color="#b04a2f", linestyle="--", linewidth=1.0)
        fig.axes[0].invert_xaxis()
    st.image(charts.figure_bytes(fig))
    st.caption(
        f"Penalty chosen by the {RULES.get(path.rule, path.rule)} of {len(path.cv_folds)}-fold cross-validation split by patient: "
        f"{int(path.n_nonzero[path.index])} features with non-zero coefficients."
    )


def render() -> None:
    st.title("Signature")
    st.write("How the imaging signature of the clinical + imaging model was built from the feature pool.")
    if not state.module_available("workbench.workflow"):
        state.not_available("The signature report (it needs a study run)")
        return
    result = state.current_result()
    if result is None:
        st.info("Run the study on the Results page first; the signature is fitted there.")
        return
    state.show_provenance("The signature and its stability")
    model = result.models.get("combined")
    if model is None or not hasattr(model, "signature_"):
        st.info("This study fits no clinical + imaging signature model; add 'combined' on the Design page.")
        return
    sig = model.signature_
    a, b = st.columns([1, 1])
    with a:
        st.markdown("**Reduction steps** (fitted on all patients)")
        state.table(tables.steps_table(sig.steps_, result.prepared, result.spec.imaging.reproducibility))
        from workbench.report.digest import harmonisation_digest

        for line in harmonisation_digest(result):
            st.caption(line.strip())
        coef = getattr(sig, "coef_", None)
        if coef is not None and len(coef):
            st.markdown("**Selected features** (coefficient per training SD)")
            df = pd.DataFrame({"Feature": list(coef.index), "Coefficient": [f"{c:+.3f}" for c in coef.to_numpy()]})
            state.table(df)
        if not tuple(sig.selected_features_):
            st.warning("The signature kept no feature: the clinical + imaging model has no signature term and "
                       "is equal to the clinical model. Its numbers say nothing about imaging.")
        vol = result.volume.get("combined") if isinstance(getattr(result, "volume", None), dict) else None
        if vol is not None and hasattr(vol, "pearson"):
            st.caption(f"Correlation of the signature with {vol.feature}: Pearson {float(vol.pearson):.2f}, "
                       f"Spearman {float(vol.spearman):.2f}.")
        elif result.spec.imaging.volume_feature:  # said only where the study names a tumour-volume feature
            why = "the signature kept no feature" if not tuple(sig.selected_features_) else "not computed"
            st.caption(f"Correlation of the signature with tumour volume: not applicable ({why}).")
    with b:
        _path(sig)
    sel = result.validation.selection.get("combined")
    st.subheader("Stability across resamples")
    if sel is None or not sel.n_fits:
        st.info("No resample refits reported their selected features.")
        return
    top = tables.selection_table(sel, top=25)
    fig = _figure("plot_selection_frequency", sel.frequency, n_replicates=sel.n_fits)
    if fig is None:
        fig = charts.bar_figure(top["Feature"], top["Share kept"],
                                xlabel=f"Share of {sel.n_fits} refits that kept the feature")
    left, right = st.columns([3, 2])
    left.image(charts.figure_bytes(fig))
    with right:
        st.write(kept_words(sel.n_selected, sel.n_fits))
        if len(top):
            state.table(top, max_rows=25)


def kept_words(n_selected, n_fits: int) -> str:
    """How many features the resample refits kept, in words ("between 0 and 0 features" once read oddly)."""
    n = np.asarray(n_selected, dtype=int)
    if not n.size or n.max() == 0:
        return f"None of the {n_fits} refits kept a feature."
    return (f"{n_fits} refits kept between {int(n.min())} and {int(n.max())} features "
            f"(median {float(np.median(n)):g}).")


if __name__ == "__main__":
    render()
