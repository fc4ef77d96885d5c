"""Three-body recombination B + B + X at a > 0 into shallow and deep dimers (J = 0), thermally
averaged (lossfit.universal.solver.mixture_recombination, the tables
k3_positive_mixture_<B>_<X>.npz, lossfit.universal.mixture_model; docs/heteronuclear-rates.md,
"Three-body recombination at a > 0")."""

import math
import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.errors import LossfitValueError
from lossfit.mixture import heteronuclear
from lossfit.units import A0
from lossfit.universal.mixture_model import mixture_recombination_table
from lossfit.universal.solver.mixture_atom_dimer import solver_for

# CODATA 2018, independent of lossfit's constants module
HBAR = 1.054571817e-34        # J s
SYSTEMS = [("133Cs", "6Li"), ("87Rb", "41K")]
ALL_SHIPPED = [("133Cs", "6Li"), ("133Cs", "7Li"), ("87Rb", "40K"), ("87Rb", "41K")]


@pytest.fixture(scope="module")
def rb_k():
    return heteronuclear("87Rb", "41K")


def _k3_si(value, a, system):
    """K3 from units hbar a^4/m_B to cm^6/s (CODATA hbar, the system's boson mass)."""
    return value * HBAR * (a * A0) ** 4 / system.mass_boson * 1e12


@pytest.mark.slow
@pytest.mark.parametrize("boson, other", SYSTEMS)
def test_zero_temperature_limit_is_the_solvers_threshold_recombination(boson, other):
    # T -> 0 of lf.l3 at a > 0 against the independent zero-energy equation (three atoms at rest,
    # MixtureSTM.recombination: deep = Im h |Omega|^2/(2 pi^4), shallow = the outgoing atom-dimer
    # flux, docs/stm-mixture.md section 3), at kappa* a and eta off the table's fit nodes; the difference
    # grows like sqrt(T) (the linear-in-x join to the first node): 8.7e-5 at 1e-5 nK for Cs-Li
    system = heteronuclear(boson, other)
    table = mixture_recombination_table(system)
    a, a_plus, eta = 3000.0, 1700.0, 0.23
    solve = solver_for(system.mass_ratio).recombination(table.kappa_star_a_plus * a / a_plus, eta)
    efimov = lf.Efimov(a_plus=a_plus, eta_plus=eta)
    for channel, key in (("deep", "deep"), ("shallow", "shallow_bx")):
        value = lf.l3(a, 1e-7, species=system, efimov=efimov, channel=channel)
        assert value / _k3_si(solve[key], a, system) - 1.0 == pytest.approx(0.0, abs=1e-4)


@pytest.mark.parametrize("boson, other, kappa_a_plus, c_plus, c_deep",
                         [("133Cs", "6Li", 0.610896, None, 7601.25),
                          ("87Rb", "41K", 0.2141843, 721.687, 373.654)])
