"""The universality test of discrete scaling: are consecutive resonances lambda apart?

Zero-range theory of two identical bosons and a third atom ties consecutive a < 0 loss
resonances by the scaling factor lambda = exp(pi/s0) of the mass ratio (Efimov 1970;
Braaten & Hammer, Phys. Rep. 428, 259 (2006)); finite-range effects make the lowest
resonance deviate. The test fits every resonance the data show on its own — the L3
points within one period around lambda^n a_-^(0), with the exact thermally averaged model
and a prior over that period only — and compares the ratios of neighbouring positions
with lambda. The fits are independent, so the ratio's posterior is that of the ratio of
independent draws; its agreement with lambda is z = (median - lambda)/s, s the half width
of the ratio's 68 % interval (|z| < 2: consistent).
"""

__all__ = ["scaling_test", "ScalingTest"]

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..data.spectra import LossSpectrum
from ..errors import ConvergenceWarning, LossfitValueError
from ..mixture import HeteronuclearSystem
from ..universal.mixture_model import resolve_species
from .fitting import fit
from .parameters import first_period_window

#: Fewest L3 points a resonance window needs to be fitted on its own.
MIN_POINTS = 5


@dataclass
class ScalingTest:
    """Result of :func:`scaling_test`.

    Attributes
    ----------
    scaling : float
        The system's lambda = exp(pi/s0).
    positions : list of tuple
        (median, lo68, hi68) of a_-^(n) in a0, n = 0, 1, ...
    etas : list of tuple
        (median, lo68, hi68) of eta_- of each resonance's fit.
    ratios : list of tuple
        (median, lo68, hi68) of a_-^(n+1)/a_-^(n).
    z : list of float
        (median - lambda)/half width of the 68 % interval, per ratio.
    fits : list of FitResult
    """

    scaling: float
    positions: list
    etas: list
    ratios: list
    z: list
    fits: list = field(repr=False, default_factory=list)

    @property
    def consistent(self):
        """True if every ratio agrees with lambda within two half widths."""
        return all(abs(v) < 2.0 for v in self.z)

    def table(self):
        """Plain-text table."""
        lines = [f"discrete-scaling test: lambda = {self.scaling:.4f} (zero range)",
                 f"{'n':>3}{'a_-^(n) (a0)':>16}{'68 %':>24}{'eta_-':>10}{'ratio to n-1':>16}{'68 %':>20}{'z':>7}"]
        for n, (pos, eta) in enumerate(zip(self.positions, self.etas)):
            row = f"{n:>3}{pos[0]:>16.1f}{f'[{pos[1]:.1f}, {pos[2]:.1f}]':>24}{eta[0]:>10.3f}"
            if n:
                r = self.ratios[n - 1]
                row += f"{r[0]:>16.4f}{f'[{r[1]:.3f}, {r[2]:.3f}]':>20}{self.z[n - 1]:>7.2f}"
            lines.append(row)
        verdict = "consistent" if self.consistent else "NOT consistent"
        lines.append(f"ratios {verdict} with lambda (|z| < 2)")
        return "\n".join(lines)

    def __str__(self):
        return self.table()


def scaling_test(spectra, *, species, walkers=16, steps=2000, seed=0, progress=False):
    """Fit each a < 0 resonance on its own and compare neighbouring positions with lambda.

    Parameters
    ----------
    spectra : sequence of LossSpectrum
        L3 spectra through two or more consecutive resonances (other kinds are ignored).
    species : HeteronuclearSystem or str
        Two identical bosons and a third atom (``lf.heteronuclear(...)`` or "B-B-X").
    walkers, steps, seed, progress
        Sampler settings of every fit.

    Returns
    -------
    ScalingTest
    """
    system = resolve_species(species)
    if not isinstance(system, HeteronuclearSystem):
        raise LossfitValueError("species", "the scaling test is for two identical bosons and a third atom "
                                "(lf.heteronuclear(...)): identical bosons rarely show two resonances")
    items = [spectra] if isinstance(spectra, LossSpectrum) else list(spectra)
    items = [s.select(s.a < 0) for s in items if isinstance(s, LossSpectrum) and s.kind == "l3" and (s.a < 0).any()]
    if not items:
        raise LossfitValueError("spectra", "need L3 spectra at a < 0")
    lam = system.scaling
    low, high = first_period_window(items, lam)
    windows = []
    while True:
        n = len(windows)
        lo, hi = low * lam ** n, high * lam ** n
        part = [s.select((-s.a >= lo) & (-s.a < hi)) for s in items if ((-s.a >= lo) & (-s.a < hi)).any()]
        if sum(len(s) for s in part) < MIN_POINTS:
            break
        windows.append((lo, hi, part))
    if len(windows) < 2:
        raise LossfitValueError("spectra", f"the data show fewer than two resonance periods with {MIN_POINTS} "
                                f"or more L3 points each (periods of {lam:.3f} from |a| = {low:.4g} a0)")
    fits = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        for n, (lo, hi, part) in enumerate(windows):
            fits.append(fit(part, species=system, free=["a_minus", "eta_minus"], priors={"a_minus": (-lo, -hi)},
                            walkers=walkers, steps=steps, seed=seed + n, progress=progress))
    rng = np.random.default_rng(seed)
    positions, ratios, z = [], [], []
    for f in fits:
        positions.append(f.interval("a_minus"))
    for f0, f1 in zip(fits, fits[1:]):
        s0, s1 = f0.samples["a_minus"], f1.samples["a_minus"]
        size = min(s0.size, s1.size)
        r = rng.permutation(s1)[:size] / rng.permutation(s0)[:size]
        med, lo68, hi68 = np.percentile(r, [50.0, 15.865, 84.135])
        ratios.append((float(med), float(lo68), float(hi68)))
        z.append(float((med - lam) / (0.5 * (hi68 - lo68))) if hi68 > lo68 else math.inf)
    return ScalingTest(scaling=lam, positions=positions, etas=[f.interval("eta_minus") for f in fits],
                       ratios=ratios, z=z, fits=fits)
