"""Accuracy map of the thermal engine (lossfit.thermal) against scipy.integrate.quad.

Documents the quadrature choice of lossfit/thermal.py (docs/architecture.md, targets target: relative
difference <= 1e-6 over eta in [0.005, 2], |a| in [5 r_vdW, 1e6 a0], T in [1 nK, 3 uK]).

For every (species, eta, process, sign, |a|, T) the capped kernel of
lossfit.universal.models is averaged by ``thermal_average`` and by an independent
reference: ``scipy.integrate.quad`` (epsabs=0, epsrel=1e-12, limit=500, split at the
kink; QAWS for the x^{1/2} endpoint of the atom-dimer weight) of the kernel written out
from Braaten & Hammer, Phys. Rep. 428, 259 (2006) and the J=0 unitarity bounds. The
quad reference is itself checked against the closed form in regularized incomplete
gamma functions (see tests/test_thermal.py).

Also printed, for comparison: the same map with the engine's feature points switched
off, and a fixed 20-node generalized Gauss-Laguerre rule; and a Breit-Wigner map
(centre 0.01..30 k_BT, width 1e-4..1 k_BT).

Writes benchmarks/thermal_accuracy.png: log10 relative difference over (|a|, T) at
eta = 0.05 for 133Cs (three-body a < 0, a > 0, atom-dimer).

Run:  python benchmarks/thermal_accuracy.py [--quick]
"""

import math
import os
import sys
import time

import numpy as np
from scipy.integrate import quad
from scipy.special import gammainc, roots_genlaguerre

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from _reference import (  # noqa: E402,F401
    A0,
    HBAR,
    KB,
    LAMBDA,
    S0,
    SQRT_PI,
    U2,
    U3,
    k_gauss,
    k_lorentz,
    line_features,
    no_features,
)

import lossfit as lf  # noqa: E402
from lossfit.thermal import ATOM_DIMER, THREE_BODY, thermal_average  # noqa: E402
from lossfit.universal.models import get_model  # noqa: E402

ETAS = [0.005, 0.05, 0.5, 2.0]
KW = dict(epsabs=0.0, epsrel=1e-12, limit=500)


# Probe coefficients of the capped kernels: the early published fits (4590, 67.1, 16.8, 20.3,
# docs/conventions.md), kept on purpose -- any values serve, this maps the quadrature, not the physics.
def c3(a, ef, eta):
    if a < 0:
        s = math.sin(S0 * math.log(a / ef.a_minus))
        return 3 * 4590 * math.sinh(2 * eta) / (s * s + math.sinh(eta) ** 2)
    s = math.sin(S0 * math.log(a / ef.a_plus))
    return 3 * (67.1 * math.exp(-2 * eta) * (s * s + math.sinh(eta) ** 2) + 16.8 * (1 - math.exp(-4 * eta)))


def cb(a, ef, eta):
    s = math.sin(S0 * math.log(a / ef.a_star))
    return 20.3 * math.sinh(2 * eta) / (s * s + math.sinh(eta) ** 2)


def quad_avg(f, weight, points):
    pts = sorted({p for p in points if 0 < p < 60.0} | {60.0})
    edges = [0.0] + pts
    pw = (lambda x: 0.5 * x * x * math.exp(-x)) if weight == THREE_BODY else \
        (lambda x: 2 / SQRT_PI * math.sqrt(x) * math.exp(-x))
    total = 0.0
    for lo, hi in zip(edges[:-1], edges[1:]):
        if lo == 0.0 and weight == ATOM_DIMER:
            total += quad(lambda x: 2 / SQRT_PI * f(x) * math.exp(-x), lo, hi, weight="alg",
                          wvar=(0.5, 0.0), **KW)[0]
        else:
            total += quad(lambda x: f(x) * pw(x), lo, hi, **KW)[0]
    return total + quad(lambda x: f(x) * pw(x), edges[-1], np.inf, **KW)[0]


def references(weight, coeff, q):
    """(quad reference, closed form, kink x_c) of the capped average in natural units."""
    if weight == THREE_BODY:
        k0 = coeff * q ** 4
        xc = math.sqrt(U3 / k0)
        ref = quad_avg(lambda x: k0 if x <= xc else U3 / (x * x), weight, [xc])
        closed = k0 * gammainc(3, xc) + U3 * math.exp(-xc) / 2
    else:
        b0 = coeff * q
        xc = (U2 / b0) ** 2
        ref = quad_avg(lambda x: b0 if x <= xc else U2 / math.sqrt(x), weight, [xc])
        closed = b0 * gammainc(1.5, xc) + U2 * 2 / SQRT_PI * math.exp(-xc)
    return ref, closed, xc


