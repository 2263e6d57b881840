"""Workflow steps of the moderator forest: grow shards, merge them, summarise.

``grow_forest_shard`` grows the trees ``i`` (0-based) with ``i % K == shard - 1``
for ``K = forest.shards``; tree ``i`` is seeded by
``derive_seed(config["seed"], "forest", i)``, so the merged forest is the same
for any ``K``. ``merge_forest`` joins the shards into ``forest.json``;
``summarise_forest`` writes the importance, expected-trajectory and interaction
tables, the two-way expected trajectories of a pair, the overview (out-of-bag
gain over the single growth model, failed node fits, settings in force), the
per-tree table, the model parts that differ, and the two figures. Category
levels appear with their codebook labels (column ``label``).

Progress of a shard goes to the ``wavetrail.progress`` logger (the runner shows
it on the console); it never influences a result.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd

from wavetrail._io import atomic_write_text, write_table
from wavetrail.conditional import code_text
from wavetrail.errors import ConfigError, DataError

log = logging.getLogger("wavetrail")
progress_log = logging.getLogger("wavetrail.progress")

#: predictors drawn in the trajectory figure (at most)
FIGURE_PANELS = 6


def _settings(job) -> dict:
    cfg = dict(job.config.get("forest") or {})
    cfg.update(job.params.get("settings") or {})
    return cfg


def _outcome(job, cfg, codebook) -> str:
    """forest.outcome, or the first growth outcome when it is null (growth.outcomes [] = every scale)."""
    from wavetrail.config import resolve_outcomes

    growth = job.config.get("growth") or {}
    _, outcome = resolve_outcomes({"growth": growth, "forest": {**cfg, "enabled": True}}, codebook)
    return outcome


def holdout_split(ids, share: float, master_seed: int) -> tuple[list, list, dict]:
    """(forest people, held-out people, record) of a seeded split of sorted ``ids``.

    ``round(share * n)`` people are held out, drawn without replacement by a generator
    seeded with ``derive_seed(master_seed, "forest-holdout")``, so the split depends on
    the master seed and the people only (never on shards or cores). The record (for the
    ledger) holds the share, the seed, both counts and the sha256 of the held-out ids
    (one per line, sorted).
    """
    import hashlib

    from wavetrail.seeds import derive_seed

    ids = sorted(str(i) for i in ids)
    seed = derive_seed(int(master_seed), "forest-holdout")
    k = int(round(float(share) * len(ids)))
    if share > 0 and k == 0 and len(ids):
        k = 1
    pick = set(np.random.default_rng(seed).choice(len(ids), size=k, replace=False).tolist()) if k else set()
    held = [i for j, i in enumerate(ids) if j in pick]
    kept = [i for j, i in enumerate(ids) if j not in pick]
    record = {"share": float(share), "seed": seed, "forest_people": len(kept), "held_out": len(held),
              "held_out_sha256": hashlib.sha256("".join(f"{i}\n" for i in held).encode("utf-8")).hexdigest()}
    return kept, held, record


def _split(job, cfg, wide, predictors):
    """The forest's people (and the held-out ones) under forest.holdout; records the split in the ledger."""
    share = float(cfg.get("holdout", 0) or 0)
    if share <= 0:
        return wide, predictors, None
    kept, held, record = holdout_split(wide.index, share, int(job.config.get("seed", 0)))
    if len(kept) < 2 or len(held) < 2:
        raise DataError(f"forest.holdout {share} leaves {len(kept)} people for the forest and {len(held)} held out",
                        hint="choose a share that leaves people on both sides (or 0 to turn it off)")
    job.params = {**job.params, "holdout": record}
    return wide.loc[kept], predictors.loc[kept], (wide.loc[held], predictors.loc[held])


