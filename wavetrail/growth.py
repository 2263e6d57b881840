"""Latent growth curve models on top of :mod:`wavetrail.sem`.

A growth model for ``T`` waves with time scores ``t_1..t_T`` writes the outcome
at wave ``j`` as ``y_j = eta_0 + t_j eta_1 (+ t_j^2 eta_2) + e_j``: the growth
factors (intercept, slope, curvature) have free means and a free covariance
matrix, the outcome intercepts are fixed at zero, and the residual variances are
free per wave or equal over waves (Meredith & Tisak 1990, Psychometrika 55(1);
Bollen & Curran 2006, *Latent Curve Models*, Wiley).

``shape="basis"`` (latent basis) fixes the first and the last loading on the
shape factor at their time scores and frees the others, so that the shape of
change is estimated. Time-invariant covariates enter as exogenous variables that
predict every growth factor.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from wavetrail.errors import ModelError
from wavetrail.sem.spec import ModelSpec
from wavetrail.sem.fitting import single_threaded as _single_threaded

SHAPES = ("linear", "quadratic", "basis")
RESIDUALS = ("free", "equal")
FACTORS = {"linear": ["intercept", "slope"], "quadratic": ["intercept", "slope", "quadratic"],
           "basis": ["intercept", "shape"]}


def wave_names(n_waves: int) -> list[str]:
    """Default observed names ``y1 .. yT`` for growth specs built without names."""
    return [f"y{j + 1}" for j in range(n_waves)]


def growth_spec(time_scores, shape="linear", residuals="free", covariates=None, observed=None) -> ModelSpec:
    """Build the growth model as a :class:`~wavetrail.sem.ModelSpec`.

    Parameters
    ----------
    time_scores : sequence of float, one per wave (unequal spacing allowed)
    shape : {"linear", "quadratic", "basis"}
    residuals : {"free", "equal"}; "equal" shares one residual variance (label ``resvar``)
    covariates : list of str, optional, time-invariant covariate columns; each predicts
        every growth factor (regression names ``regress(<factor>,<covariate>_cov)``)
    observed : list of str, optional, the wave columns (default ``y1..yT``)

    Returns
    -------
    ModelSpec with observed = wave columns followed by the covariates.
    """
    t = np.asarray(time_scores, dtype=float).ravel()
    if shape not in SHAPES:
        raise ModelError(f"unknown growth shape {shape!r}", hint=f"use one of {', '.join(SHAPES)}")
    if residuals not in RESIDUALS:
        raise ModelError(f"unknown residual structure {residuals!r}", hint="use 'free' or 'equal'")
    if len(t) < 2 or not np.all(np.isfinite(t)):
        raise ModelError(f"a growth model needs at least two finite time scores, got {list(time_scores)}")
    if len(np.unique(t)) != len(t):
        raise ModelError(f"time scores must differ between waves, got {list(time_scores)}")
    need = {"linear": 3, "quadratic": 4, "basis": 3}[shape]
    if len(t) < need:
        raise ModelError(f"a {shape} growth model needs at least {need} waves, got {len(t)}",
                         hint="use a simpler shape or more waves")
    obs = list(observed) if observed is not None else wave_names(len(t))
    if len(obs) != len(t):
        raise ModelError(f"{len(obs)} wave columns but {len(t)} time scores")
    covariates = list(covariates or [])
    factors = FACTORS[shape]
    cov_lat = [f"{c}_cov" for c in covariates]
    spec = ModelSpec(observed=obs + covariates, latent=factors + cov_lat)
    for j, y in enumerate(obs):
        spec.load("intercept", y, value=1.0)
        if shape == "basis":
            if j == 0 or j == len(t) - 1:
                spec.load("shape", y, value=t[j])
            else:
                spec.load("shape", y, start=t[j])
        else:
            spec.load("slope", y, value=t[j])
            if shape == "quadratic":
                spec.load("quadratic", y, value=t[j] ** 2)
        spec.intercept(y, value=0.0)
        spec.cov(y, y, label="resvar" if residuals == "equal" else None)
    for i, f in enumerate(factors):
        spec.mean(f)
        for g in factors[i:]:
            spec.cov(f, g)
    for c, lc in zip(covariates, cov_lat):
        spec.load(lc, c, value=1.0)
        spec.cov(c, c, value=0.0)
        spec.intercept(c, value=0.0)
        spec.mean(lc)
        for f in factors:
            spec.regress(f, lc)
    for i, a in enumerate(cov_lat):
        for b in cov_lat[i:]:
            spec.cov(a, b)
    return spec


class GrowthFit:
    """A fitted growth model.

    Attributes
    ----------
    shape, residuals : the model's settings
    time_scores : (T,) time score of each wave
    estimates : DataFrame parameter, kind, left, right, label, free, estimate, se, z, p, std
    fit : dict n, loglik, chisq, df, p, cfi, tli, rmsea, rmsea_lo, rmsea_hi, srmr, aic,
        bic, sabic, converged, admissible, note
    implied_mean : (T,) model-implied mean of each wave
    implied_cov : (T, T) model-implied covariance of the waves
    sem : the underlying :class:`wavetrail.sem.fitting.SemFit`
    """

    def __init__(self, sem, shape, residuals, time_scores, waves):
        self.sem = sem
        self.shape = shape
        self.residuals = residuals
        self.time_scores = np.asarray(time_scores, dtype=float)
        self.waves = list(waves)
        T = len(self.waves)
        self.estimates = sem.estimates
        self.fit = dict(sem.fit)
        self.implied_mean = np.asarray(sem.implied_mean)[:T]
        self.implied_cov = np.asarray(sem.implied_cov)[:T, :T]
        self.theta = sem.theta
        self.unrestricted = None  # with bounded=True: the unrestricted fit when it differs
        self.bounded_search = None  # with bounded=True and an inadmissible unrestricted maximum: its search

    def __repr__(self) -> str:
        return (f"GrowthFit(shape={self.shape!r}, residuals={self.residuals!r}, n={self.fit.get('n')}, "
                f"loglik={self.fit.get('loglik'):.3f})")


@_single_threaded
def fit_growth(wide, time_scores, shape="linear", residuals="free", covariates=None, se_from="observed",
               where="data", max_iter=500, search="auto", seed=0, bounded=False, robust=False, **earlier):
    """Fit a latent growth curve model by ML, FIML for missing waves.

    Parameters
    ----------
    wide : DataFrame, one row per person, one column per wave (NaN = missing wave)
    time_scores : sequence of float, one per wave column of ``wide``; or
        individually varying time scores: a DataFrame on the index and columns of
        ``wide`` (or an (n, T) array in its row order) holding each person's own
        time at each wave (e.g. age). These are fitted through a per-person
        likelihood (:mod:`wavetrail.sem.individual`); a time score may be NaN
        only where the outcome is missing. Not for ``shape="basis"``.
    shape : {"linear", "quadratic", "basis"}
    residuals : {"free", "equal"}
    covariates : DataFrame on the same index as ``wide`` (time-invariant covariates),
        or a list of columns of ``wide`` to use as covariates; optional. People
        with a missing covariate are dropped (covariates are conditioned on).
    se_from : {"observed", "expected"} information for the standard errors
    where : names the data in error messages
    max_iter : int, iterations of the optimiser
    search : {"auto", True, False}
        multiple starts: ``"auto"`` searches for latent-basis models and free
        residuals. The starts are the moment-based default, the estimates of the
        simpler nested models (equal residuals; the linear shape) and 8 perturbed
        copies of each, drawn with ``seed``; the highest maximum is reported and
        ``fit["note"]`` says when converged starts reached different maxima
        (``fit["starts"]``, ``fit["maxima"]``).
    seed : int, seed of the perturbed starts
    robust : bool
        sandwich standard errors (observed information, casewise score outer product;
        FIML) and the scaled chi-square ``fit["chisq_scaled"]`` with its scaling factor
        ``fit["scaling"]`` and p-value ``fit["p_scaled"]`` (Yuan & Bentler 2000,
        Sociological Methodology 30; the estimator lavaan calls MLR), and the scaled and
        robust CFI, TLI and RMSEA (``cfi_scaled`` ... ``rmsea_robust_hi``, see
        :mod:`wavetrail.sem.robust`). Not with individually varying time scores.
    bounded : bool
        ``True`` keeps the residual variances >= 0 and the growth factors' covariance
        matrix positive semi-definite (admissible ML, :mod:`wavetrail.sem.bounded`).
        When the unrestricted maximum is admissible the two coincide and it is
        returned; otherwise the admissible maximum is returned, estimates at a bound
        are named in ``fit["boundary"]`` and have no standard error, and the
        unrestricted fit stays available as ``.unrestricted`` (its log-likelihood in
        ``fit["unrestricted_loglik"]``). ``fit["estimation"]`` says which was done.

    Returns
    -------
    GrowthFit

    Notes
    -----
    The likelihood is the normal log-likelihood summed over missingness patterns
    (full-information ML; Arbuckle 1996, in *Advanced Structural Equation
    Modeling*, Erlbaum). Fit indices are computed against the saturated model
    (EM) and the independence model; see docs/methods/growth.md. With
    individually varying time scores there is no saturated model: chi-square
    and the indices built on it are NaN (log-likelihood, AIC and BIC remain), and
    ``implied_mean``/``implied_cov`` are evaluated at each wave's average time score.

    With ``bounded=False`` estimation is unrestricted ML: a negative variance or a
    latent correlation beyond +-1 is kept and reported (``fit["admissible"]`` False,
    ``fit["note"]``).
    """
    if earlier:
        from wavetrail.sem.fitting import renamed_arguments

        se_from = renamed_arguments("fit_growth", earlier, {"information": "se_from"}).get("se_from", se_from)
    import pandas as pd

    from wavetrail.sem.fitting import fit as sem_fit

    if not isinstance(wide, pd.DataFrame):
        wide = pd.DataFrame(np.asarray(wide, dtype=float))
    cov_names: list[str] = []
    data = wide
    if covariates is not None:
        if isinstance(covariates, pd.DataFrame):
            cov_df = covariates.reindex(wide.index)
            cov_names = [str(c) for c in cov_df.columns]
            data = pd.concat([wide.set_axis([str(c) for c in wide.columns], axis=1),
                              cov_df.set_axis(cov_names, axis=1)], axis=1)
            wave_cols = [str(c) for c in wide.columns]
        else:
            cov_names = [str(c) for c in covariates]
            data = wide.set_axis([str(c) for c in wide.columns], axis=1)
            wave_cols = [c for c in data.columns if c not in cov_names]
        keep = data[cov_names].notna().all(axis=1)
        data = data.loc[keep]
    else:
        data = wide.set_axis([str(c) for c in wide.columns], axis=1)
        wave_cols = list(data.columns)
    person_times = _person_times(wide, time_scores, wave_cols, where)
    if person_times is None and len(wave_cols) != len(list(time_scores)):
        raise ModelError(f"{where}: {len(wave_cols)} wave columns but {len(list(time_scores))} time scores",
                         hint="give one time score per wave column")
    data = data.astype(float)
    data = data.loc[data[wave_cols].notna().any(axis=1)]
    if person_times is not None:
        if robust:
            raise ModelError(f"{where}: robust standard errors are not available with individually varying "
                             "time scores", hint="drop robust= or give one time score per wave")
        g = _fit_varying(data, person_times.loc[data.index], shape, residuals, cov_names, wave_cols,
                         se_from, where, max_iter)
        g.fit["estimation"], g.fit["boundary"] = "unrestricted", ""
        if bounded:
            g.fit["note"] = "; ".join(x for x in (g.fit["note"], "bounded estimation is not available with "
                                                  "individually varying time scores: unrestricted ML") if x)
        return g
    spec = growth_spec(time_scores, shape=shape, residuals=residuals, covariates=cov_names, observed=wave_cols)
    starts = []
    if search is True or (search == "auto" and (shape == "basis" or residuals == "free")):
        starts = nested_starts(spec, data[wave_cols + cov_names], time_scores, shape, residuals, cov_names,
                               wave_cols)
    # time scores far from (0, 1, 2, ...) (days, ages) make the search badly scaled: the model is
    # fitted first on time counted from the first wave in steps of the mean spacing, and its
    # estimates, carried back to these time scores (the same model, reparametrised), start the fit
    start, known = None, None
    shift = standard_time(time_scores, shape)
    if shift is not None:
        a, b = shift
        standard = fit_growth(wide, [(float(t) - a) / b for t in time_scores], shape=shape, residuals=residuals,
                              covariates=covariates, se_from=se_from, where=where, max_iter=max_iter,
                              search=search, seed=seed, bounded=bounded)
        free_fit = standard.unrestricted if standard.unrestricted is not None else standard
        start = retime(spec.param_names, free_fit.theta, a, b, shape)
        if starts:
            starts = [start] + list(starts)
        if standard.bounded_search is not None:
            # the admissible set is the same on both time scales (A Psi A' is PSD when Psi is), so the
            # admissible maximum found on the standard scale, carried back, is the one on this scale
            known = replace(standard.bounded_search,
                            theta=retime(spec.param_names, standard.bounded_search.theta, a, b, shape))
    res = sem_fit(spec, data[wave_cols + cov_names], se_from=se_from, where=where, max_iter=max_iter,
                  search=search, starts=starts, seed=seed, robust=robust, start=start)
    g = GrowthFit(res, shape, residuals, time_scores, wave_cols)
    g.fit["estimation"] = "unrestricted"
    g.fit["boundary"] = ""
    g.unrestricted = None
    if not bounded:
        return g
    g.fit["estimation"] = "bounded"
    g.fit["unrestricted_loglik"] = g.fit["loglik"]
    if res.admissible and res.converged:
        return g  # the unrestricted maximum is admissible: it is the bounded maximum too
    b, search_result = _fit_bounded(spec, data[wave_cols + cov_names], res, starts, seed, se_from, where, robust,
                                    known=known)
    out = GrowthFit(b, shape, residuals, time_scores, wave_cols)
    out.bounded_search = search_result
    out.fit["estimation"] = "bounded"
    out.fit["boundary"] = b.fit["boundary"]
    out.fit["unrestricted_loglik"] = g.fit["loglik"]
    out.unrestricted = g
    return out


#: growth factors whose loadings are powers of time, in loading order
_POWER_FACTORS = {"linear": ("intercept", "slope"), "quadratic": ("intercept", "slope", "quadratic")}


def standard_time(time_scores, shape) -> tuple[float, float] | None:
    """``(a, b)`` when time scores ``t`` are far from ``0, 1, 2, ...``, else None.

    ``s = (t - a) / b`` counts time from the first wave (``a``) in units of the mean
    spacing (``b``). Only for shapes whose loadings are powers of time (linear,
    quadratic): there a new origin and unit of time reparametrise the same model.
    """
    if shape not in _POWER_FACTORS:
        return None
    t = np.asarray(time_scores, dtype=float)
    if len(t) < 2 or not np.all(np.isfinite(t)):
        return None
    a, b = float(t[0]), float(t[-1] - t[0]) / (len(t) - 1)
    if b <= 0:
        return None
    if abs(a) <= 0.5 * b and 0.5 <= b <= 2.0:
        return None  # already near (0, 1, 2, ...)
    return a, b


def retime(names, theta_s, a, b, shape) -> np.ndarray:
    """Estimates of a growth model on time ``s = (t - a) / b`` carried to time ``t``.

    The growth factors on ``t`` are ``A`` times those on ``s`` (``1, s, s^2`` written in
    powers of ``t``): means (and regression intercepts) ``A alpha``, regressions on
    covariates ``A B``, covariances ``A Psi A'``; residual variances and the covariates'
    own moments do not change.
    """
    factors = _POWER_FACTORS[shape]
    A = np.array([[1.0, -a / b], [0.0, 1.0 / b]])
    if len(factors) == 3:
        A = np.array([[1.0, -a / b, a * a / (b * b)], [0.0, 1.0 / b, -2.0 * a / (b * b)],
                      [0.0, 0.0, 1.0 / (b * b)]])
    pos = {name: i for i, name in enumerate(names)}
    theta = np.asarray(theta_s, dtype=float).copy()
    out = theta.copy()
    k = len(factors)
    mean = np.array([theta[pos[f"mean({f})"]] for f in factors])
    out[[pos[f"mean({f})"] for f in factors]] = A @ mean
    psi = np.zeros((k, k))
    for i, f in enumerate(factors):
        for j in range(i, k):
            name = f"var({f})" if i == j else f"cov({f},{factors[j]})"
            psi[i, j] = psi[j, i] = theta[pos[name]]
    psi = A @ psi @ A.T
    for i, f in enumerate(factors):
        for j in range(i, k):
            out[pos[f"var({f})" if i == j else f"cov({f},{factors[j]})"]] = psi[i, j]
    covs = sorted({n[len("regress(intercept,"):-1] for n in names if n.startswith("regress(intercept,")})
    for c in covs:
        rows = [pos[f"regress({f},{c})"] for f in factors]
        out[rows] = A @ theta[rows]
    return out


def _fit_bounded(spec, data, unrestricted, starts, seed, se_from, where, robust=False, known=None):
    """Admissible maximum (variances >= 0, growth-factor covariance PSD): (SemFit, BoundedResult).

    ``known``: a :class:`wavetrail.sem.bounded.BoundedResult` already found (on another
    time scale), summarised here instead of searching again.
    """
    from wavetrail.sem.bounded import fit_bounded
    from wavetrail.sem.fitting import check_data, data_matrix, robust_errors, summarise
    from wavetrail.sem.stats import SuffStats

    Y = data_matrix(spec, data, where)
    notes = check_data(spec, Y, where)
    stats = SuffStats.from_data(Y)
    block = [spec.latent.index(f) for f in spec.latent if not f.endswith("_cov")]
    r = known if known is not None else \
        fit_bounded(spec, stats, block, [unrestricted.theta, spec.start(stats)[0]] + list(starts), seed=seed)
    cm = spec.compile()
    at = [a for a, name in enumerate(cm.names) if name in r.boundary]
    if not r.converged:
        notes.append(f"bounded fit did not converge (largest projected gradient {r.pgrad:.3g} in standard-error "
                     "units)")
    if len(r.maxima) > 1:
        notes.append(f"bounded fit: {r.n_starts} starts (seed {seed}) reached {len(r.maxima)} different ends; "
                     f"the highest ({r.maxima[0]:.3f}) is reported")
    if r.boundary:
        notes.append("boundary estimate(s): " + ", ".join(r.boundary) + "; no standard error at a bound, and "
                     "Wald and likelihood-ratio tests there are not chi-square (a chi-bar-square mixture; "
                     "Self & Liang 1987)")
    notes.append(f"unrestricted maximum {unrestricted.fit['loglik']:.3f} is inadmissible; admissible maximum "
                 f"{r.loglik:.3f}")
    fit = summarise(spec, stats, r.theta, r.loglik, r.converged, 0, notes, se_from,
                    search_info={"starts": r.n_starts, "maxima": len(r.maxima)}, at_bound=at)
    fit.fit["boundary"] = "; ".join(r.boundary)
    fit.fit["se_type"] = se_from
    if robust:
        robust_errors(fit, stats, Y, at_bound=at)
    return fit, r


def nested_starts(spec, data, time_scores, shape, residuals, cov_names, wave_cols):
    """Starting values from simpler nested models (fitted by scoring only, no SEs).

    Equal residuals give a start for free residuals (every wave's variance at the
    shared value); the linear shape gives a start for quadratic and latent-basis
    models (the curvature factor at a small variance, the shape factor at the
    slope's values). Names the nested model does not have keep the default start.
    """
    from wavetrail.sem.fitting import data_matrix
    from wavetrail.sem.optimise import fit_batch, start_values
    from wavetrail.sem.stats import SuffStats

    Y = data_matrix(spec, data)
    Y = Y[~np.isnan(Y).all(axis=1)]
    stats = SuffStats.from_data(Y)
    default = start_values(spec, stats)[0]
    names = spec.param_names
    out = []
    plans = []
    if residuals == "free":
        plans.append((shape, "equal"))
    if shape != "linear":
        plans.append(("linear", residuals))
        if residuals == "free":
            plans.append(("linear", "equal"))
    for sh, res in plans:
        try:
            sub = growth_spec(time_scores, shape=sh, residuals=res, covariates=cov_names, observed=wave_cols)
            bf = fit_batch(sub, stats, max_iter=200)
        except (ModelError, np.linalg.LinAlgError, ValueError):
            continue
        if not np.isfinite(bf.loglik[0]):
            continue
        got = dict(zip(sub.param_names, bf.theta[0]))
        theta = default.copy()
        for a, name in enumerate(names):
            key = name.replace("shape", "slope") if sh == "linear" else name
            if key in got:
                theta[a] = got[key]
            elif name.startswith("var(") and "resvar" in got and name[4:-1] in wave_cols:
                theta[a] = got["resvar"]
            elif name == "resvar" and sh == shape:
                theta[a] = np.mean([got[f"var({w})"] for w in wave_cols if f"var({w})" in got])
            elif name == "var(quadratic)" and "var(slope)" in got:
                theta[a] = 1e-2 * abs(got["var(slope)"]) + 1e-8
            elif name.startswith(("cov(", "mean(quadratic")) and "quadratic" in name:
                theta[a] = 0.0
        out.append(theta)
    return out


def _person_times(wide, time_scores, wave_cols, where):
    """Individually varying time scores as a float DataFrame on ``wide``'s index, or None."""
    import pandas as pd

    if isinstance(time_scores, pd.DataFrame):
        ts = time_scores.copy()
        ts.columns = [str(c) for c in ts.columns]
        if set(wave_cols) <= set(ts.columns):
            ts = ts[wave_cols]
        elif ts.shape[1] == len(wave_cols):
            ts = ts.set_axis(wave_cols, axis=1)
        else:
            raise ModelError(f"{where}: the time-score table has columns {list(ts.columns)[:10]}, "
                             f"the waves are {wave_cols[:10]}", hint="give one time-score column per wave")
        missing = wide.index.difference(ts.index)
        if len(missing):
            raise ModelError(f"{where}: no time scores for {len(missing)} person(s), e.g. {missing[0]!r}",
                             hint="the time-score table needs a row for every person of the data")
        ts = ts.reindex(wide.index)
    else:
        arr = np.asarray(time_scores, dtype=float) if np.ndim(time_scores) == 2 else None
        if arr is None:
            return None
        if arr.shape != (len(wide), len(wave_cols)):
            raise ModelError(f"{where}: time scores of shape {arr.shape} for data with {len(wide)} rows and "
                             f"{len(wave_cols)} waves", hint="give one row per person and one column per wave")
        ts = pd.DataFrame(arr, index=wide.index, columns=wave_cols)
    try:
        ts = ts.astype(float)
    except (TypeError, ValueError) as err:
        raise ModelError(f"{where}: time scores must be numbers ({err})") from None
    y = wide.set_axis([str(c) for c in wide.columns], axis=1)[wave_cols]
    bad = y.notna().to_numpy() & ~np.isfinite(ts.to_numpy())
    if bad.any():
        r, c = np.argwhere(bad)[0]
        raise ModelError(f"{where}: person {wide.index[r]!r} has an outcome at wave {wave_cols[c]!r} but no "
                         f"time score there ({int(bad.sum())} such cell(s))",
                         hint="give the time (e.g. age) of every observed wave")
    return ts


def _fit_varying(data, times, shape, residuals, cov_names, wave_cols, se_from, where, max_iter):
    """Growth model with each person's own time scores (definition variables)."""
    from wavetrail.sem.fitting import SemFit, admissibility, check_data, data_matrix, estimates_table
    from wavetrail.sem.fitting import fit as sem_fit
    from wavetrail.sem.individual import fit_individual
    from wavetrail.sem.spec import LAMBDA

    if shape == "basis":
        raise ModelError(f"{where}: a latent-basis model estimates the time scores, so it cannot take each "
                         "person's own time scores", hint="use shape linear or quadratic, or one time score per wave")
    if se_from != "observed":
        raise ModelError("individually varying time scores use the observed information only",
                         hint="drop se_from=")
    T = len(wave_cols)
    tm = times.to_numpy(dtype=float)
    y_obs = data[wave_cols].notna().to_numpy()
    with np.errstate(invalid="ignore"):
        nominal = np.array([np.nanmean(np.where(y_obs[:, j], tm[:, j], np.nan)) for j in range(T)])
    if not np.all(np.isfinite(nominal)) or len(np.unique(nominal)) != T:
        raise ModelError(f"{where}: the average time scores of the waves must differ, got {list(nominal)}")
    spec = growth_spec(nominal, shape=shape, residuals=residuals, covariates=cov_names, observed=wave_cols)
    Y = data_matrix(spec, data[wave_cols + cov_names], where)
    notes = check_data(spec, Y, where)
    first = sem_fit(spec, Y, se_from=se_from, where=where, max_iter=max_iter)  # start values
    cm = spec.compile()
    tz = np.where(np.isfinite(tm), tm, 0.0)
    lam = np.broadcast_to(cm.base[LAMBDA], (len(Y),) + cm.base[LAMBDA].shape).copy()
    f_int, f_slope = spec.latent.index("intercept"), spec.latent.index("slope")
    lam[:, :T, f_int] = 1.0
    lam[:, :T, f_slope] = tz
    if shape == "quadratic":
        lam[:, :T, spec.latent.index("quadratic")] = tz ** 2
    base = {key: val[None] for key, val in cm.base.items()}
    base[LAMBDA] = lam
    res = fit_individual(spec, Y, base, first.theta, max_iter=max_iter, where=where)
    theta = res.theta
    if not res.converged:
        notes.append(f"did not converge in {res.n_iter} iterations (decrement {res.decrement:.3g})")
    if not np.all(np.isfinite(res.vcov)):
        notes.append("information matrix is singular: the model may not be identified; no standard errors")
    adm, adm_notes = admissibility(spec, theta)
    notes += adm_notes
    notes.append("individually varying time scores: no saturated model, so chi-square and the fit indices "
                 "built on it are not defined")
    k, n, ll = cm.k, res.n, res.loglik
    fitd = {"n": n, "loglik": ll, "chisq": np.nan, "df": np.nan, "p": np.nan, "cfi": np.nan, "tli": np.nan,
            "rmsea": np.nan, "rmsea_lo": np.nan, "rmsea_hi": np.nan, "srmr": np.nan,
            "aic": float(-2 * ll + 2 * k), "bic": float(-2 * ll + k * np.log(n)),
            "sabic": float(-2 * ll + k * np.log((n + 2) / 24.0)), "k": int(k),
            "converged": bool(res.converged), "admissible": bool(adm), "note": "; ".join(notes)}
    mu, sigma = spec.implied(theta)
    sem = SemFit(spec=spec, theta=theta, estimates=estimates_table(spec, theta, res.vcov), fit=fitd,
                 implied_mean=mu, implied_cov=sigma, vcov=res.vcov, converged=bool(res.converged),
                 admissible=bool(adm), notes=notes, n_iter=res.n_iter, se_from=se_from)
    g = GrowthFit(sem, shape, residuals, nominal, wave_cols)
    g.person_time_scores = times
    return g
