"""``lossfit demo``: fit the built-in invented scenarios (:mod:`lossfit.simulate`) and
write data, job file, chain, summary and figures. No laboratory's measurement is used."""

__all__ = ["run_demo", "run_curves_demo", "run_mixture_demo", "demo_job_text", "curves_job_text", "mixture_job_text",
           "CURVES_DEMO_STEPS", "MIXTURE_DEMO_STEPS"]

import os
import time
import warnings

import matplotlib.pyplot as plt

from ..data.curves import write_campaign
from ..data.spectra import write_spectra
from ..errors import OutputConflict, ValidityWarning
from ..inference.curve_fits import fit_curves_individually
from ..plotting.curves import curves_plot
from ..plotting.spectra import save_figure
from ..simulate import DEMO_CAMPAIGN, MIXTURE_SCENARIO, SCENARIO, demo_spectra, invented_campaign
from ..species import species
from .runner import OUTPUTS, run_job

#: Steps of the demo from raw curves: 50 autocorrelation times (tau ~ 50) after burn-in,
#: so that its chains converge with the defaults (docs/global-fit.md).
CURVES_DEMO_STEPS = 3500
#: Steps of the mixture demo (three free parameters; tau ~ 40 steps).
MIXTURE_DEMO_STEPS = 3000


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


def _sampler_section(walkers, steps, seed, log_every):
    """The [sampler] section both demo jobs share."""
    return (f"[sampler]\nwalkers = {walkers}\nsteps = {steps}\nseed = {seed}\nburn = \"auto\"\nthin = 1\n"
            f"checkpoint_every = 250\nlog_every = {log_every}\n")


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

""" + _sampler_section(walkers, steps, seed, log_every=500)


def mixture_job_text(walkers=24, steps=MIXTURE_DEMO_STEPS, seed=1):
    """The job file of the mixture demo (two identical bosons and a third atom)."""
    return f"""# lossfit demo job: {MIXTURE_SCENARIO['description']}
# Caution: a_bb = 0 is an idealisation for Cs-Li (the Cs-Cs interaction changes the loss
# strongly); the demo shows the method, not a realistic Cs-Li analysis.
[data]
species = "{MIXTURE_SCENARIO['species']}"   # two identical bosons B, then the third atom X
spectra = ["data.h5"]                        # L3 as loss of X: d n_X/dt = -L3 n_B^2 n_X

[model]
name = "zero-range"

[free]
a_minus = {{ prior = "default" }}   # one Efimov period around the first resonance in the data
eta_minus = {{ prior = "default" }}
density_scale = {{ prior = "log-normal", median = 1.0, sigma = 0.2 }}

""" + _sampler_section(walkers, steps, seed, log_every=500)


def curves_job_text(walkers=16, steps=CURVES_DEMO_STEPS, seed=1):
    """The job file the demo from raw decay curves runs (a campaign job, :mod:`lossfit.batch.jobs`)."""
    return f"""# lossfit demo job from raw decay curves: {DEMO_CAMPAIGN['description']}
[data]
species = "{DEMO_CAMPAIGN['species']}"
campaign = "campaign.h5"   # its resonance is the nominal a(B)

[model]
name = "zero-range"

[free]
a_minus = {{ prior = "default" }}
eta_minus = {{ prior = "default" }}
density_scale = {{ prior = "log-normal", median = 1.0, sigma = 0.2 }}
temperature_scale = {{ prior = "log-normal", median = 1.0, sigma = 0.05 }}

