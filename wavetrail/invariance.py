"""Longitudinal measurement invariance of a scale over the waves.

One confirmatory factor model holds a factor per wave, measured by the same
items at every wave, with the residuals of the same item correlated across
waves. Three nested steps are fitted by ML with full-information handling of
missing items and waves (:func:`wavetrail.sem.fit`):

``configural``
    Same pattern at every wave; the first item's loading is 1 at every wave,
    other loadings and all intercepts free, factor means 0.
``metric``
    Loadings of each item equal over the waves.
``scalar``
    Intercepts of each item equal over the waves too; the first wave's factor
    mean is 0 and the later means are free.

A step holds when CFI drops by at most .01 from the step before (Cheung &
Rensvold 2002); the Chen (2007) criteria are reported beside it (RMSEA rise
at most .015; SRMR rise at most .030 for loadings, .010 for intercepts).
When the scalar step fails, each item's intercepts are freed in turn and the
items are ranked by how much CFI improves (partial invariance, Byrne,
Shavelson & Muthen 1989); the ``partial_scalar`` row frees items in that order
until the step holds.

References
----------
1. Cheung, G. W., & Rensvold, R. B. (2002). Evaluating goodness-of-fit indexes
   for testing measurement invariance. Structural Equation Modeling, 9, 233-255.
2. Chen, F. F. (2007). Sensitivity of goodness of fit indexes to lack of
   measurement invariance. Structural Equation Modeling, 14, 464-504.
3. Byrne, B. M., Shavelson, R. J., & Muthen, B. (1989). Testing for the
   equivalence of factor covariance and mean structures: The issue of partial
   measurement invariance. Psychological Bulletin, 105, 456-466.
4. Widaman, K. F., & Reise, S. P. (1997). Exploring the measurement invariance
   of psychological instruments. In K. J. Bryant et al. (Eds.), The Science of
   Prevention (pp. 281-324). APA.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd

from wavetrail.errors import ModelError

__all__ = ["invariance_spec", "longitudinal_invariance", "invariance_table", "Invariance",
           "INVARIANCE_COLUMNS", "DELTA_CFI", "MAX_RISE_RMSEA", "MAX_RISE_SRMR_LOADINGS", "MAX_RISE_SRMR_INTERCEPTS"]

#: largest CFI drop for a step to hold (Cheung & Rensvold 2002)
DELTA_CFI = 0.01
#: Chen (2007): largest RMSEA rise; SRMR rise for loadings and for intercepts
MAX_RISE_RMSEA, MAX_RISE_SRMR_LOADINGS, MAX_RISE_SRMR_INTERCEPTS = 0.015, 0.030, 0.010
STEPS = ("configural", "metric", "scalar")
INVARIANCE_COLUMNS = ["scale", "step", "n", "chisq", "df", "p", "cfi", "tli", "rmsea", "srmr",
                      "delta_chisq", "delta_df", "delta_p", "delta_cfi", "delta_rmsea", "delta_srmr",
                      "decision", "decision_all_indices", "freed", "free_order", "converged", "note"]


def _obs(item: str, t: int) -> str:
    return f"{item}@{t}"


def _fac(t: int) -> str:
    return f"factor@{t}"


def invariance_spec(items: Sequence[str], n_waves: int, step: str, free_intercepts: Sequence[str] = ()):
    """The longitudinal factor model of one step.

    Parameters
    ----------
    items : sequence of str
        Item names; the first is the marker (loading 1 at every wave).
    n_waves : int
    step : {"configural", "metric", "scalar"}
    free_intercepts : sequence of str
        Scalar step only: items whose intercepts stay free over the waves.

    Returns
    -------
    ModelSpec
        Observed columns ``item@t`` (wave-major order), factors ``factor@t``.
    """
    from wavetrail.sem import ModelSpec

    if step not in STEPS:
        raise ModelError(f"invariance step {step!r}: use one of {', '.join(STEPS)}")
    items = list(items)
    if len(items) < 2:
        raise ModelError("a longitudinal factor model needs at least two items")
    free = set(free_intercepts)
    if step == "scalar" and len(free) >= len(items):
        raise ModelError("at least one item must keep equal intercepts in the scalar step")
    waves = range(n_waves)
    spec = ModelSpec(observed=[_obs(i, t) for t in waves for i in items], latent=[_fac(t) for t in waves])
    for t in waves:
        for j, item in enumerate(items):
            x = _obs(item, t)
            if j == 0:
                spec.load(_fac(t), x, value=1.0)
            else:
                spec.load(_fac(t), x, label=f"loading:{item}" if step != "configural" else None)
            equal = step == "scalar" and item not in free
            spec.intercept(x, label=f"intercept:{item}" if equal else None)
            spec.cov(x, x)
        spec.mean(_fac(t), value=0.0 if (step != "scalar" or t == 0) else None)
        for s in range(t + 1):
            spec.cov(_fac(s), _fac(t))
    for item in items:  # the same item's residuals are correlated over the waves
        for s in waves:
            for t in range(s + 1, n_waves):
                spec.cov(_obs(item, s), _obs(item, t))
    return spec


def _wide(long: pd.DataFrame, items, waves, id_col, wave_col) -> pd.DataFrame:
    from wavetrail.panel import wave_key, wave_positions

    keys = [wave_key(w) for w in waves]
    # position of each row's wave (one call of wave_key per distinct value, not per row)
    pos = wave_positions(long[wave_col], waves)
    sub = long[[id_col, *items]]
    parts = []
    for t, key in enumerate(keys):
        rows = np.isin(pos, [i for i, k in enumerate(keys) if k == key])  # waves with the same key share rows
        part = sub[rows].drop_duplicates(id_col).set_index(id_col)[list(items)]
        part.columns = [_obs(i, t) for i in items]
        parts.append(part)
    wide = pd.concat(parts, axis=1)
    return wide.astype(float)


@dataclass
class Invariance:
    """Result of :func:`longitudinal_invariance`.

    Attributes
    ----------
    table : DataFrame
        One row per step (INVARIANCE_COLUMNS).
    free_order : DataFrame
        item, cfi, delta_cfi (gain over the scalar step), chisq_drop, in
        order of gain; empty when the scalar step holds.
    fits : dict
        step -> SemFit.
    """

    table: pd.DataFrame
    free_order: pd.DataFrame
    fits: dict = field(default_factory=dict, repr=False)


def longitudinal_invariance(long: pd.DataFrame, items: Sequence[str], waves: Sequence, *, id: str = "id",
                            wave: str = "wave", scale: str = "scale", reverse: Sequence[str] = (),
                            bounds=None, delta_cfi: float = DELTA_CFI, partial: bool = True) -> Invariance:
    """Test configural, metric and scalar invariance of one scale over the waves.

    Parameters
    ----------
    long : DataFrame
        One row per person and wave with the id, wave and item columns.
    items : sequence of str
        The scale's items; the first is the marker item.
    waves : sequence
        The waves to compare, in time order.
    id, wave : str
        Column names of the person id and the wave.
    scale : str
        Name written in the table.
    reverse, bounds
        Reverse keying before fitting (as in :func:`wavetrail.scoring.score_scale`).
    delta_cfi : float
        Largest CFI drop for a step to hold (default .01, Cheung & Rensvold 2002).
    partial : bool
        When the scalar step fails, rank items by the CFI gain of freeing
        their intercepts and add a ``partial_scalar`` row.

    Returns
    -------
    Invariance
    """
    from wavetrail.scoring import reverse_key

    items = list(items)
    waves = list(waves)
    if len(waves) < 2:
        raise ModelError(f"scale {scale}: invariance over waves needs at least two waves")
    keyed = long.copy()
    keyed[items] = reverse_key(long[items], reverse, bounds).to_numpy()
    data = _wide(keyed, items, waves, id, wave)
    data = data[data.notna().any(axis=1)]
    prep = _Prepared.from_frame(data, scale)
    T = len(waves)
    fits = {}
    start = None
    for step in STEPS:
        spec = invariance_spec(items, T, step)
        fits[step] = prep.fit(spec, _carry(start, spec))
        start = fits[step]
    rows = [_row(scale, "configural", fits["configural"], None, "")]
    rows.append(_row(scale, "metric", fits["metric"], fits["configural"], "loadings"))
    rows.append(_row(scale, "scalar", fits["scalar"], fits["metric"], "intercepts"))
    if rows[1]["decision"] != "holds":
        rows[2]["note"] = _join(rows[2]["note"], "metric step failed: scalar tested for completeness")
    order = pd.DataFrame(columns=["item", "cfi", "delta_cfi", "chisq_drop"])
    if partial and rows[2]["decision"] == "fails":
        order = _free_order(items, T, prep, fits)
        rows[2]["free_order"] = "; ".join(f"{r.item} (chisq -{r.chisq_drop:.2f}, cfi {r.delta_cfi:+.4f})"
                                          for r in order.itertuples())
        freed: list[str] = []
        best = row = None
        for item in order["item"]:
            if len(freed) >= len(items) - 1:
                break
            freed.append(item)
            spec = invariance_spec(items, T, "scalar", free_intercepts=freed)
            best = prep.fit(spec, _carry(fits["scalar"], spec))
            row = _row(scale, "partial_scalar", best, fits["metric"], "intercepts")
            if row["decision"] == "holds":
                break
        if best is not None:
            row["freed"] = ", ".join(freed)
            rows.append(row)
            fits["partial_scalar"] = best
    table = pd.DataFrame(rows, columns=INVARIANCE_COLUMNS)
    return Invariance(table=table, free_order=order.reset_index(drop=True), fits=fits)


@dataclass
class StepFit:
    """One fitted step: estimates by entry name and the fit indices (no standard errors)."""

    spec: object
    theta: np.ndarray
    fit: dict
    converged: bool
    admissible: bool
    notes: list

    @property
    def values(self) -> dict:
        """Entry name -> value (free estimates and fixed values)."""
        cm = self.spec.compile()
        return {e.name: (float(self.theta[e.param]) if e.param >= 0 else float(e.value)) for e in cm.entries}


class _Prepared:
    """The data of one scale as sufficient statistics, with its saturated and baseline fits.

    The steps only need fit indices, so each is fitted with the engine's batched
    optimiser (:func:`wavetrail.sem.fit_batch`) against reference models computed
    once, and no standard errors are computed.
    """

    def __init__(self, Y: np.ndarray, names: list[str], where: str):
        from wavetrail.sem import SuffStats
        from wavetrail.sem.saturated import independence, saturated

        for j, name in enumerate(names):
            col = Y[:, j][np.isfinite(Y[:, j])]
            if len(col) < 3:
                raise ModelError(f"{where}: {name.replace('@', ' at wave position ')} has {len(col)} answers; "
                                 "too few to model", hint="leave the scale or the wave out of `invariance.scales`")
            if np.ptp(col) == 0:
                raise ModelError(f"{where}: {name} is constant (every answer {col[0]:g})",
                                 hint="a constant item has no variance to model")
        self.where = where
        self.stats = SuffStats.from_data(Y)
        self.n = float(self.stats.total[0])
        self.p = Y.shape[1]
        self.sat_mean, self.sat_cov, self.ll_sat, _, sat_ok = saturated(self.stats)
        self.notes = [] if sat_ok else ["the saturated model (EM) did not converge; fit indices are approximate"]
        self.ll_base = independence(self.stats)[2]

    @classmethod
    def from_frame(cls, data: pd.DataFrame, scale: str) -> "_Prepared":
        return cls(data.to_numpy(dtype=float), list(data.columns), f"scale {scale}")

    def fit(self, spec, start=None) -> StepFit:
        from wavetrail.sem import fit_batch
        from wavetrail.sem.fitting import admissibility
        from wavetrail.sem.indices import fit_indices

        bf = fit_batch(spec, self.stats, start=start, max_iter=500, tol=1e-10)
        theta = bf.theta[0]
        ll = float(bf.loglik[0])
        converged = bool(bf.converged[0]) and np.isfinite(ll)
        notes = list(self.notes)
        if not converged:
            notes.append(f"did not converge in {bf.n_iter} iterations")
        _, sigma = spec.implied(theta)
        adm, adm_notes = admissibility(spec, theta)
        notes += adm_notes
        ind = fit_indices(ll, spec.k, self.n, self.p, self.ll_sat, self.ll_base, self.sat_cov, sigma)
        ind["converged"] = converged
        ind["admissible"] = adm
        ind["note"] = "; ".join(notes)
        return StepFit(spec=spec, theta=theta, fit=ind, converged=converged, admissible=adm, notes=notes)


def _free_order(items, T, prep, fits) -> pd.DataFrame:
    base = fits["scalar"]
    out = []
    for item in items:
        spec = invariance_spec(items, T, "scalar", free_intercepts=[item])
        f = prep.fit(spec, _carry(base, spec))
        out.append({"item": item, "cfi": f.fit["cfi"], "delta_cfi": f.fit["cfi"] - base.fit["cfi"],
                    "chisq_drop": base.fit["chisq"] - f.fit["chisq"]})
    order = pd.DataFrame(out)
    # rank by the chi-square drop (CFI gains tie at CFI's ceiling of 1), then item order
    order["_pos"] = range(len(order))
    order = order.sort_values(["chisq_drop", "_pos"], ascending=[False, True], kind="mergesort")
    return order.drop(columns="_pos")


def _carry(previous, spec):
    """Starting values for ``spec`` from a fitted neighbour step (matched by matrix entry)."""
    if previous is None:
        return None
    values = previous.values
    cm = spec.compile()
    start = np.zeros(cm.k)
    filled = np.zeros(cm.k, dtype=bool)
    for e in cm.entries:
        if e.param >= 0 and e.name in values and np.isfinite(values[e.name]) and not filled[e.param]:
            start[e.param] = values[e.name]
            filled[e.param] = True
    if not filled.all():
        return None
    return start


def _join(a: str, b: str) -> str:
    return b if not a else f"{a}; {b}"


def _row(scale, step, f, prev, constrained) -> dict:
    fd = f.fit
    row = {"scale": scale, "step": step, "n": fd["n"], "chisq": fd["chisq"], "df": fd["df"], "p": fd["p"],
           "cfi": fd["cfi"], "tli": fd["tli"], "rmsea": fd["rmsea"], "srmr": fd["srmr"],
           "delta_chisq": np.nan, "delta_df": np.nan, "delta_p": np.nan, "delta_cfi": np.nan,
           "delta_rmsea": np.nan, "delta_srmr": np.nan, "decision": "baseline", "decision_all_indices": "",
           "freed": "", "free_order": "", "converged": bool(fd.get("converged", True)) and bool(f.converged),
           "note": fd.get("note", "") or ""}
    if prev is not None:
        from scipy import stats

        pd_ = prev.fit
        d_chi = fd["chisq"] - pd_["chisq"]
        d_df = fd["df"] - pd_["df"]
        row.update(delta_chisq=d_chi, delta_df=d_df,
                   delta_p=float(stats.chi2.sf(max(d_chi, 0.0), d_df)) if d_df > 0 else np.nan,
                   delta_cfi=fd["cfi"] - pd_["cfi"], delta_rmsea=fd["rmsea"] - pd_["rmsea"],
                   delta_srmr=fd["srmr"] - pd_["srmr"])
        row["decision"] = "holds" if row["delta_cfi"] >= -DELTA_CFI else "fails"
        srmr_cut = MAX_RISE_SRMR_LOADINGS if constrained == "loadings" else MAX_RISE_SRMR_INTERCEPTS
        all_ok = (row["delta_cfi"] >= -DELTA_CFI and row["delta_rmsea"] <= MAX_RISE_RMSEA
                   and (not np.isfinite(row["delta_srmr"]) or row["delta_srmr"] <= srmr_cut))
        row["decision_all_indices"] = "holds" if all_ok else "fails"
    if not row["converged"]:
        row["decision"] = "not converged"
    return row


def invariance_table(panel, scales: Sequence[str] | None = None) -> pd.DataFrame:
    """Invariance of each scale of a panel over all its waves (INVARIANCE_COLUMNS).

    A scale that cannot be fitted (too few people, a constant item) gets one
    row with decision ``not estimated`` and the reason in ``note``.
    """
    cb = panel.codebook
    scales = list(cb.scales) if scales is None else list(scales)
    parts = []
    for name in scales:
        sc = cb.scales[name]
        bounds = {i: cb.variables[i].range for i in sc.reverse}
        try:
            res = longitudinal_invariance(panel.long, sc.items, panel.waves, id=panel.id, wave=panel.wave,
                                          scale=name, reverse=sc.reverse, bounds=bounds or None)
            parts.append(res.table)
        except ModelError as exc:
            parts.append(pd.DataFrame([{"scale": name, "step": "configural", "decision": "not estimated",
                                        "note": exc.message}], columns=INVARIANCE_COLUMNS))
    if not parts:
        return pd.DataFrame(columns=INVARIANCE_COLUMNS)
    return pd.concat(parts, ignore_index=True)
