"""Workflow step of the growth stage: every configured shape for every outcome scale."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
from scipy import stats as sps

from wavetrail._io import write_table
from wavetrail.codebook import load_codebook
from wavetrail.errors import WavetrailError
from wavetrail.growth import fit_growth as fit_growth_model
from wavetrail.scoring import wide_scores

__all__ = ["fit_growth_models", "fit_growth", "compare_models", "fit_conditional_models"]

log = logging.getLogger("wavetrail.growth")

FIT_COLUMNS = ["outcome", "model", "estimation", "n", "loglik", "chisq", "df", "p", "cfi", "tli", "rmsea",
               "rmsea_lo", "rmsea_hi", "srmr", "srmr_corr", "aic", "bic", "sabic", "chisq_scaled", "scaling",
               "p_scaled", "cfi_scaled", "tli_scaled", "rmsea_scaled", "rmsea_scaled_lo", "rmsea_scaled_hi",
               "cfi_robust", "tli_robust", "rmsea_robust", "rmsea_robust_lo", "rmsea_robust_hi", "se_type", "converged", "admissible", "boundary", "note"]
EST_COLUMNS = ["outcome", "model", "parameter", "kind", "estimate", "se", "z", "p", "std"]
#: (smaller, larger): the smaller model is nested in the larger one
NESTED = [("linear", "quadratic"), ("linear", "basis")]


def model_name(shape: str, residuals: str) -> str:
    return f"{shape}-{residuals}"


def fit_growth_models(scores: pd.DataFrame, waves, time_scores, outcomes, shapes, residuals="free", bounded=True,
                      seed=0, robust=False, codebook=None):
    """Fit every shape for every outcome; returns (fit table, estimates table, fits dict).

    A model that cannot be fitted is a row with converged False and the reason as note.
    With ``bounded`` (admissible ML) a model whose unrestricted maximum is
    inadmissible gets a second row, ``estimation`` "unrestricted", with that maximum.
    """
    fit_rows, est_rows, fits = [], [], {}
    for outcome in outcomes:
        wide = wide_scores(scores, outcome, waves)
        for shape in shapes:
            name = model_name(shape, residuals)
            try:
                kind = "scale" if codebook is None or outcome in codebook.scales else "outcome"
                g = fit_growth_model(wide, time_scores, shape=shape, residuals=residuals, where=f"{kind} {outcome}",
                                     bounded=bounded, seed=seed, robust=robust)
            except WavetrailError as err:
                row = {c: np.nan for c in FIT_COLUMNS}
                row.update(outcome=outcome, model=name, estimation="bounded" if bounded else "unrestricted",
                           n=int(wide.notna().any(axis=1).sum()),
                           converged=False, admissible=False, note=str(err.message))
                fit_rows.append(row)
                log.warning("growth model %s for %s not fitted: %s", name, outcome, err.message)
                continue
            fits[(outcome, shape)] = g
            row = {c: g.fit.get(c, np.nan) for c in FIT_COLUMNS if c not in ("outcome", "model")}
            fit_rows.append({"outcome": outcome, "model": name, **row})
            if g.unrestricted is not None:  # the unrestricted maximum differs: report it too
                u = g.unrestricted.fit
                row = {c: u.get(c, np.nan) for c in FIT_COLUMNS if c not in ("outcome", "model")}
                row["estimation"] = "unrestricted"
                fit_rows.append({"outcome": outcome, "model": name, **row})
            est = g.estimates[g.estimates["free"]].copy()
            est.insert(0, "model", name)
            est.insert(0, "outcome", outcome)
            est_rows.append(est[EST_COLUMNS])
            log.info("fitted %s for %s: loglik %.3f", name, outcome, g.fit["loglik"])
    fit_df = pd.DataFrame(fit_rows, columns=FIT_COLUMNS)
    est_df = pd.concat(est_rows, ignore_index=True) if est_rows else pd.DataFrame(columns=EST_COLUMNS)
    return fit_df, est_df, fits


def _usable(g) -> tuple[bool, str]:
    """(usable, why not): a model is preferred only when converged and admissible."""
    why = []
    if not g.fit.get("converged", False):
        why.append("did not converge")
    if not g.fit.get("admissible", False):
        why.append("inadmissible")
    return not why, " and ".join(why)


def compare_models(fits: dict, residuals="free") -> pd.DataFrame:
    """Likelihood-ratio tests of nested shapes, with the AIC and BIC of both models.

    The LR statistic is 2 (loglik_b - loglik_a) on df = k_b - k_a; a variance on
    its boundary makes the chi-square reference conservative (Stram & Lee 1994,
    Biometrics 50(4)). ``preferred`` is the larger model when the test rejects at
    .05 and its BIC is lower, else the smaller one, but a model that did not
    converge or is inadmissible is never preferred: the other one is, if usable,
    else none; ``note`` says why. With boundary estimates the note says that the
    chi-square reference is conservative.
    """
    rows = []
    for outcome in sorted({o for o, _ in fits}):
        for small, large in NESTED:
            a, b = fits.get((outcome, small)), fits.get((outcome, large))
            if a is None or b is None:
                continue
            lr = 2.0 * (b.fit["loglik"] - a.fit["loglik"])
            ddf = int(b.fit["k"] - a.fit["k"]) if "k" in a.fit else int(a.fit["df"] - b.fit["df"])
            p = float(sps.chi2.sf(max(lr, 0.0), ddf)) if ddf > 0 else np.nan
            prefer = large if (np.isfinite(p) and p < 0.05 and b.fit["bic"] < a.fit["bic"]) else small
            ok = {small: _usable(a), large: _usable(b)}
            notes = []
            for shape in (small, large):
                if not ok[shape][0]:
                    notes.append(f"{model_name(shape, residuals)} {ok[shape][1]}")
            if not ok[prefer][0]:
                other = large if prefer == small else small
                if ok[other][0]:
                    notes.append(f"{model_name(other, residuals)} preferred because "
                                 f"{model_name(prefer, residuals)} {ok[prefer][1]}")
                    prefer = other
                else:
                    notes.append("neither model is usable: no preference")
                    prefer = None
            if a.fit.get("boundary") or b.fit.get("boundary"):
                notes.append("boundary estimates: the chi-square reference of the LR test is conservative")
            rows.append({"outcome": outcome, "model_a": model_name(small, residuals),
                         "model_b": model_name(large, residuals), "lr_chisq": lr, "df": ddf, "p": p,
                         "aic_a": a.fit["aic"], "aic_b": b.fit["aic"], "bic_a": a.fit["bic"],
                         "bic_b": b.fit["bic"], "preferred": model_name(prefer, residuals) if prefer else "",
                         "note": "; ".join(notes)})
    cols = ["outcome", "model_a", "model_b", "lr_chisq", "df", "p", "aic_a", "aic_b", "bic_a", "bic_b",
            "preferred", "note"]
    return pd.DataFrame(rows, columns=cols)


def outcome_axis_label(codebook, name: str) -> str:
    """Axis label of an outcome: a scale's label with "mean item score", a single
    measure's codebook label and unit."""
    if codebook is None:
        return "outcome"
    if name in codebook.scales:
        sc = codebook.scales[name]
        rng = sc.bounds(codebook)
        span = f", {rng[0]:g}\u2013{rng[1]:g}" if rng else ""
        return f"{sc.label} (mean item score{span})"
    var = codebook.variables.get(name)
    if var is None:
        return name
    text = var.label or name
    return f"{text} ({var.unit})" if var.unit else text


