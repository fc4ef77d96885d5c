"""Convergence and comparison study for the STM route (docs/stm.md tables).

Run:  OMP_NUM_THREADS=1 python scripts/stm_study.py  (a few minutes on one core).
Prints Markdown tables: convergence in the cutoff Lambda a and the grid density,
and beta(E) compared with the hyperspherical atom-dimer solver.
"""

import math
import os
import sys

os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np
from scipy.optimize import minimize_scalar

from lossfit.constants import S0
from lossfit.universal.solver import stm


def kappa_a_plus(cut, **g):
    def f(x):
        return stm.recombination_shallow(math.exp(x), cutoff=cut, convention="events", **g)
    r = minimize_scalar(f, bracket=(math.log(0.31), math.log(0.32)), tol=1e-11)
    return math.exp(r.x)


def negative_a_coefficient(cut, eta=0.1, **g):
    km = stm.kappa_a_minus(cut, **g)
    k = stm.recombination_deep(abs(km), eta, cut, convention="events", negative_a=True, **g)
    return km, k * math.sinh(eta) ** 2 / math.sinh(2 * eta)


def convergence():
    print("| Lambda a | nodes/decade | kappa* a* | A | B | C_beta = 3 pi B | kappa* a_+ |"
          " K3 max (events) | kappa* a_- | C_- (events) |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for cut in (1e3, 1e4, 1e5, 1e6, 1e7):
        for pd in ((16, 24, 32) if cut == 1e6 else (24,)):
            g = dict(per_decade=pd)
            r = stm.fit_atom_dimer_universal(cutoff=cut, npoints=15, **g)
            kp = kappa_a_plus(cut, **g)
            kmax = stm.recombination_shallow(kp * math.exp(math.pi / 2 / S0), cutoff=cut,
                                             convention="events", **g)
            try:
                km, cm = negative_a_coefficient(cut, **g)
            except RuntimeError:
                km, cm = float("nan"), float("nan")
            print(f"| {cut:.0e} | {pd} | {r['kappa_a_star']:.8f} | {r['A']:.6f} | "
                  f"{r['B']:.6f} | {r['C_beta']:.5f} | {kp:.7f} | {kmax:.5f} | {km:.7f} | "
                  f"{cm:.3f} |", flush=True)


def beta_energy(kappa_a=0.15, eta=0.2, cut=1e6, nchans=(64, 128)):
    from lossfit.universal.solver import atom_dimer
    from lossfit.universal.solver.scattering import phase_phi

    phi = float(phase_phi(kappa_a))
    print(f"\nbeta(E) m/(hbar a), kappa* a = {kappa_a}, eta = {eta}")
    print("| k_AD a | STM | " + " | ".join(f"hyperspherical N = {n}" for n in nchans)
          + " | rel. diff (largest N) |")
    print("|---|---|" + "---|" * len(nchans) + "---|")
    for kad in (0.01, 0.1, 0.3, 0.6, 0.9, 1.1):
        b_stm = stm.relaxation_beta(kappa_a, eta, kad=kad, cutoff=cut)
        row = []
        for n in nchans:
            t, ph = atom_dimer.s_ad_components(kad, nchan=n)
            s = math.sqrt(1 - t) * np.exp(1j * ph)
            p = t * (1 - math.exp(-4 * eta)) / abs(1 + s * np.exp(2j * phi - 2 * eta)) ** 2
            row.append(3 * math.pi * p / (2 * kad))
        print(f"| {kad} | {b_stm:.5f} | " + " | ".join(f"{v:.5f}" for v in row)
              + f" | {row[-1] / b_stm - 1:+.2e} |", flush=True)


def energy_table(kappa_a=0.15, eta=0.2):
    print(f"\nEnergy dependence, kappa* a = {kappa_a}, eta = {eta} (and eta = 0 for K3)")
    print("| E m a^2/hbar^2 | k_AD a | Re delta (rad) | 1 - abs(S)^2 | beta_deep | beta_breakup |"
          " K3_shallow events, eta | K3_shallow events, eta = 0 |")
    print("|---|---|---|---|---|---|---|---|")
    for e in (-0.99, -0.9, -0.5, -0.1, 1e-3, 0.01, 0.1, 0.3, 1.0, 3.0, 10.0):
        r = stm.above_breakup(e, kappa_a, eta)
        delta = np.angle(r["S"]) / 2
        k3 = r.get("k3_shallow_events", float("nan"))
        k30 = (stm.above_breakup(e, kappa_a, 0.0)["k3_shallow_events"] if e > 0
               else float("nan"))
        print(f"| {e} | {r['k_ad']:.5f} | {delta:+.5f} | {r['p_total']:.6e} | "
              f"{r['beta_deep']:.5f} | {r['beta_breakup']:.5e} | {k3:.5f} | {k30:.5f} |",
              flush=True)
    print("\nabove_breakup discretisation (E = 1, 10): per_decade / narc / phi")
    for e in (1.0, 10.0):
        for pd, na, phi in ((48, 32, None), (64, 48, None), (48, 32, 0.15)):
            r = stm.above_breakup(e, kappa_a, eta, per_decade=pd, narc=na, phi=phi)
            print(f"E = {e}: pd {pd} narc {na} phi {phi}: p_total {r['p_total']:.9f} "
                  f"p_breakup {r['p_breakup']:.9f}", flush=True)


if __name__ == "__main__":
    what = sys.argv[1:] or ["convergence", "beta", "energy"]
    if "convergence" in what:
        convergence()
    if "beta" in what:
        beta_energy()
        beta_energy(kappa_a=1.5, eta=0.05)
    if "energy" in what:
        energy_table()
