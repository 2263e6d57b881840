"""The report's content: one method per section, each returning an HTML fragment.

The report notebook opens a :class:`Report` and shows one section per cell::

    report = open_report(project_root, tables, settings)
    report.overview()

Each method returns a :class:`Fragment` (shown by Jupyter through ``_repr_html_``).
Tables and figures are numbered in the order they first appear. Every number is
read from the result tables and printed in journal conventions
(:mod:`wavetrail.report.formatting`); nothing is computed here that a stage
already computed, except wave means of the scale scores and the mean trajectory
implied by each growth model's factor means.
"""

from __future__ import annotations

import base64
import re
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from wavetrail.report import inputs as _in
from wavetrail.report.inputs import _code
from wavetrail.report.formatting import (
    MISSING, Table, esc, fmt_bool, fmt_chisq, fmt_count, fmt_estimate, fmt_interval, fmt_number, fmt_p, fmt_percent,
    fmt_small, fmt_unit,
)

#: rows of a table after which it scrolls inside the page
SCROLL_ROWS = 15
#: how many predictors the importance figure shows
TOP_IMPORTANCE = 15
#: how many top predictors get expected-trajectory panels
TOP_DEPENDENCE = 3
#: further panels for top predictors that mainly change the spread of the trajectories
TOP_SPREAD_EXTRA = 2

EXPLORATORY = (
    "The moderator forest screens many candidate predictors at once. Its results are exploratory "
    "associations in this sample: they are not causal effects, they need confirmation in new data, "
    "and they are not a basis for diagnosing or predicting the development of an individual person."
)
SHARING = (
    "Data sharing follows the study's consent, its ethics approval and the applicable data-protection "
    "rules. This report contains only aggregate results; counts below the study's minimum cell size are "
    "shown as \u201c< n\u201d."
)


class Fragment:
    """A piece of report HTML that Jupyter displays as HTML."""

    def __init__(self, html: str, name: str = ""):
        self.html = html
        self.name = name

    def _repr_html_(self) -> str:
        return self.html

    def __repr__(self) -> str:  # stored as text/plain beside the HTML: keep it stable
        return f"[wavetrail report: {self.name}]"

    def __str__(self) -> str:
        return self.html


def _p(text: str, cls: str | None = None) -> str:
    return f'<p class="{cls}">{text}</p>' if cls else f"<p>{text}</p>"


def _absent(text: str) -> str:
    return _p(esc(text), "wt-absent")


def _col(df: pd.DataFrame, name: str):
    return df[name] if name in df.columns else pd.Series([np.nan] * len(df), index=df.index)


def _sorted_waves(values) -> list:
    vals = list(pd.unique(pd.Series(values).dropna()))
    try:
        return sorted(vals, key=float)
    except (TypeError, ValueError):
        return sorted(vals, key=str)


def _pretty(name: str) -> str:
    return str(name).replace("_", " ")


