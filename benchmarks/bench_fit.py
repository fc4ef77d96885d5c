"""Likelihood, demo and cold-start timings (docs/architecture.md, targets), printed against targets.

Run: python benchmarks/bench_fit.py [--skip-demo]
"""

import argparse
import os
import subprocess
import sys
import tempfile
import time
import warnings

import numpy as np

import lossfit as lf
from lossfit.inference.likelihood import SpectrumLikelihood
from lossfit.simulate import demo_spectra


def bench_likelihood():
    warnings.simplefilter("ignore", lf.errors.ValidityWarning)
    spectra, truth = demo_spectra()
    l3_only = [s for s in spectra if s.kind == "l3"][:3]
    # 60 points: the demo's three L3 spectra hold 3 x 18 = 54; add 6 from a fourth copy.
    extra = l3_only[0].select(np.arange(len(l3_only[0])) < 6)
    data = l3_only + [extra]
    n = sum(len(s) for s in data)
    ef = lf.Efimov(**{k: v for k, v in truth.items() if k != "density_scale"})
    like = SpectrumLikelihood(data, "133Cs", "capped")
    like(ef)
    best = np.inf
    for _ in range(7):
        t0 = time.perf_counter()
        for _ in range(2000):
            like(ef, 1.05)
        best = min(best, (time.perf_counter() - t0) / 2000)
    # Baseline measured in the same run: the same likelihood written the usual
    # notebook way, with scipy.integrate.quad per point over the same capped kernel.
    from scipy.integrate import quad

    from lossfit.rates import three_body_rows
    from lossfit.universal.models import UNITARITY_THREE_BODY
    rows = []
    for s in data:
        mdl, params, unit, _ = three_body_rows(s.a, s.temperature, "133Cs", ef, "capped")
        rows.append((params, unit, s))

    def naive():
        total = 0.0
        for params, unit, s in rows:
            pred = np.empty(len(s))
            for i, (q, c) in enumerate(params):
                k0 = c * q ** 4
                f = lambda x: min(k0, UNITARITY_THREE_BODY / x ** 2) * x * x * np.exp(-x) / 2
                pred[i] = quad(f, 0, np.inf, limit=200)[0] * unit[i]
            total -= 0.5 * np.sum(((s.value - pred / 1.05 ** 2) / s.error) ** 2)
        return total

    t0 = time.perf_counter()
    for _ in range(3):
        naive()
    base = (time.perf_counter() - t0) / 3
    print(f"log-likelihood, {n}-point L3 spectrum: {best * 1e6:.1f} us (target <= 100 us); "
          f"per-point quad baseline {base * 1e3:.2f} ms -> {base / best:.0f}x")


def bench_cold_start():
    code = ("import time; t=time.perf_counter(); import lossfit as lf; "
            "lf.l3(-900.0, 50.0, species='133Cs', efimov=lf.Efimov.universal(-900.0, 0.08)); "
            "print(time.perf_counter()-t)")
    subprocess.run([sys.executable, "-c", code], capture_output=True)        # warm the cache
    times = [float(subprocess.run([sys.executable, "-c", code], capture_output=True, text=True).stdout)
             for _ in range(3)]
    base = min(float(subprocess.run([sys.executable, "-c", "import time; t=time.perf_counter(); "
                                     "import numpy, scipy.integrate; print(time.perf_counter()-t)"],
                                    capture_output=True, text=True).stdout) for _ in range(3))
    print(f"cold start (import + first l3, numba cache warm): {min(times):.2f} s (target <= 3 s); "
          f"import numpy+scipy alone {base:.2f} s")


def bench_demo():
    with tempfile.TemporaryDirectory() as d:
        t0 = time.perf_counter()
        proc = subprocess.run([sys.executable, "-m", "lossfit.cli", "demo", "--out", os.path.join(d, "o"),
                               "--quiet"], capture_output=True, text=True, env=dict(os.environ, MPLBACKEND="Agg"))
        wall = time.perf_counter() - t0
    line = [ln for ln in proc.stdout.splitlines() if ln.startswith("wall time")]
    print(f"demo (32 walkers x 5000 steps, fit + figures), whole command: {wall:.1f} s (target <= 60 s); "
          f"{line[0] if line else proc.stderr[-300:]}")


if __name__ == "__main__":
    ap = argparse.ArgumentParser()
    ap.add_argument("--skip-demo", action="store_true")
    args = ap.parse_args()
    bench_likelihood()
    bench_cold_start()
    if not args.skip_demo:
        bench_demo()
