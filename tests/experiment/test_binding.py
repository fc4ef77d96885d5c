"""Binding-energy models of the Feshbach dimer: universal, effective range (R*), van der Waals.

Sources: Petrov, PRL 93, 143201 (2004) and Chin, Grimm, Julienne & Tiesinga, RMP 82, 1225
(2010) for the two-channel bound state; Gribakin & Flambaum, PRA 48, 546 (1993) for the
mean scattering length abar = 0.955978 r_vdW and the near-threshold law
hbar^2/(m (a - abar)^2). Invented calibration data (not measured) for the model choice.
"""

import math
import warnings

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import lossfit as lf
from lossfit.experiment.binding import (
    ABAR_BETA6,
    binding_energy_khz,
    universal_scattering_length,
    vdw_kappa,
    vdw_scattering_length,
)
from lossfit.experiment.feshbach import compare_binding_models, resonance_scattering_length

CS = lf.species("133Cs")


def test_effective_range_reduces_to_the_zero_range_law():
    a = np.array([300.0, 1000.0, 5000.0])
    pref = binding_energy_khz(1e6, CS, model="effective-range", r_star=0.0) * 1e12     # hbar^2/(m a0^2)/h
    np.testing.assert_allclose(binding_energy_khz(a, CS, model="effective-range", r_star=0.0), pref / a ** 2,
                               rtol=1e-14)
    np.testing.assert_allclose(binding_energy_khz(a, CS, model="effective-range", r_star=1e-4), pref / a ** 2,
                               rtol=1e-6)


@pytest.mark.parametrize("r_star", [10.0, 300.0, 5000.0])
def test_effective_range_is_the_pole_of_the_two_channel_amplitude(r_star):
    # f(k) = -1/(1/a + R* k^2 + i k): the bound state is the root k = i kappa with kappa > 0,
    # found here by numpy's polynomial roots (an independent path to the closed form)
    pref = binding_energy_khz(1e6, CS, model="effective-range", r_star=0.0) * 1e12
    for a in (200.0, 2000.0):
        roots = np.roots([r_star, 1.0, -1.0 / a])        # R* kappa^2 + kappa - 1/a = 0
        kappa = max(r.real for r in roots if abs(r.imag) < 1e-12 and r.real > 0)
        k = 1j * kappa
        assert abs(1.0 / a + r_star * k * k + 1j * k) < 1e-12 / a
        assert binding_energy_khz(a, CS, model="effective-range", r_star=r_star) == pytest.approx(
            pref * kappa ** 2, rel=1e-12)


def _wkb_scattering_length(phi, x_short=0.02, x_far=400.0):
    # -C6/r^6 in units beta6, boundary condition u = x^(3/2) cos(1/(2 x^2) - phi) deep inside
    # (WKB), integrated outward at E = 0 with scipy; a = x - u/u' far out
    theta = 1.0 / (2.0 * x_short ** 2) - phi
    y0 = [x_short ** 1.5 * math.cos(theta), 1.5 * math.sqrt(x_short) * math.cos(theta)
          + math.sin(theta) / x_short ** 1.5]
    sol = solve_ivp(lambda x, y: (y[1], -y[0] / x ** 6), (x_short, x_far), y0, method="DOP853",
                    rtol=1e-11, atol=1e-14)
    u, du = sol.y[:, -1]
    return x_far - u / du


def test_van_der_waals_mean_scattering_length():
    # a(phi) = abar (1 - tan(phi - phi0)) (Gribakin & Flambaum 1993): two phases pi/2 apart
    # fix abar through (1 - a1/abar)(1 - a2/abar) = -1; abar/beta6 = 0.477989 (abar = 0.955978 r_vdW)
    for phi in (0.3, 1.1):
        a1, a2 = _wkb_scattering_length(phi), _wkb_scattering_length(phi + math.pi / 2)
        u = np.roots([a1 * a2, -(a1 + a2), 2.0])
        abar = 1.0 / u[np.argmin(np.abs(1.0 / u - 0.48))].real
        assert abar == pytest.approx(ABAR_BETA6, rel=2e-4)
    assert 2 * ABAR_BETA6 == pytest.approx(0.955978, abs=1e-6)
    assert CS.abar == pytest.approx(2 * ABAR_BETA6 * CS.r_vdw, rel=1e-6)


