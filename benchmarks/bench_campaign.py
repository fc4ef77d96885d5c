"""Campaign-scale global fit: cost of an invented 300-curve campaign (not measured data),
serial and on 2 MPI ranks.

The campaign is :func:`lossfit.simulate.invented_campaign` (invented Cs-133 scenario,
atom-loss curves at a < 0, two temperatures, 15 points each) with every systematic of the
global fit free: ``density_scale``, ``temperature_scale``, ``b0``, ``width``, ``a_bg`` and
the field noise ``sigma_B``, besides ``a_minus`` and ``eta_minus`` (8 parameters,
64 walkers). Printed, each as min / median of repeats and as a ratio to a baseline
measured in the same run:

(a) one log-posterior call, per call and per curve (baseline: the rate tables alone);
(b) the start-point refinement (:meth:`CurvesLikelihood.refresh`);
(c) the time to an effective sample size of ``--target-ess`` per parameter
    (ESS = walkers x kept steps / tau with the project's burn-in and tau,
    :mod:`lossfit.inference.diagnostics`), serially and with the MPI pool on 2 ranks
    (``mpiexec -n 2 python -m benchmarks.bench_campaign --mpi ...``, started by this
    script), the serial fraction and the Amdahl estimate for 64 ranks;
(d) two-level parallelism: one walker's log posterior with the curves in 2 groups on 2
    MPI ranks against the same call serially (the walker set of a run with more ranks
    than walkers per set), whether the values are identical, and what it means for 64
    walkers on 64 ranks (32 per set, 2 curve groups) against walker blocks alone.

Scaled down, because at 300 curves an ESS of 1000 takes about an hour serially on a
2-core machine: the chain that reaches the target ESS runs on a smaller campaign of the
same scenario (``--ess-curves``, default 20 curves, every systematic free). Its number of
steps is carried over to 300 curves, whose cost per ensemble step is measured directly
(short fixed runs, serial and MPI): time to ESS at 300 curves ~ steps x (time per step
at 300 curves). This assumes tau in steps does not depend on the number of curves (the
affine-invariant ensemble is insensitive to the posterior's scale and linear
correlations; the eight parameters are the same).

Walkers start in the fit's walker ball around the invented truth (nominal resonance,
sigma_B = 3 mG) after one refinement there; the mode search of ``fit_curves`` is not
timed. Wall times depend on the machine and on what else runs: the load averages are
printed with the numbers.

Usage (from the repository root; ``--quick`` checks the plumbing in about a minute;
``--profile 200`` prints instead a cProfile of the log-posterior at 200 curves):
    python -m benchmarks.bench_campaign [--curves 300] [--ess-curves 20] [--target-ess 1000]
"""

import os

# one BLAS/OpenMP thread per process, set before numpy loads: two MPI ranks on two cores
# must not fight over threads, and the serial baseline must use the same single thread
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import cProfile  # noqa: E402
import json  # noqa: E402
import pstats  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import emcee  # noqa: E402
import numpy as np  # noqa: E402

from lossfit.errors import ConvergenceWarning, ValidityWarning  # noqa: E402
from lossfit.inference.diagnostics import autocorrelation_times  # noqa: E402
from lossfit.inference.global_fit import _ball, prepare_curves  # noqa: E402
from lossfit.inference.pools import find_mpiexec, make_pool  # noqa: E402
from lossfit.inference.posterior import WalkerBlocks, auto_burn  # noqa: E402
from lossfit.inference.sampling import sample  # noqa: E402
from lossfit.simulate import invented_campaign  # noqa: E402

#: Every systematic of the global fit, with the priors of an invented calibration:
#: LogNormal widths for the scales, Normal widths (G, G, a0) for the resonance, and a
#: LogUniform range (G) for the field noise.
SYSTEMATICS = {"density_scale": 0.2, "temperature_scale": 0.05, "b0": 0.01, "width": 0.1, "a_bg": 5.0,
               "sigma_B": (1e-4, 0.02)}
FREE = ["a_minus", "eta_minus"]
SEED = 7
ESS_CHECK_EVERY = 50      # steps between effective-sample-size checks of the ESS run


class TimedPosterior:
    """The posterior with the wall time spent inside it added up (s)."""

    def __init__(self, posterior):
        self.posterior = posterior
        self.spent = 0.0

    def __call__(self, theta):
        return float(self.batch(np.asarray(theta, dtype=float)[None, :])[0])

    def batch(self, thetas):
        t0 = time.perf_counter()
        value = self.posterior.batch(thetas)
        self.spent += time.perf_counter() - t0
        return value