def test_threshold_model_has_the_published_forms_with_the_solvers_constants(boson, other, kappa_a_plus, c_plus,
                                                                            c_deep):
    # docs/stm-mixture.md section 6 (threshold solves at Lambda a = 1e6, another program path):
    # kappa* a_+, C_+ and C_deep = C_- in K3_shallow(eta -> 0) = C_+ sin^2 th/(sinh^2 pi s0 + cos^2 th),
    # K3_deep = C_deep sinh 2 eta/(sinh^2(pi s0 + eta) + cos^2 th), th = s0 ln(a/a_+), hbar a^4/m_B
    system = heteronuclear(boson, other)
    table = mixture_recombination_table(system)
    assert table.kappa_star_a_plus == pytest.approx(kappa_a_plus, rel=1e-5)
    # the eta -> 0 shallow rate has an exact zero: alpha + c = 2 |b| (its numerator's minimum)
    lim = table.limits
    assert lim["alpha"] + lim["c"] == pytest.approx(2.0 * abs(lim["b"]), rel=1e-5)
    s0, a_plus = table.s0, 2000.0
    for a in (900.0, 2600.0, 5100.0):
        th = s0 * math.log(a / a_plus)
        for eta in (0.05, 0.3):
            deep = lf.l3(a, 10.0, species=system, efimov=lf.Efimov(a_plus=a_plus, eta_plus=eta), model="threshold",
                         channel="deep")
            form = c_deep * math.sinh(2 * eta) / (math.sinh(math.pi * s0 + eta) ** 2 + math.cos(th) ** 2)
            assert deep == pytest.approx(_k3_si(form, a, system), rel=2e-5)
        if c_plus is not None:
            shallow = lf.l3(a, 10.0, species=system, efimov=lf.Efimov(a_plus=a_plus, eta_plus=1e-9),
                            model="threshold", channel="shallow")
            form = c_plus * math.sin(th) ** 2 / (math.sinh(math.pi * s0) ** 2 + math.cos(th) ** 2)
            assert shallow == pytest.approx(_k3_si(form, a, system), rel=2e-5)
    # the zero at a_+ itself (eta -> 0): below 1e-8 of the shallow maximum C_+/sinh^2(pi s0)
    at_zero = lf.l3(a_plus, 10.0, species=system, efimov=lf.Efimov(a_plus=a_plus, eta_plus=1e-9),
                    model="threshold", channel="shallow")
    top = lf.l3(a_plus * math.exp(math.pi / (2 * s0)), 10.0, species=system,
                efimov=lf.Efimov(a_plus=a_plus, eta_plus=1e-9), model="threshold", channel="shallow")
    assert at_zero / top * math.exp(2 * math.pi / s0) < 1e-8


@pytest.mark.parametrize("boson, other", ALL_SHIPPED)
def test_breakup_coefficients_and_the_j0_bound_at_every_tabulated_energy(boson, other):
    # unitarity of the long-distance S matrix: A = sum |b_n|^2 >= 0, C >= 0, |B|^2 <= A C
    # (Cauchy-Schwarz over the three-atom channels), and the J = 0 bound: the shallow plus deep
    # probability <= 1 for every theta and eta (docs/heteronuclear-rates.md)
    table = mixture_recombination_table(heteronuclear(boson, other))
    x = np.r_[0.0 + 1e-6, table.x]
    t_b, re, im, a, b_re, b_im, c = table.columns(x)
    assert (a > 0).all() and (c > 0).all() and (t_b > 0).all()
    # the contour's breakup probability has an absolute accuracy of about 2e-10 (1 - |S|^2 at
    # |S| ~ 1, docs/heteronuclear-rates.md): relative 2 x 2e-10/(A x^4) where A x^4 is small
    # (measured 3.3e-3 at Cs-Li's first node, where A x^4 = 3.5e-8)
    tol = 1e-6 + 4e-10 / (a * x ** 4)
    assert ((b_re ** 2 + b_im ** 2) <= a * c * (1 + tol)).all()
    s = re + 1j * im
    theta = np.linspace(0.0, math.pi, 361)[:, None, None]
    for eta in (1e-6, 0.05, 0.3, 2.0):
        w = np.exp(2j * theta - 2.0 * eta)
        x4 = x ** 4
        p = x4 * (a + 2.0 * (b_re * w.real - b_im * w.imag) + c * abs(w) ** 2 + t_b * -math.expm1(-4 * eta))
        assert (p / abs(1.0 + s * w) ** 2 <= 1.0 + 1e-9).all()


def test_fixed_rule_against_the_reference_path(rb_k):
    # the plan's Gauss-Legendre rule against adaptive quadrature of the kernel (rtol 1e-9),
    # on, below and above a_+, 2 and 40 nK
    a = np.array([400.0, 2000.0, 2600.0, 9000.0])
    efimov = lf.Efimov(a_plus=2000.0, eta_plus=0.02)
    for channel in ("deep", "shallow", "total"):
        for temperature in (2.0, 40.0):
            if temperature == 40.0:
                a_t = a[:3]
            else:
                a_t = a
            fast = lf.l3(a_t, temperature, species=rb_k, efimov=efimov, channel=channel)
            ref = lf.l3(a_t, temperature, species=rb_k, efimov=efimov, channel=channel, rtol=1e-9)
            assert np.max(np.abs(fast / ref - 1.0)) < 2e-5


