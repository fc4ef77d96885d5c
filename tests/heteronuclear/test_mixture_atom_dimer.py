"""Atom-dimer relaxation B + (BX) -> deep dimers of two identical bosons and a third atom at
a > 0, thermally averaged (lossfit.universal.solver.mixture_atom_dimer, the tables
s_ad_mixture_<B>_<X>.npz, lossfit.universal.mixture_model; docs/heteronuclear-rates.md,
"Atom-dimer relaxation at a > 0")."""

import math
import warnings

import numpy as np
import pytest
from scipy.integrate import quad

import lossfit as lf
from lossfit.cli import main
from lossfit.errors import LossfitValueError
from lossfit.inference.parameters import default_priors
from lossfit.mixture import heteronuclear
from lossfit.rates import beta_energy, natural_unit
from lossfit.thermal import ATOM_DIMER
from lossfit.units import A0, NK
from lossfit.universal.mixture_model import (
    WEIGHT_BEYOND_TABLE_MAX,
    atom_dimer_table_name,
    beta_unitarity_prefactor,
    mixture_atom_dimer_table,
    resolve_model,
    weight_above,
)
from lossfit.universal.models import UNITARITY_ATOM_DIMER, scale_wavenumber_a0
from lossfit.universal.solver.mixture_atom_dimer import breakup_wavenumber, build_table, solver_for

# CODATA 2018, independent of lossfit's constants module
HBAR = 1.054571817e-34        # J s
K_B = 1.380649e-23            # J/K
SYSTEMS = [("133Cs", "6Li"), ("87Rb", "41K")]


@pytest.fixture(scope="module")
def cs_li():
    return heteronuclear("133Cs", "6Li")


def _mu_ad(system):
    """B against the B-X dimer: m_B (m_B + m_X)/(2 m_B + m_X), kg."""
    m_b, m_x = system.mass_boson, system.mass_other
    return m_b * (m_b + m_x) / (2.0 * m_b + m_x)


def _p_form(t, s, two_theta, eta):
    """T (1 - e^{-4 eta})/|1 + s e^{2 i theta - 2 eta}|^2 (docs/heteronuclear-rates.md)."""
    return t * -math.expm1(-4.0 * eta) / abs(1.0 + s * complex(math.cos(two_theta), math.sin(two_theta))
                                              * math.exp(-2.0 * eta)) ** 2


@pytest.mark.slow
@pytest.mark.parametrize("boson, other", SYSTEMS)
def test_zero_temperature_limit_is_the_solvers_threshold_relaxation(boson, other):
    # the T -> 0 limit of the thermal beta against the independent zero-energy solve
    # (MixtureSTM.relaxation_beta, beta = -4 pi (1 + gamma) Im(a_AD/a) hbar a/m_B,
    # docs/stm-mixture.md section 3) at a kappa* a and eta that are not the table's fit nodes;
    # the rate's corrections are linear in k a (measured slope ~4 per unit k a), so
    # T = 1e-9 nK (k_T a ~ 1e-5) leaves ~4e-5 of them
    system = heteronuclear(boson, other)
    model = resolve_model(None, system)
    a, a_star, eta = 3000.0, 1300.0, 0.23
    kappa_a = model.atom_dimer_table.kappa_star_a_star * a / a_star
    beta = solver_for(system.mass_ratio).relaxation_beta(kappa_a, eta)
    beta_si = beta * HBAR * a * A0 / system.mass_boson * 1e6                   # cm^3/s
    value = lf.beta(a, 1e-9, species=system, efimov=lf.Efimov(a_star=a_star, eta_star=eta))
    assert value == pytest.approx(beta_si, rel=1e-4)


