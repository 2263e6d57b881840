"""SEM forests over the growth model: growing (optionally in parallel), merging, querying.

Each tree ``i`` gets its own seed ``derive_seed(seed, "forest", i)``; from it, in
this order: the subsample of ``sample_share`` of the people drawn without
replacement, the random predictor subset of every node (``mtry``), and the
permutations of the out-of-bag importance. Nothing depends on which worker
grows a tree or in which order, so ``n_jobs`` and sharding do not change any
result, and ``Forest.merge`` of shards equals the forest grown in one go.

References
----------
.. [1] Brandmaier, A. M., Prindle, J. J., McArdle, J. J., & Lindenberger, U.
   (2016). Theory-guided exploration with structural equation model forests.
   Psychological Methods, 21(4), 566-582.
.. [2] Strobl, C., Boulesteix, A.-L., Zeileis, A., & Hothorn, T. (2007). Bias in
   random forest variable importance measures. BMC Bioinformatics, 8, 25.
"""

from __future__ import annotations

import logging
import math
import multiprocessing as mp
from concurrent.futures import ProcessPoolExecutor
from dataclasses import asdict

import numpy as np
import pandas as pd

from wavetrail.errors import DataError, ModelError
from wavetrail.forest import serial
from wavetrail.forest._encode import PredictorInfo, encode_like, encode_predictors
from wavetrail.forest.dependence import background_rows, partial_dependence
from wavetrail.forest.importance import importance_table, oob_drop
from wavetrail.forest.interactions import h_statistic
from wavetrail.forest.models import GrowthNodeModel, PanelTerms, fit_robust, model_from_dict
from wavetrail.forest.tree import Settings, Tree, build_tree
from wavetrail.seeds import derive_seed

#: the two ways a node chooses its split (the ``forest.split`` setting, ``split=`` here, ``settings.split`` in forest.json)
SPLIT_TESTS = ("scores", "likelihood_ratio")

log = logging.getLogger("wavetrail")

#: nodes below ``MC_PER_PARAMETER * k`` people get Monte Carlo p-values by default
MC_PER_PARAMETER = 10


def default_min_size(model) -> int:
    """Smallest node the node model needs: ``max(k, 2 (p + 1))``.

    A child must identify the model's ``k`` free parameters (at least one person
    per parameter) and give a nonsingular covariance of the ``p`` waves with some
    room (``n > p``, doubled). Linear growth over 5 waves (k = 10): 12 people;
    quadratic (k = 14): 14. Split tests at such small nodes are calibrated by
    Monte Carlo p-values (see ``mc_below``).
    """
    return int(max(model.k, 2 * (model.p + 1)))


def default_mc_below(model) -> int:
    """Node size below which split tests use permutation p-values: ``10 k``."""
    return int(MC_PER_PARAMETER * model.k)


#: the parts of the growth model whose differences :meth:`Forest.differences` reports
PARTS = ("means", "growth (co)variances", "residual variances")


# ---------------------------------------------------------------- input checks

def _prepare(wide, predictors, time_scores):
    if not isinstance(wide, pd.DataFrame):
        raise DataError("the outcome must be a wide DataFrame (one row per person, one column per wave)")
    if not isinstance(predictors, pd.DataFrame):
        raise DataError("predictors must be a DataFrame on the same index as the outcome")
    if len(time_scores) != wide.shape[1]:
        raise DataError(f"{len(time_scores)} time scores for {wide.shape[1]} wave columns",
                        hint="give one time score per wave column")
    if not predictors.index.equals(wide.index):
        if set(predictors.index) != set(wide.index):
            extra = [str(i) for i in wide.index.difference(predictors.index)[:5]]
            raise DataError(f"predictors and outcome are not on the same people (e.g. ids {extra})",
                            hint="give one predictor row per person of the outcome table")
        predictors = predictors.loc[wide.index]
    Y = wide.to_numpy(dtype=float, na_value=np.nan)
    seen = ~np.isnan(Y).all(axis=1)
    if not seen.any():
        raise DataError("the outcome has no observed value")
    return Y[seen], predictors.loc[seen], wide.index[seen]