def gauss_laguerre(weight, coeff, q, n=20):
    alpha = 2.0 if weight == THREE_BODY else 0.5
    x, w = roots_genlaguerre(n, alpha)
    if weight == THREE_BODY:
        return 0.5 * np.sum(w * np.minimum(coeff * q ** 4, U3 / x ** 2))
    return 2 / SQRT_PI * np.sum(w * np.minimum(coeff * q, U2 / np.sqrt(x)))


def grid(sp, n_a, n_t):
    ef = lf.Efimov.universal(a_minus=-9.73 * sp.r_vdw, eta=0.05)
    abs_a = np.geomspace(5 * sp.r_vdw, 1e6, n_a)
    temps = np.geomspace(1.0, 3000.0, n_t)
    return ef, abs_a, temps


def run_map(name, eta, weight, sign, n_a, n_t):
    sp = lf.species(name)
    ef, abs_a, temps = grid(sp, n_a, n_t)
    model = get_model("capped")
    A, T = np.meshgrid(abs_a, temps, indexing="ij")
    a = sign * A.ravel()
    q = a * A0 * np.sqrt(sp.mass * KB * T.ravel() * 1e-9) / HBAR
    efe = lf.Efimov(a_minus=ef.a_minus, eta_minus=eta, a_star=ef.a_star, eta_star=eta,
                    a_plus=ef.a_plus, eta_plus=eta)
    if weight == THREE_BODY:
        rows = model.three_body_rows(a, efe, q)
        kern, feat = type(model).three_body_kernel, type(model).three_body_features
        coeffs = [c3(ai, ef, eta) for ai in a]
    else:
        rows = model.atom_dimer_rows(a, efe, q)
        kern, feat = type(model).atom_dimer_kernel, type(model).atom_dimer_features
        coeffs = [cb(ai, ef, eta) for ai in a]
    value, _ = thermal_average(kern, feat, rows, weight)
    nofeat, _ = thermal_average(kern, no_features, rows, weight)
    refs, closed, xcs, gl = [], [], [], []
    for c, qi in zip(coeffs, np.abs(q)):
        r, cf, xc = references(weight, c, qi)
        refs.append(r)
        closed.append(cf)
        xcs.append(xc)
        gl.append(gauss_laguerre(weight, c, qi))
    refs, closed, xcs, gl = map(np.array, (refs, closed, xcs, gl))
    out = dict(lib=np.abs(value / refs - 1), nofeat=np.abs(nofeat / refs - 1),
               gl=np.abs(gl / refs - 1), ref_vs_closed=np.abs(refs / closed - 1), xc=xcs)
    return {k: v.reshape(A.shape) for k, v in out.items()}, abs_a, temps


def lorentz_map(weight):
    worst, worst_nofeat, worst_gl = 0.0, 0.0, 0.0
    x, w = roots_genlaguerre(20, 2.0 if weight == THREE_BODY else 0.5)
    norm = 0.5 if weight == THREE_BODY else 2 / SQRT_PI
    for c in np.geomspace(0.01, 30.0, 12):
        for g in np.geomspace(1e-4, 1.0, 9):
            f = lambda x, c=c, g=g: g / math.pi / ((x - c) ** 2 + g * g)
            ref = quad_avg(f, weight, [c + k * g for k in (-100, -10, -1, 0, 1, 10, 100)])
            row = np.array([[c, g]])
            v = thermal_average(k_lorentz, line_features, row, weight)[0][0]
            v0 = thermal_average(k_lorentz, no_features, row, weight)[0][0]
            vgl = norm * np.sum(w * (g / math.pi / ((x - c) ** 2 + g * g)))
            worst = max(worst, abs(v / ref - 1))
            worst_nofeat = max(worst_nofeat, abs(v0 / ref - 1))
            worst_gl = max(worst_gl, abs(vgl / ref - 1))
    return worst, worst_nofeat, worst_gl