@pytest.mark.slow
@pytest.mark.parametrize("boson, other", SYSTEMS)
def test_table_against_direct_solves_at_another_eta_and_kappa(boson, other):
    # the form fitted at eta = 0.1 over six kappa* a of one period, against direct solves
    # (same cutoff and grid; MixtureSTM.atom_dimer_amplitude below breakup, the contour
    # MixtureSTM.atom_dimer_contour above) at eta = 0.02 and 0.4 (alternately) and kappa*
    # between the fit's nodes, at grid midpoints (spline) and a node on each side of breakup;
    # within twice the table's stated error (fit residual and spline error of T and s_AD,
    # carried into P)
    system = heteronuclear(boson, other)
    table = resolve_model(None, system).atom_dimer_table
    meta = table.metadata
    d_t = meta["spline_midpoint_error"]["t_rel_max"] + meta["channel_fit_residual_max"]
    d_s = meta["spline_midpoint_error"]["s_abs_max"] + meta["channel_fit_residual_max"]
    solver = solver_for(system.mass_ratio)
    x_b = table.breakup_x
    j = meta["x_grid"]["junction_index"]
    kappa_a = table.kappa_star_a_star * math.exp(0.37 * math.pi / table.s0)      # theta 0.37 pi past a*
    nodes = np.array([10, 40, j - 2, j, j + 6, table.x.size - 2])
    xs = np.append(np.sqrt(table.x[nodes] * table.x[nodes + 1]), table.x[[25, j + 10]])   # midpoints, nodes
    for i, x in enumerate(xs):
        eta = (0.02, 0.4)[i % 2]
        solve = solver.atom_dimer_contour if x > x_b else solver.atom_dimer_amplitude
        direct = solve(x, kappa_a, eta)["p_deep"]
        t, s = table.evaluate(np.array([x]))
        two_theta = 2.0 * table.s0 * math.log(kappa_a)
        p = _p_form(t[0], s[0], two_theta, eta)
        den = abs(1.0 + s[0] * complex(math.cos(two_theta), math.sin(two_theta)) * math.exp(-2.0 * eta))
        stated = d_t + 2.0 * d_s * math.exp(-2.0 * eta) / den
        assert p == pytest.approx(direct, rel=2.0 * stated + 1e-10)


@pytest.mark.slow
def test_contour_solver_against_the_real_axis_and_detailed_balance():
    # MixtureSTM.atom_dimer_contour (the table above breakup) against two independent routes:
    # below breakup the real-axis solve (they differ by the finite cutoff, measured 1.7e-6 at
    # Lambda a = 1e6 and 1.7e-7 at 1e7); just above breakup, at eta = 0, time reversal ties the
    # breakup probability to threshold recombination into the shallow dimer,
    # K3_shallow(E -> 0) = bound(E) P_breakup(E) with the J = 0 bound of
    # MixtureSTM.unitarity_bound (docs/stm-mixture.md section 8) -- measured -4.2e-3 at
    # eps = 1e-2 (kappa* a = 1, Rb-Rb-41K), where K3_shallow still moves with E
    system = heteronuclear("87Rb", "41K")
    solver = solver_for(system.mass_ratio)
    x_b = breakup_wavenumber(system.mass_ratio)
    for x in (0.3 * x_b, 0.99 * x_b):
        contour = solver.atom_dimer_contour(x, 0.05, 0.2)["p_deep"]
        assert contour == pytest.approx(solver.atom_dimer_amplitude(x, 0.05, 0.2)["p_deep"], rel=5e-6)
    eps = 1e-2
    above = solver.atom_dimer_contour(x_b * math.sqrt(1.0 + eps), 1.0, 0.0)
    assert above["p_deep"] == 0.0 and above["p_breakup"] > 0.0
    k3 = solver.recombination(1.0, 0.0)["shallow_bx"]
    assert solver.unitarity_bound(eps) * above["p_breakup"] == pytest.approx(k3, rel=1e-2)


