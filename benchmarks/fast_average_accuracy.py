"""Accuracy map of the fast thermal averages against the adaptive reference quadrature.

For each exact kernel (L3 at a < 0, L3 at a > 0 in every channel, beta in every
channel) and species (133Cs, 7Li), the largest relative difference between
``lf.l3``/``lf.beta`` (fast rule, the default) and the same call with ``rtol=1e-12``
(adaptive Gauss-Kronrod reference) over a log grid of scattering lengths, for each
(temperature, eta) cell. The feature position sits inside the a range, so every cell
sweeps the Efimov phase through the resonance. Writes docs/thermal-averages-accuracy.png
and prints the worst cell of each panel.

Run: python benchmarks/fast_average_accuracy.py [--quick]
"""

import argparse
import math
import os
import warnings

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

import lossfit as lf  # noqa: E402
from lossfit.constants import HBAR, K_B  # noqa: E402
from lossfit.units import A0  # noqa: E402
from lossfit.universal.tables import load_recombination_table  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))


def _reach(sp, t_nk):
    # a where the thermal average (to E = 42.25 k_B T) reaches the three-body table's last energy
    e_max = load_recombination_table().energy_max
    return math.sqrt(e_max / 42.25 * HBAR ** 2 / (sp.mass * K_B * t_nk * 1e-9)) / A0


def panels(sp):
    r = sp.r_vdw
    return [
        ("L3, a < 0", lf.l3, "total", lambda t: -np.geomspace(5 * r, 1e6, 120),
         lambda e: lf.Efimov(a_minus=-math.sqrt(5 * r * 1e4), eta_minus=e)),
        ("L3, a > 0, total", lf.l3, "total", lambda t: np.geomspace(5 * r, 1e6, 80),
         lambda e: lf.Efimov(a_plus=8 * r, eta_plus=e)),
        ("L3, a > 0, shallow", lf.l3, "shallow", lambda t: np.geomspace(5 * r, 1e6, 80),
         lambda e: lf.Efimov(a_plus=8 * r, eta_plus=e)),
        ("beta, relaxation", lf.beta, "relaxation", lambda t: np.geomspace(5 * r, 2e4, 80),
         lambda e: lf.Efimov(a_star=math.sqrt(5 * r * 2e4), eta_star=e)),
        ("beta, breakup", lf.beta, "breakup",
         lambda t: np.geomspace(max(5 * r, _reach(sp, t) * math.sqrt(42.25 / 1000.0 / 20.0)),
                                0.999 * _reach(sp, t), 40),
         lambda e: lf.Efimov(a_star=math.sqrt(5 * r * 2e4), eta_star=e)),
    ]


def accuracy_map(sp, temps, etas):
    out = []
    for title, rate, channel, a_of_t, efimov in panels(sp):
        grid = np.empty((etas.size, temps.size))
        for i, eta in enumerate(etas):
            ef = efimov(eta)
            for j, t in enumerate(temps):
                a = a_of_t(t)
                fast = rate(a, t, species=sp, efimov=ef, channel=channel)
                ref = rate(a, t, species=sp, efimov=ef, channel=channel, rtol=1e-12)
                ok = ref > 0
                grid[i, j] = np.max(np.abs(fast[ok] / ref[ok] - 1.0)) if ok.any() else np.nan
        out.append((title, grid))
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore", lf.errors.ValidityWarning)
    temps = np.geomspace(1.0, 3000.0, 8 if args.quick else 16)
    etas = np.geomspace(0.005, 2.0, 6 if args.quick else 12)
    species = ("133Cs", "7Li")
    maps = {name: accuracy_map(lf.species(name), temps, etas) for name in species}
    n_panels = len(maps[species[0]])
    fig, axes = plt.subplots(len(species), n_panels, figsize=(3.0 * n_panels, 2.7 * len(species)),
                             sharex=True, sharey=True, constrained_layout=True)
    for row, name in enumerate(species):
        for col, (title, grid) in enumerate(maps[name]):
            ax = axes[row, col]
            im = ax.pcolormesh(temps, etas, np.log10(np.maximum(grid, 1e-12)), vmin=-11, vmax=-5,
                               cmap="viridis", shading="nearest")
            ax.set_xscale("log")
            ax.set_yscale("log")
            ax.set_title(f"{name}: {title}", fontsize=9)
            worst = np.nanmax(grid)
            print(f"{name:6s} {title:20s} worst relative difference {worst:.1e}")
            if row == len(species) - 1:
                ax.set_xlabel("T (nK)")
            if col == 0:
                ax.set_ylabel(r"$\eta$")
    fig.colorbar(im, ax=axes, label=r"$\log_{10}$ max |fast / reference $-$ 1| over $a$")
    fig.suptitle("Fast thermal averages against adaptive quadrature (rtol 1e-12); target 1e-6", fontsize=10)
    path = os.path.join(HERE, "..", "docs", "thermal-averages-accuracy.png")
    fig.savefig(path, dpi=110)
    print(f"wrote {os.path.normpath(path)}")


if __name__ == "__main__":
    main()
