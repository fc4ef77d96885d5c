"""Comparing fits of the same data under different assumptions (free features, one shared
eta, the universal tie) by their expected predictive accuracy.

Criterion: the expected log pointwise predictive density estimated by Pareto-smoothed
importance-sampling leave-one-out cross-validation, elpd_loo (Vehtari, Gelman & Gabry,
Statistics and Computing 27, 1413 (2017)), computed by ArviZ from each fit's pointwise log
likelihood (:meth:`FitResult.to_arviz`). The differences between fits come with the
standard error of the paired pointwise differences; a difference of a few standard errors
or more prefers the fit with the larger elpd, a smaller one prefers neither, and then the
simpler model (fewer free parameters) is the economical report. Pareto k above 0.7 flags
points whose leave-one-out estimate is unreliable (reported, not hidden).
"""

__all__ = ["compare_models", "ModelComparison"]

import math
from dataclasses import dataclass

import numpy as np

from ..errors import LossfitValueError


@dataclass
class ModelComparison:
    """Result of :func:`compare_models`.

    Attributes
    ----------
    rows : list of dict
        One per fit, best first: ``name``, ``elpd_loo``, ``se``, ``p_loo`` (effective
        number of parameters), ``d_elpd`` and ``d_se`` (difference to the best and its
        standard error), ``bad_k`` (points with Pareto k > 0.7).
    best : str
        Name of the fit with the largest elpd_loo.
    """

    rows: list
    best: str

    def preferred(self, threshold=2.0):
        """Name of the fit preferred by more than ``threshold`` standard errors over every
        other, or None if the data do not separate them."""
        rest = [r for r in self.rows[1:] if not r["d_elpd"] > threshold * r["d_se"]]
        return self.best if not rest else None

    def table(self):
        """Plain-text table."""
        w = max(12, max(len(r["name"]) for r in self.rows) + 2)
        lines = [f"{'fit':<{w}}{'elpd_loo':>10}{'SE':>8}{'p_loo':>8}{'d_elpd':>9}{'d_SE':>8}{'k>0.7':>7}"]
        for r in self.rows:
            lines.append(f"{r['name']:<{w}}{r['elpd_loo']:>10.2f}{r['se']:>8.2f}{r['p_loo']:>8.2f}"
                         f"{r['d_elpd']:>9.2f}{r['d_se']:>8.2f}{r['bad_k']:>7d}")
        choice = self.preferred()
        lines.append(f"preferred: {choice} (by more than 2 SE)" if choice else
                     "the data do not separate these fits (differences within 2 SE): report the simpler one")
        return "\n".join(lines)

    def __str__(self):
        return self.table()


def compare_models(results):
    """PSIS-LOO comparison of fits of the same spectra (module docstring).

    Parameters
    ----------
    results : dict name -> FitResult
        At least two spectrum fits of the same data points.

    Returns
    -------
    ModelComparison
    """
    try:
        import arviz as az  # optional dependency: pip install 'lossfit[arviz]'
    except ImportError:
        raise LossfitValueError("compare_models", "needs ArviZ: pip install 'lossfit[arviz]'") from None

    if not isinstance(results, dict) or len(results) < 2:
        raise LossfitValueError("results", "give a dict of at least two named FitResults")
    n_points = {name: sum(len(s) for s in getattr(r.likelihood, "spectra", [])) for name, r in results.items()}
    if len(set(n_points.values())) != 1 or 0 in n_points.values():
        raise LossfitValueError("results", f"must be spectrum fits of the same data points, got {n_points}")
    loo = {}
    pointwise = {}
    for name, r in results.items():
        with np.errstate(all="ignore"):
            out = az.loo(r.to_arviz(), pointwise=True)
        loo[name] = out
        pointwise[name] = np.asarray(out.loo_i).ravel()
    best = max(loo, key=lambda n: float(loo[n].elpd_loo))
    rows = []
    for name in sorted(loo, key=lambda n: -float(loo[n].elpd_loo)):
        diff = pointwise[best] - pointwise[name]
        rows.append({"name": name, "elpd_loo": float(loo[name].elpd_loo), "se": float(loo[name].se),
                     "p_loo": float(loo[name].p_loo), "d_elpd": float(diff.sum()),
                     "d_se": float(math.sqrt(diff.size * np.var(diff))) if name != best else 0.0,
                     "bad_k": int(np.sum(np.asarray(loo[name].pareto_k) > 0.7))})
    return ModelComparison(rows=rows, best=best)