def _inputs(job, cfg):
    """(wide outcome, predictors, time scores) of the forest, on the same people."""
    from wavetrail.scoring import wide_scores
    from wavetrail.stages.checks import load_job_panel

    codebook, panel = load_job_panel(job)  # the stored panel (input ``panel``), else the raw files
    outcome = _outcome(job, cfg, codebook)
    predictors = panel.predictors(cfg.get("predictors", "wave1"), outcome=outcome)
    scores = pd.read_csv(job.path(job.input["scores"]))
    waves = list(codebook.study.waves)
    wide = wide_scores(scores, outcome, waves)
    if wide.empty:
        raise DataError(f"{job.input['scores']}: no scores of outcome {outcome!r}",
                        hint="check forest.outcome in config/config.yaml against the codebook")
    times = codebook.study.time_scores
    if times is None:
        times = tuple(float(i) for i in range(len(waves)))
    wide.index = wide.index.map(str)
    predictors = predictors.copy()
    predictors.index = predictors.index.map(str)
    ids = wide.index.intersection(predictors.index).sort_values()
    if len(ids) == 0:
        raise DataError("no person has both outcome scores and predictors",
                        hint="check that scores.csv and the data files share the id column")
    return wide.loc[ids], predictors.loc[ids], list(times)


def _options(job, cfg) -> dict:
    growth = job.config.get("growth") or {}
    return {
        "shape": cfg.get("shape", "linear"),
        "residuals": growth.get("residuals", "free"),
        "alpha": float(cfg.get("alpha", 0.05)),
        "min_size": cfg.get("min_size"),
        "max_depth": cfg.get("max_depth"),
        "mtry": cfg.get("mtry"),
        "sample_share": float(cfg.get("sample_share", 0.632)),
        "split": cfg.get("split", "scores"),
        "mc_below": cfg.get("mc_below"),
    }


def grow_forest_shard(job) -> None:
    """Grow this shard's trees and write them as a forest JSON file."""
    from wavetrail.forest import grow_forest

    cfg = _settings(job)
    K = int(cfg.get("shards", 1))
    try:
        shard = int(job.wildcards["shard"])
    except (KeyError, ValueError):
        raise ConfigError("grow_forest_shard needs a numeric shard wildcard") from None
    if not 1 <= shard <= K:
        raise ConfigError(f"shard {shard} is outside 1..{K} (forest.shards = {K})",
                          hint="run the shards the workflow lists")
    trees = int(cfg.get("trees", 500))
    indices = [i for i in range(trees) if i % K == shard - 1]
    wide, predictors, times = _inputs(job, cfg)
    wide, predictors, _ = _split(job, cfg, wide, predictors)
    log.info("forest shard %d of %d: %d trees on %d people, %d predictors",
             shard, K, len(indices), len(wide), predictors.shape[1])
    def progress(done, total):
        progress_log.info("forest shard %d of %d: %d of %d trees grown", shard, K, done, total)

    forest = grow_forest(wide, predictors, times, trees=trees, seed=int(job.config.get("seed", 0)),
                         n_jobs=int(job.params.get("n_jobs", 1) or 1), tree_indices=indices,
                         progress=progress, **_options(job, cfg))
    failed = sum(t.failed_fits_ for t in forest.trees_)
    if failed:
        progress_log.info("forest shard %d of %d: %d node fits did not converge and became leaves",
                          shard, K, failed)
    atomic_write_text(job.path(job.output["shard"]), forest.to_json() + "\n")


def _read_forest(path: Path):
    from wavetrail.forest import Forest

    try:
        text = path.read_text(encoding="utf-8")
    except OSError as err:
        raise DataError(f"{path}: cannot read the forest file ({err.strerror})",
                        hint="rebuild the forest steps") from None
    return Forest.from_json(text, source=str(path))


def merge_forest(job) -> None:
    """Join the shard files into results/forest/forest.json (all tree indices, once each)."""
    from wavetrail.forest import Forest

    shards = job.input["shards"]
    shards = [shards] if isinstance(shards, str) else list(shards)
    forest = Forest.merge([_read_forest(job.path(p)) for p in shards])
    want = int(forest.settings_.get("trees", len(forest.trees_)))
    have = [t.index for t in forest.trees_]
    if have != list(range(want)):
        raise DataError(f"the shards hold {len(have)} of the {want} trees of the forest",
                        hint="rerun every grow_forest_shard job with the same config")
    log.info("forest: merged %d shards, %d trees", len(shards), len(have))
    atomic_write_text(job.path(job.output["forest"]), forest.to_json() + "\n")


def _levels(forest, predictors: pd.DataFrame, name: str):
    """(level labels, values) of a predictor for the expected-trajectory table."""
    j = forest.info_.index(name)
    levels = forest.info_.levels[j]
    if levels is not None:
        return list(levels), list(levels)
    col = pd.to_numeric(predictors[name], errors="coerce").dropna()
    if col.empty:
        return [], []
    mean, sd = float(col.mean()), float(col.std(ddof=1)) if len(col) > 1 else 0.0
    return ["low", "average", "high"], [mean - sd, mean, mean + sd]


