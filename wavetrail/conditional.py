"""Conditional growth models: growth factors regressed on time-invariant predictors.

A conditional growth model adds named person-level predictors to a growth model of
:mod:`wavetrail.growth`: every growth factor (intercept, slope, quadratic or shape) is
regressed on every predictor. Numbers enter as they are (uncentred: the intercept's
mean is then the expected level of a person at zero on every number and at the
reference level of every category). A category enters as one 0/1 column per level
other than its reference level; the reference level is the first level the codebook
lists that anybody in the sample has. Predictors are exogenous with free means and
covariances, as in ML with ``fixed.x`` off, and people with a missing predictor value
are left out (listwise on the predictors; missing waves stay FIML).

The joint test of a predictor is the Wald test that all its paths (every growth factor,
every dummy of a category) are zero, ``W = b' V^-1 b`` on as many degrees of freedom as
paths, with ``V`` the covariance of the estimates (robust when the fit is robust).

This module holds statistics only: no files, no printing.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats as sps

from wavetrail.errors import ModelError, WavetrailError
from wavetrail.growth import FACTORS
from wavetrail.growth import fit_growth as _fit_growth

__all__ = ["EFFECT_COLUMNS", "TEST_COLUMNS", "ConditionalFit", "design", "fit_conditional", "holm"]

#: columns of the per-path effects table
EFFECT_COLUMNS = ["predictor", "term", "level", "reference", "factor", "estimate", "se", "z", "p", "std"]
#: columns of the per-predictor joint tests table
TEST_COLUMNS = ["predictor", "kind", "paths", "wald", "df", "p", "n", "n_excluded", "note"]


def code_text(code) -> str:
    """A level code as text ('1', not '1.0'), as every table and label lookup writes it."""
    try:
        f = float(code)
        return str(int(f)) if f.is_integer() else str(code)
    except (TypeError, ValueError):
        return str(code)


def design(predictors: pd.DataFrame, levels: dict | None = None) -> tuple[pd.DataFrame, pd.DataFrame, list[str]]:
    """Numeric design columns of the predictors.

    Parameters
    ----------
    predictors : DataFrame, one row per person (no missing values expected; rows
        with one are the caller's to drop), one column per predictor
    levels : dict predictor -> {code: label}, the codebook's level labels in codebook
        order; a predictor listed here (or a pandas categorical) is a category

    Returns
    -------
    (X, terms, notes): ``X`` the design columns named ``x1 .. xm`` on the same index;
    ``terms`` one row per column: column, predictor, kind ("number"/"category"),
    level (label of the level the column marks, empty for a number), reference
    (label of the reference level); ``notes`` what was left out and why.
    """
    levels = levels or {}
    cols, rows, notes = {}, [], []
    for name in predictors.columns:
        s = predictors[name]
        declared = levels.get(str(name))
        if declared or isinstance(s.dtype, pd.CategoricalDtype) or not pd.api.types.is_numeric_dtype(s):
            codes = s.map(lambda v: code_text(v) if pd.notna(v) else None)
            order = [code_text(k) for k in (declared or {})]
            seen = [c for c in pd.unique(codes.dropna())]
            order += sorted(c for c in seen if c not in order)
            labels = {code_text(k): str(v) for k, v in (declared or {}).items()}
            present = [c for c in order if (codes == c).any()]
            absent = [labels.get(c, c) for c in order if c not in present]
            if absent:
                notes.append(f"{name}: level(s) {', '.join(absent)} have nobody in the sample and are left out")
            if len(present) < 2:
                notes.append(f"{name}: only one level present, so it cannot be tested")
                continue
            ref = present[0]
            for c in present[1:]:
                key = f"x{len(cols) + 1}"
                cols[key] = (codes == c).astype(float).to_numpy()
                rows.append({"column": key, "predictor": str(name), "kind": "category",
                             "level": labels.get(c, c), "reference": labels.get(ref, ref)})
        else:
            x = pd.to_numeric(s, errors="coerce").astype(float)
            if x.nunique(dropna=True) < 2:
                notes.append(f"{name}: the same value for everyone in the sample, so it cannot be tested")
                continue
            key = f"x{len(cols) + 1}"
            cols[key] = x.to_numpy()
            rows.append({"column": key, "predictor": str(name), "kind": "number", "level": "", "reference": ""})
    X = pd.DataFrame(cols, index=predictors.index)
    terms = pd.DataFrame(rows, columns=["column", "predictor", "kind", "level", "reference"])
    return X, terms, notes


def holm(p) -> np.ndarray:
    """Holm's (1979, Scandinavian Journal of Statistics 6(2)) step-down adjusted p-values; NaN stays NaN."""
    p = np.asarray(p, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    if not len(ok):
        return out
    order = ok[np.argsort(p[ok], kind="stable")]
    m = len(order)
    adj = np.maximum.accumulate([(m - i) * p[j] for i, j in enumerate(order)])
    out[order] = np.minimum(adj, 1.0)
    return out


@dataclass
class ConditionalFit:
    """A fitted conditional growth model.

    Attributes
    ----------
    growth : the :class:`wavetrail.growth.GrowthFit` (None when the model could not be fitted)
    effects : DataFrame with :data:`EFFECT_COLUMNS`, one row per path (term x growth factor)
    tests : DataFrame with :data:`TEST_COLUMNS`, one row per predictor named
        (``wald``, ``df`` and ``p`` empty for a predictor that could not be tested; ``note`` says why)
    n : people in the model (an outcome at one wave or more and every predictor known)
    excluded : people with an outcome left out for a missing predictor value
    notes : list of str
    """

    growth: object
    effects: pd.DataFrame
    tests: pd.DataFrame
    n: int
    excluded: int
    notes: list = field(default_factory=list)


def fit_conditional(wide: pd.DataFrame, time_scores, predictors: pd.DataFrame, shape="linear", residuals="free",
                    levels=None, bounded=True, robust=False, seed=0, where="data") -> ConditionalFit:
    """Fit the growth model with every growth factor regressed on the predictors.

    Parameters
    ----------
    wide : DataFrame, one row per person, one column per wave (NaN = missing wave)
    time_scores : one per wave column
    predictors : DataFrame of person-level predictors (numbers or categories), index
        matched to ``wide``'s; a person missing from it counts as missing every predictor
    shape, residuals, bounded, robust, seed : as :func:`wavetrail.growth.fit_growth`
    levels : dict predictor -> {code: label} (codebook level labels, codebook order)
    where : names the data in messages

    Returns
    -------
    ConditionalFit. A model that cannot be fitted gives ``growth`` None, empty effects,
    and tests rows whose note says why (never an error for the whole analysis).
    """
    wide = wide.copy()
    wide.columns = [str(c) for c in wide.columns]
    has_y = wide.notna().any(axis=1)
    wide = wide.loc[has_y]
    pred = predictors.reindex(wide.index)
    complete = pred.notna().all(axis=1)
    excluded = int((~complete).sum())
    pred = pred.loc[complete]
    wide = wide.loc[complete]
    X, terms, notes = design(pred, levels)
    if excluded:
        notes.insert(0, f"{excluded} people with outcome data left out for a missing predictor value")
    names = [str(c) for c in predictors.columns]
    factors = FACTORS[shape]
    tested = set(terms["predictor"])

    def test_rows(stat=None):
        rows = []
        for name in names:
            col = predictors[name]
            kind = ("category" if name in (levels or {}) or isinstance(col.dtype, pd.CategoricalDtype)
                    or not pd.api.types.is_numeric_dtype(col) else "number")
            row = {"predictor": name, "kind": kind, "paths": 0, "wald": np.nan, "df": np.nan, "p": np.nan,
                   "n": len(wide), "n_excluded": excluded, "note": ""}
            if name not in tested:
                row["note"] = next((n.split(": ", 1)[1] for n in notes if n.startswith(f"{name}: ")),
                                   "not tested")
            elif stat is not None:
                row.update(stat(name))
            rows.append(row)
        return pd.DataFrame(rows, columns=TEST_COLUMNS)

    if X.shape[1] == 0 or len(wide) == 0:
        why = "no predictor could be tested" if len(wide) else "nobody has outcome data and every predictor"
        tests = test_rows()
        tests.loc[tests["note"].eq(""), "note"] = why
        return ConditionalFit(None, pd.DataFrame(columns=EFFECT_COLUMNS), tests, len(wide), excluded, notes + [why])
    try:
        g = _fit_growth(wide, time_scores, shape=shape, residuals=residuals, covariates=X, where=where,
                        bounded=bounded, robust=robust, seed=seed)
    except WavetrailError as err:
        why = f"model not fitted: {err.message}"
        tests = test_rows()
        tests.loc[tests["note"].eq(""), "note"] = why
        return ConditionalFit(None, pd.DataFrame(columns=EFFECT_COLUMNS), tests, len(wide), excluded, notes + [why])
    est = g.estimates.set_index("parameter")
    pnames = list(g.sem.spec.param_names)
    vcov = np.asarray(g.sem.vcov, dtype=float)
    rows, index_of = [], {}
    for _, t in terms.iterrows():
        for f in factors:
            par = f"regress({f},{t['column']}_cov)"
            if par not in est.index:
                raise ModelError(f"{where}: the conditional model lacks the path {par}")
            e = est.loc[par]
            rows.append({"predictor": t["predictor"], "term": t["predictor"] + (f"[{t['level']}]" if t["level"] else ""),
                         "level": t["level"], "reference": t["reference"], "factor": f,
                         "estimate": float(e["estimate"]), "se": float(e["se"]), "z": float(e["z"]),
                         "p": float(e["p"]), "std": float(e["std"])})
            index_of.setdefault(t["predictor"], []).append(pnames.index(par))
    effects = pd.DataFrame(rows, columns=EFFECT_COLUMNS)
    theta = np.asarray(g.theta, dtype=float)
    fit_notes = []
    if not g.fit.get("converged", False):
        fit_notes.append("the model did not converge")
    if not g.fit.get("admissible", False):
        fit_notes.append("the solution is inadmissible")

    def wald(name):
        idx = index_of[name]
        b = theta[idx]
        V = vcov[np.ix_(idx, idx)]
        out = {"paths": len(idx), "df": len(idx)}
        note = list(fit_notes)
        if not np.all(np.isfinite(V)):
            note.append("no covariance of the estimates (a path at a bound or a singular information): not tested")
            return {**out, "note": "; ".join(note)}
        try:
            w = float(b @ np.linalg.solve(V, b))
        except np.linalg.LinAlgError:
            note.append("singular covariance of its paths: not tested")
            return {**out, "note": "; ".join(note)}
        return {**out, "wald": w, "p": float(sps.chi2.sf(w, len(idx))), "note": "; ".join(note)}

    return ConditionalFit(g, effects, test_rows(wald), len(wide), excluded, notes + fit_notes)
