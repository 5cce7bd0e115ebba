"""Did harmonisation remove the scanner effect, and did the biology survive it?

Checks of a feature table before and after ComBat (:mod:`workbench.preprocess.harmonize`),
none of which uses outcomes except the confounding check:

* **Location effect per feature**: F test of the scanner dummies in an ordinary
  least-squares fit of the feature on the protected covariates plus scanner, against
  the fit without scanner. The share of features with a Benjamini-Hochberg q-value
  below ``fdr`` is reported.
* **Scale effect per feature**: Brown-Forsythe test (one-way ANOVA of absolute
  deviations from each scanner's median) on the residuals of the covariate fit.
* **Scanner classifier**: cross-validated multinomial logistic regression (L2,
  standardised features, stratified folds) predicting the scanner from the features;
  macro one-vs-rest AUC of the out-of-fold probabilities. 0.5 means the features no
  longer tell scanners apart; it also picks up multivariate differences that the
  per-feature tests miss.
* **Biology kept**: for each protected covariate, the share of features whose
  association with it (F test of its design columns, adjusted for scanner) has a
  q-value below ``fdr``; harmonisation should leave this share about unchanged.
* **Confounding** (:func:`confounding`): scanner against each clinical predictor
  (chi-squared test with Cramer's V, or Kruskal-Wallis with eta squared) and against
  outcome (log-rank test). ComBat attributes every systematic difference between
  scanners to the scanner; when scanner goes with stage or with survival, it removes
  real signal with it (or, for a protected covariate, cannot separate the two).

The "after" checks on the rows ComBat was fitted on are partly in-sample (the location
test is then close to zero by construction); on a new cohort they are out-of-sample.

References
----------
.. [1] Benjamini Y, Hochberg Y. Controlling the false discovery rate. J R Stat Soc B
       1995;57:289-300.
.. [2] Brown MB, Forsythe AB. Robust tests for the equality of variances. J Am Stat
       Assoc 1974;69:364-7.
.. [3] Johnson WE, Li C, Rabinovic A. Biostatistics 2007;8:118-27 (ComBat).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from workbench.preprocess.reduce import benjamini_hochberg

DEFAULT_FDR = 0.05
# confounding is flagged when the association is both clear (p below this) and large
CONFOUNDING_P = 0.01
LARGE_CRAMER_V = 0.3  # common practice for a "moderate to large" association
LARGE_ETA2 = 0.14  # Cohen's "large" eta squared (common practice)


def bh_qvalues(p) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values), in the input order (the screen's own rule)."""
    return benjamini_hochberg(p)


def _codes(batch) -> tuple[np.ndarray, np.ndarray]:
    codes, levels = pd.factorize(np.asarray(batch).astype(str), sort=True)
    return codes, np.asarray(levels)