@pytest.mark.parametrize("boson, other", SYSTEMS)
def test_beta_reaches_the_s_wave_bound_and_no_more_at_every_tabulated_energy(boson, other):
    # beta(E) <= pi hbar/(mu_AD k) (s-wave, atom and dimer distinguishable); in the form the
    # largest P over theta and eta is T_AD/(1 - |s_AD|^2), reached where arg s_AD + 2 theta = pi
    # and e^{-2 eta} = |s_AD|: 1 below breakup, less above (flux also leaves as three atoms).
    # At every tabulated k a it must not exceed 1, and at every fourth node below breakup (and
    # at breakup) the fixed-energy rate at the a* and eta that reach it must equal the bound
    # built here from the masses and CODATA hbar: a check of the prefactor, the units and
    # T = 1 - |s_AD|^2 together
    system = heteronuclear(boson, other)
    table = resolve_model(None, system).atom_dimer_table
    j = table.metadata["x_grid"]["junction_index"]
    t, s = table.evaluate(table.x)
    ceiling = t / (1.0 - np.abs(s) ** 2)
    assert np.all(ceiling <= 1.0 + 1e-9) and np.all(np.abs(s) < 1.0)
    assert np.all(ceiling[j + 1:] < 1.0 - 1e-6)
    mu = _mu_ad(system)
    a = 1500.0
    every = np.r_[np.arange(0, j, 4), j]
    for x, s_x in zip(table.x[every], s[every]):
        k = x / (a * A0)                                                  # 1/m
        energy_nk = (HBAR * k) ** 2 / (2.0 * mu) / K_B * 1e9
        bound = math.pi * HBAR / (mu * k) * 1e6                            # cm^3/s
        theta = 0.5 * (math.pi - np.angle(s_x))
        a_star = table.kappa_star_a_star * a / math.exp(theta / table.s0)
        eta = -0.5 * math.log(abs(s_x))
        value = beta_energy(a, energy_nk, species=system, efimov=lf.Efimov(a_star=a_star, eta_star=eta))
        assert value == pytest.approx(bound, rel=1e-8)
        off = beta_energy(a, energy_nk, species=system, efimov=lf.Efimov(a_star=1.3 * a_star, eta_star=0.05))
        assert off < bound


@pytest.mark.parametrize("boson, other", SYSTEMS)
def test_thermal_beta_below_the_averaged_s_wave_bound(boson, other):
    # <pi hbar/(mu_AD k)> over (2/sqrt pi) E^{1/2} (k_BT)^{-3/2} e^{-E/k_BT} is
    # 2 sqrt(pi) hbar^2/(mu_AD sqrt(2 mu_AD k_BT)); the thermal beta stays below it, on and off
    # the resonance, and comes within a factor 2 of it on the resonance at the eta that
    # saturates the bound at k = k_T
    system = heteronuclear(boson, other)
    mu = _mu_ad(system)
    a = np.array([400.0, 900.0, 2000.0])
    for temperature in (5.0, 20.0):
        k_bt = K_B * temperature * 1e-9
        bound = 2.0 * math.sqrt(math.pi) * HBAR ** 2 / (mu * math.sqrt(2.0 * mu * k_bt)) * 1e6
        assert lf.rates.unitarity_bound("beta", temperature, system) == pytest.approx(bound, rel=1e-9)
        for eta in (0.01, 0.1, 1.0):
            for a_star in (900.0, 1700.0):
                value = lf.beta(a, temperature, species=system, efimov=lf.Efimov(a_star=a_star, eta_star=eta))
                assert np.all(value < bound)
    model = resolve_model(None, system)
    table = model.atom_dimer_table
    x_t = 900.0 * A0 * math.sqrt(2.0 * mu * K_B * 5e-9) / HBAR
    _, s = table.evaluate(np.array([x_t]))
    a_star = table.kappa_star_a_star * 900.0 / math.exp(0.5 * (math.pi - np.angle(s[0])) / table.s0)
    peak = lf.beta(900.0, 5.0, species=system, efimov=lf.Efimov(a_star=a_star, eta_star=-0.5 * math.log(abs(s[0]))))
    k_bt = K_B * 5e-9
    assert 0.5 < peak / (2.0 * math.sqrt(math.pi) * HBAR ** 2 / (mu * math.sqrt(2.0 * mu * k_bt)) * 1e6) < 1.0


