"""Fitting one model to data: estimates, standard errors, fit indices, admissibility.

Standard errors come from the inverse of the **observed** information (the
negative Hessian of the log-likelihood, by central differences of the analytic
gradient) by default: with missing data under MAR only the observed information
gives valid standard errors (Kenward & Molenberghs 1998, Biometrika 85(1)).
``se_from="expected"`` uses the Fisher (expected) information instead.

Estimation is unrestricted ML: variances may become negative and latent
covariance matrices indefinite as long as every pattern's implied covariance
stays positive definite. Such solutions are reported with ``admissible=False``
and a note (a Heywood case or a boundary solution), never hidden or clipped.
"""

from __future__ import annotations

import functools
import warnings
from contextlib import nullcontext
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats as sps

from wavetrail.errors import ModelError
from wavetrail.sem.indices import fit_indices
from wavetrail.sem.likelihood import evaluate
from wavetrail.sem.optimise import fit_batch
from wavetrail.sem.saturated import independence, saturated
from wavetrail.sem.spec import ALPHA, BETA, LAMBDA, NU, PSI, THETA
from wavetrail.sem.stats import SuffStats


_BLAS = []


def one_blas_thread():
    """A context in which BLAS/LAPACK use one thread (threadpoolctl; a no-op without it).

    A single model's matrices are small (p <= a few dozen): a second BLAS thread
    only adds synchronisation, and on a machine shared with other jobs the waiting
    threads made one growth fit 5-8x slower (measured on lme4 sleepstudy, 2 cores
    under load 9: 23 s vs 3 s).
    """
    if not _BLAS:
        try:
            from threadpoolctl import ThreadpoolController

            import scipy.linalg  # noqa: F401  (load scipy's BLAS before the controller looks)

            _BLAS.append(ThreadpoolController())
        except ImportError:
            _BLAS.append(None)
    return nullcontext() if _BLAS[0] is None else _BLAS[0].limit(limits=1, user_api="blas")


def single_threaded(fn):
    """Run ``fn`` with BLAS on one thread (see :func:`one_blas_thread`)."""

    @functools.wraps(fn)
    def run(*args, **kwargs):
        with one_blas_thread():
            return fn(*args, **kwargs)

    return run


@dataclass
class SemFit:
    """A fitted model.

    Attributes
    ----------
    spec : ModelSpec
    theta : (k,) estimates of the free parameters (``spec.param_names`` order)
    estimates : DataFrame, one row per stated entry: parameter, kind, left, right,
        label, free, estimate, se, z, p, std
    fit : dict n, loglik, chisq, df, p, cfi, tli, rmsea, rmsea_lo, rmsea_hi, srmr,
        aic, bic, sabic, converged, admissible, note (and baseline_chisq, baseline_df, k)
    implied_mean : (p,)  implied_cov : (p, p)
    vcov : (k, k) covariance of the estimates (NaN if the information is singular)
    converged, admissible : bool;  notes : list of str
    """

    spec: object
    theta: np.ndarray
    estimates: pd.DataFrame
    fit: dict
    implied_mean: np.ndarray
    implied_cov: np.ndarray
    vcov: np.ndarray
    converged: bool
    admissible: bool
    notes: list = field(default_factory=list)
    n_iter: int = 0
    se_from: str = "observed"
    saturated_mean: np.ndarray | None = None
    saturated_cov: np.ndarray | None = None

    @property
    def loglik(self) -> float:
        return float(self.fit["loglik"])


def data_matrix(spec, data, where="data"):
    """The observed columns of ``data`` as a float array, with clear errors for bad input."""
    if isinstance(data, pd.DataFrame):
        missing = [c for c in spec.observed if c not in data.columns]
        if missing:
            raise ModelError(f"{where}: column(s) {missing} of the model are not in the data",
                             hint=f"the data has columns {list(map(str, data.columns))[:20]}")
        try:
            Y = data[spec.observed].apply(pd.to_numeric, errors="raise").to_numpy(dtype=float)
        except (ValueError, TypeError) as err:
            raise ModelError(f"{where}: model columns must be numeric ({err})") from None
    else:
        Y = np.asarray(data, dtype=float)
        if Y.ndim != 2 or Y.shape[1] != spec.p:
            raise ModelError(f"{where}: expected an array with {spec.p} columns, got shape {Y.shape}")
    return Y


