"""Per-curve least-squares fits (lossfit.inference.curve_fits) against references outside the project.

* Closed form of dN/dt = -Gamma N - K N^3 at constant T (a Bernoulli equation):
  N(t)^-2 = (N0^-2 + K/Gamma) e^(2 Gamma t) - K/Gamma, K = L3 c / T^3 (docs/architecture.md, conventions).
* scipy.integrate.solve_ivp of the rate equations with heating (Weber et al.,
  PRL 91, 123201 (2003)) and of the atom-dimer equations.
* Monte Carlo: the spread of fitted L3 over noisy realisations versus the reported error.
The density coefficients c, d are recomputed here from scipy.constants (docs/architecture.md, conventions).
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import solve_ivp

from lossfit.data.curves import DecayCurve
from lossfit.errors import LossfitValueError
from lossfit.experiment.feshbach import FeshbachResonance
from lossfit.inference.curve_fits import _CurveLogProb, _CurveModel, fit_curve, spectrum_from_curves
from lossfit.species import species

SP = species("133Cs")
TRAP = (40.0, 40.0, 8.0)


def _c3():
    wbar2 = (2 * math.pi) ** 2 * np.prod(TRAP) ** (2.0 / 3.0)
    return (SP.mass * wbar2 / (2 * math.pi * sc.k)) ** 3 / 3 ** 1.5 * 1e-12 * 1e27     # cm^-6 nK^3


def _cad():
    wbar2 = (2 * math.pi) ** 2 * np.prod(TRAP) ** (2.0 / 3.0)
    return (SP.mass * wbar2 / (2 * math.pi * sc.k)) ** 1.5 * (2 / 3) ** 1.5 * 1e-6 * 1e9 ** 1.5


def _bernoulli(t, n0, k, gamma):
    u = (n0 ** -2 + k / gamma) * np.exp(2 * gamma * t) - k / gamma
    return u ** -0.5


N0, T0, L3, GAMMA = 1.0e5, 100.0, 3.0e-24, 0.1
TIMES = np.linspace(0.0, 2.0, 15)


def test_exact_data_without_heating_give_back_the_closed_form_parameters():
    k = L3 * _c3() / T0 ** 3
    n = _bernoulli(TIMES, N0, k, GAMMA)
    assert n[-1] < 0.6 * N0                       # the scenario really decays
    curve = DecayCurve(t=TIMES, atoms=n, atoms_err=0.02 * n, temperature=np.full(15, T0),
                       temperature_err=np.full(15, 2.0), a=-1000.0, trap_hz=TRAP)
    fit = fit_curve(curve, species=SP, heating=False)
    assert fit.value == pytest.approx(L3, rel=1e-5)
    assert fit.params["n0"] == pytest.approx(N0, rel=1e-6)
    assert fit.params["gamma"] == pytest.approx(GAMMA, rel=1e-4)
    assert fit.params["t0_nK"] == pytest.approx(T0, rel=1e-6)
    assert fit.chi2 < 1e-6 and fit.dof == 30 - 4
    assert fit.temperature == pytest.approx(T0, rel=1e-6)


def _heated(t, n0, t0, l3, gamma, t_h):
    c = _c3()

    def rhs(_, y):
        n, temp = y
        r3 = l3 * c * n ** 3 / temp ** 3
        return [-gamma * n - r3, r3 / n * (temp + t_h) / 3.0]
    sol = solve_ivp(rhs, (0.0, t[-1]), [n0, t0], t_eval=t, rtol=1e-11, atol=[1e-6, 1e-9], method="DOP853")
    return sol.y


def test_heated_curve_from_solve_ivp_is_recovered():
    n, temp = _heated(TIMES, N0, T0, L3, GAMMA, 30.0)
    assert temp[-1] > 1.15 * T0                     # heating matters here
    curve = DecayCurve(t=TIMES, atoms=n, atoms_err=0.02 * n, temperature=temp, temperature_err=0.02 * temp,
                       a=-1000.0, trap_hz=TRAP)
    fit = fit_curve(curve, species=SP, recombination_heating_nK=30.0)
    assert fit.value == pytest.approx(L3, rel=1e-5)
    assert fit.params["gamma"] == pytest.approx(GAMMA, rel=1e-3)
    assert fit.model_temperature == pytest.approx(temp, rel=1e-6)
    # ignoring the heating (constant T fitted to the rising temperatures) biases L3
    cold = fit_curve(curve, species=SP, heating=False)
    assert abs(cold.value / L3 - 1.0) > 0.1


def test_reported_errors_match_the_monte_carlo_spread():
    rng = np.random.default_rng(7)
    n, temp = _heated(TIMES, N0, T0, L3, GAMMA, 0.0)
    sn, st = 0.03 * n, 0.03 * temp
    values, errors = [], []
    for _ in range(120):
        curve = DecayCurve(t=TIMES, atoms=n + sn * rng.standard_normal(15), atoms_err=sn,
                           temperature=temp + st * rng.standard_normal(15), temperature_err=st,
                           a=-1000.0, trap_hz=TRAP)
        fit = fit_curve(curve, species=SP)
        values.append(fit.value)
        errors.append(fit.error)
    values = np.array(values)
    spread = np.std(values, ddof=1)
    # s.e. of a standard deviation over 120 draws is ~6.5 %; allow 25 %
    assert np.median(errors) == pytest.approx(spread, rel=0.25)
    assert abs(np.mean(values) - L3) < 3 * spread / math.sqrt(values.size) + 0.02 * L3


BETA, N_A0, N_D0, T0_D, GAMMA_D = 2.0e-11, 2.0e5, 3.0e4, 150.0, 0.5


def _dimer_curve():
    # the atom-dimer rate equations integrated by scipy (DOP853), independent of lossfit
    d = _cad()

    def rhs(_, y):
        na, nd, temp = y
        r = BETA * d * na * nd / temp ** 1.5
        return [-r, -GAMMA_D * nd - r, 1.5 * r * temp / (3 * (na + nd))]
    t = np.linspace(0.0, 0.3, 15)
    sol = solve_ivp(rhs, (0, t[-1]), [N_A0, N_D0, T0_D], t_eval=t, rtol=1e-11, atol=1e-9, method="DOP853")
    na, nd, temp = sol.y
    return DecayCurve(t=t, atoms=nd, atoms_err=0.02 * nd, temperature=temp, temperature_err=0.02 * temp,
                      a=1500.0, kind="dimers", partner_atoms=na, partner_atoms_err=0.02 * na, trap_hz=TRAP)


def test_dimer_curve_against_solve_ivp():
    beta, n_a0, n_d0, gamma_d = BETA, N_A0, N_D0, GAMMA_D
    curve = _dimer_curve()
    assert curve.atoms[-1] < 0.6 * n_d0
    fit = fit_curve(curve, species=SP)
    assert fit.kind == "beta"
    assert fit.value == pytest.approx(beta, rel=1e-5)
    assert fit.params["gamma"] == pytest.approx(gamma_d, rel=1e-4)
    assert fit.params["n_atoms0"] == pytest.approx(n_a0, rel=1e-6)


def test_spectrum_from_curves_and_errors():
    res = FeshbachResonance(550.0, 10.0, 200.0)
    k = L3 * _c3() / T0 ** 3
    n = _bernoulli(TIMES, N0, k, GAMMA)
    curves = [DecayCurve(t=TIMES, atoms=n, atoms_err=0.02 * n, temperature=T0, temperature_err=2.0,
                         field=b, trap_hz=TRAP) for b in (551.0, 552.0)]
    spectra = spectrum_from_curves(curves, species=SP, resonance=res, heating=False)
    assert len(spectra) == 1 and spectra[0].kind == "l3"
    assert spectra[0].a.tolist() == pytest.approx([200 * (1 - 10 / 1.0), 200 * (1 - 10 / 2.0)], rel=1e-12)
    assert spectra[0].value == pytest.approx([L3, L3], rel=1e-5)
    with pytest.raises(LossfitValueError) as info:
        spectrum_from_curves(curves, species=SP)
    assert info.value.argument == "resonance"
    with pytest.raises(LossfitValueError) as info:
        fit_curve("not a curve", species=SP)
    assert info.value.argument == "curve"
    short = DecayCurve(t=[0.0, 1.0], atoms=[1e5, 8e4], atoms_err=[1e3, 1e3], temperature=100.0,
                       temperature_err=2.0, a=-900.0, trap_hz=TRAP)
    with pytest.raises(LossfitValueError, match="more points"):
        fit_curve(short, species=SP)


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore::lossfit.errors.ConvergenceWarning")
def test_mcmc_agrees_with_least_squares_where_the_model_is_nearly_linear():
    # A well-measured curve: the posterior is close to Gaussian, so its median and 68 %
    # half-width must equal the least-squares value and (J^T J)^-1 error (Laplace's
    # approximation is exact for a linear model; common practice, no source)
    rng = np.random.default_rng(3)
    n, temp = _heated(TIMES, N0, T0, L3, GAMMA, 0.0)
    sn, st = 0.02 * n, 0.02 * temp
    curve = DecayCurve(t=TIMES, atoms=n + sn * rng.standard_normal(15), atoms_err=sn,
                       temperature=temp + st * rng.standard_normal(15), temperature_err=st,
                       a=-1000.0, trap_hz=TRAP)
    lsq = fit_curve(curve, species=SP)
    post = fit_curve(curve, species=SP, mcmc={"walkers": 16, "steps": 1200, "seed": 2})
    assert lsq.method == "least_squares" and lsq.samples is None
    assert post.method == "mcmc" and post.samples["value"].size > 5000
    assert post.value == pytest.approx(lsq.value, abs=0.15 * lsq.error)
    assert post.error == pytest.approx(lsq.error, rel=0.15)
    assert post.errors["n0"] == pytest.approx(lsq.errors["n0"], rel=0.15)
    assert np.all(post.samples["value"] >= 0) and np.all(post.samples["gamma"] >= 0)


@pytest.mark.filterwarnings("ignore::lossfit.errors.ConvergenceWarning")
def test_mcmc_error_bar_of_an_undetected_loss_respects_the_bound():
    # no three-body loss at all: the posterior of L3 piles up against 0 and its 68 %
    # interval lies in [0, ...) -- a linearised error bar would extend below zero
    rng = np.random.default_rng(5)
    n = N0 * np.exp(-GAMMA * TIMES)
    sn = 0.03 * n
    curve = DecayCurve(t=TIMES, atoms=n + sn * rng.standard_normal(15), atoms_err=sn,
                       temperature=np.full(15, T0), temperature_err=np.full(15, 3.0), a=-1000.0,
                       trap_hz=TRAP)
    post = fit_curve(curve, species=SP, heating=False, mcmc={"walkers": 16, "steps": 800, "seed": 1})
    v = post.samples["value"]
    assert v.min() >= 0.0
    # the median sits above zero by a fraction of the spread (one-sided posterior)
    assert 0.0 < np.median(v) < 2.0 * post.error


@pytest.mark.parametrize("mcmc", ["yes", {"steps": 10}, {"walkers": 2}, {"burn": 5}])
def test_bad_mcmc_settings_are_named(mcmc):
    curve = DecayCurve(t=TIMES, atoms=N0 * np.exp(-GAMMA * TIMES), atoms_err=np.full(15, 1e3),
                       temperature=np.full(15, T0), temperature_err=np.full(15, 3.0), a=-1000.0,
                       trap_hz=TRAP)
    with pytest.raises(LossfitValueError, match="mcmc"):
        fit_curve(curve, species=SP, mcmc=mcmc)


@pytest.mark.parametrize("kind", ["atoms", "dimers"])
def test_walker_set_of_one_curve_equals_walker_by_walker(kind):
    # the sampled per-curve fit integrates every walker's copy of the curve in one batch:
    # the log probabilities must be those of one walker at a time, bit for bit (then the
    # chains are too: tests/inference/test_moves.py), a walker below its bound included
    if kind == "atoms":
        n, temp = _heated(TIMES, N0, T0, L3, GAMMA, 0.0)
        curve = DecayCurve(t=TIMES, atoms=n, atoms_err=0.02 * n, temperature=temp, temperature_err=0.02 * temp,
                           a=-1000.0, trap_hz=TRAP)
    else:
        curve = _dimer_curve()
    fit = fit_curve(curve, species=SP)
    model = _CurveModel(curve, SP, True, 0.0, None, 1e-8)
    model.value_scale = fit.value
    log_prob = _CurveLogProb(model, np.r_[0.0, np.full(len(model.coords) - 2, -np.inf), 0.0])
    x = np.r_[1.0, np.log(fit.params["n0"]), [np.log(fit.params["n_atoms0"])] if kind == "dimers" else [],
              np.log(fit.params["t0_nK"]), fit.params["gamma"] * curve.t[-1]]
    xs = x * (1.0 + 0.01 * np.random.default_rng(1).standard_normal((6, x.size)))
    xs[2, 0] = -0.1                                           # below its bound
    many = log_prob(xs)
    assert log_prob.vectorized and many[2] == -np.inf and np.isfinite(np.delete(many, 2)).all()
    assert np.array_equal(many, np.array([log_prob(row) for row in xs]))