def _resolve(model, m, n, alpha, min_size, max_depth, mtry, split, max_cuts, max_levels,
             refine=8, mc_below=None, permutations=199) -> Settings:
    if split in serial.OLD_SPLIT_NAMES:
        import warnings

        new = serial.OLD_SPLIT_NAMES[split]
        warnings.warn(f"split={split!r} is renamed split={new!r}; the old value is accepted this version only",
                      DeprecationWarning, stacklevel=3)
        split = new
    if split not in SPLIT_TESTS:
        raise ModelError(f"split must be 'scores' or 'likelihood_ratio', not {split!r}")
    if not 0 < alpha <= 1:
        raise ModelError(f"alpha must lie in (0, 1], not {alpha!r}")
    ms = default_min_size(model) if min_size is None else int(min_size)
    mc = default_mc_below(model) if mc_below is None else int(mc_below)
    if int(permutations) < 19:
        raise ModelError(f"permutations must be at least 19, not {permutations!r}")
    mt = m if mtry is None else int(mtry)
    if not 1 <= mt <= m:
        raise ModelError(f"mtry must lie between 1 and the number of predictors ({m}), not {mtry!r}")
    return Settings(alpha=float(alpha), min_size=max(1, ms),
                    max_depth=1_000_000 if max_depth is None else int(max_depth), mtry=mt,
                    split=split, max_cuts=int(max_cuts), max_levels=int(max_levels),
                    refine=None if refine is None else max(1, int(refine)), mc_below=mc,
                    permutations=int(permutations))


def _default_mtry(m: int) -> int:
    """Predictors tried per node in a forest: a third of them, at least one (common practice)."""
    return max(1, math.ceil(m / 3))


# ---------------------------------------------------------------- single tree

def grow_tree(wide, predictors, time_scores, shape="linear", alpha=0.05, min_size=None, seed=0, *,
              residuals="free", max_depth=3, split="scores", max_cuts=32, max_levels=6,
              refine=8, model=None, mc_below=None, permutations=199) -> Tree:
    """Grow one SEM tree of the growth model on all people, testing every predictor at each node.

    Parameters
    ----------
    wide : DataFrame, one row per person, one column per wave (NaN = missing wave).
    predictors : DataFrame on the same index (numbers, categories; NaN allowed).
    time_scores : one time score per wave column.
    shape, residuals : growth model (see :func:`wavetrail.growth.growth_spec`).
    alpha : significance level of the Bonferroni-adjusted split test.
    max_depth : deepest level a tree may reach (the root is level 0); default 3, as the ``forest.max_depth``
        setting; ``None`` for no limit.
    min_size : smallest node; default :func:`default_min_size` (``max(k, 2 (p + 1))`` for
        ``k`` free model parameters and ``p`` waves).
    seed : seeds the Monte Carlo tests (a single tree tests all predictors).
    split : ``"scores"`` (score-based tests, default) or ``"likelihood_ratio"`` (likelihood-ratio search over all
        predictors); the same names as the ``forest.split`` setting and ``settings.split`` in forest.json.
    max_cuts : most candidate cuts fitted per predictor without pre-screening (spread evenly).
    max_levels : unordered categories with at most this many levels try every two-group partition.
    refine : score method: fit only the cuts with the ``refine`` largest LM statistics
        (``None``: every admissible cut, at most ``max_cuts``).
    model : a node model object to use instead of the growth model (tests, reductions).
    mc_below : nodes with fewer people get a permutation (Monte Carlo) min-P test over the
        candidates instead of asymptotic p-values with Bonferroni; default ``10 k``; 0 = never.
    permutations : most permutations of one Monte Carlo test (it stops early once the
        p-value is clearly above alpha).

    Returns
    -------
    Tree
    """
    Y, P, _ = _prepare(wide, predictors, time_scores)
    X, info = encode_predictors(P)
    if model is None:
        model = GrowthNodeModel(time_scores, shape, residuals)
    st = _resolve(model, X.shape[1], len(Y), alpha, min_size, max_depth, None, split, max_cuts,
                  max_levels, refine, mc_below, permutations)
    terms = PanelTerms(Y)
    return build_tree(model, terms, X, info, np.arange(len(Y)), np.random.default_rng(seed), st,
                      index=0, seed=seed)


# ---------------------------------------------------------------- forest growing

_SHARED: dict = {}