def trajectory_figure(scores, waves, time_scores, outcomes, fits, stem, n_people=40, seed=0, codebook=None):
    """Observed vs model-implied mean trajectories over a sample of individual trajectories."""
    import matplotlib.pyplot as plt

    from wavetrail.figures import LINESTYLES, MARKERS, PALETTE, save_figure, style

    rows = []
    with style():
        fig, axes = plt.subplots(1, max(len(outcomes), 1), figsize=(5.2 * max(len(outcomes), 1), 3.8),
                                 squeeze=False)
        t = np.asarray(time_scores, dtype=float)
        rng = np.random.default_rng(seed)
        for ax, outcome in zip(axes[0], outcomes):
            wide = wide_scores(scores, outcome, waves)
            pick = rng.choice(len(wide), size=min(n_people, len(wide)), replace=False) if len(wide) else []
            for i in sorted(pick):
                y = wide.iloc[i].to_numpy(dtype=float)
                ok = np.isfinite(y)
                ax.plot(t[ok], y[ok], color="0.8", lw=0.6, zorder=1)
            obs = wide.mean(axis=0).to_numpy(dtype=float)
            ax.plot(t, obs, color="black", marker="o", lw=0, ms=6, label="observed mean", zorder=3)
            for r, w in enumerate(waves):
                rows.append({"outcome": outcome, "series": "observed mean", "wave": str(w),
                             "time": t[r], "value": obs[r]})
            for j, ((o, shape), g) in enumerate(sorted(fits.items())):
                if o != outcome:
                    continue
                ax.plot(t, g.implied_mean, color=PALETTE[j % len(PALETTE)],
                        linestyle=LINESTYLES[j % len(LINESTYLES)], marker=MARKERS[(j + 1) % len(MARKERS)],
                        ms=4, label=f"{shape} (implied)", zorder=2)
                for r, w in enumerate(waves):
                    rows.append({"outcome": outcome, "series": f"{shape} implied", "wave": str(w),
                                 "time": t[r], "value": float(g.implied_mean[r])})
            ax.set_title(outcome)
            unit = getattr(getattr(codebook, "study", None), "time_unit", None)
            ax.set_xlabel(f"time score ({unit})" if unit else "time score (as in the codebook)")
            ax.set_ylabel(outcome_axis_label(codebook, outcome))
            ax.set_xticks(t)
            ax.legend(frameon=False, fontsize=8)
        fig.tight_layout()
    save_figure(fig, stem, pd.DataFrame(rows, columns=["outcome", "series", "wave", "time", "value"]))