class Report:
    """Sections of the report of one project.

    Parameters
    ----------
    root
        Project root.
    tables
        Result table name -> DataFrame, or None when the stage is absent.
    paths
        Result table name -> project-relative path (for the notes under tables).
    settings
        ``title``, ``min_cell``, ``seed``, ``codebook``, ``figures`` (folder for the
        report's figures, project-relative), ``lock``, ``forest`` (the forest settings).
    """

    def __init__(self, root: Path, tables: dict[str, pd.DataFrame | None], paths: dict[str, str],
                 settings: dict[str, Any]):
        self.root = Path(root)
        self.tables = tables
        self.paths = paths
        self.settings = dict(settings)
        self.min_cell = int(self.settings.get("min_cell", 5))
        self.study = _in.read_study(self.root / self.settings["codebook"]) if self.settings.get("codebook") else _in.StudyInfo()
        self.figures_dir = self.root / self.settings.get("figures", "results/write-up/figures")
        self._numbers: dict[tuple[str, str], int] = {}

    # ------------------------------------------------------------------ helpers
    def _number(self, kind: str, key: str) -> int:
        if (kind, key) not in self._numbers:
            self._numbers[(kind, key)] = 1 + sum(1 for k, _ in self._numbers if k == kind)
        return self._numbers[(kind, key)]

    def _table(self, table: Table) -> str:
        if len(table) > SCROLL_ROWS:
            table.scroll = True
        return table.to_html(self._number("table", table.key or table.caption))

    def _figure(self, key: str, fig, data: pd.DataFrame, caption: str, alt: str) -> str:
        from wavetrail.figures import save_figure

        stem = self.figures_dir / key
        save_figure(fig, stem, data)
        png = stem.with_suffix(".png").read_bytes()
        rel = stem.relative_to(self.root).as_posix() if stem.is_relative_to(self.root) else stem.name
        number = self._number("figure", key)
        uri = "data:image/png;base64," + base64.b64encode(png).decode("ascii")
        return (
            f'<figure class="wt-figure" id="figure-{esc(key)}"><img src="{uri}" alt="{esc(alt)}">'
            f'<figcaption><span class="wt-label">Figure {number}.</span>{esc(caption)}'
            f'<br><span class="wt-files">Files: <code>{esc(rel)}.png</code>, <code>{esc(rel)}.svg</code>, '
            f"data <code>{esc(rel)}.csv</code></span></figcaption></figure>"
        )

    @staticmethod
    def _notes(df: pd.DataFrame, key: str) -> str:
        """The distinct non-empty ``note`` entries of a table, as one sentence each."""
        if "note" not in df.columns:
            return ""
        notes = []
        for _, r in df.iterrows():
            text = r.get("note")
            if isinstance(text, str) and text.strip():
                line = f"{r.get(key)}: {text.strip().rstrip('.')}."
                if line not in notes:
                    notes.append(line)
        return " ".join(notes) + (" " if notes else "")

    def _source(self, *names: str) -> str:
        files = [self.paths[n] for n in names if n in self.paths]
        return "Source: " + ", ".join(files) + "." if files else ""

    def _unit_label(self, scale: str) -> str:
        label = self.study.scale_label(scale)
        if not self.study.is_scale(scale):  # a single measure: its label and unit
            unit = self.study.units.get(str(scale))
            return f"{label} ({unit})" if unit else label
        rng = self.study.scale_ranges.get(scale)
        if rng:
            return f"{label} (mean item score, {rng[0]:g}\u2013{rng[1]:g})"
        return f"{label} (mean item score)"

    def _waves_and_times(self, waves) -> tuple[list, list[float]]:
        times = []
        for k, w in enumerate(waves):
            t = self.study.time_of(w)
            times.append(float(k) if t is None else t)
        return list(waves), times

    def _n_persons(self) -> int | None:
        scores = self.tables.get("scores")
        if scores is not None and "id" in scores.columns:
            return int(scores["id"].nunique())
        attrition = self.tables.get("attrition")
        if attrition is not None and "n_present" in attrition.columns and len(attrition):
            return int(attrition["n_present"].max())
        return None

    # ------------------------------------------------------------------ overview
    def overview(self) -> Fragment:
        """Key facts of the study and of the results, and how to read the report."""
        facts: list[tuple[str, str]] = []
        n = self._n_persons()
        if n is not None:
            facts.append(("Participants", f"N = {fmt_count(n)}"))
        if self.study.waves:
            waves = ", ".join(f"{w} ({t:g})" for w, t in zip(self.study.waves, self.study.time_scores))
            facts.append(("Waves (time score)", waves))
        scores = self.tables.get("scores")
        if scores is not None and "scale" in scores.columns:
            names = sorted(scores["scale"].unique())
            scales = [self.study.scale_label(s) for s in names if self.study.is_scale(s)]
            single = [self.study.scale_label(s) for s in names if not self.study.is_scale(s)]
            if scales:
                facts.append(("Scales", ", ".join(scales)))
            if single:
                facts.append(("Single measures", ", ".join(single)))
        fit = self.tables.get("growth_fit")
        if fit is not None and len(fit) and "bic" in fit.columns:
            best = []
            for outcome, part in fit.groupby(_col(fit, "outcome").fillna(""), sort=True):
                row = part.loc[part["bic"].idxmin()]
                who = f"{self.study.scale_label(outcome)}: " if outcome else ""
                best.append(f"{who}{row['model']} (lowest BIC, CFI = {fmt_unit(row.get('cfi'))})")
            facts.append(("Growth model", "; ".join(best)))
        imp = self.tables.get("importance")
        if imp is None and (self.settings.get("forest") or {}).get("enabled"):
            facts.append(("Moderator forest", "configured; results absent"))
        elif imp is None:
            facts.append(("Moderator forest", "not configured"))
        elif len(imp) and pd.to_numeric(imp["importance"], errors="coerce").isna().all():
            facts.append(("Moderator forest", "no split was possible (no predictor could be tested)"))
        elif _found_nothing(imp):
            facts.append(("Moderator forest", "some trees split, but no predictor improved the out-of-bag fit"
                          if self._trees_split() else "no predictor was selected for a split"))
        else:
            top = imp.sort_values(["rank", "predictor"]).iloc[0]
            facts.append(("Top moderator (exploratory)", f"{self.study.label(top['predictor'])}"))
        if self.settings.get("seed") is not None:
            facts.append(("Master seed", str(self.settings["seed"])))
        dl = "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in facts)
        html = (
            f'<dl class="wt-facts">{dl}</dl>'
            f'<div class="wt-caution" role="note"><p><strong>How to read the moderator results.</strong> '
            f"{esc(EXPLORATORY)}</p><p><strong>Data sharing.</strong> {esc(SHARING)}</p></div>"
        )
        return Fragment(html, "overview")

    # ------------------------------------------------------------------ data and checks
    def checks(self) -> Fragment:
        """Codebook findings, attrition over waves and descriptive statistics."""
        out = ["<h3>Codebook checks</h3>", self._findings()]
        out += ["<h3>Participation over waves</h3>", self._attrition()]
        out += ["<h3>Descriptive statistics</h3>", self._descriptives()]
        return Fragment("".join(out), "data and checks")

    def _findings(self) -> str:
        df = self.tables.get("findings")
        if df is None:
            return _absent("The codebook checks have not been run (results/checks/findings.csv is absent).")
        if not len(df):
            return _p("Every codebook check passed: there is no finding.")
        sev = _col(df, "severity").fillna("info").astype(str)
        counts = sev.value_counts()
        badges = " ".join(
            f'<span class="wt-badge {esc(s)}">{esc(s)}: {int(counts[s])}</span>'
            for s in sorted(counts.index, key=lambda s: (["error", "warning", "info"] + [s]).index(s))
        )
        order = sev.map({"error": 0, "warning": 1}).fillna(2)
        df = df.assign(_o=order.values).sort_values(["_o", "variable", "check"], kind="stable")
        rows = [
            [str(r.get("variable", MISSING)), _wave_text(r.get("wave")), _pretty(r.get("check", "")),
             str(r.get("severity", "")), fmt_count(r.get("count")), _without_ids(r.get("message"), r.get("rows"))]
            for _, r in df.iterrows()
        ]
        table = Table("Findings of the codebook checks", ["Variable", "Wave", "Check", "Severity", "Cases", "Message"],
                      rows, numeric=[4], key="findings",
                      note="Cases: rows or people the finding concerns. Person ids and row numbers are left out of "
                           "the report; the findings file lists them for the study team. " + self._source("findings"))
        return _p(f"Findings by severity: {badges}") + self._table(table)

    def _attrition(self) -> str:
        df = self.tables.get("attrition")
        if df is None:
            return _absent("Attrition has not been summarised (results/checks/attrition.csv is absent).")
        extra = [c for c in df.columns if c not in {"wave", "n_present", "n_missing", "retention"}]
        rows = []
        for _, r in df.iterrows():
            row = [_wave_text(r.get("wave")), fmt_small(r.get("n_present"), self.min_cell),
                   fmt_small(r.get("n_missing"), self.min_cell), fmt_percent(r.get("retention"))]
            row += [_auto(c, r.get(c), self.min_cell) for c in extra]
            rows.append(row)
        table = Table("Participants present at each wave", ["Wave", "Present", "Missing", "Retention"]
                      + [_ATTRITION_HEADS.get(c, _pretty(c).capitalize()) for c in extra], rows, key="attrition",
                      note="Missing: seen at some wave but not at this one. Retention: share of the wave-1 sample "
                           "present at the wave. " + self._source("attrition"))
        html = self._table(table)
        if {"wave", "n_present"} <= set(df.columns) and len(df):
            from wavetrail.report.plots import attrition_figure

            fig, data = attrition_figure(df)
            html += self._figure("attrition", fig, data, "Participants present at each wave.",
                                 "Line chart of the number of participants present at each wave.")
        return html

    def _descriptives(self) -> str:
        df = self.tables.get("descriptives")
        if df is None:
            return _absent("Descriptive statistics are absent (results/checks/descriptives.csv).")
        if not len(df):
            return _absent("The descriptive statistics table is empty.")
        has_levels = "levels" in df.columns and df["levels"].fillna("").astype(str).str.strip().ne("").any()
        rows = []
        for _, r in df.iterrows():
            row = [self.study.label(r.get("variable")), _wave_text(r.get("wave")), fmt_small(r.get("n"), self.min_cell),
                   fmt_count(r.get("missing")), fmt_number(r.get("mean")), fmt_number(r.get("sd")),
                   fmt_number(r.get("min")), fmt_number(r.get("max"))]
            if has_levels:
                row.append(self._levels(str(r.get("variable")), r.get("levels")))
            rows.append(row)
        heads = ["Variable", "Wave", "n", "Missing", "M", "SD", "Min", "Max"] + (["Categories (n)"] if has_levels else [])
        table = Table("Descriptive statistics by variable and wave", heads, rows, key="descriptives",
                      note=f"n: valid answers. Counts below {self.min_cell} are shown as \u201c< {self.min_cell}\u201d. "
                           "Means and SDs of categorical variables are not defined (\u2014). "
                           + self._source("descriptives"))
        return self._table(table)

    def _levels(self, name: str, text) -> str:
        """``1:12; 2:3`` -> ``none 12; some < 5`` (codebook labels, small counts suppressed).

        Text codes arrive quoted (``'low':49``); they are shown by their label too.
        """
        if text is None or (isinstance(text, float) and np.isnan(text)) or not str(text).strip():
            return MISSING
        parts = []
        for item in str(text).split(";"):
            code, sep, count = item.strip().rpartition(":")
            if not sep:
                parts.append(item.strip())
                continue
            code = code.strip()
            if len(code) >= 2 and code[0] == code[-1] and code[0] in "'\"":  # a text code, written quoted
                code = code[1:-1]
            parts.append(f"{self.study.level_label(name, _in._code(code))} {fmt_small(count, self.min_cell)}")
        return "; ".join(parts)

    # ------------------------------------------------------------------ scales
    def scales(self) -> Fragment:
        """Scale scores by wave, reliability per wave and longitudinal invariance."""
        out = ["<h3>Scale scores</h3>", self._scores()]
        out += ["<h3>Reliability</h3>", self._reliability()]
        out += ["<h3>Measurement invariance over waves</h3>", self._invariance()]
        return Fragment("".join(out), "scales")

    def observed_means(self, scale: str) -> pd.DataFrame:
        """Wave means of a scale's scores with normal-theory 95% CIs: wave, time, n, mean, sd, lo, hi."""
        scores = self.tables.get("scores")
        part = scores[scores["scale"] == scale]
        waves, times = self._waves_and_times(self.study.waves or _sorted_waves(part["wave"]))
        rows = []
        for w, t in zip(waves, times):
            s = part.loc[part["wave"].astype(str) == str(w), "score"].dropna()
            n = int(s.size)
            mean = float(s.mean()) if n else np.nan
            sd = float(s.std(ddof=1)) if n > 1 else np.nan
            half = 1.96 * sd / np.sqrt(n) if n > 1 else np.nan
            rows.append({"wave": w, "time": t, "n": n, "mean": mean, "sd": sd, "lo": mean - half, "hi": mean + half})
        return pd.DataFrame(rows)

    def _scores(self) -> str:
        df = self.tables.get("scores")
        if df is None:
            return _absent("No scale scores (results/scores/scores.csv is absent).")
        rows = []
        for scale in sorted(df["scale"].unique()):
            for _, r in self.observed_means(scale).iterrows():
                rows.append([self.study.scale_label(scale), _wave_text(r["wave"]), fmt_small(r["n"], self.min_cell),
                             fmt_number(r["mean"]), fmt_number(r["sd"]), fmt_interval(r["lo"], r["hi"])])
        single = any(not self.study.is_scale(s) for s in df["scale"].unique())
        note = ("n: people with a score (enough items answered"
                + ("; for a single measure, people with a value" if single else "") + "). ")
        table = Table("Scale scores by wave" if not single else "Outcome scores by wave",
                      ["Scale" if not single else "Outcome", "Wave", "n", "M", "SD", "95% CI of M"], rows,
                      key="scores", note=note + self._source("scores"))
        return self._table(table)

    def _reliability(self) -> str:
        df = self.tables.get("reliability")
        if df is None:
            return _absent("Reliability has not been assessed (results/scores/reliability.csv is absent).")
        if not len(df):
            return _absent("The codebook declares no multi-item scale: reliability applies to scales only, "
                           "not to single measures.")
        rows = [
            [self.study.scale_label(r.get("scale")), _wave_text(r.get("wave")), fmt_small(r.get("n"), self.min_cell),
             fmt_unit(r.get("alpha"), 2), fmt_interval(r.get("alpha_lo"), r.get("alpha_hi"), unit=True, digits=2),
             fmt_unit(r.get("omega"), 2)]
            + ([self.study.label(r.get("weakest_item")) if pd.notna(r.get("weakest_item")) else MISSING,
                fmt_unit(r.get("min_item_rest"), 2), fmt_unit(r.get("alpha_if_weakest_deleted"), 2)]
               if "weakest_item" in df.columns else [])
            for _, r in df.iterrows()
        ]
        heads = ["Scale", "Wave", "n", "\u03b1", "95% CI of \u03b1", "\u03c9"]
        if "weakest_item" in df.columns:
            heads += ["Weakest item", "Item\u2013rest r", "\u03b1 without it"]
        table = Table("Internal consistency of each scale per wave", heads, rows, key="reliability",
                      note="\u03b1: Cronbach's alpha; \u03c9: McDonald's omega from a one-factor model. "
                           + (f"CI of \u03b1: {', '.join(sorted(set(df['ci_method'].dropna().astype(str))))}. "
                              if "ci_method" in df.columns and df["ci_method"].notna().any() else "")
                           + self._notes(df, "scale") + self._source("reliability"))
        return self._table(table)

    def _invariance(self) -> str:
        df = self.tables.get("invariance")
        if df is None:
            return _absent("Measurement invariance was not tested (results/scores/invariance.csv is absent).")
        if not len(df) and not self.study.scale_names and self.study.labels:
            return _absent("The codebook declares no multi-item scale: measurement invariance applies to "
                           "scales only, not to single measures.")
        if not len(df):
            return _absent("Measurement invariance was not tested for any scale (invariance: scales: []).")
        deltas = [c for c in ("delta_cfi", "delta_rmsea", "delta_srmr") if c in df.columns]
        has_freed = "freed" in df.columns and df["freed"].fillna("").astype(str).str.strip().ne("").any()
        rows = []
        for _, r in df.iterrows():
            row = [self.study.scale_label(r.get("scale")), _pretty(r.get("step", "")), fmt_chisq(r.get("chisq"), r.get("df")),
                   fmt_unit(r.get("cfi")), fmt_unit(r.get("rmsea")), fmt_unit(r.get("srmr"))]
            if "delta_chisq" in df.columns:
                row.append(fmt_chisq(r.get("delta_chisq"), r.get("delta_df")).replace("\u03c7\u00b2", "\u0394\u03c7\u00b2"))
                row.append(fmt_p(r.get("delta_p")))
            row += [fmt_unit(r.get(c)) for c in deltas]
            row.append(_pretty(r.get("decision", MISSING)))
            if has_freed:
                row.append(_value_text(r.get("freed")) if pd.notna(r.get("freed")) and str(r.get("freed")) else MISSING)
            rows.append(row)
        heads = ["Scale", "Step", "\u03c7\u00b2(df)", "CFI", "RMSEA", "SRMR"]
        if "delta_chisq" in df.columns:
            heads += ["\u0394\u03c7\u00b2(\u0394df)", "p of \u0394\u03c7\u00b2"]
        heads += ["\u0394" + c.split("_", 1)[1].upper() for c in deltas] + ["Decision"] + (["Freed"] if has_freed else [])
        table = Table("Longitudinal measurement invariance: nested steps", heads, rows, key="invariance",
                      note="Each step adds equality constraints over waves to the step before (configural: same "
                           "pattern; metric: equal loadings; scalar: equal intercepts); \u0394 compares a step with "
                           "the one before. A step holds when CFI drops by at most .01 (Cheung & Rensvold, 2002). "
                           "Freed: intercepts left free for partial invariance. " + self._notes(df, "scale")
                           + self._source("invariance"))
        summary = []
        for scale, part in df.groupby("scale", sort=True):
            held = [str(r["step"]) for _, r in part.iterrows() if str(r.get("decision")) in {"holds", "baseline"}]
            level = held[-1] if held else None
            label = self.study.scale_label(scale)
            if level is None:
                summary.append(f"{label}: no invariance step could be established.")
            elif level == "configural":
                summary.append(f"{label}: only the configural model holds, so scale means are not comparable over waves.")
            else:
                summary.append(f"{label}: {level} invariance holds"
                               + (" (partial)." if has_freed and part["freed"].fillna("").astype(str).str.strip().ne("").any() else "."))
        return self._table(table) + "".join(_p(esc(s_)) for s_ in summary)

    # ------------------------------------------------------------------ growth
    def growth(self) -> Fragment:
        """Fit of each growth model, model comparison, estimates and trajectories."""
        fit = self.tables.get("growth_fit")
        if fit is None:
            return Fragment(_absent("No growth model was fitted (results/growth/fit.csv is absent)."), "growth")
        out = ["<h3>Model fit</h3>", self._fit(fit)]
        out += ["<h3>Model comparison</h3>", self._comparison()]
        out += ["<h3>Parameter estimates</h3>", self._estimates()]
        out += ["<h3>Observed and implied trajectories</h3>", self._trajectories()]
        cond = self.tables.get("growth_conditional_tests")
        if cond is not None and len(cond):
            out += ["<h3>Predictors of growth</h3>",
                    self._conditional("growth_conditional", "growth_conditional_tests", "conditional")]
        return Fragment("".join(out), "growth")

    def _conditional(self, effects_key: str, tests_key: str, key: str) -> str:
        """Paths of a conditional growth model (one table per outcome) and the joint test per predictor."""
        tests = self.tables.get(tests_key)
        eff = self.tables.get(effects_key)
        html = []
        confirm = "confirmed" in tests.columns
        for outcome, part in tests.groupby("outcome", sort=False):
            label = self.study.scale_label(outcome)
            n = part["n"].dropna()
            excl = part["n_excluded"].dropna()
            people = (f"{fmt_count(n.iloc[0])} people" if len(n) else "")
            if len(excl) and int(excl.iloc[0]):
                k = int(excl.iloc[0])  # a count of people: small counts are not shown (report.min_cell)
                shown = fmt_count(k) if k >= self.min_cell else f"fewer than {self.min_cell}"
                people += (f"; {shown} with outcome data left out because a predictor value "
                           "is missing (listwise on the predictors)")
            sub = eff[eff["outcome"] == outcome] if eff is not None and "outcome" in eff.columns else None
            if sub is not None and len(sub):
                rows = []
                for _, r in sub.iterrows():
                    term = self.study.label(r["predictor"])
                    if isinstance(r.get("level"), str) and r["level"]:
                        term += (f": {self.study.level_label(r['predictor'], r['level'])} vs "
                                 f"{self.study.level_label(r['predictor'], r['reference'])}")
                    rows.append([term, str(r["factor"]), _sig(r["estimate"]), _sig(r["se"]),
                                 fmt_number(r["z"]), fmt_p(r["p"]), fmt_number(r.get("std"))])
                html.append(self._table(Table(
                    f"{label}: growth factors regressed on the predictors ({part['model'].iloc[0]})",
                    ["Predictor", "Growth factor", "Estimate", "SE", "z", "p", "Std."], rows,
                    key=f"{key}-paths-{outcome}", numeric=[2, 3, 4, 5, 6],
                    note=f"{people}. Each path is the expected difference in the growth factor per unit of a "
                         "number (uncentred, so the intercept's mean is the level at zero) or between a "
                         "category level and its reference level, holding the other predictors constant. "
                         + self._source(effects_key))))
            rows = []
            for _, r in part.iterrows():
                row = [self.study.label(r["predictor"]) if isinstance(r.get("predictor"), str) and r["predictor"]
                       else MISSING, fmt_count(r["df"]) if pd.notna(r.get("df")) else MISSING,
                       fmt_number(r["wald"]), fmt_p(r["p"])]
                if confirm:
                    row += [fmt_p(r["p_holm"]), str(r["confirmed"])]
                rows.append(row + [str(r["note"]) if isinstance(r.get("note"), str) else ""])
            heads = ["Predictor", "df", "Wald \u03c7\u00b2", "p"] + (["p (Holm)", "Confirmed"] if confirm else []) + ["Note"]
            html.append(self._table(Table(
                f"{label}: joint test of each predictor (all its paths on the growth factors = 0)", heads, rows,
                key=f"{key}-tests-{outcome}", numeric=[1, 2, 3] + ([4] if confirm else []),
                note="Wald test of all paths of a predictor at once (every growth factor and, for a category, "
                     "every level against the reference); a predictor that could not be tested says why and is "
                     "not evidence of no association. " + self._source(tests_key))))
        return "".join(html)

    def _confirmation(self) -> str:
        """Held-out confirmation of the forest's top predictors (empty when not configured)."""
        tests = self.tables.get("confirmation_tests")
        if tests is None:
            return ""
        if not len(tests):
            return ("<h3>Held-out confirmation</h3>" + _p(esc(
                "No people were held out of the forest (forest.holdout is 0), so its findings are not confirmed "
                "here: they remain exploratory until tested in other data.")))
        held = tests["n_held_out"].dropna()
        n_held = fmt_count(held.iloc[0]) if len(held) else MISSING
        intro = (f"The forest above is exploration: {n_held} people were held out at random (seeded) before it "
                 "was grown, and it never saw them. The held-out model below is confirmation: the forest's top "
                 "predictors are tested in a conditional growth model fitted to those held-out people alone. A "
                 "predictor is called confirmed when the joint Wald test of all its paths rejects at .05 after "
                 "Holm's adjustment over the predictors tested. These are associations, not causal effects, and "
                 "a linear path on the growth factors cannot show a moderator that changes only the spread of the "
                 "trajectories.")
        if (tests["predictor"].fillna("") == "").all():
            return "<h3>Held-out confirmation</h3>" + _p(esc(intro)) + _p(esc(str(tests["note"].iloc[0]) + "."))
        verdicts = []
        for word, text in (("yes", "Confirmed in the held-out people"), ("no", "Not confirmed"),
                           ("not tested", "Could not be tested (see the notes; not evidence of no association)")):
            names = [self.study.label(n) for n in tests.loc[tests["confirmed"].astype(str) == word, "predictor"]]
            if names:
                verdicts.append(f"{text}: {'; '.join(names)}.")
        return ("<h3>Held-out confirmation</h3>" + _p(esc(intro)) + _p(esc(" ".join(verdicts)))
                + self._conditional("confirmation", "confirmation_tests", "confirmation"))

    def _fit(self, fit: pd.DataFrame) -> str:
        rows = []
        fit = fit.copy()
        if "estimation" in fit.columns:  # the unrestricted maximum beside a bounded fit
            unres = fit["estimation"].astype(str).eq("unrestricted") & fit.duplicated(["outcome", "model"], keep=False)
            fit.loc[unres, "model"] = fit.loc[unres, "model"].astype(str) + " (unrestricted)"
        for _, r in fit.iterrows():
            rows.append([
                self.study.scale_label(r["outcome"]) if "outcome" in r and pd.notna(r.get("outcome")) else MISSING,
                str(r.get("model")), fmt_count(r.get("n")), fmt_chisq(r.get("chisq"), r.get("df")), fmt_p(r.get("p")),
                fmt_unit(r.get("cfi")), fmt_unit(r.get("tli")), fmt_unit(r.get("rmsea")),
                fmt_interval(r.get("rmsea_lo"), r.get("rmsea_hi"), unit=True), fmt_unit(r.get("srmr")),
                fmt_number(r.get("aic")), fmt_number(r.get("bic")),
            ])
        notes = []
        for flag, text in (("converged", "did not converge"), ("admissible", "has an inadmissible solution")):
            if flag in fit.columns:
                bad = fit[~fit[flag].astype(str).str.lower().isin({"true", "1", "1.0", "yes"})]
                notes += [f"{r['model']} {text}." for _, r in bad.iterrows()]
        if "note" in fit.columns:
            notes += [f"{r['model']}: {r['note']}." for _, r in fit.iterrows() if pd.notna(r["note"]) and str(r["note"])]
        table = Table("Fit of the latent growth curve models",
                      ["Outcome", "Model", "N", "\u03c7\u00b2(df)", "p", "CFI", "TLI", "RMSEA", "90% CI", "SRMR", "AIC", "BIC"],
                      rows, key="growth-fit",
                      note="Maximum likelihood with missing waves handled by full-information ML. SRMR is "
                           "Bentler's standardised root mean square residual over variances, covariances and "
                           "means (the correlation-residual version is srmr_corr in fit.csv). Cut-offs often "
                           "used for good fit (rules of thumb): CFI and TLI \u2265 .95, RMSEA \u2264 .06, SRMR \u2264 .08 "
                           "(Hu & Bentler, 1999). " + " ".join(notes) + (" " if notes else "") + self._source("growth_fit"))
        return self._table(table)

    def _comparison(self) -> str:
        df = self.tables.get("growth_comparison")
        if df is None or not len(df):
            return _absent("No model comparison (only one model, or results/growth/comparison.csv is absent).")
        df = df.copy()
        # the AIC and BIC of each model are in the fit table: here only their differences
        for ic in ("aic", "bic"):
            if {f"{ic}_a", f"{ic}_b"} <= set(df.columns) and f"delta_{ic}" not in df.columns:
                df[f"delta_{ic}"] = pd.to_numeric(df[f"{ic}_b"], errors="coerce") - pd.to_numeric(df[f"{ic}_a"], errors="coerce")
        shown = [c for c in _COMPARISON_ORDER if c in df.columns]
        shown += [c for c in df.columns if c not in _COMPARISON_ORDER and c not in _COMPARISON_HIDDEN]
        heads = [_head(c) for c in shown]
        rows = []
        for _, r in df.iterrows():
            row = []
            for c in shown:
                if c in ("outcome",):
                    row.append(self.study.scale_label(r[c]) if isinstance(r.get(c), str) else MISSING)
                elif c in ("model_a", "model_b", "preferred"):
                    row.append(_value_text(r.get(c)) if isinstance(r.get(c), str) and r.get(c) else MISSING)
                else:
                    row.append(_auto(c, r.get(c), None, self.study))
            rows.append(row)
        row_notes = []
        if "note" in df.columns:
            for _, r in df.iterrows():
                if isinstance(r.get("note"), str) and r["note"].strip():
                    row_notes.append(f"{r.get('model_a')} vs {r.get('model_b')}: {r['note'].strip().rstrip('.')}.")
        parts = []
        tests = [h for c, h in zip(shown, heads) if c in ("lr_chisq", "delta_chisq", "chisq_diff")]
        if tests:
            parts.append(f"{tests[0]}: likelihood-ratio test of the smaller model against the larger one "
                         "(twice the difference in log-likelihood, on df = the difference in free parameters).")
        deltas = [h for c, h in zip(shown, heads) if c in ("delta_aic", "delta_bic")]
        if deltas:
            parts.append(f"{' and '.join(deltas)}: larger model minus smaller; a negative value favours the "
                         "larger model. The AIC and BIC of each model are in the fit table.")
        if "preferred" in shown:
            parts.append("Preferred: the larger model when the test rejects at .05 and its BIC is lower, else the "
                         "smaller one; a model that did not converge or is inadmissible is never preferred.")
        table = Table("Comparison of nested growth models", heads, rows, key="growth-comparison",
                      numeric=[j for j, c in enumerate(shown) if c not in _TEXT_COLUMNS],
                      note=" ".join(parts + row_notes) + (" " if parts or row_notes else "")
                           + self._source("growth_comparison"))
        return self._table(table)

    def _estimates(self) -> str:
        df = self.tables.get("growth_estimates")
        if df is None or not len(df):
            return _absent("No parameter estimates (results/growth/estimates.csv is absent).")
        html = []
        keys = ["outcome", "model"] if "outcome" in df.columns else ["model"]
        for key, part in df.groupby(keys, sort=False):
            key = key if isinstance(key, tuple) else (key,)
            title = " \u2014 ".join([self.study.scale_label(key[0])] + [str(k) for k in key[1:]]) if len(key) > 1 else str(key[0])
            waves = {str(w) for w in self.study.waves}
            rows = [[_parameter_text(str(r.get("parameter")), waves), fmt_estimate(r.get("estimate")),
                     fmt_estimate(r.get("se")),
                     fmt_number(r.get("z")), fmt_p(r.get("p")), fmt_number(r.get("std"))] for _, r in part.iterrows()]
            html.append(self._table(Table(f"Estimates of the {title} model",
                                          ["Parameter", "Estimate", "SE", "z", "p", "Std."], rows,
                                          key=f"estimates-{'-'.join(map(str, key))}",
                                          note="Std.: standardised estimate. Growth factors: intercept (level at "
                                               "time 0), slope, quadratic or shape; time is scored as in the codebook. "
                                               + self._source("growth_estimates"))))
        return "".join(html)

    def implied_means(self, outcome: str | None, model: str, times: list[float]) -> np.ndarray | None:
        """Mean trajectory a growth model implies at ``times``, or None when it cannot be read.

        Polynomial models: ``mean(intercept) + mean(slope) t + mean(quadratic) t²``.
        Latent basis models: ``mean(intercept) + mean(shape) λ_j`` with the estimated
        loadings ``loading(shape, …)`` of the middle waves and the first and last
        loadings fixed at their time scores (parameter names of :mod:`wavetrail.growth`).
        """
        est = self.tables.get("growth_estimates")
        if est is None:
            return None
        part = est[est["model"].astype(str) == str(model)]
        if outcome is not None and "outcome" in est.columns:
            part = part[part["outcome"] == outcome]
        means: dict[str, float] = {}
        loadings: list[float] = []
        for _, r in part.iterrows():
            name = str(r["parameter"]).replace(" ", "")
            m = re.fullmatch(r"mean\((intercept|slope|quadratic|shape)\)", name)
            if m:
                means[m.group(1)] = float(r["estimate"])
            elif name.startswith("loading(shape,"):
                loadings.append(float(r["estimate"]))
        t = np.asarray(times, dtype=float)
        if "intercept" not in means:
            return None
        if "shape" in means:
            if len(loadings) == len(t):
                lam = np.asarray(loadings)
            elif len(loadings) == len(t) - 2:
                lam = np.asarray([t[0], *loadings, t[-1]])
            else:
                return None
            return means["intercept"] + means["shape"] * lam
        return means["intercept"] + means.get("slope", 0.0) * t + means.get("quadratic", 0.0) * t**2

    def _trajectories(self) -> str:
        fit = self.tables["growth_fit"]
        if self.tables.get("scores") is None:
            return _absent("Scale scores are absent, so observed trajectories cannot be shown.")
        from wavetrail.report.plots import trajectory_figure

        html = []
        outcomes = list(pd.unique(fit["outcome"])) if "outcome" in fit.columns else [None]
        scales = set(self.tables["scores"]["scale"].unique())
        for outcome in outcomes:
            scale = outcome if outcome in scales else (sorted(scales)[0] if len(scales) == 1 else None)
            if scale is None:
                continue
            obs = self.observed_means(scale)
            part = fit if outcome is None else fit[fit["outcome"] == outcome]
            implied, missing = [], []
            for model in part["model"]:
                curve = self.implied_means(outcome, model, list(obs["time"]))
                if curve is None:
                    missing.append(str(model))
                else:
                    implied.append(pd.DataFrame({"model": model, "time": obs["time"], "expected": curve}))
            implied_df = pd.concat(implied, ignore_index=True) if implied else pd.DataFrame(columns=["model", "time", "expected"])
            waves, times = list(obs["wave"]), list(obs["time"])
            fig, data = trajectory_figure(obs, implied_df, waves=waves, times=times, unit=self.study.time_unit,
                                          ylabel=self._unit_label(scale))
            label = self.study.scale_label(scale)
            caption = (f"{label}: observed wave means (95% CI) and the mean trajectory implied by each growth model.")
            if missing:
                caption += f" No implied curve for {', '.join(missing)} (its factor means are not in estimates.csv)."
            html.append(self._figure(f"trajectories-{scale}", fig, data, caption,
                                     f"{label} over waves: observed means with confidence intervals and model-implied lines."))
        return "".join(html) or _absent("No growth outcome matches a scored scale.")

    # ------------------------------------------------------------------ moderators
    def moderators(self) -> Fragment:
        """Variable importance, expected trajectories of the top predictors, interactions."""
        imp = self.tables.get("importance")
        forest = self.settings.get("forest") or {}
        nothing = imp is None and self.tables.get("dependence") is None and self.tables.get("interactions") is None
        if nothing and forest.get("enabled"):
            return Fragment(_absent("A moderator forest is configured, but its results are absent "
                                    "(results/forest/importance.csv); run the build to grow it."), "moderators")
        if nothing:
            return Fragment(_p(esc(
                "No moderator forest is configured for this project, so no predictors were screened. "
                "Add a forest section to config/config.yaml to screen candidate predictors of the growth "
                "parameters.")), "moderators")
        caution = f'<div class="wt-caution" role="note"><p>{esc(EXPLORATORY)}</p></div>'
        caution += self._forest_overview()
        if imp is None:
            return Fragment(caution + _absent("Variable importance is absent (results/forest/importance.csv).")
                            + self._confirmation(), "moderators")
        values = pd.to_numeric(imp["importance"], errors="coerce")
        if len(imp) and values.isna().all():
            return Fragment(caution + _p(esc(self._no_test_text(imp))) + self._confirmation(), "moderators")
        if _found_nothing(imp):
            alpha = forest.get("alpha")
            level = f" at \u03b1 = {fmt_unit(alpha, 2)}" if alpha is not None else ""
            untested = imp.loc[values.isna(), "predictor"].tolist()
            trees = f"{fmt_count(forest['trees']) + ' ' if forest.get('trees') else ''}trees"
            split = self._trees_split()
            if split:
                text = (f"{fmt_count(split)} of the forest's {trees} split at least once{level}, but no predictor "
                        f"has a positive permutation importance: permuting it did not lower the out-of-bag fit, so "
                        f"the splits did not carry over to the people the trees did not draw, as splits found by "
                        f"chance would not. There are no expected trajectories or interactions to show; in this "
                        f"sample the tested predictors do not tell apart who develops differently.")
            else:
                text = (f"The forest of {trees} found no split: "
                        f"no tested predictor was associated with differences in the growth trajectories strongly "
                        f"enough to pass the split test{level}, so there are no expected trajectories or "
                        f"interactions to show. In this sample the growth model fits everyone alike as far as the "
                        f"tested predictors can tell.")
            if untested:
                text += (f" {fmt_count(len(untested))} predictor(s) could never be tested and are not evidence of "
                         f"no association: {', '.join(self.study.label(n) for n in untested[:10])}"
                         f"{' ...' if len(untested) > 10 else ''} (see the table).")
            return Fragment(caution + _p(esc(text)) + self._importance(imp, figure=False) + self._confirmation(),
                            "moderators")
        out = [caution, "<h3>Variable importance</h3>", self._importance(imp)]
        out += ["<h3>What differs between the groups the trees form</h3>", self._differences(imp)]
        out += ["<h3>Expected trajectories of the top predictors</h3>", self._dependence(imp)]
        out += ["<h3>Interactions between predictors</h3>", self._interactions(), self._pair_table()]
        out.append(self._confirmation())
        return Fragment("".join(out), "moderators")

    def _trees_split(self) -> int:
        """How many trees split at least once (results/forest/overview.csv), 0 when unknown."""
        ov = self.tables.get("forest_overview")
        if ov is None or not len(ov) or "trees_split" not in ov.columns:
            return 0
        value = pd.to_numeric(ov["trees_split"], errors="coerce").iloc[0]
        return 0 if pd.isna(value) else int(value)

    def _forest_overview(self) -> str:
        """Does the forest generalise (out-of-bag gain), and how many node fits failed."""
        ov = self.tables.get("forest_overview")
        if ov is None or not len(ov):
            return ""
        r = ov.iloc[0]
        gain, se = float(r["gain"]), float(r["se"])
        lo, hi = gain - 1.96 * se, gain + 1.96 * se
        if int(r["trees_split"]) == 0:
            return ("<h3>Does the forest generalise?</h3>"
                    + _p(esc(f"No tree split, so every tree is the single growth model and there is no gain to "
                             f"measure (forest: minimum node size {fmt_count(r['min_size'])}; 0 of "
                             f"{fmt_count(r['trees'])} trees split).")))
        if np.isfinite(lo) and lo > 0:
            verdict = ("The forest predicts the trajectories of people it was not grown on better than the single "
                       "growth model: the predictors carry information about who develops differently.")
        elif np.isfinite(hi) and hi < 0:
            verdict = ("The forest predicts the trajectories of people it was not grown on worse than the single "
                       "growth model: its splits do not generalise, so read the rankings below with great caution.")
        else:
            verdict = ("The forest does not predict the trajectories of people it was not grown on measurably better "
                       "than the single growth model: the rankings below may reflect noise.")
        rows = [[fmt_count(r["people"]), fmt_number(r["loglik_forest"], 1), fmt_number(r["loglik_single"], 1),
                 fmt_number(gain, 1), fmt_number(se, 1), f"{fmt_number(lo, 1)}\u00a0to\u00a0{fmt_number(hi, 1)}",  # one line
                 _sig(r["gain_per_person"], 3)]]
        html = "<h3>Does the forest generalise?</h3>" + _p(esc(verdict))
        html += self._table(Table("Out-of-bag log-likelihood: forest against the single growth model",
                                  ["People", "Forest", "Single model", "Gain", "SE", "95% interval", "Gain per person"],
                                  rows, numeric=[0, 1, 2, 3, 4, 6], key="forest_overview",
                                  note="Each person is scored only by the trees that did not draw them: the forest's "
                                       "density (the average over those trees of the density of the person's waves "
                                       "under their leaf's growth model) against the same trees' root models, fitted "
                                       "to the same subsamples. Gain = summed difference of the log densities; SE = "
                                       "\u221an \u00d7 SD of the per-person differences. Near zero: no moderation "
                                       "the forest can use. " + self._source("forest_overview")))
        facts = [f"minimum node size {fmt_count(r['min_size'])}",
                 f"Monte Carlo split tests below {fmt_count(r['mc_below'])} people",
                 f"{fmt_count(r['trees_split'])} of {fmt_count(r['trees'])} trees split at least once"]
        failed = int(r["failed_fits"])
        if failed:
            facts.append(f"{fmt_count(failed)} node model(s) in {fmt_count(r['trees_with_failed_fits'])} tree(s) did "
                         "not converge even after retries and were kept as leaves (results/forest/trees.csv)")
        else:
            facts.append("every node model converged")
        bad = r.get("inadmissible_leaves")
        if bad is not None and pd.notna(bad) and int(bad) > 0:
            facts.append(f"{fmt_count(int(bad))} of {fmt_count(int(r['leaves']))} leaves had an inadmissible growth "
                         "model (a negative variance or a correlation beyond ±1, common in small nodes); "
                         "people routed there out of bag were scored under the nearest admissible parent node "
                         "(results/forest/trees.csv)")
        html += _p(esc("Forest: " + "; ".join(facts) + "."))
        return html

    def _no_test_text(self, imp: pd.DataFrame) -> str:
        forest = self.settings.get("forest") or {}
        ov = self.tables.get("forest_overview")
        size = None
        if ov is not None and len(ov):
            size = int(ov.iloc[0]["min_size"])
        reasons = {}
        for col, label in (("untested", None),):
            for text in imp.get(col, pd.Series(dtype=str)).fillna(""):
                for part in str(text).split(";"):
                    part = part.strip()
                    if part:
                        why = part.rsplit(" ", 1)[0]
                        reasons[why] = reasons.get(why, 0) + 1
        why = ", ".join(sorted(reasons)) or "node size"
        setting = (f"forest.min_size (now {size})" if size is not None else "forest.min_size")
        people = int(ov.iloc[0]["people"]) if ov is not None and len(ov) else None
        share = float(forest.get("sample_share", 0.632) or 0.632)
        if people is not None and size is not None and round(share * people) < 2 * size:
            drawn = int(round(share * people))
            return (f"No split was possible: each tree draws about {fmt_count(drawn)} of the {fmt_count(people)} "
                    f"people, fewer than the {fmt_count(2 * size)} that two children of the minimum node size "
                    f"({size}, what the growth model needs) would hold, so none of the {fmt_count(len(imp))} "
                    f"candidate predictors could be tested. This is not evidence of no association: with so few "
                    f"people the forest cannot screen predictors. Test a predictor you chose in advance with a "
                    f"conditional growth model (growth.predictors) instead, or turn the forest off "
                    f"(forest.enabled: false).")
        return (f"No split was possible: none of the {fmt_count(len(imp))} candidate predictors could be tested at "
                f"any node (reasons: {why}). This is not evidence of no association. Lower {setting} or raise "
                f"forest.sample_share so that a tree's subsample can hold two children of the minimum size; for "
                f"\u201ctoo few people in a category\u201d, merge rare levels in the codebook."
                + (f" The forest had {fmt_count(forest['trees'])} trees." if forest.get("trees") else ""))

    def _importance(self, imp: pd.DataFrame, figure: bool = True) -> str:
        from wavetrail.report.plots import importance_figure

        imp = imp.sort_values(["rank", "predictor"], kind="stable", na_position="last").reset_index(drop=True)
        rows = []
        for _, r in imp.iterrows():
            tested = r.get("tested")
            cand = r.get("candidate")
            nodes = (f"{fmt_count(tested)} of {fmt_count(cand)}" if tested is not None and not pd.isna(tested)
                     else MISSING)
            untested = r.get("untested")
            untested = "" if untested is None or pd.isna(untested) else str(untested)
            if pd.isna(r["importance"]):
                note = "never tested: " + untested if untested else "never tested"
            else:
                note = ("could not be tested at some nodes: " + untested) if untested else ""
                se = pd.to_numeric(r.get("se"), errors="coerce")
                if r["importance"] > 0 and pd.notna(se) and r["importance"] - 1.96 * se <= 0:
                    note = "; ".join(x for x in ("uncertain: the ±1.96 SE interval includes 0", note) if x)
            rows.append([fmt_count(r["rank"]) if not pd.isna(r["rank"]) else MISSING,
                         self.study.label(r["predictor"]), str(r["predictor"]),
                         _sig(r["importance"]), _sig(r.get("se")), nodes, note])
        html = self._table(Table("Permutation importance of the candidate predictors",
                                 ["Rank", "Predictor", "Variable", "Importance", "SE", "Tested at nodes", "Note"],
                                 rows, numeric=[0, 3, 4],
                                 key="importance",
                                 note="Importance: mean drop in out-of-bag log-likelihood of the growth model when "
                                      "the predictor is permuted, over trees; SE over trees. Tested at nodes: the "
                                      "nodes where the predictor could be tested, of those where it was a candidate; "
                                      "a predictor never tested has no importance (\u2014), which is not the same "
                                      "as no association. Reasons: node size (the node or subsample is smaller than "
                                      "twice the minimum node size), too few people in a category, no variation. "
                                      + self._source("importance")))
        top = imp.dropna(subset=["importance"]).head(TOP_IMPORTANCE)
        if figure and len(top):
            fig, data = importance_figure(top, self.study.labels)
            html += self._figure("importance", fig, data,
                                 f"Permutation importance of the {len(top)} most important predictors (\u00b11.96 SE).",
                                 "Dot plot of predictor importance with error bars, most important on top.")
        return html

    def _differences(self, imp: pd.DataFrame) -> str:
        df = self.tables.get("differences")
        if df is None or not len(df):
            return _absent("The parts of the growth model that differ are absent (results/forest/differences.csv).")
        ranked = imp.dropna(subset=["importance"]).sort_values(["rank", "predictor"], kind="stable")["predictor"]
        order = [p for p in ranked if p in set(df["predictor"])]
        rows, notes = [], []
        for name in order:
            part = df[df["predictor"] == name].set_index("part")
            shares = {k: float(part.loc[k, "share"]) if k in part.index else np.nan
                      for k in ("means", "growth (co)variances", "residual variances")}
            splits = int(part["splits"].iloc[0]) if len(part) else 0
            main = _main_part(shares, splits)
            rows.append([self.study.label(name), fmt_count(splits)] +
                        [fmt_percent(shares[k]) if not np.isnan(shares[k]) else MISSING for k in shares] +
                        [_PART_TEXT.get(main, main) if splits else MISSING])
            if main in ("growth (co)variances", "residual variances"):
                notes.append(self.study.label(name))
        html = self._table(Table("Which parts of the growth model differ between the groups the trees form",
                                 ["Predictor", "Splits", "Means of growth factors", "Growth-factor (co)variances",
                                  "Residual variances", "Mainly"], rows, numeric=[1, 2, 3, 4], key="differences",
                                 note="Share of each split's score statistic carried by each part of the growth model "
                                      "(the statistic for \u201conly this part differs\u201d, normalised over the "
                                      "three parts), averaged over the predictor's splits with the likelihood ratio "
                                      "as weight. Mainly: the part with at least half of the share, over at least "
                                      f"{MIN_SPLITS_PART} splits. " + self._source("differences")))
        if notes:
            html += _p(esc("Mainly a difference in spread rather than in average development: "
                           + ", ".join(notes) + ". Their expected trajectories can look alike; the bands "
                           "(\u00b11 SD of individual trajectories) in the figure below show the difference."))
        return html
    def _dependence(self, imp: pd.DataFrame) -> str:
        dep = self.tables.get("dependence")
        if dep is None or not len(dep):
            return _absent("Expected trajectories are absent (results/forest/dependence.csv).")
        from wavetrail.report.plots import dependence_figure

        ranked = imp.sort_values(["rank", "predictor"], kind="stable")["predictor"].tolist()
        available = [p for p in ranked if p in set(dep["predictor"])]
        top = available[:TOP_DEPENDENCE]
        # a predictor that mainly changes the spread is shown too, since its bands are the point
        top += [p for p in available[TOP_DEPENDENCE:] if p in self._spread_predictors()][:TOP_SPREAD_EXTRA]
        if not top:
            return _absent("None of the top predictors has expected trajectories in dependence.csv.")
        times = _sorted_waves(dep["time"])
        waves = [self._wave_at(t) for t in times]
        scale = (self.settings.get("forest") or {}).get("outcome")
        ylabel = "Expected " + (self._unit_label(scale) if scale else "outcome")
        dep = dep.copy()
        dep["legend"] = [self._legend(n, lv, v, lb) for n, lv, v, lb in
                         zip(dep["predictor"], dep["level"], dep["value"], _col(dep, "label"))]
        fig, data = dependence_figure(dep, top, self.study.labels, waves=waves, times=times,
                                      unit=self.study.time_unit, ylabel=ylabel)
        html = self._figure("dependence", fig, data,
                            "Expected trajectories (partial dependence) at low, average and high values of the top "
                            "predictors, or at each category; bands: \u00b11 SD of individual trajectories.",
                            "Line charts of expected trajectories, one panel per predictor, one line per predictor value.")
        first, last = times[0], times[-1]
        rows = []
        for name in top:
            part = dep[dep["predictor"] == name]
            for level, curve in part.groupby("level", sort=False):
                a = curve.loc[curve["time"] == first, "expected"]
                b = curve.loc[curve["time"] == last, "expected"]
                a = float(a.iloc[0]) if len(a) else np.nan
                b = float(b.iloc[0]) if len(b) else np.nan
                sd = curve.loc[curve["time"] == last, "sd"] if "sd" in curve else pd.Series(dtype=float)
                sd = float(sd.iloc[0]) if len(sd) else np.nan
                level_text, value_text = self._point(name, level, curve["value"].iloc[0], _first(curve, "label"))
                rows.append([self.study.label(name), level_text, value_text,
                             fmt_number(a), fmt_number(b), fmt_number(b - a), fmt_number(sd)])
        html += self._table(Table("Expected outcome at the first and last wave by predictor value",
                                  ["Predictor", "Level", "Value", f"Wave {self._wave_at(first)}",
                                   f"Wave {self._wave_at(last)}", "Change", f"SD at wave {self._wave_at(last)}"],
                                  rows, numeric=[2, 3, 4, 5, 6],
                                  key="dependence",
                                  note="SD: spread of individual trajectories around the expected one (growth-factor "
                                       "and residual variances of the leaves, mixed over trees and people). "
                                       + self._source("dependence")))
        return html

    def _spread_predictors(self) -> set:
        df = self.tables.get("differences")
        if df is None or not len(df):
            return set()
        out = set()
        for name, part in df.groupby("predictor", sort=False):
            shares = dict(zip(part["part"], pd.to_numeric(part["share"], errors="coerce")))
            if _main_part(shares, int(part["splits"].iloc[0])) in ("growth (co)variances", "residual variances"):
                out.add(name)
        return out

    def _point(self, name, level, value, label=None) -> tuple[str, str]:
        """(level text, value text) of one point of an expected-trajectory grid.

        A category shows the codebook's label of its code (else the label the forest
        wrote, else the code) and no separate value; a numeric predictor's grid point
        shows its name (low, average, high) and its value with two decimals.
        """
        if _code(level) == _code(value):  # a category: the level is its code
            if str(name) in self.study.levels:
                return self.study.level_label(name, level), MISSING
            text = str(label) if label is not None and not _missing(label) else _code(level)
            return text, MISSING
        return str(level), _number_text(value)

    def _legend(self, name, level, value, label=None) -> str:
        """A figure legend entry: a category's label, or ``low (4.10)`` for a numeric grid point."""
        text, number = self._point(name, level, value, label)
        return text if number == MISSING else f"{text} ({number})"

    def _wave_at(self, t) -> str:
        for w, s in zip(self.study.waves, self.study.time_scores):
            if float(s) == float(t):
                return str(w)
        return f"{float(t):g}"

    def _interactions(self) -> str:
        df = self.tables.get("interactions")
        if df is None:
            return _absent("Interaction strengths are absent (results/forest/interactions.csv).")
        if not len(df):
            return _p("No pair of predictors was probed for an interaction.")
        df = df.sort_values(["h", "predictor_a", "predictor_b"], ascending=[False, True, True], kind="stable")
        rows = [[self.study.label(r["predictor_a"]), self.study.label(r["predictor_b"]), fmt_unit(r["h"], 2)]
                for _, r in df.iterrows()]
        return self._table(Table("Interaction strength of predictor pairs", ["Predictor A", "Predictor B", "H"], rows,
                                 numeric=[2], key="interactions",
                                 note="H: Friedman and Popescu's (2008) H statistic, the share of the joint effect of "
                                      "the pair on the expected trajectory that the two single effects do not explain "
                                      "(0 = none). " + self._source("interactions")))

    def _pair_table(self) -> str:
        df = self.tables.get("dependence_pairs")
        if df is None or not len(df):
            return ""
        times = _sorted_waves(df["time"])
        first, last = times[0], times[-1]
        rows = []
        keys = ["predictor_a", "level_a", "predictor_b", "level_b"]
        for (pa, la, pb, lb), curve in df.groupby(keys, sort=False):
            a = curve.loc[curve["time"] == first, "expected"]
            b = curve.loc[curve["time"] == last, "expected"]
            a = float(a.iloc[0]) if len(a) else np.nan
            b = float(b.iloc[0]) if len(b) else np.nan
            text_a = self._legend(pa, la, curve["value_a"].iloc[0], _first(curve, "label_a"))
            text_b = self._legend(pb, lb, curve["value_b"].iloc[0], _first(curve, "label_b"))
            rows.append([self.study.label(pa), text_a, self.study.label(pb), text_b,
                         fmt_number(a), fmt_number(b), fmt_number(b - a)])
        return self._table(Table("Expected outcome for a pair of predictors set together",
                                 ["Predictor A", "Level A", "Predictor B", "Level B", f"Wave {self._wave_at(first)}",
                                  f"Wave {self._wave_at(last)}", "Change"], rows, numeric=[4, 5, 6],
                                 key="dependence_pairs",
                                 note="Two-way partial dependence: the forest's average expected trajectory with both "
                                      "predictors set to the levels shown (numeric ones at mean - 1 SD, mean, "
                                      "mean + 1 SD), the pair named in forest.interaction_pairs or else the pair with "
                                      "the largest H. Forest averages are shrunk towards the overall trajectory. "
                                      + self._source("dependence_pairs")))

    # ------------------------------------------------------------------ provenance
    def provenance(self) -> Fragment:
        """Registered data, seeds, environment, code revision, plan deviations, how to rebuild."""
        out = ["<h3>Registered raw data</h3>", self._registry()]
        records = _in.read_ledger(self.root)
        out += ["<h3>Seeds</h3>", self._seeds(records)]
        out += ["<h3>Software environment</h3>", self._environment(records)]
        out += ["<h3>Code revision</h3>", self._revision(records)]
        out += ["<h3>Deviations from the analysis plan</h3>", self._plan()]
        out += ["<h3>Rebuilding and verifying</h3>", self._rebuild()]
        return Fragment("".join(out), "provenance")

    def _registry(self) -> str:
        pairs = _in.read_registry(self.root)
        if not pairs:
            return _absent(f"No raw data file is registered ({_in.REGISTRY} is absent or empty).")
        rows = [[f"data/{p}", h] for p, h in pairs]
        t = Table("Raw data files and their registered SHA-256 hashes", ["File", "SHA-256"], rows, numeric=[],
                  mono=[1], key="registry", note=f"From {_in.REGISTRY}; the first workflow step refuses to run when a file "
                                       "differs from its hash.")
        return self._table(t)

    def _seeds(self, records: list[dict]) -> str:
        master = self.settings.get("seed")
        text = _p(f"Master seed: <code>{esc(master)}</code>. Every job derives its own seed from the master seed, "
                  "the step name and its wildcards, so results do not depend on the order in which jobs run.") \
            if master is not None else _absent("No master seed is set in config/config.yaml.")
        if not records:
            return text + _absent("No ledger records yet (results/ledger/), so per-job seeds cannot be listed.")
        rows = [[str(r.get("step")), ", ".join(f"{k}={v}" for k, v in sorted((r.get("wildcards") or {}).items())) or MISSING,
                 str(r.get("seed"))] for r in sorted(records, key=_record_key)]
        return text + self._table(Table("Seeds of the recorded jobs", ["Step", "Wildcards", "Seed"], rows, numeric=[2],
                                        key="seeds", note="From the ledger records in results/ledger/."))

    def _environment(self, records: list[dict]) -> str:
        lock = _in.read_lock(self.root / self.settings["lock"]) if self.settings.get("lock") else {}
        parts = []
        if lock:
            parts.append(_p(f"Locked environment: <code>{esc(self.settings['lock'])}</code> pins "
                            f"{fmt_count(len(lock['pins']))} packages; its SHA-256 is "
                            f'<code class="wt-hash">{esc(lock["sha256"])}</code>.'))
        else:
            parts.append(_absent("No environment lock file (environment/requirements.lock) is available."))
        pythons = sorted({str(r.get("python")) for r in records if r.get("python")})
        platforms = sorted({str(r.get("platform")) for r in records if r.get("platform")})
        versions: dict[str, set[str]] = {}
        for r in records:
            for name, version in (r.get("packages") or {}).items():
                versions.setdefault(str(name), set()).add(str(version))
        if lock:
            for name in KEY_PACKAGES:
                if name in lock["pins"] and name not in versions:
                    versions[name] = {lock["pins"][name]}
        rows = [["Python", ", ".join(pythons) or MISSING]] if pythons else []
        rows += [["Platform", ", ".join(platforms)]] if platforms else []
        rows += [[name, ", ".join(sorted(v))] for name, v in sorted(versions.items())]
        if rows:
            parts.append(self._table(Table("Versions used by the recorded jobs", ["Software", "Version"], rows,
                                           numeric=[], key="environment",
                                           note="More than one version in a cell means the jobs ran in different "
                                                "environments.")))
        return "".join(parts)

    def _revision(self, records: list[dict]) -> str:
        """The code the outputs were built from, as a function of its bytes.

        The git commit itself is left to the ledger and the archive's ``bag-info.txt``:
        a rebuild from an archive runs in a fresh repository whose commit differs,
        and the report's bytes must depend on the inputs only.
        """
        files, digest = _in.code_fingerprint(self.root)
        text = _p(f"Code fingerprint: SHA-256 <code class=\"wt-hash\">{esc(digest)}</code> over the "
                  f"{fmt_count(len(files))} files of <code>config/</code> and <code>workflow/</code> "
                  "(each file's path and SHA-256, one per line, sorted by path). A rebuild from the same "
                  "code gives the same fingerprint. The git commit each job ran at is in its ledger record "
                  "(<code>wavetrail ledger</code>) and an archive's <code>bag-info.txt</code>.")
        states = {("uncommitted changes" if (r.get("git") or {}).get("dirty") else "clean")
                  for r in records if (r.get("git") or {}).get("commit")}
        commits = {str((r.get("git") or {}).get("commit")) for r in records if (r.get("git") or {}).get("commit")}
        if not commits:
            return text + _absent("No code revision is recorded (no ledger records, or the project is not a "
                                  "git repository).")
        if len(commits) > 1 or "uncommitted changes" in states:
            return text + _p("The outputs were not all built from one committed revision; commit and rebuild "
                             "before sharing the results.", "wt-absent")
        return text + _p("All recorded jobs ran at one committed revision without uncommitted changes.")

    def _plan(self) -> str:
        changes = _in.read_plan_changes(self.root)
        records = changes.to_dict("records")
        if any(str(rec.get("change")) == "not frozen" for rec in records):
            return _p("No analysis plan was frozen before the results were seen (<code>wavetrail plan freeze</code>), "
                      "so deviations from a plan cannot be shown. Say so in the paper.", "wt-absent")
        from wavetrail.plan import read_plan

        plan = read_plan(self.root) or {}
        when = f" on {esc(plan['frozen'])}" if plan.get("frozen") else ""
        head = _p(f"The analysis plan (configuration and codebook) was frozen{when}.")
        seen = plan.get("results_seen") or []
        if seen:
            head += _p(esc(f"It was frozen after results of {', '.join(map(str, seen))} already existed; "
                           "those results could have informed the plan."), "wt-absent")
        if not records:
            return head + _p("The configuration and codebook are exactly as frozen: no deviation.")
        cols = list(dict.fromkeys(k for rec in records for k in rec))
        rows = [[_value_text(rec.get(c)) for c in cols] for rec in records]
        return head + self._table(Table("Changes since the analysis plan was frozen",
                                        [_pretty(c).capitalize() for c in cols], rows, numeric=[], key="plan",
                                        note="Each change was made after the plan was frozen; report it in the paper."))

    def _rebuild(self) -> str:
        return (
            _p("Every table and figure in this report is rebuilt from the registered raw data by one command; "
               "the ledger shows which step wrote each output and whether its bytes still match; a reviewer "
               "archive can be verified, and rebuilt, without trusting the authors:")
            + '<pre class="wt-commands">wavetrail build             # rebuild what is out of date\n'
              "wavetrail ledger --drift    # outputs whose bytes no longer match their record\n"
              "wavetrail plan diff         # deviations from the frozen analysis plan\n"
              "wavetrail pack -o review.zip --raw stand-in\n"
              "wavetrail verify review.zip --rebuild</pre>"
        )


