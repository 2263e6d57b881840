"""The report's figures, drawn from the result tables in wavetrail's figure style.

Each function returns ``(figure, data)``: the matplotlib figure and the tidy table
it shows, which :func:`wavetrail.figures.save_figure` writes beside the PNG and SVG.
Lines differ by colour (colour-vision-safe palette), line style and marker, so
they stay apart in greyscale.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pandas as pd

from wavetrail.figures import LINESTYLES, MARKERS, PALETTE, plt, style


def _wave_axis(ax, waves, times, unit: str | None):
    if len(times):
        ax.set_xticks(list(times))
        if list(map(str, waves)) != [f"{t:g}" for t in times]:
            ax.set_xticklabels([f"{w}\n({t:g})" for w, t in zip(waves, times)])
    label = "Wave (time score" + (f", {unit})" if unit else ")")
    ax.set_xlabel(label)


def attrition_figure(attrition: pd.DataFrame):
    """Participants present at each wave (count) with retention in percent on the right axis."""
    data = attrition[["wave", "n_present"]].copy()
    with style():
        fig, ax = plt.subplots(figsize=(6.0, 3.2), layout="constrained")
        x = np.arange(len(data))
        ax.plot(x, data["n_present"], color=PALETTE[0], marker=MARKERS[0], linestyle=LINESTYLES[0])
        for xi, n in zip(x, data["n_present"]):
            ax.annotate(f"{int(n):,}", (xi, n), textcoords="offset points", xytext=(0, 6), ha="center", fontsize=8)
        ax.set_xticks(x)
        ax.set_xticklabels([str(w) for w in data["wave"]])
        ax.set_xlabel("Wave")
        ax.set_ylabel("Participants present (n)")
        top = float(data["n_present"].max()) if len(data) else 1.0
        ax.set_ylim(0, top * 1.15 if top > 0 else 1)
        fit_labels(fig)
    return fig, data


def trajectory_figure(observed: pd.DataFrame, implied: pd.DataFrame, *, waves, times, unit, ylabel):
    """Observed wave means (95% CI) against the mean trajectory each growth model implies.

    ``observed``: wave, time, n, mean, lo, hi. ``implied``: model, time, expected.
    """
    with style():
        fig, ax = plt.subplots(figsize=(6.0, 3.8), layout="constrained")
        ax.errorbar(observed["time"], observed["mean"],
                    yerr=[observed["mean"] - observed["lo"], observed["hi"] - observed["mean"]],
                    color="#000000", marker="o", linestyle="none", capsize=3, label="Observed mean (95% CI)")
        for k, (model, part) in enumerate(implied.groupby("model", sort=False)):
            ax.plot(part["time"], part["expected"], color=PALETTE[k % len(PALETTE)],
                    linestyle=LINESTYLES[(k + 1) % len(LINESTYLES)], marker=MARKERS[(k + 1) % len(MARKERS)],
                    markersize=4, label=f"Implied: {model}")
        _wave_axis(ax, waves, times, unit)
        ax.set_ylabel(ylabel)
        ax.legend(frameon=False, fontsize=8)
        fit_labels(fig)
    data = pd.concat(
        [observed.assign(series="observed").rename(columns={"mean": "value"})[["series", "time", "value", "lo", "hi"]],
         implied.rename(columns={"expected": "value", "model": "series"}).assign(lo=np.nan, hi=np.nan)[
             ["series", "time", "value", "lo", "hi"]]],
        ignore_index=True,
    )
    return fig, data


def importance_figure(importance: pd.DataFrame, labels: dict[str, str]):
    """Permutation importance of the top predictors with ±1.96 SE bars, largest on top."""
    data = importance[["predictor", "importance", "se"]].copy()
    data["lo"] = data["importance"] - 1.96 * data["se"].fillna(0)
    data["hi"] = data["importance"] + 1.96 * data["se"].fillna(0)
    data = data.iloc[::-1].reset_index(drop=True)
    names = ["\n".join(textwrap.wrap(labels.get(p, p), TICK_CHARS)) or labels.get(p, p) for p in data["predictor"]]
    with style():
        # a row per predictor, taller for a label wrapped onto several lines
        height = 1.2 + sum(max(0.28, 0.17 * (name.count("\n") + 1)) for name in names)
        fig, ax = plt.subplots(figsize=(6.0, height), layout="constrained")
        y = np.arange(len(data))
        ax.errorbar(data["importance"], y, xerr=[data["importance"] - data["lo"], data["hi"] - data["importance"]],
                    color=PALETTE[0], marker=MARKERS[1], linestyle="none", capsize=2)
        ax.axvline(0, color="#000000", linewidth=0.8, linestyle=LINESTYLES[3])
        ax.set_yticks(y)
        ax.set_yticklabels(names)
        ax.set_xlabel("Permutation importance (drop in out-of-bag log-likelihood)")
        fit_labels(fig)
    return fig, data.iloc[::-1].reset_index(drop=True)


def dependence_figure(dependence: pd.DataFrame, predictors: list[str], labels: dict[str, str], *,
                      waves, times, unit, ylabel):
    """Expected trajectories at each level of the top predictors, one panel per predictor.

    Up to :data:`PANELS_PER_ROW` panels per row. A ``legend`` column of ``dependence``
    (the report's text for each level: a category's codebook label, ``low (4.10)``)
    names the lines; without it the level and its value are shown. Panel titles are
    and axis labels are wrapped to the size of their panel (:func:`fit_labels`).
    """
    data = dependence[dependence["predictor"].isin(predictors)].copy()
    n = max(len(predictors), 1)
    cols = min(PANELS_PER_ROW, n)
    rows = -(-n // cols)
    with style():
        fig, axes = plt.subplots(rows, cols, figsize=(2.7 * cols + 0.8, 3.3 * rows), sharey=True,
                                 squeeze=False, layout="constrained")
        for ax in axes.ravel()[n:]:
            ax.set_visible(False)
        for ax, name in zip(axes.ravel(), predictors):
            part = data[data["predictor"] == name]
            for k, (level, curve) in enumerate(part.groupby("level", sort=False)):
                curve = curve.sort_values("time")
                if "legend" in curve and not pd.isna(curve["legend"].iloc[0]):
                    text = str(curve["legend"].iloc[0])
                else:
                    value = curve["value"].iloc[0]
                    text = f"{level} ({_short(value)})" if str(level) != str(value) else str(level)
                    if str(level) == str(value) and "label" in curve and not pd.isna(curve["label"].iloc[0]):
                        text = str(curve["label"].iloc[0])  # the codebook's label of a category level
                colour = PALETTE[k % len(PALETTE)]
                ax.plot(curve["time"], curve["expected"], color=colour,
                        linestyle=LINESTYLES[k % len(LINESTYLES)], marker=MARKERS[k % len(MARKERS)],
                        markersize=4, label="\n".join(textwrap.wrap(text, LEGEND_CHARS)) or text)
                if "sd" in curve:
                    # spread of individual trajectories (expected +- 1 SD): a moderator of the
                    # variances shows as bands of different width around similar lines
                    ax.fill_between(curve["time"], curve["expected"] - curve["sd"], curve["expected"] + curve["sd"],
                                    color=colour, alpha=0.12, linewidth=0)
            ax.set_title(labels.get(name, name), fontsize=9)
            _wave_axis(ax, waves, times, unit)
            ax.legend(frameon=False, fontsize=7)
        for row in axes:
            row[0].set_ylabel(ylabel)
        fit_labels(fig)
    return fig, data.drop(columns=["legend"], errors="ignore").reset_index(drop=True)


#: most panels side by side in the expected-trajectory figure
PANELS_PER_ROW = 3
#: characters per line of a legend entry
LEGEND_CHARS = 24
#: characters per line of a predictor's label beside the importance figure
TICK_CHARS = 40


def fit_labels(fig, passes: int = 5) -> None:
    """Wrap every axes' title and x label to the axes' width and its y label to its height.

    Sizes are measured with the figure's renderer after the (constrained) layout has
    run, so a long codebook label never runs into the next panel's title or axis label
    and never stretches the figure. Text that fits is left as it is.
    """
    for _ in range(passes):  # wrapping moves the layout: repeat until nothing changes
        fig.canvas.draw()
        renderer = fig.canvas.get_renderer()
        changed = False
        for ax in fig.axes:
            if not ax.get_visible():
                continue
            box = ax.get_window_extent(renderer)
            changed |= _wrap_to(ax.title, box.width, renderer)
            changed |= _wrap_to(ax.xaxis.label, box.width, renderer)
            changed |= _wrap_to(ax.yaxis.label, box.height, renderer, along=1)
        if not changed:
            break
    fig.canvas.draw()


def _wrap_to(text, room: float, renderer, along: int = 0) -> bool:
    """Wrap a matplotlib text onto as many lines as it needs to be at most ``room`` pixels long.

    Returns True when the text's lines changed.
    """
    before = text.get_text()
    words = " ".join(before.split())
    if not words:
        return False
    room *= 0.97  # a little air, so that the next layout pass does not push it over again

    def length() -> float:
        extent = text.get_window_extent(renderer)
        return extent.height if along else extent.width

    text.set_text(words)
    chars = len(words)
    while length() > room and chars > 6:
        chars = max(6, min(chars - 2, int(chars * room / length())))
        text.set_text("\n".join(textwrap.wrap(words, chars, break_long_words=True, break_on_hyphens=False)))
    return text.get_text() != before


def _short(value) -> str:
    try:
        return f"{float(value):.2f}".replace("-", "\u2212")
    except (TypeError, ValueError):
        return str(value)
