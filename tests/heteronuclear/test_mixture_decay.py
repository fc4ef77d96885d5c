"""Decay curves of a B-X mixture: the rate equations and the per-curve K3 fit.

Every number here is invented for the tests (an optical trap, atom numbers, K3, noise);
none is lab data. The equations are those of docs/heteronuclear.md, "Loss convention" and
"Decay curves of a mixture". References are rebuilt in this file from scipy.constants and
the potentials (Gaussian widths sigma^2 = k_B T/(m omega^2)), not from lossfit's overlap.
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import quad, solve_ivp
from scipy.optimize import brentq

from lossfit.data.spectra import LossSpectrum
from lossfit.errors import ConvergenceWarning, LossfitValueError
from lossfit.experiment.mixture_decay import (
    MixtureDecayModel,
    loss_weighted_potential_energy,
    simulate_mixture_decay,
)
from lossfit.experiment.mixture_trap import MixtureTrap
from lossfit.inference.mixture_curve_fits import fit_mixture_curve, mixture_spectrum_from_fits
from lossfit.mixture import heteronuclear
from lossfit.species import species

SYSTEM = "133Cs-133Cs-6Li"
CS, LI = species("133Cs"), species("6Li")
F_CS = (40.0, 45.0, 180.0)      # Hz, an invented crossed optical trap (Cs sags by 7.7 um)
F_LI = (90.0, 101.0, 405.0)     # Hz, the same beams felt by Li (sqrt(alpha/m) scaling)
TRAP = MixtureTrap("133Cs", "6Li", F_CS, F_LI)
K3 = 3.0e-25                    # cm^6/s, events (invented; below the 200 nK unitarity bound)


def _variances(freqs, mass, t_nk):
    """sigma_i^2 = k_B T/(m omega_i^2) in m^2 (Boltzmann cloud in a harmonic trap)."""
    return sc.k * t_nk * 1e-9 / (mass * (2 * math.pi * np.asarray(freqs)) ** 2)


def _geometry_no_sag(t_b, t_x):
    """int n_B^2 n_X d^3r / (N_B^2 N_X) in cm^-6 without gravity: per axis the Gaussian
    integral of (n_B/N_B)^2 n_X/N_X, 1/(2 pi sqrt(a (a + 2 b))) (docs/heteronuclear.md §7)."""
    a, b = _variances(F_CS, CS.mass, t_b), _variances(F_LI, LI.mass, t_x)
    return float(np.prod(1.0 / (2 * math.pi * np.sqrt(a * (a + 2 * b))))) * 1e-12


# -- the forward model -----------------------------------------------------------------

def test_minority_x_in_a_b_bath_decays_exponentially():
    # dN_X/dt = -K3 <n_B^2>_X N_X (docs/heteronuclear.md §6) with N_B fixed: N_X = N_X0 e^{-rt}.
    # N_X0/N_B0 = 1e-5, so N_B changes by at most 2e-5 of itself and the rate by 4e-5.
    trap = MixtureTrap("133Cs", "6Li", F_CS, F_LI, gravity=False)
    n_b0, n_x0, t_nk = 1.0e7, 100.0, 200.0
    rate = K3 * n_b0 ** 2 * _geometry_no_sag(t_nk, t_nk)              # 1/s, reference built here
    t = np.linspace(0.0, 2.0 / rate, 9)                                 # down to e^-2
    sol = simulate_mixture_decay(t, species=SYSTEM, trap=trap, n_b0=n_b0, n_x0=n_x0, t0_nK=t_nk, k3=K3,
                                 heating=False)
    np.testing.assert_allclose(sol.n_x, n_x0 * np.exp(-rate * t), rtol=1e-4)
    assert np.all(np.abs(sol.n_b / n_b0 - 1.0) <= 2.0 * n_x0 / n_b0)
    np.testing.assert_array_equal(sol.temperature, t_nk)


@pytest.mark.parametrize("t_x", [None, 450.0])
def test_b_minus_twice_x_is_conserved_without_one_body_loss(t_x):
    # two B and one X per event (docs/heteronuclear.md §6): d(N_B - 2 N_X)/dt = -2 K3 I + 2 K3 I = 0
    t = np.linspace(0.0, 1.5, 12)
    sol = simulate_mixture_decay(t, species=SYSTEM, trap=TRAP, n_b0=1.0e5, n_x0=4.0e4, t0_nK=200.0, t0_x_nK=t_x,
                                 k3=3 * K3, heating=True)
    assert sol.n_x[-1] < 0.7 * 4.0e4                                     # a real decay
    np.testing.assert_allclose(sol.n_b - 2.0 * sol.n_x, 1.0e5 - 8.0e4, rtol=0, atol=1e-7 * 1.0e5)


def test_fixed_temperature_against_the_separable_solution():
    # With T fixed, G = I/(N_B^2 N_X) is constant and N_B = C + 2 N_X (C = N_B0 - 2 N_X0), so
    # dN/((C + 2N)^2 N) = -K3 G dt integrates (partial fractions, derived in the test) to
    # F(N) = ln(N/(C + 2N))/C^2 + 1/(C (C + 2N)),  F(N_X(t)) - F(N_X0) = -K3 G t.
    # The traps include gravity: G from the Gaussian overlap with the sag offset d along z.
    n_b0, n_x0, t_b, t_x = 8.0e4, 3.0e4, 180.0, 320.0
    a, b = _variances(F_CS, CS.mass, t_b), _variances(F_LI, LI.mass, t_x)
    d = np.array([0.0, 0.0, sc.g * (1 / (2 * math.pi * F_LI[2]) ** 2 - 1 / (2 * math.pi * F_CS[2]) ** 2)])
    geometry = float(np.prod(np.exp(-d ** 2 / (a + 2 * b)) / (2 * math.pi * np.sqrt(a * (a + 2 * b))))) * 1e-12
    c = n_b0 - 2.0 * n_x0

    def f(n):
        return math.log(n / (c + 2 * n)) / c ** 2 + 1.0 / (c * (c + 2 * n))

    t = np.linspace(0.0, 3.0, 10)
    expected = [brentq(lambda n, s=s: f(n) - f(n_x0) + K3 * geometry * s, 1e-6, n_x0, xtol=1e-12, rtol=1e-14)
                if s > 0 else n_x0 for s in t]
    sol = simulate_mixture_decay(t, species=SYSTEM, trap=TRAP, n_b0=n_b0, n_x0=n_x0, t0_nK=t_b, t0_x_nK=t_x,
                                 k3=K3, heating=False)
    assert sol.n_x[-1] < 0.5 * n_x0
    np.testing.assert_allclose(sol.n_x, expected, rtol=1e-8)
    np.testing.assert_allclose(sol.n_b, c + 2 * np.array(expected), rtol=1e-8)


@pytest.mark.parametrize("t_b, t_x, gravity", [(200.0, 200.0, True), (150.0, 600.0, True), (300.0, 90.0, False)])
def test_loss_weighted_potential_energy_against_quadrature(t_b, t_x, gravity):
    # <U_s>_w = int U_s n_B^2 n_X / int n_B^2 n_X per axis by scipy quad, with
    # U_s = (m_s/2) w_s^2 (x - c_s)^2 measured from each cloud's own (sagged) centre.
    trap = MixtureTrap("133Cs", "6Li", F_CS, F_LI, gravity=gravity)
    a, b = _variances(F_CS, CS.mass, t_b), _variances(F_LI, LI.mass, t_x)
    g = sc.g if gravity else 0.0
    u_b = u_x = 0.0
    for i in range(3):
        c_b = -g / (2 * math.pi * F_CS[i]) ** 2 if i == 2 else 0.0
        c_x = -g / (2 * math.pi * F_LI[i]) ** 2 if i == 2 else 0.0

        def weight(x, i=i, c_b=c_b, c_x=c_x):
            return math.exp(-(x - c_b) ** 2 / a[i] - (x - c_x) ** 2 / (2 * b[i]))

        span = 30 * math.sqrt(max(a[i], b[i])) + abs(c_b - c_x)
        lo, hi, pts = min(c_b, c_x) - span, max(c_b, c_x) + span, [c_b, c_x]
        norm = quad(weight, lo, hi, points=pts, epsabs=0, epsrel=1e-12, limit=200)[0]
        # (1/2) m w^2 (x - c)^2 / (k_B T) = (x - c)^2 / (2 sigma^2)
        u_b += quad(lambda x: (x - c_b) ** 2 / (2 * a[i]) * weight(x), lo, hi, points=pts, epsabs=0,
                    epsrel=1e-12, limit=200)[0] / norm
        u_x += quad(lambda x: (x - c_x) ** 2 / (2 * b[i]) * weight(x), lo, hi, points=pts, epsabs=0,
                    epsrel=1e-12, limit=200)[0] / norm
    got_b, got_x = loss_weighted_potential_energy(trap, t_b, t_x)
    assert got_b == pytest.approx(u_b, rel=1e-9)
    assert got_x == pytest.approx(u_x, rel=1e-9)


def test_one_species_limit_of_the_heating():
    # Equal spring constants (m_B w_B^2 = m_X w_X^2), equal T and no gravity: the two clouds have
    # one shape, u_B = u_X = 1/2 (k_B T/2 per lost atom, as for identical bosons, lossfit/
    # experiment/decay.py), and the common-T equation gives dT/dt = K3 I T/(N_B + N_X).
    f_li = tuple(f * math.sqrt(CS.mass / LI.mass) for f in F_CS)
    trap = MixtureTrap("133Cs", "6Li", F_CS, f_li, gravity=False)
    assert loss_weighted_potential_energy(trap, 250.0) == pytest.approx((0.5, 0.5), rel=1e-12)
    sol = simulate_mixture_decay([0.0, 1e-6], species=SYSTEM, trap=trap, n_b0=1e5, n_x0=5e4, t0_nK=250.0, k3=K3)
    slope = (sol.temperature[1] - sol.temperature[0]) / 1e-6
    assert slope == pytest.approx(K3 * sol.overlap[0] * 250.0 / 1.5e5, rel=1e-5)


@pytest.mark.parametrize("t_x", [None, 500.0])
def test_heated_solution_against_an_independent_integration(t_x):
    # The equations of docs/heteronuclear.md ("Decay curves of a mixture") written out here in
    # atom numbers and nK, integrated by a different method (Radau) with the overlap from the
    # widths built above (and lossfit's u's, checked against quadrature in another test).
    n_b0, n_x0, t_b0 = 1.2e5, 5.0e4, 220.0
    gamma_b, gamma_x = 0.05, 0.2                                        # 1/s
    trap = MixtureTrap("133Cs", "6Li", F_CS, F_LI, gravity=False)

    def rhs(_t, y):
        nb, nx, tb, tx = y
        ev = K3 * nb ** 2 * nx * _geometry_no_sag(tb, tx)
        u_b, u_x = loss_weighted_potential_energy(trap, tb, tx)
        if t_x is None:
            dt = ev * tb * (4.5 - 2 * u_b - u_x) / (3 * (nb + nx))
            dtb = dtx = dt
        else:
            dtb = 2 * ev / nb * tb * (1.5 - u_b) / 3
            dtx = ev / nx * tx * (1.5 - u_x) / 3
        return [-gamma_b * nb - 2 * ev, -gamma_x * nx - ev, dtb, dtx]

    t = np.linspace(0.0, 2.0, 8)
    t_x0 = t_b0 if t_x is None else t_x
    ref = solve_ivp(rhs, (0, 2.0), [n_b0, n_x0, t_b0, t_x0], method="Radau", t_eval=t, rtol=1e-11,
                    atol=[1e-6, 1e-6, 1e-9, 1e-9])
    sol = simulate_mixture_decay(t, species=SYSTEM, trap=trap, n_b0=n_b0, n_x0=n_x0, t0_nK=t_b0, t0_x_nK=t_x,
                                 k3=K3, gamma_b=gamma_b, gamma_x=gamma_x)
    assert sol.temperature[-1] > 1.05 * t_b0                             # heating matters here
    for got, want in ((sol.n_b, ref.y[0]), (sol.n_x, ref.y[1]), (sol.temperature, ref.y[2]),
                      (sol.temperature_x, ref.y[3])):
        np.testing.assert_allclose(got, want, rtol=2e-8)


def test_overlap_is_that_of_the_trap_and_drives_the_loss():
    # The solution's overlap is MixtureTrap.overlap at (N_B, N_X, T_B, T_X)(t), and the X loss
    # rate equals K3 times it (docs/heteronuclear.md §6: dN_X/dt = -K3 int n_B^2 n_X).
    t = np.linspace(0.0, 1.0, 2001)
    sol = simulate_mixture_decay(t, species=SYSTEM, trap=TRAP, n_b0=1e5, n_x0=3e4, t0_nK=150.0, t0_x_nK=400.0,
                                 k3=K3)
    direct = TRAP.overlap(sol.n_b, sol.n_x, sol.temperature, sol.temperature_x).integral
    np.testing.assert_allclose(sol.overlap, direct, rtol=1e-14)
    rate = -np.gradient(sol.n_x, t, edge_order=2)
    np.testing.assert_allclose(rate[1:-1], K3 * sol.overlap[1:-1], rtol=1e-5)


def test_a_model_object_solves_many_parameter_sets():
    model = MixtureDecayModel([0.0, 0.5, 1.0], species=heteronuclear("133Cs", "6Li"), trap=TRAP, t0_nK=200.0)
    first, second = model(1e5, 2e4, K3), model(1e5, 2e4, 2 * K3)
    assert second.n_x[-1] < first.n_x[-1] < 2e4
    assert first.common_temperature and "133Cs-133Cs-6Li" in repr(model)
    # no three-body loss: one-body decay only, temperature unchanged
    plain = model(1e5, 2e4, 0.0, gamma_b=0.3, gamma_x=0.1)
    np.testing.assert_allclose(plain.n_b, 1e5 * np.exp(-0.3 * plain.t), rtol=1e-9)
    np.testing.assert_allclose(plain.temperature, 200.0, rtol=1e-12)


# -- fits of synthetic curves -------------------------------------------------------------

T_FIT = np.linspace(0.0, 1.0, 14)       # s, invented hold times
N_B0, N_X0, T0 = 1.0e5, 2.0e4, 200.0    # invented initial state (B in excess)
NOISE = 0.03                            # 3 % counting noise, invented


def _synthetic(heating, t_x=None, seed=0):
    sol = simulate_mixture_decay(T_FIT, species=SYSTEM, trap=TRAP, n_b0=N_B0, n_x0=N_X0, t0_nK=T0, t0_x_nK=t_x,
                                 k3=K3, heating=heating)
    rng = np.random.default_rng(seed)
    n_b = sol.n_b * (1 + NOISE * rng.standard_normal(T_FIT.size))
    n_x = sol.n_x * (1 + NOISE * rng.standard_normal(T_FIT.size))
    return sol, n_b, n_x


@pytest.mark.parametrize("counted, heating", [("x", False), ("b", False), ("both", True)])
def test_synthetic_curve_is_fitted_back_within_its_error(counted, heating):
    t_x = 300.0 if counted == "both" else None                          # two temperatures for one case
    sol, n_b, n_x = _synthetic(heating, t_x)
    data = {}
    if counted in ("b", "both"):
        data.update(n_b=n_b, n_b_err=NOISE * sol.n_b)
    else:   # B not counted: its initial number measured to 3 %
        data.update(n_b0=N_B0, n_b0_err=0.03 * N_B0)
    if counted in ("x", "both"):
        data.update(n_x=n_x, n_x_err=NOISE * sol.n_x)
    else:
        data.update(n_x0=N_X0, n_x0_err=0.05 * N_X0)
    fit = fit_mixture_curve(T_FIT, species=SYSTEM, trap=TRAP, t0_nK=T0, t0_x_nK=t_x, heating=heating, a=-900.0,
                            **data)
    assert fit.counted == counted
    assert abs(fit.k3 - K3) < 2.0 * fit.k3_error                        # within two of its error bars
    assert fit.k3_error < 0.35 * K3                                     # and the curve does measure K3
    assert fit.chi2 / fit.dof < 2.5
    assert abs(fit.params["n_b0"] - N_B0) < 3.0 * fit.errors["n_b0"]
    if t_x is not None:
        assert fit.temperature_x > fit.temperature and not fit.common_temperature


def test_error_bars_cover_the_truth_over_noise_draws():
    # 24 noise draws of an X-only curve at fixed T, each with its own measurement of N_B0 (3 %):
    # the pull (K3_fit - K3)/error should be of unit width (a loose band for 24 draws: the
    # sample std of N(0,1) lies in 0.6-1.45 with probability above 99 %).
    pulls = []
    for seed in range(24):
        sol, _, n_x = _synthetic(False, seed=100 + seed)
        n_b0 = N_B0 * (1 + 0.03 * np.random.default_rng(seed).standard_normal())
        fit = fit_mixture_curve(T_FIT, species=SYSTEM, trap=TRAP, t0_nK=T0, heating=False, n_x=n_x,
                                n_x_err=NOISE * sol.n_x, n_b0=n_b0, n_b0_err=0.03 * N_B0)
        pulls.append((fit.k3 - K3) / fit.k3_error)
    assert abs(np.mean(pulls)) < 0.7
    assert 0.6 < np.std(pulls, ddof=1) < 1.45


def test_sampling_agrees_with_least_squares():
    sol, n_b, n_x = _synthetic(False, seed=3)
    kw = dict(species=SYSTEM, trap=TRAP, t0_nK=T0, heating=False, n_x=n_x, n_x_err=NOISE * sol.n_x,
              n_b=n_b, n_b_err=NOISE * sol.n_b)
    best = fit_mixture_curve(T_FIT, **kw)
    with pytest.warns(ConvergenceWarning):       # a deliberately short chain warns about its length
        sampled = fit_mixture_curve(T_FIT, mcmc={"walkers": 6, "steps": 120, "seed": 1}, **kw)
    assert sampled.method == "mcmc" and sampled.samples["k3"].size > 0
    assert sampled.k3 == pytest.approx(best.k3, abs=0.5 * best.k3_error)
    assert sampled.k3_error == pytest.approx(best.k3_error, rel=0.5)


def test_fitted_one_body_rate():
    # Gamma_X free: a curve with invented one-body loss of X (0.4/s) on top of K3
    sol = simulate_mixture_decay(T_FIT, species=SYSTEM, trap=TRAP, n_b0=N_B0, n_x0=N_X0, t0_nK=T0, k3=K3,
                                 gamma_x=0.4, heating=False)
    fit = fit_mixture_curve(T_FIT, species=SYSTEM, trap=TRAP, t0_nK=T0, heating=False, n_b=sol.n_b,
                            n_b_err=NOISE * sol.n_b, n_x=sol.n_x, n_x_err=NOISE * sol.n_x, gamma_x=None)
    assert "gamma_x_t" in fit.coords
    assert fit.params["gamma_x"] == pytest.approx(0.4, rel=1e-5)        # noiseless data
    assert fit.k3 == pytest.approx(K3, rel=1e-5)


def test_spectrum_from_fits():
    fits = []
    for a, t_x in ((-800.0, None), (-1200.0, 350.0)):
        sol, n_b, n_x = _synthetic(False, t_x)
        fits.append(fit_mixture_curve(T_FIT, species=SYSTEM, trap=TRAP, t0_nK=T0, t0_x_nK=t_x, heating=False,
                                      n_b=n_b, n_b_err=NOISE * sol.n_b, n_x=n_x, n_x_err=NOISE * sol.n_x, a=a))
    spec = mixture_spectrum_from_fits(fits)
    assert isinstance(spec, LossSpectrum) and spec.kind == "l3" and spec.species == SYSTEM
    np.testing.assert_array_equal(spec.a, [-800.0, -1200.0])
    np.testing.assert_allclose(spec.value, [f.k3 for f in fits])
    np.testing.assert_allclose(spec.temperature_x, [T0, 350.0])
    one_t = mixture_spectrum_from_fits(fits[:1])
    assert one_t.temperature_x is None
    with pytest.raises(LossfitValueError, match="^a:"):
        mixture_spectrum_from_fits(fits, a=[-800.0])


# -- bad input ------------------------------------------------------------------------------

def _simulate(**override):
    kw = dict(species=SYSTEM, trap=TRAP, n_b0=1e5, n_x0=2e4, t0_nK=200.0, k3=K3)
    kw.update(override)
    t = kw.pop("t", [0.0, 0.5])
    return simulate_mixture_decay(t, **kw)


@pytest.mark.parametrize("override, argument", [
    ({"t": [-0.1, 0.5]}, "t"),
    ({"t": [0.5, 0.2]}, "t"),
    ({"k3": -1e-25}, "k3"),
    ({"k3": float("nan")}, "k3"),
    ({"n_b0": 0.0}, "n_b0"),
    ({"n_x0": -5.0}, "n_x0"),
    ({"t0_nK": 0.0}, "t0_nK"),
    ({"t0_x_nK": -3.0}, "t0_x_nK"),
    ({"gamma_b": -0.1}, "gamma_b"),
    ({"species": "133Cs"}, "species"),
    ({"species": "87Rb-87Rb-41K"}, "trap"),
    ({"trap": (40.0, 45.0, 180.0)}, "trap"),
    ({"heating": "yes"}, "heating"),
])
def test_bad_simulation_input_names_the_argument(override, argument):
    with pytest.raises(LossfitValueError, match=f"^{argument}:"):
        _simulate(**override)


@pytest.mark.parametrize("override, argument", [
    ({"t": [-0.1, 0.2, 0.4, 0.6]}, "t"),
    ({"n_x": [2e4, 1.5e4, 1.2e4]}, "n_x"),                  # three counts for four times
    ({"n_x_err": [1e3, 1e3]}, "n_x_err"),
    ({"n_x_err": None}, "n_x_err"),
    ({"n_b0": None, "n_b0_err": None}, "n_b0"),              # B neither counted nor given
    ({"n_x": None, "n_x_err": None}, "n_x"),                  # nothing counted
    ({"gamma_x": -1.0}, "gamma_x"),
    ({"species": "6Li"}, "species"),
    ({"a": 0.0}, "a"),
    ({"mcmc": {"walkers": 2}}, "mcmc"),
])
def test_bad_fit_input_names_the_argument(override, argument):
    kw = dict(species=SYSTEM, trap=TRAP, t0_nK=200.0, n_x=[2e4, 1.6e4, 1.3e4, 1.1e4], n_x_err=[1e3] * 4,
              n_b0=1e5, n_b0_err=3e3, heating=False)
    kw.update(override)
    t = kw.pop("t", [0.0, 0.3, 0.6, 0.9])
    with pytest.raises(LossfitValueError, match=f"^{argument}:"):
        fit_mixture_curve(t, **kw)
