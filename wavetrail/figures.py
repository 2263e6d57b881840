"""Deterministic figures: PNG and SVG with fixed metadata, each beside its data CSV.

Style choices for every figure (common practice for journal figures): the
Agg backend, a colour-vision-deficiency-safe palette (Okabe & Ito, 2008,
"Color Universal Design"), distinct line styles and markers so that figures
read in greyscale too, and labelled axes with units.
"""

from __future__ import annotations

import io
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402

from wavetrail._io import atomic_write_bytes, write_table  # noqa: E402

#: Okabe-Ito palette, in the order wavetrail uses it
PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000"]
LINESTYLES = ["-", "--", "-.", ":", (0, (5, 1)), (0, (3, 1, 1, 1))]
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "*"]

_RC = {
    "svg.hashsalt": "wavetrail",
    "svg.fonttype": "none",
    "font.size": 10,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "figure.dpi": 100,
}


def style():
    """Context manager applying wavetrail's figure style."""
    return matplotlib.rc_context(_RC)


def save_figure(fig, stem: str | Path, data: pd.DataFrame | None = None) -> list[Path]:
    """Save ``fig`` as ``stem.png`` and ``stem.svg`` (byte-stable) and ``data`` as ``stem.csv``.

    Returns the paths written. The figure is closed afterwards.
    """
    stem = Path(stem)
    written: list[Path] = []
    with matplotlib.rc_context(_RC):
        for fmt, meta in (("png", {"Software": None}), ("svg", {"Date": None, "Creator": None})):
            buf = io.BytesIO()
            fig.savefig(buf, format=fmt, metadata=meta, bbox_inches="tight")
            written.append(atomic_write_bytes(stem.with_suffix(f".{fmt}"), buf.getvalue()))
    plt.close(fig)
    if data is not None:
        written.append(write_table(stem.with_suffix(".csv"), data))
    return written
