"""Node models: what a tree fits in each node, seen through one small interface.

A node model knows its number of free parameters ``k`` and the number of
observed variables ``p`` and offers six operations, all vectorised:

* ``fit(stats, start, search=False)`` — maximum likelihood for ``B`` stacked groups
  from their sufficient statistics (``stats``: a :class:`GroupStats`; ``search``:
  candidate children, which may use a looser tolerance), returning
  ``(theta (B, k), loglik (B,), converged (B,))``;
* ``scores(theta, Y)`` and ``loglik(theta, Y)`` — casewise gradients (n, k) and
  log-likelihoods (n,) of people ``Y`` (NaN = missing wave) at one ``theta``;
* ``expected(theta)`` — the model-implied mean of each observed variable;
* ``admissible(theta)`` — whether the estimate gives a proper density (no negative
  variance, positive definite implied covariance), so it may score other people;
* ``to_dict()`` / :func:`model_from_dict` — its description for the JSON file.

:class:`GrowthNodeModel` is the growth model of :mod:`wavetrail.growth` fitted by
the SEM engine (:mod:`wavetrail.sem`); this module only adapts shapes.
:class:`NormalNodeModel` (independent normal variables, closed-form fits) is a
small reference model for tests and for the regression-tree reduction.

Sufficient statistics per missingness pattern (:class:`PanelTerms`): person
``i`` with pattern ``P`` contributes ``1``, ``y_i`` and ``y_i y_i'`` (missing
entries zero) to the pattern's count, sums and cross-products; a group's
statistics are sums of its people's terms, so the statistics of every
candidate child come from prefix sums over the sorted predictor.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import sparse

from wavetrail.errors import ModelError


#: convergence threshold (scoring decrement) of node fits and of candidate-cut fits
FIT_TOL = 1e-9
SEARCH_TOL = 1e-6


@dataclass
class GroupStats:
    """Stacked sufficient statistics of ``B`` groups over ``P`` missingness patterns."""

    masks: np.ndarray  # (P, p) bool
    n: np.ndarray  # (B, P)
    sums: np.ndarray  # (B, P, p)
    cross: np.ndarray  # (B, P, p, p)

    @property
    def size(self) -> np.ndarray:
        """People per group, (B,)."""
        return self.n.sum(axis=1)

    def take(self, idx) -> "GroupStats":
        """The groups ``idx`` only."""
        idx = np.asarray(idx, dtype=np.int64)
        return GroupStats(self.masks, self.n[idx], self.sums[idx], self.cross[idx])


class PanelTerms:
    """Per-person pattern index and sufficient-statistic terms of a wide outcome table."""

    def __init__(self, Y: np.ndarray):
        Y = np.asarray(Y, dtype=float)
        if Y.ndim != 2:
            raise ModelError("the outcome must be a two-dimensional table (people x waves)")
        self.Y = Y
        obs = ~np.isnan(Y)
        self.masks, self.pattern = np.unique(obs, axis=0, return_inverse=True)
        self.pattern = self.pattern.reshape(-1).astype(np.int64)
        y0 = np.where(obs, Y, 0.0)
        n, p = Y.shape
        self.p = p
        self.n_patterns = self.masks.shape[0]
        outer = (y0[:, :, None] * y0[:, None, :]).reshape(n, p * p)
        self.terms = np.hstack([np.ones((n, 1)), y0, outer])

    def group_stats(self, rows: np.ndarray, groups: np.ndarray, n_groups: int) -> GroupStats:
        """Statistics of ``n_groups`` groups; person ``rows[j]`` belongs to ``groups[j]``."""
        rows = np.asarray(rows, dtype=np.int64)
        P, p = self.n_patterns, self.p
        key = np.asarray(groups, dtype=np.int64) * P + self.pattern[rows]
        A = sparse.csr_matrix((np.ones(len(rows)), (key, np.arange(len(rows)))),
                              shape=(n_groups * P, len(rows)))
        T = np.asarray(A @ self.terms[rows]).reshape(n_groups, P, 1 + p + p * p)
        return self._pack(T)

    def _pack(self, T: np.ndarray) -> GroupStats:
        p = self.p
        return GroupStats(self.masks, T[..., 0].copy(), T[..., 1:1 + p].copy(),
                          T[..., 1 + p:].reshape(T.shape[0], T.shape[1], p, p).copy())

    def cumulative(self, rows: np.ndarray, groups: np.ndarray, n_groups: int) -> np.ndarray:
        """Raw term array (n_groups, P, 1 + p + p^2) cumulated over groups (prefix sums)."""
        rows = np.asarray(rows, dtype=np.int64)
        P, p = self.n_patterns, self.p
        key = np.asarray(groups, dtype=np.int64) * P + self.pattern[rows]
        A = sparse.csr_matrix((np.ones(len(rows)), (key, np.arange(len(rows)))),
                              shape=(n_groups * P, len(rows)))
        T = np.asarray(A @ self.terms[rows]).reshape(n_groups, P, 1 + p + p * p)
        return np.cumsum(T, axis=0)

    def stack(self, T: np.ndarray) -> GroupStats:
        """:class:`GroupStats` from a raw term array (B, P, 1 + p + p^2)."""
        return self._pack(T)


class NormalNodeModel:
    """Independent normal variables: a mean per variable and a variance (free or fixed).

    Closed-form maximum likelihood, any missingness. With one variable and a
    fixed variance the log-likelihood of a group is ``-SSE / (2 v)`` plus a
    constant, so the best likelihood-ratio cut is the best least-squares cut.
    """

    kind = "normal"

    def __init__(self, p: int, variance: float | None = None, times=None):
        self.p = int(p)
        self.variance = None if variance is None else float(variance)
        self.k = self.p if self.variance is not None else 2 * self.p
        self.times = list(range(self.p)) if times is None else [float(t) for t in times]

    def to_dict(self) -> dict:
        return {"type": self.kind, "p": self.p, "variance": self.variance, "times": self.times}

    def _split(self, theta):
        theta = np.atleast_2d(theta)
        mu = theta[:, : self.p]
        var = np.full_like(mu, self.variance) if self.variance is not None else theta[:, self.p:]
        return mu, var

    def fit(self, stats: GroupStats, start=None, search=False, max_iter=None):
        m = stats.masks.astype(float)  # (P, p)
        nj = stats.n @ m  # (B, p)
        sj = np.einsum("bpj,pj->bj", stats.sums, m)
        ssj = np.einsum("bpjj->bj", stats.cross)
        safe = np.maximum(nj, 1.0)
        mu = np.where(nj > 0, sj / safe, 0.0)
        if self.variance is None:
            var = np.where(nj > 0, ssj / safe - mu * mu, 1.0)
            var = np.maximum(var, 1e-10)
            ll = -0.5 * (nj * (np.log(2 * math.pi * var) + 1.0)).sum(axis=1)
            theta = np.hstack([mu, var])
        else:
            v = self.variance
            sse = ssj - 2 * mu * sj + nj * mu * mu
            ll = (-0.5 * sse / v - 0.5 * nj * math.log(2 * math.pi * v)).sum(axis=1)
            theta = mu
        return theta, ll, np.ones(theta.shape[0], dtype=bool)

    def loglik(self, theta, Y):
        mu, var = self._split(theta)
        Y = np.asarray(Y, dtype=float)
        r = Y - mu[0]
        ll = -0.5 * (np.log(2 * math.pi * var[0]) + r * r / var[0])
        return np.where(np.isnan(Y), 0.0, ll).sum(axis=1)

    def scores(self, theta, Y):
        mu, var = self._split(theta)
        Y = np.asarray(Y, dtype=float)
        obs = ~np.isnan(Y)
        r = np.where(obs, Y - mu[0], 0.0)
        g_mu = r / var[0]
        if self.variance is not None:
            return g_mu
        g_var = np.where(obs, (r * r - var[0]) / (2 * var[0] ** 2), 0.0)
        return np.hstack([g_mu, g_var])

    def expected(self, theta):
        return self._split(theta)[0][0].copy()

    def admissible(self, theta) -> bool:
        """Whether every variance is positive (the model gives a proper density)."""
        return bool(np.all(self._split(theta)[1] > 0))

    def implied_variance(self, theta):
        return self._split(theta)[1][0].copy()


class SpecNodeModel:
    """Any :class:`wavetrail.sem.ModelSpec` as a node model, fitted by the SEM engine.

    The engine's batched Fisher scoring (:func:`wavetrail.sem.fit_batch`) fits all
    candidate children at once; this class only adapts shapes. ``times`` label the
    observed variables in expected trajectories.
    """

    kind = "spec"

    def __init__(self, spec, times=None):
        from wavetrail import sem  # the engine; imported lazily

        self._sem = sem
        self.spec = spec
        self.p = int(spec.p)
        self.k = int(_n_free(spec))
        self.times = list(range(self.p)) if times is None else [float(t) for t in times]

    def to_dict(self) -> dict:
        return {"type": self.kind, "observed": list(self.spec.observed), "times": self.times}

    def _stats(self, stats: GroupStats):
        return self._sem.SuffStats(masks=stats.masks, n=stats.n, sums=stats.sums, cross=stats.cross)

    def fit(self, stats: GroupStats, start=None, search=False, max_iter=None):
        # candidate cuts only need their likelihood ratio to about 1e-6
        tol = SEARCH_TOL if search else FIT_TOL
        extra = {} if max_iter is None else {"max_iter": int(max_iter)}
        res = self._sem.fit_batch(self.spec, self._stats(stats), start=start, tol=tol, **extra)
        return (np.asarray(res.theta, dtype=float), np.asarray(res.loglik, dtype=float),
                np.asarray(res.converged, dtype=bool))

    def loglik(self, theta, Y):
        return np.asarray(self._sem.casewise_loglik(self.spec, np.asarray(theta).reshape(-1), Y), dtype=float)

    def scores(self, theta, Y):
        return np.asarray(self._sem.casewise_scores(self.spec, np.asarray(theta).reshape(-1), Y), dtype=float)

    def expected(self, theta):
        mu, _ = self.spec.implied(np.asarray(theta).reshape(-1))
        return np.asarray(mu, dtype=float).reshape(-1)

    def implied_variance(self, theta):
        """Model-implied variance of each observed variable."""
        _, sigma = self.spec.implied(np.asarray(theta).reshape(-1))
        return np.diag(np.asarray(sigma, dtype=float)).copy()

    def admissible(self, theta) -> bool:
        """Whether the estimate is admissible and gives a proper density of the waves.

        No negative variance, a positive semi-definite latent covariance matrix (no
        correlation beyond +-1), no residual variance at exactly 0, and an implied
        covariance matrix of the waves that is positive definite (smallest eigenvalue above
        1e-10 times the largest). Small nodes fitted without bounds often end outside
        this set; their log-likelihoods of other people are then meaningless.
        """
        from wavetrail.sem.fitting import admissibility

        theta = np.asarray(theta, dtype=float).reshape(-1)
        if not np.all(np.isfinite(theta)):
            return False
        ok, notes = admissibility(self.spec, theta)
        if not ok or any("exactly 0" in note for note in notes):
            return False
        _, sigma = self.spec.implied(theta)
        ev = np.linalg.eigvalsh(np.asarray(sigma, dtype=float).reshape(self.p, self.p))
        return bool(ev[0] > 1e-10 * max(ev[-1], 1e-300))


class GrowthNodeModel(SpecNodeModel):
    """The latent growth model of :func:`wavetrail.growth.growth_spec`, fitted by the SEM engine."""

    kind = "growth"

    def __init__(self, time_scores, shape: str = "linear", residuals: str = "free"):
        from wavetrail import growth

        self.time_scores = [float(t) for t in time_scores]
        self.shape = shape
        self.residuals = residuals
        super().__init__(growth.growth_spec(self.time_scores, shape, residuals), self.time_scores)

    def to_dict(self) -> dict:
        return {"type": self.kind, "time_scores": self.time_scores, "shape": self.shape,
                "residuals": self.residuals}


#: more iterations for the last retry of a node fit
RETRY_MAX_ITER = 2000


def fit_robust(model, stats: GroupStats, start=None):
    """Node fits with retries; returns ``(theta, loglik, converged)`` like ``model.fit``.

    A group whose fit does not converge from ``start`` (the parent's estimate) is
    refitted from the model's moment-based starting values, then once more with
    many more (step-halving, hence damped) scoring iterations from the better of
    the two attempts. A group that still has not converged is returned with
    ``converged=False`` and its best estimate; the tree makes it a leaf and counts it.
    """
    theta, ll, conv = model.fit(stats, start=start)
    if conv.all():
        return theta, ll, conv
    theta, ll, conv = np.array(theta, dtype=float), np.array(ll, dtype=float), np.array(conv)
    bad = np.flatnonzero(~conv)
    th2, ll2, cv2 = model.fit(stats.take(bad))  # moment-based starting values
    better = cv2 | (np.isfinite(ll2) & ~(ll2 <= ll[bad]))
    theta[bad[better]], ll[bad[better]], conv[bad[better]] = th2[better], ll2[better], cv2[better]
    bad = np.flatnonzero(~conv)
    if len(bad):
        start3 = theta[bad]
        th3, ll3, cv3 = model.fit(stats.take(bad), start=np.where(np.isfinite(start3), start3, 0.0),
                                  max_iter=RETRY_MAX_ITER)
        better = cv3 | (np.isfinite(ll3) & ~(ll3 <= ll[bad]))
        theta[bad[better]], ll[bad[better]], conv[bad[better]] = th3[better], ll3[better], cv3[better]
    return theta, ll, conv


def parameter_groups(model) -> list[str]:
    """Per free parameter of a node model, the part of the model it belongs to.

    ``"means"`` (growth-factor means, or the means of a normal model), ``"growth
    (co)variances"`` (variances and covariances of the growth factors) and
    ``"residual variances"``.
    """
    spec = getattr(model, "spec", None)
    if spec is None:
        return ["means"] * model.p + (["residual variances"] * model.p if model.k > model.p else [])
    from wavetrail.sem.spec import ALPHA, NU, PSI, THETA

    cm = spec.compile()
    out = ["growth (co)variances"] * cm.k
    for e in cm.entries:
        if e.param < 0:
            continue
        if e.matrix in (ALPHA, NU):
            out[e.param] = "means"
        elif e.matrix == THETA:
            out[e.param] = "residual variances"
        elif e.matrix == PSI:
            out[e.param] = "growth (co)variances"
    return out


def _n_free(spec) -> int:
    for name in ("n_free", "k", "n_params"):
        v = getattr(spec, name, None)
        if v is not None:
            return int(v() if callable(v) else v)
    raise ModelError("the SEM engine's ModelSpec does not report its number of free parameters")


def model_from_dict(d: dict):
    """Rebuild a node model from :meth:`to_dict` output (JSON; nothing executed)."""
    kind = d.get("type")
    if kind == "normal":
        return NormalNodeModel(int(d["p"]), d.get("variance"), d.get("times"))
    if kind == "growth":
        return GrowthNodeModel(d["time_scores"], d.get("shape", "linear"), d.get("residuals", "free"))
    raise ModelError(f"unknown node model type {kind!r} in the forest file",
                     hint="the file was written by another tool or version")