def test_channels_default_and_the_a_star_tie(rb_k):
    a = np.array([800.0, 3000.0])
    efimov = lf.Efimov(a_plus=2000.0, eta_plus=0.1)
    deep = lf.l3(a, 20.0, species=rb_k, efimov=efimov, channel="deep")
    shallow = lf.l3(a, 20.0, species=rb_k, efimov=efimov, channel="shallow")
    # the default channel at a > 0 is 'total' (docs/heteronuclear-rates.md: every formed dimer lost)
    np.testing.assert_allclose(lf.l3(a, 20.0, species=rb_k, efimov=efimov), deep + shallow, rtol=1e-12)
    # a* and eta* give a_+ by the same kappa*: a_+ = a* (kappa* a_+)/(kappa* a*)
    table = mixture_recombination_table(rb_k)
    a_star = 2000.0 * table.kappa_star_a_star / table.kappa_star_a_plus
    np.testing.assert_allclose(lf.l3(a, 20.0, species=rb_k, efimov=lf.Efimov(a_star=a_star, eta_star=0.1)),
                               deep + shallow, rtol=1e-12)
    with pytest.raises(LossfitValueError, match="channel:.*no dimer kinetics for mixtures"):
        lf.l3(a, 20.0, species=rb_k, efimov=efimov, channel="observed")


def test_temperatures_beyond_the_table_are_refused(rb_k):
    # the table ends at 15 E_D (three-atom energy); E_D/k_B = 3.1 uK (1000 a0/a)^2 for Rb-Rb-41K
    with pytest.raises(LossfitValueError, match="^temperature: .* three-atom collisions"):
        lf.l3(5000.0, 300.0, species=rb_k, efimov=lf.Efimov(a_plus=2000.0, eta_plus=0.1))
    with pytest.raises(LossfitValueError, match="^energy: "):
        lf.k3(5000.0, 3000.0, species=rb_k, efimov=lf.Efimov(a_plus=2000.0, eta_plus=0.1))


def test_mixed_signs_in_one_call(rb_k):
    efimov = lf.Efimov(a_minus=-600.0, eta_minus=0.1, a_plus=2000.0, eta_plus=0.1)
    both = lf.l3(np.array([-1500.0, 1500.0]), 20.0, species=rb_k, efimov=efimov)
    assert both[0] == lf.l3(-1500.0, 20.0, species=rb_k, efimov=efimov)
    assert both[1] == lf.l3(1500.0, 20.0, species=rb_k, efimov=efimov)


def test_fit_of_an_invented_positive_a_spectrum_recovers_a_plus(rb_k):
    # invented scenario (not measured data): total L3 of Rb-Rb-41K at a > 0 through a_+ = 2000 a0,
    # eta_+ = 0.05, 300-18000 a0 at 2 and 6 nK, 15 % log-normal scatter; free a_+ and eta_+ with
    # the default priors (a_+: one period below the first L3/a^4 maximum)
    truth = lf.Efimov(a_plus=2000.0, eta_plus=0.05)
    rng = np.random.default_rng(3)
    spectra = []
    for temperature in (2.0, 6.0):
        a = np.geomspace(300.0, 18000.0, 20)
        l3 = lf.l3(a, temperature, species=rb_k, efimov=truth)
        spectra.append(lf.LossSpectrum(a=a, temperature=np.full(a.size, temperature),
                                       value=l3 * np.exp(rng.normal(0.0, 0.15, a.size)), error=0.15 * l3))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")          # a short chain, on purpose
        result = lf.fit(spectra, species=rb_k, free=["a_plus", "eta_plus"], walkers=16, steps=400, seed=2,
                        progress=False)
    rows = {r["name"]: r for r in result.summary()}
    assert rows["a_plus"]["lo68"] < 2000.0 < rows["a_plus"]["hi68"]
    assert rows["eta_plus"]["lo95"] < 0.05 < rows["eta_plus"]["hi95"]
