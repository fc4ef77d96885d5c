"""Synthetic data from the forward model, and the invented scenarios in one place.

Everything here is *invented* for demonstrations, tests and benchmarks: a caesium-133 gas
(atomic data real) whose Efimov parameters, resonance, traps and noise are chosen by us.
No laboratory's measurement is used.

* :data:`SCENARIO` / :func:`demo_spectra`: loss spectra at three temperatures on the
  a < 0 side (L3) and one on the a > 0 side (atom-dimer beta), with a density-calibration
  error of +8 % (L3 scales as 1/s^2, beta as 1/s); each point scatters normally with its
  stated error (the noise model the Gaussian likelihood assumes). ``lossfit demo`` fits it.
* :data:`MIXTURE_SCENARIO`: the same kind of spectra for two identical bosons and a third
  atom: L3 of an invented 133Cs-133Cs-6Li mixture through three a < 0 resonances at two
  temperatures, with a_bb = 0 (an idealisation: in Cs-Li the Cs-Cs interaction changes the
  loss strongly, Petrov & Werner, PRA 92, 022704 (2015)). ``lossfit demo --mixture`` fits it.
* :func:`simulate_curve`: one decay curve from the rate equations with a noise model
  (atom curves at a > 0: the explicit trapped-dimer kinetics by default).
* :data:`INVENTED_CAMPAIGN` / :func:`invented_campaign`: a campaign of such curves near an
  invented resonance (a < 0, optionally atom curves at a > 0 and atom-dimer mixtures).
  ``lossfit demo --from-curves`` fits it.
"""

__all__ = ["SCENARIO", "MIXTURE_SCENARIO", "demo_spectra", "simulate_curve", "INVENTED_CAMPAIGN", "DEMO_CAMPAIGN",
           "invented_campaign"]

import math
import warnings

import numpy as np

from .data.curves import KINDS, DecayCurve
from .data.spectra import LossSpectrum
from .efimov import Efimov
from .errors import LossfitValueError, ValidityWarning
from .experiment.decay import simulate_decay
from .experiment.feshbach import FeshbachResonance
from .experiment.trap import as_trap
from .rates import beta, l3
from .species import species
from .universal.mixture_model import resolve_species
from .universal.models import DEFAULT_MODEL, get_model

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


MIXTURE_SCENARIO = {
    "description": "invented demo scenario (not measured data): 133Cs-133Cs-6Li mixture with a_bb = 0 "
                   "(an idealisation), L3 (loss of 6Li, events) through three a<0 resonances at 100 and 400 nK",
    "species": "133Cs-133Cs-6Li",
    "truth": {"a_minus": -320.0, "eta_minus": 0.12, "density_scale": 1.1},
    "l3_temperatures_nK": [100.0, 400.0],
    "l3_a_range_a0": [-12000.0, -260.0],
    "l3_points": 26,
    "relative_error": 0.2,
    "seed": 20261204,
}


def demo_spectra(scenario=SCENARIO):
    """The demo's synthetic spectra (list of LossSpectrum) and the truth dict (a scenario
    without ``beta_points`` has L3 spectra only)."""
    rng = np.random.default_rng(scenario["seed"])
    sp = resolve_species(scenario["species"])
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
        if "beta_points" not in scenario:
            return out, dict(truth)
        lo, hi = scenario["beta_a_range_a0"]
        a = np.geomspace(lo, hi, scenario["beta_points"])
        t = scenario["beta_temperature_nK"]
        model = beta(a, t, species=sp, efimov=ef) / s
        value = model * (1.0 + rel * rng.standard_normal(a.size))
        out.append(LossSpectrum(a, t, value, rel * model, kind="beta", label=f"beta, {t:g} nK",
                                species=sp.name))
    return out, dict(truth)


