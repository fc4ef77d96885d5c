#!/usr/bin/env python
"""Regenerate the zero-range universal-function table(s) in lossfit/universal/data/.

Deterministic: no timestamps, no random numbers; the only run-dependent metadata is
the git commit (``git rev-parse HEAD``) of the code that produced the numbers.

Table ``s11_negative_a.npz`` (a < 0, J = 0, three identical bosons, exact zero-range
theory in the adiabatic hyperspherical representation, see docs/solver.md):

    x                  k|a| grid (log, 1e-3 ... 1e3), E = hbar^2 k^2 / m
    transmission       1 - |s11(x)|^2 (flux not returned to short distance)
    log_transmission   ln(1 - |s11|^2) (smooth in ln x; interpolate this)
    phase              arg s11(x), unwrapped along the grid (radians)
    s11                complex s11(x)
    x_err, err_transmission_rel, err_phase
                       error estimate on every 4th point: |difference| to runs with
                       fewer channels and a smaller outer radius, added
    threshold_c4       lim (1 - |s11|^2)/x^4        (x -> 0)
    threshold_phase    lim arg s11                   (x -> 0)
    kappa_star_a_minus kappa* a_- from threshold_phase (branch of the kappa* trimer)
    trimer_inv_kappa_star_a, trimer_kappa_over_kappa_star
                       the a < 0 trimer of the kappa* branch: E = -(hbar kappa)^2/m versus
                       1/(kappa* a), from near unitarity down to the threshold
    trimer_pos_inv_kappa_star_a, trimer_pos_kappa_over_kappa_star
                       the same for a > 0, from near unitarity towards the atom-dimer
                       threshold (kappa a from 100 down to 1.01; 48 channels, R_m = 16 a)
    k3_prefactor       72 sqrt(3) pi^2: K3 = k3_prefactor hbar/(m k^4) x absorption
    metadata           JSON string: method, grids, cutoffs, channels, git hash

Usage: python scripts/make_universal_tables.py [--quick] [--convergence]

``--convergence`` instead reruns the convergence study of docs/solver.md and writes
docs/solver-convergence.png (about 15 min on one core; needs matplotlib).
"""

import argparse
import json
import math
import os
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
sys.path.insert(0, ROOT)

from lossfit.batch.provenance import git_revision  # noqa: E402
from lossfit.universal.solver.boundstates import (  # noqa: E402
    kappa_star_from_phase,
    trimer_branch_negative_a,
    trimer_branch_positive_a,
)
from lossfit.universal.solver.scattering import DEFAULTS, K3_PREFACTOR, S0, s11_components  # noqa: E402


def git_hash():
    return git_revision() or "unknown"


