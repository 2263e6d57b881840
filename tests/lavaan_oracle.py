"""Run R's lavaan (an independent SEM program) through ``Rscript`` as a test oracle.

Installed from Debian (``r-base-core``, ``r-cran-lavaan``; .ci/run does this). Tests that
use it skip with a clear reason when Rscript or lavaan is missing. Nothing here is a
runtime dependency of wavetrail.
"""

from __future__ import annotations

import shutil
import subprocess
import textwrap

import pandas as pd
import pytest

_VERSION: str | None = None


def lavaan_version() -> str | None:
    """lavaan's version string, or None when Rscript or lavaan is not installed."""
    global _VERSION
    if _VERSION is None:
        if shutil.which("Rscript") is None:
            _VERSION = ""
        else:
            r = subprocess.run(["Rscript", "-e", 'cat(as.character(packageVersion("lavaan")))'],
                               capture_output=True, text=True, timeout=120)
            _VERSION = r.stdout.strip() if r.returncode == 0 else ""
    return _VERSION or None


def need_lavaan() -> str:
    """Skip the calling test (with the reason) unless lavaan runs; return its version."""
    v = lavaan_version()
    if v is None:
        pytest.skip("R's lavaan is not installed (Debian: apt-get install r-base-core r-cran-lavaan; "
                    ".ci/run installs them)")
    return v


def run_lavaan(tmp_path, data: pd.DataFrame, model: str, call: str, extra: str = "") -> dict:
    """Fit ``model`` with the lavaan ``call`` (e.g. ``growth(model, data=d, missing="ml")``).

    ``data`` columns must be plain R names. Returns ``{"pe": parameterEstimates,
    "fm": fitMeasures (Series)}`` plus ``extra`` R output tables written by the
    snippet ``extra`` (which may call ``out(name, data.frame)``).
    """
    need_lavaan()
    csv = tmp_path / "lavaan_data.csv"
    data.to_csv(csv, index=False, na_rep="NA", float_format="%.17g")
    script = tmp_path / "lavaan_run.R"
    script.write_text(textwrap.dedent(f"""\
        suppressPackageStartupMessages(library(lavaan))
        d <- read.csv("{csv}")
        model <- '{model}'
        fit <- {call}
        out <- function(name, x) write.csv(x, file.path("{tmp_path}", paste0("lavaan_", name, ".csv")),
                                          row.names = FALSE)
        pe <- parameterEstimates(fit)
        out("pe", pe[, c("lhs", "op", "rhs", "est", "se")])
        fm <- fitMeasures(fit)
        out("fm", data.frame(name = names(fm), value = as.numeric(fm)))
        out("conv", data.frame(converged = lavInspect(fit, "converged")))
        {extra}
        """))
    r = subprocess.run(["Rscript", str(script)], capture_output=True, text=True, timeout=600)
    if r.returncode != 0:
        raise RuntimeError(f"lavaan failed:\n{r.stderr[-3000:]}")
    res = {}
    for f in tmp_path.glob("lavaan_*.csv"):
        if f.name == "lavaan_data.csv":
            continue
        res[f.stem[len("lavaan_"):]] = pd.read_csv(f)
    res["fm"] = res["fm"].set_index("name")["value"]
    return res


def lavaan_value(pe: pd.DataFrame, lhs: str, op: str, rhs: str = "", col: str = "est") -> float:
    rows = pe[(pe["lhs"] == lhs) & (pe["op"] == op) & (pe["rhs"].fillna("") == rhs)]
    if len(rows) != 1:
        raise KeyError(f"{lhs} {op} {rhs}: {len(rows)} rows in lavaan's table")
    return float(rows[col].iloc[0])


_FACTOR = {"intercept": "i", "slope": "s", "shape": "s", "quadratic": "q"}


def growth_syntax(time_scores, shape, residuals, waves, start=None) -> str:
    """lavaan syntax (for ``sem(..., meanstructure=TRUE)``) of wavetrail's growth model.

    ``start`` (a wavetrail estimates table) puts ``start(value)`` on every free
    parameter, so that lavaan climbs from wavetrail's solution.
    """
    est = {} if start is None else dict(zip(start["parameter"], start["estimate"]))

    def st(name):
        return f"start({est[name]:.17g})*" if name in est else ""

    t = list(time_scores)
    fac = ["intercept", "slope"] + (["quadratic"] if shape == "quadratic" else [])
    if shape == "basis":
        fac = ["intercept", "shape"]
    lines = ["i =~ " + " + ".join(f"1*{w}" for w in waves)]
    if shape == "basis":
        terms = [f"{t[j]:.17g}*{w}" if j in (0, len(waves) - 1) else f"{st(f'loading(shape,{w})')}{w}"
                 for j, w in enumerate(waves)]
    else:
        terms = [f"{t[j]:.17g}*{w}" for j, w in enumerate(waves)]
    lines.append("s =~ " + " + ".join(terms))
    if shape == "quadratic":
        lines.append("q =~ " + " + ".join(f"{t[j] ** 2:.17g}*{w}" for j, w in enumerate(waves)))
    for w in waves:
        lines.append(f"{w} ~ 0*1")
        lab = "rv*" if residuals == "equal" else ""
        lines.append(f"{w} ~~ {lab}{st('resvar' if residuals == 'equal' else f'var({w})')}{w}")
    for a, f in enumerate(fac):
        lines.append(f"{_FACTOR[f]} ~ {st(f'mean({f})')}1")
        for g in fac[a:]:
            name = f"var({f})" if f == g else f"cov({f},{g})"
            lines.append(f"{_FACTOR[f]} ~~ {st(name)}{_FACTOR[g]}")
    return "\n".join(lines) + "\n"