def _level_labels(job, names) -> dict[str, dict[str, str]]:
    """Codebook labels of category levels, predictor -> {code: label}."""
    from wavetrail.codebook import load_codebook

    try:
        codebook = load_codebook(job.path(job.input["codebook"]))
    except KeyError:
        return {}
    out = {}
    for name in names:
        var = codebook.variables.get(name)
        levels = getattr(var, "levels", None) if var is not None else None
        if levels:
            out[name] = {code_text(k): str(v) for k, v in dict(levels).items()}
    return out



def _label_of(labels: dict, name: str, level) -> str:
    return labels.get(name, {}).get(code_text(level), str(level))


OVERVIEW_COLUMNS = ["people", "trees", "min_size", "mc_below", "trees_split", "failed_fits",
                    "trees_with_failed_fits", "leaves", "inadmissible_leaves", "loglik_forest", "loglik_single", "gain", "se",
                    "gain_per_person", "se_per_person"]


def overview_table(forest, wide, predictors) -> pd.DataFrame:
    """One row: sample, settings in force, splits, failed node fits, leaves with an inadmissible
    estimate (scored out of bag by their nearest admissible ancestor) and the out-of-bag gain."""
    per_tree = forest.fit_failures()
    gain, _ = forest.oob_gain(wide, predictors)
    row = {"people": len(wide), "trees": len(forest.trees_),
           "min_size": int(forest.settings_.get("min_size", 0)),
           "mc_below": int(forest.settings_.get("mc_below", 0)),
           "trees_split": int((per_tree["leaves"] > 1).sum()),
           "failed_fits": int(per_tree["failed_fits"].sum()),
           "trees_with_failed_fits": int((per_tree["failed_fits"] > 0).sum()),
           "leaves": int(per_tree["leaves"].sum()),
           "inadmissible_leaves": int(per_tree["inadmissible_leaves"].sum())}
    for key in ("loglik_forest", "loglik_single", "gain", "se", "gain_per_person", "se_per_person"):
        row[key] = float(gain[key].iloc[0])
    return pd.DataFrame([row], columns=OVERVIEW_COLUMNS)


def summarise_forest(job) -> None:
    """Write importance.csv, dependence.csv, interactions.csv, the overview, per-tree and
    model-part tables and the two figures."""
    cfg = _settings(job)
    forest = _read_forest(job.path(job.input["forest"]))
    wide, predictors, times = _inputs(job, cfg)
    wide, predictors, held = _split(job, cfg, wide, predictors)
    forest.attach_background(predictors)
    labels = _level_labels(job, forest.info_.names)
    top = int(cfg.get("top", 10))
    imp = forest.importance()
    write_table(job.path(job.output["importance"]), imp)
    if imp["importance"].isna().all():
        progress_log.info("forest: no split was possible, no predictor could be tested at any node (node size "
                          "%s); lower forest.min_size or raise forest.sample_share",
                          forest.settings_.get("min_size"))
    if "overview" in job.output.keys():
        write_table(job.path(job.output["overview"]), overview_table(forest, wide, predictors))
    if "trees" in job.output.keys():
        write_table(job.path(job.output["trees"]), forest.fit_failures())
    ranked = imp.dropna(subset=["importance"])
    ranked = ranked[ranked["importance"] > 0]
    names = list(ranked["predictor"][:top])
    if "differences" in job.output.keys():
        write_table(job.path(job.output["differences"]), forest.differences(names))
    parts = []
    for i, name in enumerate(names):
        levels, values = _levels(forest, predictors, name)
        if not values:
            continue
        dep = forest.dependence(name, values)
        dep.insert(0, "label", np.repeat([_label_of(labels, name, v) for v in levels], len(forest.times_)))
        dep.insert(0, "level", np.repeat(levels, len(forest.times_)))
        dep.insert(0, "predictor", name)
        parts.append(dep)
        log.info("forest: expected trajectories %d of %d", i + 1, len(names))
    dep = (pd.concat(parts, ignore_index=True) if parts
           else pd.DataFrame(columns=DEPENDENCE_COLUMNS))
    write_table(job.path(job.output["dependence"]), dep[DEPENDENCE_COLUMNS])
    chosen = [tuple(p) for p in (cfg.get("interaction_pairs") or [])]
    _check_pairs(chosen, forest.info_.names)
    probed = [(names[i], names[k]) for i in range(len(names)) for k in range(i + 1, len(names))]
    probed += [p for p in chosen if p not in probed and p[::-1] not in probed]
    inter = forest.interactions(pairs=probed)
    write_table(job.path(job.output["interactions"]), inter)
    if "dependence_pairs" in job.output.keys():
        write_table(job.path(job.output["dependence_pairs"]),
                    pair_table(forest, predictors, chosen, inter, labels))
    _figures(job, imp.dropna(subset=["importance"]).head(max(top, 10)), dep, names[:FIGURE_PANELS])
    if "confirmation" in job.output.keys():
        eff, tests = confirmation_tables(job, cfg, imp, held, times)
        write_table(job.path(job.output["confirmation"]), eff)
        write_table(job.path(job.output["confirmation_tests"]), tests)


