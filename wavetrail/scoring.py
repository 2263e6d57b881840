"""Scale scores, Cronbach's alpha, McDonald's omega and item statistics.

* :func:`score_scale` — the mean of a person's answered items after reverse
  keying, where at least ``min_share`` of the items were answered.
* :func:`reliability` — alpha with a Feldt (1965) interval, omega total from
  a one-factor ML CFA fitted with :func:`wavetrail.sem.fit_cfa`, item-rest
  correlations and alpha if an item is deleted; on complete cases.
* :func:`score_panel`, :func:`reliability_table` — the same per scale and
  wave of a :class:`~wavetrail.panel.Panel`; :func:`wide_scores` reshapes the
  scores table to one row per person.

References
----------
1. Cronbach, L. J. (1951). Coefficient alpha and the internal structure of
   tests. Psychometrika, 16, 297-334.
2. Feldt, L. S. (1965). The approximate sampling distribution of
   Kuder-Richardson reliability coefficient twenty. Psychometrika, 30, 357-370.
3. McDonald, R. P. (1999). Test Theory: A Unified Treatment. Mahwah, NJ:
   Erlbaum.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd
from scipy import stats as _st

from wavetrail.codebook import DEFAULT_MIN_SHARE
from wavetrail.errors import ModelError

__all__ = ["score_scale", "reverse_key", "reliability", "Reliability", "cronbach_alpha", "feldt_interval",
           "omega_total", "score_panel", "reliability_table", "wide_scores", "SCORE_COLUMNS",
           "RELIABILITY_COLUMNS"]

SCORE_COLUMNS = ["id", "wave", "scale", "score", "n_items"]
RELIABILITY_COLUMNS = ["scale", "wave", "n", "k", "alpha", "alpha_lo", "alpha_hi", "omega",
                       "ci_method", "min_item_rest", "weakest_item", "alpha_if_weakest_deleted", "note"]
#: relative tolerance when comparing the answered share with min_share
_SHARE_EPS = 1e-9


def reverse_key(items: pd.DataFrame, reverse: Sequence[str] = (), bounds=None) -> pd.DataFrame:
    """Reverse-key the named columns as ``low + high - x``.

    ``bounds`` is one ``(low, high)`` for all items or a mapping item -> (low, high).
    """
    reverse = list(reverse)
    if not reverse:
        return items.astype(float)
    if bounds is None:
        raise ModelError(f"reverse-keyed items {reverse} need bounds=(low, high)",
                         hint="give the items a `range:` in the codebook")
    out = items.astype(float)
    for name in reverse:
        if name not in out.columns:
            raise ModelError(f"reverse-keyed item {name!r} is not among the items {list(out.columns)}")
        lo, hi = bounds[name] if isinstance(bounds, dict) else bounds
        out[name] = lo + hi - out[name]
    return out


def score_scale(items: pd.DataFrame, reverse: Sequence[str] = (), bounds=None,
                min_share: float = DEFAULT_MIN_SHARE) -> pd.Series:
    """Per-person scale score: the mean of the answered items after reverse keying.

    Parameters
    ----------
    items : DataFrame
        One column per item, NaN where not answered.
    reverse : sequence of str
        Reverse-keyed item columns.
    bounds : (low, high) or dict, optional
        Item range for reverse keying (``low + high - x``).
    min_share : float
        Least share of items answered for a score (default 0.8; common practice).

    Returns
    -------
    Series
        The score on the index of ``items``; NaN where fewer than
        ``min_share`` of the items were answered.
    """
    if not 0 < min_share <= 1:
        raise ModelError(f"min_share must be in (0, 1], not {min_share}")
    x = reverse_key(items, reverse, bounds).to_numpy(dtype=float)
    k = x.shape[1]
    answered = np.isfinite(x).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.nansum(x, axis=1) / answered
    enough = answered >= min_share * k * (1 - _SHARE_EPS)
    return pd.Series(np.where(enough & (answered > 0), mean, np.nan), index=items.index, name="score")


def cronbach_alpha(x: np.ndarray) -> float:
    """Cronbach's (1951) alpha of a complete (n, k) item matrix.

    .. math:: \\alpha = \\frac{k}{k-1}\\Bigl(1 - \\frac{\\sum_i s_i^2}{s_X^2}\\Bigr)

    with sample variances (``ddof=1``) of the items and of their sum.
    """
    x = np.asarray(x, dtype=float)
    n, k = x.shape
    if k < 2 or n < 2:
        return float("nan")
    item_var = x.var(axis=0, ddof=1).sum()
    total_var = x.sum(axis=1).var(ddof=1)
    if total_var <= 0:
        return float("nan")
    return float(k / (k - 1) * (1 - item_var / total_var))


def feldt_interval(alpha: float, n: int, k: int, level: float = 0.95) -> tuple[float, float]:
    """Feldt's (1965) confidence interval of alpha.

    ``(1 - alpha) / (1 - alpha_hat)`` follows an F distribution with
    ``n - 1`` and ``(n - 1)(k - 1)`` degrees of freedom.
    """
    if not np.isfinite(alpha) or n < 2 or k < 2:
        return (float("nan"), float("nan"))
    df1, df2 = n - 1, (n - 1) * (k - 1)
    g = 1 - level
    lo = 1 - (1 - alpha) * _st.f.ppf(1 - g / 2, df1, df2)
    hi = 1 - (1 - alpha) * _st.f.ppf(g / 2, df1, df2)
    return (float(lo), float(hi))


def omega_total(loadings, residual_variances, factor_variance: float = 1.0) -> float:
    """McDonald's omega total of a one-factor model.

    .. math:: \\omega = \\frac{(\\sum_i \\lambda_i)^2 \\phi}{(\\sum_i \\lambda_i)^2 \\phi + \\sum_i \\theta_i}

    (the model-implied share of the sum score's variance due to the factor).
    """
    lam = np.asarray(loadings, dtype=float)
    th = np.asarray(residual_variances, dtype=float)
    common = lam.sum() ** 2 * float(factor_variance)
    return float(common / (common + th.sum()))


@dataclass
class Reliability:
    """Reliability of one set of items.

    Attributes
    ----------
    alpha : float
    alpha_ci : (float, float)
        Feldt (1965) interval at ``level``.
    omega : float
        Omega total from a one-factor ML CFA (NaN when it was not fitted).
    items : DataFrame
        item, mean, sd, item_rest, alpha_if_deleted, loading (standardised).
    n, k : int
        Complete cases used and number of items.
    """

    alpha: float
    alpha_ci: tuple
    omega: float
    items: pd.DataFrame
    n: int
    k: int
    level: float = 0.95
    ci_method: str = "Feldt (1965)"
    note: str = ""
    cfa: object = field(default=None, repr=False)


def reliability(items: pd.DataFrame, reverse: Sequence[str] = (), bounds=None, *, level: float = 0.95,
                omega: bool = True) -> Reliability:
    """Alpha, omega and item statistics on complete cases (listwise).

    Parameters
    ----------
    items : DataFrame
        One column per item; rows with any NaN are left out (listwise).
    reverse, bounds
        Reverse keying as in :func:`score_scale`.
    level : float
        Confidence level of the Feldt interval.
    omega : bool
        Fit the one-factor CFA for omega (and the standardised loadings).

    Returns
    -------
    Reliability
    """
    keyed = reverse_key(items, reverse, bounds)
    x = keyed.dropna(axis=0, how="any")
    n, k = x.shape
    arr = x.to_numpy(dtype=float)
    alpha = cronbach_alpha(arr)
    stats = _item_stats(x)
    note = ""
    om = float("nan")
    cfa = None
    if omega and n > k + 1 and k >= 3:
        try:
            om, loadings, cfa = _omega_from_cfa(x)
            stats["loading"] = loadings
        except ModelError as exc:
            note = f"omega not estimated: {exc.message}"
    elif omega:
        note = "omega needs at least 3 items and more complete cases than items"
    if "loading" not in stats:
        stats["loading"] = np.nan
    return Reliability(alpha=alpha, alpha_ci=feldt_interval(alpha, n, k, level), omega=om, items=stats,
                       n=int(n), k=int(k), level=level, note=note, cfa=cfa)


def _item_stats(x: pd.DataFrame) -> pd.DataFrame:
    arr = x.to_numpy(dtype=float)
    n, k = arr.shape
    total = arr.sum(axis=1)
    rows = []
    for j, name in enumerate(x.columns):
        rest = total - arr[:, j]
        if n > 2 and arr[:, j].std() > 0 and rest.std() > 0:
            r = float(np.corrcoef(arr[:, j], rest)[0, 1])
        else:
            r = float("nan")
        rows.append({"item": name, "mean": float(arr[:, j].mean()) if n else np.nan,
                     "sd": float(arr[:, j].std(ddof=1)) if n > 1 else np.nan, "item_rest": r,
                     "alpha_if_deleted": cronbach_alpha(np.delete(arr, j, axis=1)) if k > 2 else np.nan})
    return pd.DataFrame(rows)


def _omega_from_cfa(x: pd.DataFrame):
    from wavetrail.sem import fit_cfa

    cols = [str(c) for c in x.columns]
    data = x.copy()
    data.columns = cols
    name = "_common"
    fit = fit_cfa(data, {name: cols})
    if not fit.fit.get("converged", True):
        raise ModelError("the one-factor CFA did not converge")
    est = fit.estimates.set_index("parameter")["estimate"]
    lam = np.array([_pick(est, "loading", name, c, default=1.0 if i == 0 else None)
                    for i, c in enumerate(cols)])
    theta = np.array([_pick(est, "var", c, c) for c in cols])
    phi = _pick(est, "var", name, name)
    om = omega_total(lam, theta, phi)
    sd = np.sqrt(lam**2 * phi + theta)
    return om, lam * np.sqrt(phi) / sd, fit


def _pick(est: pd.Series, kind: str, a: str, b: str, default=None) -> float:
    key = f"{kind}({a},{b})" if kind == "loading" else f"var({a})"
    if key in est.index:
        return float(est[key])
    if default is not None:
        return float(default)
    raise ModelError(f"the CFA estimates have no {key}")


# --------------------------------------------------------------------------- panel level


def _scale_parts(codebook, scale: str):
    sc = codebook.scales[scale]
    bounds = {i: codebook.variables[i].range for i in sc.reverse}
    return sc, bounds


def score_panel(panel, measures: Sequence[str] = ()) -> pd.DataFrame:
    """Scores of every scale at every wave of a panel, and of single measures.

    Parameters
    ----------
    panel : Panel
    measures : sequence of str
        Numeric variables modelled as outcomes on their own (a single item, a
        measured value, a precomputed total, a derived variable). Each gets rows
        with ``scale`` = the variable name, ``score`` = its value and ``n_items`` =
        1 where it was observed, 0 where not. A name that is also a scale is
        scored as the scale.

    Returns
    -------
    DataFrame
        id, wave, scale, score, n_items (answered items), one row per person,
        wave and scale (or measure); scales first in codebook order, then the
        measures in the order given. Identifier columns never appear.
    """
    long = panel.long
    parts = []
    for name in measures:
        if name in panel.codebook.scales:
            continue
        var = panel.codebook.variables.get(name)
        if var is None or not var.numeric or var.identifier:
            raise ModelError(f"{name!r} is not a numeric variable of the codebook and cannot be scored",
                             hint="name a scale or a numeric variable measured at two or more waves")
    for name in panel.codebook.scales:
        sc, bounds = _scale_parts(panel.codebook, name)
        items = long[list(sc.items)]
        score = score_scale(items, sc.reverse, bounds or None, sc.min_share)
        parts.append(pd.DataFrame({"id": long[panel.id].to_numpy(), "wave": long[panel.wave].to_numpy(),
                                   "scale": name, "score": score.to_numpy(),
                                   "n_items": items.notna().sum(axis=1).to_numpy().astype(np.int64)}))
    for name in dict.fromkeys(measures):
        if name in panel.codebook.scales:
            continue
        value = long[name].to_numpy(dtype=float)
        parts.append(pd.DataFrame({"id": long[panel.id].to_numpy(), "wave": long[panel.wave].to_numpy(),
                                   "scale": name, "score": value,
                                   "n_items": np.isfinite(value).astype(np.int64)}))
    if not parts:
        return pd.DataFrame({c: [] for c in SCORE_COLUMNS})
    return pd.concat(parts, ignore_index=True)[SCORE_COLUMNS]


def reliability_table(panel, *, level: float = 0.95, omega: bool = True) -> pd.DataFrame:
    """Reliability of every scale at every wave (complete cases per scale and wave).

    Returns
    -------
    DataFrame
        scale, wave, n, k, alpha, alpha_lo, alpha_hi, omega, ci_method,
        min_item_rest, weakest_item (lowest item-rest correlation),
        alpha_if_weakest_deleted, note.
    """
    long = panel.long
    rows = []
    for name in panel.codebook.scales:
        sc, bounds = _scale_parts(panel.codebook, name)
        for w in panel.waves:
            items = long.loc[long[panel.wave] == w, list(sc.items)]
            if items.dropna().shape[0] < 3:
                rows.append({"scale": name, "wave": w, "n": int(items.dropna().shape[0]), "k": len(sc.items),
                             "ci_method": "Feldt (1965)", "note": "fewer than 3 complete cases"})
                continue
            rel = reliability(items, sc.reverse, bounds or None, level=level, omega=omega)
            st = rel.items
            weakest = st.loc[st["item_rest"].idxmin()] if st["item_rest"].notna().any() else None
            rows.append({"scale": name, "wave": w, "n": rel.n, "k": rel.k, "alpha": rel.alpha,
                         "alpha_lo": rel.alpha_ci[0], "alpha_hi": rel.alpha_ci[1], "omega": rel.omega,
                         "ci_method": rel.ci_method,
                         "min_item_rest": None if weakest is None else weakest["item_rest"],
                         "weakest_item": None if weakest is None else weakest["item"],
                         "alpha_if_weakest_deleted": None if weakest is None else weakest["alpha_if_deleted"],
                         "note": rel.note})
    return pd.DataFrame(rows, columns=RELIABILITY_COLUMNS)


def wide_scores(scores_df: pd.DataFrame, scale: str, waves) -> pd.DataFrame:
    """One row per person, one column per wave of ``waves`` (NaN = missing wave).

    Parameters
    ----------
    scores_df : DataFrame
        The scores table (id, wave, scale, score, n_items).
    scale : str
    waves : sequence
        Wave labels in the order wanted; waves are matched as text, so
        ``1`` and ``"1"`` are the same wave.
    """
    from wavetrail.panel import wave_key

    sub = scores_df[scores_df["scale"] == scale]
    if not len(sub) and scale not in set(scores_df["scale"]):
        raise ModelError(f"scale {scale!r} is not in the scores table",
                         hint=f"scales there: {sorted(set(scores_df['scale']))}")
    keys = [wave_key(w) for w in waves]
    sub = sub.assign(_w=sub["wave"].map(wave_key))
    sub = sub[sub["_w"].isin(keys)]
    table = sub.pivot_table(index="id", columns="_w", values="score", aggfunc="first", dropna=False)
    table = table.reindex(columns=keys)
    table.columns = list(waves)
    ids = pd.unique(scores_df.loc[scores_df["scale"] == scale, "id"])
    table = table.reindex(pd.Index(sorted(ids), name="id"))
    table.columns.name = None
    return table.astype(float)
