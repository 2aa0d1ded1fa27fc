"""Goodness of fit by time rescaling (Brown, Barbieri, Ventura, Kass & Frank 2002, Neural Comput. 14:325).

If a model's conditional intensity is right, the intensity integrated over
each inter-spike interval is exponential with mean 1, so
``z = 1 - exp(-tau)`` is uniform on (0, 1).  The Kolmogorov--Smirnov
statistic of the ``z`` against the uniform distribution tests the model; the
KS plot shows the sorted ``z`` against the uniform quantiles with the 95 %
band ``+/- 1.36 / sqrt(n)`` (Brown et al. 2002, eq. 2.4 and Fig. 1).

When the parameters were estimated from the same intervals the test is
conservative (p-values pile up near 1), as every KS test with estimated
parameters; against the true model the p-values are uniform.
"""

from __future__ import annotations

import numpy as np

__all__ = ["ks_uniform", "KS_BAND_95"]

#: Asymptotic 95 % Kolmogorov-Smirnov band coefficient (Brown et al. 2002): +/- 1.36/sqrt(n).
KS_BAND_95 = 1.36


def ks_uniform(rescaled) -> dict:
    """KS test of rescaled intervals (exponential with mean 1 under the model).

    Parameters
    ----------
    rescaled : array_like
        Rescaled intervals ``tau`` (dimensionless); NaN entries are dropped.

    Returns
    -------
    dict
        ``ks_statistic``, ``p_value`` (scipy's exact/asymptotic KS
        distribution), ``n_intervals``, the sorted ``z`` and the 95 % band
        half-width (for the KS plot).
    """
    from scipy.stats import kstest

    tau = np.asarray(rescaled, dtype=float)
    tau = tau[np.isfinite(tau)]
    if tau.size == 0:
        raise ValueError("no rescaled intervals: the data need at least two spikes in one trial")
    z = np.sort(-np.expm1(-tau))
    res = kstest(z, "uniform")
    return {"ks_statistic": float(res.statistic), "p_value": float(res.pvalue), "n_intervals": int(z.size),
            "z_sorted": z, "band_95": KS_BAND_95 / np.sqrt(z.size)}
