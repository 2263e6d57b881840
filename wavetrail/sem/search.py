"""The single-model path to the maximum: Newton polishing, a scale-aware convergence
test, and a seeded multistart search.

:func:`~wavetrail.sem.optimise.fit_batch` (Fisher scoring, batched over thousands of
small models) stays as it is: it is what the forest uses. A single fit continues from
its result here:

* **Newton polishing** with the observed information (the negative Hessian): Fisher
  scoring converges only linearly when the expected and the observed information
  differ (misspecified or badly conditioned models, e.g. free residuals over many
  waves), and can creep for hundreds of iterations short of the maximum. Where the
  observed information is not positive definite the step falls back to the Fisher
  information; every step is halved until the log-likelihood does not fall.
* **Convergence** is judged in the metric of the information, which does not depend
  on how the parameters are scaled: the Newton decrement ``g^T H^-1 g`` (twice the
  predicted remaining gain in log-likelihood) must be at most
  ``max(tol, rel_tol * |loglik|)`` with ``H`` positive definite (a maximum, not a
  saddle). The relative part makes the test reachable on any scale of the data: the
  log-likelihood itself is only known to about ``1e-13 * |loglik|``.
* **Multiple starts** (:func:`multistart`): the moment-based default start, optional
  extra starts (e.g. the estimates of a simpler nested model) and ``n_random``
  perturbations of them drawn with a fixed seed. All starts are fitted by one batched
  scoring run; the best distinct ends are polished; the highest maximum is returned
  with every distinct maximum found, so that a caller can say when starts disagree.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from wavetrail.sem.likelihood import evaluate
from wavetrail.sem.spec import LAMBDA, PSI, THETA

#: absolute floor of the decrement test
TOL = 1e-10
#: relative part of the decrement test (times |loglik|)
REL_TOL = 1e-11


#: perturbations of each start fitted in the first round of a multistart search (None: one round)
FIRST_ROUND = 2
#: scoring steps every start takes before the best continue (None: all continue)
SCREEN_ITER = 8
#: starts that continue after the screening steps
N_KEEP = 8
#: Newton steps for every polished end after the first (continued while it is the best)
SHORT_POLISH = 15
#: step halvings per scoring step of the searched starts: a start no step of 1/256 improves
#: stops there (its end still competes); the polish of the best ends has no such limit
SCREEN_HALVINGS = 8
#: a later end whose screened log-likelihood lies more than this many units per person below
#: the best polished maximum is not polished: Newton steps from there cannot change the answer
#: (distinct local maxima of growth and factor models lie well under 0.1 per person apart)
FAR_BELOW_PER_PERSON = 0.5
_SETTING = object()  # a multistart argument left at the module setting above


def decrement_limit(loglik, tol=TOL, rel_tol=REL_TOL):
    """The largest Newton decrement counted as converged at this log-likelihood."""
    return max(tol, rel_tol * abs(float(loglik)))


@dataclass
class Polished:
    """Result of :func:`polish`."""

    theta: np.ndarray
    loglik: float
    converged: bool
    decrement: float
    n_iter: int
    saddle: bool = False  # the observed information is not positive definite at the end


def _observed(cm, theta, stats, base=None):
    from wavetrail.sem.fitting import observed_information

    return observed_information(cm, theta, stats, base)


def _pd_solve(H, g):
    """(H^-1 g, True) when H is positive definite, else (None, False)."""
    try:
        L = np.linalg.cholesky(H)
    except np.linalg.LinAlgError:
        return None, False
    y = np.linalg.solve(L, g)
    return np.linalg.solve(L.T, y), True


def polish(cm, theta, stats, max_iter=100, tol=TOL, rel_tol=REL_TOL, base=None) -> Polished:
    """Newton-Raphson with the observed information from ``theta`` (one model, ``stats.B == 1``)."""
    theta = np.asarray(theta, dtype=float).copy()
    ll, g, I = evaluate(cm, theta[None], stats, base=base)
    ll, g, I = float(ll[0]), g[0], I[0]
    if not np.isfinite(ll):
        return Polished(theta, ll, False, np.inf, 0)
    dec, saddle = np.inf, False
    it = 0
    for it in range(1, max_iter + 1):
        H = _observed(cm, theta, stats, base)
        d, pd = _pd_solve(H, g) if np.all(np.isfinite(H)) else (None, False)
        saddle = not pd
        if pd:
            dec = float(g @ d)
            if dec <= decrement_limit(ll, tol, rel_tol):
                return Polished(theta, ll, True, dec, it - 1)
        else:  # not a maximum yet: a Fisher-scoring step
            d, ok = _pd_solve(I + 1e-10 * np.abs(np.diag(I)).mean() * np.eye(len(g)), g)
            if not ok:
                break
            dec = float(g @ d)
        step, moved = 1.0, False
        for _ in range(40):
            cand = theta + step * d
            l_c = float(evaluate(cm, cand[None], stats, grad=False, info=False, base=base)[0])
            if np.isfinite(l_c) and l_c >= ll - 1e-13 * abs(ll):
                moved = l_c > ll or step == 1.0
                theta = cand
                break
            step *= 0.5
        if not moved:
            break  # no step improves: at the maximum to machine precision, or stuck
        l_new, g_new, I_new = evaluate(cm, theta[None], stats, base=base)
        ll, g, I = float(l_new[0]), g_new[0], I_new[0]
    H = _observed(cm, theta, stats, base)
    d, pd = _pd_solve(H, g) if np.all(np.isfinite(H)) else (None, False)
    if pd:
        dec = float(g @ d)
    return Polished(theta, ll, bool(pd and dec <= decrement_limit(ll, tol, rel_tol)), dec, it, saddle=not pd)


@dataclass
class Search:
    """Result of :func:`multistart`."""

    best: Polished
    maxima: list = field(default_factory=list)  # (loglik, converged, count) of each distinct end, best first
    n_starts: int = 0
    seed: int = 0

    @property
    def disagree(self) -> bool:
        """True when converged starts ended at different maxima."""
        return sum(1 for m in self.maxima if m[1]) > 1


def perturbed_starts(spec, theta, n, rng, spread=0.5):
    """``n`` random variations of ``theta`` (n, k) on the scale of each parameter.

    Variances are multiplied by ``exp(spread z)``, free loadings and means move by
    ``spread z`` times their size (at least 1 unit of the time scale for loadings),
    covariances are redrawn as ``r sqrt(v_i v_j)`` with ``r`` uniform on (-0.5, 0.5).
    """
    cm = spec.compile()
    theta = np.asarray(theta, dtype=float)
    out = np.repeat(theta[None], n, axis=0)
    kinds = {}
    for e in cm.entries:
        if e.param >= 0 and e.param not in kinds:
            kinds[e.param] = e
    var_of = {}
    for a, e in kinds.items():
        if e.matrix in (PSI, THETA) and e.row == e.col:
            var_of[(e.matrix, e.row)] = a
    z = rng.standard_normal((n, cm.k))
    for a, e in kinds.items():
        if e.matrix in (PSI, THETA) and e.row == e.col:
            out[:, a] = np.abs(theta[a]) * np.exp(spread * z[:, a]) + 1e-8
    for a, e in kinds.items():
        if e.matrix in (PSI, THETA) and e.row != e.col:
            vi, vj = var_of.get((e.matrix, e.row)), var_of.get((e.matrix, e.col))
            if vi is not None and vj is not None:
                r = rng.uniform(-0.5, 0.5, n)
                out[:, a] = r * np.sqrt(out[:, vi] * out[:, vj])
        elif e.matrix == LAMBDA:
            out[:, a] = theta[a] + spread * z[:, a] * max(abs(theta[a]), 1.0)
        elif not (e.matrix in (PSI, THETA)):
            out[:, a] = theta[a] + spread * z[:, a] * max(abs(theta[a]), 1e-3)
    return out


def _screen(spec, stats, R, max_iter, base, screen_iter, n_keep):
    """Scoring from every row of ``R``: ``screen_iter`` steps for all, ``max_iter`` for the best ``n_keep``."""
    from wavetrail.sem.optimise import BatchFit, _take_base, fit_batch

    many = stats.take(np.zeros(len(R), dtype=int))
    if screen_iter is None or screen_iter >= max_iter or len(R) <= n_keep:
        return fit_batch(spec, many, start=R, max_iter=max_iter, tol=TOL, base=base, max_halvings=SCREEN_HALVINGS)
    bf = fit_batch(spec, many, start=R, max_iter=screen_iter, tol=TOL, base=base, max_halvings=SCREEN_HALVINGS)
    ll = np.where(np.isfinite(bf.loglik), bf.loglik, -np.inf)
    go = np.argsort(-ll, kind="stable")[:n_keep]
    go = np.array(sorted(i for i in go if np.isfinite(ll[i]) and not bf.converged[i]), dtype=int)
    if len(go) == 0:
        return bf
    more = fit_batch(spec, stats.take(np.zeros(len(go), dtype=int)), start=bf.theta[go],
                     max_iter=max_iter - screen_iter, tol=TOL, base=_take_base(base, go),
                     max_halvings=SCREEN_HALVINGS)
    theta, loglik, conv = bf.theta.copy(), bf.loglik.copy(), bf.converged.copy()
    iters, dec = bf.iterations.copy(), bf.decrement.copy()
    theta[go], loglik[go], conv[go] = more.theta, more.loglik, more.converged
    iters[go] += more.iterations
    dec[go] = more.decrement
    return BatchFit(theta, loglik, conv, int(iters.max()), iters, dec)


def multistart(spec, stats, starts, n_random=8, seed=0, max_iter=30, n_polish=6, base=None,
               same_tol=1e-6, spread=1.0, tol=TOL, first_round=_SETTING, screen_iter=_SETTING,
               n_keep=_SETTING) -> Search:
    """Fit from every start in ``starts`` (list of (k,) arrays, the first is the main one) and
    from ``n_random`` seeded perturbations of each, then polish the best distinct ends.

    The starts are fitted in two rounds, each by one batched scoring run of ``max_iter``
    steps: first the given starts with the first ``first_round`` perturbations of each,
    then the other perturbations. The second round is skipped when at least three starts
    of the first ended with a finite log-likelihood and every distinct end among them
    (screened log-likelihoods 1e-4 apart), once polished, converged to the same maximum;
    otherwise all ``len(starts) * (1 + n_random)`` starts are fitted, the same set
    (same seed, same draws) as in one round. ``first_round=None`` fits all in one round.

    Screening: every start takes ``screen_iter`` scoring steps; only the ``n_keep``
    highest (and every start that converged already) continue to ``max_iter`` steps; the
    others keep their screened end (``screen_iter=None`` continues all).

    Polishing: the best screened end gets up to 100 Newton steps, each further distinct
    end ``SHORT_POLISH``, continued to 100 only while it is above every maximum found; an
    end still short of convergence then is counted, but not as a converged maximum. An end
    screened more than ``FAR_BELOW_PER_PERSON`` log-likelihood units per person below the
    best polished maximum is counted unpolished (and does not call for the second round).

    Two ends count as the same maximum when their log-likelihoods differ by less than
    ``same_tol * max(1, |loglik|)``.
    """
    first_round = FIRST_ROUND if first_round is _SETTING else first_round
    screen_iter = SCREEN_ITER if screen_iter is _SETTING else screen_iter
    n_keep = N_KEEP if n_keep is _SETTING else n_keep
    cm = spec.compile()
    rng = np.random.default_rng(seed)
    base_starts = [np.asarray(s, dtype=float) for s in starts if s is not None]
    nb = len(base_starts)
    pert = [perturbed_starts(spec, s, n_random, rng, spread=spread) for s in base_starts] if n_random else []
    m1 = n_random if first_round is None else min(int(first_round), n_random)
    rounds = [base_starts + [r for P in pert for r in P[:m1]]]
    if n_random > m1:
        rounds.append([r for P in pert for r in P[m1:]])
    S = np.zeros((0, cm.k))
    theta = np.zeros((0, cm.k))
    ll = np.zeros(0)
    final = np.zeros(0)
    conv = np.zeros(0, dtype=bool)
    polished: set[int] = set()
    far_below: set[int] = set()  # ends left unpolished, far below the best maximum
    far = FAR_BELOW_PER_PERSON * float(np.asarray(stats.total).ravel()[0])
    ends: list[Polished] = []
    for rnd, rows in enumerate(rounds):
        R = np.vstack(rows)
        bf = _screen(spec, stats, R, max_iter, base, screen_iter, n_keep)
        l_r = np.where(np.isfinite(bf.loglik), bf.loglik, -np.inf)
        S = np.vstack([S, R])
        theta = np.vstack([theta, bf.theta])
        ll = np.concatenate([ll, l_r])
        final = np.concatenate([final, l_r])
        conv = np.concatenate([conv, bf.converged & np.isfinite(l_r)])
        # polish the best distinct ends not polished yet (ends within 1e-4 of a polished one are that one)
        order = np.argsort(-ll, kind="stable")
        picked = sorted(polished)
        cap = max(n_polish, len(polished) + 2)  # a later round always polishes its best two new ends
        for i in order:
            if not np.isfinite(ll[i]) or len(picked) >= cap:
                break
            if all(abs(ll[i] - ll[j]) > 1e-4 * max(1.0, abs(ll[j])) for j in picked):
                picked.append(int(i))
        for i in picked:
            if i in polished:
                continue
            polished.add(i)
            top = max((e.loglik for e in ends), default=-np.inf)
            if ends and np.isfinite(top) and top - ll[i] > far:
                far_below.add(i)
                continue
            # the first end is polished fully; later ones get a short budget, continued
            # only while they are above every maximum found so far (a new best)
            r = polish(cm, theta[i], stats, base=base, tol=tol, max_iter=100 if not ends else SHORT_POLISH)
            if ends and not r.converged and np.isfinite(r.loglik) and r.loglik > top:
                more = polish(cm, r.theta, stats, base=base, tol=tol, max_iter=100 - SHORT_POLISH)
                if more.loglik >= r.loglik:
                    more.n_iter += r.n_iter
                    r = more
            if np.isfinite(r.loglik) and r.loglik >= ll[i]:
                final[i], conv[i] = r.loglik, r.converged
                ends.append(r)
        if rnd == 0 and len(rounds) > 1:
            # every finite end of the round is represented by a polished one (same screened
            # log-likelihood to 1e-4), every polished end converged, and all reached one maximum
            pol = np.array(sorted(polished - far_below), dtype=int)
            top = max((e.loglik for e in ends), default=-np.inf)
            fin = np.nonzero(np.isfinite(ll) & ~(top - ll > far))[0]
            covered = all(np.any(np.abs(ll[i] - ll[pol]) <= 1e-4 * np.maximum(1.0, np.abs(ll[pol]))) for i in fin)
            got = final[pol]
            if np.isfinite(ll).sum() >= 3 and covered and conv[pol].all() and \
                    got.max() - got.min() <= max(same_tol * max(1.0, abs(got.max())), 1e-3):
                break
    if not ends:
        ends = [Polished(S[0], -np.inf, False, np.inf, 0)]
    ends.sort(key=lambda r: -r.loglik if np.isfinite(r.loglik) else np.inf)
    best = ends[0]
    # distinct ends (log-likelihoods within same_tol, or 1e-3, of each other are one maximum)
    maxima: list = []
    for i in np.argsort(-final, kind="stable"):
        v = float(final[i])
        if not np.isfinite(v):
            continue
        for m in maxima:
            if abs(v - m[0]) <= max(same_tol * max(1.0, abs(m[0])), 1e-3):
                m[1] = m[1] or bool(conv[i])
                m[2] += 1
                break
        else:
            maxima.append([v, bool(conv[i]), 1])
    return Search(best=best, maxima=[tuple(m) for m in maxima], n_starts=len(S), seed=seed)
