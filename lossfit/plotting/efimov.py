"""The Efimov spectrum figure: trimer branches against 1/a, the three-atom and atom-dimer
thresholds, and the features (a_-, a*, a_+) of an Efimov parameter set or a fit."""

__all__ = ["efimov_spectrum_plot"]

import matplotlib.pyplot as plt
import numpy as np

from ..constants import SCALING_FACTOR
from ..efimov import Efimov
from ..errors import LossfitValueError
from ..mixture import HeteronuclearSystem
from ..universal.mixture_spectrum import mixture_kappa_star, mixture_trimer_branch
from ..universal.spectrum import kappa_star, load_trimer_table
from ._axes import FEATURE_COLOURS, SYMBOLS, feature_intervals


def _scaled(x):
    """Horizontal axis: sign(1/a) |1/(kappa* a)|^(1/2)."""
    return np.sign(x) * np.sqrt(np.abs(x))


def efimov_spectrum_plot(source, *, branches=3, fig=None, species=None):
    """Trimer energies against 1/a with the thresholds and the Efimov features.

    Both axes are powers of the zero-range variables chosen so that every branch has the
    same shape, each lambda^(1/2) = 4.76 times smaller than the one before: horizontal
    sign(1/a) |1/(kappa* a)|^(1/2), vertical -|E/(hbar^2 kappa*^2/m)|^(1/4) (the
    atom-dimer threshold E = -hbar^2/(m a^2) is then the line -|horizontal|).

    Parameters
    ----------
    source : FitResult or Efimov
        A fit (its posterior medians fix kappa*; the features it determines, sampled or
        tied to a sampled a_-, are drawn with their 68 % intervals, fixed ones as lines) or
        an Efimov parameter set (the features as lines).
    branches : int
        Trimer branches to draw (from the one that meets the three-atom threshold at a_-).
    species : HeteronuclearSystem, optional
        For an Efimov set of two identical bosons and a third atom (a fit knows its
        system): its branch comes from the B-B-X solver, energies in hbar^2 kappa*^2/(2 mu).

    Returns
    -------
    matplotlib.figure.Figure
    """
    samples = getattr(source, "samples", None)
    efimov = source.efimov() if samples is not None else source
    if not isinstance(efimov, Efimov):
        raise LossfitValueError("source", f"must be a FitResult or a lossfit.Efimov, got {type(source).__name__}")
    if isinstance(branches, bool) or not isinstance(branches, (int, np.integer)) or not 1 <= branches <= 6:
        raise LossfitValueError("branches", f"must be an integer from 1 to 6, got {branches!r}")
    system = getattr(source, "species", species)
    if isinstance(system, HeteronuclearSystem):
        k_star = mixture_kappa_star(efimov, system)
        table, scaling, mass = mixture_trimer_branch(system), system.scaling, r"2\mu"
    else:
        k_star = kappa_star(efimov)
        table, scaling, mass = load_trimer_table(), SCALING_FACTOR, "m"
    if fig is None:
        fig = plt.figure(figsize=(7.0, 5.0), layout="constrained")
    ax = fig.add_subplot()
    for n in range(int(branches)):
        scale = scaling ** n
        ax.plot(_scaled(table.x / scale), -np.abs(table.energy / scale ** 2) ** 0.25, lw=1.8,
                label=f"trimer branch {n}" + (" (meets the three-atom threshold at $a_-$)" if n == 0 else ""))
    x_hi = _scaled(table.x_star) * 1.05
    ax.axhline(0.0, color="k", lw=1.0, label="three-atom threshold")
    xs = np.linspace(0.0, x_hi, 200)
    ax.plot(xs, -xs, color="0.35", lw=1.0, ls="--", label=rf"atom-dimer threshold $E=-\hbar^2/({mass} a^2)$")
    fitted = feature_intervals(source) if samples is not None else {}
    for name, colour in FEATURE_COLOURS.items():
        symbol = SYMBOLS[name]
        value = getattr(efimov, name)
        if value is None:
            continue
        if name in fitted:
            med, lo, hi = fitted[name]
            # the axis is monotonic in a on each side: the interval's ends map to its ends
            ax.axvspan(_scaled(1.0 / (k_star * lo)), _scaled(1.0 / (k_star * hi)), color=colour, alpha=0.25, lw=0)
            position = _scaled(1.0 / (k_star * med))
        else:
            position = _scaled(1.0 / (k_star * value))
        ax.axvline(position, color=colour, lw=1.2, ls=":")
        ax.text(position, 0.06, symbol, color=colour, ha="center", va="bottom", fontsize=12)
    ax.set_xlim(_scaled(table.x_minus) * 1.25, x_hi)
    ax.set_ylim(-_scaled(table.x_star) * 1.02, 0.25)
    ax.set_xlabel(r"$\mathrm{sign}(a)\,|\kappa_* a|^{-1/2}$")
    ax.set_ylabel(rf"$-\,|E\,/\,(\hbar^2\kappa_*^2/{mass})|^{{1/4}}$")
    source_text = "posterior medians, 68 % bands" if samples is not None else "given parameters"
    name = f"{system.name}, " if isinstance(system, HeteronuclearSystem) else ""
    ax.set_title(rf"universal Efimov spectrum, {name}$\kappa_*$ from {source_text}", fontsize=10)
    ax.legend(fontsize=8, loc="lower left")
    return fig