def check_data(spec, Y, where="data"):
    """Refuse data the model cannot be fitted to; return notes for warnings."""
    notes = []
    for j, name in enumerate(spec.observed):
        col = Y[:, j]
        obs = col[~np.isnan(col)]
        if len(obs) == 0:
            raise ModelError(f"{where}: variable {name!r} has no observations",
                             hint="drop the variable (or wave) from the model")
        if len(obs) > 1 and np.ptp(obs) == 0:
            raise ModelError(f"{where}: variable {name!r} is constant (every value is {obs[0]:g})",
                             hint="a constant variable has no variance to model; drop it from the model")
    n = int((~np.isnan(Y)).any(axis=1).sum())
    k = spec.k
    if n < 2:
        raise ModelError(f"{where}: only {n} row(s) with any observation; a model needs more people")
    n_obs = int((~np.isnan(Y)).sum())
    if n_obs < k:
        raise ModelError(f"{where}: {n_obs} observed values for {k} free parameters",
                         hint="collect more data or fit a simpler model")
    if n < k:
        notes.append(f"fewer people ({n}) than free parameters ({k}); estimates may be unstable")
    return notes


@single_threaded
def fit(spec, data, missing="fiml", start=None, se_from="observed", max_iter=500, tol=1e-10,
        where="data", means=True, search="auto", starts=None, n_random=8, seed=0, robust=False,
        **earlier) -> SemFit:
    """Fit ``spec`` by maximum likelihood.

    Parameters
    ----------
    spec : ModelSpec
    data : DataFrame with the observed columns (NaN = missing), an (n, p)
        array, or a :class:`SuffStats` with B = 1
    missing : {"fiml", "listwise"}
    start : (k,) starting values, optional
    se_from : {"observed", "expected"}: the standard errors come from the inverse of the
        observed (negative Hessian) or the expected (Fisher) information
    where : str, names the data in error messages (e.g. the file)
    search : {"auto", True, False}
        multiple starts (:func:`wavetrail.sem.search.multistart`): ``"auto"`` searches when
        the model has free loadings or more than one free residual variance (where local
        maxima are common); the highest maximum is reported, and a note says when
        converged starts reached different maxima.
    starts : list of (k,) arrays, optional, further starts for the search (e.g. the
        estimates of a simpler nested model)
    n_random, seed : perturbed copies of each start, drawn with this seed
    robust : bool
        sandwich standard errors ``A^-1 B A^-1`` with ``A`` the observed information and
        ``B`` the outer product of the casewise scores (FIML; Huber 1967; White 1982;
        the estimator lavaan calls MLR). Needs the data rows, not statistics.
    means : bool
        ``False`` counts neither the free intercepts nor the means in parameters,
        moments, AIC and BIC (a covariance-structure model). Every observed
        variable must then have its own free intercept (so the means are
        saturated); chi-square and df do not change.

    Returns
    -------
    SemFit
    """
    if missing not in ("fiml", "listwise"):
        raise ModelError(f"missing={missing!r}: use 'fiml' or 'listwise'")
    if earlier:
        named = renamed_arguments("fit", earlier, {"information": "se_from", "meanstructure": "means"})
        se_from, means = named.get("se_from", se_from), named.get("means", means)
    if se_from not in ("observed", "expected"):
        raise ModelError(f"se_from={se_from!r}: use 'observed' or 'expected'")
    notes: list[str] = []
    if isinstance(data, SuffStats):
        stats = data
        if stats.B != 1:
            raise ModelError("fit() takes statistics of one sample; use fit_batch for several")
    else:
        Y = data_matrix(spec, data, where)
        if missing == "listwise":
            keep = ~np.isnan(Y).any(axis=1)
            if keep.sum() < len(Y):
                notes.append(f"listwise deletion dropped {int(len(Y) - keep.sum())} of {len(Y)} rows")
            Y = Y[keep]
        notes += check_data(spec, Y, where)
        stats = SuffStats.from_data(Y)
    theta, ll, converged, n_iter, search_info = _maximise(spec, stats, start, max_iter, tol, search, starts,
                                                           n_random, seed, notes)
    res = summarise(spec, stats, theta, ll, converged, n_iter, notes, se_from, means, search_info)
    res.fit["se_type"] = se_from
    if robust:
        if isinstance(data, SuffStats):
            raise ModelError("robust standard errors need the data rows, not sufficient statistics")
        robust_errors(res, stats, Y)
    return res


