"""The forest as JSON text (never pickle: reading a file must not run code).

Layout (keys sorted, compact separators, no NaN — missing numbers are null)::

    {"format": "wavetrail-forest/1",
     "model": {...node model description...},
     "predictors": {"names": [...], "kinds": [...], "levels": [...]},
     "settings": {...growing settings...},
     "trees": [{"index": i, "seed": s, "n_oob": n, "oob_drop": [...],
                "nodes": [{"parent", "depth", "n", "theta", "loglik", "feature", "kind",
                           "cut", "left_levels", "missing_left", "left", "right",
                           "statistic", "p", "lr"}, ...]}, ...]}

Floats are written with Python's shortest round-trip representation, so
``Forest.from_json(text).to_json() == text``.
"""

from __future__ import annotations

import json
import math

from wavetrail.errors import DataError

FORMAT = "wavetrail-forest/1"
_NODE_KEYS = {"parent", "depth", "n", "theta", "loglik", "feature", "kind", "cut", "left_levels",
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
    if not isinstance(d, dict) or d.get("format") != FORMAT:
        raise DataError(f"{source}: not a wavetrail forest (expected format {FORMAT!r})",
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