#: columns of results/forest/confirmation_tests.csv (one row per predictor tested on the held-out people)
CONFIRMATION_TEST_COLUMNS = ["outcome", "model", "predictor", "rank", "kind", "paths", "wald", "df", "p", "p_holm",
                             "confirmed", "n", "n_excluded", "n_held_out", "loglik", "converged", "admissible", "note"]


def confirmation_names(cfg, imp: pd.DataFrame) -> list[str]:
    """forest.confirm: a list as given, or the n predictors ranked first by importance among those the
    forest could test (none when no predictor has positive importance: the forest found nothing)."""
    confirm = cfg.get("confirm", 5)
    if isinstance(confirm, list):
        return [str(n) for n in confirm]
    ranked = imp.dropna(subset=["importance"])
    if not (ranked["importance"] > 0).any():
        return []
    ranked = ranked.sort_values(["rank", "predictor"], kind="stable")
    return [str(n) for n in ranked["predictor"][:int(confirm)]]


def confirmation_tables(job, cfg, imp: pd.DataFrame, held, times) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Effects and joint tests of the chosen predictors in a conditional growth model fitted to
    the held-out people only (header-only tables when forest.holdout is 0).

    ``confirmed`` is "yes" when the joint Wald test of all a predictor's paths rejects at
    .05 after Holm's adjustment over the predictors tested, "no" when it does not, and
    "not tested" when no test was possible (``note`` says why).
    """
    from wavetrail.codebook import load_codebook
    from wavetrail.conditional import holm
    from wavetrail.stages.growth import (CONDITIONAL_COLUMNS, conditional_tables, level_labels, model_name)

    if held is None:
        return pd.DataFrame(columns=CONDITIONAL_COLUMNS), pd.DataFrame(columns=CONFIRMATION_TEST_COLUMNS)
    from wavetrail.conditional import fit_conditional

    wide, predictors = held
    codebook = load_codebook(job.path(job.input["codebook"]))
    outcome = _outcome(job, cfg, codebook)
    growth = job.config.get("growth") or {}
    shape, residuals = cfg.get("shape", "linear"), growth.get("residuals", "free")
    names = confirmation_names(cfg, imp)
    model = f"{model_name(shape, residuals)} conditional (held-out people)"
    if not names:
        row = {c: np.nan for c in CONFIRMATION_TEST_COLUMNS}
        row.update(outcome=outcome, model=model, predictor="", confirmed="not tested", n_held_out=len(wide),
                   note="no predictor had positive importance in the forest, so none was tested (nothing to confirm)")
        return pd.DataFrame(columns=CONDITIONAL_COLUMNS), pd.DataFrame([row], columns=CONFIRMATION_TEST_COLUMNS)
    missing = [n for n in names if n not in predictors.columns]
    if missing:
        raise ConfigError(f"forest.confirm names {', '.join(map(repr, missing))}, not a predictor of the forest",
                          hint="name predictors of the forest (see results/forest/importance.csv)")
    fitted = fit_conditional(wide, times, predictors[names], shape=shape, residuals=residuals,
                             levels=level_labels(codebook, names), bounded=bool(growth.get("bounded", True)),
                             robust=bool(growth.get("robust", False)), seed=job.seed,
                             where=f"held-out confirmation of {outcome}")
    eff, tests = conditional_tables(fitted, outcome, model)
    ranks = dict(zip(imp["predictor"].astype(str), imp["rank"]))
    tests.insert(3, "rank", [ranks.get(n, np.nan) for n in tests["predictor"]])
    tests["p_holm"] = holm(tests["p"].to_numpy(dtype=float))
    tests["confirmed"] = np.where(tests["p_holm"].isna(), "not tested",
                                  np.where(tests["p_holm"] < 0.05, "yes", "no"))
    tests["n_held_out"] = len(wide)
    log.info("forest: %d predictors tested on %d held-out people", len(names), len(wide))
    return eff, tests[CONFIRMATION_TEST_COLUMNS]


DEPENDENCE_COLUMNS = ["predictor", "level", "label", "value", "time", "expected", "sd"]


PAIR_COLUMNS = ["predictor_a", "level_a", "label_a", "value_a", "predictor_b", "level_b", "label_b", "value_b",
                "time", "expected"]


def _check_pairs(pairs, names) -> None:
    for pair in pairs:
        for name in pair:
            if name not in names:
                raise ConfigError(f"forest.interaction_pairs names {name!r}, which is not a predictor of the forest",
                                  hint="use predictor names from config/codebook.yaml (see results/forest/importance.csv)")
        if pair[0] == pair[1]:
            raise ConfigError(f"forest.interaction_pairs pairs {pair[0]!r} with itself",
                              hint="name two different predictors")


def pair_table(forest, predictors: pd.DataFrame, chosen, inter: pd.DataFrame, labels=None) -> pd.DataFrame:
    """Two-way expected trajectories of the chosen pairs, or of the strongest probed pair.

    Numeric predictors at low / average / high (mean - 1 SD, mean, mean + 1 SD),
    categorical ones at each level.
    """
    pairs = list(chosen)
    if not pairs and len(inter) and float(inter["h"].fillna(0.0).iloc[0]) > 0:
        pairs = [(inter["predictor_a"].iloc[0], inter["predictor_b"].iloc[0])]
    parts = []
    for a, b in pairs:
        labels_a, values_a = _levels(forest, predictors, a)
        labels_b, values_b = _levels(forest, predictors, b)
        if not values_a or not values_b:
            continue
        two = forest.dependence2(a, b, values_a, values_b)
        nt = len(forest.times_)
        lab = labels or {}
        two.insert(0, "label_b", np.tile(np.repeat([_label_of(lab, b, v) for v in labels_b], nt), len(labels_a)))
        two.insert(0, "level_b", np.tile(np.repeat(labels_b, nt), len(labels_a)))
        two.insert(0, "predictor_b", b)
        two.insert(0, "label_a", np.repeat([_label_of(lab, a, v) for v in labels_a], len(labels_b) * nt))
        two.insert(0, "level_a", np.repeat(labels_a, len(labels_b) * nt))
        two.insert(0, "predictor_a", a)
        parts.append(two[PAIR_COLUMNS])
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=PAIR_COLUMNS)


def _figures(job, imp: pd.DataFrame, dep: pd.DataFrame, names: list[str]) -> None:
    """The importance and expected-trajectory figures, drawn as the report draws them: panels,
    ticks and the outcome axis named by codebook labels, the time axis by wave, time score
    and ``study.time_unit``."""
    from wavetrail.codebook import load_codebook
    from wavetrail.figures import save_figure
    from wavetrail.report.plots import dependence_figure, importance_figure
    from wavetrail.stages.growth import outcome_axis_label

    codebook = load_codebook(job.path(job.input["codebook"]))
    labels = {name: var.label for name, var in codebook.variables.items() if var.label}
    waves = list(codebook.study.waves)
    times = list(codebook.study.time_scores or range(len(waves)))
    outcome = _outcome(job, _settings(job), codebook)
    fig, data = importance_figure(imp, labels)
    save_figure(fig, Path(job.path(job.output["importance_figure"])).with_suffix(""), data)
    fig, data = dependence_figure(dep, names, labels, waves=waves, times=times,
                                  unit=codebook.study.time_unit,
                                  ylabel="Expected " + outcome_axis_label(codebook, outcome))
    save_figure(fig, Path(job.path(job.output["trajectories_figure"])).with_suffix(""), data)