@pytest.mark.parametrize("eta", [0.005, 0.05, 0.5])
def test_fixed_rule_against_scipy_quad_of_the_kernel(cs_li, eta):
    # reference: scipy's adaptive quad of the energy-resolved beta against
    # (2/sqrt pi) E^{1/2} (k_BT)^{-3/2} e^{-E/k_BT}, with break points at the table's ends;
    # points below, on and above the resonance a* = 900 a0 and its next image
    model = resolve_model(None, cs_li)
    efimov = lf.Efimov(a_star=900.0, eta_star=eta)
    a = np.array([300.0, 850.0, 900.0, 950.0, 2500.0, 4390.0])
    for temperature in (3.0, 30.0):
        q = a * scale_wavenumber_a0(temperature * NK, cs_li.mass)
        unit = natural_unit(ATOM_DIMER, np.full(a.size, temperature), cs_li.mass)
        fast = model.atom_dimer_plan(a, q, unit, eta_min=0.005).evaluate(efimov) / unit
        rows = model.atom_dimer_rows(a, efimov, q)
        kernel = model.atom_dimer_kernel
        for value, row in zip(fast, rows):
            def integrand(t, row=row):
                u = math.exp(t)
                return 2.0 / math.sqrt(math.pi) * u ** 1.5 * math.exp(-u) * kernel(u, row)
            breaks = [2.0 * math.log(x / row[0]) for x in model.atom_dimer_table.kinks()]
            ref, _ = quad(integrand, math.log(1e-14), math.log(60.0), points=breaks, limit=4000, epsabs=0.0,
                          epsrel=1e-11)
            assert value == pytest.approx(ref, rel=1e-5)


def test_reference_path_agrees_with_the_fixed_rule(cs_li):
    # lf.beta(rtol=...) averages the same kernel adaptively (lossfit.thermal)
    a = np.geomspace(300.0, 4000.0, 7)
    efimov = lf.Efimov(a_star=900.0, eta_star=0.03)
    fast = lf.beta(a, 20.0, species=cs_li, efimov=efimov)
    reference = lf.beta(a, 20.0, species=cs_li, efimov=efimov, rtol=1e-10)
    np.testing.assert_allclose(fast, reference, rtol=1e-5)


def test_discrete_scaling_of_the_thermal_rate(cs_li):
    # a -> lambda a with k_T a fixed (T -> T/lambda^2): beta ~ hbar a/m_B times a function of
    # k_T a and theta, and theta moves by s0 ln lambda = pi, so beta -> lambda beta;
    # a* -> lambda a* at fixed a leaves beta unchanged
    lam = cs_li.scaling
    efimov = lf.Efimov(a_star=900.0, eta_star=0.1)
    a = np.geomspace(300.0, 3000.0, 9)
    base = lf.beta(a, 20.0, species=cs_li, efimov=efimov)
    scaled = lf.beta(lam * a, 20.0 / lam ** 2, species=cs_li, efimov=efimov)
    np.testing.assert_allclose(scaled, lam * base, rtol=1e-9)
    moved = lf.beta(a, 20.0, species=cs_li, efimov=efimov.replace(a_star=900.0 * lam))
    np.testing.assert_allclose(moved, base, rtol=1e-12)


def test_equal_mass_kinematics_are_the_identical_boson_ones():
    # at m_B = m_X the atom-dimer kinematics are those of three identical bosons: breakup at
    # k a = 2/sqrt 3 and the s-wave bound pi hbar/(mu_AD k) = (3 sqrt 3 pi/4)/sqrt(x) in
    # hbar/(m k_s) (lossfit.universal.models). The rates themselves are not comparable: the
    # identical-boson table has three resonant pairs (s0 = 1.00624), a mixture at equal
    # masses with a_bb = 0 two (s0 = 0.41370), a different Efimov channel
    assert breakup_wavenumber(1.0) == pytest.approx(2.0 / math.sqrt(3.0), rel=1e-15)
    assert beta_unitarity_prefactor(1.0) == pytest.approx(UNITARITY_ATOM_DIMER, rel=1e-15)


@pytest.mark.parametrize("boson, other, c_beta, kappa_a_star", [
    # docs/stm-mixture.md section 6: the cot fit of the threshold a_AD (eta = 0) at
    # Lambda a = 1e7, a different route from the table's fit of the relaxation rate
    ("133Cs", "6Li", 31.1623, 0.165221),
    ("87Rb", "41K", 21.8228, 0.00970253),
])
def test_threshold_coefficients_against_the_cot_fit(boson, other, c_beta, kappa_a_star):
    table = resolve_model(None, heteronuclear(boson, other)).atom_dimer_table
    assert table.c_beta == pytest.approx(c_beta, rel=2e-5)
    assert table.kappa_star_a_star == pytest.approx(kappa_a_star, rel=1e-5)
    # the eta -> 0 threshold peak implied by the fitted phase sits at the pole of a_AD
    assert table.metadata["kappa_star_a_star_from_threshold_phase"] == pytest.approx(table.kappa_star_a_star,
                                                                                      rel=1e-6)


