"""The built-in demo scenario: invented data, generated from the forward model.

The scenario is *invented* for demonstration: a caesium-133 gas (atomic data only are
real) whose "true" Efimov parameters are chosen by us, measured at three temperatures
on the a < 0 side (L3) and at one temperature on the a > 0 side (atom-dimer beta).
Each point scatters normally with its stated error (a fixed fraction of the model
value, the noise model the Gaussian likelihood assumes), and the whole data set
shares a density-calibration error of +8 % (L3 scales as 1/s^2, beta as 1/s).
No laboratory's measurement is used.
"""

__all__ = ["SCENARIO", "demo_spectra", "run_demo"]

import os
import time
import warnings

import numpy as np

from .data import LossSpectrum, write_spectra
from .errors import LossfitValueError, ValidityWarning
from .rates import beta, l3
from .species import species
from .universal.threshold import Efimov

SCENARIO = {
    "description": "invented demo scenario (not measured data): Cs-133 gas, "
                   "L3 at a<0 for 15, 60 and 250 nK, atom-dimer beta at a>0 for 40 nK",
    "species": "133Cs",
    "truth": {"a_minus": -920.0, "eta_minus": 0.07, "a_star": 980.0, "eta_star": 0.09,
              "density_scale": 1.08},
    "l3_temperatures_nK": [15.0, 60.0, 250.0],
    "l3_a_range_a0": [-3500.0, -450.0],
    "l3_points": 18,
    "beta_temperature_nK": 40.0,
    "beta_a_range_a0": [350.0, 3500.0],
    "beta_points": 16,
    "relative_error": 0.18,
    "seed": 20261202,
}


def demo_spectra(scenario=SCENARIO):
    """The demo's synthetic spectra (list of LossSpectrum) and the truth dict."""
    rng = np.random.default_rng(scenario["seed"])
    sp = species(scenario["species"])
    truth = scenario["truth"]
    ef = Efimov(**{k: v for k, v in truth.items() if k != "density_scale"})
    s = truth["density_scale"]
    rel = scenario["relative_error"]
    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        lo, hi = scenario["l3_a_range_a0"]
        a = -np.geomspace(abs(hi), abs(lo), scenario["l3_points"])
        for t in scenario["l3_temperatures_nK"]:
            model = l3(a, t, species=sp, efimov=ef) / s ** 2
            value = model * (1.0 + rel * rng.standard_normal(a.size))
            out.append(LossSpectrum(a, t, value, rel * model, kind="l3", label=f"L3, {t:g} nK",
                                    species=sp.name))
        lo, hi = scenario["beta_a_range_a0"]
        a = np.geomspace(lo, hi, scenario["beta_points"])
        t = scenario["beta_temperature_nK"]
        model = beta(a, t, species=sp, efimov=ef) / s
        value = model * (1.0 + rel * rng.standard_normal(a.size))
        out.append(LossSpectrum(a, t, value, rel * model, kind="beta", label=f"beta, {t:g} nK",
                                species=sp.name))
    return out, dict(truth)


def run_demo(out_dir, *, walkers=32, steps=5000, seed=1, overwrite=False, progress=None):
    """Generate the demo data, fit it and write every output into ``out_dir``.

    Writes ``data.h5`` (spectra), ``chains.h5`` (emcee chain), ``summary.json``,
    ``corner.png`` and ``spectrum.png``; returns the FitResult.
    """
    from .inference import fit
    from .plotting import corner_plot, save_figure, spectrum_plot
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    out_dir = os.fspath(out_dir)
    names = ["data.h5", "chains.h5", "summary.json", "corner.png", "spectrum.png"]
    existing = [n for n in names if os.path.exists(os.path.join(out_dir, n))]
    if existing and not overwrite:
        raise LossfitValueError("out", f"{out_dir!r} already holds {existing}; choose another folder "
                                "or pass --overwrite")
    os.makedirs(out_dir, exist_ok=True)
    if overwrite:
        for n in existing:
            os.remove(os.path.join(out_dir, n))
    spectra, truth = demo_spectra()
    write_spectra(os.path.join(out_dir, "data.h5"), spectra)
    print(f"lossfit demo — {SCENARIO['description']}")
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        result = fit(spectra, species=SCENARIO["species"],
                     free=["a_minus", "eta_minus", "a_star", "eta_star", "density_scale"],
                     density_sigma=0.2, walkers=walkers, steps=steps, seed=seed,
                     backend=os.path.join(out_dir, "chains.h5"), progress=progress)
    elapsed = time.perf_counter() - t0
    result.settings["scenario"] = SCENARIO["description"]
    result.settings["wall_time_s"] = elapsed
    result.write_json(os.path.join(out_dir, "summary.json"))
    print(result.table())
    print("truth of the invented scenario: " + ", ".join(f"{k}={v:g}" for k, v in truth.items()))
    fig = corner_plot(result, truths=truth)
    save_figure(fig, os.path.join(out_dir, "corner.png"))
    plt.close(fig)
    fig = spectrum_plot(result)
    save_figure(fig, os.path.join(out_dir, "spectrum.png"))
    plt.close(fig)
    print(f"fit wall time {elapsed:.1f} s; outputs in {out_dir}/: {', '.join(names)}")
    return result
