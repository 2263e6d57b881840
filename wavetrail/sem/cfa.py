"""Confirmatory factor analysis: the common case of a measurement model."""

from __future__ import annotations

import pandas as pd

from wavetrail.errors import ModelError
from wavetrail.sem.spec import ModelSpec


def cfa_spec(factors, observed=None, uncorrelated=False, unit_variance=False, **earlier) -> ModelSpec:
    """Measurement model: each factor loads on its indicators.

    Parameters
    ----------
    factors : dict factor name -> list of indicator columns
    observed : list of str, optional, column order (default: indicators in order of appearance)
    uncorrelated : bool, fix factor covariances at 0
    unit_variance : bool, identify factors by variance 1 (all loadings free) instead of
        fixing the first loading at 1

    Intercepts are free, factor means fixed at 0, residuals uncorrelated.
    """
    if earlier:
        from wavetrail.sem.fitting import renamed_arguments

        uncorrelated = renamed_arguments("cfa_spec", earlier, {"orthogonal": "uncorrelated"}).get(
            "uncorrelated", uncorrelated)
    if not factors:
        raise ModelError("fit_cfa needs at least one factor with indicators")
    obs = []
    for f, items in factors.items():
        items = list(items)
        if len(items) < 1:
            raise ModelError(f"factor {f!r} has no indicators")
        for x in items:
            if x not in obs:
                obs.append(x)
    if observed is not None:
        obs = list(observed)
    spec = ModelSpec(observed=obs, latent=list(factors))
    names = list(factors)
    for f, items in factors.items():
        for i, x in enumerate(items):
            spec.load(f, x, value=1.0 if (i == 0 and not unit_variance) else None)
    for x in obs:
        spec.cov(x, x)
        spec.intercept(x)
    for i, f in enumerate(names):
        spec.mean(f, value=0.0)
        spec.cov(f, f, value=1.0 if unit_variance else None)
        for g in names[i + 1:]:
            spec.cov(f, g, value=0.0 if uncorrelated else None)
    return spec


def fit_cfa(data: pd.DataFrame, factors, missing="fiml", uncorrelated=False, unit_variance=False,
            se_from="observed", where="data", means=True, **earlier):
    """Fit a confirmatory factor model by ML (FIML for missing entries).

    Parameters
    ----------
    data : DataFrame holding the indicator columns (NaN = missing)
    factors : dict factor name -> indicator columns; the first loading of each
        factor is fixed at 1 unless ``unit_variance=True``
    missing : {"fiml", "listwise"}
    uncorrelated, unit_variance : see :func:`cfa_spec`
    se_from : {"observed", "expected"} information for the standard errors
    means : bool, ``False`` leaves the (saturated) intercepts out of the
        parameter count (AIC/BIC of a covariance-structure model)

    Returns
    -------
    SemFit (``.fit``, ``.estimates``, ``.implied_cov``; loadings are the rows with
    ``kind == "loading"``)
    """
    from wavetrail.sem.fitting import fit

    if earlier:
        from wavetrail.sem.fitting import renamed_arguments

        named = renamed_arguments("fit_cfa", earlier, {"orthogonal": "uncorrelated", "information": "se_from",
                                                       "meanstructure": "means"})
        uncorrelated = named.get("uncorrelated", uncorrelated)
        se_from, means = named.get("se_from", se_from), named.get("means", means)
    spec = cfa_spec(factors, uncorrelated=uncorrelated, unit_variance=unit_variance)
    return fit(spec, data, missing=missing, se_from=se_from, where=where, means=means)