def simulate_curve(t, *, species, trap_hz, efimov, n0, t0_nK, a=None, field=None, resonance=None,
                   model=None, gamma=0.0, recombination_heating_nK=0.0, density_scale=1.0,
                   temperature_scale=1.0, atoms_rel_err=0.04, atoms_abs_err=0.0, temperature_rel_err=0.03,
                   rng=None, label=None, kind="atoms", n_dimers0=0.0, gamma_dimer=0.0, dimers=None,
                   trap_depth=None, counts_dimers=True):
    """A synthetic loss curve from the forward model (for invented scenarios and tests).

    The true cloud (``n0`` atoms at ``t0_nK``) evolves under the theory L3 at the
    instantaneous temperature (:func:`lossfit.experiment.decay.simulate_decay`); the "measured"
    numbers are ``density_scale`` x N(t) and temperatures ``temperature_scale`` x T(t),
    scattered normally with the stated errors (relative to the measured model value,
    plus ``atoms_abs_err`` in quadrature). With ``kind="dimers"`` the mixture of
    ``n_dimers0`` dimers and ``n0`` atoms evolves under the theory beta (and L3 of the
    atoms); the curve holds the dimer numbers, the partner-atom numbers as a series
    and the temperatures, all with the same noise model. An atom curve at a > 0 runs the
    explicit trapped-dimer kinetics by default (with a model that resolves the channels),
    and its "measured" number is N + 2 N_D (``counts_dimers``) or N.

    Parameters
    ----------
    t : array_like
        Hold times in s.
    species, trap_hz, efimov, model, gamma, recombination_heating_nK
        As in :func:`lossfit.experiment.decay.simulate_decay` (gamma in 1/s, T_h in nK).
    n0 : float
        True initial atom number.
    t0_nK : float
        True initial temperature in nK.
    a : float, optional
        Scattering length in a0; or ``field`` (G) with ``resonance``.
    density_scale, temperature_scale : float
        Calibration factors of the invented apparatus (measured / true).
    atoms_rel_err, atoms_abs_err, temperature_rel_err : float
        Noise model.
    rng : numpy Generator
    label : str, optional
    kind : {"atoms", "dimers"}
    n_dimers0, gamma_dimer : float
        True initial dimer number and dimer one-body decay rate (1/s), for dimer curves.
    dimers : {None, "quasi-static", "explicit"}
        Atom curves: as in :func:`lossfit.experiment.decay.simulate_decay`; None:
        ``"explicit"`` at a > 0 with a model that resolves the channels, else
        ``"quasi-static"``.
    trap_depth : float, optional
        Atom trap depth U/k_B in nK, used by the simulation and recorded in the curve.
    counts_dimers : bool
        Whether the invented imaging counts atoms bound in dimers (recorded in the curve).

    Returns
    -------
    DecayCurve
    """
    if rng is None:
        raise LossfitValueError("rng", "pass a numpy Generator (np.random.default_rng(seed))")
    if (a is None) == (field is None):
        raise LossfitValueError("field", "give exactly one of field= (with resonance=) and a=")
    if kind not in KINDS:
        raise LossfitValueError("kind", f"must be 'atoms' or 'dimers', got {kind!r}")
    if kind == "dimers" and not n_dimers0 > 0:
        raise LossfitValueError("n_dimers0", f"dimer curves need n_dimers0 > 0, got {n_dimers0!r}")
    a_true = a if a is not None else float(resonance.a(field))
    mixture = kind == "dimers"
    if dimers is None:
        channels = get_model(DEFAULT_MODEL if model is None else model).resolves_channels
        dimers = "explicit" if not mixture and a_true > 0 and channels else "quasi-static"
    if mixture:
        extra = {"n_dimers0": n_dimers0, "gamma_dimer": gamma_dimer}
    else:
        extra = {"dimers": dimers, "counts_dimers": counts_dimers}
    sol = simulate_decay(t, species=species, trap_hz=trap_hz, n0=n0, t0_nK=t0_nK, efimov=efimov, a=a_true,
                         model=model, gamma=gamma, recombination_heating_nK=recombination_heating_nK,
                         trap_depth=trap_depth, **extra)

    def measured(true_values, scale, rel_err, abs_err=0.0):
        model_values = scale * true_values
        err = np.sqrt((rel_err * model_values) ** 2 + abs_err ** 2)
        return np.clip(model_values + err * rng.standard_normal(model_values.size), 0.0, None), err

    main, main_err = measured(sol.dimers if mixture else sol.counted, density_scale, atoms_rel_err, atoms_abs_err)
    t_meas, t_err = measured(sol.temperature, temperature_scale, temperature_rel_err)
    partner = measured(sol.atoms, density_scale, atoms_rel_err, atoms_abs_err) if mixture else (None, None)
    return DecayCurve(t=sol.t, atoms=main, atoms_err=main_err, temperature=t_meas, temperature_err=t_err,
                      field=field, a=a if field is None else None, trap_hz=trap_hz, label=label, kind=kind,
                      partner_atoms=partner[0], partner_atoms_err=partner[1], trap_depth=trap_depth,
                      counts_dimers=counts_dimers)


