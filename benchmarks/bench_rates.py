"""Speed of the thermally averaged rates against a straightforward scipy.integrate.quad.

docs/architecture.md, targets target: thermal L3 at one (a, T) <= 2 us after JIT, >= 1000x faster than
``scipy.integrate.quad`` over the same kernel, <= 1e-6 relative difference.

* lossfit: ``lossfit.l3`` (and ``lossfit.beta``) on arrays of 10^4 (a, T) points
  (|a| log-uniform in [5 r_vdW, 1e6 a0], both signs for L3; T log-uniform in
  [1 nK, 3 uK]; 133Cs, Efimov.universal(a_- = -9.73 r_vdW, eta = 0.05)), model "capped",
  timed after a warm-up call (JIT), best of several repeats, whole public call
  (validation, packing, quadrature, units).
* baseline, same run: the same capped kernel (Braaten & Hammer 2006 threshold law
  saturated at the J=0 unitarity bound, lossfit.universal.models docstring) written in
  plain Python in SI units and averaged point by point with ``scipy.integrate.quad`` over
  E in units of k_BT, split at the kink, epsabs=0, epsrel=1e-10 (the accuracy reference),
  and the naive call quad(f, 0, inf) with scipy's default tolerances; on a random
  subset of the points.

Prints microseconds per point for both, their ratio, and the max relative difference.
Run:  python benchmarks/bench_rates.py [--quick]
"""

import math
import os
import sys
import time
import warnings

import numpy as np
from scipy.integrate import quad

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from _reference import A0, HBAR, KB, S0, SQRT_PI  # noqa: E402,F401

import lossfit as lf  # noqa: E402


def k3_threshold(a, ef, m):
    if a < 0:
        s = math.sin(S0 * math.log(a / ef.a_minus))
        c = 4590 * math.sinh(2 * ef.eta_minus) / (s * s + math.sinh(ef.eta_minus) ** 2)
    else:
        s = math.sin(S0 * math.log(a / ef.a_plus))
        e = ef.eta_plus
        c = 67.1 * math.exp(-2 * e) * (s * s + math.sinh(e) ** 2) + 16.8 * (1 - math.exp(-4 * e))
    return 3 * c * HBAR * (a * A0) ** 4 / m                                     # m^6/s


def beta_threshold(a, ef, m):
    s = math.sin(S0 * math.log(a / ef.a_star))
    c = 20.3 * math.sinh(2 * ef.eta_star) / (s * s + math.sinh(ef.eta_star) ** 2)
    return c * HBAR * a * A0 / m                                                # m^3/s


def quad_l3(a, t_nk, ef, m, epsrel=1e-10, split=True):
    kt = KB * t_nk * 1e-9
    k0 = k3_threshold(a, ef, m)
    cap = 72 * math.sqrt(3) * math.pi ** 2 * HBAR ** 5 / (m ** 3 * kt ** 2)    # bound * x^2
    f = lambda x: min(k0, cap / (x * x)) * 0.5 * x * x * math.exp(-x)
    xc = math.sqrt(cap / k0)
    kw = dict(epsabs=0.0, epsrel=epsrel, limit=200)
    if split and xc < 200:
        v = quad(f, 0.0, xc, **kw)[0] + quad(f, xc, np.inf, **kw)[0]
    else:
        v = quad(f, 0.0, np.inf, **kw)[0]
    return v * 1e12                                                             # cm^6/s


def quad_beta(a, t_nk, ef, m, epsrel=1e-10, split=True):
    kt = KB * t_nk * 1e-9
    b0 = beta_threshold(a, ef, m)
    mu = 2 * m / 3
    cap = math.pi * HBAR / (mu * math.sqrt(2 * mu * kt) / HBAR)               # bound * sqrt(x)
    f = lambda x: min(b0, cap / math.sqrt(x)) * 2 / SQRT_PI * math.sqrt(x) * math.exp(-x)
    xc = (cap / b0) ** 2
    kw = dict(epsabs=0.0, epsrel=epsrel, limit=200)
    if split and xc < 200:
        v = quad(f, 0.0, xc, **kw)[0] + quad(f, xc, np.inf, **kw)[0]
    else:
        v = quad(f, 0.0, np.inf, **kw)[0]
    return v * 1e6                                                              # cm^3/s


