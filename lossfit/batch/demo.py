"""``lossfit demo``: fit the built-in invented scenarios (:mod:`lossfit.simulate`) and
write data, job file, chain, summary and figures. No laboratory's measurement is used."""

__all__ = ["run_demo", "run_curves_demo"]

import json
import os
import time
import warnings

from .._io import atomic_path
from ..data.curves import write_campaign
from ..data.spectra import write_spectra
from ..errors import ValidityWarning
from ..inference.curve_fits import fit_curves_individually
from ..inference.global_fit import fit_curves
from ..plotting.curves import curves_plot, derived_spectrum_plot
from ..plotting.spectra import corner_plot, save_figure
from ..simulate import INVENTED_CAMPAIGN, SCENARIO, demo_spectra, invented_campaign
from ..species import species
from .provenance import provenance
from .runner import OUTPUTS, OutputConflict, run_job


def _fresh_folder(out_dir, names, overwrite):
    """Create ``out_dir``; refuse (OutputConflict) if it holds any of ``names`` unless
    ``overwrite``, in which case those files are removed first."""
    existing = [n for n in names if os.path.exists(os.path.join(out_dir, n))]
    if existing and not overwrite:
        raise OutputConflict(f"{out_dir!r} already holds {existing}; choose another folder or pass "
                             "--overwrite")
    os.makedirs(out_dir, exist_ok=True)
    for n in existing:
        os.remove(os.path.join(out_dir, n))


def demo_job_text(walkers=32, steps=5000, seed=1):
    """The job file the demo runs (TOML; see :mod:`lossfit.batch.jobs`)."""
    return f"""# lossfit demo job: {SCENARIO['description']}
[data]
species = "{SCENARIO['species']}"
spectra = ["data.h5"]

[model]
name = "zero-range"  # the exact model the data were generated with ("capped" is the approximation)
tie = "none"

[free]
a_minus = {{ prior = "default" }}
eta_minus = {{ prior = "default" }}
a_star = {{ prior = "default" }}
eta_star = {{ prior = "default" }}
density_scale = {{ prior = "log-normal", median = 1.0, sigma = 0.2 }}

[sampler]
walkers = {walkers}
steps = {steps}
seed = {seed}
burn = "auto"
thin = 1
checkpoint_every = 250
log_every = 500
"""


def run_demo(out_dir, *, walkers=32, steps=5000, seed=1, overwrite=False, progress=None):
    """Write the demo's data and job file into ``out_dir`` and run the job there.

    Writes ``data.h5`` (spectra), ``job.toml`` (so that ``lossfit run DIR/job.toml
    --out OTHER`` reproduces the run), ``chains.h5``, ``summary.json``, ``corner.png``
    and ``spectrum.png``; returns the FitResult.
    """
    out_dir = os.fspath(out_dir)
    names = ["data.h5", "job.toml", *OUTPUTS]
    _fresh_folder(out_dir, names, overwrite)
    spectra, truth = demo_spectra()
    write_spectra(os.path.join(out_dir, "data.h5"), spectra)
    with open(os.path.join(out_dir, "job.toml"), "w") as fh:
        fh.write(demo_job_text(walkers, steps, seed))
    print(f"lossfit demo — {SCENARIO['description']}")
    t0 = time.perf_counter()
    result = run_job(os.path.join(out_dir, "job.toml"), out_dir, progress=progress, truths=truth)
    elapsed = time.perf_counter() - t0
    print("truth of the invented scenario: " + ", ".join(f"{k}={v:g}" for k, v in truth.items()))
    print(f"wall time {elapsed:.1f} s; outputs in {out_dir}/: {', '.join(names)}")
    return result


def run_curves_demo(out_dir, *, walkers=16, steps=1500, seed=1, n_fields=10, overwrite=False, progress=None):
    """The demo from raw data: invented decay curves -> per-curve fits -> global fit.

    Writes ``campaign.h5`` (the invented curves, campaign schema of
    :mod:`lossfit.data.curves`), ``chains.h5``, ``summary.json``, ``curves.png`` (each curve
    with its global and per-curve fit and residuals), ``spectrum.png`` (the derived
    spectrum with the global posterior) and ``corner.png``; returns the FitResult.
    """

    # matplotlib's backend must be chosen before pyplot loads: files only, no screen
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    out_dir = os.fspath(out_dir)
    names = ["campaign.h5", "chains.h5", "summary.json", "curves.png", "spectrum.png", "corner.png"]
    _fresh_folder(out_dir, names, overwrite)
    print(f"lossfit demo from raw decay curves — {INVENTED_CAMPAIGN['description']}")
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        curves, resonance, truth = invented_campaign(seed=seed, n_fields=n_fields)
        sp = species(SCENARIO["species"])
        write_campaign(os.path.join(out_dir, "campaign.h5"), curves, species=sp, resonance=resonance,
                       metadata={"scenario": INVENTED_CAMPAIGN["description"]})
        fits = fit_curves_individually(curves, species=sp, resonance=resonance)
        result = fit_curves(curves, species=sp, free=["a_minus", "eta_minus"], resonance=resonance,
                            systematics={"density_scale": 0.2, "temperature_scale": 0.05},
                            walkers=walkers, steps=steps, seed=seed, progress=progress,
                            backend=os.path.join(out_dir, "chains.h5"))
    summary = result.to_dict()
    summary["provenance"] = provenance(scenario=INVENTED_CAMPAIGN["description"], seed=seed,
                                       truth=truth)
    with atomic_path(os.path.join(out_dir, "summary.json")) as tmp, open(tmp, "w") as fh:
        json.dump(summary, fh, indent=2, default=str)
    for name, fig in (("curves.png", curves_plot(fits=fits, result=result, species=sp)),
                      ("spectrum.png", derived_spectrum_plot(result=result, draws=80)),
                      ("corner.png", corner_plot(result, truths=truth))):
        save_figure(fig, os.path.join(out_dir, name))
        plt.close(fig)
    print(result.table())
    print("truth of the invented scenario: " + ", ".join(f"{k}={v:g}" for k, v in truth.items()))
    print(f"wall time {time.perf_counter() - t0:.1f} s; outputs in {out_dir}/: {', '.join(names)}")
    return result