def _nested_f(Y: np.ndarray, reduced: np.ndarray, full: np.ndarray) -> np.ndarray:
    """Per-column F-test p-values of ``full`` against ``reduced`` (both include an intercept)."""
    n = Y.shape[0]

    def rss(D):
        beta, *_ = np.linalg.lstsq(D, Y, rcond=None)
        r = Y - D @ beta
        return (r * r).sum(axis=0), np.linalg.matrix_rank(D)

    rss0, r0 = rss(reduced)
    rss1, r1 = rss(full)
    df1, df2 = r1 - r0, n - r1
    if df1 <= 0 or df2 <= 0:
        return np.full(Y.shape[1], np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        F = ((rss0 - rss1) / df1) / (rss1 / df2)
    F = np.where(rss1 > 0, F, np.where(rss0 > rss1, np.inf, 0.0))
    return stats.f.sf(F, df1, df2)


def location_pvalues(X, batch, covariates=None) -> np.ndarray:
    """F test per feature of a scanner location effect, adjusted for the covariates."""
    Y = np.asarray(X, dtype=float)
    codes, levels = _codes(batch)
    one = np.ones((Y.shape[0], 1))
    C = np.zeros((Y.shape[0], 0)) if covariates is None else np.asarray(covariates, dtype=float).reshape(len(Y), -1)
    dummies = np.eye(levels.size)[codes][:, 1:]
    return _nested_f(Y, np.hstack([one, C]), np.hstack([one, C, dummies]))


def scale_pvalues(X, batch, covariates=None) -> np.ndarray:
    """Brown-Forsythe test per feature of unequal spread between scanners (covariate-adjusted residuals)."""
    Y = np.asarray(X, dtype=float)
    codes, levels = _codes(batch)
    n = Y.shape[0]
    C = np.zeros((n, 0)) if covariates is None else np.asarray(covariates, dtype=float).reshape(n, -1)
    D = np.hstack([np.ones((n, 1)), C, np.eye(levels.size)[codes][:, 1:]])
    beta, *_ = np.linalg.lstsq(D, Y, rcond=None)
    R = Y - D @ beta
    Z = np.empty_like(R)
    for k in range(levels.size):
        rows = codes == k
        Z[rows] = np.abs(R[rows] - np.median(R[rows], axis=0))
    one = np.ones((n, 1))
    return _nested_f(Z, one, np.hstack([one, np.eye(levels.size)[codes][:, 1:]]))


def scanner_classifier_auc(X, batch, covariates=None, *, harmonise=None, folds: int = 5,
                           random_state: int = 0) -> float:
    """Cross-validated macro one-vs-rest AUC of a logistic regression predicting the scanner.

    ``harmonise(X_part, b_part, C_part) -> H_part``, when given, is applied to the training
    rows and to the held-out rows of each fold separately. Harmonising all rows together
    (or the held-out rows with effects learned on the training rows) makes the classifier
    anti-learn: the empirical Bayes estimates leave a residual pattern in the training rows
    that the held-out rows carry with the opposite sign, and the AUC falls well below 0.5
    on data with no scanner effect at all (0.43 in bench/bench_harmonisation_checks.py;
    0.51 with the parts harmonised separately). NaN when a scanner is too small to split.
    """
    from sklearn.linear_model import LogisticRegression
    from sklearn.metrics import roc_auc_score
    from sklearn.model_selection import StratifiedKFold
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from workbench.errors import WorkbenchError

    Y = np.asarray(X, dtype=float)
    b = np.asarray(batch).astype(str)
    n = Y.shape[0]
    C = np.zeros((n, 0)) if covariates is None else np.asarray(covariates, dtype=float).reshape(n, -1)
    codes, levels = _codes(b)
    counts = np.bincount(codes)
    k = int(min(folds, counts.min() // 2 if harmonise is not None else counts.min()))
    if levels.size < 2 or k < 2:
        return float("nan")
    prob = np.zeros((n, levels.size))
    cv = StratifiedKFold(n_splits=k, shuffle=True, random_state=random_state)
    for tr, te in cv.split(Y, codes):
        A, B = Y[tr], Y[te]
        if harmonise is not None:
            try:
                A, B = harmonise(A, b[tr], C[tr]), harmonise(B, b[te], C[te])
            except WorkbenchError:  # a scanner too small within a fold
                return float("nan")
        clf = make_pipeline(StandardScaler(), LogisticRegression(C=1.0, max_iter=2000))
        clf.fit(np.asarray(A, float), codes[tr])
        prob[np.ix_(te, clf.classes_)] = clf.predict_proba(np.asarray(B, float))
    if levels.size == 2:
        return float(roc_auc_score(codes, prob[:, 1]))
    return float(roc_auc_score(codes, prob, multi_class="ovr", average="macro"))


def combat_refit(**params):
    """Harmoniser for :func:`check_features`: ComBat learned on the rows it is given (development data)."""
    from workbench.preprocess.harmonize import ComBat

    def harmonise(A, ba, Ca):
        Ca = Ca if Ca.shape[1] else None
        return ComBat(**params).fit_transform(A, ba, Ca)

    return harmonise


def combat_fixed(combat):
    """Harmoniser for a fitted ComBat on a new cohort: the training scanners' effects fixed, a scanner new
    to it (policy "estimate") estimated from the rows given (here down to 3 rows, so that folds work)."""
    import copy
    import warnings

    diag = copy.copy(combat)
    diag.min_new_batch = 3

    def harmonise(A, ba, Ca):
        Ca = Ca if Ca.shape[1] else None
        cb = diag.with_batches(diag.new_batches(A, ba, Ca)) if combat.unseen_batch == "estimate" else diag
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # unadjusted new scanners ("reference") are reported by the caller
            return cb.transform(A, ba, Ca)

    return harmonise


@dataclass(frozen=True)
class FeatureCheck:
    """Scanner effects and covariate associations of one feature table."""

    n: int
    n_features: int
    location_share: float
    scale_share: float
    classifier_auc: float
    covariate_share: dict = field(default_factory=dict)  # protected covariate -> share of features associated

    def as_dict(self) -> dict:
        return {"n": self.n, "n_features": self.n_features, "location_share": self.location_share,
                "scale_share": self.scale_share, "classifier_auc": self.classifier_auc,
                "covariate_share": dict(self.covariate_share)}


def check_features(X, batch, covariates=None, covariate_columns: dict | None = None, *, harmonise=None,
                   fdr: float = DEFAULT_FDR, folds: int = 5, random_state: int = 0) -> FeatureCheck:
    """Scanner location/scale effects, scanner-classifier AUC and covariate associations of ``X``.

    ``harmonise`` (see :func:`scanner_classifier_auc`; :func:`combat_refit`,
    :func:`combat_fixed`): check the harmonised table. The per-feature tests then use
    all rows harmonised together (what the models see); the classifier learns the
    harmonisation within each fold. ``covariate_columns`` maps each protected
    covariate's name to its columns in ``covariates`` (a categorical covariate has
    several design columns, tested jointly).
    """
    Y = np.asarray(X, dtype=float)
    n = Y.shape[0]
    b = np.asarray(batch).astype(str)
    C = None if covariates is None else np.asarray(covariates, dtype=float).reshape(n, -1)
    keep = Y.std(axis=0) > 0
    Y = Y[:, keep]
    auc = scanner_classifier_auc(Y, b, C, harmonise=harmonise, folds=folds, random_state=random_state)
    if harmonise is not None:
        Y = np.asarray(harmonise(Y, b, np.zeros((n, 0)) if C is None else C), dtype=float)

    def share(p):
        return float(np.mean(bh_qvalues(np.nan_to_num(p, nan=1.0)) < fdr)) if p.size else float("nan")

    loc = share(location_pvalues(Y, b, C))
    scale = share(scale_pvalues(Y, b, C))
    cov_share = {}
    if C is not None and covariate_columns:
        codes, levels = _codes(b)
        base = np.hstack([np.ones((n, 1)), np.eye(levels.size)[codes][:, 1:]])
        for name, cols in covariate_columns.items():
            others = [j for j in range(C.shape[1]) if j not in set(cols)]
            reduced = np.hstack([base, C[:, others]])
            cov_share[name] = share(_nested_f(Y, reduced, np.hstack([reduced, C[:, list(cols)]])))
    return FeatureCheck(n, int(Y.shape[1]), loc, scale, auc, cov_share)


@dataclass(frozen=True)
class Confounding:
    """Association of the scanner with one clinical predictor or with outcome."""

    variable: str
    test: str
    statistic: float
    p_value: float
    effect: float  # Cramer's V, eta squared, or NaN for the log-rank test
    effect_name: str
    protected: bool
    flagged: bool
    message: str = ""

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in ("variable", "test", "statistic", "p_value", "effect", "effect_name",
                                              "protected", "flagged", "message")}


def _categorical(values) -> bool:
    """Text, or numbers with at most 5 distinct values (tables are read as text, so parse first)."""
    num = pd.to_numeric(pd.Series(values), errors="coerce")
    return bool(num.isna().mean() > 0.05 or num.dropna().nunique() <= 5)


def confounding(batch, clinical: pd.DataFrame, *, time=None, event=None, protected=(),
                labels: dict | None = None, kinds: dict | None = None) -> list[Confounding]:
    """Scanner against each clinical column of ``clinical`` and against outcome; large and clear ones flagged.

    ``kinds`` maps a column to "categorical" or "continuous" (the study's predictor
    kinds); other columns are judged from their values.
    """
    from workbench.stats.logrank import logrank_test

    b = np.asarray(batch).astype(str)
    labels = labels or {}
    out = []
    for col in clinical.columns:
        v = clinical[col]
        ok = v.notna().to_numpy()
        if ok.sum() < 10 or np.unique(b[ok]).size < 2:
            continue
        name = labels.get(col, col)
        kind = (kinds or {}).get(col)
        if kind == "categorical" if kind else _categorical(v[ok]):
            tab = pd.crosstab(b[ok], v[ok].astype(str).to_numpy())
            if min(tab.shape) < 2:
                continue
            chi2, p, _, _ = stats.chi2_contingency(tab, correction=False)
            effect = float(np.sqrt(chi2 / (tab.to_numpy().sum() * (min(tab.shape) - 1))))
            test, ename, large = "chi-squared", "Cramer's V", effect >= LARGE_CRAMER_V
        else:
            x = pd.to_numeric(v[ok], errors="coerce").to_numpy(dtype=float)
            fin = np.isfinite(x)  # values like "<0.5" (below a detection limit) are left out here
            x, bx = x[fin], b[ok][fin]
            groups = [x[bx == g] for g in np.unique(bx)]
            if len(groups) < 2 or x.size < 10:
                continue
            chi2, p = stats.kruskal(*groups)
            k, n = len(groups), x.size
            effect = float(max((chi2 - k + 1) / (n - k), 0.0))
            test, ename, large = "Kruskal-Wallis", "eta squared", effect >= LARGE_ETA2
        flagged = bool(p < CONFOUNDING_P and large)
        prot = col in set(protected)
        msg = ""
        if flagged:
            msg = (f"scanner and {name} go together ({test} p = {p:.2g}, {ename} {effect:.2f}): "
                   + ("ComBat protects it, but its effect and the scanner effect are hard to separate, so the "
                      "harmonised features are uncertain for it." if prot else
                      f"ComBat removes {name}-related signal from the features along with the scanner effect; "
                      f"protect {name} ([imaging.harmonise] protect) or interpret the signature with care."))
        out.append(Confounding(name, test, float(chi2), float(p), effect, ename, prot, flagged, msg))
    if time is not None and event is not None and np.unique(b).size >= 2:
        lr = logrank_test(np.asarray(time, float), np.asarray(event, bool), b)
        flagged = bool(lr.p_value < CONFOUNDING_P)
        msg = (f"survival differs between scanners (log-rank p = {lr.p_value:.2g}): if that reflects the patients "
               "rather than the machines, ComBat removes prognostic signal with the scanner effect; compare the "
               "signature with and without harmonisation.") if flagged else ""
        out.append(Confounding("outcome", "log-rank", float(lr.statistic), float(lr.p_value), float("nan"), "",
                               False, flagged, msg))
    return out


def protected_columns(model) -> dict[str, list[int]]:
    """Each protected predictor's label -> its columns in the model's protected-covariate design."""
    out, k = {}, 0
    for t in model.transformer_.terms_:
        if t.column in set(getattr(model, "protect", ())):
            out[t.label or t.column] = list(range(k, k + (t.stop - t.start)))
            k += t.stop - t.start
    return out


def study_checks(model, cohort, spec, *, external_cohort=None, fdr: float = DEFAULT_FDR,
                 random_state: int = 0) -> dict | None:
    """Before/after checks of the model's ComBat step on the development (and external) cohort.

    ``None`` when the model holds no fitted ComBat. The development "after" table is ComBat
    relearned on all development rows (what the final model did); the external "after"
    table is the fitted ComBat applied to the external cohort (new scanners as the study's
    ``unseen_batch`` policy handles them). Confounding is checked on the development cohort.
    """
    if not hasattr(model, "harmonisation_inputs") or cohort.batch is None:
        return None
    X, C, combat = model.harmonisation_inputs(cohort)
    if combat is None:
        return None
    cols = protected_columns(model)
    kw = {"fdr": fdr, "random_state": random_state}
    dev = {"before": check_features(X, cohort.batch, C, cols, **kw).as_dict(),
           "after": check_features(X, cohort.batch, C, cols, harmonise=combat_refit(prior=combat.prior),
                                   **kw).as_dict()}
    preds = list(spec.predictors)
    kinds = {p.column: ("continuous" if p.kind in ("linear", "spline") else "categorical") for p in preds}
    clinical = cohort.clinical[[p.column for p in preds if p.column in cohort.clinical.columns]]
    conf = confounding(cohort.batch, clinical, time=cohort.time, event=cohort.event,
                       protected=tuple(spec.imaging.harmonise.protect),
                       labels={p.column: p.label or p.column for p in preds}, kinds=kinds)
    out = {"fdr": fdr, "n_features": int(np.asarray(X).shape[1]), "development": dev,
           "confounding": [c.as_dict() for c in conf]}
    if external_cohort is not None and external_cohort.batch is not None:
        Xe, Ce, _ = model.harmonisation_inputs(external_cohort)
        out["external"] = {
            "before": check_features(Xe, external_cohort.batch, Ce, cols, **kw).as_dict(),
            "after": check_features(Xe, external_cohort.batch, Ce, cols, harmonise=combat_fixed(combat),
                                    **kw).as_dict()}
    return out