def best_time(fun, repeats):
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fun()
        best = min(best, time.perf_counter() - t0)
    return best


def bench(label, lib_call, quad_call, a, t, n_quad, repeats, rng):
    """quad_call(a, t, **options); the first baseline is the reference for the differences."""
    lib_call(a[:10], t[:10])                                   # JIT / cache load
    t_lib = best_time(lambda: lib_call(a, t), repeats) / a.size
    values = lib_call(a, t)
    idx = rng.choice(a.size, size=n_quad, replace=False)
    print(f"{label}: lossfit {t_lib * 1e6:.3f} us/point ({a.size} points, best of {repeats})")
    results, ref = [], None
    variants = [("quad split at kink, epsrel=1e-10", dict(split=True, epsrel=1e-10)),
                ("quad [0, inf) unsplit, epsrel=1.49e-8 (scipy default)", dict(split=False, epsrel=1.49e-8))]
    for name, opts in variants:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")                    # IntegrationWarning of the unsplit quad
            t0 = time.perf_counter()
            vals = np.array([quad_call(a[i], t[i], **opts) for i in idx])
            t_quad = (time.perf_counter() - t0) / n_quad
        if ref is None:
            ref = vals
        diff = np.max(np.abs(values[idx] / ref - 1))
        self_diff = np.max(np.abs(vals / ref - 1))
        print(f"    vs {name:52s} {t_quad * 1e6:8.1f} us/point ({n_quad} pts)  ratio {t_quad / t_lib:7.0f}x"
              f"   baseline's own error {self_diff:.1e}")
        results.append((t_lib, t_quad, diff))
    print(f"    max rel diff lossfit vs reference quad: {results[0][2]:.1e}")
    return results[0]


def main():
    quick = "--quick" in sys.argv
    rng = np.random.default_rng(2026)
    n, n_quad, repeats = 10_000, (200 if quick else 1000), (3 if quick else 7)
    sp = lf.species("133Cs")
    ef = lf.Efimov.universal(a_minus=-9.73 * sp.r_vdw, eta=0.05)
    abs_a = np.exp(rng.uniform(np.log(5 * sp.r_vdw), np.log(1e6), n))
    t = np.exp(rng.uniform(np.log(1.0), np.log(3000.0), n))
    sign = np.where(rng.random(n) < 0.5, -1.0, 1.0)
    print(f"lossfit {lf.__version__}, model 'capped', {sp.name}, eta 0.05, rtol 1e-9 (default)")
    print("targets: <= 2 us/point, >= 1000x quad, <= 1e-6 relative difference\n")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lf.errors.ValidityWarning)
        r1 = bench("l3", lambda a, tt: lf.l3(a, tt, species=sp, efimov=ef),
                   lambda a, tt, **o: quad_l3(a, tt, ef, sp.mass, **o), sign * abs_a, t, n_quad, repeats, rng)
        bench("beta", lambda a, tt: lf.beta(a, tt, species=sp, efimov=ef),
                   lambda a, tt, **o: quad_beta(a, tt, ef, sp.mass, **o), abs_a, t, n_quad, repeats, rng)
        # Single-point call: the public-API overhead a per-point Python loop would pay.
        one = best_time(lambda: lf.l3(-1000.0, 100.0, species=sp, efimov=ef), 2000 if not quick else 200)
        print(f"\nsingle scalar call lf.l3(-1000, 100 nK): {one * 1e6:.1f} us (Python overhead included)")
    ok = r1[0] <= 2e-6 and r1[1] / r1[0] >= 1000 and r1[2] <= 1e-6
    print(f"l3 target met: {ok}")


if __name__ == "__main__":
    main()
