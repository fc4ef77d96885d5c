"""The temperature study: is a fitted Efimov feature the zero-temperature value?

Loss spectra measured at several temperatures are fitted one temperature at a time with
the zero-energy ("threshold") law, as was common practice, and with the exact thermally
averaged zero-range model, and all together with the exact model. The threshold-law
"apparent" position moves to smaller |a| as T rises (thermal broadening; a fact of the
trade, common practice), while the thermally averaged positions should agree with each
other. Their agreement is tested by chi^2 = sum ((m_i - m_w)/s_i)^2 of the per-temperature
medians m_i around their inverse-variance weighted mean m_w, with s_i the half widths of
the 68 % intervals, against chi^2 with n - 1 degrees of freedom (p > 0.05: consistent).
Works for a_- from L3 (a < 0) and for a* from beta.
"""

__all__ = ["temperature_study", "TemperatureStudy"]

import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy.special import chdtrc

from ..data.spectra import LossSpectrum
from ..errors import ConvergenceWarning, FitCheckWarning, LossfitValueError
from .fitting import fit

_FEATURES = {"a_minus": ("l3", "eta_minus"), "a_star": ("beta", "eta_star")}


@dataclass
class TemperatureStudy:
    """Result of :func:`temperature_study`.

    Attributes
    ----------
    feature : str
        ``"a_minus"`` or ``"a_star"``.
    rows : list of dict
        One per temperature (ascending): ``temperature_nK``, ``apparent`` (threshold-law
        fit) and ``thermal`` (exact model), each a (median, lo68, hi68) tuple in a0.
    joint : tuple
        (median, lo68, hi68) of the joint exact fit over every temperature, a0.
    chi2, dof, p_value : float, int, float
        Consistency of the thermal positions (module docstring).
    fits : dict
        The FitResults: ``("apparent", T)``, ``("thermal", T)`` and ``"joint"``.
    """

    feature: str
    rows: list
    joint: tuple
    chi2: float
    dof: int
    p_value: float
    fits: dict = field(repr=False, default_factory=dict)

    @property
    def consistent(self):
        """True if the thermal positions agree within their 95 % range (p > 0.05)."""
        return self.p_value > 0.05

    def table(self):
        """Plain-text table."""
        lines = [f"temperature study of {self.feature} (a0): threshold-law (apparent) and thermally averaged fits",
                 f"{'T (nK)':>10}{'apparent':>12}{'68 %':>22}{'thermal':>12}{'68 %':>22}"]
        for r in self.rows:
            app, th = r["apparent"], r["thermal"]
            lines.append(f"{r['temperature_nK']:>10.4g}{app[0]:>12.1f}{f'[{app[1]:.1f}, {app[2]:.1f}]':>22}"
                         f"{th[0]:>12.1f}{f'[{th[1]:.1f}, {th[2]:.1f}]':>22}")
        j = self.joint
        lines.append(f"joint thermal fit: {j[0]:.1f} [{j[1]:.1f}, {j[2]:.1f}]")
        verdict = "consistent" if self.consistent else "NOT consistent"
        lines.append(f"thermal positions vs one value: chi2 = {self.chi2:.2f} for {self.dof} dof, "
                     f"p = {self.p_value:.2f} ({verdict} with a temperature-independent {self.feature})")
        return "\n".join(lines)

    def __str__(self):
        return self.table()


def temperature_study(spectra, *, species, feature="a_minus", walkers=32, steps=2500, seed=0, progress=False):
    """Fit each temperature with the threshold law and the exact model, then all jointly.

    Parameters
    ----------
    spectra : sequence of LossSpectrum
        Spectra at (at least two) different temperatures; those of the feature's kind
        (L3 for a_-, beta for a*) are used, each temperature fitted on its own.
    species : str or Species
    feature : {"a_minus", "a_star"}
    walkers, steps, seed, progress
        Sampler settings of every fit.

    Returns
    -------
    TemperatureStudy
    """
    if feature not in _FEATURES:
        raise LossfitValueError("feature", f"must be one of {sorted(_FEATURES)}, got {feature!r}")
    kind, eta = _FEATURES[feature]
    items = [spectra] if isinstance(spectra, LossSpectrum) else list(spectra)
    if not all(isinstance(s, LossSpectrum) for s in items):
        raise LossfitValueError("spectra", "must be LossSpectrum objects")
    groups = {}
    for s in items:
        if s.kind != kind:
            continue
        temps = np.unique(np.asarray(s.temperature))
        for t in temps:
            groups.setdefault(float(t), []).append(s.select(np.broadcast_to(s.temperature, s.a.shape) == t))
    if len(groups) < 2:
        raise LossfitValueError("spectra", f"need {kind} spectra at two or more temperatures, got {sorted(groups)}")
    kw = dict(species=species, free=[feature, eta], walkers=walkers, steps=steps, seed=seed, progress=progress)
    fits, rows = {}, []
    with warnings.catch_warnings():
        # the threshold law is expected to fit thermally broadened data poorly: that is the point
        warnings.simplefilter("ignore", FitCheckWarning)
        warnings.simplefilter("ignore", ConvergenceWarning)
        for t in sorted(groups):
            fits[("apparent", t)] = fit(groups[t], model="threshold", **kw)
            fits[("thermal", t)] = fit(groups[t], model="zero-range", **kw)
            rows.append({"temperature_nK": t, "apparent": fits[("apparent", t)].interval(feature),
                         "thermal": fits[("thermal", t)].interval(feature)})
        fits["joint"] = fit([s for t in sorted(groups) for s in groups[t]], model="zero-range", **kw)
    med = np.array([r["thermal"][0] for r in rows])
    sig = np.array([0.5 * (r["thermal"][2] - r["thermal"][1]) for r in rows])
    w = 1.0 / sig ** 2
    mean = float(np.sum(w * med) / np.sum(w))
    chi2 = float(np.sum(((med - mean) / sig) ** 2))
    dof = len(rows) - 1
    return TemperatureStudy(feature=feature, rows=rows, joint=fits["joint"].interval(feature), chi2=chi2,
                            dof=dof, p_value=float(chdtrc(dof, chi2)), fits=fits)
