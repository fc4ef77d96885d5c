#!/usr/bin/env python
"""Figure docs/recombination-high-energy.png: the a > 0 shallow-dimer J >= 1 sum up to
unitarity (scripts/make_recombination_tail.py, docs/stm.md section 7c).

Left: S = sum_J (2J+1) P_J against k a = sqrt(E m a^2/hbar^2): the three-body table's
solves, the Born sum over all J, S = S_Born - D above the table, the direct low-J checks
and the asymptotic form.  Middle: the Born correction D of the low partial waves: exact
on the table, at the checks, and the power law used above the table.  Right: the
estimated error of S.
Usage: python scripts/plot_recombination_tail.py [--out PATH]
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

from lossfit.universal.tables import load_recombination_table, table_path  # noqa: E402


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=os.path.join(ROOT, "docs", "recombination-high-energy.png"))
    args = ap.parse_args()
    with np.load(table_path("recombination_positive_a.npz")) as d:
        t_energy, t_sum = d["energy"], d["higher_j_over_e2"] * d["energy"] ** 2
        t_err = d["higher_j_err_rel"]
    with np.load(table_path("recombination_high_energy.npz")) as d:
        he = {k: d[k] for k in d.files if k != "metadata"}
    tab = load_recombination_table()
    c0, c1, c2 = tab.unitarity_tail["higher_j"]
    fig, (ax1, ax2, ax3) = plt.subplots(1, 3, figsize=(15, 4.2))

    sel = t_energy >= 1.0
    ax1.semilogx(np.sqrt(t_energy[sel]), t_sum[sel], "k-", label="three-body table (solves + Born tail)")
    ax1.semilogx(np.sqrt(he["energy"]), he["born_sum"], "C1--", label="Born form, every J")
    ax1.semilogx(np.sqrt(t_energy[t_energy >= 100]),
                 t_sum[t_energy >= 100] + he["table_born_correction"], "C1--")
    ax1.semilogx(np.sqrt(he["energy"]), he["higher_j"], "C0-", lw=2, label="S = S_Born − D (shipped)")
    # at the checks: low J solved, Born above, minus half the estimated rest (+- half of it)
    check_s = he["check_sum"] - 0.5 * he["check_remainder"]
    check_d = he["check_correction_solved"] + 0.5 * he["check_remainder"]
    ax1.errorbar(np.sqrt(he["check_energy"]), check_s, yerr=0.5 * he["check_remainder"], fmt="rs", ms=5,
                 label="low J solved directly")
    x_far = np.geomspace(np.sqrt(he["energy"][-1]), 1e6, 50)
    ax1.semilogx(x_far, c0 + c1 / x_far + c2 / x_far ** 2, "C0:", lw=2, label=f"asymptote, c0 = {c0:.4f}")
    ax1.set_xlabel("k a = (E / E_b)^1/2")
    ax1.set_ylabel("Σ_{J≥1} (2J+1) P_J")
    ax1.set_title("a > 0: shallow-dimer J ≥ 1 sum up to unitarity")
    ax1.legend(fontsize=8, loc="lower right")

    ax2.loglog(np.sqrt(he["table_energy"]), he["table_born_correction"], "k.", label="D on the table (exact)")
    ax2.errorbar(np.sqrt(he["check_energy"]), check_d, yerr=0.5 * he["check_remainder"], fmt="rs", ms=5,
                 label="D at the checks (solved J + estimated rest)")
    ax2.set_xscale("log")
    ax2.set_yscale("log")
    ax2.loglog(np.sqrt(he["energy"]), he["born_correction"], "C0-", label="D used (power law)")
    ax2.set_xlabel("k a")
    ax2.set_ylabel("D = S_Born − S")
    ax2.set_title("Born correction of the low partial waves")
    ax2.legend(fontsize=8)

    ax3.loglog(t_energy, np.clip(t_err, 1e-12, None), "k-", label="three-body table")
    ax3.loglog(he["energy"], he["higher_j_err_rel"], "C0-", label="extension (D, coarse run, truncation)")
    ax3.loglog(he["err_energy"], np.clip(he["err_born_sum_rel"], 1e-12, None), "C2o", ms=4,
               label="Born sum: coarse run against main")
    ax3.axhline(1e-4, color="k", ls=":", lw=0.8)
    ax3.set_xlabel("E / E_b")
    ax3.set_ylabel("relative error estimate of S")
    ax3.set_title("estimated error")
    ax3.legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(args.out, dpi=110)
    print("wrote", args.out)


if __name__ == "__main__":
    main()
