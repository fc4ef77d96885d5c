"""Coverage of the global decay-curve fit and of the two-stage route (too slow for CI).

Invented scenario (``lossfit.data.curves.INVENTED_CAMPAIGN``, not measured data): for each
of ``--campaigns`` synthetic campaigns the Efimov truth is fixed (a_- = -900 a0,
eta_- = 0.08) and the calibration truths are drawn from the priors the fits use
(density scale ~ LogNormal(1, 0.2), temperature scale ~ LogNormal(1, 0.05)); the
curves scatter with their stated errors. Two analyses per campaign:

* global: :func:`lossfit.inference.global_fit.fit_curves` with both calibration
  nuisances sampled and the per-curve nuisances eliminated inside the likelihood;
* two-stage: per-curve constant-L3 fits (:func:`lossfit.inference.curve_fits.spectrum_from_curves`),
  then :func:`lossfit.fit` on the derived spectrum with the density-scale nuisance (the
  two-stage route has no handle on the thermometry scale, as in common practice).

A 68 % (95 %) interval should contain the truth in 68 % (95 %) of campaigns; the
binomial standard error of a fraction p over n campaigns is sqrt(p (1-p) / n).

With ``--dimer-fields N`` each campaign also has atom-dimer mixture curves at N fields
on the a > 0 side (a* and eta* tied to a_- by the universal relations in the truth, fitted
freely), so that both kinds of curve enter one fit.

Usage: python benchmarks/coverage_study.py --campaigns 24 --out coverage.json

Measured on 2026-12-02 (2-core machine, ~50 s per campaign): ``--campaigns 30
--walkers 20 --steps 1200`` (seeds 5000-5029) plus ``--first-seed 5030 --campaigns 40``;
the pooled 70 campaigns are summarised in lossfit/inference/global_fit.py (global
68 % coverage 0.74 / 0.70 / 0.63 for a_-, eta_-, density scale; two-stage 0.80 / 0.31 /
0.11).
"""

import argparse
import json
import math
import os
import sys
import time
import warnings

import numpy as np

import lossfit as lf
from lossfit._io import atomic_path
from lossfit.errors import ConvergenceWarning, ValidityWarning
from lossfit.inference.curve_fits import fit_curves_individually, spectrum_from_curves
from lossfit.inference.global_fit import fit_curves
from lossfit.simulate import INVENTED_CAMPAIGN, invented_campaign

PARAMS = ("a_minus", "eta_minus", "a_star", "eta_star", "density_scale", "temperature_scale")
DENSITY_SIGMA = 0.2
TEMPERATURE_SIGMA = 0.05


