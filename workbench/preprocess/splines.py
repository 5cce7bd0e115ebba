"""Restricted (natural) cubic spline basis in Harrell's parametrisation.

A restricted cubic spline with knots ``t_1 < ... < t_k`` is a piecewise cubic
polynomial, continuous with continuous first and second derivatives, that is
constrained to be *linear* below ``t_1`` and above ``t_k``. The constraints leave
``k - 1`` free parameters beside the intercept (which a Cox model does not have),
so ``k`` knots give ``k - 1`` design columns: ``x`` itself and ``k - 2`` nonlinear
terms

.. math::

    X_{j+1}(x) = \\frac{(x - t_j)_+^3
                 - (x - t_{k-1})_+^3 \\frac{t_k - t_j}{t_k - t_{k-1}}
                 + (x - t_k)_+^3 \\frac{t_{k-1} - t_j}{t_k - t_{k-1}}}
                {(t_k - t_1)^2},
    \\qquad j = 1, \\dots, k - 2,

where ``(u)_+ = max(u, 0)``. The division by ``(t_k - t_1)^2`` does not change
the space spanned or the fitted curve; it puts the nonlinear columns on roughly
the scale of ``x`` itself, so that coefficients are of comparable size and the
Newton-Raphson steps of a Cox fit are well conditioned. Coefficients of the
nonlinear columns therefore depend on the unit of ``x`` only through the
normalisation, which tables must not interpret on their own: report the curve
or a contrast between two values instead.

References
----------
.. [1] Stone CJ, Koo CY. Additive splines in statistics. Proceedings of the
   Statistical Computing Section, American Statistical Association, 1985:45-48.
.. [2] Devlin TF, Weeks BJ. Spline functions for logistic regression modeling.
   Proceedings of the 11th Annual SAS Users Group International Conference, 1986:646-651.
.. [3] Harrell FE Jr. Regression Modeling Strategies, 2nd ed. Springer, 2015,
   Section 2.4.5 (basis and normalisation) and Table 2.3 (default knot quantiles).
"""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike

from workbench.errors import SpecError

HARRELL_QUANTILES = MappingProxyType(
    {
        3: (0.10, 0.50, 0.90),
        4: (0.05, 0.35, 0.65, 0.95),
        5: (0.05, 0.275, 0.50, 0.725, 0.95),
        6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
        7: (0.025, 0.1833, 0.3417, 0.50, 0.6583, 0.8167, 0.975),
    }
)
"""Default knot quantiles by number of knots (Harrell 2015, Table 2.3)."""

MIN_KNOTS = 3
MAX_KNOTS = 7


def harrell_knots(x: ArrayLike, k: int, *, name: str = "x") -> np.ndarray:
    """Knots at Harrell's default quantiles of the observed values.

    Parameters
    ----------
    x : array-like of shape (n_samples,)
        Observed (already transformed) predictor values; NaN values are ignored.
    k : int
        Number of knots, 3 to 7.
    name : str
        Name of the predictor, used in error messages.

    Returns
    -------
    knots : ndarray of shape (k,)
        Strictly increasing knots, ``numpy.quantile`` (linear interpolation)
        of ``x`` at ``HARRELL_QUANTILES[k]``.

    Raises
    ------
    SpecError
        If ``k`` is out of range or the values are too few or too tied to give
        ``k`` distinct knots.

    Notes
    -----
    The quantiles are used for every sample size; Harrell suggests moving the
    outer knots to the fifth smallest and largest values when n < 100, which
    is not done here so that knots depend on the data only through quantiles.

    References
    ----------
    .. [1] Harrell FE Jr. Regression Modeling Strategies, 2nd ed. Springer,
       2015, Table 2.3.
    """
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k not in HARRELL_QUANTILES:
        raise SpecError(
            f"a spline for {name!r} was asked for with {k!r} knots; the number of knots must be a "
            f"whole number from {MIN_KNOTS} to {MAX_KNOTS} (4 is a common choice)."
        )
    v = np.asarray(x, dtype=float).ravel()
    v = v[np.isfinite(v)]
    n_distinct = np.unique(v).size
    if n_distinct < k:
        raise SpecError(
            f"{name!r} has only {n_distinct} distinct value(s) among the training patients, too few "
            f"for a spline with {k} knots. Use fewer knots, a linear term, or a categorical term."
        )
    knots = np.quantile(v, HARRELL_QUANTILES[int(k)])
    if np.any(np.diff(knots) <= 0):
        raise SpecError(
            f"{name!r} has so many tied values among the training patients that {k} spline knots "
            f"at the default percentiles coincide ({', '.join(f'{t:.4g}' for t in knots)}). "
            "Use fewer knots, a linear term, or a categorical term."
        )
    return knots


def rcs_basis(x: ArrayLike, knots: ArrayLike) -> np.ndarray:
    """Evaluate the restricted cubic spline basis (Harrell's parametrisation).

    Parameters
    ----------
    x : array-like of shape (n_samples,)
        Values at which to evaluate; NaN propagates to the whole row.
    knots : array-like of shape (k,)
        Strictly increasing knots, k >= 3.

    Returns
    -------
    basis : ndarray of shape (n_samples, k - 1)
        Column 0 is ``x``; columns 1 to k - 2 are the nonlinear terms of the
        module docstring, divided by ``(t_k - t_1)^2``.

    References
    ----------
    .. [1] Harrell FE Jr. Regression Modeling Strategies, 2nd ed. Springer,
       2015, Section 2.4.5.
    """
    t = np.asarray(knots, dtype=float).ravel()
    if t.size < MIN_KNOTS or not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
        raise SpecError(
            f"spline knots must be at least {MIN_KNOTS} finite, strictly increasing numbers; "
            f"got {t.tolist()}."
        )
    v = np.asarray(x, dtype=float).ravel()
    t_km1, t_k = t[-2], t[-1]
    span = t_k - t_km1
    inner = t[:-2]
    cube = np.maximum(v[:, None] - inner[None, :], 0.0) ** 3
    tail_km1 = np.maximum(v - t_km1, 0.0)[:, None] ** 3
    tail_k = np.maximum(v - t_k, 0.0)[:, None] ** 3
    nonlinear = (
        cube
        - tail_km1 * ((t_k - inner) / span)[None, :]
        + tail_k * ((t_km1 - inner) / span)[None, :]
    ) / (t_k - t[0]) ** 2
    return np.column_stack([v, nonlinear])
