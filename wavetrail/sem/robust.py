"""Scaled and robust fit indices for a FIML fit with sandwich (robust) standard errors.

Two families of indices, both reported beside the normal-theory ones:

* **scaled** (``cfi_scaled``, ``tli_scaled``, ``rmsea_scaled``): the usual formulas with the
  model's and the baseline model's chi-square replaced by their Yuan-Bentler scaled
  chi-squares ``T / c`` (Yuan & Bentler 2000, Sociological Methodology 30). With
  ``c`` = scaling factor, ``rmsea_scaled = sqrt(max(T - c df, 0) / (c df N))``; its interval
  inverts the noncentral chi-square at ``T`` with ``c df`` degrees of freedom. These estimate
  a population value that depends on the non-normality (Brosseau-Liard, Savalei & Li 2012).
* **robust** (``cfi_robust``, ``tli_robust``, ``rmsea_robust``): consistent estimates of the
  normal-theory population indices under non-normality (Brosseau-Liard, Savalei & Li 2012,
  Multivariate Behavioral Research 47(6), for the RMSEA; Brosseau-Liard & Savalei 2014,
  Multivariate Behavioral Research 49(5), for CFI and TLI):

  ``rmsea_robust = sqrt(max(T3 - c3 df, 0) / (df N))``,
  ``cfi_robust = 1 - max(T3 - c3 df, 0) / max(T3 - c3 df, T3_B - c3_B df_B, 0)``,
  ``tli_robust = 1 - (T3 - c3 df) df_B / ((T3_B - c3_B df_B) df)``.

  With missing data the FIML chi-square does not estimate the complete-data noncentrality,
  so ``T3`` and ``c3`` follow the corrected version of Zhang & Savalei (2023, Psychological
  Methods 28(2)): ``T3`` is
  the complete-data ML discrepancy ``N F_ML`` of the model-implied moments (at the FIML
  estimates) against the saturated model's EM moments, and
  ``c3 = tr(U Wm^-1 Wc Wm^-1 U Gamma) / df`` with ``Wm`` the observed (FIML) information of
  the saturated model per person at its EM estimate, ``Wc`` the complete-data information at
  the same moments, ``Gamma = Wm^-1 J Wm^-1`` (``J``: mean outer product of the saturated
  model's casewise scores), ``Delta`` the Jacobian of the implied moments and
  ``U = Wm - Wm Delta (Delta' Wm Delta)^-1 Delta' Wm``; the baseline (independence) model the
  same way. Without missing values ``T3 = T`` and ``c3`` is the Satorra-Bentler trace built
  from the saturated model's information. This is what lavaan 0.6-14 reports as
  ``cfi.robust`` etc. for ``estimator = "MLR", missing = "ml"``.

All RMSEAs use N (not N - 1), like the normal-theory one.
"""

from __future__ import annotations

import numpy as np

from wavetrail.sem.indices import rmsea_ci
from wavetrail.sem.spec import NU
from wavetrail.sem.stats import SuffStats

#: fit keys added by :func:`add_robust_indices` (the order of the growth fit table)
ROBUST_KEYS = ("baseline_chisq_scaled", "baseline_scaling", "cfi_scaled", "tli_scaled", "rmsea_scaled",
               "rmsea_scaled_lo", "rmsea_scaled_hi", "cfi_robust", "tli_robust", "rmsea_robust",
               "rmsea_robust_lo", "rmsea_robust_hi")


def _moment_spec(p, diagonal=False):
    """Means and (co)variances of ``p`` observed variables as free parameters (intercepts first per variable)."""
    from wavetrail.sem.spec import ModelSpec

    names = [f"v{i}" for i in range(p)]
    spec = ModelSpec(observed=names)
    for i, a in enumerate(names):
        spec.intercept(a)
        for c in (names[i:i + 1] if diagonal else names[i:]):
            spec.cov(a, c)
    return spec


def _moment_theta(cm, mu, sigma):
    th = np.zeros(cm.k)
    for e in cm.entries:
        th[e.param] = mu[e.row] if e.matrix == NU else sigma[e.row, e.col]
    return th


def _jacobian(spec, theta, cms):
    """d(implied moments)/d(theta), central differences (the moments are polynomial in theta)."""
    k = len(theta)
    h = 1e-6 * np.maximum(np.abs(theta), 1.0)
    J = np.zeros((cms.k, k))
    for j in range(k):
        up, dn = theta.copy(), theta.copy()
        up[j] += h[j]
        dn[j] -= h[j]
        J[:, j] = (_moment_theta(cms, *spec.implied(up)) - _moment_theta(cms, *spec.implied(dn))) / (2 * h[j])
    return J


def ml_discrepancy(mu_model, sigma_model, mu_sample, sigma_sample):
    """Complete-data ML discrepancy ``F`` (with means); ``N F`` is the likelihood-ratio chi-square."""
    p = len(mu_sample)
    _, ld_m = np.linalg.slogdet(sigma_model)
    _, ld_s = np.linalg.slogdet(sigma_sample)
    inv = np.linalg.inv(sigma_model)
    d = mu_sample - mu_model
    return float(ld_m - ld_s + np.trace(sigma_sample @ inv) - p + d @ inv @ d)