def robust_errors(res, stats, Y, at_bound=()):
    """Replace the standard errors of ``res`` by sandwich ones (in place)."""
    from wavetrail.sem.casewise import casewise_scores

    cm = res.spec.compile()
    A = observed_information(cm, res.theta, stats)
    rows = Y[~np.isnan(Y).all(axis=1)]
    S = casewise_scores(res.spec, res.theta, rows)
    keep = np.setdiff1d(np.arange(cm.k), np.asarray(list(at_bound), dtype=int))
    vc = np.full((cm.k, cm.k), np.nan)
    try:
        Ai = np.linalg.inv(A[np.ix_(keep, keep)])
        Sk = S[:, keep]
        vc[np.ix_(keep, keep)] = Ai @ (Sk.T @ Sk) @ Ai
    except np.linalg.LinAlgError:
        res.notes.append("information matrix is singular: no robust standard errors")
    res.vcov = vc
    res.estimates = estimates_table(res.spec, res.theta, vc)
    res.fit["se_type"] = "robust (sandwich: observed information, casewise score outer product)"
    # scaled chi-square: c = (tr(A1^-1 B1) - tr(A0^-1 B0)) / df, h1 = the saturated model at its
    # (EM) estimate, A observed information, B casewise score outer product
    res.fit["scaling"] = res.fit["chisq_scaled"] = res.fit["p_scaled"] = np.nan
    df = res.fit.get("df", 0)
    tr1 = np.nan
    if df > 0 and np.isfinite(res.fit.get("chisq", np.nan)) and res.saturated_mean is not None:
        try:
            tr0 = float(np.trace(np.linalg.solve(A[np.ix_(keep, keep)], Sk.T @ Sk)))
            tr1 = _h1_trace(res.saturated_mean, res.saturated_cov, stats, rows)
            c = (tr1 - tr0) / df
        except np.linalg.LinAlgError:
            c = np.nan
        if np.isfinite(c) and c > 0:
            res.fit["scaling"] = float(c)
            res.fit["chisq_scaled"] = float(res.fit["chisq"] / c)
            res.fit["p_scaled"] = float(sps.chi2.sf(res.fit["chisq_scaled"], df))
    _robust_indices(res, stats, rows, tr1, keep)
    return res


def _robust_indices(res, stats, rows, tr1, keep):
    """Scaled and robust CFI/TLI/RMSEA (``wavetrail.sem.robust``) into ``res.fit``; NaN where not available."""
    from wavetrail.sem import robust as rb

    f = res.fit
    df, df_b = f.get("df", 0), f.get("baseline_df", 0)
    c_b = t3 = c3 = t3_b = c3_b = np.nan
    extra = []
    usable = (df > 0 and df_b > 0 and np.isfinite(f.get("chisq", np.nan)) and np.isfinite(tr1)
              and res.saturated_mean is not None)
    if usable:
        try:
            c_b = rb.baseline_scaling(stats, rows, tr1, df_b)
        except np.linalg.LinAlgError:
            extra.append("the baseline model's information is singular: no scaled baseline chi-square")
        try:
            t3, c3, t3_b, c3_b = rb.corrected_statistics(res.spec, res.theta, res.saturated_mean,
                                                         res.saturated_cov, stats, rows, df, df_b,
                                                         free=keep)
        except np.linalg.LinAlgError:
            extra.append("the saturated model's information is singular: no robust fit indices")
    f.update(rb.scaled_and_robust(f.get("chisq", np.nan), df, f.get("scaling", np.nan), f.get("baseline_chisq", np.nan),
                                  df_b, c_b, f["n"], t3, c3, t3_b, c3_b))
    res.notes += extra
    f["note"] = "; ".join(x for x in [f.get("note", "")] + extra if x)


def _h1_trace(mu, sigma, stats, rows):
    """tr(A^-1 B) of the saturated model at (mu, sigma): observed information A, score outer product B."""
    from wavetrail.sem.casewise import casewise_scores
    from wavetrail.sem.saturated import _saturated_spec

    p = len(mu)
    sat = _saturated_spec(p)
    cms = sat.compile()
    th = np.zeros(cms.k)
    for e in cms.entries:
        th[e.param] = mu[e.row] if e.matrix == NU else sigma[e.row, e.col]
    A1 = observed_information(cms, th, stats)
    S1 = casewise_scores(sat, th, rows)
    return float(np.trace(np.linalg.solve(A1, S1.T @ S1)))