def convergence_study(table_path):
    """Recompute the convergence numbers quoted in docs/solver.md and draw the figure."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from lossfit.universal.solver.boundstates import atom_dimer_threshold_phase
    from lossfit.universal.solver.scattering import s11_unitarity

    res = {}
    t0 = time.time()
    # (a) channel count at threshold-like x = 0.01
    ns = [1, 2, 4, 8, 12, 16, 24, 32, 48]
    a = [s11_components(0.01, -1, nchan=n) for n in ns]
    res["nchan"] = dict(n=ns, transmission=[v[0] for v in a], phase=[v[1] for v in a])
    print(f"[{time.time() - t0:6.0f} s] nchan study", res["nchan"], flush=True)
    # (b) outer radius R_m = c_out / K
    cs = [20.0, 40.0, 80.0, 160.0, 320.0]
    res["c_out"] = {}
    for x in (1.0, 3.0, 30.0, 300.0):
        v = [s11_components(x, -1, nchan=10, c_out=c) for c in cs]
        res["c_out"][str(x)] = dict(c=cs, transmission=[q[0] for q in v], phase=[q[1] for q in v])
    print(f"[{time.time() - t0:6.0f} s] c_out study", flush=True)
    # (c) step size at unitarity against the exact s11, with and without Richardson
    refs = [1, 2, 4, 8]
    exact = s11_unitarity(1.0)
    raw, rich = [], []
    for r in refs:
        raw.append(abs(s11_components(1.0, 0, h=0.04 / r, c_osc=0.25 / r, richardson=False)[1]
                       - np.angle(exact)))
        rich.append(abs(s11_components(1.0, 0, h=0.04 / r, c_osc=0.25 / r)[1] - np.angle(exact)))
    res["step"] = dict(refine=refs, raw=raw, richardson=rich)
    print(f"[{time.time() - t0:6.0f} s] step study", res["step"], flush=True)
    # (d) a > 0 atom-dimer threshold: kappa* a*_0 versus channels and R_m
    res["astar"] = {}
    for rm in (10.0, 16.0, 24.0):
        vals = []
        for n in (16, 32, 48, 64, 96, 128):
            d, _ = atom_dimer_threshold_phase(n, rm)
            vals.append(float(kappa_star_from_phase(d, -1)))
        res["astar"][str(rm)] = dict(n=[16, 32, 48, 64, 96, 128], value=vals)
        print(f"[{time.time() - t0:6.0f} s] a* R_m = {rm}: {vals}", flush=True)
    print("CONVERGENCE_JSON " + json.dumps(res), flush=True)

    tab = np.load(table_path)
    fig, ax = plt.subplots(2, 2, figsize=(10, 8))
    n = np.array(ns[:-1])
    ax[0, 0].loglog(n, np.abs(np.array(res["nchan"]["phase"][:-1]) - res["nchan"]["phase"][-1]), "o-",
                    label="|arg s11(N) - arg s11(48)|")
    trn = np.array(res["nchan"]["transmission"])
    ax[0, 0].loglog(n, np.abs(trn[:-1] / trn[-1] - 1), "s-", label="|T(N)/T(48) - 1|")
    ax[0, 0].loglog(n, 1e-2 * n ** -2.5, "k:", label="N^-2.5")
    ax[0, 0].set(xlabel="channels N", title="a < 0, k|a| = 0.01")
    ax[0, 0].legend(fontsize=8)
    for x, d in res["c_out"].items():
        c = np.array(d["c"][:-1])
        ax[0, 1].loglog(c, np.abs(np.array(d["phase"][:-1]) - d["phase"][-1]) + 1e-12, "o-", label=f"k|a| = {x}")
    ax[0, 1].set(xlabel="c_out (R_m = c_out / K)", ylabel="|arg s11 - arg s11(c_out=320)|",
                 title="outer radius")
    ax[0, 1].legend(fontsize=8)
    ax[1, 0].loglog(refs, raw, "o-", label="single step")
    ax[1, 0].loglog(refs, rich, "s-", label="Richardson h, h/2")
    ax[1, 0].set(xlabel="refinement of (h, c_osc)", ylabel="|arg s11 - exact| (unitarity)",
                 title="step size vs exact |a| = inf")
    ax[1, 0].legend(fontsize=8)
    for rm, d in res["astar"].items():
        ax[1, 1].plot(d["n"], d["value"], "o-", label=f"R_m = {rm} a")
    ax[1, 1].axhline(0.0707645, color="k", ls=":", label="0.0707645 (GME 2008)")
    ax[1, 1].set(xlabel="channels N", ylabel="kappa* a*_0", title="a > 0 atom-dimer threshold")
    ax[1, 1].legend(fontsize=8)
    fig.tight_layout()
    out = os.path.join(ROOT, "docs", "solver-convergence.png")
    fig.savefig(out, dpi=110)
    fig2, bx = plt.subplots(figsize=(6, 4))
    bx.loglog(tab["x"], tab["transmission"], label="1 - |s11|^2")
    bx.loglog(tab["x"], np.full_like(tab["x"], 1 - math.exp(-2 * math.pi * S0)), "k:", label="unitarity")
    bx.loglog(tab["x"], float(tab["threshold_c4"]) * tab["x"] ** 4, "k--", label="c4 x^4")
    bx.set(ylim=(1e-13, 2), xlabel="k|a|", title="a < 0 universal transmission")
    bx.legend()
    fig2.tight_layout()
    fig2.savefig(os.path.join(ROOT, "docs", "solver-s11.png"), dpi=110)
    print(f"wrote {out}")


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="coarse grid for testing the script")
    ap.add_argument("--out", default=os.path.join(ROOT, "lossfit", "universal", "data", "s11_negative_a.npz"))
    ap.add_argument("--convergence", action="store_true", help="run the convergence study and figure")
    args = ap.parse_args()
    if args.convergence:
        convergence_study(args.out)
        return

    npts = 25 if args.quick else 241
    nchan = 12 if args.quick else 24
    nchan_check = 8 if args.quick else 16
    c_out = DEFAULTS["c_out"]
    c_out_check = c_out / 2
    x = np.logspace(-3, 3, npts)
    par = dict(nchan=nchan, r0_factor=DEFAULTS["r0_factor"], c_out=c_out,
               h=DEFAULTS["h"], c_osc=DEFAULTS["c_osc"])

    t0 = time.time()
    tr = np.empty(npts)
    ph = np.empty(npts)
    for i, xi in enumerate(x):
        tr[i], ph[i] = s11_components(float(xi), -1, **par)
        if i % 10 == 0:
            print(f"[{time.time() - t0:7.1f} s] x = {xi:.4g}  T = {tr[i]:.10g}  phase = {ph[i]:.10f}", flush=True)
    ph = np.unwrap(ph)

    idx = np.arange(0, npts, 4)
    err_t = np.empty(idx.size)
    err_p = np.empty(idx.size)
    for j, i in enumerate(idx):
        ta, pa = s11_components(float(x[i]), -1, **(par | dict(nchan=nchan_check)))
        tb, pb = s11_components(float(x[i]), -1, **(par | dict(c_out=c_out_check)))
        err_t[j] = (abs(ta - tr[i]) + abs(tb - tr[i])) / tr[i]
        err_p[j] = abs(np.angle(np.exp(1j * (pa - ph[i])))) + abs(np.angle(np.exp(1j * (pb - ph[i]))))
    print(f"[{time.time() - t0:7.1f} s] error estimates done", flush=True)

    # Threshold constants: the x-dependence of arg s11 is O(x^2) and of T/x^4 O(x^2)
    # (measured), so x = 3e-3 gives the limits to < 1e-5; smaller x loses digits in
    # 1 - |s11|^2 ~ 2e-9 to rounding.
    xt = 3e-3
    tt, pt = s11_components(xt, -1, **par)
    c4 = tt / xt ** 4
    ksam = -float(kappa_star_from_phase(pt, 0))

    kap_grid = np.geomspace(100.0, 1e-3, 12 if args.quick else 60)
    tr_inv, tr_kk = trimer_branch_negative_a(kap_grid, nchan=nchan)
    kap_pos = 1.0 + np.geomspace(99.0, 0.01, 8 if args.quick else 24)
    tp_inv, tp_kk = trimer_branch_positive_a(kap_pos, nchan=16 if args.quick else 48, rm=16.0)
    print(f"[{time.time() - t0:7.1f} s] trimer branches done", flush=True)

    meta = dict(
        quantity="s11(k|a|) for a < 0, J = 0, three identical bosons, zero-range",
        method=("adiabatic hyperspherical expansion with exact zero-range potentials "
                "(Efimov / Fedorov-Jensen transcendental equation) and analytic "
                "first-derivative couplings P; Q = dP/dR + P^2; adiabatic-by-sector "
                "log-derivative propagation (constant reference potential per sector) "
                "in t = ln R, Richardson-extrapolated in the step; see docs/solver.md"),
        energy_convention="E = hbar^2 k^2 / m, three-body energy in the centre-of-mass frame; x = k|a|",
        s11_convention="f = (R/|a|)^{+i s0} + s11 (R/|a|)^{-i s0} at R << |a|, 1/k, "
                       "solution outgoing at R -> infinity; R^2 = (r12^2 + r13^2 + r23^2)/3",
        k3_formula="K3 = k3_prefactor hbar/(m k^4) (1-|s11|^2)(1-exp(-4 eta)) / |1 + s11 exp(2 i Phi - 2 eta)|^2, "
                   "Phi = s0 ln(kappa* |a|/sqrt 2) - arg Gamma(1 + i s0); atoms lost, thermal gas",
        nchan=nchan, nchan_check=nchan_check,
        r0="r0_factor * min(|a|, 1/K), K = sqrt(2) k", r0_factor=par["r0_factor"],
        r_outer="c_out / K", c_out=c_out, c_out_check=c_out_check,
        h_lnR=par["h"], c_osc_rad=par["c_osc"], richardson="h and h/2",
        x_grid=dict(kind="logspace", start=1e-3, stop=1e3, num=npts),
        threshold_x=xt,
        estimated_error=dict(transmission_rel_max=float(err_t.max()), phase_rad_max=float(err_p.max()),
                             note="difference to nchan_check and to c_out_check runs, summed; "
                                  "channel truncation error falls like nchan^-2.5 (docs/solver.md)"),
        trimer_grid="a<0: kappa|a| = geomspace(100, 1e-3), c_out = 40 (decaying BC); "
                    "a>0: kappa a = 1 + geomspace(99, 0.01), 48 channels, R_m = 16 a",
        s0=S0, git_hash=git_hash(),
        interpolation="cubic spline of log_transmission and phase in ln x",
    )
    os.makedirs(os.path.dirname(args.out), exist_ok=True)
    np.savez(args.out, x=x, transmission=tr, log_transmission=np.log(tr), phase=ph,
             s11=np.sqrt(1 - tr) * np.exp(1j * ph), x_err=x[idx], err_transmission_rel=err_t,
             err_phase=err_p, threshold_c4=c4, threshold_phase=pt, kappa_star_a_minus=ksam,
             k3_prefactor=K3_PREFACTOR, trimer_inv_kappa_star_a=tr_inv,
             trimer_kappa_over_kappa_star=tr_kk, trimer_pos_inv_kappa_star_a=tp_inv,
             trimer_pos_kappa_over_kappa_star=tp_kk, metadata=json.dumps(meta, sort_keys=True))
    print(f"wrote {args.out}: c4 = {c4:.8g}, delta0 = {pt:.10f}, kappa* a_- = {ksam:.7f}, "
          f"max err T {err_t.max():.2e}, phase {err_p.max():.2e} [{time.time() - t0:.0f} s]")


if __name__ == "__main__":
    main()