def test_weight_beyond_the_table_and_refusals(cs_li):
    # the Boltzmann weight above an energy E_edge is Q(3/2, E_edge/k_BT); by quadrature here
    y = 7.5
    weight = quad(lambda e: 2.0 / math.sqrt(math.pi) * math.sqrt(e) * math.exp(-e), y, math.inf)[0]
    assert weight_above(np.array([1.0]), math.sqrt(y))[0] == pytest.approx(weight, rel=1e-12)
    efimov = lf.Efimov(a_star=900.0, eta_star=0.1)
    # E_D/k_B = hbar^2/(2 mu a^2 k_B) at a = 4000 a0 for Cs-Li: 941 nK; the table reaches
    # 16 E_D, and 4000 nK puts 6 % of the collisions beyond it; 200 nK (0.2 E_D) is accepted
    with pytest.raises(LossfitValueError, match="temperature:.*beyond 16 times it"):
        lf.beta(4000.0, 4000.0, species=cs_li, efimov=efimov)
    assert lf.beta(4000.0, 200.0, species=cs_li, efimov=efimov) > 0.0
    assert WEIGHT_BEYOND_TABLE_MAX == 1e-3
    with pytest.raises(LossfitValueError, match="channel:.*relaxation"):
        lf.beta(1000.0, 10.0, species=cs_li, efimov=efimov, channel="breakup")
    with pytest.raises(LossfitValueError, match="a:"):
        lf.beta(-1000.0, 10.0, species=cs_li, efimov=efimov)
    with pytest.raises(LossfitValueError, match="energy:.*tabulated up to 16"):
        beta_energy(4000.0, 20000.0, species=cs_li, efimov=efimov)
    with pytest.raises(LossfitValueError, match="eta_star|a_star"):
        lf.beta(1000.0, 10.0, species=cs_li, efimov=lf.Efimov(a_minus=-300.0, eta_minus=0.1))
    with pytest.raises(LossfitValueError, match="model:"):
        lf.beta(1000.0, 10.0, species=cs_li, efimov=efimov, model="threshold")
    with pytest.raises(LossfitValueError, match="species:.*no atom-dimer table.*lossfit tables 87Rb 7Li --atom-dimer"):
        mixture_atom_dimer_table(heteronuclear("87Rb", "7Li", c6_bx=2500.0))


def _invented_spectra(system, truth, rng):
    spectra = []
    for temperature in (10.0, 40.0):
        a = np.geomspace(250.0, 3500.0, 18)
        beta = lf.beta(a, temperature, species=system, efimov=truth)
        spectra.append(lf.LossSpectrum(a=a, temperature=np.full(a.size, temperature),
                                       value=beta * np.exp(rng.normal(0.0, 0.15, a.size)), error=0.15 * beta,
                                       kind="beta"))
    return spectra


def test_default_prior_of_a_star_is_one_period_around_the_first_beta_resonance(cs_li):
    truth = lf.Efimov(a_star=900.0, eta_star=0.08)
    spectra = _invented_spectra(cs_li, truth, np.random.default_rng(1))
    prior = default_priors(["a_star"], spectra, period=cs_li.scaling)["a_star"]
    assert prior.lo < 900.0 < prior.hi
    assert prior.hi / prior.lo == pytest.approx(cs_li.scaling, rel=1e-12)
    assert prior.hi < 900.0 * cs_li.scaling and prior.lo > 900.0 / cs_li.scaling


def test_fit_of_an_invented_beta_spectrum_recovers_a_star(cs_li):
    # invented scenario (not measured data): beta of Cs-Cs-6Li through the resonance a* = 900 a0
    # and up to 3500 a0 at 10 and 40 nK, 15 % log-normal scatter; free a* and eta*
    truth = lf.Efimov(a_star=900.0, eta_star=0.08)
    spectra = _invented_spectra(cs_li, truth, np.random.default_rng(5))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")          # a short chain, on purpose
        result = lf.fit(spectra, species=cs_li, free=["a_star", "eta_star"], walkers=16, steps=400, seed=2,
                        progress=False)
    rows = {r["name"]: r for r in result.summary()}
    assert rows["a_star"]["lo95"] < 900.0 < rows["a_star"]["hi95"]
    assert rows["a_star"]["median"] == pytest.approx(900.0, rel=0.03)
    assert rows["eta_star"]["lo95"] < 0.08 < rows["eta_star"]["hi95"]
    assert rows["a_star(1)"]["median"] == pytest.approx(rows["a_star"]["median"] * cs_li.scaling, rel=1e-9)


