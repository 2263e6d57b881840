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
* SRMR (``srmr``): Bentler's standardised root mean square residual (Bentler 1995,
  *EQS Structural Equations Program Manual*; Hu & Bentler 1999, Structural Equation
  Modeling 6(1)): residuals ``(s_ij - sigma_ij) / sqrt(s_ii s_jj)`` over the
  ``p (p + 1) / 2`` variances and covariances and, with a mean structure, the ``p``
  standardised mean residuals ``(m_i - mu_i) / sqrt(s_ii)``; the root of their mean
  square. The sample moments ``s``, ``m`` are the saturated (EM) estimates with missing
  data. This is the default SRMR of lavaan (``srmr_bentler``).
* ``srmr_corr``: the correlation-residual version, kept as a second column: sample
  and implied covariance matrices each standardised by their own standard deviations
  (diagonal residuals zero), no means, averaged over ``p (p + 1) / 2`` entries.
  It is smaller than ``srmr`` whenever variances or means are misfitted; do not
  compare it with cut-offs stated for ``srmr``.
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


def srmr(sample_cov, implied_cov, sample_mean=None, implied_mean=None):
    """Bentler's SRMR: residual (co)variances standardised by the sample standard
    deviations, and the standardised mean residuals when both means are given."""
    s = np.sqrt(np.diag(sample_cov))
    R = (sample_cov - implied_cov) / np.outer(s, s)
    i, j = np.triu_indices(len(s))
    total, count = float(np.sum(R[i, j] ** 2)), len(i)
    if sample_mean is not None and implied_mean is not None:
        total += float(np.sum(((np.asarray(sample_mean) - np.asarray(implied_mean)) / s) ** 2))
        count += len(s)
    return float(np.sqrt(total / count))


def srmr_corr(sample_cov, implied_cov):
    """Correlation-residual RMR over variances and covariances (diagonal residuals zero, no means)."""
    s = np.sqrt(np.diag(sample_cov))
    h = np.sqrt(np.diag(implied_cov))
    R = sample_cov / np.outer(s, s) - implied_cov / np.outer(h, h)
    i, j = np.triu_indices(len(s))
    return float(np.sqrt(np.mean(R[i, j] ** 2)))


def fit_indices(loglik, k, n, p, loglik_sat, loglik_base, sample_cov=None, implied_cov=None, n_moments=None,
                n_base=None, sample_mean=None, implied_mean=None):
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
        "srmr": srmr(sample_cov, implied_cov, sample_mean, implied_mean) if sample_cov is not None else np.nan,
        "srmr_corr": srmr_corr(sample_cov, implied_cov) if sample_cov is not None else np.nan,
        "aic": float(-2 * loglik + 2 * k), "bic": float(-2 * loglik + k * np.log(n)),
        "sabic": float(-2 * loglik + k * np.log((n + 2) / 24.0)),
        "baseline_chisq": float(chisq_b), "baseline_df": int(df_b), "k": int(k),
    }
    return out