def _grow_one(i: int) -> dict:
    s = _SHARED
    seed = derive_seed(s["seed"], "forest", i)
    rng = np.random.default_rng(seed)
    n = s["terms"].Y.shape[0]
    size = min(n, max(2, int(round(s["sample_share"] * n))))
    inbag = np.sort(rng.choice(n, size=size, replace=False))
    tree = build_tree(s["model"], s["terms"], s["X"], s["info"], inbag, rng, s["settings"],
                      start=s["start"], index=i, seed=seed, strict=False)
    out = {"index": i, "seed": seed, "nodes": tree.nodes, "n_oob": 0, "oob_drop": None,
           "counts": {k: [int(v) for v in c] for k, c in tree.counts.items()}}
    if s["importance"]:
        oob = np.setdiff1d(np.arange(n), inbag)
        out["n_oob"] = int(len(oob))
        out["oob_drop"] = [float(v) for v in oob_drop(tree, s["model"], s["terms"].Y[oob], s["X"][oob], rng)]
    return out


def grow_forest(wide, predictors, time_scores, shape="linear", trees=500, seed=0, n_jobs=1, *,
                residuals="free", alpha=0.05, min_size=None, max_depth=3, mtry=None,
                sample_share=0.632, split="scores", max_cuts=32, max_levels=6, refine=8,
                importance=True, tree_indices=None, model=None, mc_below=None, permutations=199,
                progress=None) -> "Forest":
    """Grow a forest of SEM trees of the growth model.

    Parameters
    ----------
    wide, predictors, time_scores, shape, residuals, alpha, min_size, max_depth, split :
        as in :func:`grow_tree`.
    trees : number of trees (indices ``0 .. trees - 1``).
    seed : master seed; tree ``i`` uses ``derive_seed(seed, "forest", i)``.
    n_jobs : worker processes (results do not depend on it).
    mtry : predictors tried per node; default a third of them, rounded up.
    sample_share : share of people in each tree's subsample (drawn without replacement).
    importance : compute out-of-bag permutation importance while growing.
    tree_indices : grow only these tree indices (a shard); default all.
    model : node model object replacing the growth model (tests).
    mc_below, permutations : as in :func:`grow_tree`.
    progress : optional callable ``progress(done, total)`` called as trees finish (for a
        console display; it does not influence any result).

    Returns
    -------
    Forest

    Notes
    -----
    A node model that does not converge, even after the retries of
    :func:`wavetrail.forest.models.fit_robust`, becomes a leaf marked ``failed``;
    :meth:`Forest.fit_failures` counts them per tree. Only the model of the whole
    sample must converge.
    """
    Y, P, index = _prepare(wide, predictors, time_scores)
    X, info = encode_predictors(P)
    if model is None:
        model = GrowthNodeModel(time_scores, shape, residuals)
    if not 0 < sample_share <= 1:
        raise ModelError(f"sample_share must lie in (0, 1], not {sample_share!r}")
    m = X.shape[1]
    st = _resolve(model, m, len(Y), alpha, min_size, max_depth,
                  _default_mtry(m) if mtry is None else mtry, split, max_cuts, max_levels, refine,
                  mc_below, permutations)
    terms = PanelTerms(Y)
    root = terms.group_stats(np.arange(len(Y)), np.zeros(len(Y), dtype=np.int64), 1)
    theta, _, conv = fit_robust(model, root)
    if not conv[0]:
        raise ModelError(
            f"the growth model did not converge on the whole sample of {len(Y)} people, even after "
            "retrying from moment-based starting values with more iterations",
            hint="common causes: a wave with (almost) no variance, very few people observed at some waves, "
                 "a residual or growth-factor variance near zero (try residuals: equal or a simpler shape), "
                 "or time scores that do not match the waves; the growth step's fit table shows which")
    idx = list(range(int(trees))) if tree_indices is None else sorted(int(i) for i in tree_indices)
    _SHARED.clear()
    _SHARED.update(model=model, terms=terms, X=X, info=info, settings=st, start=theta[0],
                   seed=int(seed), sample_share=float(sample_share), importance=bool(importance))
    results: list[dict] = []
    step = max(1, len(idx) // 20)

    def _done():
        if len(results) % step == 0 or len(results) == len(idx):
            log.info("forest: %d of %d trees grown", len(results), len(idx))
            if progress is not None:
                progress(len(results), len(idx))

    try:
        if n_jobs is not None and int(n_jobs) > 1 and len(idx) > 1:
            ctx = mp.get_context("fork")
            with ProcessPoolExecutor(max_workers=int(n_jobs), mp_context=ctx) as pool:
                for r in pool.map(_grow_one, idx, chunksize=max(1, len(idx) // (8 * int(n_jobs)))):
                    results.append(r)
                    _done()
        else:
            for i in idx:
                results.append(_grow_one(i))
                _done()
    finally:
        _SHARED.clear()
    settings = asdict(st)
    settings.update(sample_share=float(sample_share), seed=int(seed), trees=int(trees))
    forest = Forest(model.to_dict(), info, settings, [_tree_from_dict(r, info) for r in results],
                    model=model)
    forest.attach_background(X, encoded=True)
    return forest


def _tree_from_dict(d: dict, info: PredictorInfo) -> Tree:
    tree = Tree(d["nodes"], info, index=d["index"], seed=d["seed"], counts=d.get("counts"))
    tree.n_oob = int(d.get("n_oob") or 0)
    tree.oob_drop = None if d.get("oob_drop") is None else np.asarray(d["oob_drop"], dtype=float)
    return tree


# ---------------------------------------------------------------- the forest object

class Forest:
    """A grown (or loaded) forest of SEM trees.

    Attributes
    ----------
    trees_ : list of Tree, sorted by tree index.
    seeds_ : list of the per-tree seeds.
    info_ : PredictorInfo (names, kinds, levels).
    settings_ : dict of the growing settings.
    """

    def __init__(self, model_desc: dict, info: PredictorInfo, settings: dict, trees: list[Tree], model=None):
        self.model_desc = dict(model_desc)
        self.info_ = info
        self.settings_ = dict(settings)
        self.trees_ = sorted(trees, key=lambda t: t.index)
        self._model = model
        self._X_bg = None

    # -- basics
    @property
    def seeds_(self) -> list[int]:
        return [t.seed for t in self.trees_]

    @property
    def model_(self):
        if self._model is None:
            self._model = model_from_dict(self.model_desc)
        return self._model

    @property
    def times_(self) -> list[float]:
        return list(self.model_desc.get("time_scores") or self.model_desc.get("times"))

    def attach_background(self, predictors, encoded: bool = False) -> "Forest":
        """Set the people over whom expected trajectories average (a predictor DataFrame)."""
        X = predictors if encoded else encode_like(self.info_, predictors)
        self._X_bg = np.asarray(X, dtype=float)[background_rows(len(X))]
        return self

    def _background(self, background):
        if background is not None:
            return encode_like(self.info_, background)[background_rows(len(background))]
        if self._X_bg is None:
            raise ModelError("this forest has no background people for expected trajectories",
                             hint="pass background=<predictor DataFrame> or call attach_background")
        return self._X_bg

    # -- importance
    def importance(self) -> pd.DataFrame:
        """Permutation importance: DataFrame predictor, importance, se, rank, tested, candidate, untested.

        ``importance`` and ``rank`` are missing (NaN) for a predictor that was never
        tested at any node (see :meth:`testing`): "could not be tested" is not
        "no association". ``untested`` names the reasons it could not be tested.
        """
        drops = [t.oob_drop for t in self.trees_ if t.oob_drop is not None]
        if not drops:
            raise ModelError("the forest was grown without importance", hint="grow it with importance=True")
        return importance_table(self.info_.names, np.vstack(drops), self.testing())

    def testing(self) -> pd.DataFrame:
        """Per predictor: nodes where it was a candidate, where it was tested, and why not.

        Columns predictor, candidate, tested, node_size, small_category, no_variation
        (counts of nodes summed over trees; a candidate node is one where the predictor
        was drawn for the split test or where the whole subsample was too small to test).
        """
        from wavetrail.forest.tree import COUNT_KEYS

        tot = {k: np.zeros(len(self.info_.names), dtype=np.int64) for k in COUNT_KEYS}
        for t in self.trees_:
            for k in COUNT_KEYS:
                tot[k] += t.counts[k]
        return pd.DataFrame({"predictor": self.info_.names, "candidate": tot["candidate"],
                             "tested": tot["tested"], "node_size": tot["node size"],
                             "small_category": tot["too few people in a category"],
                             "no_variation": tot["no variation"]})

    def fit_failures(self) -> pd.DataFrame:
        """Per tree: people, leaves, node fits that did not converge (they became leaves), and
        converged leaves with an inadmissible estimate (scored by their nearest admissible
        ancestor out of bag)."""
        model = self.model_
        return pd.DataFrame({"tree": [t.index for t in self.trees_],
                             "people": [int(t.nodes[0]["n"]) for t in self.trees_],
                             "leaves": [t.n_leaves_ for t in self.trees_],
                             "failed_fits": [t.failed_fits_ for t in self.trees_],
                             "inadmissible_leaves": [t.inadmissible_leaves(model) for t in self.trees_]},
                            columns=["tree", "people", "leaves", "failed_fits", "inadmissible_leaves"])

    def splits_possible(self) -> bool:
        """Whether any tree split at all."""
        return any(t.n_leaves_ > 1 for t in self.trees_)

    # -- generalisation
    def _inbag(self, tree: Tree, n: int) -> np.ndarray:
        """The tree's subsample, redrawn from its seed exactly as when it was grown."""
        rng = np.random.default_rng(tree.seed)
        size = min(n, max(2, int(round(float(self.settings_.get("sample_share", 0.632)) * n))))
        return np.sort(rng.choice(n, size=size, replace=False))

    def oob_gain(self, wide: pd.DataFrame, predictors: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Out-of-bag log-likelihood of the forest against the single growth model.

        ``wide`` and ``predictors`` must be the people the forest was grown on, in the
        same order. For person ``i`` and the trees ``b`` that did not draw them, the
        forest predicts the density ``mean_b f(y_i | leaf_b(x_i))`` and the single
        growth model ``mean_b f(y_i | root_b)`` (each tree's root model, fitted to the
        same subsample). A leaf whose model did not converge or is inadmissible scores
        under its nearest admissible ancestor (:meth:`Tree.scoring_nodes`). The gain of person ``i`` is the difference of the two log
        densities; the total is their sum over people with at least one such tree and
        its standard error ``sqrt(n) * SD`` of the per-person gains.

        Returns ``(summary, per_person)``: summary columns people, trees, loglik_forest,
        loglik_single, gain, se, gain_per_person, se_per_person; per_person columns
        id, n_trees, loglik_forest, loglik_single, gain.
        """
        from scipy.special import logsumexp

        Y, P, index = _prepare(wide, predictors, self.times_)
        X = encode_like(self.info_, P)
        n = len(Y)
        model = self.model_
        lf = [[] for _ in range(n)]
        ls = [[] for _ in range(n)]
        for t in self.trees_:
            oob = np.setdiff1d(np.arange(n), self._inbag(t, n))
            if oob.size == 0:
                continue
            leaf = t.apply(X[oob])
            scorer = t.scoring_nodes(model)
            root = model.loglik(t.theta_[0], Y[oob])
            leaf_ll = np.empty(oob.size)
            for node in np.unique(leaf):
                sel = leaf == node
                leaf_ll[sel] = model.loglik(t.theta_[scorer[node]], Y[oob[sel]])
            for i, a, b in zip(oob, leaf_ll, root):
                lf[i].append(a)
                ls[i].append(b)
        rows = []
        for i in range(n):
            if not lf[i]:
                continue
            a = float(logsumexp(lf[i]) - np.log(len(lf[i])))
            b = float(logsumexp(ls[i]) - np.log(len(ls[i])))
            rows.append({"id": index[i], "n_trees": len(lf[i]), "loglik_forest": a, "loglik_single": b,
                         "gain": a - b})
        per = pd.DataFrame(rows, columns=["id", "n_trees", "loglik_forest", "loglik_single", "gain"])
        m = len(per)
        g = per["gain"].to_numpy(dtype=float)
        sd = float(np.std(g, ddof=1)) if m > 1 else float("nan")
        summary = pd.DataFrame([{
            "people": m, "trees": len(self.trees_),
            "loglik_forest": float(per["loglik_forest"].sum()), "loglik_single": float(per["loglik_single"].sum()),
            "gain": float(g.sum()), "se": sd * np.sqrt(m) if m > 1 else float("nan"),
            "gain_per_person": float(g.mean()) if m else float("nan"),
            "se_per_person": sd / np.sqrt(m) if m > 1 else float("nan")}])
        return summary, per

    # -- what differs
    def differences(self, predictors=None) -> pd.DataFrame:
        """Which parts of the growth model differ between the groups a predictor's splits form.

        For every split on the predictor, the shares of its score statistic carried by
        the growth-factor means, the growth-factor (co)variances and the residual
        variances (see :func:`wavetrail.forest.tree.split_parts`), weighted by the
        split's likelihood ratio and averaged. Columns predictor, part, share, splits.
        """
        names = list(self.info_.names) if predictors is None else list(predictors)
        rows = []
        for name in names:
            j = self.info_.index(name)
            acc: dict[str, float] = {}
            weight, count = 0.0, 0
            for t in self.trees_:
                for nid in t.internal:
                    d = t.nodes[nid]
                    if d["predictor"] != j or not d.get("parts"):
                        continue
                    w = max(float(d.get("lr") or 0.0), 0.0)
                    count += 1
                    weight += w
                    for part, share in d["parts"].items():
                        acc[part] = acc.get(part, 0.0) + w * float(share)
            for part in PARTS:
                rows.append({"predictor": name, "part": part,
                             "share": acc.get(part, 0.0) / weight if weight > 0 else float("nan"),
                             "splits": count})
        return pd.DataFrame(rows, columns=["predictor", "part", "share", "splits"])

    # -- prediction
    def predict(self, predictors: pd.DataFrame) -> pd.DataFrame:
        """Expected trajectory of new people: one row per person, one column per time score."""
        X = encode_like(self.info_, predictors)
        model = self.model_
        from wavetrail.forest.dependence import tree_expected

        out = np.zeros((X.shape[0], model.p))
        for t in self.trees_:
            out += tree_expected(t, model)[t.apply(X)]
        out /= max(len(self.trees_), 1)
        return pd.DataFrame(out, index=predictors.index, columns=[float(t) for t in self.times_])

    # -- expected trajectories
    def _codes(self, j: int, values) -> tuple[np.ndarray, list]:
        kind, levels = self.info_.kinds[j], self.info_.levels[j]
        if levels is None:
            vals = [float(v) for v in values]
            return np.asarray(vals), vals
        labels = [str(v) for v in values]
        bad = [v for v in labels if v not in levels]
        if bad:
            raise DataError(f"{bad[0]!r} is not a level of predictor {self.info_.names[j]!r}",
                            hint=f"levels: {', '.join(levels)}")
        return np.asarray([levels.index(v) for v in labels], dtype=float), labels

    def default_values(self, predictor: str, background=None) -> list:
        """Grid used when no values are given: levels, or 9 quantiles from 5 % to 95 %."""
        j = self.info_.index(predictor)
        if self.info_.levels[j] is not None:
            return list(self.info_.levels[j])
        col = self._background(background)[:, j]
        col = col[~np.isnan(col)]
        if col.size == 0:
            return []
        return sorted({float(v) for v in np.quantile(col, np.linspace(0.05, 0.95, 9))})

    def dependence(self, predictor: str, values=None, background=None) -> pd.DataFrame:
        """Expected trajectory at each value: DataFrame value, time, expected, sd.

        ``sd`` is the spread (standard deviation) of individual trajectories around the
        expected one at that wave (see :mod:`wavetrail.forest.dependence`).
        """
        j = self.info_.index(predictor)
        if values is None:
            values = self.default_values(predictor, background)
        codes, labels = self._codes(j, values)
        E, SD = partial_dependence(self.trees_, self.model_, self._background(background), [(j, codes)],
                                   spread=True)
        times = self.times_
        rows = [{"value": labels[v], "time": float(times[w]), "expected": float(E[v, w]),
                 "sd": float(SD[v, w])}
                for v in range(len(labels)) for w in range(len(times))]
        return pd.DataFrame(rows, columns=["value", "time", "expected", "sd"])

    def dependence2(self, predictor_a: str, predictor_b: str, values_a=None, values_b=None,
                    background=None) -> pd.DataFrame:
        """Two-way expected-trajectory table: DataFrame value_a, value_b, time, expected."""
        a, b = self.info_.index(predictor_a), self.info_.index(predictor_b)
        va = self.default_values(predictor_a, background) if values_a is None else values_a
        vb = self.default_values(predictor_b, background) if values_b is None else values_b
        ca, la = self._codes(a, va)
        cb, lb = self._codes(b, vb)
        grid_a = np.repeat(ca, len(cb))
        grid_b = np.tile(cb, len(ca))
        E = partial_dependence(self.trees_, self.model_, self._background(background),
                               [(a, grid_a), (b, grid_b)])
        times = self.times_
        rows = []
        for g in range(len(grid_a)):
            for w in range(len(times)):
                rows.append({"value_a": la[g // len(cb)], "value_b": lb[g % len(cb)],
                             "time": float(times[w]), "expected": float(E[g, w])})
        return pd.DataFrame(rows, columns=["value_a", "value_b", "time", "expected"])

    # -- interactions
    def interactions(self, pairs=None, top=10, background=None, n_eval=40) -> pd.DataFrame:
        """Friedman-Popescu H of predictor pairs: DataFrame predictor_a, predictor_b, h.

        Without ``pairs``, every pair among the ``top`` most important predictors.
        """
        if pairs is None:
            names = list(self.importance()["predictor"][: int(top)])
            pairs = [(names[i], names[k]) for i in range(len(names)) for k in range(i + 1, len(names))]
        X_bg = self._background(background)
        X_bg_h = X_bg[background_rows(len(X_bg), 100)]
        X_eval = X_bg[background_rows(len(X_bg), int(n_eval))]
        rows = []
        for pa, pb in pairs:
            a, b = self.info_.index(pa), self.info_.index(pb)
            rows.append({"predictor_a": pa, "predictor_b": pb,
                         "h": h_statistic(self.trees_, self.model_, X_bg_h, X_eval, a, b)})
        df = pd.DataFrame(rows, columns=["predictor_a", "predictor_b", "h"])
        if len(df):
            df = df.sort_values(["h", "predictor_a", "predictor_b"], ascending=[False, True, True],
                                na_position="last", kind="mergesort").reset_index(drop=True)
        return df

    # -- JSON and merging
    def to_dict(self) -> dict:
        return {
            "schema": serial.FORMAT,
            "model": self.model_desc,
            "predictors": self.info_.to_dict(),
            "settings": self.settings_,
            "trees": [{"index": t.index, "seed": t.seed, "n_oob": t.n_oob,
                       "counts": {k: [int(v) for v in c] for k, c in t.counts.items()},
                       "oob_drop": None if t.oob_drop is None else [float(v) for v in t.oob_drop],
                       "nodes": t.nodes} for t in self.trees_],
        }

    def to_json(self) -> str:
        """The forest as JSON text (see :mod:`wavetrail.forest.serial`)."""
        return serial.dumps(self.to_dict())

    @classmethod
    def from_json(cls, text: str, source: str = "forest.json") -> "Forest":
        """Read a forest written by :meth:`to_json` (exact round trip; no code is run)."""
        d = serial.loads(text, source)
        info = PredictorInfo.from_dict(d["predictors"])
        return cls(d["model"], info, d["settings"], [_tree_from_dict(t, info) for t in d["trees"]])

    @classmethod
    def merge(cls, forests: list["Forest"]) -> "Forest":
        """One forest from shards grown with the same data, model and settings."""
        if not forests:
            raise ModelError("nothing to merge: no forest shards were given")
        first = forests[0]
        for f in forests[1:]:
            if f.model_desc != first.model_desc or f.info_.to_dict() != first.info_.to_dict():
                raise ModelError("forest shards differ in their model or predictors",
                                 hint="grow all shards from the same config and data")
            if f.settings_ != first.settings_:
                raise ModelError("forest shards were grown with different settings",
                                 hint="grow all shards from the same config")
        trees = [t for f in forests for t in f.trees_]
        seen = [t.index for t in trees]
        if len(set(seen)) != len(seen):
            raise ModelError("forest shards overlap: a tree index occurs twice",
                             hint="each shard must grow a distinct set of trees")
        out = cls(first.model_desc, first.info_, first.settings_, trees, model=first._model)
        out._X_bg = first._X_bg
        return out

    def __repr__(self) -> str:
        return f"Forest(trees={len(self.trees_)}, predictors={len(self.info_.names)})"
