"""The forest as JSON text (never pickle: reading a file must not run code).

Layout (keys sorted, compact separators, no NaN — missing numbers are null)::

    {"schema": "wavetrail-forest/1",
     "model": {...node model description...},
     "predictors": {"names": [...], "kinds": [...], "levels": [...]},
     "settings": {...growing settings...},
     "trees": [{"index": i, "seed": s, "n_oob": n, "oob_drop": [...],
                "nodes": [{"parent", "depth", "n", "theta", "loglik", "predictor", "kind",
                           "cut", "left_levels", "missing_left", "left", "right",
                           "statistic", "p", "lr"}, ...]}, ...]}

Files written before the keys were renamed (``"format"`` for ``"schema"``, a node's
``"feature"`` for ``"predictor"``, ``settings.split`` ``"score"``/``"likelihood"`` for
``"scores"``/``"likelihood_ratio"``) are still read: :func:`loads` renames them on the way in.

Floats are written with Python's shortest round-trip representation, so
``Forest.from_json(text).to_json() == text``.
"""

from __future__ import annotations

import json
import math

from wavetrail.errors import DataError

FORMAT = "wavetrail-forest/1"
_NODE_KEYS = {"parent", "depth", "n", "theta", "loglik", "predictor", "kind", "cut", "left_levels",
              "missing_left", "left", "right", "statistic", "p", "lr"}


def _clean(x):
    if isinstance(x, float):
        return x if math.isfinite(x) else None
    if isinstance(x, dict):
        return {str(k): _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if hasattr(x, "item") and not isinstance(x, (str, bytes)):
        return _clean(x.item())
    return x


def dumps(payload: dict) -> str:
    """JSON text of a forest payload (sorted keys, compact, NaN as null)."""
    return json.dumps(_clean(payload), sort_keys=True, separators=(",", ":"), allow_nan=False)


def loads(text: str, source: str = "forest.json") -> dict:
    """Parse and check a forest payload; raises DataError naming what is wrong."""
    try:
        d = json.loads(text)
    except json.JSONDecodeError as err:
        raise DataError(f"{source}: not valid JSON (line {err.lineno}, column {err.colno})",
                        hint="rebuild the forest step") from None
    if isinstance(d, dict) and "schema" not in d and "format" in d:
        d = _renamed_keys(d)
    if not isinstance(d, dict) or d.get("schema") != FORMAT:
        raise DataError(f"{source}: not a wavetrail forest (expected schema {FORMAT!r})",
                        hint="pass a forest.json written by wavetrail")
    for key in ("model", "predictors", "settings", "trees"):
        if key not in d:
            raise DataError(f"{source}: key {key!r} is missing", hint="rebuild the forest step")
    for t_i, tree in enumerate(d["trees"]):
        for n_i, node in enumerate(tree.get("nodes", [])):
            lacking = _NODE_KEYS - set(node)
            if lacking:
                raise DataError(f"{source}: tree {t_i} node {n_i} lacks {sorted(lacking)}",
                                hint="rebuild the forest step")
    return d


#: split-test values of files written before the rename
OLD_SPLIT_NAMES = {"score": "scores", "likelihood": "likelihood_ratio"}


def _renamed_keys(d: dict) -> dict:
    """A payload of the earlier layout with today's key names (read-only compatibility)."""
    d = dict(d)
    d["schema"] = d.pop("format")
    settings = d.get("settings")
    if isinstance(settings, dict) and settings.get("split") in OLD_SPLIT_NAMES:
        d["settings"] = {**settings, "split": OLD_SPLIT_NAMES[settings["split"]]}
    trees = d.get("trees")
    if isinstance(trees, list):
        d["trees"] = [
            {**t, "nodes": [({**{k: v for k, v in n.items() if k != "feature"}, "predictor": n["feature"]}
                             if isinstance(n, dict) and "feature" in n and "predictor" not in n else n)
                            for n in t.get("nodes", [])]} if isinstance(t, dict) else t
            for t in trees]
    return d