def renamed_arguments(func: str, given: dict, renamed: dict) -> dict:
    """Today's names for keyword arguments given by their earlier names (one version only).

    ``renamed`` maps earlier -> today's name; each earlier name used warns
    (``DeprecationWarning``); any other unknown keyword is a ``TypeError`` as usual.
    """
    import warnings

    out = {}
    for old, value in given.items():
        if old not in renamed:
            raise TypeError(f"{func}() got an unexpected keyword argument {old!r}")
        warnings.warn(f"{func}({old}=...) is renamed {func}({renamed[old]}=...); the earlier name is "
                      "accepted this version only", DeprecationWarning, stacklevel=3)
        out[renamed[old]] = value
    return out


def summarise(spec, stats, theta, ll, converged, n_iter, notes, se_from="observed", means=True,
              search_info=None, at_bound=()) -> SemFit:
    """Standard errors, admissibility, fit indices and the estimates table at ``theta``.

    ``at_bound``: parameter indices held at a bound (a bounded fit); they get no
    standard error and the others' come from the information with them held fixed.
    """
    cm = spec.compile()
    N = float(stats.total[0])
    search_info = search_info or {"starts": 1, "maxima": 1}
    notes = list(notes)
    # standard errors
    vcov = _vcov(cm, theta, stats, se_from, drop=at_bound)
    if not np.all(np.isfinite(np.delete(np.diag(vcov), list(at_bound)))):
        notes.append("information matrix is singular: the model may not be identified; no standard errors")
    mu, sigma = spec.implied(theta)
    adm, adm_notes = admissibility(spec, theta)
    notes += adm_notes
    # reference models
    sat = saturated(stats)
    mu_s, sig_s, ll_s, _, sat_ok = sat
    ev = np.linalg.eigvalsh(sig_s)
    if not np.isfinite(ll_s):
        notes.append(f"{sat.note or 'the saturated model has no maximum'}; chi-square and the fit indices built "
                     "on it are not available")
        ll_s = np.nan
    elif not sat_ok:
        notes.append(f"the saturated model did not converge ({sat.note}); fit indices are approximate")
    elif ev[0] <= 1e-10 * max(ev[-1], 1e-300):
        notes.append("sample covariance matrix is not positive definite; chi-square and fit indices are not available")
        ll_s = np.nan
    _, _, ll_b = independence(stats)
    p = spec.p
    n_moments = _n_moments(spec)
    k_count = cm.k
    if not means:
        own = _own_intercepts(spec)
        if own is None:
            raise ModelError("means=False needs a free, unlabelled intercept for every observed variable")
        k_count -= own
        n_moments -= p
    fitd = fit_indices(ll, k_count, N, p, ll_s, ll_b, sig_s if np.isfinite(ll_s) else None, sigma,
                       n_moments=n_moments, n_base=p if means else 0,
                       sample_mean=mu_s if means else None, implied_mean=mu if means else None)
    fitd["converged"] = converged
    fitd["admissible"] = adm
    fitd["starts"] = int(search_info["starts"])
    fitd["maxima"] = int(search_info["maxima"])
    fitd["note"] = "; ".join(notes)
    est = estimates_table(spec, theta, vcov)
    return SemFit(spec=spec, theta=theta, estimates=est, fit=fitd, implied_mean=mu, implied_cov=sigma,
                  vcov=vcov, converged=converged, admissible=adm, notes=notes, n_iter=int(n_iter),
                  se_from=se_from, saturated_mean=mu_s, saturated_cov=sig_s)


def needs_search(spec) -> bool:
    """Free loadings or more than one free residual variance: local maxima are common."""
    cm = spec.compile()
    loads = any(e.matrix == LAMBDA and e.param >= 0 for e in cm.entries)
    resid = {e.param for e in cm.entries if e.matrix == THETA and e.row == e.col and e.param >= 0}
    return loads or len(resid) > 1


