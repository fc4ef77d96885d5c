"""The global fit's forward model with explicit trapped dimers (atom curves at a > 0).

References outside the project:
* scipy.integrate.quad of the energy-resolved K3 (deep and shallow channels, the latter
  cut where the products leave a trap of depth U: atom for (2/3)(E_b + E) > U, dimer for
  (1/3)(E_b + E) > 2U, docs/conventions.md) over P3(E) = E^2 e^{-E/T}/(2 T^3), and of the
  atom-dimer relaxation over P2(E) = (2/sqrt pi) E^{1/2} T^{-3/2} e^{-E/T};
* breakup from detailed balance with the law of mass action (n_D/n^2 = 2^{3/2} lambda^3
  e^{E_b/k_B T}, Landau & Lifshitz, Statistical Physics, sec. 101, quoted from memory),
  E_b = hbar^2/(m a^2) with CODATA constants from scipy;
* scipy.optimize.least_squares over every curve's nuisances (the profile the chord step
  approximates);
* Monte Carlo truth of invented campaigns (lossfit.simulate, not measured data) with
  Wilks' theorem (the profile chi2 of the truth above the best fit is chi2-distributed
  with as many degrees of freedom as fitted parameters; quoted from memory).
"""

import math
import warnings

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import quad
from scipy.optimize import least_squares, minimize
from scipy.stats import chi2

import lossfit as lf
from lossfit.errors import ConvergenceWarning, ValidityWarning
from lossfit.experiment.decay import TabulatedKinetics, simulate_decay
from lossfit.inference.curve_fits import fit_curve, spectrum_from_curves
from lossfit.inference.global_fit import CurvesLikelihood, fit_curves, prepare_curves
from lossfit.simulate import invented_campaign

SP = lf.species("133Cs")
A0 = sc.physical_constants["Bohr radius"][0]


@pytest.fixture(scope="module")
def campaign():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        curves, res, truth = invented_campaign(11, n_fields=2, positive_fields=4)
        fits = [fit_curve(c, species=SP, resonance=res) for c in curves]
    ef = lf.Efimov(**{k: truth[k] for k in ("a_minus", "eta_minus", "a_star", "eta_star", "a_plus", "eta_plus")})
    return curves, res, truth, fits, ef


def _likelihood(campaign, model="zero-range", curves=None):
    all_curves, res, truth, fits, ef = campaign
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        return CurvesLikelihood(all_curves if curves is None else curves, SP, model, resonance=res,
                                reference_fits=fits, temperature_scale_range=(0.9, 1.1))


def _binding_nk(a):
    return sc.hbar ** 2 / (SP.mass * (a * A0) ** 2) / sc.k * 1e9


def _quad_coefficients(a, temp, depth, ef):
    """The six coefficients at (a, T, U) by quadrature of the energy-resolved rates."""
    def p3(e):
        return e * e * math.exp(-e / temp) / (2 * temp ** 3)

    def k3(channel, lo):
        def f(e):
            return lf.k3(a, e, species=SP, efimov=ef, channel=channel) * p3(e)
        edges = [x for x in (lo, temp, 5 * temp, 20 * temp, 60 * temp) if x >= lo]
        return sum(quad(f, x0, x1, epsabs=0, epsrel=1e-10, limit=200)[0] for x0, x1 in zip(edges, edges[1:]))

    e_b = _binding_nk(a)
    shallow = k3("shallow", 0.0)

    def relax(e):
        return (lf.beta_energy(a, e, species=SP, efimov=ef, channel="relaxation")
                * 2 / math.sqrt(math.pi) * math.sqrt(e) * temp ** -1.5 * math.exp(-e / temp))
    relaxation = sum(quad(relax, x0, x1, epsabs=0, epsrel=1e-10, limit=200)[0]
                     for x0, x1 in ((0.0, temp), (temp, 5 * temp), (5 * temp, 60 * temp)))
    lam = sc.h / math.sqrt(2 * math.pi * SP.mass * sc.k * temp * 1e-9)
    saha = 2 ** 1.5 * lam ** 3 * math.exp(e_b / temp) * 1e6                    # cm^3
    return {"deep": k3("deep", 0.0), "shallow": shallow,
            "shallow_atom_escapes": k3("shallow", max(1.5 * depth - e_b, 0.0)),
            "shallow_dimer_escapes": k3("shallow", max(6.0 * depth - e_b, 0.0)),
            "relaxation": relaxation, "breakup": shallow / 3 / saha}