@pytest.mark.slow
def test_van_der_waals_tends_to_the_universal_law_and_is_converged():
    a = np.array([300.0, 1000.0, 3000.0, 1e4])
    ratio = binding_energy_khz(a, CS, model="van-der-waals") / binding_energy_khz(a, CS) - 1.0
    assert np.all(np.abs(np.diff(np.abs(ratio))) > 0) and np.all(np.diff(np.abs(ratio[1:])) < 0)
    assert abs(ratio[-1]) < 0.01 and abs(ratio[-1] * a[-1]) == pytest.approx(abs(ratio[-2] * a[-2]), rel=0.1)
    # the radial grid: moving the matching point from 0.08 to 0.05 beta6 changes kappa by
    # 3.3e-5, 4.4e-6, 3.7e-7 at a = 0.9, 3, 30 beta6 (the energy dependence of the boundary
    # condition, largest for the deeper states); rtol 1e-10 -> 1e-12 by < 3e-8
    for v, tol in ((0.9, 5e-5), (3.0, 1e-5), (30.0, 1e-6)):
        k = vdw_kappa(v)
        assert vdw_kappa(v, x_short=0.05) == pytest.approx(k, rel=tol)
        assert vdw_kappa(v, rtol=1e-12) == pytest.approx(k, rel=1e-7)
    # the shipped table against direct solves
    beta6 = 2 * CS.r_vdw
    for v in (150.0, 700.0):
        direct = binding_energy_khz(1.0, CS, model="effective-range", r_star=0.0) * (vdw_kappa(v / beta6) / beta6) ** 2
        assert binding_energy_khz(v, CS, model="van-der-waals") == pytest.approx(direct, rel=1e-5)


@pytest.mark.parametrize("truth, r_star", [("van-der-waals", None), ("effective-range", 600.0)])
def test_calibration_prefers_the_generating_model(truth, r_star):
    # invented calibration: b0 = 550 G, width 10 G, a_bg 200 a0; 12 fields with a from
    # about 2 to 100 r_vdW, 0.5 % errors, energies from the generating model
    rng = np.random.default_rng(4)
    b = 550.0 + np.geomspace(0.025, 9.0, 12)
    a = resonance_scattering_length(b, 550.0, -10.0, 200.0)
    e = binding_energy_khz(a, CS, model=truth, r_star=r_star)
    err = 0.005 * e
    e = e * (1 + 0.005 * rng.standard_normal(e.size))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fits, preferred = compare_binding_models(b, e, err, CS, (549.9, -9.0, 190.0), r_star=600.0)
    assert preferred == truth
    best = fits[0]
    assert best.model == truth and best.chi2 < 3 * best.dof
    np.testing.assert_allclose(best.params, [550.0, -10.0, 200.0], rtol=0.02)
    assert best.covariance.shape == (3, 3)


def test_resonance_gives_binding_energies_with_each_model():
    res = lf.FeshbachResonance(550.0, -10.0, 200.0)
    b = np.array([550.5, 552.0])
    for model, r_star in (("universal", None), ("effective-range", 300.0), ("van-der-waals", None)):
        np.testing.assert_allclose(res.binding_energy_khz(b, CS, model=model, r_star=r_star),
                                   binding_energy_khz(res.a(b), CS, model=model, r_star=r_star), rtol=1e-14)


def test_van_der_waals_boundary_condition_returns_its_scattering_length():
    # integrating the short-range condition set for a at E = 0 gives a back (docs/feshbach.md)
    for v in (0.6, 3.0, 30.0):
        assert vdw_scattering_length(v) == pytest.approx(v, rel=1e-7)


def test_universal_inverse():
    a = np.array([300.0, 3000.0])
    np.testing.assert_allclose(universal_scattering_length(binding_energy_khz(a, CS), CS), a, rtol=1e-13)
