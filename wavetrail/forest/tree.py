"""One SEM tree: its node arrays, routing of people, and the builder loop.

The builder (:func:`build_tree`) fits the node model at the root, then for
each node: casewise scores at the node estimate, an instability test for each
candidate predictor (a random subset of ``mtry`` of them in a forest, all in a
single tree), Bonferroni over the candidates, and, if the smallest adjusted
p-value is below ``alpha``, the likelihood-ratio cut of that predictor
(:mod:`wavetrail.forest.splitter`). With ``split="likelihood"`` every candidate
predictor's best cut is searched and the largest likelihood ratio wins; its
p-value is ``P(chi2_k > LR)`` times the number of candidates (this ignores the
search over cut points, so it favours predictors with many distinct values;
see docs/methods/forest.md).

A node stops (becomes a leaf) when it has fewer than ``2 * min_size`` people,
reaches ``max_depth``, its fit did not converge, no candidate is significant,
or no cut leaves ``min_size`` people on both sides.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import chi2

from wavetrail.errors import ModelError
from wavetrail.forest import tests as _tests
from wavetrail.forest._encode import UNORDERED, PredictorInfo
from wavetrail.forest.splitter import best_cut, route_left


@dataclass
class Settings:
    """Resolved growing settings (numbers, never ``None``)."""

    alpha: float = 0.05
    min_size: int = 10
    max_depth: int = 1_000_000
    mtry: int = 1
    split: str = "score"
    max_cuts: int = 32
    max_levels: int = 6
    refine: int | None = 8


class Tree:
    """A fitted SEM tree.

    Attributes
    ----------
    n_leaves_ : int
    splits_ : DataFrame with columns node, predictor, cut, statistic, p (one row per split).
    nodes_ : DataFrame with one row per node (node, parent, depth, n, leaf, loglik).
    theta_ : (n_nodes, k) node estimates.
    """

    def __init__(self, nodes: list[dict], info: PredictorInfo, index: int = 0, seed: int = 0):
        self.nodes = nodes
        self.info = info
        self.index = int(index)
        self.seed = int(seed)
        self.oob_drop: np.ndarray | None = None  # per-predictor mean OOB log-likelihood drop
        self.n_oob = 0
        self._arrays()

    def _arrays(self):
        nd = self.nodes
        self.feature = np.array([d["feature"] for d in nd], dtype=np.int64)
        self.left = np.array([d["left"] for d in nd], dtype=np.int64)
        self.right = np.array([d["right"] for d in nd], dtype=np.int64)
        self.theta_ = np.array([d["theta"] for d in nd], dtype=float)
        self.internal = np.flatnonzero(self.feature >= 0)
        self.leaves = np.flatnonzero(self.feature < 0)

    @property
    def n_leaves_(self) -> int:
        return int(len(self.leaves))

    @property
    def used_features(self) -> np.ndarray:
        return np.unique(self.feature[self.internal])

    @property
    def splits_(self) -> pd.DataFrame:
        rows = []
        for i in self.internal:
            d = self.nodes[i]
            rows.append({"node": int(i), "predictor": self.info.names[d["feature"]],
                         "cut": self._cut_label(d), "statistic": d["statistic"], "p": d["p"]})
        return pd.DataFrame(rows, columns=["node", "predictor", "cut", "statistic", "p"])

    @property
    def nodes_(self) -> pd.DataFrame:
        return pd.DataFrame([{"node": i, "parent": d["parent"], "depth": d["depth"], "n": d["n"],
                              "leaf": d["feature"] < 0, "loglik": d["loglik"]}
                             for i, d in enumerate(self.nodes)])

    def _cut_label(self, d):
        j = d["feature"]
        kind = self.info.kinds[j]
        if kind == UNORDERED:
            return "{" + ", ".join(self.info.levels[j][c] for c in d["left_levels"]) + "}"
        if kind == "ordered":
            return f"<= {self.info.levels[j][int(d['cut'])]}"
        return d["cut"]

    def apply(self, X: np.ndarray) -> np.ndarray:
        """Leaf (node id) of each row of the encoded predictor matrix ``X``."""
        node = np.zeros(X.shape[0], dtype=np.int64)
        kinds = self.info.kinds
        for nid in self.internal:
            idx = np.flatnonzero(node == nid)
            if idx.size == 0:
                continue
            d = self.nodes[nid]
            go = route_left(X[idx, d["feature"]], kinds[d["feature"]], d["cut"], d["left_levels"],
                            d["missing_left"])
            node[idx] = np.where(go, self.left[nid], self.right[nid])
        return node


def _node(parent, depth, n, theta, loglik):
    return {"parent": int(parent), "depth": int(depth), "n": int(n),
            "theta": [float(v) for v in np.asarray(theta).reshape(-1)], "loglik": float(loglik),
            "feature": -1, "kind": None, "cut": None, "left_levels": None, "missing_left": None,
            "left": -1, "right": -1, "statistic": None, "p": None, "lr": None}


def _select_score(model, terms, X, kinds, rows, theta, cand, st: Settings):
    S = model.scores(theta, terms.Y[rows])
    Sw = _tests.whiten(S)
    if Sw.shape[1] == 0:
        return None
    m = len(cand)
    stat = np.zeros(m)
    p = np.ones(m)
    ordered_idx = [i for i, j in enumerate(cand) if kinds[j] != UNORDERED]
    if ordered_idx:
        cols = [cand[i] for i in ordered_idx]
        s, pv, _ = _tests.ordered_tests(Sw, X[np.ix_(rows, cols)], [kinds[j] for j in cols],
                                        min_size=st.min_size)
        stat[ordered_idx], p[ordered_idx] = s, pv
    for i, j in enumerate(cand):
        if kinds[j] == UNORDERED:
            stat[i], p[i], _ = _tests.unordered_test(Sw, X[rows, j], min_size=st.min_size)
    p_adj = np.minimum(1.0, p * m)
    # smallest adjusted p; ties broken by the larger statistic, then the lower column
    best = min(range(m), key=lambda i: (p_adj[i], -stat[i], cand[i]))
    if p_adj[best] >= st.alpha:
        return None
    split = best_cut(model, terms, rows, X[rows, cand[best]], kinds[cand[best]], theta,
                     min_size=st.min_size, max_cuts=st.max_cuts, max_levels=st.max_levels,
                     scores_w=Sw, refine=st.refine, feature=int(cand[best]))
    if split is None:
        return None
    return split, float(stat[best]), float(p_adj[best])


def _select_lr(model, terms, X, kinds, rows, theta, cand, st: Settings):
    best = None
    for j in cand:
        s = best_cut(model, terms, rows, X[rows, j], kinds[j], theta, min_size=st.min_size,
                     max_cuts=st.max_cuts, max_levels=st.max_levels, feature=int(j))
        if s is not None and (best is None or s.lr > best.lr):
            best = s
    if best is None:
        return None
    p_adj = min(1.0, len(cand) * float(chi2.sf(best.lr, model.k)))
    if p_adj >= st.alpha:
        return None
    return best, float(best.lr), p_adj


def build_tree(model, terms, X, info: PredictorInfo, rows, rng: np.random.Generator,
               st: Settings, start=None, index: int = 0, seed: int = 0) -> Tree:
    """Grow one tree on people ``rows`` (indices into ``terms.Y`` and ``X``)."""
    rows = np.sort(np.asarray(rows, dtype=np.int64))
    kinds = info.kinds
    m_all = X.shape[1]
    stats = terms.group_stats(rows, np.zeros(len(rows), dtype=np.int64), 1)
    theta, ll, conv = model.fit(stats, start=None if start is None else np.asarray(start)[None, :])
    if not conv[0]:
        raise ModelError(f"the growth model did not converge on the {len(rows)} people of tree {index}",
                         hint="check the outcome for constant waves or very few people")
    nodes = [_node(-1, 0, len(rows), theta[0], ll[0])]
    stack = [(0, rows, True)]
    select = _select_lr if st.split == "likelihood" else _select_score
    while stack:
        nid, nrows, ok = stack.pop()
        d = nodes[nid]
        if not ok or len(nrows) < 2 * st.min_size or d["depth"] >= st.max_depth:
            continue
        if st.mtry < m_all:
            cand = np.sort(rng.choice(m_all, size=st.mtry, replace=False))
        else:
            cand = np.arange(m_all)
        found = select(model, terms, X, kinds, nrows, np.asarray(d["theta"]), list(cand), st)
        if found is None:
            continue
        sp, stat, p = found
        th_l, th_r, ll_l, ll_r = sp.theta_left, sp.theta_right, sp.ll_left, sp.ll_right
        # polish the children at the full tolerance (the search used a looser one); this
        # also fits the people with a missing split value into the child they joined
        both = np.concatenate([sp.left_rows, sp.right_rows])
        grp = np.r_[np.zeros(len(sp.left_rows), np.int64), np.ones(len(sp.right_rows), np.int64)]
        th, lls, cv = model.fit(terms.group_stats(both, grp, 2), start=np.vstack([th_l, th_r]))
        th_l, th_r, ll_l, ll_r = th[0], th[1], float(lls[0]), float(lls[1])
        conv_l, conv_r = bool(cv[0]), bool(cv[1])
        d.update(feature=int(sp.feature), kind=sp.kind, cut=sp.cut, left_levels=sp.left_levels,
                 missing_left=bool(sp.missing_left), statistic=stat, p=p, lr=float(sp.lr))
        li = len(nodes)
        nodes.append(_node(nid, d["depth"] + 1, len(sp.left_rows), th_l, ll_l))
        nodes.append(_node(nid, d["depth"] + 1, len(sp.right_rows), th_r, ll_r))
        d["left"], d["right"] = li, li + 1
        # depth first, left child first
        stack.append((li + 1, sp.right_rows, conv_r))
        stack.append((li, sp.left_rows, conv_l))
    return Tree(nodes, info, index=index, seed=seed)
