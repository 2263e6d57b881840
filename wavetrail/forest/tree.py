"""One SEM tree: its node arrays, routing of people, and the builder loop.

The builder (:func:`build_tree`) fits the node model at the root, then for
each node: casewise scores at the node estimate, an instability test for each
candidate predictor (a random subset of ``mtry`` of them in a forest, all in a
single tree), Bonferroni over the candidates, and, if the smallest adjusted
p-value is below ``alpha``, the likelihood-ratio cut of that predictor
(:mod:`wavetrail.forest.splitter`). With ``split="likelihood_ratio"`` every candidate
predictor's best cut is searched and the largest likelihood ratio wins; its
p-value is ``P(chi2_k > LR)`` times the number of candidates (this ignores the
search over cut points, so it favours predictors with many distinct values;
see docs/methods/forest.md).

Nodes with fewer than ``mc_below`` people replace the asymptotic p-values and
the Bonferroni correction by one Monte Carlo (permutation) min-P test over the
candidates (:func:`wavetrail.forest.tests.monte_carlo_min_p`), drawn from a
generator seeded by the tree's seed and the node's id.

A node stops (becomes a leaf) when it has fewer than ``2 * min_size`` people,
reaches ``max_depth``, its fit did not converge even after the retries of
:func:`wavetrail.forest.models.fit_robust` (the node is then marked ``failed``
and counted), no candidate is significant, or no cut leaves ``min_size`` people
on both sides.

Each tree counts, per predictor, the nodes at which it was a candidate and the
nodes at which it could be tested, with the reason when it could not
(:data:`REASONS`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import chi2

from wavetrail.errors import ModelError
from wavetrail.forest import tests as _tests
from wavetrail.forest._encode import UNORDERED, PredictorInfo
from wavetrail.forest.models import fit_robust, parameter_groups
from wavetrail.forest.splitter import best_cut, route_left

#: why a candidate predictor could not be tested at a node (keys of Tree.counts)
REASONS = ("node size", "too few people in a category", "no variation")
COUNT_KEYS = ("candidate", "tested") + REASONS


@dataclass
class Settings:
    """Resolved growing settings (numbers, never ``None``)."""

    alpha: float = 0.05
    min_size: int = 10
    max_depth: int = 1_000_000
    mtry: int = 1
    split: str = "scores"
    max_cuts: int = 32
    max_levels: int = 6
    refine: int | None = 8
    mc_below: int = 0  # nodes with fewer people get Monte Carlo (permutation) p-values
    permutations: int = 199  # most permutations of a Monte Carlo test


class Tree:
    """A fitted SEM tree.

    Attributes
    ----------
    n_leaves_ : int
    splits_ : DataFrame with columns node, predictor, cut, statistic, p (one row per split).
    nodes_ : DataFrame with one row per node (node, parent, depth, n, leaf, loglik).
    theta_ : (n_nodes, k) node estimates.
    """

    def __init__(self, nodes: list[dict], info: PredictorInfo, index: int = 0, seed: int = 0,
                 counts: dict | None = None):
        self.nodes = nodes
        m = len(info.names)
        self.counts = {key: np.asarray((counts or {}).get(key, np.zeros(m)), dtype=np.int64)
                       for key in COUNT_KEYS}
        self.info = info
        self.index = int(index)
        self.seed = int(seed)
        self.oob_drop: np.ndarray | None = None  # per-predictor mean OOB log-likelihood drop
        self.n_oob = 0
        self._arrays()

    def _arrays(self):
        nd = self.nodes
        self.predictor = np.array([d["predictor"] for d in nd], dtype=np.int64)
        self.left = np.array([d["left"] for d in nd], dtype=np.int64)
        self.right = np.array([d["right"] for d in nd], dtype=np.int64)
        self.theta_ = np.array([d["theta"] for d in nd], dtype=float)
        self.internal = np.flatnonzero(self.predictor >= 0)
        self.leaves = np.flatnonzero(self.predictor < 0)

    @property
    def failed_fits_(self) -> int:
        """Nodes whose model did not converge even after the retries (they became leaves)."""
        return int(sum(1 for d in self.nodes if d.get("failed")))

    @property
    def n_leaves_(self) -> int:
        return int(len(self.leaves))

    def scoring_nodes(self, model) -> np.ndarray:
        """Per node, the node whose model scores the people routed there, shape (n_nodes,).

        A node scores with its own model when the fit converged and the estimate is
        admissible (``model.admissible``); otherwise with its nearest ancestor that
        qualifies (the root when none does). Out-of-bag log-likelihoods (importance and
        the forest's gain over the single growth model) use this map, so a small leaf
        with, say, a correlation of -3 between intercept and slope cannot produce
        log-likelihoods of other people that are off by millions.
        """
        cached = getattr(self, "_scoring", None)
        if cached is not None and cached[0] is model:
            return cached[1]
        ok = np.array([not d.get("failed") and model.admissible(self.theta_[i])
                       for i, d in enumerate(self.nodes)], dtype=bool)
        parent = np.array([d["parent"] for d in self.nodes], dtype=np.int64)
        out = np.arange(len(self.nodes))
        for i in range(len(self.nodes)):
            j = i
            while not ok[j] and parent[j] >= 0:
                j = parent[j]
            out[i] = j
        self._scoring = (model, out)
        return out

    def inadmissible_leaves(self, model) -> int:
        """Leaves that converged but whose estimate is not admissible (scored by an ancestor)."""
        scorer = self.scoring_nodes(model)
        return int(sum(1 for i in self.leaves if scorer[i] != i and not self.nodes[i].get("failed")))

    @property
    def used_predictors(self) -> np.ndarray:
        return np.unique(self.predictor[self.internal])

    @property
    def splits_(self) -> pd.DataFrame:
        rows = []
        for i in self.internal:
            d = self.nodes[i]
            rows.append({"node": int(i), "predictor": self.info.names[d["predictor"]],
                         "cut": self._cut_label(d), "statistic": d["statistic"], "p": d["p"]})
        return pd.DataFrame(rows, columns=["node", "predictor", "cut", "statistic", "p"])

    @property
    def nodes_(self) -> pd.DataFrame:
        return pd.DataFrame([{"node": i, "parent": d["parent"], "depth": d["depth"], "n": d["n"],
                              "leaf": d["predictor"] < 0, "loglik": d["loglik"]}
                             for i, d in enumerate(self.nodes)])

    def _cut_label(self, d):
        j = d["predictor"]
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
            go = route_left(X[idx, d["predictor"]], kinds[d["predictor"]], d["cut"], d["left_levels"],
                            d["missing_left"])
            node[idx] = np.where(go, self.left[nid], self.right[nid])
        return node


def _node(parent, depth, n, theta, loglik, failed=False):
    d = {"parent": int(parent), "depth": int(depth), "n": int(n),
         "theta": [float(v) for v in np.asarray(theta).reshape(-1)], "loglik": float(loglik),
         "predictor": -1, "kind": None, "cut": None, "left_levels": None, "missing_left": None,
         "left": -1, "right": -1, "statistic": None, "p": None, "lr": None}
    if failed:
        d["failed"] = True
    return d


def _count(counts, cand, nt):
    """Add one node's candidates to the per-predictor counts (tested, or why not)."""
    cand = np.asarray(cand)
    counts["candidate"][cand] += 1
    for i, j in enumerate(cand):
        if nt.testable[i]:
            counts["tested"][j] += 1
        else:
            counts[nt.reason[i] or "no variation"][j] += 1


def split_parts(model, S: np.ndarray, left: np.ndarray) -> dict:
    """How much each parameter group contributes to a split, from the node's casewise scores.

    With ``b`` the summed scores of the left child (at the node estimate, where the
    scores of the node sum to zero) and ``J = S'S / n``, the score statistic of
    "only the parameters of group G differ between the children" is
    ``LM_G = b_G' (J_GG)^-1 b_G / (n t (1 - t))`` (``t`` = left share). The shares
    ``LM_G / sum_G LM_G`` are returned: a split of the means of the growth factors,
    of their variances and covariances, or of the residual variances.
    """
    n = S.shape[0]
    t = float(np.mean(left))
    if n == 0 or t <= 0 or t >= 1:
        return {}
    b = S[left].sum(axis=0) - t * S.sum(axis=0)
    J = S.T @ S / n
    groups = parameter_groups(model)
    out = {}
    for g in dict.fromkeys(groups):
        idx = [i for i, name in enumerate(groups) if name == g]
        Jg = J[np.ix_(idx, idx)]
        try:
            lm = float(b[idx] @ np.linalg.lstsq(Jg, b[idx], rcond=1e-10)[0]) / (n * t * (1 - t))
        except np.linalg.LinAlgError:
            lm = float("nan")
        out[g] = max(lm, 0.0) if np.isfinite(lm) else 0.0
    total = sum(out.values())
    return {g: (v / total if total > 0 else 0.0) for g, v in out.items()}


def _select_score(model, terms, X, kinds, rows, theta, cand, st: Settings, counts=None, mc_rng=None):
    S = model.scores(theta, terms.Y[rows])
    Sw = _tests.whiten(S)
    Zc = X[np.ix_(rows, cand)]
    m = len(cand)
    drawn = 0
    use_mc = len(rows) < st.mc_below and mc_rng is not None
    if use_mc:
        nt = _tests.NodeTests(Zc, [kinds[j] for j in cand], min_size=st.min_size)
        if counts is not None:
            _count(counts, cand, nt)
        if Sw.shape[1] == 0 or not nt.testable.any():
            return None
        # small node: one permutation min-P test over the candidates instead of
        # asymptotic p-values with Bonferroni
        best, stat, p_best, drawn = _tests.monte_carlo_min_p(nt, Sw, mc_rng, st.permutations)
        if best < 0 or p_best >= st.alpha:
            return None
    else:
        stat = np.zeros(m)
        p = np.ones(m)
        testable = np.zeros(m, dtype=bool)
        ordered_idx = [i for i, j in enumerate(cand) if kinds[j] != UNORDERED]
        if ordered_idx:
            cols = [cand[i] for i in ordered_idx]
            s, pv, npts = _tests.ordered_tests(Sw, Zc[:, ordered_idx], [kinds[j] for j in cols],
                                               min_size=st.min_size)
            stat[ordered_idx], p[ordered_idx] = s, pv
            testable[ordered_idx] = npts > 0
        # unordered predictors and the untestable ordered ones: testability and its reason
        # (the same rules as the Monte Carlo path)
        check = [i for i in range(m) if kinds[cand[i]] == UNORDERED or not testable[i]]
        if check:
            nt = _tests.NodeTests(Zc[:, check], [kinds[cand[i]] for i in check], min_size=st.min_size)
            for c, i in enumerate(check):
                if kinds[cand[i]] == UNORDERED:
                    testable[i] = nt.testable[c]
        if counts is not None:
            cand_arr = np.asarray(cand)
            counts["candidate"][cand_arr] += 1
            counts["tested"][cand_arr[testable]] += 1
            if check:
                for c, i in enumerate(check):
                    if not testable[i]:
                        counts[nt.reason[c] or "no variation"][cand[i]] += 1
        if Sw.shape[1] == 0 or not testable.any():
            return None
        for i, j in enumerate(cand):
            if kinds[j] == UNORDERED and testable[i]:
                stat[i], p[i], _ = _tests.unordered_test(Sw, Zc[:, i], min_size=st.min_size)
        p_adj = np.minimum(1.0, p * m)
        # smallest adjusted p; ties broken by the larger statistic, then the lower column
        best = min(range(m), key=lambda i: (p_adj[i], -stat[i], cand[i]))
        p_best = float(p_adj[best])
        if p_best >= st.alpha:
            return None
    split = best_cut(model, terms, rows, X[rows, cand[best]], kinds[cand[best]], theta,
                     min_size=st.min_size, max_cuts=st.max_cuts, max_levels=st.max_levels,
                     scores_w=Sw, refine=st.refine, predictor=int(cand[best]))
    if split is None:
        return None
    split.scores = S
    split.permutations = int(drawn)
    return split, float(stat[best]), float(p_best)


def _select_lr(model, terms, X, kinds, rows, theta, cand, st: Settings, counts=None, mc_rng=None):
    if counts is not None:
        _count(counts, cand, _tests.NodeTests(X[np.ix_(rows, cand)], [kinds[j] for j in cand],
                                              min_size=st.min_size))
    best = None
    for j in cand:
        s = best_cut(model, terms, rows, X[rows, j], kinds[j], theta, min_size=st.min_size,
                     max_cuts=st.max_cuts, max_levels=st.max_levels, predictor=int(j))
        if s is not None and (best is None or s.lr > best.lr):
            best = s
    if best is None:
        return None
    p_adj = min(1.0, len(cand) * float(chi2.sf(best.lr, model.k)))
    if p_adj >= st.alpha:
        return None
    return best, float(best.lr), p_adj


def _mc_rng(seed: int, nid: int) -> np.random.Generator:
    """Generator of a node's Monte Carlo test: from the tree's seed and the node id only."""
    return np.random.default_rng([int(seed) & 0xFFFFFFFFFFFFFFFF, int(nid), 0x6D63])


def build_tree(model, terms, X, info: PredictorInfo, rows, rng: np.random.Generator,
               st: Settings, start=None, index: int = 0, seed: int = 0, strict: bool = True) -> Tree:
    """Grow one tree on people ``rows`` (indices into ``terms.Y`` and ``X``).

    With ``strict=False`` (forests) a root model that does not converge even after
    the retries makes the tree a single failed leaf at ``start`` instead of an error,
    and a subsample smaller than twice the minimum node size (no split possible) is a
    single leaf at ``start`` (marked ``unfitted``) without a fit.
    """
    rows = np.sort(np.asarray(rows, dtype=np.int64))
    kinds = info.kinds
    m_all = X.shape[1]
    counts = {key: np.zeros(m_all, dtype=np.int64) for key in COUNT_KEYS}
    if not strict and start is not None and len(rows) < 2 * st.min_size and st.max_depth > 0:
        # no split is possible in this subsample: the tree is its root, and fitting the root
        # would change nothing but cost time; it keeps the whole-sample estimate it was given
        counts["candidate"] += 1
        counts["node size"] += 1
        nodes = [_node(-1, 0, len(rows), np.asarray(start, dtype=float), float("nan"))]
        nodes[0]["unfitted"] = True
        return Tree(nodes, info, index=index, seed=seed, counts=counts)
    stats = terms.group_stats(rows, np.zeros(len(rows), dtype=np.int64), 1)
    theta, ll, conv = fit_robust(model, stats, None if start is None else np.asarray(start)[None, :])
    if not conv[0]:
        if strict or start is None:
            raise ModelError(
                f"the growth model did not converge on the {len(rows)} people of tree {index}, "
                "even after retrying from moment-based starting values with more iterations",
                hint="common causes: a wave with (almost) no variance, very few people observed at some "
                     "waves, a residual or growth-factor variance near zero (try residuals: equal or a "
                     "simpler shape), or time scores that do not match the waves")
        nodes = [_node(-1, 0, len(rows), np.asarray(start, dtype=float), float("nan"), failed=True)]
        return Tree(nodes, info, index=index, seed=seed, counts=counts)
    nodes = [_node(-1, 0, len(rows), theta[0], ll[0])]
    stack = [(0, rows, True)]
    select = _select_lr if st.split == "likelihood_ratio" else _select_score
    while stack:
        nid, nrows, ok = stack.pop()
        d = nodes[nid]
        if not ok or d["depth"] >= st.max_depth:
            continue
        if len(nrows) < 2 * st.min_size:
            if nid == 0:  # the whole subsample is too small: nothing could be tested
                counts["candidate"] += 1
                counts["node size"] += 1
            continue
        if st.mtry < m_all:
            cand = np.sort(rng.choice(m_all, size=st.mtry, replace=False))
        else:
            cand = np.arange(m_all)
        found = select(model, terms, X, kinds, nrows, np.asarray(d["theta"]), list(cand), st,
                       counts=counts, mc_rng=_mc_rng(seed, nid))
        if found is None:
            continue
        sp, stat, p = found
        # polish the children at the full tolerance (the search used a looser one); this
        # also fits the people with a missing split value into the child they joined
        both = np.concatenate([sp.left_rows, sp.right_rows])
        grp = np.r_[np.zeros(len(sp.left_rows), np.int64), np.ones(len(sp.right_rows), np.int64)]
        th, lls, cv = fit_robust(model, terms.group_stats(both, grp, 2),
                                 np.vstack([sp.theta_left, sp.theta_right]))
        # a child that still does not converge keeps its search estimate and becomes a failed leaf
        th_l = th[0] if cv[0] else sp.theta_left
        th_r = th[1] if cv[1] else sp.theta_right
        ll_l = float(lls[0]) if cv[0] else float(sp.ll_left)
        ll_r = float(lls[1]) if cv[1] else float(sp.ll_right)
        conv_l, conv_r = bool(cv[0]), bool(cv[1])
        d.update(predictor=int(sp.predictor), kind=sp.kind, cut=sp.cut, left_levels=sp.left_levels,
                 missing_left=bool(sp.missing_left), statistic=stat, p=p, lr=float(sp.lr))
        S = getattr(sp, "scores", None)
        if S is None:
            S = model.scores(np.asarray(d["theta"]), terms.Y[nrows])
        d["parts"] = split_parts(model, S, np.isin(nrows, sp.left_rows))
        if getattr(sp, "permutations", 0):
            d["permutations"] = int(sp.permutations)
        li = len(nodes)
        nodes.append(_node(nid, d["depth"] + 1, len(sp.left_rows), th_l, ll_l, failed=not conv_l))
        nodes.append(_node(nid, d["depth"] + 1, len(sp.right_rows), th_r, ll_r, failed=not conv_r))
        d["left"], d["right"] = li, li + 1
        # depth first, left child first
        stack.append((li + 1, sp.right_rows, conv_r))
        stack.append((li, sp.left_rows, conv_l))
    return Tree(nodes, info, index=index, seed=seed, counts=counts)
