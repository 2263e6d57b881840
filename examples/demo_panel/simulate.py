"""The invented demo panel: a seeded simulator that knows the truth it plants.

A fictional five-wave annual panel of 800 adolescents aged 12 at the first wave. Each
wave they answer an 8-item sleep-difficulty questionnaire (answers 1-5; items slp4 and
slp7 are worded the other way round; -99 = refused, -98 = do not know). At the first
wave 36 candidate predictors are recorded. Everybody has a personal quadratic
trajectory of sleep difficulty over the waves,

    eta_i(t) = intercept_i + slope_i * t + curvature_i * t**2,   t = 0, 1, 2, 3, 4,

and a handful of predictors change it (see :data:`TRUTH`):

* ``screen_evening`` moves the slope, linearly;
* ``chronotype`` moves the curvature by a threshold (eveningness score >= 25);
* ``family_conflict`` x ``house_rules`` move the intercept together: conflict raises
  it a little everywhere and much more where the family has no rules on devices at night;
* ``physical_activity`` changes only the spread of the slopes (fewer than four active
  days a week: much more varied slopes), not their mean.

Every other predictor is noise (some are correlated with each other, as in a real
study: social media hours with evening screen time, pubertal stage with sex and age,
self-esteem with anxiety). Answers are drawn around each person's trajectory with an
occasion-specific deviation and item noise, rounded to the 1-5 answer scale. People
drop out (more often when they sleep badly, and more in the last wave), skip a wave now
and then, and leave single items unanswered. A few realistic problems are planted for
the checks to warn about (no errors): a run of identical answers to every item, a
household-income question that many could not answer, and a thinner last wave.

The module is imported by :func:`wavetrail.project.make_demo` from this file; it can
also be run on its own: ``python simulate.py OUT.csv``.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

#: master seed of the demo (data and workflow)
SEED = 20261202
#: people at the first wave
N_PEOPLE = 800
WAVES = (1, 2, 3, 4, 5)
TIME_SCORES = (0, 1, 2, 3, 4)
#: forest size of the demo build (kept small so the demo finishes in minutes)
DEMO_TREES = 100
DEMO_SHARDS = 2
#: share of the people the demo keeps out of the forest for the held-out confirmation
DEMO_HOLDOUT = 0.2

ITEMS = (
    # name, label, reverse-keyed, loading, item offset
    ("slp1", "Trouble falling asleep", False, 1.00, 0.30),
    ("slp2", "Wakes during the night", False, 0.90, -0.20),
    ("slp3", "Lies awake worrying", False, 1.05, 0.10),
    ("slp4", "Wakes up rested", True, 0.85, 0.00),
    ("slp5", "Sleepy during lessons", False, 1.00, -0.30),
    ("slp6", "Hard to get up on school days", False, 0.95, 0.25),
    ("slp7", "Feels alert in the morning", True, 0.75, 0.00),
    ("slp8", "Restless sleep", False, 0.95, -0.15),
)

#: the planted truth (also written to docs/demo-truth.md and docs/demo-truth.json)
TRUTH = {
    "population": {
        "intercept_mean": 2.20, "intercept_sd": 0.45,
        "slope_mean": 0.10, "slope_sd_active": 0.05, "slope_sd_inactive": 0.16,
        "curvature_mean": -0.01, "curvature_sd": 0.01,
        "intercept_slope_correlation": 0.20,
        "occasion_sd": 0.25, "item_noise_sd": 0.60,
    },
    "effects": [
        {"predictor": "screen_evening", "kind": "linear", "target": "slope",
         "rule": "slope += 0.05 * (screen_evening - 2.2)",
         "size": 0.05, "unit": "per evening hour of screen time, per wave"},
        {"predictor": "chronotype", "kind": "threshold", "target": "curvature",
         "rule": "curvature += 0.03 where chronotype >= 25",
         "size": 0.03, "cut": 25, "unit": "per wave squared"},
        {"predictor": "family_conflict x house_rules", "kind": "interaction", "target": "intercept",
         "rule": "intercept += 0.02 * (family_conflict - 8), plus 0.12 * (family_conflict - 8) more where house_rules == 1 (no rules)",
         "size": 0.12, "unit": "extra per conflict point without house rules"},
        {"predictor": "physical_activity", "kind": "spread", "target": "slope variance",
         "rule": "slope SD 0.16 where physical_activity < 4 days, 0.05 otherwise; mean slope unchanged",
         "size": 0.11, "cut": 4, "unit": "difference in slope SD"},
    ],
    "noise": [],  # filled below: every other predictor
    "planted_warnings": [
        "about 12 people per wave from wave 2 on give the same answer to all 8 items (straight-lining), "
        "although two items are reverse-keyed",
        "income_band: about 12% answered -98 (do not know) and 3% -99 (refused)",
        "wave 5 loses more people than the earlier waves (drop-out hazard about 10% instead of 5-6%)",
        "single items are left unanswered (-99 refused about 1.5%, -98 do not know about 1%)",
    ],
}

#: the wave-1 predictors: name, label, type, range or levels, ordered, missing codes
PREDICTORS = [
    ("sex", "Sex recorded at enrolment", "category", {1: "girl", 2: "boy"}, False, None),
    ("pubertal_stage", "Pubertal stage (self-rated)", "category",
     {1: "not yet begun", 2: "barely begun", 3: "underway", 4: "well along", 5: "seems complete"}, True, None),
    ("screen_evening", "Screen time after 8 pm (hours per evening)", "number", [0, 8], False, None),
    ("social_media", "Social media use (hours per day)", "number", [0, 10], False, None),
    ("gaming", "Video gaming (hours per day)", "number", [0, 8], False, None),
    ("chronotype", "Eveningness score (0 = morning type, 40 = evening type)", "integer", [0, 40], False, None),
    ("caffeine", "Caffeine intake (mg per day)", "integer", [0, 400], False, None),
    ("energy_drinks", "Energy drinks (days per week)", "integer", [0, 7], False, None),
    ("physical_activity", "Days per week with at least 60 minutes of activity", "integer", [0, 7], False, None),
    ("sports_club", "Member of a sports club", "category", {0: "no", 1: "yes"}, False, None),
    ("anxiety", "Anxiety symptoms (sum score 0-21)", "integer", [0, 21], False, None),
    ("self_esteem", "Self-esteem (sum score 10-40)", "integer", [10, 40], False, None),
    ("peer_support", "Peer support (sum score 0-20)", "integer", [0, 20], False, None),
    ("family_conflict", "Family conflict (sum score 0-20)", "integer", [0, 20], False, None),
    ("house_rules", "House rules on devices at night", "category",
     {1: "no rules", 2: "some rules", 3: "strict rules"}, True, None),
    ("school_start", "School start time", "category",
     {1: "before 8:00", 2: "8:00 to 8:29", 3: "8:30 or later"}, True, None),
    ("commute_min", "Commute to school (minutes)", "integer", [0, 120], False, None),
    ("siblings", "Number of siblings at home", "integer", [0, 8], False, None),
    ("income_band", "Household income band", "category",
     {1: "lowest fifth", 2: "second fifth", 3: "middle fifth", 4: "fourth fifth", 5: "highest fifth"}, True,
     {-99: "refused", -98: "do not know"}),
    ("parent_education", "Highest parental education", "category",
     {1: "compulsory", 2: "upper secondary", 3: "vocational degree", 4: "university degree"}, True, None),
    ("single_parent", "Lives with one parent", "category", {0: "no", 1: "yes"}, False, None),
    ("urban", "Place of residence", "category", {1: "city", 2: "town", 3: "rural"}, False, None),
    ("bedroom_tv", "Television in the bedroom", "category", {0: "no", 1: "yes"}, False, None),
    ("phone_in_bedroom", "Phone kept in the bedroom at night", "category", {0: "no", 1: "yes"}, False, None),
    ("room_shared", "Shares a bedroom", "category", {0: "no", 1: "yes"}, False, None),
    ("noise_at_home", "Noise at home in the evening (1 = quiet, 5 = very noisy)", "integer", [1, 5], False, None),
    ("pet", "Pet in the household", "category", {0: "no", 1: "yes"}, False, None),
    ("breakfast_days", "Breakfast on school days (days per week)", "integer", [0, 7], False, None),
    ("homework_hours", "Homework (hours per day)", "number", [0, 6], False, None),
    ("music_lessons", "Takes music lessons", "category", {0: "no", 1: "yes"}, False, None),
    ("reading_min", "Reading for pleasure (minutes per day)", "integer", [0, 180], False, None),
    ("bmi_z", "Body-mass index (z-score for age and sex)", "number", [-4, 4], False, None),
    ("napping", "Naps in the afternoon (days per week)", "integer", [0, 7], False, None),
    ("weekend_lie_in", "Extra sleep at weekends (hours)", "number", [0, 5], False, None),
    ("diet_quality", "Diet quality (0-10)", "integer", [0, 10], False, None),
    ("asthma", "Asthma diagnosed", "category", {0: "no", 1: "yes"}, False, None),
]

TRUE_MODERATORS = ("screen_evening", "chronotype", "family_conflict", "house_rules", "physical_activity")
TRUTH["noise"] = [p[0] for p in PREDICTORS if p[0] not in TRUE_MODERATORS] + ["age"]

ITEM_MISSING = {-99: "refused", -98: "do not know"}


# --------------------------------------------------------------------------- simulation


def _rng(seed: int, name: str) -> np.random.Generator:
    """A generator per part of the simulation, so changing one part leaves the others."""
    from wavetrail.seeds import generator

    return generator(seed, "demo_panel", name)


def _clip_round(x, low, high, step=1.0):
    return np.clip(np.round(np.asarray(x, dtype=float) / step) * step, low, high)


def simulate_people(n: int = N_PEOPLE, seed: int = SEED) -> pd.DataFrame:
    """One row per person: the wave-1 predictors and the true growth factors.

    Returns
    -------
    DataFrame
        Index ``pid``; every predictor of :data:`PREDICTORS`, ``age`` at wave 1, and the
        true ``intercept``, ``slope``, ``curvature`` of each person.
    """
    g = _rng(seed, "people")
    d = pd.DataFrame(index=pd.Index(np.arange(10001, 10001 + n), name="pid"))
    sex = g.choice([1, 2], size=n)
    age = np.round(12.0 + g.uniform(0, 1, n), 1)
    d["sex"] = sex
    d["age"] = age
    puberty = 0.9 * (age - 12.5) + 0.6 * (sex == 1) + g.normal(0, 1, n)
    d["pubertal_stage"] = np.digitize(puberty, [-1.0, -0.2, 0.6, 1.4]) + 1
    screen = _clip_round(g.normal(2.2, 1.2, n), 0, 8, 0.5)
    d["screen_evening"] = screen
    d["social_media"] = _clip_round(1.5 + 0.35 * (screen - 2.2) + g.normal(0, 1.0, n), 0, 10, 0.5)
    d["gaming"] = _clip_round(g.normal(1.0 + 0.6 * (sex == 2), 0.9), 0, 8, 0.5)
    d["chronotype"] = _clip_round(g.normal(20, 7, n), 0, 40).astype(int)
    caffeine = np.where(g.uniform(size=n) < 0.3, 0.0, np.exp(g.normal(4.0, 0.6, n)))
    d["caffeine"] = _clip_round(caffeine, 0, 400).astype(int)
    d["energy_drinks"] = np.clip(g.poisson(0.8, n), 0, 7)
    activity = g.binomial(7, 0.5, n)
    d["physical_activity"] = activity
    d["sports_club"] = (g.uniform(size=n) < 0.2 + 0.08 * activity).astype(int)
    anxiety = _clip_round(g.gamma(2.5, 2.6, n), 0, 21).astype(int)
    d["anxiety"] = anxiety
    d["self_esteem"] = _clip_round(28 - 0.45 * (anxiety - 6.5) + g.normal(0, 4, n), 10, 40).astype(int)
    d["peer_support"] = _clip_round(g.normal(14, 3.5, n), 0, 20).astype(int)
    conflict = _clip_round(g.normal(8, 4, n), 0, 20).astype(int)
    d["family_conflict"] = conflict
    rules = g.choice([1, 2, 3], size=n, p=[0.40, 0.37, 0.23])
    d["house_rules"] = rules
    d["school_start"] = g.choice([1, 2, 3], size=n, p=[0.35, 0.45, 0.20])
    d["commute_min"] = _clip_round(g.gamma(2.0, 10.0, n), 0, 120).astype(int)
    d["siblings"] = np.clip(g.poisson(1.3, n), 0, 8)
    d["income_band"] = g.choice([1, 2, 3, 4, 5], size=n)
    d["parent_education"] = g.choice([1, 2, 3, 4], size=n, p=[0.15, 0.30, 0.25, 0.30])
    d["single_parent"] = (g.uniform(size=n) < 0.2).astype(int)
    d["urban"] = g.choice([1, 2, 3], size=n, p=[0.45, 0.35, 0.20])
    d["bedroom_tv"] = (g.uniform(size=n) < 0.35).astype(int)
    d["phone_in_bedroom"] = (g.uniform(size=n) < 0.70).astype(int)
    d["room_shared"] = (g.uniform(size=n) < 0.30).astype(int)
    d["noise_at_home"] = g.choice([1, 2, 3, 4, 5], size=n, p=[0.25, 0.30, 0.25, 0.15, 0.05])
    d["pet"] = (g.uniform(size=n) < 0.55).astype(int)
    d["breakfast_days"] = g.binomial(7, 0.7, n)
    d["homework_hours"] = _clip_round(g.normal(1.5, 0.8, n), 0, 6, 0.5)
    d["music_lessons"] = (g.uniform(size=n) < 0.25).astype(int)
    d["reading_min"] = _clip_round(g.gamma(1.5, 15.0, n), 0, 180).astype(int)
    d["bmi_z"] = np.round(np.clip(g.normal(0.2, 1.0, n), -4, 4), 2)
    d["napping"] = np.clip(g.poisson(1.0, n), 0, 7)
    d["weekend_lie_in"] = _clip_round(g.normal(1.8, 0.9, n), 0, 5, 0.5)
    d["diet_quality"] = _clip_round(g.normal(6, 1.8, n), 0, 10).astype(int)
    d["asthma"] = (g.uniform(size=n) < 0.10).astype(int)

    # the true growth factors
    pop = TRUTH["population"]
    z_i, z_s, z_q = g.standard_normal((3, n))
    r = pop["intercept_slope_correlation"]
    slope_sd = np.where(activity < 4, pop["slope_sd_inactive"], pop["slope_sd_active"])
    d["intercept"] = (pop["intercept_mean"] + pop["intercept_sd"] * z_i
                      + (0.02 + 0.12 * (rules == 1)) * (conflict - 8))
    d["slope"] = (pop["slope_mean"] + 0.05 * (screen - 2.2)
                  + slope_sd * (r * z_i + np.sqrt(1 - r * r) * z_s))
    d["curvature"] = (pop["curvature_mean"] + pop["curvature_sd"] * z_q
                      + 0.03 * (d["chronotype"].to_numpy() >= 25))
    return d


def simulate_panel(n: int = N_PEOPLE, seed: int = SEED) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The demo panel in long form, and the people table behind it.

    Returns
    -------
    long : DataFrame
        One row per person and attended wave: ``pid, wave, age, slp1..slp8`` and the
        wave-1 predictors (empty at later waves). Missing codes -99 / -98 as answered.
    people : DataFrame
        :func:`simulate_people`, plus ``last_wave`` (the wave of drop-out or 5).
    """
    people = simulate_people(n, seed)
    g = _rng(seed, "waves")
    pop = TRUTH["population"]
    n = len(people)
    t = np.asarray(TIME_SCORES, dtype=float)
    eta = (people["intercept"].to_numpy()[:, None] + people["slope"].to_numpy()[:, None] * t
           + people["curvature"].to_numpy()[:, None] * t ** 2)
    eta = eta + g.normal(0, pop["occasion_sd"], eta.shape)  # occasion-specific deviation

    # answers: y* = 2.5 + offset + loading * (eta - 2.5) + noise, rounded to 1..5
    answers = np.empty((n, len(WAVES), len(ITEMS)))
    for j, (_, _, reverse, loading, offset) in enumerate(ITEMS):
        latent = 2.5 + offset + loading * (eta - 2.5) + g.normal(0, pop["item_noise_sd"], eta.shape)
        value = np.clip(np.round(latent), 1, 5)
        answers[:, :, j] = 6 - value if reverse else value

    # attendance: drop-out depends on last wave's sleep difficulty; wave 5 loses more
    present = np.ones((n, len(WAVES)), dtype=bool)
    active = np.ones(n, dtype=bool)
    base = {2: -3.0, 3: -3.0, 4: -2.8, 5: -2.2}
    for w in range(1, len(WAVES)):
        prev_score = np.nanmean(answers[:, w - 1, :], axis=1)
        hazard = 1 / (1 + np.exp(-(base[WAVES[w]] + 0.6 * (prev_score - 2.5))))
        active &= g.uniform(size=n) >= hazard
        skip = g.uniform(size=n) < 0.03  # a missed wave, back at the next one
        present[:, w] = active & ~skip
    last = np.array([max(WAVES[k] for k in range(len(WAVES)) if present[i, k]) for i in range(n)])
    people = people.assign(last_wave=last)

    # straight-lining: a few people per wave from wave 2 on tick one answer for every item
    for w in range(1, len(WAVES)):
        who = g.choice(np.flatnonzero(present[:, w]), size=12, replace=False)
        answers[who, w, :] = g.choice([1, 3, 5], size=(12, 1))

    # item non-response
    u = g.uniform(size=answers.shape)
    codes = np.where(u < 0.015, -99, np.where(u < 0.025, -98, 0))
    answers = np.where(codes != 0, codes, answers)

    rows = []
    pids = people.index.to_numpy()
    age1 = people["age"].to_numpy()
    age_jitter = g.normal(0, 0.08, (n, len(WAVES)))
    for k, wave in enumerate(WAVES):
        idx = np.flatnonzero(present[:, k])
        block = pd.DataFrame({"pid": pids[idx], "wave": wave,
                              "age": np.round(age1[idx] + k + age_jitter[idx, k] * (k > 0), 1)})
        for j, (name, *_rest) in enumerate(ITEMS):
            block[name] = answers[idx, k, j].astype(int)
        rows.append(block)
    long = pd.concat(rows, ignore_index=True)

    # wave-1 predictors, on wave-1 rows only
    g_inc = _rng(seed, "income")
    income = people["income_band"].to_numpy().copy()
    u = g_inc.uniform(size=n)
    income = np.where(u < 0.03, -99, np.where(u < 0.15, -98, income))
    baseline = people[[p[0] for p in PREDICTORS]].copy()
    baseline["income_band"] = income
    baseline = baseline.reset_index()
    baseline["wave"] = WAVES[0]
    long = long.merge(baseline, on=["pid", "wave"], how="left")
    for name, _, kind, *_ in PREDICTORS:
        if kind in ("integer", "category"):
            long[name] = long[name].astype("Int64")
    long = long.sort_values(["pid", "wave"], kind="mergesort").reset_index(drop=True)
    return long, people


