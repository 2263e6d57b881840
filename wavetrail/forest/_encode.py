"""Predictors as one float matrix: numbers as they are, categories as level codes.

Every predictor becomes one column of a float matrix (NaN = missing). Numeric
and boolean columns keep their values; categorical columns (pandas
``Categorical``, strings, objects) are stored as the position of their level
in a fixed level list. Whether a category is ordered is taken from the pandas
dtype (``ordered=True``); strings and objects are unordered with their levels
sorted. The :class:`PredictorInfo` travels with the forest (and its JSON), so
new people are encoded the same way.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from wavetrail.errors import DataError

NUMERIC, ORDERED, UNORDERED = "numeric", "ordered", "unordered"


@dataclass
class PredictorInfo:
    """Names, kinds and (for categories) level labels of the predictors."""

    names: list[str]
    kinds: list[str]
    levels: list[list[str] | None] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"names": list(self.names), "kinds": list(self.kinds), "levels": self.levels}

    @classmethod
    def from_dict(cls, d: dict) -> "PredictorInfo":
        return cls(list(d["names"]), list(d["kinds"]), [None if v is None else list(v) for v in d["levels"]])

    def index(self, name: str) -> int:
        try:
            return self.names.index(name)
        except ValueError:
            raise DataError(
                f"predictor {name!r} is not one of the forest's predictors",
                hint=f"use one of: {', '.join(self.names[:12])}{' ...' if len(self.names) > 12 else ''}",
            ) from None


def _level_labels(values) -> list[str]:
    return [str(v) for v in values]


def encode_predictors(df: pd.DataFrame) -> tuple[np.ndarray, PredictorInfo]:
    """Encode a predictor table; returns ``(X, info)`` with ``X`` of shape (n, m)."""
    if not isinstance(df, pd.DataFrame):
        raise DataError("predictors must be a pandas DataFrame (one row per person)")
    if df.shape[1] == 0:
        raise DataError("the predictor table has no columns", hint="name at least one predictor")
    names, kinds, levels, cols = [], [], [], []
    for name in df.columns:
        s = df[name]
        names.append(str(name))
        if isinstance(s.dtype, pd.CategoricalDtype):
            cats = _level_labels(s.cat.categories)
            codes = s.cat.codes.to_numpy().astype(float)
            codes[codes < 0] = np.nan
            kinds.append(ORDERED if s.cat.ordered else UNORDERED)
            levels.append(cats)
            cols.append(codes)
        elif pd.api.types.is_bool_dtype(s.dtype) or pd.api.types.is_numeric_dtype(s.dtype):
            kinds.append(NUMERIC)
            levels.append(None)
            cols.append(pd.to_numeric(s, errors="coerce").to_numpy(dtype=float, na_value=np.nan))
        elif pd.api.types.is_string_dtype(s.dtype) or s.dtype == object:
            present = s.dropna()
            cats = sorted({str(v) for v in present})
            kinds.append(UNORDERED)
            levels.append(cats)
            lookup = {c: i for i, c in enumerate(cats)}
            cols.append(np.array([np.nan if pd.isna(v) else lookup[str(v)] for v in s], dtype=float))
        else:
            raise DataError(
                f"predictor {name!r} has type {s.dtype}, which the forest cannot split on",
                hint="give numbers, booleans or categories (convert dates to numbers first)",
            )
    X = np.column_stack(cols) if cols else np.empty((len(df), 0))
    return X, PredictorInfo(names, kinds, levels)


def encode_like(info: PredictorInfo, df: pd.DataFrame) -> np.ndarray:
    """Encode new people's predictors with the levels of ``info`` (unknown level -> NaN)."""
    missing = [n for n in info.names if n not in df.columns]
    if missing:
        raise DataError(
            f"the new predictor table lacks column(s) {', '.join(missing[:8])}",
            hint="give every predictor the forest was grown on",
        )
    out = np.empty((len(df), len(info.names)))
    for j, (name, kind, levs) in enumerate(zip(info.names, info.kinds, info.levels)):
        s = df[name]
        if kind == NUMERIC:
            out[:, j] = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        else:
            lookup = {c: i for i, c in enumerate(levs)}
            out[:, j] = [np.nan if pd.isna(v) else lookup.get(str(v), np.nan) for v in s]
    return out