def test_explicit_curves_are_the_atom_curves_at_positive_a(campaign):
    curves, res, truth, fits, ef = campaign
    lik = _likelihood(campaign)
    a = np.array([c.scattering_length(res) for c in curves])
    assert lik.explicit.tolist() == (a > 0).tolist() and lik.explicit.sum() == 8
    assert lik.trap_depths[-1] == f"{curves[-1].trap_depth:.4g} nK"
    assert lik.trap_depths[0] == "not used"
    tables = lik.tables(ef, {})
    assert all(isinstance(tables[j], TabulatedKinetics) == lik.explicit[j] for j in range(len(curves)))
    # without a trap depth the fit assumes 10 k_B T0 of the curve and says so
    bare = [lf.DecayCurve(t=c.t, atoms=c.atoms, atoms_err=c.atoms_err, temperature=c.temperature,
                          temperature_err=c.temperature_err, field=c.field, trap_hz=c.trap_hz) for c in curves]
    lik_bare = _likelihood(campaign, curves=bare)
    j = int(np.flatnonzero(lik_bare.explicit)[0])
    assert lik_bare.depth[j] == pytest.approx(10 * curves[j].initial_temperature, rel=1e-12)
    assert lik_bare.trap_depths[j].startswith("assumed 10 k_B T0")
    # a model without channels keeps the effective L3 everywhere
    assert not _likelihood(campaign, model="capped").explicit.any()


def test_kinetics_tables_match_quadrature(campaign):
    curves, res, truth, fits, ef = campaign
    lik = _likelihood(campaign)
    s = 1.25
    tables = lik.tables(ef, {"density_scale": s})
    for j in (5, 7):                        # 780 a0 (the atom leaves, the dimer stays) and 3000 a0
        g = lik.grid[j]
        temp = math.sqrt(g[2] * g[3])       # between knots
        ref = _quad_coefficients(lik.a_nominal[j], temp, curves[j].trap_depth, ef)
        got = tables[j](temp)
        for name in ("deep", "shallow", "relaxation"):
            assert got[name] == pytest.approx(ref[name] / s ** (1 if name == "relaxation" else 2), rel=1e-4)
        for name in ("shallow_atom_escapes", "shallow_dimer_escapes"):
            assert got[name] / got["shallow"] == pytest.approx(ref[name] / ref["shallow"], abs=1e-4)
        # breakup matters against relaxation: the dimers' fate
        assert got["breakup"] == pytest.approx(ref["breakup"] / s, rel=1e-4,
                                               abs=1e-5 * ref["relaxation"] / s)
    assert tables[5](lik.grid[5][2])["shallow_atom_escapes"] > 0.5 * tables[5](lik.grid[5][2])["shallow"]


def test_forward_model_is_the_explicit_simulation(campaign):
    # the likelihood's prediction of an a > 0 curve against simulate_decay(dimers="explicit")
    # with the same nuisances (its own finer table, lossfit.rates at every knot)
    curves, res, truth, fits, ef = campaign
    lik = _likelihood(campaign)
    values = {"density_scale": 1.0, "temperature_scale": 1.0}
    lik.refresh(ef, values)
    nuis = lik.nuisances(ef, values)
    x = lik.x_ref
    for _ in range(lik.inner_steps):
        r, _ = lik.residuals(x, lik.tables(ef, values), 1.0)
        x = lik._chord_step(x, r)
    res_all = lik._solve(x, lik.tables(ef, values), 1.0)
    for j in (5, 7, 11):
        c, p = curves[j], nuis[j]
        sl = slice(lik.offsets[j], lik.offsets[j + 1])
        sim = simulate_decay(c.t, species=SP, trap_hz=c.trap_hz, n0=p["n0"], t0_nK=p["t0_nK"], efimov=ef,
                             a=lik.a_nominal[j], dimers="explicit", trap_depth=c.trap_depth, gamma=p["gamma"],
                             rtol=1e-9)
        assert res_all.counted[sl] == pytest.approx(sim.counted, rel=2e-5)
        assert res_all.temperature[sl] == pytest.approx(sim.temperature, rel=2e-5)
        # the plotting route: the nuisance table drives simulate_decay as the explicit kinetics
        again = simulate_decay(c.t, species=SP, trap_hz=c.trap_hz, n0=p["n0"], t0_nK=p["t0_nK"], l3=p["table"],
                               gamma=p["gamma"])
        assert again.counted == pytest.approx(res_all.counted[sl], rel=1e-5)


def test_chord_profile_matches_least_squares_with_explicit_curves(campaign):
    curves, res, truth, fits, ef = campaign
    lik = _likelihood(campaign)
    values = {"density_scale": 1.1}
    lik.refresh(ef, values)
    tables = lik.tables(ef, values)
    act = lik.active
    base = lik.x_ref.copy()

    def fun(z):
        x = base.copy()
        x[act] = z
        return lik.residuals(x, tables, 1.0)[0]
    lower = np.where(np.nonzero(act)[1] == 3, 0.0, -np.inf)
    sol = least_squares(fun, base[act], bounds=(lower, np.inf), xtol=1e-12, ftol=1e-12, gtol=1e-12)
    assert -2 * lik(ef, values) == pytest.approx(2 * sol.cost, abs=1e-3)
    # the a > 0 curves are fitted to within their noise by the model that simulated them
    assert 2 * sol.cost < lik.n_res + 4 * math.sqrt(2 * lik.n_res)