# --- an invented scenario (not measured data) ---------------------------------------------

#: The invented campaign used by the notebook, the benchmarks and the tests: a Cs-133 gas
#: (atomic data real, everything else chosen by us) near an invented resonance, atom-loss
#: curves at fields on the a < 0 side for two temperatures and, on request
#: (``positive_fields``) atom-loss curves on the a > 0 side, simulated with the explicit
#: trapped-dimer kinetics in a trap of depth ``trap_depth_over_t`` x the nominal
#: temperature (recorded in each curve), and (``dimer_fields``) atom-dimer mixture curves
#: on the a > 0 side. The a > 0 truth follows the universal tie (a* = 1.0652 |a_-|, a_+,
#: one eta; ``Efimov.universal``); the simulated mixtures include the atoms' own
#: three-body loss, which the fits neglect.
INVENTED_CAMPAIGN = {
    "description": "invented scenario (not measured data): Cs-133, invented resonance "
                   "b0 = 550 G, width = 10 G, a_bg = 200 a0; atom-loss curves on the a < 0 side",
    "species": "133Cs",
    "resonance": {"b0": 550.0, "width": 10.0, "a_bg": 200.0},
    "truth": {"a_minus": -900.0, "eta_minus": 0.08, "density_scale": 1.1, "temperature_scale": 1.0},
    "a_range_a0": (-3500.0, -450.0),
    "temperatures_nK": (80.0, 250.0),
    "trap_hz": (40.0, 40.0, 8.0),
    "n0": 1.0e5,
    "gamma": 0.02,
    "points": 15,
    "lost_fraction": 0.55,       # hold times chosen so that about this fraction is lost
    "max_hold_s": 8.0,
    "atoms_rel_err": 0.04,
    "atoms_abs_err": 500.0,
    "temperature_rel_err": 0.03,
    "positive_a_range_a0": (400.0, 3000.0),
    "trap_depth_over_t": 10.0,
    "dimer_a_range_a0": (550.0, 3000.0),
    "dimer_n0": 2.0e4,
    "dimer_partner_atoms": 4.0e4,
    "dimer_gamma": 0.5,
    "dimer_lost_fraction": 0.6,
    "dimer_max_hold_s": 0.5,
}


#: The scenario of ``lossfit demo --from-curves``: :data:`INVENTED_CAMPAIGN` at 150 and
#: 400 nK with holds up to 30 s, so that the gas stays far from degeneracy (peak phase-space
#: density <= 0.08 at t = 0; 0.53 at 80 nK) while 42-65 % of the atoms are lost.
DEMO_CAMPAIGN = dict(INVENTED_CAMPAIGN, temperatures_nK=(150.0, 400.0), max_hold_s=30.0,
                     description=INVENTED_CAMPAIGN["description"] + "; 150 and 400 nK, holds up to 30 s")


