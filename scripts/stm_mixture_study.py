"""Tables of docs/stm-mixture.md: the B-B-X momentum-space solver against mass ratio.

Run:  OMP_NUM_THREADS=1 python scripts/stm_mixture_study.py [SECTION ...] [--processes N]

SECTION is any of ``s0``, ``identical``, ``systems``, ``scaling``, ``abb``, ``energy``
(default: all; about 9 min on two processes).  Prints Markdown tables.  Units: K3 (events, rate K3 n_B^2 n_X) in
hbar a^4/m_B, beta in hbar a/m_B, kappa* defined by E_T = -hbar^2 kappa*^2/(2 mu) at 1/a = 0
(docs/stm-mixture.md section 1).
"""

import math
import os
import sys

os.environ.setdefault("OMP_NUM_THREADS", "1")

from multiprocessing import Pool  # noqa: E402

from lossfit.species import species  # noqa: E402
from lossfit.universal.solver import stm_mixture as sm  # noqa: E402

SYSTEMS = [("133Cs", "6Li"), ("133Cs", "7Li"), ("87Rb", "40K"), ("87Rb", "41K"), ("B", "B")]
SETTINGS = [(1e6, 24), (1e7, 24), (1e6, 48)]


def mass_ratio(b, x):
    if b == x == "B":
        return 1.0
    return species(b).mass_u / species(x).mass_u


def label(b, x):
    return "equal masses (a_bb = 0)" if b == x == "B" else f"{b}-{b}-{x}"


def universal_numbers(args):
    """Every threshold number of one system on one grid."""
    ratio, a_bb, cut, pd = args
    s = sm.MixtureSTM(ratio, a_bb_ratio=a_bb, cutoff=cut, per_decade=pd)
    sym = a_bb != 0.0
    km = s.kappa_a_minus()
    cm = s.negative_a_coefficient(km)
    ks = s.kappa_a_star()
    fit = s.fit_atom_dimer(ks, npoints=11, symmetric_drive=sym)
    kp = s.kappa_a_plus(ks)
    pa = s.positive_a_coefficients(kp)
    return {"ratio": ratio, "cut": cut, "pd": pd, "s0": s.s0, "lam": s.scaling_factor,
            "km": km, "cm": cm["C_minus"], "cm_spread": cm["spread"], "ks": ks, "A": fit["A"],
            "B": fit["B"], "cbeta": fit["C_beta"], "fit_res": fit["max_residual"], "kp": kp,
            "cplus": pa["C_plus"], "smax": pa["shallow_max"], "cdeep": pa["C_deep"],
            "spread_plus": pa["spread_plus"], "spread_deep": pa["spread_deep"]}


def scaling_numbers(args):
    """a_-^(1)/a_-^(0) and the kappa* -> lambda kappa* invariance of C_-, a_AD."""
    ratio, cut, pd = args
    s = sm.MixtureSTM(ratio, cutoff=cut, per_decade=pd)
    k0 = s.kappa_a_minus(level=0)
    k1 = s.kappa_a_minus(level=1)
    lam = s.scaling_factor
    c0 = s.negative_a_coefficient(k0, thetas=(0.5,))["C_minus"]
    c1 = s.negative_a_coefficient(k0 * lam, thetas=(0.5,))["C_minus"]
    a0 = s.atom_dimer_length(0.3, 0.1)
    a1 = s.atom_dimer_length(0.3 * lam, 0.1)
    r0 = s.recombination(0.3, 0.1)["total"]
    r1 = s.recombination(0.3 * lam, 0.1)["total"]
    return {"ratio": ratio, "lam": lam, "k0": k0, "k1": k1, "c_rel": c1 / c0 - 1.0,
            "aad_rel": abs(a1 - a0) / abs(a0), "k3_rel": r1 / r0 - 1.0}


def abb_numbers(args):
    """a < 0 with a_bb/a held fixed: kappa* a_-, C_- for two weights of the B-B channel in
    the three-body force (universality check of that choice)."""
    ratio, abb, cut, rho = args
    s = sm.MixtureSTM(ratio, a_bb_ratio=abb, cutoff=cut, rho_bb=rho)
    km = s.kappa_a_minus()
    c = s.negative_a_coefficient(km)
    return {"s0": s.s0, "km": km, "cm": c["C_minus"], "spread": c["spread"],
            "rho": s.channels[1]["rho"]}


def section_abb(pool):
    print("\n## a < 0 with a_bb = a (all three pairs resonant, a_bb/a fixed)\n")
    print("| system | Lambda a | rho_BB | s0 (three pairs) | kappa* a_- | C_- | C_- spread |")
    print("|---|---|---|---|---|---|---|")
    jobs, names = [], []
    for b, x in SYSTEMS[:2]:
        for cut in (1e5, 1e6):
            for rho in (None, 1.0):
                jobs.append((mass_ratio(b, x), 1.0, cut, rho))
                names.append((label(b, x), cut))
    for (n, cut), r in zip(names, pool.imap(abb_numbers, jobs)):
        print(f"| {n} | {cut:.0e} | {r['rho']:.5f} | {r['s0']:.6f} | {r['km']:.7f} | {r['cm']:.2f} |"
              f" {r['spread']:.1e} |", flush=True)


