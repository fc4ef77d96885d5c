"""Two-species overlaps in harmonic traps against numerical integration.

The reference densities are built here from scipy.constants and the potentials alone:
n_s(r) = N_s exp(-U_s(r)/k_B T_s)/Z_s with U_s = (m_s/2) sum omega_s,i^2 x_i^2 + m_s g z
(gravity along -z, so the cloud centre sits at z = -g/omega_s,z^2) and Z_s by quadrature;
the integral over a 3-D grid (trapezoid rule, spacing a fraction of the narrowest width:
its error for Gaussians is far below 1e-12) and per axis by scipy quad.
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import quad

from lossfit.errors import LossfitValueError
from lossfit.experiment.mixture_trap import STANDARD_GRAVITY, MixtureTrap
from lossfit.experiment.trap import HarmonicTrap
from lossfit.species import species

CS, LI = species("133Cs"), species("6Li")
F_CS = (40.0, 45.0, 180.0)      # Hz, an invented crossed optical trap (Cs sags by 7.7 um)
F_LI = (90.0, 101.0, 405.0)     # Hz, the same beams felt by Li (sqrt(alpha/m) scaling, 1.5 um sag)
N_B, N_X = 4.0e4, 1.5e4


def _axis_density(mass, omega, kt, g_axis):
    """Normalised 1-D Boltzmann profile exp(-U/kT)/Z in the potential (m/2) w^2 x^2 + m g x."""
    u = lambda y: 0.5 * mass * omega ** 2 * y ** 2 + mass * g_axis * y
    centre = -g_axis / omega ** 2
    width = math.sqrt(kt / (mass * omega ** 2))
    z = quad(lambda y: math.exp(-(u(y) - u(centre)) / kt), centre - 40 * width, centre + 40 * width,
             epsabs=0, epsrel=1e-13, points=[centre])[0]
    return lambda x: np.exp(-(u(x) - u(centre)) / kt) / z


def _reference_integral_grid(t_b, t_x, g):
    kt_b, kt_x = sc.k * t_b * 1e-9, sc.k * t_x * 1e-9
    w_b, w_x = 2 * math.pi * np.array(F_CS), 2 * math.pi * np.array(F_LI)
    axes, profiles_b, profiles_x = [], [], []
    for i in range(3):
        g_axis = g if i == 2 else 0.0
        s_b = math.sqrt(kt_b / (CS.mass * w_b[i] ** 2))
        s_x = math.sqrt(kt_x / (LI.mass * w_x[i] ** 2))
        c_b, c_x = -g_axis / w_b[i] ** 2, -g_axis / w_x[i] ** 2
        lo = min(c_b - 12 * s_b, c_x - 12 * s_x)
        hi = max(c_b + 12 * s_b, c_x + 12 * s_x)
        x = np.linspace(lo, hi, int((hi - lo) / (0.4 * min(s_b, s_x))) + 1)
        axes.append(x)
        profiles_b.append(_axis_density(CS.mass, w_b[i], kt_b, g_axis)(x))
        profiles_x.append(_axis_density(LI.mass, w_x[i], kt_x, g_axis)(x))
    # the full 3-D integrand on the grid (no factorisation used)
    nb = N_B * profiles_b[0][:, None, None] * profiles_b[1][None, :, None] * profiles_b[2][None, None, :]
    nx = N_X * profiles_x[0][:, None, None] * profiles_x[1][None, :, None] * profiles_x[2][None, None, :]
    cell = np.prod([x[1] - x[0] for x in axes])
    return float(np.sum(nb ** 2 * nx) * cell) * 1e-12          # m^-6 -> cm^-6


@pytest.mark.parametrize("t_b, t_x, gravity", [(200.0, 200.0, True), (150.0, 600.0, True), (300.0, 90.0, False)])
def test_overlap_against_a_three_dimensional_grid(t_b, t_x, gravity):
    trap = MixtureTrap(CS, LI, F_CS, F_LI, gravity=gravity)
    result = trap.overlap(N_B, N_X, t_b, t_x)
    reference = _reference_integral_grid(t_b, t_x, sc.g if gravity else 0.0)
    assert result.integral == pytest.approx(reference, rel=1e-6)
    assert result.mean_nb_nx == pytest.approx(reference / N_B, rel=1e-6)
    assert result.mean_nb2 == pytest.approx(reference / N_X, rel=1e-6)


def test_overlap_per_axis_by_quad_with_a_large_sag():
    # A weaker vertical trap for Cs: the clouds separate by more than two widths and the
    # overlap drops by a Gaussian factor ~ 0.004; per-axis quad of the same reference profiles.
    f_cs = (40.0, 45.0, 90.0)
    trap = MixtureTrap(CS, LI, f_cs, F_LI)
    t = 250.0
    kt = sc.k * t * 1e-9
    w_b, w_x = 2 * math.pi * np.array(f_cs), 2 * math.pi * np.array(F_LI)
    product = 1.0
    for i in range(3):
        g_axis = sc.g if i == 2 else 0.0
        c_b, c_x = -g_axis / w_b[i] ** 2, -g_axis / w_x[i] ** 2
        s_max = math.sqrt(kt / (LI.mass * w_x[i] ** 2)) + math.sqrt(kt / (CS.mass * w_b[i] ** 2))
        p_b, p_x = _axis_density(CS.mass, w_b[i], kt, g_axis), _axis_density(LI.mass, w_x[i], kt, g_axis)
        lo, hi = min(c_b, c_x) - 15 * s_max, max(c_b, c_x) + 15 * s_max
        product *= quad(lambda x: p_b(x) ** 2 * p_x(x), lo, hi, points=[c_b, c_x], epsabs=0, epsrel=1e-12,
                        limit=200)[0]
    result = trap.overlap(N_B, N_X, t)
    assert result.integral == pytest.approx(N_B ** 2 * N_X * product * 1e-12, rel=1e-8)
    no_sag = MixtureTrap(CS, LI, f_cs, F_LI, gravity=False).overlap(N_B, N_X, t).integral
    assert result.integral < 0.1 * no_sag


def test_sag_difference():
    # Delta z = g (1/omega_X,z^2 - 1/omega_B,z^2), with scipy's standard gravity
    trap = MixtureTrap(CS, LI, F_CS, F_LI)
    expected = sc.g * (1 / (2 * math.pi * F_LI[2]) ** 2 - 1 / (2 * math.pi * F_CS[2]) ** 2) * 1e6
    assert trap.sag_difference_um == pytest.approx(expected, rel=1e-12)
    assert STANDARD_GRAVITY == sc.g
    assert MixtureTrap(CS, LI, F_CS, F_LI, gravity=False).sag_difference_um == 0.0
    assert MixtureTrap(CS, LI, F_CS, F_LI, gravity=9.81).sag_difference_um == pytest.approx(
        expected * 9.81 / sc.g, rel=1e-12)


def test_equal_traps_without_sag_give_the_identical_atom_integral():
    # One species in one trap: int n^3 = N <n^2> (lossfit.experiment.trap, Weber et al.,
    # PRL 91, 123201 (2003)).
    freqs = (95.0, 130.0, 17.0)
    trap = MixtureTrap(CS, CS, freqs, freqs, gravity=False)
    n, t = np.array([1e4, 8e4]), np.array([80.0, 400.0])
    result = trap.overlap(n, n, t)
    single = HarmonicTrap(freqs)
    assert np.allclose(result.integral, n * single.mean_n2(n, t, CS), rtol=1e-12, atol=0)
    assert np.allclose(result.peak_density_b, single.peak_density(n, t, CS), rtol=1e-12, atol=0)
    assert np.allclose(result.peak_density_x, result.peak_density_b, rtol=1e-14, atol=0)
    # equal vertical frequencies cancel the sag even with gravity on
    assert MixtureTrap(CS, CS, freqs, freqs).overlap(n, n, t).integral == pytest.approx(result.integral, rel=1e-14)


def test_peak_densities_and_widths():
    trap = MixtureTrap(CS, LI, F_CS, F_LI)
    t_b, t_x = 120.0, 300.0
    wb, wx = trap.cloud_widths_um(t_b, t_x)
    kt_b, kt_x = sc.k * t_b * 1e-9, sc.k * t_x * 1e-9
    for width, mass, freqs, kt in ((wb, CS.mass, F_CS, kt_b), (wx, LI.mass, F_LI, kt_x)):
        expected = np.sqrt(kt / (mass * (2 * math.pi * np.array(freqs)) ** 2)) * 1e6
        assert np.allclose(width, expected, rtol=1e-8, atol=0)
    result = trap.overlap(N_B, N_X, t_b, t_x)
    assert result.peak_density_b == pytest.approx(N_B / np.prod(np.sqrt(2 * math.pi) * wb * 1e-4), rel=1e-12)
    assert result.peak_density_x == pytest.approx(N_X / np.prod(np.sqrt(2 * math.pi) * wx * 1e-4), rel=1e-12)


def test_broadcasting_over_numbers_and_temperatures():
    trap = MixtureTrap(CS, LI, F_CS, F_LI)
    t = np.array([100.0, 200.0, 400.0])
    result = trap.overlap(N_B, N_X, t, 2 * t)
    assert result.integral.shape == (3,)
    for k in range(3):
        assert result.integral[k] == pytest.approx(trap.overlap(N_B, N_X, t[k], 2 * t[k]).integral, rel=1e-14)


@pytest.mark.parametrize("kwargs, argument", [
    (dict(boson="Xx1"), "boson"),
    (dict(other=3), "other"),
    (dict(frequencies_b_hz=(10.0, 20.0)), "frequencies_b_hz"),
    (dict(frequencies_x_hz=(10.0, -20.0, 30.0)), "frequencies_x_hz"),
    (dict(frequencies_x_hz=None), "frequencies_x_hz"),
    (dict(gravity=-9.8), "gravity"),
    (dict(gravity="down"), "gravity"),
])
def test_bad_construction_names_the_argument(kwargs, argument):
    args = dict(boson=CS, other=LI, frequencies_b_hz=F_CS, frequencies_x_hz=F_LI)
    args.update(kwargs)
    gravity = args.pop("gravity", True)
    with pytest.raises(LossfitValueError) as info:
        MixtureTrap(**args, gravity=gravity)
    assert info.value.argument == argument


@pytest.mark.parametrize("args, argument", [
    ((-1.0, N_X, 100.0), "n_b"), ((N_B, np.nan, 100.0), "n_x"), ((N_B, N_X, 0.0), "temperature_nk"),
    ((N_B, N_X, 100.0, -3.0), "temperature_x_nk"),
])
def test_bad_overlap_input_names_the_argument(args, argument):
    with pytest.raises(LossfitValueError) as info:
        MixtureTrap(CS, LI, F_CS, F_LI).overlap(*args)
    assert info.value.argument == argument
