"""Model specifications in matrix form, built from plain parameter statements.

A :class:`ModelSpec` holds ``p`` observed and ``m`` latent variables and six
parameter matrices (the usual all-y matrix form of a structural equation model):

* ``Lambda`` (p, m): loadings of observed variables on latent variables,
* ``Psi`` (m, m): latent (residual) variances and covariances,
* ``Theta`` (p, p): residual variances and covariances of observed variables,
* ``nu`` (p,): intercepts of observed variables,
* ``alpha`` (m,): latent means (intercepts of latent regressions),
* ``Beta`` (m, m): regressions among latent variables (row on column).

With ``A = (I - Beta)^-1`` the model implies

.. math::  \\mu = \\nu + \\Lambda A \\alpha, \\qquad
           \\Sigma = \\Lambda A \\Psi A^T \\Lambda^T + \\Theta.

Every entry not stated is fixed at zero. A statement with ``value=None`` makes a
free parameter; two free entries with the same ``label`` share one parameter
(an equality constraint).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from wavetrail.errors import ModelError

#: matrix codes used in compiled entries
LAMBDA, PSI, THETA, NU, ALPHA, BETA = range(6)
_KIND = {LAMBDA: "loading", PSI: "cov", THETA: "cov", NU: "intercept", ALPHA: "mean", BETA: "regress"}


@dataclass
class Entry:
    """One stated matrix entry (free or fixed)."""

    matrix: int
    row: int
    col: int
    name: str
    kind: str
    left: str
    right: str
    value: float | None
    label: str | None
    start: float | None
    param: int = -1  # index into theta, -1 when fixed


@dataclass
class ModelSpec:
    """A structural equation model built statement by statement.

    Parameters
    ----------
    observed : list of str
        Observed variable names, in data-column order.
    latent : list of str
        Latent variable names.

    Examples
    --------
    >>> spec = ModelSpec(observed=["a", "b", "c"], latent=["f"])
    >>> spec.load("f", "a", value=1.0); spec.load("f", "b"); spec.load("f", "c")
    >>> for x in "abc": spec.cov(x, x); spec.intercept(x)
    >>> spec.cov("f", "f")
    """

    observed: list[str]
    latent: list[str] = field(default_factory=list)

    def __post_init__(self):
        self.observed = [str(v) for v in self.observed]
        self.latent = [str(v) for v in self.latent]
        names = self.observed + self.latent
        if len(set(names)) != len(names):
            dup = sorted({v for v in names if names.count(v) > 1})
            raise ModelError(f"model variables must have unique names; repeated: {dup}",
                             hint="rename the latent variables so they differ from the data columns")
        self._obs = {v: i for i, v in enumerate(self.observed)}
        self._lat = {v: i for i, v in enumerate(self.latent)}
        self.entries: list[Entry] = []
        self._where: dict[tuple[int, int, int], int] = {}
        self._compiled = None

    # ------------------------------------------------------------------ statements
    def _add(self, matrix, row, col, name, kind, left, right, value, label, start):
        key = (matrix, row, col)
        entry = Entry(matrix, row, col, name, kind, left, right,
                      None if value is None else float(value), label, None if start is None else float(start))
        if key in self._where:
            self.entries[self._where[key]] = entry
        else:
            self._where[key] = len(self.entries)
            self.entries.append(entry)
        self._compiled = None
        return self

    def _need(self, name, pool, what):
        if name not in pool:
            raise ModelError(f"{name!r} is not a {what} variable of this model",
                             hint=f"{what} variables are: {sorted(pool)}")
        return pool[name]

    def load(self, factor, indicator, value=None, label=None, start=None):
        """Loading of observed ``indicator`` on latent ``factor``."""
        f = self._need(factor, self._lat, "latent")
        x = self._need(indicator, self._obs, "observed")
        return self._add(LAMBDA, x, f, f"loading({factor},{indicator})", "loading", factor, indicator,
                         value, label, start)

    def cov(self, a, b, value=None, label=None, start=None):
        """(Residual) variance when ``a == b``, else covariance.

        Observed names refer to residuals, latent names to latent (residual)
        variances; mixing an observed and a latent name is not supported.
        """
        if a in self._obs and b in self._obs:
            i, j = sorted((self._obs[a], self._obs[b]))
            a, b = self.observed[i], self.observed[j]
            matrix = THETA
        elif a in self._lat and b in self._lat:
            i, j = sorted((self._lat[a], self._lat[b]))
            a, b = self.latent[i], self.latent[j]
            matrix = PSI
        else:
            raise ModelError(f"cov({a!r}, {b!r}): both names must be observed or both latent",
                             hint="state a covariance between a latent and an observed variable through a latent stand-in")
        name = f"var({a})" if i == j else f"cov({a},{b})"
        return self._add(matrix, i, j, name, "var" if i == j else "cov", a, b, value, label, start)

    def intercept(self, x, value=None, label=None, start=None):
        """Intercept of observed variable ``x``."""
        i = self._need(x, self._obs, "observed")
        return self._add(NU, i, 0, f"intercept({x})", "intercept", x, "", value, label, start)

    def mean(self, f, value=None, label=None, start=None):
        """Mean (intercept) of latent variable ``f``."""
        i = self._need(f, self._lat, "latent")
        return self._add(ALPHA, i, 0, f"mean({f})", "mean", f, "", value, label, start)

    def regress(self, outcome, predictor, value=None, label=None, start=None):
        """Regression of latent ``outcome`` on latent ``predictor``."""
        i = self._need(outcome, self._lat, "latent")
        j = self._need(predictor, self._lat, "latent")
        if i == j:
            raise ModelError(f"regress({outcome!r}, {predictor!r}): a variable cannot predict itself")
        return self._add(BETA, i, j, f"regress({outcome},{predictor})", "regress", outcome, predictor,
                         value, label, start)

    # ------------------------------------------------------------------ compiled form
    @property
    def p(self) -> int:
        return len(self.observed)

    @property
    def m(self) -> int:
        return len(self.latent)

    def compile(self) -> "Compiled":
        """The matrix form used by the likelihood (cached until the next statement)."""
        if self._compiled is None:
            self._compiled = Compiled(self)
        return self._compiled

    @property
    def k(self) -> int:
        """Number of free parameters (after equality constraints)."""
        return self.compile().k

    @property
    def param_names(self) -> list[str]:
        """Names of the free parameters, in ``theta`` order (label if labelled)."""
        return list(self.compile().names)

    def implied(self, theta):
        """Model-implied mean and covariance.

        Parameters
        ----------
        theta : array (k,) or (B, k)

        Returns
        -------
        mu : array (p,) or (B, p)
        Sigma : array (p, p) or (B, p, p)
        """
        theta = np.asarray(theta, dtype=float)
        single = theta.ndim == 1
        mu, sigma = self.compile().implied(np.atleast_2d(theta))
        return (mu[0], sigma[0]) if single else (mu, sigma)

    def start(self, stats=None):
        """Default starting values (one row per model of ``stats``)."""
        from wavetrail.sem.optimise import start_values

        return start_values(self, stats)


class Compiled:
    """Index arrays of a :class:`ModelSpec`, and the implied moments and their Jacobians."""

    def __init__(self, spec: ModelSpec):
        self.p, self.m = spec.p, spec.m
        keys: dict[str, int] = {}
        names: list[str] = []
        starts: list[float | None] = []
        for e in spec.entries:
            if e.value is not None:
                e.param = -1
                continue
            key = e.label if e.label is not None else "\0" + e.name
            if key not in keys:
                keys[key] = len(names)
                names.append(e.label if e.label is not None else e.name)
                starts.append(e.start)
            elif starts[keys[key]] is None:
                starts[keys[key]] = e.start
            e.param = keys[key]
        self.entries = list(spec.entries)
        self.names = names
        self.user_start = starts
        self.k = len(names)
        p, m = self.p, self.m
        self.base = {
            LAMBDA: np.zeros((p, m)), PSI: np.zeros((m, m)), THETA: np.zeros((p, p)),
            NU: np.zeros(p), ALPHA: np.zeros(m), BETA: np.zeros((m, m)),
        }
        for e in self.entries:
            if e.param < 0:
                self._put(self.base, e, e.value)
        self.has_beta = any(e.matrix == BETA for e in self.entries)
        self.free = {mat: [(e.row, e.col, e.param) for e in self.entries if e.matrix == mat and e.param >= 0]
                     for mat in range(6)}
        arr = {}
        for mat, lst in self.free.items():
            a = np.array(lst, dtype=int).reshape(-1, 3)
            arr[mat] = (a[:, 0], a[:, 1], a[:, 2])
        self.free_idx = arr
        # constant part of the Jacobian (Theta entries, intercepts)
        self._r_theta = np.zeros((self.k, p, p))
        r, c, a = arr[THETA]
        np.add.at(self._r_theta, (a, r, c), np.where(r == c, 0.5, 1.0))
        self._dmu_nu = np.zeros((self.k, p))
        r, _, a = arr[NU]
        np.add.at(self._dmu_nu, (a, r), 1.0)

    @staticmethod
    def _put(mats, e, value):
        M = mats[e.matrix]
        if e.matrix in (NU, ALPHA):
            M[..., e.row] = value
        else:
            M[..., e.row, e.col] = value
            if e.matrix in (PSI, THETA):
                M[..., e.col, e.row] = value

    def matrices(self, theta, base=None):
        """Parameter matrices for a stack of parameter vectors ``theta`` (B, k).

        ``base`` optionally replaces the fixed part (dict of arrays with a
        leading batch axis of size B or 1), e.g. person-specific loadings.
        """
        B = theta.shape[0]
        base = self.base if base is None else base
        out = {}
        for mat in range(6):
            b0 = np.asarray(base[mat])
            shape = (B,) + self.base[mat].shape
            M = np.broadcast_to(b0, shape).copy()
            r, c, a = self.free_idx[mat]
            if len(a):
                if mat in (NU, ALPHA):
                    M[:, r] = theta[:, a]
                else:
                    M[:, r, c] = theta[:, a]
                    if mat in (PSI, THETA):
                        M[:, c, r] = theta[:, a]
            out[mat] = M
        return out

    def _pieces(self, theta, base=None):
        mats = self.matrices(theta, base)
        Lam, Psi, Th, nu, al = mats[LAMBDA], mats[PSI], mats[THETA], mats[NU], mats[ALPHA]
        if self.has_beta:
            eye = np.eye(self.m)
            A = np.linalg.inv(eye - mats[BETA])
        else:
            A = None
        if A is None:
            L, M, Aa = Lam, Psi, al
        else:
            L = Lam @ A
            M = A @ Psi @ np.swapaxes(A, -1, -2)
            Aa = np.einsum("bij,bj->bi", A, al)
        return mats, L, M, Aa

    def implied(self, theta, base=None):
        """(mu (B, p), Sigma (B, p, p)) for theta (B, k)."""
        mats, L, M, Aa = self._pieces(theta, base)
        Lam = mats[LAMBDA]
        sigma = Lam @ M @ np.swapaxes(Lam, -1, -2) + mats[THETA]
        mu = mats[NU] + np.einsum("bpm,bm->bp", Lam, Aa) if self.m else mats[NU].copy()
        return mu, sigma

    def entry_terms(self, theta, base=None):
        """Implied moments with the covariance derivatives in low-rank form.

        Each free covariance-structure entry ``e`` contributes
        ``w_e (u_e v_e^T + v_e u_e^T)`` to ``dSigma/dtheta[param_e]``.

        Returns
        -------
        mu (B, p), Sigma (B, p, p), U (B, E, p), V (B, E, p), w (E,), param (E,), dmu (B, k, p)
        """
        mats, L, M, Aa = self._pieces(theta, base)
        Lam = mats[LAMBDA]
        B, p, k = theta.shape[0], self.p, self.k
        Vm = Lam @ M
        sigma = Vm @ np.swapaxes(Lam, -1, -2) + mats[THETA]
        mu = mats[NU] + np.einsum("bpm,bm->bp", Lam, Aa) if self.m else mats[NU].copy()
        eye = np.eye(p)
        us, vs, ws, ps = [], [], [], []
        dmu = np.broadcast_to(self._dmu_nu, (B, k, p)).copy()
        r, c, a = self.free_idx[LAMBDA]
        if len(a):
            us.append(np.broadcast_to(eye[r], (B, len(a), p)))
            vs.append(np.swapaxes(Vm[:, :, c], 1, 2))
            ws.append(np.ones(len(a)))
            ps.append(a)
            np.add.at(dmu, (slice(None), a, r), Aa[:, c])
        r, c, a = self.free_idx[PSI]
        if len(a):
            us.append(np.swapaxes(L[:, :, r], 1, 2))
            vs.append(np.swapaxes(L[:, :, c], 1, 2))
            ws.append(np.where(r == c, 0.5, 1.0))
            ps.append(a)
        r, c, a = self.free_idx[THETA]
        if len(a):
            us.append(np.broadcast_to(eye[r], (B, len(a), p)))
            vs.append(np.broadcast_to(eye[c], (B, len(a), p)))
            ws.append(np.where(r == c, 0.5, 1.0))
            ps.append(a)
        r, c, a = self.free_idx[BETA]
        if len(a):
            us.append(np.swapaxes(L[:, :, r], 1, 2))
            vs.append(np.swapaxes(Vm[:, :, c], 1, 2))
            ws.append(np.ones(len(a)))
            ps.append(a)
            for f, g, aa in zip(r, c, a):
                dmu[:, aa] += L[:, :, f] * Aa[:, g, None]
        for f, _, aa in zip(*self.free_idx[ALPHA]):
            dmu[:, aa] += L[:, :, f]
        if us:
            U = np.concatenate(us, axis=1)
            V = np.concatenate(vs, axis=1)
            w = np.concatenate(ws)
            prm = np.concatenate(ps)
        else:
            U = V = np.zeros((B, 0, p))
            w = np.zeros(0)
            prm = np.zeros(0, dtype=int)
        return mu, sigma, U, V, w, prm, dmu

    def jacobian(self, theta, base=None):
        """Implied moments and their derivatives.

        Returns
        -------
        mu (B, p), Sigma (B, p, p), dmu (B, k, p), dSigma (B, k, p, p)
        """
        mats, L, M, Aa = self._pieces(theta, base)
        Lam = mats[LAMBDA]
        B, p, k = theta.shape[0], self.p, self.k
        V = Lam @ M  # (B, p, m)
        sigma = V @ np.swapaxes(Lam, -1, -2) + mats[THETA]
        mu = mats[NU] + np.einsum("bpm,bm->bp", Lam, Aa) if self.m else mats[NU].copy()
        R = np.broadcast_to(self._r_theta, (B, k, p, p)).copy()
        dmu = np.broadcast_to(self._dmu_nu, (B, k, p)).copy()
        # loadings: dSigma = e_i V[:, f]^T + transpose; dmu = e_i (A alpha)_f
        for i, f, a in zip(*self.free_idx[LAMBDA]):
            R[:, a, i, :] += V[:, :, f]
            dmu[:, a, i] += Aa[:, f]
        for f, g, a in zip(*self.free_idx[PSI]):
            w = 0.5 if f == g else 1.0
            R[:, a] += w * L[:, :, f, None] * L[:, None, :, g]
        for f, _, a in zip(*self.free_idx[ALPHA]):
            dmu[:, a] += L[:, :, f]
        for f, g, a in zip(*self.free_idx[BETA]):
            R[:, a] += L[:, :, f, None] * V[:, None, :, g]
            dmu[:, a] += L[:, :, f] * Aa[:, g, None]
        dsigma = R + np.swapaxes(R, -1, -2)
        return mu, sigma, dmu, dsigma
