#!/usr/bin/env python
"""Figure docs/observed-loss.png: three-body loss through the resonance.

L3 against 1/a from a < 0 to a > 0 (¹³³Cs, universal tie a_- = -900 a0, eta = 0.1; an
invented parameter set) at three temperatures: the default observed channel (what a
trapped gas with U = 10 k_B T loses, docs/conventions.md) against the formal total and
deep-dimer channels. Dotted verticals mark where the binding energy E_b = hbar^2/(m a^2)
equals 1.5 U (above it every atom formed with a dimer leaves) and 6 U (above it the
dimer leaves too) at each temperature.
Usage: python scripts/plot_observed_loss.py [--out PATH]
"""

import argparse
import os
import sys
import warnings

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import scipy.constants as sc  # noqa: E402

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)

import lossfit as lf  # noqa: E402
from lossfit.dimer_kinetics import DEFAULT_DEPTH_OVER_T, DIMER_DEPTH_RATIO  # noqa: E402

A0 = sc.physical_constants["Bohr radius"][0]


def inverse_a_where_binding_is(energy_nk, species):
    """1000 a0 / a where hbar^2/(m a^2) = energy (nK)."""
    a = sc.hbar / np.sqrt(species.mass * energy_nk * 1e-9 * sc.k) / A0
    return 1000.0 / a


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=os.path.join(ROOT, "docs", "observed-loss.png"))
    args = ap.parse_args()
    sp = lf.species("133Cs")
    ef = lf.Efimov.universal(-900.0, 0.1)
    x = np.concatenate([-np.geomspace(1.8, 1e-5, 220), np.geomspace(1e-5, 1.8, 220)])   # 1000 a0 / a
    a = 1000.0 / x
    fig, ax = plt.subplots(figsize=(8.5, 5.2), layout="constrained")
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lf.errors.ValidityWarning)
        for colour, t in zip(colours, (20.0, 100.0, 500.0)):
            obs = lf.l3(a, t, species=sp, efimov=ef)
            tot = lf.l3(a, t, species=sp, efimov=ef, channel="total")
            deep = lf.l3(a, t, species=sp, efimov=ef, channel="deep")
            pos = x > 0
            ax.plot(x, obs, color=colour, lw=2.0, label=f"{t:g} nK: observed (U = {DEFAULT_DEPTH_OVER_T:g} k$_B$T)")
            ax.plot(x[pos], tot[pos], color=colour, lw=1.0, ls="--", label=f"{t:g} nK: total (shallow + deep)")
            ax.plot(x[pos], deep[pos], color=colour, lw=1.0, ls=":", label=f"{t:g} nK: deep dimers only")
            u = DEFAULT_DEPTH_OVER_T * t
            for factor in (1.5, 3.0 * DIMER_DEPTH_RATIO):
                ax.axvline(inverse_a_where_binding_is(factor * u, sp), color=colour, lw=0.7, ls=(0, (1, 3)))
    ax.set_xscale("symlog", linthresh=0.02)
    ax.set_yscale("log")
    ax.set_ylim(1e-28, 1e-19)
    ax.set_xlabel(r"$1000\,a_0/a$  (a < 0 left, a > 0 right; 0 is the resonance)")
    ax.set_ylabel(r"$L_3$ (cm$^6$/s)")
    ax.set_title(r"$^{133}$Cs, $a_- = -900\,a_0$, $\eta = 0.1$ (invented set); verticals: $E_b$ = 1.5 U and 6 U",
                 fontsize=9)
    ax.legend(fontsize=7, ncol=3, loc="lower center")
    fig.savefig(args.out, dpi=130)
    print(args.out)


if __name__ == "__main__":
    main()