def one_campaign(seed, *, n_fields, walkers, steps, inner_steps, model="capped", dimer_fields=0):
    rng = np.random.default_rng(seed)
    truth = dict(INVENTED_CAMPAIGN["truth"])
    truth["density_scale"] = float(np.exp(DENSITY_SIGMA * rng.standard_normal()))
    truth["temperature_scale"] = float(np.exp(TEMPERATURE_SIGMA * rng.standard_normal()))
    curves, res, truth = invented_campaign(seed, n_fields=n_fields, truth=truth, model=model,
                                           dimer_fields=dimer_fields)
    efimov_free = ["a_minus", "eta_minus"] + (["a_star", "eta_star"] if dimer_fields else [])
    out = {"seed": seed, "truth": truth}
    t0 = time.perf_counter()
    glob = fit_curves(curves, species="133Cs", free=efimov_free, resonance=res, model=model,
                      systematics={"density_scale": DENSITY_SIGMA, "temperature_scale": TEMPERATURE_SIGMA},
                      walkers=walkers, steps=steps, seed=seed, progress=False, inner_steps=inner_steps)
    out["global_seconds"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    fits = fit_curves_individually(curves, species="133Cs", resonance=res)
    spectra = spectrum_from_curves(curves, species="133Cs", resonance=res, fits=fits)
    two = lf.fit(spectra, species="133Cs", free=efimov_free + ["density_scale"], model=model,
                 density_sigma=DENSITY_SIGMA, walkers=walkers, steps=steps, seed=seed, progress=False)
    out["two_stage_seconds"] = time.perf_counter() - t0
    for route, result in (("global", glob), ("two_stage", two)):
        rows = {r["name"]: r for r in result.summary()}
        out[route] = {p: {k: float(rows[p][k]) for k in ("median", "lo68", "hi68", "lo95", "hi95")}
                      for p in PARAMS if p in rows}      # the two-stage route has no temperature scale
        out[route + "_warnings"] = list(result.warnings)
    return out


BIN_EXPECTED = (0.025, 0.135, 0.34, 0.34, 0.135, 0.025)


def _coverage(runs, route):
    table = {}
    for p in [p for p in PARAMS if all(p in r[route] for r in runs)]:
        hit68 = [r[route][p]["lo68"] <= r["truth"][p] <= r[route][p]["hi68"] for r in runs]
        hit95 = [r[route][p]["lo95"] <= r["truth"][p] <= r[route][p]["hi95"] for r in runs]
        pulls = [(r[route][p]["median"] - r["truth"][p]) / (0.5 * (r[route][p]["hi68"] - r[route][p]["lo68"]))
                 for r in runs]
        # where the truth falls among the posterior quantiles 2.5, 16, 50, 84, 97.5 %: for a
        # calibrated posterior the six bins fill as BIN_EXPECTED (a coarse rank histogram,
        # Talts et al., arXiv:1804.06788 (2018))
        bins = np.zeros(6, dtype=int)
        for r in runs:
            q = r[route][p]
            edges = [q["lo95"], q["lo68"], q["median"], q["hi68"], q["hi95"]]
            bins[int(np.searchsorted(edges, r["truth"][p]))] += 1
        table[p] = {"coverage68": float(np.mean(hit68)), "coverage95": float(np.mean(hit95)),
                    "mean_pull": float(np.mean(pulls)), "rms_pull": float(np.sqrt(np.mean(np.square(pulls)))),
                    "quantile_bins": bins.tolist()}
    return table


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--campaigns", type=int, default=24)
    ap.add_argument("--fields", type=int, default=20, help="fields per campaign (2 temperatures each)")
    ap.add_argument("--walkers", type=int, default=24)
    ap.add_argument("--steps", type=int, default=1500)
    ap.add_argument("--inner-steps", type=int, default=1)
    ap.add_argument("--dimer-fields", type=int, default=0,
                    help="fields on the a > 0 side with atom-dimer mixture curves (a*, eta* also fitted)")
    ap.add_argument("--first-seed", type=int, default=5000)
    ap.add_argument("--out", required=True, help="JSON file for the results (not overwritten)")
    args = ap.parse_args(argv)
    if os.path.exists(args.out):
        sys.exit(f"{args.out} exists; choose another --out (results are never overwritten)")
    runs, failures = [], []
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        warnings.simplefilter("ignore", ConvergenceWarning)
        for i in range(args.campaigns):
            try:
                r = one_campaign(args.first_seed + i, n_fields=args.fields, walkers=args.walkers,
                                 steps=args.steps, inner_steps=args.inner_steps,
                                 dimer_fields=args.dimer_fields)
            except lf.LossfitValueError as err:  # record, do not hide: a failed campaign is a result
                failures.append({"seed": args.first_seed + i, "error": str(err)})
                print(f"campaign {i + 1}/{args.campaigns}: FAILED {err}", flush=True)
                continue
            runs.append(r)
            print(f"campaign {i + 1}/{args.campaigns}: global {r['global_seconds']:.1f} s, "
                  f"two-stage {r['two_stage_seconds']:.1f} s", flush=True)
            summary = {"settings": vars(args), "scenario": INVENTED_CAMPAIGN["description"],
                       "n": len(runs), "binomial_se68": math.sqrt(0.68 * 0.32 / len(runs)),
                       "global": _coverage(runs, "global"), "two_stage": _coverage(runs, "two_stage"),
                       "wall_seconds": time.perf_counter() - t0, "failures": failures, "runs": runs}
            with atomic_path(args.out) as tmp, open(tmp, "w") as fh:      # checkpoint as we go
                json.dump(summary, fh, indent=1)
    for route in ("global", "two_stage"):
        print(f"{route}:")
        for p, row in summary[route].items():
            print(f"  {p:<14} 68%: {row['coverage68']:.2f}  95%: {row['coverage95']:.2f}  "
                  f"pull mean {row['mean_pull']:+.2f} rms {row['rms_pull']:.2f}  "
                  f"truth in quantile bins {row['quantile_bins']}")
    print(f"n = {len(runs)} campaigns; binomial s.e. of a 68 % coverage: {summary['binomial_se68']:.2f}")


if __name__ == "__main__":
    main()
