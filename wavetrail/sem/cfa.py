"""Confirmatory factor analysis: the common case of a measurement model."""

from __future__ import annotations

import pandas as pd

from wavetrail.errors import ModelError
from wavetrail.sem.spec import ModelSpec


def cfa_spec(factors, observed=None, orthogonal=False, unit_variance=False) -> ModelSpec:
    """Measurement model: each factor loads on its indicators.

    Parameters
    ----------
    factors : dict factor name -> list of indicator columns
    observed : list of str, optional, column order (default: indicators in order of appearance)
    orthogonal : bool, fix factor covariances at 0
    unit_variance : bool, identify factors by variance 1 (all loadings free) instead of
        fixing the first loading at 1

    Intercepts are free, factor means fixed at 0, residuals uncorrelated.
    """
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
            spec.cov(f, g, value=0.0 if orthogonal else None)
    return spec


def fit_cfa(data: pd.DataFrame, factors, missing="fiml", orthogonal=False, unit_variance=False,
            information="observed", where="data", meanstructure=True):
    """Fit a confirmatory factor model by ML (FIML for missing entries).

    Parameters
    ----------
    data : DataFrame holding the indicator columns (NaN = missing)
    factors : dict factor name -> indicator columns; the first loading of each
        factor is fixed at 1 unless ``unit_variance=True``
    missing : {"fiml", "listwise"}
    orthogonal, unit_variance : see :func:`cfa_spec`
    information : {"observed", "expected"} for the standard errors
    meanstructure : bool, ``False`` leaves the (saturated) intercepts out of the
        parameter count (AIC/BIC of a covariance-structure model)

    Returns
    -------
    SemFit (``.fit``, ``.estimates``, ``.implied_cov``; loadings are the rows with
    ``kind == "loading"``)
    """
    from wavetrail.sem.fitting import fit

    spec = cfa_spec(factors, orthogonal=orthogonal, unit_variance=unit_variance)
    return fit(spec, data, missing=missing, information=information, where=where,
               meanstructure=meanstructure)