def open_report(project_root: str | Path = ".", tables: dict[str, str] | None = None,
                settings: dict[str, Any] | None = None) -> Report:
    """Open the report of the project at ``project_root`` (the notebook's first step).

    ``tables`` maps result table names to project-relative paths (missing names: the
    standard places); ``settings`` holds what the build passes (``title``, ``min_cell``,
    ``seed``, ``codebook``, ``lock``, ``forest``, ``figures``). Settings left out are
    read from ``config/config.yaml`` when there is one, so the notebook also runs on
    its own.
    """
    root = Path(project_root).resolve()
    settings = dict(settings or {})
    config_path = root / "config" / "config.yaml"
    if config_path.is_file():
        import yaml

        from wavetrail.errors import ConfigError

        try:
            config = yaml.safe_load(config_path.read_text(encoding="utf-8")) or {}
        except yaml.YAMLError as err:
            raise ConfigError(f"{config_path}: not valid YAML ({err})", hint="fix the file and rebuild") from None
        settings.setdefault("seed", config.get("seed"))
        settings.setdefault("codebook", config.get("codebook", "config/codebook.yaml"))
        settings.setdefault("min_cell", (config.get("report") or {}).get("min_cell", 5))
        settings.setdefault("forest", config.get("forest"))
        settings.setdefault("title", (config.get("report") or {}).get("title") or config.get("title"))
    settings.setdefault("lock", _in.OTHER_PATHS["lock"])
    given = dict(tables or {})
    if "lock" in given:
        settings["lock"] = given.pop("lock")
    loaded, paths = _in.load_tables(root, given)
    return Report(root, loaded, paths, settings)


