"""ComBat harmonisation of imaging features across scanners or centres.

Each feature is modelled as ``y = alpha + C beta + gamma_batch + delta_batch * eps``:
a grand mean, the effects of protected clinical covariates ``C`` (kept), and an
additive (``gamma``) and multiplicative (``delta``) batch effect (removed). Batch
effects are shrunk towards a common prior across features by empirical Bayes.

Everything is learned from training rows by :meth:`ComBat.fit` and reapplied
unchanged by :meth:`ComBat.transform`, so harmonising evaluation rows or new
patients never looks at their values beyond their own row.

References
----------
.. [1] Johnson WE, Li C, Rabinovic A. Adjusting batch effects in microarray expression
       data using empirical Bayes methods. Biostatistics 2007;8(1):118-27.
.. [2] Fortin JP, Cullen N, Sheline YI, et al. Harmonization of cortical thickness
       measurements across scanners and sites. NeuroImage 2018;167:104-20.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from workbench.errors import CohortError, DataQualityWarning, ModelError, NotFittedError
from workbench.preprocess.imaging_options import (  # noqa: F401  (re-exported)
    COMBAT_PRIORS,
    DEFAULT_MIN_NEW_BATCH,
    UNSEEN_BATCH_POLICIES,
)


def _labels(batch, n: int, where: str) -> np.ndarray:
    if batch is None:
        raise ModelError(f"{where}: ComBat needs a batch label (scanner or centre) for every row.")
    b = np.asarray(batch, dtype=object).ravel()
    if b.size != n:
        raise ModelError(f"{where}: {b.size} batch labels were given for {n} rows; they must match.")
    if pd.isna(b).any():
        rows = np.flatnonzero(pd.isna(b))[:10].tolist()
        raise CohortError(f"{where}: batch label missing in row positions {rows}; fill it in or drop the rows.")
    return b


def _covariates(covariates, n: int, expected: int | None, where: str):
    if covariates is None:
        if expected:
            raise ModelError(
                f"{where}: ComBat was fitted with {expected} protected covariate(s); pass the same "
                "covariates for these rows.")
        return np.zeros((n, 0))
    C = np.asarray(covariates, dtype=float)
    C = C[:, None] if C.ndim == 1 else C
    if C.shape[0] != n:
        raise ModelError(f"{where}: covariates have {C.shape[0]} rows but X has {n}; they must match.")
    if not np.isfinite(C).all():
        raise CohortError(f"{where}: protected covariates contain missing or infinite values.")
    if expected is not None and C.shape[1] != expected:
        raise ModelError(f"{where}: expected {expected} protected covariate column(s), got {C.shape[1]}.")
    return C


def _matrix(X, where: str):
    A = X.to_numpy(dtype=float) if isinstance(X, pd.DataFrame) else np.asarray(X, dtype=float)
    if A.ndim != 2:
        raise CohortError(f"{where}: expected a 2-D table of features, got shape {A.shape}.")
    if not np.isfinite(A).all():
        cols = np.flatnonzero(~np.isfinite(A).all(axis=0))[:5]
        names = [str(X.columns[j]) for j in cols] if isinstance(X, pd.DataFrame) else cols.tolist()
        raise CohortError(f"{where}: missing or infinite feature values in columns {names}; impute them first.")
    return A


def _parametric(Zb, g_hat, d_hat, tol, max_iter):
    """Empirical Bayes posterior (gamma*, delta*^2) of one batch, parametric priors [1]_."""
    n = Zb.shape[0]
    g_bar, tau2 = g_hat.mean(), g_hat.var(ddof=1) if g_hat.size > 1 else 0.0
    m, s2 = d_hat.mean(), d_hat.var(ddof=1) if d_hat.size > 1 else 0.0
    shrink_delta = s2 > 0 and m > 0
    if shrink_delta:
        a = (2 * s2 + m * m) / s2  # inverse-gamma shape and scale by the method of moments
        b = (m * s2 + m**3) / s2
    g_old, d_old = g_hat.copy(), d_hat.copy()
    it = 0
    while it < max_iter:
        it += 1
        den = n * tau2 + d_old
        g_new = np.where(den > 0, (n * tau2 * g_hat + d_old * g_bar) / np.where(den > 0, den, 1.0), g_hat)
        if shrink_delta:
            d_new = (b + 0.5 * ((Zb - g_new) ** 2).sum(axis=0)) / (n / 2.0 + a - 1.0)
        else:
            d_new = d_hat.copy()
        with np.errstate(invalid="ignore", divide="ignore"):
            change = max(np.nanmax(np.abs(g_new - g_old) / np.maximum(np.abs(g_old), 1e-300)),
                         np.nanmax(np.abs(d_new - d_old) / np.maximum(d_old, 1e-300)))
        g_old, d_old = g_new, d_new
        if change < tol:
            break
    return g_old, d_old, it


def _nonparametric(Zb, g_hat, d_hat):
    """Posterior means under the empirical distribution of the other features' effects [1]_.

    Each feature's own (gamma_hat, delta_hat^2) is excluded; weights are normal
    likelihoods of its batch values, computed in log space to avoid underflow.
    """
    n = Zb.shape[0]
    s1, s2 = Zb.sum(axis=0), (Zb * Zb).sum(axis=0)
    donor = d_hat > 0
    g_d, d_d = g_hat[donor], d_hat[donor]
    # sum_j (z_jg - gamma_g')^2 for every pair (g, g') without forming n x p x p
    ss = s2[:, None] - 2.0 * s1[:, None] * g_d[None, :] + n * g_d[None, :] ** 2
    log_w = -0.5 * n * np.log(2 * np.pi * d_d)[None, :] - ss / (2.0 * d_d[None, :])
    own = np.flatnonzero(donor)
    log_w[own, np.arange(own.size)] = -np.inf
    if log_w.shape[1] == 0 or not np.isfinite(log_w).any(axis=1).all():
        return g_hat.copy(), np.where(d_hat > 0, d_hat, 1.0)
    log_w -= log_w.max(axis=1, keepdims=True)
    w = np.exp(log_w)
    w /= w.sum(axis=1, keepdims=True)
    return w @ g_d, w @ d_d


def _batch_effects(Zb, use, prior: str, tol: float, max_iter: int):
    """Location/scale of one batch's standardised rows and their empirical Bayes estimates.

    Shared by :meth:`ComBat.fit` (training batches) and :meth:`ComBat.new_batches` (a
    batch seen only later): the priors' hyper-parameters come from the batch's own
    features, as in [1]_, so a new batch needs nothing but its own rows.
    """
    p = use.size
    g_hat, d_hat = np.zeros(p), np.ones(p)
    g_star, d_star = np.zeros(p), np.ones(p)
    n_iter = 0
    Zu = Zb[:, use]
    g_hat[use] = Zu.mean(axis=0)
    d_hat[use] = Zu.var(axis=0, ddof=1)
    gh, dh = g_hat[use], d_hat[use]
    if prior == "parametric" and use.sum() > 0:
        g_star[use], d_star[use], n_iter = _parametric(Zu, gh, dh, tol, max_iter)
    elif prior == "nonparametric" and use.sum() > 0:
        g_star[use], d_star[use] = _nonparametric(Zu, gh, dh)
    else:
        g_star[use], d_star[use] = gh, dh
    # a feature constant within one batch has delta_hat 0; never divide by it
    d_star = np.where(d_star > 0, d_star, 1.0)
    return g_hat, d_hat, g_star, d_star, n_iter


@dataclass(frozen=True)
class NewBatch:
    """Effects of a batch absent from training, estimated from its own rows (no outcomes).

    ``gamma_star``/``delta_star`` are on the scale of the training standardisation
    (grand mean, protected-covariate effects and pooled variance held fixed);
    ``shift_sd`` and ``scale_ratio`` summarise them over the adjusted features: the
    mean absolute location shift in pooled SDs and the median SD ratio to the pool.
    """

    label: str
    n: int
    gamma_hat: np.ndarray
    delta_hat: np.ndarray
    gamma_star: np.ndarray
    delta_star: np.ndarray
    shift_sd: float
    scale_ratio: float


class ComBat(BaseEstimator):
    """Empirical Bayes location/scale harmonisation across batches (ComBat).

    Parameters
    ----------
    prior : {"parametric", "nonparametric", "none"}, default "parametric"
        ``"parametric"``: normal prior for the additive and inverse-gamma prior for
        the multiplicative batch effects, with hyper-parameters from the features
        (method of moments) [1]_. ``"nonparametric"``: the empirical distribution
        of the other features' batch effects [1]_. ``"none"``: per-batch
        location/scale without shrinkage.
    unseen_batch : {"error", "reference", "estimate"}, default "error"
        What :meth:`transform` does with rows from a batch absent from training.
        ``"error"`` raises :class:`~workbench.errors.ModelError`. ``"reference"``
        standardises them with the training grand mean and pooled SD only and maps
        them straight back, i.e. applies no batch adjustment at all (their scanner
        effect stays in the data) and warns with ``DataQualityWarning``.
        ``"estimate"`` estimates the new batch's location and scale from its own rows
        in the table being transformed (features and protected covariates only, never
        outcomes), with the same empirical Bayes shrinkage as the training batches,
        while the training grand mean, covariate effects and pooled variance stay fixed
        (the out-of-sample form of ComBat; see :meth:`new_batches`). A batch with fewer
        than ``min_new_batch`` rows in the table is left unadjusted, with a warning that
        says so ("reference" for that batch): one patient cannot estimate a scanner.
    reference_batch : str, optional
        Harmonise every batch to this one (the reference-batch form of ComBat, as in
        M-ComBat, Stein et al. 2015; ``ref_batch`` of neuroCombat): the grand mean and
        pooled variance are the reference batch's own, its rows are left exactly as they
        are, and the other batches are mapped onto its scale. Use it when one scanner is the
        standard the signature should speak (for example the scanner of a planned
        prospective study) or when a model must stay valid for that scanner's raw values;
        the default (None) maps every batch to the average of all.
    min_new_batch : int, default 20
        Rows of an unseen batch needed by ``unseen_batch="estimate"`` (at least 3). 20 is
        our choice: with fewer, a batch's per-feature variance is estimated from so few
        rows that the shrinkage, not the data, sets it.
    tol, max_iter : float, int
        Convergence of the parametric fixed-point iteration (largest relative change).

    Attributes
    ----------
    batches_ : ndarray of object
        Batch labels seen in training, in the order of the rows of ``gamma_star_``.
    grand_mean_, var_pooled_ : ndarray of shape (n_features,)
    beta_ : ndarray of shape (n_covariates, n_features)
        Effects of the protected covariates (preserved by the adjustment).
    gamma_hat_, delta_hat_ : ndarray of shape (n_batches, n_features)
        Per-batch location and variance of the standardised data.
    gamma_star_, delta_star_ : ndarray of shape (n_batches, n_features)
        Their empirical Bayes estimates (``delta`` on the variance scale).
    passthrough_ : ndarray of bool of shape (n_features,)
        Features constant in the training rows; left unchanged.
    n_iter_ : ndarray of int of shape (n_batches,)

    References
    ----------
    .. [1] Johnson WE, Li C, Rabinovic A. Biostatistics 2007;8(1):118-27.
    """

    def __init__(self, *, prior: str = "parametric", unseen_batch: str = "error",
                 min_new_batch: int = DEFAULT_MIN_NEW_BATCH, reference_batch: str | None = None,
                 tol: float = 1e-10, max_iter: int = 1000):
        self.prior = prior
        self.unseen_batch = unseen_batch
        self.reference_batch = reference_batch
        self.min_new_batch = min_new_batch
        self.tol = tol
        self.max_iter = max_iter

    def fit(self, X, batch, covariates=None) -> ComBat:
        """Learn batch effects from training rows; returns self."""
        if self.prior not in COMBAT_PRIORS:
            raise ModelError(f"ComBat prior {self.prior!r} is unknown; choose one of {COMBAT_PRIORS}.")
        if self.unseen_batch not in UNSEEN_BATCH_POLICIES:
            raise ModelError(f"unseen_batch={self.unseen_batch!r} is unknown; choose one of {UNSEEN_BATCH_POLICIES}.")
        if int(self.min_new_batch) < 3:
            raise ModelError(f"min_new_batch={self.min_new_batch!r}: a new batch's scale needs at least 3 rows.")
        A = _matrix(X, "ComBat.fit")
        n, p = A.shape
        b = _labels(batch, n, "ComBat.fit")
        C = _covariates(covariates, n, None, "ComBat.fit")
        codes, levels = pd.factorize(b, sort=True)
        counts = np.bincount(codes, minlength=levels.size)
        if (counts < 2).any():
            lone = [str(levels[i]) for i in np.flatnonzero(counts < 2)]
            raise ModelError(
                f"ComBat.fit: batch(es) {lone} have a single row in the training data; a batch's "
                "scale cannot be estimated from one patient. Merge such batches with a similar "
                "scanner or centre, or leave their rows out of harmonisation.")
        nb = levels.size
        D = np.hstack([np.eye(nb)[codes], C])
        if np.linalg.matrix_rank(D) < D.shape[1]:
            raise ModelError(
                "ComBat.fit: the protected covariates are confounded with batch (constant within "
                "batches or collinear with them), so their effect cannot be separated from the "
                "scanner effect. Drop or recode those covariates.")
        B_hat = np.linalg.lstsq(D, A, rcond=None)[0]
        beta = B_hat[nb:]
        ref = self._reference_index(levels)
        if ref is None:
            grand = (counts / n) @ B_hat[:nb]
            var_pooled = ((A - D @ B_hat) ** 2).mean(axis=0)
        else:  # the reference batch's own mean and variance
            rows = codes == ref
            grand = B_hat[ref]
            var_pooled = ((A[rows] - D[rows] @ B_hat) ** 2).mean(axis=0)
        scale_ref = np.maximum(np.abs(A).max(axis=0), 1.0)
        passthrough = var_pooled <= (1e-12 * scale_ref) ** 2
        var_pooled = np.where(passthrough, 1.0, var_pooled)
        Z = (A - grand - C @ beta) / np.sqrt(var_pooled)
        use = ~passthrough
        g_hat, d_hat = np.zeros((nb, p)), np.ones((nb, p))
        g_star, d_star = np.zeros((nb, p)), np.ones((nb, p))
        n_iter = np.zeros(nb, dtype=int)
        for i in range(nb):
            g_hat[i], d_hat[i], g_star[i], d_star[i], n_iter[i] = _batch_effects(
                Z[codes == i], use, self.prior, self.tol, self.max_iter)
        if ref is not None:  # the reference is the target: no adjustment of its own rows
            g_star[ref], d_star[ref] = 0.0, 1.0
        self.batches_ = np.asarray(levels, dtype=object)
        self.grand_mean_, self.var_pooled_, self.beta_ = grand, var_pooled, beta
        self.gamma_hat_, self.delta_hat_ = g_hat, d_hat
        self.gamma_star_, self.delta_star_ = g_star, d_star
        self.passthrough_, self.n_iter_ = passthrough, n_iter
        self.n_features_in_ = p
        self.n_covariates_ = C.shape[1]
        if isinstance(X, pd.DataFrame):
            self.feature_names_in_ = np.asarray(X.columns.astype(str), dtype=object)
        return self

    def _reference_index(self, levels) -> int | None:
        if self.reference_batch is None:
            return None
        names = [str(v) for v in levels]
        if str(self.reference_batch) not in names:
            raise ModelError(f"ComBat: the reference batch {self.reference_batch!r} is not among the training "
                             f"batches {names}; name one of them.")
        return names.index(str(self.reference_batch))

    def _checked(self, X, batch, covariates, where: str):
        if not hasattr(self, "gamma_star_"):
            raise NotFittedError("ComBat is not fitted yet; call fit on the training rows first.")
        A = _matrix(X, where)
        n, p = A.shape
        if p != self.n_features_in_:
            raise ModelError(f"{where}: X has {p} features; {self.n_features_in_} were seen in fit.")
        b = _labels(batch, n, where)
        C = _covariates(covariates, n, self.n_covariates_, where)
        index = {lab: i for i, lab in enumerate(self.batches_)}
        codes = np.array([index.get(lab, -1) for lab in b], dtype=int)
        stand = self.grand_mean_ + C @ self.beta_
        return A, b, codes, stand

    def new_batches(self, X, batch, covariates=None) -> dict[str, NewBatch]:
        """Estimate the effects of every unseen batch with at least ``min_new_batch`` rows.

        The rows are standardised with the training grand mean, protected-covariate
        effects and pooled variance (all fixed); each new batch's location and scale
        are then estimated from its own rows with the estimator's prior, exactly as a
        training batch's are in :meth:`fit`. Uses feature values and protected
        covariates only. Returns ``{label: NewBatch}`` (empty when every batch is known
        or too small).
        """
        A, b, codes, stand = self._checked(X, batch, covariates, "ComBat.new_batches")
        Z = (A - stand) / np.sqrt(self.var_pooled_)
        use = ~self.passthrough_
        out = {}
        unseen = codes < 0
        for lab in sorted({str(v) for v in b[unseen]}):
            rows = unseen & (b.astype(str) == lab)
            if rows.sum() < int(self.min_new_batch):
                continue
            g_hat, d_hat, g_star, d_star, _ = _batch_effects(Z[rows], use, self.prior, self.tol, self.max_iter)
            shift = float(np.mean(np.abs(g_star[use]))) if use.any() else 0.0
            ratio = float(np.median(np.sqrt(d_star[use]))) if use.any() else 1.0
            out[lab] = NewBatch(lab, int(rows.sum()), g_hat, d_hat, g_star, d_star, shift, ratio)
        return out

    def with_batches(self, fresh: dict) -> ComBat:
        """A copy that knows the batches of ``fresh`` (from :meth:`new_batches`) as if seen in training.

        Lets rows of a new scanner be transformed one at a time, or a held-out part of a
        cohort, with effects estimated once from other rows of that scanner.
        """
        import copy

        out = copy.copy(self)
        labels = [lab for lab in fresh if lab not in {str(b) for b in self.batches_}]
        if labels:
            out.batches_ = np.concatenate([self.batches_, np.asarray(labels, dtype=object)])
            for attr, key in (("gamma_hat_", "gamma_hat"), ("delta_hat_", "delta_hat"),
                              ("gamma_star_", "gamma_star"), ("delta_star_", "delta_star")):
                setattr(out, attr, np.vstack([getattr(self, attr)] + [getattr(fresh[lab], key) for lab in labels]))
            out.n_iter_ = np.concatenate([self.n_iter_, np.zeros(len(labels), dtype=int)])
        return out

    def transform(self, X, batch, covariates=None):
        """Remove the batch effects from rows (see ``unseen_batch`` for batches not seen in fit)."""
        A, b, codes, stand = self._checked(X, batch, covariates, "ComBat.transform")
        unseen = codes < 0
        g_star, d_star = self.gamma_star_, self.delta_star_
        if unseen.any():
            labels = sorted({str(v) for v in b[unseen]})
            known = [str(v) for v in self.batches_]

            def rows_of(mask):
                pos = np.flatnonzero(mask)
                shown = (X.index[pos] if isinstance(X, pd.DataFrame) else pos)[:10].tolist()
                return f"{shown}{' ...' if pos.size > 10 else ''}"

            if self.unseen_batch == "error":
                raise ModelError(
                    f"ComBat.transform: batch(es) {labels} were not in the training data "
                    f"(rows {rows_of(unseen)}); known batches are {known}. "
                    "Their scanner effect cannot be estimated. Add such patients to training, set "
                    "unseen_batch='estimate' to estimate it from the new scanner's own patients "
                    "(at least min_new_batch of them), or 'reference' to leave these rows unadjusted.")
            fresh = self.new_batches(X, batch, covariates) if self.unseen_batch == "estimate" else {}
            if fresh:
                g_star = np.vstack([g_star, [fresh[lab].gamma_star for lab in fresh]])
                d_star = np.vstack([d_star, [fresh[lab].delta_star for lab in fresh]])
                for k, lab in enumerate(fresh):
                    hit = unseen & (b.astype(str) == lab)
                    codes[hit] = len(self.batches_) + k
                unseen = codes < 0
            left = sorted({str(v) for v in b[unseen]})
            if left:
                if self.unseen_batch == "estimate":
                    counts = {lab: int((b[unseen].astype(str) == lab).sum()) for lab in left}
                    why = (f"only {', '.join(f'{v} of {lab}' for lab, v in counts.items())} row(s) here, fewer "
                           f"than the {int(self.min_new_batch)} needed to estimate a new scanner's effects "
                           "(min_new_batch); harmonise them together with the other patients of their "
                           "scanner (for example with 'workbench apply' on all of them)")
                else:
                    why = "unseen_batch='reference'"
                warnings.warn(
                    f"ComBat: rows {rows_of(unseen)} come from batch(es) {left} not seen in training; they are "
                    f"left without batch adjustment ({why}).",
                    DataQualityWarning, stacklevel=2)
        sd = np.sqrt(self.var_pooled_)
        Z = (A - stand) / sd
        k = np.maximum(codes, 0)
        adj = (Z - g_star[k]) / np.sqrt(d_star[k]) * sd + stand
        keep = unseen[:, None] | self.passthrough_[None, :]
        if self.reference_batch is not None:  # the reference batch's rows stay exactly as they were
            keep = keep | (b.astype(str) == str(self.reference_batch))[:, None]
        out = np.where(keep, A, adj)
        if isinstance(X, pd.DataFrame):
            return pd.DataFrame(out, index=X.index, columns=X.columns)
        return out

    def fit_transform(self, X, batch, covariates=None):
        return self.fit(X, batch, covariates).transform(X, batch, covariates)