# --------------------------------------------------------------------------- project files


def codebook() -> dict:
    """The demo's codebook as a plain mapping (written as config/codebook.yaml)."""
    variables = [
        {"name": "pid", "label": "Study number (pseudonymous)", "type": "integer"},
        {"name": "wave", "label": "Wave (annual, 1 = first year of secondary school)", "type": "integer",
         "range": [1, 5]},
        {"name": "age", "label": "Age at the interview (years)", "type": "number", "range": [11, 18]},
    ]
    for name, label, reverse, _, _ in ITEMS:
        entry = {"name": name, "label": label, "type": "integer", "range": [1, 5],
                 "missing": dict(ITEM_MISSING), "scale": "sleep_difficulty"}
        if reverse:
            entry["reverse"] = True
        variables.append(entry)
    for name, label, kind, spec, ordered, missing in PREDICTORS:
        entry = {"name": name, "label": label, "type": kind}
        if kind == "category":
            entry["levels"] = dict(spec)
            if ordered:
                entry["ordered"] = True
        else:
            entry["range"] = list(spec)
        if missing:
            entry["missing"] = dict(missing)
        entry["waves"] = [WAVES[0]]
        variables.append(entry)
    return {
        "study": {"id": "pid", "wave": "wave", "waves": list(WAVES), "time_scores": list(TIME_SCORES),
                  "time_unit": "years"},
        "variables": variables,
        "scales": {"sleep_difficulty": {"label": "Sleep difficulty", "min_share": 0.8}},
    }