_ATTRITION_HEADS = {"n_retained": "Retained", "n_new": "New", "n_dropped": "Dropped"}

#: packages whose versions the environment table always shows when the lock pins them
KEY_PACKAGES = ("wavetrail", "numpy", "pandas", "scipy", "matplotlib", "snakemake", "papermill", "nbconvert")

#: columns of comparison.csv in the order the report shows them (the others follow)
_COMPARISON_ORDER = ["outcome", "model_a", "model_b", "lr_chisq", "delta_chisq", "chisq_diff", "df", "delta_df",
                     "df_diff", "p", "delta_aic", "delta_bic", "preferred"]
#: columns of comparison.csv the report does not show as columns (AIC/BIC of each model are in the
#: fit table; the notes go under the table)
_COMPARISON_HIDDEN = {"aic_a", "aic_b", "bic_a", "bic_b", "note"}

_HEADS = {
    "outcome": "Outcome", "model_a": "Smaller model", "model_b": "Larger model", "lr_chisq": "LR \u03c7\u00b2", "delta_chisq": "\u0394\u03c7\u00b2",
    "delta_df": "\u0394df", "chisq_diff": "\u0394\u03c7\u00b2", "df_diff": "\u0394df", "p": "p", "df": "df",
    "delta_aic": "\u0394AIC", "delta_bic": "\u0394BIC", "delta_cfi": "\u0394CFI", "preferred": "Preferred",
    "test": "Test", "nested": "Nested", "note": "Note",
}
_ACRONYMS = {"aic": "AIC", "bic": "BIC", "cfi": "CFI", "tli": "TLI", "rmsea": "RMSEA", "srmr": "SRMR", "lr": "LR",
             "chisq": "\u03c7\u00b2", "df": "df", "se": "SE", "sd": "SD", "n": "n", "p": "p"}