def test_counting_the_dimers_changes_the_prediction(campaign):
    curves, res, truth, fits, ef = campaign
    lik = _likelihood(campaign)
    j = 7
    free_only = [c if i != j else lf.DecayCurve(t=c.t, atoms=c.atoms, atoms_err=c.atoms_err, temperature=c.temperature,
                                                temperature_err=c.temperature_err, field=c.field, trap_hz=c.trap_hz,
                                                trap_depth=c.trap_depth, counts_dimers=False)
                 for i, c in enumerate(curves)]
    other = _likelihood(campaign, curves=free_only)
    tables = lik.tables(ef, {})
    counted = lik._solve(lik.x_ref, tables, 1.0)
    free = other._solve(lik.x_ref, tables, 1.0)
    sl = slice(lik.offsets[j], lik.offsets[j + 1])
    assert free.counted[sl] == pytest.approx(counted.atoms[sl], rel=1e-12)
    assert counted.counted[sl] == pytest.approx(counted.atoms[sl] + 2 * counted.dimers[sl], rel=1e-12)
    assert np.all(counted.dimers[sl][1:] > 0)


def test_two_stage_spectra_carry_the_trap_depths(campaign):
    # the per-curve L3 at a > 0 is the observed L3 at the curve's trap depth; curves
    # without one get the 10 k_B T0 the global fit assumes
    curves, res, truth, fits, ef = campaign
    lik = _likelihood(campaign)
    (l3,) = lik.two_stage_spectra
    expected = [c.trap_depth if c.trap_depth is not None else 10.0 * c.initial_temperature for c in curves]
    assert l3.trap_depth.tolist() == pytest.approx(expected, rel=1e-12)
    shown = np.concatenate([s.trap_depth for s in lik.spectra])
    assert sorted(shown.tolist()) == pytest.approx(sorted(expected), rel=1e-12)
    bare = [lf.DecayCurve(t=c.t, atoms=c.atoms, atoms_err=c.atoms_err, temperature=c.temperature,
                          temperature_err=c.temperature_err, field=c.field, trap_hz=c.trap_hz) for c in curves]
    assert spectrum_from_curves(bare, species=SP, resonance=res, fits=fits)[0].trap_depth is None


@pytest.mark.slow
def test_global_fit_with_atom_curves_on_both_sides_recovers_the_truth():
    # Monte Carlo truth: the profile chi2 of the truth exceeds the best fit's by a chi2 with
    # as many degrees of freedom as sampled parameters (Wilks' theorem); 99.9 % bound
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        curves, res, truth = invented_campaign(23, n_fields=4, positive_fields=4,
                                               scenario={"temperatures_nK": (150.0,)})
        space, lik, posterior = prepare_curves(curves, species=SP, free=["a_minus", "eta"], tie="universal",
                                               resonance=res, systematics={"density_scale": 0.2})
        true_values = {"a_minus": truth["a_minus"], "eta": truth["eta_minus"],
                       "density_scale": truth["density_scale"]}
        lik.refresh(space.efimov(true_values), true_values)
        best = minimize(lambda th: -posterior(th), space.theta([true_values[n] for n in space.names]),
                        method="Nelder-Mead", options={"xatol": 1e-6, "fatol": 1e-4, "maxiter": 600})
        best_values = space.values(best.x)
        chi2_best = lik.profile_chi2(space.efimov(best_values), best_values)
        chi2_true = lik.profile_chi2(space.efimov(true_values), true_values)
    assert lik.explicit.sum() == 4
    assert -1e-3 < chi2_true - chi2_best < chi2.ppf(0.999, len(space.names))
    dof = lik.n_res - int(lik.active.sum()) - len(space.names)
    assert chi2_best < dof + 4 * math.sqrt(2 * dof)
    # the sampler runs on it and the result says how the dimers were treated
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = fit_curves(curves, species=SP, free=["a_minus", "eta"], tie="universal", resonance=res,
                            systematics={"density_scale": 0.2}, walkers=12, steps=40, seed=3, progress=False,
                            initial=best_values)
    assert result.settings["dimers"] == ("explicit trapped-dimer kinetics for 4 atom curve(s) at a > 0; trap "
                                         "depth given for 4, assumed 10 k_B T0 for 0 (CurvesLikelihood.trap_depths)")