#: columns of results/growth/conditional.csv (one row per path: term x growth factor)
CONDITIONAL_COLUMNS = ["outcome", "model", "predictor", "term", "level", "reference", "factor", "estimate", "se",
                       "z", "p", "std"]
#: columns of results/growth/conditional_tests.csv (one row per outcome and predictor)
CONDITIONAL_TEST_COLUMNS = ["outcome", "model", "predictor", "kind", "paths", "wald", "df", "p", "n", "n_excluded",
                            "loglik", "converged", "admissible", "note"]


def level_labels(codebook, names) -> dict[str, dict]:
    """predictor -> {code: label} for the categories among ``names`` (codebook order)."""
    out = {}
    for name in names:
        var = codebook.variables.get(name) if codebook is not None else None
        if var is not None and getattr(var, "levels", None):
            out[str(name)] = dict(var.levels)
    return out


def conditional_tables(fitted, outcome: str, model: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The effects and joint-test rows of one :class:`wavetrail.conditional.ConditionalFit`."""
    eff = fitted.effects.copy()
    eff.insert(0, "model", model)
    eff.insert(0, "outcome", outcome)
    tests = fitted.tests.copy()
    tests.insert(0, "model", model)
    tests.insert(0, "outcome", outcome)
    g = fitted.growth
    tests["loglik"] = g.fit["loglik"] if g is not None else np.nan
    tests["converged"] = bool(g.fit.get("converged", False)) if g is not None else False
    tests["admissible"] = bool(g.fit.get("admissible", False)) if g is not None else False
    return eff[CONDITIONAL_COLUMNS], tests[CONDITIONAL_TEST_COLUMNS]


def fit_conditional_models(scores, predictors, waves, time_scores, outcomes, shape, residuals="free", bounded=True,
                           seed=0, robust=False, codebook=None):
    """A conditional growth model per outcome: every growth factor regressed on ``predictors``.

    Returns (effects, joint tests) with :data:`CONDITIONAL_COLUMNS` and
    :data:`CONDITIONAL_TEST_COLUMNS`; a model that cannot be fitted leaves its tests
    rows with empty statistics and the reason as note.
    """
    from wavetrail.conditional import fit_conditional

    levels = level_labels(codebook, predictors.columns)
    effects, tests = [], []
    name = f"{model_name(shape, residuals)} conditional"
    for outcome in outcomes:
        wide = wide_scores(scores, outcome, waves)
        wide.index = wide.index.map(str)
        fitted = fit_conditional(wide, time_scores, predictors, shape=shape, residuals=residuals, levels=levels,
                                 bounded=bounded, robust=robust, seed=seed, where=f"conditional model of {outcome}")
        e, t = conditional_tables(fitted, outcome, name)
        effects.append(e)
        tests.append(t)
        log.info("conditional %s for %s: %d people, %d left out for a missing predictor", name, outcome,
                 fitted.n, fitted.excluded)
    eff = pd.concat(effects, ignore_index=True) if effects else pd.DataFrame(columns=CONDITIONAL_COLUMNS)
    tst = pd.concat(tests, ignore_index=True) if tests else pd.DataFrame(columns=CONDITIONAL_TEST_COLUMNS)
    return eff, tst


def _person_predictors(job, codebook, names) -> pd.DataFrame:
    """The named time-invariant predictors (first-wave values), index = person id as text."""
    from wavetrail.panel import load_panel
    from wavetrail.stages.checks import data_paths

    if job.input.get("panel"):  # the stored panel the check step wrote
        from wavetrail.stored_panel import read_stored_panel

        panel = read_stored_panel(job.path(job.input["panel"]), codebook,
                                  codebook_path=job.path(job.input["codebook"]))
    else:
        panel = load_panel(data_paths(job), codebook)
    pred = panel.predictors(list(names)).copy()
    pred.index = pred.index.map(str)
    return pred


def fit_growth(job) -> None:
    """Rule ``fit_growth``: inputs ``scores``, ``codebook`` (and ``data`` for the predictors);
    outputs ``fit``, ``estimates``, ``comparison``, ``figure`` (PNG; SVG and CSV beside it)
    and, when the rule names them, ``conditional`` and ``conditional_tests`` (the
    conditional model of ``growth.predictors``; header only without predictors)."""
    settings = job.params.get("settings") or job.config.get("growth", {}) or {}
    codebook = load_codebook(job.path(job.input["codebook"]))
    waves = list(codebook.study.waves)
    time_scores = list(codebook.study.time_scores or range(len(waves)))
    scores = pd.read_csv(job.path(job.input["scores"]))
    from wavetrail.config import resolve_outcomes

    outcomes, _ = resolve_outcomes({"growth": settings, "forest": {"enabled": False}}, codebook)
    shapes = list(settings.get("shapes") or ["linear"])
    residuals = settings.get("residuals", "free")
    bounded = bool(settings.get("bounded", True))
    robust = bool(settings.get("robust", False))
    fit_df, est_df, fits = fit_growth_models(scores, waves, time_scores, outcomes, shapes, residuals,
                                             bounded=bounded, seed=job.seed, robust=robust, codebook=codebook)
    write_table(job.path(job.output["fit"]), fit_df)
    write_table(job.path(job.output["estimates"]), est_df)
    write_table(job.path(job.output["comparison"]), compare_models(fits, residuals))
    if "conditional" in job.output.keys():
        names = list(settings.get("predictors") or [])
        if names:
            eff, tst = fit_conditional_models(scores, _person_predictors(job, codebook, names), waves, time_scores,
                                              outcomes, shapes[0], residuals, bounded=bounded, seed=job.seed,
                                              robust=robust, codebook=codebook)
        else:
            eff, tst = pd.DataFrame(columns=CONDITIONAL_COLUMNS), pd.DataFrame(columns=CONDITIONAL_TEST_COLUMNS)
        write_table(job.path(job.output["conditional"]), eff)
        write_table(job.path(job.output["conditional_tests"]), tst)
    stem = job.path(job.output["figure"]).with_suffix("")
    trajectory_figure(scores, waves, time_scores, outcomes, fits, stem, seed=job.seed, codebook=codebook)