def _maximise(spec, stats, start, max_iter, tol, search, starts, n_random, seed, notes):
    """(theta, loglik, converged, iterations, search info) of the single-model path:
    Fisher scoring, then Newton polishing with the observed information; with
    ``search`` a multistart search (see :mod:`wavetrail.sem.search`)."""
    from wavetrail.sem.optimise import start_values
    from wavetrail.sem.search import decrement_limit, multistart, polish

    cm = spec.compile()
    if search not in ("auto", True, False):
        raise ModelError(f"search={search!r}: use 'auto', True or False")
    use = needs_search(spec) if search == "auto" else bool(search)
    if use:
        first = np.asarray(start, dtype=float) if start is not None else start_values(spec, stats)[0]
        sr = multistart(spec, stats, [first] + list(starts or []), n_random=n_random, seed=seed,
                        max_iter=min(max_iter, 30), tol=tol)
        best = sr.best
        info = {"starts": sr.n_starts, "maxima": sum(1 for m in sr.maxima if m[1])}
        if sr.disagree:
            found = ", ".join(f"{m[0]:.3f} ({m[2]})" for m in sr.maxima if m[1])
            notes.append(f"starts disagree: {sr.n_starts} starts (seed {seed}) reached {info['maxima']} different "
                         f"maxima, log-likelihood (number of starts) {found}; the highest is reported")
    else:
        bf = fit_batch(spec, stats, start=start, max_iter=max_iter, tol=tol)
        best = polish(cm, bf.theta[0], stats, tol=tol) if np.isfinite(bf.loglik[0]) else None
        if best is None or not best.loglik >= bf.loglik[0]:
            from wavetrail.sem.search import Polished

            best = Polished(bf.theta[0], float(bf.loglik[0]), bool(bf.converged[0]), float(bf.decrement[0]),
                            int(bf.n_iter))
        else:
            best.n_iter += int(bf.n_iter)
        info = {"starts": 1, "maxima": 1}
    converged = bool(best.converged) and np.isfinite(best.loglik)
    if not converged:
        why = "the observed information is not positive definite there (a saddle point or a boundary)" \
            if best.saddle else f"Newton decrement {best.decrement:.3g} > {decrement_limit(best.loglik, tol):.3g}"
        notes.append(f"did not converge: {why}")
    return best.theta, float(best.loglik), converged, best.n_iter, info


def _own_intercepts(spec):
    free = [e for e in spec.entries if e.matrix == NU and e.param >= 0 and e.label is None]
    if len({e.row for e in free}) != spec.p or any(e.matrix == ALPHA and e.param >= 0 for e in spec.entries):
        return None
    return len(free)


def _n_moments(spec):
    """Means, variances and covariances of the modelled variables.

    Exogenous stand-ins of covariates (residual variance fixed at 0, loading 1)
    are modelled too (their mean and variance are free parameters), so they count.
    """
    p = spec.p
    return p * (p + 3) // 2


