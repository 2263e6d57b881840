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
from wavetrail.forest.models import GrowthNodeModel, PanelTerms, model_from_dict
from wavetrail.forest.tree import Settings, Tree, build_tree
from wavetrail.seeds import derive_seed

log = logging.getLogger("wavetrail")

#: minimum node size per free parameter when ``min_size`` is not given
MIN_SIZE_PER_PARAMETER = 10


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
             refine=8) -> Settings:
    if split not in ("score", "likelihood"):
        raise ModelError(f"split must be 'score' or 'likelihood', not {split!r}")
    if not 0 < alpha <= 1:
        raise ModelError(f"alpha must lie in (0, 1], not {alpha!r}")
    ms = MIN_SIZE_PER_PARAMETER * model.k if min_size is None else int(min_size)
    mt = m if mtry is None else int(mtry)
    if not 1 <= mt <= m:
        raise ModelError(f"mtry must lie between 1 and the number of predictors ({m}), not {mtry!r}")
    return Settings(alpha=float(alpha), min_size=max(1, ms),
                    max_depth=1_000_000 if max_depth is None else int(max_depth), mtry=mt,
                    split=split, max_cuts=int(max_cuts), max_levels=int(max_levels),
                    refine=None if refine is None else max(1, int(refine)))


def _default_mtry(m: int) -> int:
    """Predictors tried per node in a forest: a third of them, at least one (common practice)."""
    return max(1, math.ceil(m / 3))


# ---------------------------------------------------------------- single tree

def grow_tree(wide, predictors, time_scores, shape="linear", alpha=0.05, min_size=None, seed=0, *,
              residuals="free", max_depth=None, split="score", max_cuts=32, max_levels=6,
              refine=8, model=None) -> Tree:
    """Grow one SEM tree of the growth model on all people, testing every predictor at each node.

    Parameters
    ----------
    wide : DataFrame, one row per person, one column per wave (NaN = missing wave).
    predictors : DataFrame on the same index (numbers, categories; NaN allowed).
    time_scores : one time score per wave column.
    shape, residuals : growth model (see :func:`wavetrail.growth.growth_spec`).
    alpha : significance level of the Bonferroni-adjusted split test.
    min_size : smallest node; default ``10 * k`` for ``k`` free model parameters.
    seed : used only for ties in random choices (a single tree tests all predictors).
    split : ``"score"`` (score-based tests, default) or ``"likelihood"`` (likelihood-ratio search over all predictors).
    max_cuts : most candidate cuts fitted per predictor without pre-screening (spread evenly).
    max_levels : unordered categories with at most this many levels try every two-group partition.
    refine : score method: fit only the cuts with the ``refine`` largest LM statistics
        (``None``: every admissible cut, at most ``max_cuts``).
    model : a node model object to use instead of the growth model (tests, reductions).

    Returns
    -------
    Tree
    """
    Y, P, _ = _prepare(wide, predictors, time_scores)
    X, info = encode_predictors(P)
    if model is None:
        model = GrowthNodeModel(time_scores, shape, residuals)
    st = _resolve(model, X.shape[1], len(Y), alpha, min_size, max_depth, None, split, max_cuts,
                  max_levels, refine)
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
                      start=s["start"], index=i, seed=seed)
    out = {"index": i, "seed": seed, "nodes": tree.nodes, "n_oob": 0, "oob_drop": None}
    if s["importance"]:
        oob = np.setdiff1d(np.arange(n), inbag)
        out["n_oob"] = int(len(oob))
        out["oob_drop"] = [float(v) for v in oob_drop(tree, s["model"], s["terms"].Y[oob], s["X"][oob], rng)]
    return out


def grow_forest(wide, predictors, time_scores, shape="linear", trees=500, seed=0, n_jobs=1, *,
                residuals="free", alpha=0.05, min_size=None, max_depth=None, mtry=None,
                sample_share=0.632, split="score", max_cuts=32, max_levels=6, refine=8,
                importance=True, tree_indices=None, model=None) -> "Forest":
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

    Returns
    -------
    Forest
    """
    Y, P, index = _prepare(wide, predictors, time_scores)
    X, info = encode_predictors(P)
    if model is None:
        model = GrowthNodeModel(time_scores, shape, residuals)
    if not 0 < sample_share <= 1:
        raise ModelError(f"sample_share must lie in (0, 1], not {sample_share!r}")
    m = X.shape[1]
    st = _resolve(model, m, len(Y), alpha, min_size, max_depth,
                  _default_mtry(m) if mtry is None else mtry, split, max_cuts, max_levels, refine)
    terms = PanelTerms(Y)
    root = terms.group_stats(np.arange(len(Y)), np.zeros(len(Y), dtype=np.int64), 1)
    theta, _, conv = model.fit(root)
    if not conv[0]:
        raise ModelError("the growth model did not converge on the whole sample",
                         hint="fit it in the growth step first and check its warnings")
    idx = list(range(int(trees))) if tree_indices is None else sorted(int(i) for i in tree_indices)
    _SHARED.clear()
    _SHARED.update(model=model, terms=terms, X=X, info=info, settings=st, start=theta[0],
                   seed=int(seed), sample_share=float(sample_share), importance=bool(importance))
    results: list[dict] = []
    step = max(1, len(idx) // 10)
    try:
        if n_jobs is not None and int(n_jobs) > 1 and len(idx) > 1:
            ctx = mp.get_context("fork")
            with ProcessPoolExecutor(max_workers=int(n_jobs), mp_context=ctx) as pool:
                for r in pool.map(_grow_one, idx, chunksize=max(1, len(idx) // (8 * int(n_jobs)))):
                    results.append(r)
                    if len(results) % step == 0:
                        log.info("forest: %d of %d trees grown", len(results), len(idx))
        else:
            for i in idx:
                results.append(_grow_one(i))
                if len(results) % step == 0:
                    log.info("forest: %d of %d trees grown", len(results), len(idx))
    finally:
        _SHARED.clear()
    settings = asdict(st)
    settings.update(sample_share=float(sample_share), seed=int(seed), trees=int(trees))
    forest = Forest(model.to_dict(), info, settings, [_tree_from_dict(r, info) for r in results],
                    model=model)
    forest.attach_background(X, encoded=True)
    return forest


def _tree_from_dict(d: dict, info: PredictorInfo) -> Tree:
    tree = Tree(d["nodes"], info, index=d["index"], seed=d["seed"])
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
        """Permutation importance: DataFrame predictor, importance, se, rank (by importance)."""
        drops = [t.oob_drop for t in self.trees_ if t.oob_drop is not None]
        if not drops:
            raise ModelError("the forest was grown without importance", hint="grow it with importance=True")
        return importance_table(self.info_.names, np.vstack(drops))

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
        """Expected trajectory at each value: DataFrame value, time, expected."""
        j = self.info_.index(predictor)
        if values is None:
            values = self.default_values(predictor, background)
        codes, labels = self._codes(j, values)
        E = partial_dependence(self.trees_, self.model_, self._background(background), [(j, codes)])
        times = self.times_
        rows = [{"value": labels[v], "time": float(times[w]), "expected": float(E[v, w])}
                for v in range(len(labels)) for w in range(len(times))]
        return pd.DataFrame(rows, columns=["value", "time", "expected"])

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
            "format": serial.FORMAT,
            "model": self.model_desc,
            "predictors": self.info_.to_dict(),
            "settings": self.settings_,
            "trees": [{"index": t.index, "seed": t.seed, "n_oob": t.n_oob,
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