class ResidentPosterior:
    """A posterior that every MPI rank builds for itself, pickled as its key alone.

    :class:`lossfit.inference.pools.MPIPool` sends the function to its workers once,
    pickled (a campaign posterior is MBs at 300 curves). Each rank builds the same
    posterior (everything is seeded) and registers it here, so the one message carries the
    key and the set-up is the same on every rank.
    """

    _registry = {}

    def __init__(self, key, posterior=None):
        self.key = key
        if posterior is not None:
            self._registry[key] = posterior

    def __call__(self, theta):
        return self._registry[self.key](theta)

    def batch(self, thetas):
        return self._registry[self.key].batch(thetas)

    def __reduce__(self):
        return (ResidentPosterior, (self.key,))


def build(n_curves, walkers):
    """Posterior of the invented campaign with ``n_curves`` curves, refined at the truth.

    Returns
    -------
    space, likelihood, posterior, theta0 (sampling coordinates of the start point),
    p0 (walkers, ndim) start positions, values (dict of the start point), and the
    nuisance reference of the per-curve fits (x, Jacobians) that the refinement starts from
    """
    curves, res, truth = invented_campaign(SEED, n_fields=n_curves // 2)
    space, likelihood, posterior = prepare_curves(curves, species="133Cs", free=FREE, resonance=res,
                                                  systematics=SYSTEMATICS)
    values = dict(truth, b0=res.b0, width=res.width, a_bg=res.a_bg, sigma_B=0.003)
    theta0 = space.theta([values[n] for n in space.names])
    before = (likelihood.x_ref.copy(), likelihood.jac.copy())
    likelihood.refresh(space.efimov(values), values)
    p0 = _ball(posterior, space, walkers, np.random.default_rng(SEED), theta0)
    return space, likelihood, posterior, theta0, p0, values, before


def stats(times):
    """(min, median) of a list of times."""
    return min(times), statistics.median(times)


def fmt(times, unit=1.0, suffix="s", digits=2):
    lo, med = stats(times)
    return f"{lo * unit:.{digits}f} / {med * unit:.{digits}f} {suffix} (min / median of {len(times)})"


def loads():
    return "load averages " + " ".join(f"{x:.2f}" for x in os.getloadavg())


def timed_steps(posterior, p0, steps, repeats, pool=None):
    """Wall times (s per ensemble step) of ``repeats`` fixed runs of ``steps`` steps from ``p0``."""
    out = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        sample(WalkerBlocks(posterior, pool), p0, steps, vectorize=True, seed=1)
        out.append((time.perf_counter() - t0) / steps)
    return out


def timed_calls(log_prob, thetas, calls):
    """Wall times (s) of ``calls`` evaluations of the walker set ``thetas`` after a first
    one (plans, compiled kernels, the pool's first message), and the values."""
    values = log_prob(thetas)
    out = []
    for _ in range(calls):
        t0 = time.perf_counter()
        log_prob(thetas)
        out.append(time.perf_counter() - t0)
    return out, [float(v) for v in values]


def ess_of(chain):
    """Smallest effective sample size over the parameters, with the project's default
    burn-in (:func:`lossfit.inference.posterior.auto_burn`) and tau."""
    burn = auto_burn(chain)
    tau = autocorrelation_times(chain[burn:])
    return float(np.min((chain.shape[0] - burn) * chain.shape[1] / tau)), float(np.max(tau))


def run_to_ess(posterior, p0, target, max_steps, pool=None):
    """Sample in chunks of :data:`ESS_CHECK_EVERY` steps until every parameter has an
    effective sample size >= ``target`` (or ``max_steps``).

    Returns
    -------
    dict with steps, the sampling wall time (s, ESS checks excluded), ess, tau_max and
    a checksum of the chain (equal for serial and MPI runs of the same ensemble).
    """
    store = emcee.backends.Backend()
    wall, ess, tau, done = 0.0, 0.0, float("nan"), 0
    while done < max_steps and ess < target:
        t0 = time.perf_counter()
        run = sample(WalkerBlocks(posterior, pool), p0, done + ESS_CHECK_EVERY, backend=store, vectorize=True,
                     seed=1)
        wall += time.perf_counter() - t0
        done = int(store.iteration)
        ess, tau = ess_of(run.chain)
    chain = store.get_chain()
    return {"steps": int(store.iteration), "seconds": wall, "ess": ess, "tau_max": tau,
            "checksum": float(np.sum(chain * np.arange(1, chain.shape[0] + 1)[:, None, None]))}


def mpi_main(args):
    """Entry under mpiexec: every rank builds the posterior (:class:`ResidentPosterior`),
    rank 0 samples and the others serve."""
    pool = make_pool("mpi")
    n_curves = args.curves if args.mpi in ("steps", "groups") else args.ess_curves
    _, _, post, _, p0, _, _ = build(n_curves, args.walkers)
    if args.mpi != "groups":
        post = ResidentPosterior(f"{args.mpi}-{n_curves}", post)
    if not pool.is_master():
        pool.wait()
        return
    out = {"ranks": pool.size}
    if args.mpi == "steps":
        out["per_step"] = timed_steps(post, p0, args.steps, args.repeats, pool=pool)
    elif args.mpi == "groups":
        # the curve groups go to the other rank pickled, once (its first map)
        out["per_call"], out["values"] = timed_calls(WalkerBlocks(post, pool), p0[:1], args.calls)
    else:
        out.update(run_to_ess(post, p0, args.target_ess, args.max_steps, pool=pool))
    pool.close()
    print("MPI_RESULT " + json.dumps(out), flush=True)


def launch_mpi(kind, args):
    """Run this module under ``mpiexec -n 2`` in the mode ``kind``; its result dict."""
    mpiexec = find_mpiexec()
    if mpiexec is None:
        raise SystemExit("mpiexec not found: install the 'mpi' extra (mpi4py and the mpich wheel)")
    cmd = [mpiexec, "-n", "2", sys.executable, "-m", "benchmarks.bench_campaign", "--mpi", kind,
           "--curves", str(args.curves), "--ess-curves", str(args.ess_curves), "--walkers", str(args.walkers),
           "--steps", str(args.steps), "--repeats", str(args.repeats), "--target-ess", str(args.target_ess),
           "--max-steps", str(args.max_steps), "--calls", str(args.calls)]
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=root)
    line = [ln for ln in proc.stdout.splitlines() if ln.startswith("MPI_RESULT ")]
    if proc.returncode != 0 or not line:
        raise SystemExit(f"MPI run failed ({proc.returncode}):\n{proc.stderr[-2000:]}")
    return json.loads(line[0].split(" ", 1)[1])


