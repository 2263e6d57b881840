"""Model comparison never prefers a model that did not converge or is inadmissible without saying so."""

from types import SimpleNamespace

import numpy as np
import pytest

from wavetrail.stages.growth import compare_models


def _fit(loglik, k, bic, converged=True, admissible=True, boundary=""):
    return SimpleNamespace(fit={"loglik": loglik, "k": k, "aic": -2 * loglik + 2 * k, "bic": bic,
                                "converged": converged, "admissible": admissible, "boundary": boundary})


def _row(small, large):
    return compare_models({("y", "linear"): small, ("y", "quadratic"): large}).iloc[0]


def test_the_better_model_is_preferred_when_both_are_usable():
    r = _row(_fit(-300.0, 6, 630.0), _fit(-280.0, 10, 600.0))
    assert r["lr_chisq"] == pytest.approx(40.0) and r["df"] == 4 and r["p"] < 1e-6
    assert r["preferred"] == "quadratic-free" and r["note"] == ""


def test_an_inadmissible_larger_model_is_not_preferred_and_the_note_says_why():
    r = _row(_fit(-300.0, 6, 630.0), _fit(-280.0, 10, 600.0, admissible=False))
    assert r["preferred"] == "linear-free"
    assert "quadratic-free inadmissible" in r["note"] and "preferred because" in r["note"]


def test_a_non_converged_model_is_never_preferred_and_none_when_neither_is_usable():
    r = _row(_fit(-300.0, 6, 630.0, converged=False), _fit(-299.5, 10, 640.0))
    assert r["preferred"] == "quadratic-free" and "linear-free did not converge" in r["note"]
    r = _row(_fit(-300.0, 6, 630.0, converged=False), _fit(-280.0, 10, 600.0, admissible=False))
    assert r["preferred"] == "" and "no preference" in r["note"]


def test_boundary_estimates_are_named_in_the_note():
    r = _row(_fit(-300.0, 6, 630.0), _fit(-280.0, 10, 600.0, boundary="var(y3)"))
    assert "conservative" in r["note"] and np.isfinite(r["p"])
