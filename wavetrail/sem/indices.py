"""Fit indices against the saturated and the independence model.

Conventions (documented in docs/methods/sem.md):

* ``chisq = 2 (loglik_saturated - loglik_model)``, which is ``N * F_ML`` with
  complete data (N, not N - 1).
* ``df = p (p + 3) / 2 - k`` with a mean structure (moments: means, variances,
  covariances); the independence model has ``2 p`` parameters.
* RMSEA ``= sqrt(max(chisq - df, 0) / (df N))`` with N; its 90% interval
  inverts the noncentral chi-square CDF in the noncentrality (Steiger 1990,
  Multivariate Behavioral Research 25(2); Browne & Cudeck 1993, in *Testing
  Structural Equation Models*, Sage).
* CFI (Bentler 1990, Psychological Bulletin 107(2)); TLI (Tucker & Lewis 1973,
  Psychometrika 38(1)).
* SRMR: root mean square of the differences between sample and implied
  correlations over the ``p (p + 1) / 2`` variances and covariances, each matrix
  standardised by its own standard deviations (so diagonal residuals are zero);
  mean residuals are not included. With missing data the sample moments are
  the saturated (EM) estimates.
* AIC ``= -2 loglik + 2 k``; BIC ``= -2 loglik + k log N``; sample-size adjusted
  BIC uses ``log((N + 2) / 24)`` (Sclove 1987, Psychometrika 52(3)).
"""

from __future__ import annotations

import numpy as np
from scipy import optimize, stats as sps


def rmsea_ci(chisq, df, n, level=0.90):
    """Point estimate and ``level`` interval of the RMSEA (N convention)."""
    if df <= 0 or not np.isfinite(chisq):
        return np.nan, np.nan, np.nan
    point = np.sqrt(max(chisq - df, 0.0) / (df * n))
    lo_p, hi_p = 0.5 + level / 2, 0.5 - level / 2

    def solve(target):
        f = lambda lam: sps.ncx2.cdf(chisq, df, lam) - target if lam > 0 else sps.chi2.cdf(chisq, df) - target
        if f(0.0) < 0:  # even a central chi-square puts chisq below the quantile
            return 0.0
        hi = max(chisq, 1.0)
        while f(hi) > 0:
            hi *= 2.0
            if hi > 1e9:
                return np.nan
        return optimize.brentq(f, 0.0, hi, xtol=1e-10)

    lam_lo, lam_hi = solve(lo_p), solve(hi_p)
    return point, np.sqrt(lam_lo / (df * n)), np.sqrt(lam_hi / (df * n))


def srmr(sample_cov, implied_cov):
    """Standardised root mean square residual over variances and covariances."""
    s = np.sqrt(np.diag(sample_cov))
    h = np.sqrt(np.diag(implied_cov))
    R = sample_cov / np.outer(s, s) - implied_cov / np.outer(h, h)
    i, j = np.triu_indices(len(s))
    return float(np.sqrt(np.mean(R[i, j] ** 2)))


def fit_indices(loglik, k, n, p, loglik_sat, loglik_base, sample_cov=None, implied_cov=None, n_moments=None,
                n_base=None):
    """All fit indices of one model as a dict (see the module notes for conventions)."""
    moments = p * (p + 3) // 2 if n_moments is None else n_moments
    df = moments - k
    chisq = 2.0 * (loglik_sat - loglik)
    chisq = max(chisq, 0.0) if chisq > -1e-6 * max(1.0, abs(loglik)) else chisq
    df_b = moments - p - (p if n_base is None else n_base)
    chisq_b = 2.0 * (loglik_sat - loglik_base)
    pval = float(sps.chi2.sf(chisq, df)) if df > 0 else np.nan
    d_m = max(chisq - df, 0.0)
    d_b = max(chisq_b - df_b, d_m)
    cfi = 1.0 - d_m / d_b if d_b > 0 else 1.0
    if not (np.isfinite(chisq) and np.isfinite(chisq_b)):
        cfi = np.nan  # no chi-square, no comparative index
    tli = ((chisq_b / df_b - chisq / df) / (chisq_b / df_b - 1.0)) if df > 0 and df_b > 0 else np.nan
    r, r_lo, r_hi = rmsea_ci(chisq, df, n)
    out = {
        "n": int(n), "loglik": float(loglik), "chisq": float(chisq), "df": int(df), "p": pval,
        "cfi": float(cfi), "tli": float(tli), "rmsea": float(r), "rmsea_lo": float(r_lo), "rmsea_hi": float(r_hi),
        "srmr": srmr(sample_cov, implied_cov) if sample_cov is not None else np.nan,
        "aic": float(-2 * loglik + 2 * k), "bic": float(-2 * loglik + k * np.log(n)),
        "sabic": float(-2 * loglik + k * np.log((n + 2) / 24.0)),
        "baseline_chisq": float(chisq_b), "baseline_df": int(df_b), "k": int(k),
    }
    return out
