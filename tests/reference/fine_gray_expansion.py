"""The Fine-Gray data expansion built independently of the package, one patient at a time.

Shared by the competing-risks reference tests: a lifelines Cox fit with delayed entry and
case weights on these rows is the reference Fine-Gray fit (Geskus, Biometrics 2011).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sksurv.nonparametric import CensoringDistributionEstimator
from sksurv.util import Surv


def independent_expansion(D, t, c, cause, ids: bool = False):
    """Fine-Gray rows, one patient at a time (Geskus 2011, section 3); ``ids`` adds each row's patient index."""
    cens = CensoringDistributionEstimator().fit(Surv.from_arrays(c > 0, t))

    def G(s):  # right-continuous P(C > s), events before censorings at ties
        return float(cens.predict_proba(np.array([s]))[0])

    def G_left(s):  # P(C >= s): G just before s
        earlier = t[t < s]
        return G(earlier.max()) if earlier.size else 1.0

    t_last = t[c == cause].max()
    cuts = np.unique(t[c == 0])
    rows = []
    for i in range(t.size):
        # start -1: at risk from before time 0, so a time-0 event (bmt) is in its own risk set
        rows.append({**D.iloc[i].to_dict(), "start": -1.0, "stop": t[i], "E": int(c[i] == cause), "w": 1.0,
                     **({"id": i} if ids else {})})
        if c[i] > 0 and c[i] != cause and t[i] < t_last:
            pts = [t[i], *cuts[(cuts > t[i]) & (cuts < t_last)], t_last]
            for a, b in zip(pts[:-1], pts[1:], strict=True):
                w = G(a) / G_left(t[i])
                if w > 0:
                    rows.append({**D.iloc[i].to_dict(), "start": a, "stop": b, "E": 0, "w": w,
                                 **({"id": i} if ids else {})})
    return pd.DataFrame(rows)
