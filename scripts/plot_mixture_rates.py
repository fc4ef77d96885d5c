"""Figure docs/heteronuclear-rates.png: thermal L3 of 133Cs-133Cs-6Li and 87Rb-87Rb-41K at a < 0.

Event rate (loss of X), zero-range, a_bb = 0, a_- and eta invented for illustration, at
three temperatures, with each system's J = 0 unitarity bound at those temperatures.

Run: python scripts/plot_mixture_rates.py [--out PATH]
"""

import argparse
import os
import warnings

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

import lossfit as lf  # noqa: E402
from lossfit.mixture import heteronuclear  # noqa: E402

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
CASES = [("133Cs", "6Li", -320.0, np.geomspace(230.0, 4e4, 400)),
         ("87Rb", "41K", -2000.0, np.geomspace(250.0, 4e5, 400))]
TEMPERATURES = (10.0, 100.0, 1000.0)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=os.path.join(ROOT, "docs", "heteronuclear-rates.png"))
    args = ap.parse_args()
    warnings.simplefilter("ignore", lf.errors.ValidityWarning)
    fig, axes = plt.subplots(1, 2, figsize=(10, 4.2), constrained_layout=True)
    colours = ("#1b6ca8", "#d1495b", "#6a994e")
    for ax, (boson, other, a_minus, a) in zip(axes, CASES):
        system = heteronuclear(boson, other)
        efimov = lf.Efimov(a_minus=a_minus, eta_minus=0.1)
        for t, colour in zip(TEMPERATURES, colours):
            ax.loglog(a, lf.l3(-a, t, species=system, efimov=efimov), color=colour, label=f"{t:g} nK")
            ax.axhline(system.unitarity_bound(t), color=colour, lw=0.8, ls=":")
        for n in range(4):
            feature = abs(a_minus) * system.scaling ** n
            if feature < a[-1]:
                ax.axvline(feature, color="0.6", lw=0.7, ls="--")
        ax.set_title(f"{system.name}: a_- = {a_minus:g} a0, eta = 0.1, s0 = {system.s0:.3f}", fontsize=9)
        ax.set_xlabel("|a| (a0), a < 0")
        ax.set_ylabel("K3, events (cm^6/s)")
        ax.legend(title="dotted: J = 0 bound", fontsize=8, title_fontsize=8)
    fig.savefig(args.out, dpi=110)
    print(args.out)


if __name__ == "__main__":
    main()