""" + _sampler_section(walkers, steps, seed, log_every=250)


def _say(quiet):
    return (lambda *args: None) if quiet else print


def run_demo(out_dir, *, walkers=32, steps=5000, seed=1, overwrite=False, progress=None, quiet=False):
    """Write the demo's data and job file into ``out_dir`` and run the job there.

    Writes ``data.h5`` (spectra), ``job.toml`` (so that ``lossfit run DIR/job.toml
    --out OTHER`` reproduces the run), ``chains.h5``, ``summary.json``, ``corner.png``
    and ``spectrum.png``; returns the FitResult. ``quiet`` prints nothing.
    """
    say = _say(quiet)
    out_dir = os.fspath(out_dir)
    names = ["data.h5", "job.toml", *OUTPUTS]
    _fresh_folder(out_dir, names, overwrite)
    spectra, truth = demo_spectra()
    write_spectra(os.path.join(out_dir, "data.h5"), spectra)
    with open(os.path.join(out_dir, "job.toml"), "w") as fh:
        fh.write(demo_job_text(walkers, steps, seed))
    say(f"lossfit demo — {SCENARIO['description']}")
    t0 = time.perf_counter()
    result = run_job(os.path.join(out_dir, "job.toml"), out_dir, progress=progress, truths=truth, quiet=quiet)
    say("truth of the invented scenario: " + ", ".join(f"{k}={v:g}" for k, v in truth.items()))
    say(f"wall time {time.perf_counter() - t0:.1f} s; outputs in {out_dir}/: {', '.join(names)}")
    return result


def run_mixture_demo(out_dir, *, walkers=24, steps=MIXTURE_DEMO_STEPS, seed=1, overwrite=False, progress=None,
                     quiet=False):
    """The mixture demo: invented L3 spectra of 133Cs-133Cs-6Li through three resonances.

    Writes ``data.h5``, ``job.toml``, ``chains.h5``, ``summary.json``, ``corner.png`` and
    ``spectrum.png`` into ``out_dir`` as :func:`run_demo` does; returns the FitResult.
    """
    say = _say(quiet)
    out_dir = os.fspath(out_dir)
    names = ["data.h5", "job.toml", *[n for n in OUTPUTS if n != "universality.png"]]
    _fresh_folder(out_dir, names, overwrite)
    spectra, truth = demo_spectra(MIXTURE_SCENARIO)
    write_spectra(os.path.join(out_dir, "data.h5"), spectra)
    with open(os.path.join(out_dir, "job.toml"), "w") as fh:
        fh.write(mixture_job_text(walkers, steps, seed))
    say(f"lossfit demo — {MIXTURE_SCENARIO['description']}")
    say("caution: a_bb = 0 is an idealisation for Cs-Li; see docs/heteronuclear-rates.md")
    t0 = time.perf_counter()
    result = run_job(os.path.join(out_dir, "job.toml"), out_dir, progress=progress, truths=truth, quiet=quiet)
    say("truth of the invented scenario: " + ", ".join(f"{k}={v:g}" for k, v in truth.items()))
    say(f"wall time {time.perf_counter() - t0:.1f} s; outputs in {out_dir}/: {', '.join(names)}")
    return result


def run_curves_demo(out_dir, *, walkers=16, steps=CURVES_DEMO_STEPS, seed=1, n_fields=10, overwrite=False,
                    progress=None, quiet=False):
    """The demo from raw data: invented decay curves -> per-curve fits -> global fit.

    Writes ``campaign.h5`` (the invented curves, campaign schema of
    :mod:`lossfit.data.curves`) and ``job.toml`` (a campaign job: ``lossfit run DIR/job.toml
    --out OTHER`` reproduces the run), runs the job as ``lossfit run`` does (progress or log
    lines; ``chains.h5``, ``summary.json``, ``corner.png``, ``spectrum.png``: the derived
    spectrum with the global posterior), then draws ``curves.png`` (each curve with its
    global and per-curve fit and residuals); returns the FitResult.
    """
    say = _say(quiet)
    out_dir = os.fspath(out_dir)
    names = ["campaign.h5", "job.toml", *OUTPUTS, "curves.png"]
    _fresh_folder(out_dir, names, overwrite)
    say(f"lossfit demo from raw decay curves — {DEMO_CAMPAIGN['description']}")
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        curves, resonance, truth = invented_campaign(seed=seed, n_fields=n_fields, scenario=DEMO_CAMPAIGN)
    sp = species(DEMO_CAMPAIGN["species"])
    write_campaign(os.path.join(out_dir, "campaign.h5"), curves, species=sp, resonance=resonance,
                   metadata={"scenario": DEMO_CAMPAIGN["description"]})
    with open(os.path.join(out_dir, "job.toml"), "w") as fh:
        fh.write(curves_job_text(walkers, steps, seed))
    say(f"{len(curves)} invented curves written; per-curve fits and the global fit follow")
    result = run_job(os.path.join(out_dir, "job.toml"), out_dir, progress=progress, truths=truth, quiet=quiet)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        fits = fit_curves_individually(curves, species=sp, resonance=resonance)
        fig = curves_plot(fits=fits, result=result, species=sp)
    save_figure(fig, os.path.join(out_dir, "curves.png"))
    plt.close(fig)
    say("truth of the invented scenario: " + ", ".join(f"{k}={v:g}" for k, v in truth.items()))
    say(f"wall time {time.perf_counter() - t0:.1f} s; outputs in {out_dir}/: {', '.join(names)}")
    return result