def invented_campaign(seed, *, n_fields=20, scenario=None, model=None, truth=None, dimer_fields=0,
                      positive_fields=0):
    """Synthetic decay curves of :data:`INVENTED_CAMPAIGN` (an invented scenario).

    Each field gets one curve per temperature; initial numbers and temperatures vary
    by 10 % and 5 % from curve to curve, as they would in a laboratory. Hold times are
    spaced evenly up to the time at which about ``lost_fraction`` of the atoms are gone
    (estimated from the initial loss rate).

    Parameters
    ----------
    seed : int
    n_fields : int
        Number of fields (curves = n_fields x number of temperatures).
    scenario : dict, optional
        Overrides of :data:`INVENTED_CAMPAIGN` entries.
    model : str, optional
        Theory model of the simulation.
    truth : dict, optional
        Overrides of the scenario's truth.
    dimer_fields : int
        Number of fields on the a > 0 side with an atom-dimer mixture curve per
        temperature (default none).
    positive_fields : int
        Number of fields on the a > 0 side with an atom-loss curve per temperature
        (explicit trapped-dimer kinetics with the zero-range model; default none).

    Returns
    -------
    curves : list of DecayCurve
    resonance : FeshbachResonance
    truth : dict
    """
    sc = dict(INVENTED_CAMPAIGN, **(scenario or {}))
    tr = dict(sc["truth"], **(truth or {}))
    rng = np.random.default_rng(seed)
    sp = species(sc["species"])
    res = FeshbachResonance(**sc["resonance"])
    ef = Efimov(**{k: v for k, v in tr.items() if k in ("a_minus", "eta_minus", "a_star", "eta_star",
                                                       "a_plus", "eta_plus")})
    if (dimer_fields or positive_fields) and ef.a_star is None:
        # the a > 0 side of the invented truth: the universal tie to a_- and eta_-
        uni = Efimov.universal(ef.a_minus, ef.eta_minus)
        for name in ("a_star", "eta_star", "a_plus", "eta_plus"):
            tr.setdefault(name, getattr(uni, name))
        ef = ef.replace(**{n: tr[n] for n in ("a_star", "eta_star", "a_plus", "eta_plus")})
    lo, hi = sc["a_range_a0"]
    sides = [-np.geomspace(abs(hi), abs(lo), n_fields)]
    if positive_fields:
        sides.append(np.geomspace(*sc["positive_a_range_a0"], int(positive_fields)))
    trap = as_trap(sc["trap_hz"])
    c3 = trap.n2_coefficient(sp)
    channels = get_model(DEFAULT_MODEL if model is None else model).resolves_channels
    curves = []
    for a_values in sides:
        for temp in sc["temperatures_nK"]:
            # a trap of fixed depth per temperature, recorded in the a > 0 curves (whose
            # trapped dimers depend on it)
            depth = sc["trap_depth_over_t"] * temp if a_values[0] > 0 and channels else None
            for b, a in zip(res.field(a_values), a_values):
                n0 = sc["n0"] * (1.0 + 0.1 * rng.standard_normal())
                t0 = temp * (1.0 + 0.05 * rng.standard_normal())
                rate = float(l3(a, t0, species=sp, efimov=ef, model=model,
                                **({} if depth is None else {"trap_depth": depth}))) * c3 * n0 ** 2 / t0 ** 3
                # N = N0 / sqrt(1 + 2 K N0^2 t): lost fraction f at t = (1/(1-f)^2 - 1) / (2 rate)
                f = sc["lost_fraction"]
                t_end = min(sc["max_hold_s"], (1.0 / (1.0 - f) ** 2 - 1.0) / (2.0 * rate))
                t = np.linspace(0.0, t_end, sc["points"])
                curves.append(simulate_curve(
                    t, species=sp, trap_hz=trap, efimov=ef, n0=n0, t0_nK=t0, field=float(b), resonance=res,
                    model=model, gamma=sc["gamma"], density_scale=tr.get("density_scale", 1.0),
                    temperature_scale=tr.get("temperature_scale", 1.0), atoms_rel_err=sc["atoms_rel_err"],
                    atoms_abs_err=sc["atoms_abs_err"], temperature_rel_err=sc["temperature_rel_err"], rng=rng,
                    label=f"{b:.3f} G, {temp:g} nK", trap_depth=depth))
    if dimer_fields:
        lo, hi = sc["dimer_a_range_a0"]
        a_values = np.geomspace(lo, hi, int(dimer_fields))
        cad = trap.overlap_coefficient(sp)
        for temp in sc["temperatures_nK"]:
            for b, a in zip(res.field(a_values), a_values):
                nd0 = sc["dimer_n0"] * (1.0 + 0.1 * rng.standard_normal())
                na0 = sc["dimer_partner_atoms"] * (1.0 + 0.1 * rng.standard_normal())
                t0 = temp * (1.0 + 0.05 * rng.standard_normal())
                # dN_D/dt = -(beta c_AD N_A / T^1.5 + Gamma_D) N_D at first: hold until the
                # requested fraction of dimers is gone
                rate = float(beta(a, t0, species=sp, efimov=ef, model=model)) * cad * na0 / t0 ** 1.5
                rate += sc["dimer_gamma"]
                t_end = min(sc["dimer_max_hold_s"], -math.log(1.0 - sc["dimer_lost_fraction"]) / rate)
                t = np.linspace(0.0, t_end, sc["points"])
                curves.append(simulate_curve(
                    t, species=sp, trap_hz=trap, efimov=ef, n0=na0, t0_nK=t0, field=float(b), resonance=res,
                    model=model, gamma=0.0, density_scale=tr.get("density_scale", 1.0),
                    temperature_scale=tr.get("temperature_scale", 1.0), atoms_rel_err=sc["atoms_rel_err"],
                    atoms_abs_err=sc["atoms_abs_err"], temperature_rel_err=sc["temperature_rel_err"], rng=rng,
                    label=f"dimers {b:.3f} G, {temp:g} nK", kind="dimers", n_dimers0=nd0,
                    gamma_dimer=sc["dimer_gamma"]))
    return curves, res, tr