def observed_information(cm, theta, stats, base=None, numeric=False):
    """Negative Hessian of the log-likelihood: analytic where available, else central
    differences of the analytic gradient."""
    from wavetrail.sem.likelihood import observed_info

    if not numeric:
        I = observed_info(cm, theta, stats, base)
        if I is not None:
            return I
    k = cm.k
    # step relative to each parameter's own scale: its size, or its standard error from the
    # expected information when that is below 1 (a slope variance per day of 1e-5 would be
    # moved by its own size with a step of 1e-5)
    floor = np.ones(k)
    try:
        info = evaluate(cm, theta[None], stats, grad=False, info=True, base=base)[1][0]
        d = np.diag(info)
        ok = np.isfinite(d) & (d > 0)
        floor[ok] = np.minimum(1.0, 1.0 / np.sqrt(d[ok]))
    except (np.linalg.LinAlgError, ValueError, TypeError):
        pass
    h = 1e-5 * np.maximum(np.abs(theta), floor)
    per = max(1, int(4e6 // max(1, k * cm.p * cm.p)))
    rows = np.vstack([theta + np.diag(h), theta - np.diag(h)])
    grads = []
    for lo in range(0, len(rows), per):
        grads.append(evaluate(cm, rows[lo:lo + per], stats, grad=True, info=False, base=base)[1])
    g = np.vstack(grads)
    Hs = (g[:k] - g[k:]) / (2 * h[:, None])
    return -0.5 * (Hs + Hs.T)


def _vcov(cm, theta, stats, se_from, drop=()):
    if se_from == "expected":
        I = evaluate(cm, theta[None], stats, grad=False, info=True)[1][0]
    else:
        I = observed_information(cm, theta, stats)
    keep = np.setdiff1d(np.arange(cm.k), np.asarray(list(drop), dtype=int))
    out = np.full((cm.k, cm.k), np.nan)
    try:
        Ik = I[np.ix_(keep, keep)]
        # singularity judged on the information scaled to unit diagonal, so that the units of
        # the parameters (a slope per day next to an intercept) do not decide it: growth in
        # days gives variances of 1e-5 beside 0.4 and a raw condition number past 1e10
        d = np.diag(Ik)
        if not np.all(np.isfinite(Ik)) or np.any(d <= 0):
            raise np.linalg.LinAlgError
        s = 1.0 / np.sqrt(d)
        scaled = Ik * s[:, None] * s[None, :]
        ev = np.linalg.eigvalsh(scaled)
        if ev[0] <= 1e-10 * max(abs(ev[-1]), 1e-300):
            raise np.linalg.LinAlgError
        out[np.ix_(keep, keep)] = np.linalg.inv(scaled) * s[:, None] * s[None, :]
        return out
    except np.linalg.LinAlgError:
        return out


def admissibility(spec, theta):
    """(admissible, notes): negative variances, indefinite latent covariances, |r| > 1."""
    cm = spec.compile()
    mats = cm.matrices(np.atleast_2d(theta))
    notes = []
    Th, Psi = mats[THETA][0], mats[PSI][0]
    for i, name in enumerate(spec.observed):
        if Th[i, i] < 0:
            notes.append(f"negative residual variance of {name} ({Th[i, i]:.4g})")
    for i, name in enumerate(spec.latent):
        if Psi[i, i] < 0:
            notes.append(f"negative variance of {name} ({Psi[i, i]:.4g})")
    if spec.m:
        ev = np.linalg.eigvalsh(Psi)
        scale = max(np.abs(ev).max(), 1e-300)
        d = np.diag(Psi)
        for i in range(spec.m):
            for j in range(i + 1, spec.m):
                if d[i] > 0 and d[j] > 0 and abs(Psi[i, j]) > np.sqrt(d[i] * d[j]) * (1 + 1e-6):
                    notes.append(f"correlation of {spec.latent[i]} and {spec.latent[j]} beyond +-1 "
                                 f"({Psi[i, j] / np.sqrt(d[i] * d[j]):.4g})")
        if ev[0] < -1e-8 * scale and not any("negative variance" in n_ for n_ in notes):
            notes.append("latent covariance matrix is not positive semi-definite")
        elif abs(ev[0]) <= 1e-6 * scale and (d > 0).all():
            notes.append("boundary solution: latent covariance matrix is singular (a correlation of +-1)")
    for i, name in enumerate(spec.observed):
        if Th[i, i] == 0 and any(e.matrix == THETA and e.row == i == e.col and e.param >= 0 for e in cm.entries):
            notes.append(f"residual variance of {name} is exactly 0")
    adm = not any(n_.startswith(("negative", "correlation", "latent covariance")) for n_ in notes)
    return adm, notes


def estimates_table(spec, theta, vcov) -> pd.DataFrame:
    """One row per stated entry with estimate, standard error, z, two-sided p and std."""
    cm = spec.compile()
    theta2 = np.atleast_2d(theta)
    mats, L, M, Aa = cm._pieces(theta2)
    _, sigma = cm.implied(theta2)
    sd_x = np.sqrt(np.maximum(np.diag(sigma[0]), 0))
    sd_f = np.sqrt(np.maximum(np.diag(M[0]), 0)) if spec.m else np.zeros(0)
    se_all = np.sqrt(np.where(np.diag(vcov) >= 0, np.diag(vcov), np.nan))
    rows = []
    for e in cm.entries:
        est = theta[e.param] if e.param >= 0 else e.value
        se = se_all[e.param] if e.param >= 0 else np.nan
        with np.errstate(divide="ignore", invalid="ignore"):
            z = est / se if e.param >= 0 else np.nan
            pz = 2 * sps.norm.sf(abs(z)) if np.isfinite(z) else np.nan
            if e.matrix == LAMBDA:
                std = est * sd_f[e.col] / sd_x[e.row]
            elif e.matrix == PSI:
                std = est / (sd_f[e.row] * sd_f[e.col])
            elif e.matrix == THETA:
                std = est / (sd_x[e.row] * sd_x[e.col])
            elif e.matrix == NU:
                std = est / sd_x[e.row]
            elif e.matrix == ALPHA:
                std = est / sd_f[e.row]
            else:  # BETA
                std = est * sd_f[e.col] / sd_f[e.row]
        rows.append({"parameter": e.name, "kind": e.kind, "left": e.left, "right": e.right,
                     "label": e.label or "", "free": e.param >= 0, "estimate": float(est), "se": float(se),
                     "z": float(z), "p": float(pz), "std": float(std) if np.isfinite(std) else np.nan})
    return pd.DataFrame(rows, columns=["parameter", "kind", "left", "right", "label", "free", "estimate",
                                       "se", "z", "p", "std"])