def efimov_channel_fit(kappas, values, s0, eta):
    """|s11| and T from K3/bound = T (1 - e^{-4 eta})/|1 + s11 e^{2 i s0 ln kappa* - 2 eta}|^2
    over a period of kappa* (linear least squares in the reciprocal, as stm.s_ad_fit)."""
    import numpy as np

    th = s0 * np.log(np.asarray(kappas))
    y = (1.0 - math.exp(-4.0 * eta)) / np.asarray(values)
    a = np.c_[np.ones_like(th), np.cos(2.0 * th), np.sin(2.0 * th)]
    c, *_ = np.linalg.lstsq(a, y, rcond=None)
    r = math.hypot(c[1], c[2]) / c[0]                 # 2x/(1 + x^2), x = |s11| e^{-2 eta}
    x = (1.0 - math.sqrt(1.0 - r * r)) / r
    return {"s11": x * math.exp(2.0 * eta), "T": (1.0 + x * x) / c[0],
            "residual": float(np.max(np.abs(a @ c - y)) / np.max(np.abs(y)))}


def unitarity_numbers(args):
    """1/a = 0, E = hbar^2/(2 mu) (kappa* units): K3/bound over a period of kappa*."""
    import numpy as np

    ratio, eta, npts = args
    s = sm.MixtureSTM(ratio, cutoff=1e4, qmin=1e-4)
    ks = 0.01 * np.exp(np.arange(npts) * math.pi / (npts * s.s0))
    vals = []
    for k in ks:
        out = s.recombination_energy(k, eta, 1.0, inv_a=0.0)
        vals.append(out["k3"] / out["bound"])
    fit = efimov_channel_fit(ks, vals, s.s0, eta)
    return dict(fit, s0=s.s0, vmin=min(vals), vmax=max(vals))


def energy_numbers(args):
    """a < 0: K3(E) of 133Cs-133Cs-6Li at k|a| (E = hbar^2 k^2/(2 mu))."""
    ratio, factor, kas = args
    s = sm.MixtureSTM(ratio, cutoff=1e4, qmin=1e-4)
    km = s.kappa_a_minus()
    thr = s.recombination(abs(km) * factor, 0.1, negative_a=True)["deep"]
    rows = []
    for ka in kas:
        out = s.recombination_energy(abs(km) * factor, 0.1, ka * ka)
        rows.append((ka, out["k3"], out["k3"] / thr, out["error"] / out["k3"], out["k3"] / out["bound"]))
    return factor, thr, rows


def section_energy(pool):
    eta = 0.1
    print("\n## E > 0, 1/a = 0: the Efimov channel against the exact unitarity values (eta = 0.1)\n")
    print("| system | s0 | abs(s11) | e^(-pi s0) | T | 1 - e^(-2 pi s0) | K3/bound min, max |"
          " band (1 - e^(-2 pi s0))(1 - e^(-4 eta))/(1 +- e^(-pi s0 - 2 eta))^2 | fit residual |")
    print("|---|---|---|---|---|---|---|---|---|")
    jobs = [(mass_ratio(b, x), eta, 12) for b, x in SYSTEMS[:4]]
    for (b, x), r in zip(SYSTEMS, pool.imap(unitarity_numbers, jobs)):
        s0 = r["s0"]
        e1, e2 = math.exp(-math.pi * s0), math.exp(-2.0 * math.pi * s0)
        lo = (1 - e2) * (1 - math.exp(-4 * eta)) / (1 + e1 * math.exp(-2 * eta)) ** 2
        hi = (1 - e2) * (1 - math.exp(-4 * eta)) / (1 - e1 * math.exp(-2 * eta)) ** 2
        print(f"| {label(b, x)} | {s0:.5f} | {r['s11']:.5f} | {e1:.5f} | {r['T']:.5f} | {1 - e2:.5f} |"
              f" {r['vmin']:.5f}, {r['vmax']:.5f} | {lo:.5f}, {hi:.5f} | {r['residual']:.1e} |", flush=True)
    print("\n## E > 0, a < 0: 133Cs-133Cs-6Li, eta = 0.1 (K3 in hbar a^4/m_B, events)\n")
    print("| kappa* abs(a) | k abs(a) | K3(E) | K3(E)/K3(0) | est. extrapolation error | K3/bound |")
    print("|---|---|---|---|---|---|")
    kas = (0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0)
    jobs = [(mass_ratio("133Cs", "6Li"), f, kas) for f in (1.0, 1.3)]
    for factor, thr, rows in pool.imap(energy_numbers, jobs):
        print(f"| {factor} abs(kappa* a_-) | 0 | {thr:.6g} | 1 | | |")
        for ka, k3, rel, err, bnd in rows:
            print(f"| | {ka} | {k3:.6g} | {rel:.5f} | {err:.1e} | {bnd:.4f} |", flush=True)