def _head(column: str) -> str:
    """A column head: a known name's head, else its words with statistics' usual spelling.

    >>> _head("bic_a"), _head("lr_chisq"), _head("n_free")
    ('BIC a', 'LR \u03c7\u00b2', 'N free')
    """
    if column in _HEADS:
        return _HEADS[column]
    words = [_ACRONYMS.get(w.lower(), w) for w in str(column).split("_") if w]
    if not words:
        return str(column)
    if words[0] == str(column).split("_")[0]:
        words[0] = words[0].capitalize()
    return " ".join(words)


_TEXT_COLUMNS = {"outcome", "model_a", "model_b", "preferred", "test", "nested", "note", "decision"}
_UNIT_COLUMNS = re.compile(r"(^|_)(cfi|tli|rmsea|srmr|alpha|omega|h|r)($|_)")


def _auto(column: str, value, min_cell: int | None, study: _in.StudyInfo | None = None) -> str:
    """Format a cell by its column name (p-values, counts, fit indices, numbers, text)."""
    c = column.lower()
    if c in {"outcome"} and study is not None and isinstance(value, str):
        return study.scale_label(value)
    if c in _TEXT_COLUMNS or isinstance(value, str):
        return _value_text(value)
    if isinstance(value, (bool, np.bool_)):
        return fmt_bool(value)
    if c == "p" or c.startswith("p_") or c.endswith("_p"):
        return fmt_p(value)
    if c in {"df", "n"} or c.endswith("_df") or c.startswith("df_") or c.startswith("n_"):
        return fmt_small(value, min_cell) if (min_cell and c.startswith("n")) else fmt_count(value)
    if _UNIT_COLUMNS.search(c):
        return fmt_unit(value)
    if c in {"retention", "share"}:
        return fmt_percent(value)
    return fmt_number(value)


