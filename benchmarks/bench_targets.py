"""The speed targets of the exact model, each against a baseline measured in this run.

Prints one table: what is timed, its min/median over repeated runs, the baseline
(named in the last column, measured in the same run on the same machine), their ratio
and the target. Machines are shared and noisy: compare ratios and medians.

Baselines
---------
* thermal averages and likelihoods: the same computation on the reference path
  (adaptive Gauss-Kronrod quadrature at the old default rtol 1e-9, or 1e-7 inside
  likelihoods as before), and for the public call also ``scipy.integrate.quad`` over
  the public energy-resolved kernel ``lf.k3`` (docs/architecture.md target: >= 2000x);
* whole commands: ``python -c "import lossfit"`` (the floor every command pays);
* start-up: a trivial cached numba function (``import numba`` and its first call),
  the floor any numba-based library pays.

Run: python benchmarks/bench_targets.py [--skip-commands] [--tests]
"""

import argparse
import math
import os
import statistics
import subprocess
import sys
import tempfile
import time
import warnings

import numpy as np
from scipy.integrate import quad

import lossfit as lf
from lossfit.inference.curves_likelihood import CurvesLikelihood
from lossfit.inference.fitting import prepare
from lossfit.inference.likelihood import SpectrumLikelihood
from lossfit.inference.posterior import WalkerBlocks
from lossfit.inference.sampling import sample
from lossfit.units import NK
from lossfit.universal.models import get_model, scale_wavenumber_a0

CS = lf.species("133Cs")
ROWS = []


def _times(func, repeat=7, number=1):
    func()
    out = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            func()
        out.append((time.perf_counter() - t0) / number)
    return min(out), statistics.median(out)


def _row(what, fast, base, base_name, target, unit="us", scale=1e6, floor=False):
    """One table row; ``floor``: the baseline is a cost every run pays (ratio measured/floor)."""
    (fmin, fmed), (_, bmed) = fast, base
    ratio = (f"{fmed / bmed:.2f}x {base_name}" if floor else f"{bmed / fmed:,.0f}x faster than {base_name}")
    ROWS.append((what, f"{fmin * scale:.3g} / {fmed * scale:.3g} {unit}", f"{ratio} ({bmed * scale:.3g} {unit})",
                 target))
    print(f"  {what}: {fmin * scale:.3g} / {fmed * scale:.3g} {unit}   [{base_name}: {bmed * scale:.3g} {unit}]",
          flush=True)


def _spectrum_60():
    rng = np.random.default_rng(2)
    ef = lf.Efimov(a_minus=-920.0, eta_minus=0.07)
    spectra = []
    for t in (15.0, 60.0, 250.0):
        a = -np.geomspace(3500.0, 450.0, 20)
        v = lf.l3(a, t, species=CS, efimov=ef) * (1 + 0.1 * rng.standard_normal(a.size))
        spectra.append(lf.LossSpectrum(a, t, v, 0.1 * np.abs(v), kind="l3"))
    return spectra, ef


def bench_likelihood():
    spectra, ef = _spectrum_60()
    fast = SpectrumLikelihood(spectra, CS, "zero-range")
    ref = SpectrumLikelihood(spectra, CS, "zero-range", rtol=1e-7)
    _row("likelihood, 60-point L3 spectrum, zero-range", _times(lambda: fast(ef), 9, 2000),
         _times(lambda: ref(ef), 5, 20), "reference path", "<= 20 us")


def bench_walker_step():
    # a whole sampler step per walker: the vectorised walker set (lf.fit's path) against
    # emcee mapping the posterior walker by walker, same chain (identical by construction)
    spectra, ef = _spectrum_60()
    space, _, post = prepare(spectra, species=CS, free=["a_minus", "eta_minus"])
    rng = np.random.default_rng(1)
    p0 = space.theta([-920.0, 0.07]) + 1e-3 * rng.standard_normal((32, 2))
    steps = 200

    def run(vectorized):
        if vectorized:
            sample(WalkerBlocks(post), p0, steps, vectorize=True, seed=2)
        else:
            sample(post, p0, steps, seed=2)
    f = _times(lambda: run(True), 5, 1)
    b = _times(lambda: run(False), 5, 1)
    per = 1.0 / (steps * 32)
    _row("spectrum fit, 60 points, per walker step (vectorised)", (f[0] * per, f[1] * per),
         (b[0] * per, b[1] * per), "walker-by-walker map", "<= 10 us")


def bench_likelihood_positive():
    # a > 0 through unitarity (550 a0 to 1e5 a0, 3 temperatures): the default observed
    # channel against the formal total channel, the old default, in the same run
    ef = lf.Efimov.universal(-900.0, 0.1)
    like = {}
    for channel in (None, "total"):
        spectra = []
        for t in (15.0, 60.0, 250.0):
            a = np.geomspace(550.0, 1e5, 20)
            v = lf.l3(a, t, species=CS, efimov=ef, channel=channel)
            spectra.append(lf.LossSpectrum(a, t, v, 0.1 * v, channel=channel))
        like[channel] = SpectrumLikelihood(spectra, CS, "zero-range")
    _row("likelihood, 60-point L3 spectrum at a > 0, observed channel", _times(lambda: like[None](ef), 9, 500),
         _times(lambda: like["total"](ef), 9, 500), "the total channel", "<= 20 us", floor=True)