def section_s0():
    print("\n## s0 from the kernel's Mellin transform\n")
    print("| system | m_B/m_X | s0 (Mellin, kernel) | s0 (closed form, BH 2006) | lambda = e^(pi/s0) |")
    print("|---|---|---|---|---|")
    for b, x in SYSTEMS:
        r = mass_ratio(b, x)
        s = sm.efimov_exponent(r)
        print(f"| {label(b, x)} | {r:.6f} | {s:.8f} | {sm.efimov_exponent_closed_form(r):.8f} |"
              f" {math.exp(math.pi / s):.4f} |")
    s = sm.efimov_exponent(1.0, three_pairs=True)
    print(f"| equal masses, three resonant pairs | 1 | {s:.8f} | (Efimov: 1.00624) |"
          f" {math.exp(math.pi / s):.4f} |")


def _row(r, name):
    return (f"| {name} | {r['cut']:.0e} | {r['pd']} | {r['km']:.7f} | {r['cm']:.3f} | "
            f"{r['ks']:.8f} | {r['A']:.5f} | {r['B']:.5f} | {r['cbeta']:.5f} | {r['kp']:.7f} | "
            f"{r['smax']:.5f} | {r['cplus']:.3f} | {r['cdeep']:.3f} |")


HEADER = ("| system | Lambda a | nodes/decade | kappa* a_- | C_- | kappa* a* | A | B | C_beta |"
          " kappa* a_+ | K3 shallow max | C_+ | C_deep |\n"
          "|---|---|---|---|---|---|---|---|---|---|---|---|---|")


def section_identical(pool):
    print("\n## Equal masses, a_bb = a (three identical bosons) from the coupled equations\n")
    print(HEADER)
    jobs = [(1.0, 1.0, 1e5, 24), (1.0, 1.0, 1e6, 24), (1.0, 1.0, 1e6, 32)]
    for r in pool.imap(universal_numbers, jobs):
        print(_row(r, "identical"), flush=True)


def section_systems(pool):
    print("\n## Threshold numbers, a_bb = 0 (units m_B; events K3 n_B^2 n_X)\n")
    print(HEADER)
    jobs = [(mass_ratio(b, x), 0.0, c, p) for b, x in SYSTEMS for c, p in SETTINGS]
    names = [label(b, x) for b, x in SYSTEMS for _ in SETTINGS]
    results = list(pool.imap(universal_numbers, jobs))
    for r, n in zip(results, names):
        print(_row(r, n), flush=True)
    print("\n| system | s0 | a*/abs(a_-) | a_+/abs(a_-) | a_+/a* | C_-/[(C_+/2) coth(pi s0)] |"
          " C_deep/C_- | cot-fit residual | C_- spread | C_+ spread | C_deep spread |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for r, n in zip(results, names):
        if (r["cut"], r["pd"]) != (1e7, 24):
            continue
        rel = r["cm"] / (0.5 * r["cplus"] / math.tanh(math.pi * r["s0"]))
        print(f"| {n} | {r['s0']:.5f} | {r['ks'] / abs(r['km']):.6f} | {r['kp'] / abs(r['km']):.6f} |"
              f" {r['kp'] / r['ks']:.6f} | {rel:.7f} | {r['cdeep'] / r['cm']:.7f} | {r['fit_res']:.1e} |"
              f" {r['cm_spread']:.1e} | {r['spread_plus']:.1e} | {r['spread_deep']:.1e} |")


def section_scaling(pool):
    print("\n## Discrete scaling (Lambda a = 1e6, 24 nodes/decade)\n")
    print("| system | lambda | kappa* a_-^(0) | kappa* a_-^(1) | ratio/lambda - 1 |"
          " C_-(lambda kappa*)/C_-(kappa*) - 1 | a_AD rel. change | K3(a > 0) rel. change |")
    print("|---|---|---|---|---|---|---|---|")
    jobs = [(mass_ratio(b, x), 1e6, 24) for b, x in SYSTEMS[:4]]
    for (b, x), r in zip(SYSTEMS, pool.imap(scaling_numbers, jobs)):
        print(f"| {label(b, x)} | {r['lam']:.5f} | {r['k0']:.7f} | {r['k1']:.5f} |"
              f" {r['k1'] / r['k0'] / r['lam'] - 1.0:.1e} | {r['c_rel']:.1e} | {r['aad_rel']:.1e} |"
              f" {r['k3_rel']:.1e} |", flush=True)


def main(argv):
    nproc = 2
    if "--processes" in argv:
        i = argv.index("--processes")
        nproc = int(argv[i + 1])
        argv = argv[:i] + argv[i + 2:]
    sections = argv or ["s0", "identical", "systems", "scaling", "abb", "energy"]
    with Pool(nproc) as pool:
        for name in sections:
            if name == "s0":
                section_s0()
            elif name == "identical":
                section_identical(pool)
            elif name == "systems":
                section_systems(pool)
            elif name == "scaling":
                section_scaling(pool)
            elif name == "abb":
                section_abb(pool)
            elif name == "energy":
                section_energy(pool)
            else:
                raise SystemExit(f"unknown section {name!r}")


if __name__ == "__main__":
    main(sys.argv[1:])