_FACTOR_NAMES = {"intercept", "slope", "quadratic", "shape"}
_PARAM = re.compile(r"^(mean|var|cov|loading|regress|intercept)\(([^,()]+)(?:,([^()]+))?\)$")


def _parameter_text(name: str, waves: set[str] = frozenset()) -> str:
    """``mean(slope)`` -> ``Mean of slope``; ``var(2)`` -> ``Residual variance at wave 2``.

    Observed variables of a growth model are named by their wave label (``wavetrail.growth``).
    """
    m = _PARAM.match(name.replace(" ", ""))
    if not m:
        return name
    kind, a, b = m.groups()
    if b is not None and b in waves:
        b = f"wave {b}"
    if a in waves:
        a = f"wave {a}"
        if kind == "var":
            return f"Residual variance at {a}"
    if kind == "mean":
        return f"Mean of {a}"
    if kind == "var":
        return f"Variance of {a}" if a in _FACTOR_NAMES or a.endswith("_cov") else f"Residual variance of {a}"
    if kind == "cov":
        return f"Covariance of {a} and {b}"
    if kind == "loading":
        return f"Loading of {b} on {a}"
    if kind == "regress":
        return f"Regression of {a} on {b}"
    return f"Intercept of {a}"


def _without_ids(message, rows) -> str:
    """A finding's message without the ids or row numbers it quotes (they point at single people)."""
    if message is None or (isinstance(message, float) and np.isnan(message)):
        return MISSING
    text = re.sub(r"\s*\((?:e\.g\.|(?:rows?|ids?)\b)[^)]*\)", "", str(message))
    if isinstance(rows, str) and rows.strip():
        entries = [e.strip() for e in re.split(r"[;,]", rows) if e.strip()]
        # a `file:row` entry is a position in a file: hidden where quoted whole, but its bare row
        # number is not an id (a message's wave labels 3, 4 must survive rows 3 and 4)
        places = [e for e in entries if re.fullmatch(r".+:\d+", e)]
        for place in sorted(set(places), key=len, reverse=True):
            text = text.replace(place, "\u2026")
        ids = " ".join(e for e in entries if e not in places)
        for token in sorted(set(re.findall(r"[A-Za-z0-9_.-]+", ids)), key=len, reverse=True):
            if any(ch.isdigit() for ch in token):
                text = re.sub(rf"(?<![A-Za-z0-9_.-]){re.escape(token)}(?![A-Za-z0-9_-])", "\u2026", text)
    return text


