"""The SEM engine: model specs, sufficient statistics, ML/FIML and batched fits.

Public surface (a contract with :mod:`wavetrail.growth`, :mod:`wavetrail.forest`
and :mod:`wavetrail.invariance`; see DEVELOPERS.md):

* :class:`ModelSpec` -- a model built from parameter statements
* :class:`SuffStats`, :func:`pattern_index`, :func:`person_terms`, :func:`split_stats`
* :func:`fit_batch` -> :class:`BatchFit` (vectorised over models)
* :func:`casewise_scores`, :func:`casewise_loglik`, :func:`information`, :func:`score_outer`
* :func:`fit` -> :class:`SemFit`, :func:`fit_cfa`
"""

from wavetrail.sem.spec import ModelSpec
from wavetrail.sem.stats import SuffStats, pattern_index, person_terms, split_stats
from wavetrail.sem.optimise import BatchFit, fit_batch, start_values
from wavetrail.sem.casewise import casewise_loglik, casewise_scores, information, score_outer

__all__ = [
    "ModelSpec", "SuffStats", "pattern_index", "person_terms", "split_stats",
    "BatchFit", "fit_batch", "start_values",
    "casewise_loglik", "casewise_scores", "information", "score_outer",
    "fit", "fit_cfa", "SemFit",
]


def __getattr__(name):  # fit / fit_cfa / SemFit land in their own modules
    if name in ("fit", "SemFit"):
        from wavetrail.sem import fitting

        return getattr(fitting, name)
    if name == "fit_cfa":
        from wavetrail.sem.cfa import fit_cfa

        return fit_cfa
    raise AttributeError(name)