def _points(n, side, rng):
    t = np.exp(rng.uniform(math.log(1.0), math.log(3000.0), n))
    if side == "neg":
        a = -np.exp(rng.uniform(math.log(5 * CS.r_vdw), math.log(1e6), n))
    else:
        # a > 0 up to the three-body table's reach at each temperature (its last grid energy)
        reach = np.sqrt(1000.0 / 42.25) / scale_wavenumber_a0(t * NK, CS.mass)
        a = np.exp(rng.uniform(math.log(5 * CS.r_vdw), np.log(0.99 * reach)))
    return a, t


def bench_fixed_data():
    rng = np.random.default_rng(5)
    model = get_model("zero-range")
    ef = lf.Efimov(a_minus=-1000.0, eta_minus=0.05, a_plus=250.0, eta_plus=0.05, a_star=1000.0, eta_star=0.05)
    n = 1000
    for label, side, kind, target, channel in (
            ("L3 a<0", "neg", "l3", "<= 0.3 us", None), ("L3 a>0 observed (default)", "pos", "l3", "<= 0.3 us", None),
            ("L3 a>0 total", "pos", "l3", "<= 0.3 us", "total"), ("beta", "pos", "beta", "<= 0.6 us", None)):
        a, t = _points(n, side, rng)
        if kind == "beta":
            a = np.minimum(a, 2e4)
        fast = lf.inference.likelihood.RateBlock(kind, a, t, CS, model, channel=channel)
        fast.predict(ef)
        ref = lf.inference.likelihood.RateBlock(kind, a[:100], t[:100], CS, model, rtol=1e-9, channel=channel)
        f = _times(lambda: fast.predict(ef), 9, 20)
        b = _times(lambda: ref.predict(ef), 3, 1)
        _row(f"fixed-data path per point, {label}", (f[0] / n, f[1] / n), (b[0] / 100, b[1] / 100),
             "reference per point", target)


def bench_public():
    rng = np.random.default_rng(7)
    ef = lf.Efimov(a_minus=-1000.0, eta_minus=0.05, a_plus=250.0, eta_plus=0.05, a_star=1000.0, eta_star=0.05)
    n = 1000
    for label, rate, side, extra in (("lf.l3 a<0", lf.l3, "neg", {}), ("lf.l3 a>0 observed", lf.l3, "pos", {}),
                                     ("lf.l3 a>0 total", lf.l3, "pos", {"channel": "total"}),
                                     ("lf.beta", lf.beta, "pos", {})):
        a, t = _points(n, side, rng)
        if rate is lf.beta:
            a = np.minimum(a, 2e4)
        kw = dict(species=CS, efimov=ef, **extra)
        f = _times(lambda: rate(a, t, **kw), 7, 3)
        b = _times(lambda: rate(a[:100], t[:100], rtol=1e-9, **kw), 3, 1)
        _row(f"public {label}, 1000 arbitrary points, per point", (f[0] / n, f[1] / n),
             (b[0] / 100, b[1] / 100), "reference (rtol 1e-9) per point", "<= 2 us")
        if rate is lf.l3 and side == "neg":
            # plain scipy.integrate.quad over the public energy-resolved kernel lf.k3
            def plain(ai, ti):
                return quad(lambda e: lf.k3(ai, e, species=CS, efimov=ef) * e * e * math.exp(-e / ti)
                            / (2 * ti ** 3), 0, 40 * ti, limit=200)[0]
            sub = slice(0, 10)
            q = _times(lambda: [plain(ai, ti) for ai, ti in zip(a[sub], t[sub])], 1, 1)
            _row(f"public {label} vs plain quad of lf.k3", (f[0] / n, f[1] / n), (q[0] / 10, q[1] / 10),
                 "scipy quad of lf.k3 per point", ">= 2000x")
    f = _times(lambda: lf.l3(-900.0, 50.0, species=CS, efimov=ef), 9, 200)
    b = _times(lambda: lf.l3(-900.0, 50.0, species=CS, efimov=ef, rtol=1e-9), 5, 50)
    _row("public scalar call lf.l3", f, b, "reference scalar call", "<= 30 us")