def amdahl(f, ranks):
    """Amdahl speed-up on ``ranks`` ranks for serial fraction ``f``."""
    return 1.0 / (f + (1.0 - f) / ranks)


def profile(n_curves, calls=64, top=18):
    """cProfile of ``calls`` log-posterior calls at the points of a walker ball of an
    ``n_curves`` campaign: the functions with the most time of their own, then by
    cumulative time."""
    space, lik, post, theta0, p0, _, _ = build(n_curves, calls)
    post(theta0)                   # prepared plans and compiled kernels before profiling
    prof = cProfile.Profile()
    t0 = time.perf_counter()
    prof.runcall(lambda: [post(theta) for theta in p0])
    print(f"{lik.n_curves} curves, {space.ndim} parameters: {calls} log-posterior calls under cProfile, "
          f"{(time.perf_counter() - t0) / calls * 1e3:.1f} ms per call with the profiler's overhead")
    stats_ = pstats.Stats(prof, stream=sys.stdout).strip_dirs()
    stats_.sort_stats("tottime").print_stats(top)
    stats_.sort_stats("cumulative").print_stats(top)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--curves", type=int, default=300, help="curves of the campaign for (a), (b), step cost")
    ap.add_argument("--ess-curves", type=int, default=20, help="curves of the campaign sampled to the target ESS")
    ap.add_argument("--walkers", type=int, default=64)
    ap.add_argument("--steps", type=int, default=12, help="steps of each fixed run timing a step")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--target-ess", type=float, default=1000.0)
    ap.add_argument("--max-steps", type=int, default=4000, help="cap of the runs to the target ESS")
    ap.add_argument("--quick", action="store_true", help="tiny sizes: check that everything runs")
    ap.add_argument("--profile", type=int, metavar="CURVES",
                    help="instead: cProfile of the log-posterior at this many curves")
    ap.add_argument("--calls", type=int, default=20, help="repeats of the one-walker call of (d)")
    ap.add_argument("--two-level", action="store_true", help="only (d), after the set-up")
    ap.add_argument("--mpi", choices=("steps", "ess", "groups"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.quick:
        args.curves, args.ess_curves, args.steps, args.repeats = 20, 8, 3, 2
        args.target_ess, args.max_steps, args.calls = 100.0, 200, 5
    warnings.simplefilter("ignore", ValidityWarning)
    warnings.simplefilter("ignore", ConvergenceWarning)
    if args.mpi:
        mpi_main(args)
        return
    if args.profile:
        profile(args.profile)
        return

    print(f"invented campaign (not measured data), every systematic free; {args.walkers} walkers; {loads()}")
    t0 = time.perf_counter()
    space, lik, post, theta0, p0, values, (x_fits, jac_fits) = build(args.curves, args.walkers)
    m = lik.n_curves
    print(f"{m} curves x {lik.n_points // m} points, parameters {space.names}; "
          f"set-up (simulation, per-curve fits, refinement, walker ball) {time.perf_counter() - t0:.1f} s")
    if args.two_level:
        two_level(post, p0, m, args)
        return

    # (a) one log-posterior call against its rate tables (the thermal averages over the
    # field noise, rebuilt at every call because the resonance and sigma_B move)
    ef = space.efimov(values)
    post(theta0)
    calls, tables = [], []
    for _ in range(max(10, 3 * args.repeats)):
        t = time.perf_counter()
        post(theta0)
        calls.append(time.perf_counter() - t)
        t = time.perf_counter()
        lik.tables(ef, values)
        tables.append(time.perf_counter() - t)
    print(f"(a) log-posterior call: {fmt(calls, 1e3, 'ms')}; per curve {fmt([c / m for c in calls], 1e3, 'ms', 3)}")
    print(f"    its rate tables alone (baseline): {fmt(tables, 1e3, 'ms')}; call / tables = "
          f"{stats(calls)[0] / stats(tables)[0]:.2f} (min / min)")

    # (a2) a walker set of 32 in one call: the prepared thermal averages reused under the
    # walkers' resonance shifts and field noise, against rebuilding them at every walker's
    # scattering lengths (shift_margin 0, the path before the reuse) in the same run
    thetas = p0[:32]
    efimov_set, values_set = space.efimov(space.values(thetas)), space.values(thetas)
    served = len(lik._rescaled_coefficients_of_set(efimov_set, values_set)[2])
    margin = lik.shift_margin
    per_walker = {}
    for label, reach in (("reused", margin), ("rebuilt", 0.0)):
        lik.shift_margin = reach
        post.batch(thetas)
        runs = []
        for _ in range(max(5, args.repeats)):
            t = time.perf_counter()
            post.batch(thetas)
            runs.append((time.perf_counter() - t) / len(thetas))
        per_walker[label] = runs
    lik.shift_margin = margin
    print(f"(a2) walker set of {len(thetas)} in one call ({served} served by the prepared averages, margin "
          f"{margin:.2f} in ln T): per walker {fmt(per_walker['reused'], 1e3, 'ms')}, per curve and walker "
          f"{fmt([w / m for w in per_walker['reused']], 1e6, 'us', 1)}")
    print(f"     rebuilt averages (baseline): per walker {fmt(per_walker['rebuilt'], 1e3, 'ms')}; speed-up "
          f"{stats(per_walker['rebuilt'])[0] / stats(per_walker['reused'])[0]:.2f}x (min / min)")

    # (b) the start-point refinement, from the per-curve fits' reference each time
    x0, jac0 = lik.x_ref.copy(), lik.jac.copy()
    refine = []
    for _ in range(args.repeats):
        lik._set_reference(x_fits, jac_fits)
        t = time.perf_counter()
        lik.refresh(ef, values)
        refine.append(time.perf_counter() - t)
    lik._set_reference(x0, jac0)
    print(f"(b) start-point refinement: {fmt(refine)}; = {stats(refine)[0] / stats(calls)[0]:.0f} "
          f"log-posterior calls (min / min)")

    # (c1) cost of an ensemble step at this size, serial (baseline) and on 2 MPI ranks
    timed = TimedPosterior(post)
    t = time.perf_counter()
    serial = timed_steps(timed, p0, args.steps, args.repeats)
    inside = timed.spent / (time.perf_counter() - t)
    print(f"(c) {loads()}")
    print(f"    one ensemble step, {m} curves, serial (baseline): {fmt(serial)}; "
          f"{inside:.4f} of it inside the posterior")
    mpi = launch_mpi("steps", args)["per_step"]
    speedup = stats(serial)[0] / stats(mpi)[0]
    print(f"    one ensemble step, {m} curves, MPI 2 ranks:       {fmt(mpi)}; speed-up {speedup:.2f}x "
          f"(min / min; median / median {stats(serial)[1] / stats(mpi)[1]:.2f}x)")

    # (c2) steps to the target ESS on the smaller campaign, serial and MPI
    _, small_lik, small_post, _, small_p0, _, _ = build(args.ess_curves, args.walkers)
    ess_serial = run_to_ess(small_post, small_p0, args.target_ess, args.max_steps)
    ess_mpi = launch_mpi("ess", args)
    same = ess_serial["checksum"] == ess_mpi["checksum"] and ess_serial["steps"] == ess_mpi["steps"]
    reached = ess_serial["ess"] >= args.target_ess
    print(f"    to ESS >= {args.target_ess:g} per parameter, {small_lik.n_curves} curves "
          f"(checked every {ESS_CHECK_EVERY} steps): {ess_serial['steps']} steps"
          f"{'' if reached else ' (target NOT reached: max-steps)'}, min ESS {ess_serial['ess']:.0f}, "
          f"tau_max {ess_serial['tau_max']:.1f} steps; chains serial and MPI {'identical' if same else 'DIFFER'}")
    print(f"      serial (baseline): {ess_serial['seconds']:.1f} s; MPI 2 ranks: {ess_mpi['seconds']:.1f} s, "
          f"speed-up {ess_serial['seconds'] / ess_mpi['seconds']:.2f}x  (single runs)")
    print(f"    {loads()}")

    # serial fractions: from what the serial run spends outside the posterior, and from
    # the measured 2-rank speed-up (Amdahl: S_2 = 1 / (f + (1 - f)/2)); emcee evaluates
    # half the ensemble per map, so at most walkers/2 ranks work
    busy = min(64, args.walkers // 2)
    for label, f in (("outside the posterior, serial run", 1.0 - inside),
                     ("from the 2-rank speed-up", 2.0 / speedup - 1.0)):
        if not 0.0 <= f <= 1.0:
            print(f"    serial fraction {label}: none (speed-up {speedup:.2f}x outside 1-2x: the two ranks "
                  "did not get two cores)")
            continue
        print(f"    serial fraction {label}: {f:.4f}; Amdahl, 64 ranks: {amdahl(f, 64):.1f}x "
              f"({busy} of them busy with {args.walkers} walkers: {amdahl(f, busy):.1f}x)")

    # extrapolation to the full campaign: the small campaign's steps at the large one's cost
    steps = ess_serial["steps"]
    for label, per_step in (("serial", stats(serial)), ("MPI 2 ranks", stats(mpi))):
        print(f"    extrapolated time to ESS {args.target_ess:g} at {m} curves, {label}: {steps} steps x "
              f"{per_step[0]:.2f} / {per_step[1]:.2f} s = {steps * per_step[0] / 60:.1f} / "
              f"{steps * per_step[1] / 60:.1f} min (min / median)")

    two_level(post, p0, m, args)


def two_level(post, p0, m, args):
    """(d) two-level parallelism: a set of one walker (more ranks than walkers per set),
    its curves split in 2 groups over 2 MPI ranks, against the same call serially."""
    serial_call, serial_value = timed_calls(post.batch, p0[:1], args.calls)
    groups = launch_mpi("groups", args)
    speedup = stats(serial_call)[0] / stats(groups["per_call"])[0]
    same = serial_value == groups["values"]
    print(f"(d) {loads()}")
    print(f"    one walker, {m} curves, serial (baseline): {fmt(serial_call, 1e3, 'ms')}")
    print(f"    the same, curves in 2 groups on 2 MPI ranks: {fmt(groups['per_call'], 1e3, 'ms')}; speed-up "
          f"{speedup:.2f}x (min / min; median / median "
          f"{stats(serial_call)[1] / stats(groups['per_call'])[1]:.2f}x); log posterior "
          f"{'identical' if same else 'DIFFERS'}")
    # 64 walkers on 64 ranks: walker blocks alone keep 32 ranks busy with one walker each;
    # two curve groups give every rank one walker's half of the curves, the task timed here
    print(f"    64 walkers on 64 ranks: every rank gets one walker's half of the curves instead of 32 ranks "
          f"one walker each: each half-step {speedup:.2f}x faster than with walker blocks alone "
          f"(before the messages to more ranks)")


if __name__ == "__main__":
    main()