_PART_TEXT = {"means": "average development", "growth (co)variances": "spread of development",
              "residual variances": "wave-to-wave variability"}
#: fewest splits on a predictor before the report names the part of the model it mainly changes
MIN_SPLITS_PART = 3


def _main_part(shares: dict, splits: int) -> str:
    """The part with at least half of the share ('mixed' otherwise; 'too few splits' below MIN_SPLITS_PART)."""
    if splits < MIN_SPLITS_PART:
        return "too few splits"
    best = max(shares, key=lambda k: -1.0 if np.isnan(shares[k]) else shares[k])
    return best if shares[best] >= 0.5 else "mixed"


def _sig(x, digits: int = 3) -> str:
    """A number with ``digits`` significant digits (small importances stay readable), or \u2014."""
    try:
        x = float(x)
    except (TypeError, ValueError):
        return MISSING
    if not np.isfinite(x):
        return MISSING
    if x == 0:
        return "0"
    text = f"{x:.{digits}g}"
    if "e" in text:
        mant, exp = text.split("e")
        text = f"{mant} \u00d7 10^{int(exp)}"
    return text.replace("-", "\u2212")


def _value_text(value) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return MISSING
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _missing(value) -> bool:
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _first(df: pd.DataFrame, column: str):
    """The first value of ``column`` (None when the table has no such column or no row)."""
    return df[column].iloc[0] if column in df.columns and len(df) else None


def _number_text(value) -> str:
    """A number read from a table (also when the CSV column held text) with two decimals."""
    try:
        return fmt_number(float(value))
    except (TypeError, ValueError):
        return MISSING if _missing(value) else str(value)


def _wave_text(value) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return MISSING
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def _record_key(record: dict):
    return (str(record.get("step")), sorted((record.get("wildcards") or {}).items()))


def _found_nothing(imp: pd.DataFrame) -> bool:
    """True when no predictor has a positive importance (a forest of unsplit trees)."""
    if not len(imp):
        return True
    values = pd.to_numeric(imp["importance"], errors="coerce")
    return bool((values.fillna(0) <= 0).all())