def config(trees: int | None = None, shards: int | None = None, holdout: float | None = None) -> str:
    """The demo's config/config.yaml (text, with a comment per key)."""
    trees = DEMO_TREES if trees is None else int(trees)
    holdout = DEMO_HOLDOUT if holdout is None else float(holdout)
    shards = DEMO_SHARDS if shards is None else int(shards)
    return f"""\
# Settings of the invented demo panel (see docs/demo-truth.md for what was planted).
# Each key, its meaning and its default are listed in wavetrail's docs/project-layout.md.

# The simulated long file: one row per person and attended wave.
data: [data/raw/panel.csv]
# Study block, one entry per variable, the sleep-difficulty scale.
codebook: config/codebook.yaml
# Master seed: every job and every tree derives its own seed from it and its name.
seed: {SEED}

growth:
  outcomes: [sleep_difficulty]
  shapes: [linear, quadratic]  # compared in results/growth/comparison.csv
  residuals: free

invariance:
  scales: all

forest:
  enabled: true
  outcome: sleep_difficulty
  shape: quadratic            # the node model: intercept, slope and curvature
  predictors: wave1           # the 36 first-wave predictors and age
  trees: {trees}                  # small, so that the demo builds in minutes
  shards: {shards}                   # two jobs: one per core on a laptop
  holdout: {holdout:g}                # share of the people kept out of the forest to confirm what it finds
  confirm: 6                  # the six most important predictors, tested on the held-out people
  threads: 1
  runtime: 60
  mem_mb: 4000

report:
  title: Sleep over adolescence (invented demo panel)
  min_cell: 5

resources:
  runtime: 30
  mem_mb: 2000
"""


