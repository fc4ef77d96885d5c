"""Cost and accuracy of mixture decay curves (lossfit.experiment.mixture_decay and
lossfit.inference.mixture_curve_fits).

Everything is invented: a crossed optical trap holding 133Cs and 6Li (Cs at (40, 45, 180) Hz,
Li at (90, 101, 405) Hz, standard gravity), N_B0 = 1e5, N_X0 = 2e4, 200 nK, K3 = 3e-25
cm^6/s (events), 14 hold times up to 1 s, 3 % Gaussian noise on every count, the initial
number of an uncounted species measured to 3 % (B) or 5 % (X).

Prints (1) the time of one forward solve (min/median of repeats) with and without heating,
one and two temperatures; (2) for X counted, B counted and both: over many noise draws,
the mean and spread of the pull (K3_fit - K3)/error, the median relative error bar and the
mean relative bias, and the median time per fit; (3) the bias of K3 when data made with
anti-evaporation are fitted without it; (4) the time of one default-length sampled fit
(16 walkers x 1500 steps) without heating. Machines are shared: compare ratios.

Run: python benchmarks/bench_mixture_decay.py [draws]
"""

import sys
import time
import warnings

import numpy as np

from lossfit.experiment.mixture_decay import simulate_mixture_decay
from lossfit.experiment.mixture_trap import MixtureTrap
from lossfit.inference.mixture_curve_fits import fit_mixture_curve

SYSTEM = "133Cs-133Cs-6Li"
TRAP = MixtureTrap("133Cs", "6Li", (40.0, 45.0, 180.0), (90.0, 101.0, 405.0))
T = np.linspace(0.0, 1.0, 14)
N_B0, N_X0, T0, K3, NOISE = 1.0e5, 2.0e4, 200.0, 3.0e-25, 0.03


def _timed(func, repeats):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times), float(np.median(times))


def forward_costs():
    print("one forward solve, 14 times (min / median of 20):")
    for heating in (False, True):
        for t_x in (None, 300.0):
            lo, med = _timed(lambda h=heating, tx=t_x: simulate_mixture_decay(
                T, species=SYSTEM, trap=TRAP, n_b0=N_B0, n_x0=N_X0, t0_nK=T0, t0_x_nK=tx, k3=K3, heating=h), 20)
            print(f"  heating={heating!s:5} {'one T' if t_x is None else 'two T'}: "
                  f"{1e3 * lo:.1f} / {1e3 * med:.1f} ms")


def _data(counted, truth, rng):
    n_b = truth.n_b * (1 + NOISE * rng.standard_normal(T.size))
    n_x = truth.n_x * (1 + NOISE * rng.standard_normal(T.size))
    kw = {}
    if counted in ("b", "both"):
        kw.update(n_b=n_b, n_b_err=NOISE * truth.n_b)
    else:
        kw.update(n_b0=N_B0 * (1 + 0.03 * rng.standard_normal()), n_b0_err=0.03 * N_B0)
    if counted in ("x", "both"):
        kw.update(n_x=n_x, n_x_err=NOISE * truth.n_x)
    else:
        kw.update(n_x0=N_X0 * (1 + 0.05 * rng.standard_normal()), n_x0_err=0.05 * N_X0)
    return kw


def fit_accuracy(draws, heating):
    truth = simulate_mixture_decay(T, species=SYSTEM, trap=TRAP, n_b0=N_B0, n_x0=N_X0, t0_nK=T0, k3=K3,
                                   heating=heating)
    print(f"fits of {draws} noise draws, heating={heating} in data and model:")
    for counted in ("x", "b", "both"):
        rng = np.random.default_rng(7)
        pulls, rel_err, rel_dev, cost = [], [], [], []
        for _ in range(draws):
            kw = _data(counted, truth, rng)
            start = time.perf_counter()
            fit = fit_mixture_curve(T, species=SYSTEM, trap=TRAP, t0_nK=T0, heating=heating, **kw)
            cost.append(time.perf_counter() - start)
            pulls.append((fit.k3 - K3) / fit.k3_error)
            rel_err.append(fit.k3_error / K3)
            rel_dev.append(fit.k3 / K3 - 1.0)
        print(f"  {counted:4}: pull mean {np.mean(pulls):+.2f}, std {np.std(pulls, ddof=1):.2f}; "
              f"median error {100 * np.median(rel_err):.1f} %, mean deviation {100 * np.mean(rel_dev):+.1f} %; "
              f"median {np.median(cost):.2f} s per fit")


def heating_bias(draws):
    truth = simulate_mixture_decay(T, species=SYSTEM, trap=TRAP, n_b0=N_B0, n_x0=N_X0, t0_nK=T0, k3=K3,
                                   heating=True)
    print(f"data with anti-evaporation (T: {T0:g} -> {truth.temperature[-1]:.1f} nK), fitted without it:")
    rng = np.random.default_rng(11)
    dev = [fit_mixture_curve(T, species=SYSTEM, trap=TRAP, t0_nK=T0, heating=False,
                             **_data("both", truth, rng)).k3 / K3 - 1.0 for _ in range(draws)]
    print(f"  both counted: mean deviation of K3 {100 * np.mean(dev):+.1f} % over {draws} draws")


def sampled_cost():
    truth = simulate_mixture_decay(T, species=SYSTEM, trap=TRAP, n_b0=N_B0, n_x0=N_X0, t0_nK=T0, k3=K3,
                                   heating=False)
    kw = _data("both", truth, np.random.default_rng(3))
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = fit_mixture_curve(T, species=SYSTEM, trap=TRAP, t0_nK=T0, heating=False, mcmc={"seed": 1}, **kw)
    print(f"sampled fit (16 walkers x 1500 steps, no heating): {time.perf_counter() - start:.0f} s, "
          f"K3 = {fit.k3:.3e} +- {fit.k3_error:.2e}, max tau {np.max(fit.tau):.0f} steps")


if __name__ == "__main__":
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 100
    forward_costs()
    fit_accuracy(n, heating=False)
    fit_accuracy(max(n // 4, 10), heating=True)
    heating_bias(max(n // 4, 10))
    sampled_cost()