def _complete_stats(mu, sigma, N):
    p = len(mu)
    return SuffStats(np.ones((1, p), bool), np.array([[N]], float), (N * mu)[None, None],
                     (N * (sigma + np.outer(mu, mu)))[None, None])


def corrected_statistics(spec, theta, mu_s, sigma_s, stats, rows, df, df_b, free=None):
    """``T3, c3`` of the model and ``T3_B, c3_B`` of the independence model (see the module notes).

    ``free``: indices of the parameters that are estimated (a bounded fit leaves those held
    at a bound out of the Jacobian, as it does for the standard errors); default all.
    """
    from wavetrail.sem.casewise import casewise_scores
    from wavetrail.sem.fitting import observed_information
    from wavetrail.sem.saturated import independence

    N = float(stats.total[0])
    p = len(mu_s)
    sat = _moment_spec(p)
    cms = sat.compile()
    th1 = _moment_theta(cms, mu_s, sigma_s)
    Wm = observed_information(cms, th1, stats) / N
    S1 = casewise_scores(sat, th1, rows)
    Jm = S1.T @ S1 / N
    Wc = observed_information(cms, th1, _complete_stats(mu_s, sigma_s, N)) / N
    Wmi = np.linalg.inv(Wm)
    Gamma = Wmi @ Jm @ Wmi
    WcW = Wmi @ Wc @ Wmi

    def trace(D):
        WD = Wm @ D
        U = Wm - WD @ np.linalg.solve(D.T @ WD, WD.T)
        return float(np.trace(U @ WcW @ U @ Gamma))

    mu, sigma = spec.implied(theta)
    t3 = N * ml_discrepancy(mu, sigma, mu_s, sigma_s)
    D = _jacobian(spec, np.asarray(theta, float), cms)
    c3 = trace(D if free is None else D[:, np.asarray(free, dtype=int)]) / df
    mu_b, var_b, _ = independence(stats)
    t3_b = N * ml_discrepancy(mu_b, np.diag(var_b), mu_s, sigma_s)
    ind = _moment_spec(p, diagonal=True)
    th_b = _moment_theta(ind.compile(), mu_b, np.diag(var_b))
    c3_b = trace(_jacobian(ind, th_b, cms)) / df_b
    return t3, c3, t3_b, c3_b


def baseline_scaling(stats, rows, h1_trace, df_b):
    """Yuan-Bentler scaling factor of the independence model: ``(tr1 - tr0_B) / df_B``."""
    from wavetrail.sem.casewise import casewise_scores
    from wavetrail.sem.fitting import observed_information
    from wavetrail.sem.saturated import independence

    p = stats.p
    ind = _moment_spec(p, diagonal=True)
    cm = ind.compile()
    mu_b, var_b, _ = independence(stats)
    th = _moment_theta(cm, mu_b, np.diag(var_b))
    A = observed_information(cm, th, stats)
    S = casewise_scores(ind, th, rows)
    tr0 = float(np.trace(np.linalg.solve(A, S.T @ S)))
    return (h1_trace - tr0) / df_b


def _cfi(t, df, t_b, df_b):
    d_m = max(t - df, 0.0)
    d_b = max(t_b - df_b, d_m)
    return 1.0 - d_m / d_b if d_b > 0 else 1.0


def _tli(t, df, t_b, df_b):
    den = (t_b - df_b) * df
    return 1.0 - (t - df) * df_b / den if df > 0 and den != 0 else np.nan


def scaled_and_robust(chisq, df, scaling, chisq_b, df_b, scaling_b, n, t3, c3, t3_b, c3_b):
    """The indices of :data:`ROBUST_KEYS` from the statistics (NaN where an input is missing)."""
    out = dict.fromkeys(ROBUST_KEYS, np.nan)
    out["baseline_scaling"] = scaling_b
    if np.isfinite(chisq_b) and np.isfinite(scaling_b) and scaling_b > 0:
        out["baseline_chisq_scaled"] = chisq_b / scaling_b
    if df > 0 and all(np.isfinite([chisq, scaling, out["baseline_chisq_scaled"]])) and scaling > 0:
        ts, tbs = chisq / scaling, out["baseline_chisq_scaled"]
        out["cfi_scaled"] = _cfi(ts, df, tbs, df_b)
        out["tli_scaled"] = _tli(ts, df, tbs, df_b)
        out["rmsea_scaled"], out["rmsea_scaled_lo"], out["rmsea_scaled_hi"] = rmsea_ci(chisq, scaling * df, n)
    if df > 0 and all(np.isfinite([t3, c3, t3_b, c3_b])) and c3 > 0 and c3_b > 0:
        # the normal-theory formulas with the expected value df of a chi-square replaced by c3 df
        out["cfi_robust"] = _cfi(t3, c3 * df, t3_b, c3_b * df_b)
        den = (t3_b - c3_b * df_b) * df
        out["tli_robust"] = 1.0 - (t3 - c3 * df) * df_b / den if den != 0 else np.nan
        r, lo, hi = rmsea_ci(t3 / c3, df, n)
        out["rmsea_robust"], out["rmsea_robust_lo"], out["rmsea_robust_hi"] = (float(np.sqrt(c3) * v)
                                                                              for v in (r, lo, hi))
    return {k: float(v) for k, v in out.items()}