def test_universal_tie_is_refused_for_a_mixture(cs_li):
    # tie="universal" fixes a* and a_+ by the identical-boson relations; for a mixture that
    # would put a* in the wrong place silently
    truth = lf.Efimov(a_star=900.0, eta_star=0.08)
    spectra = _invented_spectra(cs_li, truth, np.random.default_rng(1))
    with pytest.raises(LossfitValueError, match="tie:.*identical bosons"):
        lf.fit(spectra, species=cs_li, free=["a_minus", "eta"], tie="universal", walkers=8, steps=10,
               progress=False)


def test_a_fit_with_points_beyond_the_table_names_the_temperature(cs_li):
    # invented data at 2000 nK up to 4000 a0: at the last point 1.8e-3 of the collisions lie
    # beyond the table (16 E_D); the fit refuses with the plan's own message (not as a
    # missing parameter)
    a = np.geomspace(300.0, 4000.0, 10)
    value = lf.beta(a, 20.0, species=cs_li, efimov=lf.Efimov(a_star=900.0, eta_star=0.1))
    spectrum = lf.LossSpectrum(a=a, temperature=np.full(a.size, 2000.0), value=value, error=0.2 * value,
                               kind="beta")
    with pytest.raises(LossfitValueError, match=r"^temperature: 0.0018 of the atom-dimer collisions \(point 9"):
        lf.fit(spectrum, species=cs_li, free=["a_star", "eta_star"], walkers=8, steps=10, progress=False)


def test_the_tables_command_knows_the_shipped_atom_dimer_tables(capsys):
    assert main(["tables", "133Cs", "6Li", "--atom-dimer"]) == 0
    assert "a > 0 atom-dimer table of 133Cs-133Cs-6Li ships with lossfit" in capsys.readouterr().err


@pytest.mark.slow
def test_an_atom_dimer_table_built_on_demand_reaches_the_threshold_law(tmp_path, monkeypatch):
    # a coarse table (8 points per decade to 2 x_b, 3 kappa*, Lambda a = 1e4) of a pair that
    # does not ship, into the cache where lf.beta finds it: the T -> 0 limit of the thermal
    # beta equals the zero-energy solve at the same cutoff, whatever the grid (C6 invented for
    # the test). For this mass ratio (12.4) the trimer tracking loses the state next to the
    # atom-dimer threshold, so the builder takes the pole of a_AD in one period instead.
    monkeypatch.setenv("LOSSFIT_CACHE", str(tmp_path))
    system = heteronuclear("87Rb", "7Li", c6_bx=2500.0)
    path = str(tmp_path / atom_dimer_table_name(system))
    meta = build_table(system, path, x_min=0.05, above=2.0, per_decade=8, n_theta=3, cutoff=1e4,
                       grid_per_decade=24, check_every=100, progress=False)
    assert meta["kappa_star_a_star_found"].startswith("pole of a_AD")
    assert sorted(p.name for p in tmp_path.iterdir()) == [atom_dimer_table_name(system)]
    table = mixture_atom_dimer_table(system)
    a, a_star, eta = 2000.0, 700.0, 0.15
    kappa_a = table.kappa_star_a_star * a / a_star
    beta = solver_for(system.mass_ratio, cutoff=1e4, per_decade=24).relaxation_beta(kappa_a, eta)
    expected = beta * HBAR * a * A0 / system.mass_boson * 1e6
    model = resolve_model(None, system)
    q = np.array([a]) * scale_wavenumber_a0(1e-9 * NK, system.mass)
    unit = natural_unit(ATOM_DIMER, np.array([1e-9]), system.mass)
    # the a < 0 table of this pair is not built, so the atom-dimer plan is used directly
    value = model.atom_dimer_plan(np.array([a]), q, unit).evaluate(lf.Efimov(a_star=a_star, eta_star=eta))[0]
    assert value == pytest.approx(expected, rel=1e-4)