def truth_markdown() -> str:
    """docs/demo-truth.md of the demo project."""
    pop = TRUTH["population"]
    lines = [
        "# What the demo panel really holds",
        "",
        "The demo data are invented: no real study, person or questionnaire. They come from the",
        f"seeded simulator `examples/demo_panel/simulate.py` of wavetrail (seed {SEED}), which plants",
        "the effects below, so you can compare them with what the workflow reports.",
        "",
        "## Design",
        "",
        f"- {N_PEOPLE} adolescents, five annual waves, aged 12 to 13 at the first wave (16 to 17 at the last).",
        "- Sleep difficulty: 8 items answered 1-5; `slp4` and `slp7` are reverse-keyed;",
        "  -99 = refused, -98 = do not know.",
        "- 36 candidate predictors measured at wave 1 (and age, measured at every wave).",
        "- Growth: `eta(t) = intercept + slope * t + curvature * t^2`, with t = 0..4.",
        f"- Population: intercept mean {pop['intercept_mean']} (SD {pop['intercept_sd']}), slope mean",
        f"  {pop['slope_mean']} (SD {pop['slope_sd_active']} or {pop['slope_sd_inactive']}, see below), "
        f"curvature mean {pop['curvature_mean']}",
        f"  (SD {pop['curvature_sd']}); intercept-slope correlation {pop['intercept_slope_correlation']};",
        f"  occasion SD {pop['occasion_sd']}, item noise SD {pop['item_noise_sd']}, answers rounded to 1-5.",
        "",
        "## Planted effects",
        "",
        "| predictor | kind | changes | rule |",
        "|---|---|---|---|",
    ]
    for e in TRUTH["effects"]:
        lines.append(f"| {e['predictor']} | {e['kind']} | {e['target']} | `{e['rule']}` |")
    lines += [
        "",
        "The spread effect of `physical_activity` leaves the mean slope unchanged: a regression",
        "of per-person slopes on the predictor cannot see it, a split of the growth model can.",
        "",
        "## Noise",
        "",
        "These predictors have no effect on sleep difficulty: " + ", ".join(f"`{n}`" for n in TRUTH["noise"]) + ".",
        "Some are correlated with each other (social media hours with evening screen time,",
        "r about 0.3; pubertal stage with sex and age; self-esteem with anxiety), so a noise",
        "predictor may pick up a little importance through its partner.",
        "",
        "## Planted data problems (warnings, not errors)",
        "",
    ]
    lines += [f"- {w}" for w in TRUTH["planted_warnings"]]
    lines += ["", "Drop-out is more likely after a wave of poor sleep (missing at random given the",
              "observed scores), which full-information maximum likelihood handles.", ""]
    return "\n".join(lines)


