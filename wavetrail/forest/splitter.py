"""Cut-point search: every candidate cut of one predictor scored in one batched fit.

For a numeric or ordered predictor the node's people are sorted once; the
candidate cuts lie between distinct values and leave at least ``min_size``
people on each side (at most ``max_cuts`` of them, spread evenly over the
admissible positions). The people between two neighbouring cuts form a bin;
bin statistics cumulated over bins give every left child's sufficient
statistics (prefix sums), and the right child is the node total minus the left.
All ``2 m`` children plus the node itself (over the people with the predictor
observed) are fitted in one call of the node model's batched fit, warm-started
at the node estimate. The cut with the largest likelihood ratio
``2 (ll_left + ll_right - ll_node)`` wins.

Pre-screening (``refine``, used by the score-based method): the Lagrange-multiplier
statistic of every admissible cut is already known from the node's whitened
scores (it is the score process of the split test); it approximates the
likelihood ratio of that cut to second order. Only the ``refine`` cuts with the
largest LM statistics are fitted, and the likelihood ratio decides among them.
``refine=None`` fits every admissible cut (at most ``max_cuts``).

Unordered categories: every two-group partition of the observed levels when
there are at most ``max_levels`` of them; beyond that, levels are ordered by
their mean whitened score along its leading direction and only the cuts of
that order are tried (a heuristic; documented in docs/methods/forest.md).

People whose value of the split predictor is missing do not take part in
the search; afterwards they join the child whose fitted model gives them the
higher log-likelihood (when nobody is missing, new people with a missing value
follow the larger child).
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import product

import numpy as np

from wavetrail.forest._encode import UNORDERED


@dataclass
class Split:
    """The chosen cut of one predictor at one node."""

    predictor: int
    kind: str
    cut: float | None
    left_levels: list[int] | None
    missing_left: bool
    lr: float
    left_rows: np.ndarray
    right_rows: np.ndarray
    theta_left: np.ndarray
    theta_right: np.ndarray
    ll_left: float
    ll_right: float
    refit: bool  # children must be refitted (people with a missing value joined them)

    def goes_left(self, z: np.ndarray) -> np.ndarray:
        return route_left(z, self.kind, self.cut, self.left_levels, self.missing_left)


def route_left(z, kind, cut, left_levels, missing_left) -> np.ndarray:
    """Boolean: which values of ``z`` go to the left child."""
    z = np.asarray(z, dtype=float)
    with np.errstate(invalid="ignore"):
        if kind == UNORDERED:
            go = np.isin(z, np.asarray(left_levels, dtype=float))
        else:
            go = z <= cut
    return np.where(np.isnan(z), bool(missing_left), go)


def _spread(positions: np.ndarray, max_cuts: int) -> np.ndarray:
    if len(positions) <= max_cuts:
        return positions
    pick = np.unique(np.round(np.linspace(0, len(positions) - 1, max_cuts)).astype(int))
    return positions[pick]


def _lm_of_left(sw_left_sums: np.ndarray, n_left: np.ndarray, n: int) -> np.ndarray:
    """LM statistic of left-child sums of centred whitened scores."""
    t = n_left / n
    return np.einsum("mk,mk->m", sw_left_sums, sw_left_sums) / (n * t * (1 - t))


def _top(lm: np.ndarray, refine: int) -> np.ndarray:
    """Indices of the ``refine`` largest values, in their original order (ties: earlier first)."""
    order = np.lexsort((np.arange(len(lm)), -lm))
    return np.sort(order[:refine])


def _fit_candidates(model, terms, T_left, T_total, start):
    m = T_left.shape[0]
    T = np.concatenate([T_left, T_total[None] - T_left, T_total[None]], axis=0)
    theta0 = np.repeat(np.asarray(start, dtype=float).reshape(1, -1), T.shape[0], axis=0)
    theta, ll, conv = model.fit(terms.stack(T), start=theta0, search=True)
    gain = 2.0 * (ll[:m] + ll[m:2 * m] - ll[2 * m])
    ok = conv[:m] & conv[m:2 * m] & conv[2 * m] & np.isfinite(gain)
    gain = np.where(ok, gain, -np.inf)
    return theta, ll, gain


def best_cut(model, terms, rows, z, kind, start, *, min_size, max_cuts=32, max_levels=6,
             scores_w=None, refine=None, predictor=-1) -> Split | None:
    """Best cut of predictor values ``z`` (aligned with ``rows``) or ``None`` if none is admissible."""
    rows = np.asarray(rows)
    z = np.asarray(z, dtype=float)
    obs = ~np.isnan(z)
    ro, zo = rows[obs], z[obs]
    n = len(ro)
    if n < 2 * min_size:
        return None
    if kind == UNORDERED:
        found = _unordered(model, terms, ro, zo, start, min_size, max_cuts, max_levels,
                           None if scores_w is None else scores_w[obs], refine)
        if found is None:
            return None
        cut, left_levels, theta_l, theta_r, ll_l, ll_r, lr = found
        go_obs = np.isin(zo, left_levels)
    else:
        order = np.argsort(zo, kind="stable")
        zs, rs = zo[order], ro[order]
        i = np.arange(1, n)
        pos = i[(zs[1:] > zs[:-1]) & (i >= min_size) & (i <= n - min_size)]
        if len(pos) == 0:
            return None
        if refine is not None and scores_w is not None and len(pos) > refine:
            sw = scores_w[obs][order]
            c = np.cumsum(sw - sw.mean(axis=0), axis=0)
            pos = pos[_top(_lm_of_left(c[pos - 1], pos.astype(float), n), refine)]
        else:
            pos = _spread(pos, max_cuts)
        m = len(pos)
        bins = np.searchsorted(pos, np.arange(n), side="right")
        C = terms.cumulative(rs, bins, m + 1)
        theta, ll, gain = _fit_candidates(model, terms, C[:m], C[m], start)
        b = int(np.argmax(gain))
        if not np.isfinite(gain[b]):
            return None
        at = pos[b]
        cut = float(zs[at - 1] / 2.0 + zs[at] / 2.0) if kind == "numeric" else float(zs[at - 1])
        if kind != "numeric":
            cut = float(zs[at - 1])
        left_levels = None
        theta_l, theta_r = theta[b], theta[m + b]
        ll_l, ll_r, lr = float(ll[b]), float(ll[m + b]), float(gain[b])
        go_obs = zo <= cut
    left_obs, right_obs = ro[go_obs], ro[~go_obs]
    miss = rows[~obs]
    if len(miss):
        Ym = terms.Y[miss]
        missing_left = bool(model.loglik(theta_l, Ym).sum() >= model.loglik(theta_r, Ym).sum())
        if missing_left:
            left_rows, right_rows = np.concatenate([left_obs, miss]), right_obs
        else:
            left_rows, right_rows = left_obs, np.concatenate([right_obs, miss])
        left_rows.sort()
        right_rows.sort()
    else:
        missing_left = bool(len(left_obs) >= len(right_obs))
        left_rows, right_rows = np.sort(left_obs), np.sort(right_obs)
    return Split(predictor, kind, None if kind == UNORDERED else cut, left_levels, missing_left, lr,
                 left_rows, right_rows, np.asarray(theta_l), np.asarray(theta_r), ll_l, ll_r,
                 refit=bool(len(miss)))


def _unordered(model, terms, ro, zo, start, min_size, max_cuts, max_levels, sw, refine=None):
    codes = zo.astype(np.int64)
    levels, inv = np.unique(codes, return_inverse=True)
    L = len(levels)
    if L < 2:
        return None
    T = terms.cumulative(ro, inv, L)
    T = np.diff(T, axis=0, prepend=np.zeros((1,) + T.shape[1:]))  # per-level raw terms
    counts = T[:, :, 0].sum(axis=1)
    if L <= max_levels:
        masks = np.array([bits for bits in product([1, 0], repeat=L - 1)][:-1], dtype=float)
        masks = np.hstack([masks, np.zeros((len(masks), 1))])  # last level always right
    else:
        if sw is not None and sw.shape[1] > 0:
            means = np.zeros((L, sw.shape[1]))
            np.add.at(means, inv, sw)
            means /= np.maximum(counts, 1)[:, None]
            w = np.sqrt(counts)[:, None] * means
            _, _, vt = np.linalg.svd(w, full_matrices=False)
            key = means @ vt[0]
        else:
            key = np.arange(L, dtype=float)
        rank = np.argsort(key, kind="stable")
        masks = np.zeros((L - 1, L))
        for j in range(L - 1):
            masks[j, rank[: j + 1]] = 1.0
    n_left = masks @ counts
    total = counts.sum()
    keep = (n_left >= min_size) & (total - n_left >= min_size)
    masks = masks[keep]
    if len(masks) == 0:
        return None
    if refine is not None and sw is not None and len(masks) > refine:
        level_sums = np.zeros((L, sw.shape[1]))
        np.add.at(level_sums, inv, sw - sw.mean(axis=0))
        lm = _lm_of_left(masks @ level_sums, masks @ counts, int(total))
        masks = masks[_top(lm, refine)]
    elif len(masks) > max_cuts:
        masks = masks[_spread(np.arange(len(masks)), max_cuts)]
    T_left = np.einsum("ml,lpt->mpt", masks, T)
    theta, ll, gain = _fit_candidates(model, terms, T_left, T.sum(axis=0), start)
    m = len(masks)
    b = int(np.argmax(gain))
    if not np.isfinite(gain[b]):
        return None
    left_levels = [int(c) for c, on in zip(levels, masks[b]) if on]
    return None, left_levels, theta[b], theta[m + b], float(ll[b]), float(ll[m + b]), float(gain[b])
