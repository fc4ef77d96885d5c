"""model="zero-range": per-point thermal L3 (a < 0 and a > 0) and beta (a > 0) against a
scipy.integrate.quad average of the same kernel (same run), table load times and sizes.

Run: python benchmarks/bench_zero_range.py
Targets (issue 3): <= 2 us per point and >= 1000x quad, <= 1e-6 relative difference.
"""

import math
import os
import subprocess
import sys
import time
import warnings

import numpy as np
from scipy.integrate import quad

import lossfit as lf
from lossfit.rates import atom_dimer_rows, three_body_rows
from lossfit.universal.models import get_model
from lossfit.universal.tables import table_path

warnings.simplefilter("ignore", lf.errors.ValidityWarning)
CS = lf.species("133Cs")
EF = lf.Efimov(a_minus=-1000.0, eta_minus=0.05)


def main():
    for name, loader in (("s11_negative_a.npz", "load_s11_table"), ("s_ad_positive_a.npz", "load_atom_dimer_table"),
                         ("recombination_positive_a.npz", "load_recombination_table")):
        size = os.path.getsize(table_path(name))
        code = (f"import time; t=time.perf_counter(); from lossfit.universal.tables import {loader}; "
                f"{loader}(); print(time.perf_counter()-t)")
        load = min(float(subprocess.run([sys.executable, "-c", code], capture_output=True, text=True).stdout)
                   for _ in range(3))
        print(f"table {name}: {size / 1024:.1f} KiB on disk; load {load * 1e3:.1f} ms "
              "(import of lossfit.universal.tables included)")
    model = get_model("zero-range")
    # a < 0 three-body loss (hyperspherical table), weight P3(x) = x^2 e^-x / 2
    p3 = lambda x: x * x * math.exp(-x) / 2          # noqa: E731
    _compare("L3 a<0", lf.l3, three_body_rows, model.three_body_kernel, p3,
             lambda p: [(c / p[0]) ** 2 for c in (1e-3, 1e3)], -np.geomspace(5 * CS.r_vdw, 1e5, 4000), EF)
    # a > 0 three-body loss (STM recombination table), up to where the table reaches at 300 nK
    from lossfit.universal.tables import load_recombination_table
    tab = load_recombination_table()
    _compare("L3 a>0", lf.l3, three_body_rows, model.three_body_kernel, p3,
             lambda p: [c / p[0] ** 2 for c in (tab.energy_min, tab.energy_max)],
             np.geomspace(5 * CS.r_vdw, 1200.0, 4000), lf.Efimov(a_plus=1000.0, eta_plus=0.05))
    # a > 0 atom-dimer relaxation (STM table), weight P2(x) = (2/sqrt pi) sqrt(x) e^-x
    _compare("beta", lf.beta, atom_dimer_rows, model.atom_dimer_kernel,
             lambda x: 2 / math.sqrt(math.pi) * math.sqrt(x) * math.exp(-x),
             lambda p: [(c / p[0]) ** 2 for c in (1e-3, 2 / math.sqrt(3))],
             np.geomspace(5 * CS.r_vdw, 2e4, 4000), lf.Efimov(a_star=1000.0, eta_star=0.05))


def _compare(label, rate, rows, kernel, weight, kinks, a, ef):
    """Per-point time of ``rate`` against quad of the same kernel and weight (same run)."""
    for t in (10.0, 300.0):
        for rtol in (1e-7, 1e-9):
            rate(a[:4], t, species=CS, efimov=ef, model="zero-range", rtol=rtol)
            best = min(_timed(lambda: rate(a, t, species=CS, efimov=ef, model="zero-range", rtol=rtol))
                       for _ in range(3)) / a.size
            sub = a[::200]
            _, params, unit, _ = rows(sub, np.full(sub.size, t), CS, ef, "zero-range")
            t0 = time.perf_counter()
            ref = np.array([quad(lambda x: kernel(x, p) * weight(x), 0, 60,
                                 points=[v for v in kinks(p) if v < 60] or None,
                                 epsabs=0, epsrel=1e-10, limit=500)[0] for p in params])
            per_quad = (time.perf_counter() - t0) / sub.size
            got = rate(sub, t, species=CS, efimov=ef, model="zero-range", rtol=rtol) / unit
            err = np.max(np.abs(got / ref - 1))
            print(f"{label} T={t:5.0f} nK rtol={rtol:.0e}: lossfit {best * 1e6:6.2f} us/point, quad "
                  f"{per_quad * 1e6:8.1f} us/point, ratio {per_quad / best:6.0f}x, max rel diff {err:.1e}")


def _timed(f):
    t0 = time.perf_counter()
    f()
    return time.perf_counter() - t0


if __name__ == "__main__":
    main()