def bench_global():
    from lossfit.inference.curve_fits import fit_curves_individually
    from lossfit.simulate import invented_campaign
    curves, res, truth = invented_campaign(1, n_fields=20)
    fits = fit_curves_individually(curves, species="133Cs", resonance=res)
    ef = lf.Efimov(a_minus=truth["a_minus"], eta_minus=truth["eta_minus"])
    values = {"density_scale": 1.1, "temperature_scale": 1.0}
    out = {}
    liks = {}
    for name, rtol in (("fast", None), ("reference", 1e-7)):
        lik = liks[name] = CurvesLikelihood(curves, "133Cs", "zero-range", resonance=res, reference_fits=fits,
                               temperature_scale_range=(0.8, 1.25), rtol=rtol)
        lik.refresh(ef, values)
        out[name] = _times(lambda: lik(ef, values), 7, 50 if rtol is None else 3)
    lik_fast = liks["fast"]
    _row(f"global decay-curve likelihood, {len(curves)} curves x {len(curves[0])} points, zero-range",
         out["fast"], out["reference"], "reference path", "<= 1 ms", unit="ms", scale=1e3)
    # per curve and walker: a half-ensemble of 32 walkers in one call (what the sampler
    # hands over) against one call per walker; baseline the walker-by-walker calls
    walkers = 32
    ef_set = lf.Efimov.trusted(a_minus=np.full(walkers, ef.a_minus), eta_minus=np.full(walkers, ef.eta_minus))
    values_set = {k: np.full(walkers, v) for k, v in values.items()}
    per_curve = walkers * len(curves)
    one_set = tuple(t / per_curve for t in _times(lambda: lik_fast(ef_set, values_set), 7, 3))
    one_by_one = tuple(t / len(curves) for t in out["fast"])
    _row(f"global likelihood per curve and walker, {walkers} walkers per call", one_set, one_by_one,
         "one walker per call", "<= 5 us")


def _command(args, repeat=3, env=None):
    times = []
    for _ in range(repeat):
        with tempfile.TemporaryDirectory() as d:
            cmd = [a.replace("{out}", os.path.join(d, "o")) for a in args]
            t0 = time.perf_counter()
            proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
            times.append(time.perf_counter() - t0)
            if proc.returncode != 0:
                raise RuntimeError(f"{' '.join(cmd)} failed:\n{proc.stderr[-2000:]}")
    return min(times), statistics.median(times)


def bench_commands(run_tests):
    env = dict(os.environ, MPLBACKEND="Agg")
    floor = _command([sys.executable, "-c", "import lossfit"], 5, env)
    demo = _command([sys.executable, "-m", "lossfit.cli", "demo", "--out", "{out}", "--quiet"], 3, env)
    _row("lossfit demo, whole command", demo, floor, "python -c 'import lossfit'", "<= 20 s", unit="s", scale=1,
         floor=True)
    demo_c = _command([sys.executable, "-m", "lossfit.cli", "demo", "--from-curves", "--out", "{out}", "--quiet"],
                      1, env)
    _row("lossfit demo --from-curves", demo_c, floor, "python -c 'import lossfit'", "<= 12 s", unit="s", scale=1,
         floor=True)
    start = ("import time; t = time.perf_counter(); import lossfit as lf; "
             "lf.l3(-900.0, 50.0, species='133Cs', efimov=lf.Efimov.universal(-900.0, 0.08)); "
             "print(time.perf_counter() - t)")
    _command([sys.executable, "-c", start], 1, env)          # warm the numba cache
    warm = _command([sys.executable, "-c", start], 5, env)
    with tempfile.TemporaryDirectory() as d:
        mod = os.path.join(d, "floor_mod.py")
        with open(mod, "w") as fh:
            fh.write("import math\nimport numba\n\n\n@numba.njit(cache=True)\ndef f(x):\n    return math.exp(x)\n")
        code = f"import sys; sys.path.insert(0, {d!r}); import floor_mod; floor_mod.f(1.0)"
        _command([sys.executable, "-c", code], 1, env)
        floor_nb = _command([sys.executable, "-c", code], 5, env)
    _row("import + first zero-range l3, warm numba cache", warm, floor_nb,
         "import numba + first cached call", "<= 0.6 s", unit="s", scale=1, floor=True)
    colds = []
    for _ in range(2):
        with tempfile.TemporaryDirectory() as cache:
            colds.append(_command([sys.executable, "-c", start], 1, dict(env, NUMBA_CACHE_DIR=cache))[0])
    _row("import + first zero-range l3, cold numba cache", (min(colds), statistics.median(colds)), floor_nb,
         "import numba + first cached call", "<= 3 s", unit="s", scale=1, floor=True)
    if run_tests:
        tests = _command([sys.executable, "-m", "pytest", "-q", "-n", "2", "-p", "no:cacheprovider"], 1, env)
        _row("README test command", tests, floor, "python -c 'import lossfit'", "<= 300 s", unit="s", scale=1,
             floor=True)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--skip-commands", action="store_true", help="skip the whole-command timings")
    ap.add_argument("--tests", action="store_true", help="also time the README test command (minutes)")
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore", lf.errors.ValidityWarning)
    warnings.simplefilter("ignore", lf.errors.ConvergenceWarning)
    bench_likelihood()
    bench_likelihood_positive()
    bench_walker_step()
    bench_fixed_data()
    bench_public()
    bench_global()
    if not args.skip_commands:
        bench_commands(args.tests)
    w = max(len(r[0]) for r in ROWS)
    print("\n" + f"{'what':<{w}}  {'min / median':>22}  {'target':>10}  against the baseline of this run")
    for what, measured, ratio, target in ROWS:
        print(f"{what:<{w}}  {measured:>22}  {target:>10}  {ratio}")


if __name__ == "__main__":
    main()