def gauss_map():
    """Gaussian line (light tails), features at centre and +- sigma, three-body weight.

    Exact: 0.5 e^{-c + s^2/2} ((c - s^2)^2 + s^2) (complete the square; see tests)."""
    worst = {}
    for sig in (1e-2, 1e-3, 1e-4):
        w = 0.0
        for c in np.geomspace(0.05, 20.0, 10):
            exact = 0.5 * math.exp(-c + sig * sig / 2) * ((c - sig * sig) ** 2 + sig * sig)
            v = thermal_average(k_gauss, line_features, np.array([[c, sig]]), THREE_BODY)[0][0]
            w = max(w, abs(v / exact - 1))
        worst[sig] = w
    return worst


def main():
    quick = "--quick" in sys.argv
    n_a, n_t = (16, 10) if quick else (40, 25)
    t0 = time.time()
    print(f"thermal accuracy map: |a| {n_a} log points in [5 r_vdW, 1e6 a0], T {n_t} log points "
          f"in [1 nK, 3 uK]; a_- = -9.73 r_vdW, universal a*, a_+\n")
    head = (f"{'species':7s} {'process':16s} {'eta':>6s} {'lossfit':>9s} {'no feat.':>9s} "
            f"{'GL-20':>9s} {'quad/closed':>11s}  worst by regime x_c<0.01 | kink inside | x_c>42")
    print(head)
    print("-" * len(head))
    overall = 0.0
    heat = {}
    for name in ("133Cs", "7Li"):
        for eta in ETAS:
            for weight, sign, label in ((THREE_BODY, -1, "three-body a<0"), (THREE_BODY, 1, "three-body a>0"),
                                        (ATOM_DIMER, 1, "atom-dimer")):
                res, abs_a, temps = run_map(name, eta, weight, sign, n_a, n_t)
                lib, xc = res["lib"], res["xc"]
                regimes = [lib[xc < 0.01], lib[(xc >= 0.01) & (xc <= 42.25)], lib[xc > 42.25]]
                reg = " | ".join(f"{r.max():8.1e}" if r.size else "     n/a" for r in regimes)
                print(f"{name:7s} {label:16s} {eta:6.3f} {lib.max():9.1e} {res['nofeat'].max():9.1e} "
                      f"{res['gl'].max():9.1e} {res['ref_vs_closed'].max():11.1e}  {reg}")
                overall = max(overall, lib.max())
                if name == "133Cs" and eta == 0.05:
                    heat[label] = (lib, abs_a, temps, xc)
    print(f"\nworst relative difference, capped kernels, whole map: {overall:.2e} (target 1e-6)")
    print("\nBreit-Wigner line (unit area), centre 0.01..30 k_BT, width 1e-4..1 k_BT:")
    for weight, label in ((THREE_BODY, "three-body"), (ATOM_DIMER, "atom-dimer")):
        w, w0, wgl = lorentz_map(weight)
        print(f"  {label:10s} lossfit {w:8.1e}   no features {w0:8.1e}   fixed GL-20 {wgl:8.1e}")
    print("\nGaussian line (unit area), centre 0.05..20 k_BT, features at centre and +- sigma "
          "(tests/test_thermal.py checks the same lines):")
    for sig, w in gauss_map().items():
        print(f"  sigma {sig:6.0e} k_BT   worst relative difference {w:8.1e}")
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
        fig, axes = plt.subplots(1, 3, figsize=(14, 4.2), sharey=True, constrained_layout=True)
        for ax, (label, (lib, abs_a, temps, xc)) in zip(axes, heat.items()):
            im = ax.pcolormesh(abs_a, temps, np.log10(np.maximum(lib, 1e-17)).T, vmin=-17, vmax=-6,
                               shading="nearest", cmap="viridis")
            # Unitarity crossover: the kink of the capped kernel at E = k_BT (x_c = 1).
            ax.contour(abs_a, temps, np.log10(xc).T, levels=[0.0], colors="w", linestyles="--")
            ax.set_xscale("log")
            ax.set_yscale("log")
            ax.set_xlabel("|a| (a0)")
            ax.set_title(f"133Cs, eta=0.05, {label}")
        axes[0].set_ylabel("T (nK)")
        fig.colorbar(im, ax=axes, label="log10 |lossfit / quad - 1|  (dashed: kink at E = k_BT)")
        out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "thermal_accuracy.png")
        fig.savefig(out, dpi=120)
        print(f"\nwrote {out}")
    except ImportError:
        print("\nmatplotlib not available: no heat map written")
    print(f"elapsed {time.time() - t0:.1f} s")


if __name__ == "__main__":
    main()
