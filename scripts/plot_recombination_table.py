#!/usr/bin/env python
"""Figure docs/recombination-partial-waves.png from the shipped a > 0 three-body table.

Left: breakup probabilities P_J(E) of the J >= 1 partial waves (universal) and the J >= 1
share of shallow-dimer recombination (band: all phases Phi at eta = 0.1).  Middle: the
second-order Born form of the high partial waves against solves.  Right: the error
estimate of the table (main run against the independent coarser run) and the estimated
error of the J >= 1 sum from its Born part and truncation.
Usage: python scripts/plot_recombination_table.py [--out PATH]
"""

import argparse
import os
import sys

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)

import math  # noqa: E402

from lossfit.universal.solver.partial_waves import PartialWaveSolver  # noqa: E402
from lossfit.universal.tables import load_recombination_table, table_path  # noqa: E402


def born_against_solves(energy, j_max):
    """(J, |P_Born / P_solve - 1|) at one three-atom energy, default solver settings of the table."""
    kad = math.sqrt(4.0 * (energy + 1.0) / 3.0)
    phi = min(0.5, 0.6 * math.atan(2.0 / kad))
    sol = PartialWaveSolver(kad, cutoff=1e3 * max(1.0, kad), phi=phi, per_decade=48, narc=32,
                            dmax=0.5 * kad * math.tan(phi) if kad > 4.0 else None)
    js = np.arange(1, j_max + 1)
    solved = 1.0 - np.abs(sol.amplitudes(js)) ** 2
    return js / kad, np.abs(sol.born_breakup(j_max) / solved - 1.0)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=os.path.join(ROOT, "docs", "recombination-partial-waves.png"))
    args = ap.parse_args()
    with np.load(table_path("recombination_positive_a.npz")) as d:
        energy, p_j = d["energy"], d["p_break_j"]
        err_e = d["err_energy"]
        errs = {"A/E² (J = 0 breakup)": d["err_breakup_a"], "T_break/E² (deep)": d["err_t_break"],
                "Σ(2J+1)P_J, J ≥ 1": d["err_higher_j"]}
        born_err = d["higher_j_err_rel"]
    tab = load_recombination_table()
    fig, (ax1, ax3, ax2) = plt.subplots(1, 3, figsize=(15, 4.2))
    for e, j_max in ((10.0, 24), (100.0, 48), (1000.0, 96)):
        x, rel = born_against_solves(e, j_max)
        ax3.loglog(x, np.clip(rel, 1e-12, None), ".-", label=f"E = {e:g} E_b")
    ax3.set_xlabel("J / (k_AD a)")
    ax3.set_ylabel("|P_J(Born) / P_J(solve) − 1|")
    ax3.set_title("large-J form against solves")
    ax3.legend(fontsize=8)
    for j in (1, 2, 3, 5, 10, 20):
        ax1.loglog(energy, np.clip(p_j[:, j - 1], 1e-12, None), label=f"P_{j}")
    cols = tab.evaluate(energy)
    s = cols[:, 0] + 1j * cols[:, 1]
    b = cols[:, 3] + 1j * cols[:, 4]
    share = []
    for phi in np.linspace(0, np.pi, 24, endpoint=False):
        w = np.exp(2j * phi - 0.2)
        j0 = (cols[:, 2] + 2 * np.real(b * w) + cols[:, 5] * abs(w) ** 2) / np.abs(1 + s * w) ** 2
        share.append(cols[:, 7] / (j0 + cols[:, 7]))
    share = np.array(share)
    ax1.fill_between(energy, share.min(0), share.max(0), color="0.8", label="J ≥ 1 share of K3_shallow")
    ax1.set_ylim(1e-8, 1.5)
    ax1.set_xlabel("three-atom energy E  [ħ²/(m a²)] = E / E_b")
    ax1.set_ylabel("probability")
    ax1.set_title("a > 0: breakup in J ≥ 1 (universal)")
    ax1.legend(fontsize=8, loc="lower right")
    for label, e in errs.items():
        ax2.loglog(err_e, np.clip(e, 1e-12, None), "o-", label=label)
    ax2.loglog(energy, np.clip(born_err, 1e-12, None), "k-", lw=1,
               label="J ≥ 1 sum: Born part + truncation (est.)")
    ax2.axhline(1e-4, color="k", ls=":", lw=0.8)
    ax2.set_xlabel("E / E_b")
    ax2.set_ylabel("relative error estimate")
    ax2.set_title("table error estimate")
    ax2.legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(args.out, dpi=110)
    print("wrote", args.out)


if __name__ == "__main__":
    main()