def write_demo(root: str | Path, trees: int | None = None, shards: int | None = None,
               holdout: float | None = None) -> None:
    """Write the demo data, codebook, settings and truth into a scaffolded project."""
    from wavetrail._io import atomic_write_text, write_json, write_table

    root = Path(root)
    long, _ = simulate_panel()
    write_table(root / "data" / "raw" / "panel.csv", long)
    atomic_write_text(root / "config" / "codebook.yaml",
                      "# Codebook of the invented demo panel (written by the demo simulator).\n"
                      + yaml.safe_dump(codebook(), sort_keys=False, allow_unicode=True, width=100))
    atomic_write_text(root / "config" / "config.yaml", config(trees=trees, shards=shards, holdout=holdout))
    atomic_write_text(root / "docs" / "demo-truth.md", truth_markdown())
    write_json(root / "docs" / "demo-truth.json", TRUTH)
    try:
        from wavetrail.registry import register_files
    except ImportError:
        from wavetrail._io import sha256_file

        atomic_write_text(root / "data" / "SHA256SUMS",
                          f"{sha256_file(root / 'data' / 'raw' / 'panel.csv')}  raw/panel.csv\n")
    else:
        register_files(root, [root / "data" / "raw" / "panel.csv"], commit=False)


if __name__ == "__main__":  # python simulate.py OUT.csv
    out = Path(sys.argv[1] if len(sys.argv) > 1 else "panel.csv")
    frame, _ = simulate_panel()
    frame.to_csv(out, index=False, lineterminator="\n")
    print(json.dumps({"rows": len(frame), "people": int(frame["pid"].nunique()), "file": str(out)}))
