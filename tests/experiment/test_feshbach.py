"""Tests of lossfit.experiment.feshbach against closed forms, Monte Carlo and scipy quadrature.

Scenario (invented for these tests, not a real resonance): a broad resonance of 39K
atoms at b0 = 350 G, width -45 G, a_bg = -25 a0, whose a > 0 branch lies below b0.
"""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import quad

from lossfit.errors import LossfitValueError
from lossfit.experiment.feshbach import (
    FeshbachResonance,
    OverlappingResonances,
    ScatteringLengthTable,
    average_over_field_noise,
    binding_energy_khz,
    calibrate_from_binding_energies,
)
from lossfit.species import species

B0, WIDTH, ABG = 350.0, -45.0, -25.0
K39 = species("39K")


@pytest.fixture
def res():
    return FeshbachResonance(b0=B0, width=WIDTH, a_bg=ABG)


# --- single resonance ---------------------------------------------------------------------

def test_single_resonance_landmarks(res):
    # a(B) = a_bg (1 - Delta/(B - B0)) (Chin et al., RMP 82, 1225 (2010)):
    # zero crossing at B0 + Delta, a = 2 a_bg at B0 - Delta, a -> a_bg far away
    assert res.a(B0 + WIDTH) == pytest.approx(0.0, abs=1e-12)
    assert res.zero_crossing == B0 + WIDTH
    assert res.a(B0 - WIDTH) == pytest.approx(2 * ABG, rel=1e-14)
    assert res.a(1e9) == pytest.approx(ABG, rel=1e-6)
    # a > 0 just below this resonance (a_bg Delta > 0), a < 0 just above
    assert res.a(B0 - 0.1) > 10000 and res.a(B0 + 0.1) < -10000
    # slope by central difference
    h = 1e-4
    assert res.da_dB(340.0) == pytest.approx((res.a(340.0 + h) - res.a(340.0 - h)) / (2 * h), rel=1e-8)


def test_field_round_trips_both_sides(res):
    fields = np.array([300.0, 320.0, 345.0, 349.9, 350.1, 360.0, 500.0])
    assert res.field(res.a(fields)) == pytest.approx(fields, rel=1e-13)
    a_values = np.array([-5000.0, -300.0, 0.0, 50.0, 800.0, 20000.0])
    assert res.a(res.field(a_values)) == pytest.approx(a_values, rel=1e-9, abs=1e-9)
    assert res.field(800.0, side="below") < B0
    assert res.field(-300.0, side="above") > B0


def test_field_wrong_side_and_singular_inputs_raise(res):
    # positive a beyond a_bg is reached only below this resonance
    with pytest.raises(LossfitValueError, match="only below") as info:
        res.field(2000.0, side="above")
    assert info.value.argument == "a"
    with pytest.raises(LossfitValueError, match="only above"):
        res.field(np.array([-3000.0, 500.0]), side="below")
    with pytest.raises(LossfitValueError, match="resonance position") as info:
        res.a(B0)
    assert info.value.argument == "B"
    with pytest.raises(LossfitValueError, match="a_bg"):
        res.field(ABG)
    with pytest.raises(LossfitValueError, match="side"):
        res.field(100.0, side="left")
    with pytest.raises(LossfitValueError, match="width"):
        FeshbachResonance(b0=B0, width=0.0, a_bg=ABG)
    with pytest.raises(LossfitValueError, match="a_bg"):
        FeshbachResonance(b0=B0, width=WIDTH, a_bg=0.0)


def test_linear_uncertainty_propagation_matches_monte_carlo(res):
    # small parameter errors => linear propagation exact to first order; check std and the
    # correlation between two fields against 200k Monte Carlo draws
    cov = np.array([[0.02 ** 2, 0.3 * 0.02 * 0.4, 0.0],
                    [0.3 * 0.02 * 0.4, 0.4 ** 2, -0.5 * 0.4 * 0.3],
                    [0.0, -0.5 * 0.4 * 0.3, 0.3 ** 2]])
    fields = np.array([330.0, 346.0])
    lin = res.a_covariance(fields, cov)
    rng = np.random.default_rng(20261202)
    draws = rng.multivariate_normal([B0, WIDTH, ABG], cov, size=200_000)
    a_mc = draws[:, 2:3] * (1.0 - draws[:, 1:2] / (fields - draws[:, 0:1]))
    mc = np.cov(a_mc.T)
    assert np.sqrt(np.diag(lin)) == pytest.approx(np.sqrt(np.diag(mc)), rel=0.01)
    corr_lin = lin[0, 1] / math.sqrt(lin[0, 0] * lin[1, 1])
    corr_mc = mc[0, 1] / math.sqrt(mc[0, 0] * mc[1, 1])
    assert corr_lin == pytest.approx(corr_mc, abs=0.01)
    assert res.a_std(fields, cov) == pytest.approx(np.sqrt(np.diag(lin)), rel=1e-12)
    with pytest.raises(LossfitValueError, match="covariance"):
        res.a_std(340.0)
    with pytest.raises(LossfitValueError, match="covariance"):
        res.a_std(340.0, np.eye(2))


# --- overlapping resonances -----------------------------------------------------------------

def test_overlapping_resonances_product_and_inverse(res):
    one = OverlappingResonances([(B0, WIDTH)], a_bg=ABG)
    fields = np.array([300.0, 349.0, 351.0, 400.0])
    assert one.a(fields) == pytest.approx(res.a(fields), rel=1e-14)
    two = OverlappingResonances([(380.0, 2.0), (B0, WIDTH)], a_bg=ABG)
    # product formula, Chin et al. (2010)
    expected = ABG * (1 - WIDTH / (fields - B0)) * (1 - 2.0 / (fields - 380.0))
    assert two.a(fields) == pytest.approx(expected, rel=1e-14)
    assert two.field(two.a(340.0), resonance=0, side="below") == pytest.approx(340.0, rel=1e-12)
    assert two.field(two.a(381.0), resonance=1, side="above") == pytest.approx(381.0, rel=1e-12)
    assert two.field(two.a(360.0), bracket=(350.5, 366.0)) == pytest.approx(360.0, rel=1e-12)


def test_overlapping_resonances_ambiguity_and_errors():
    two = OverlappingResonances([(B0, WIDTH), (380.0, 2.0)], a_bg=ABG)
    # between the poles a(B) runs from -inf up to a maximum and back to -inf: two roots
    with pytest.raises(LossfitValueError, match="several fields"):
        two.field(two.a(360.0), resonance=0, side="above")
    with pytest.raises(LossfitValueError, match="not reached"):
        two.field(1e6, bracket=(351.0, 360.0))
    with pytest.raises(LossfitValueError, match="resonance position"):
        two.a(380.0)
    with pytest.raises(LossfitValueError, match="bracket"):
        two.field(10.0, bracket=(340.0, 360.0))
    with pytest.raises(LossfitValueError, match="resonance"):
        two.field(10.0, resonance=5)
    with pytest.raises(LossfitValueError, match="resonances"):
        OverlappingResonances([(B0, WIDTH), (B0, 1.0)], a_bg=ABG)


# --- tabulated a(B) ---------------------------------------------------------------------------

def test_table_interpolates_monotonically_and_inverts(res):
    grid = np.linspace(300.0, 348.0, 400)
    table = ScatteringLengthTable(grid, res.a(grid))
    probe = np.array([301.3, 322.2, 347.1])
    assert table.a(probe) == pytest.approx(res.a(probe), rel=1e-5)      # PCHIP O(h^3) error
    assert table.field(table.a(probe)) == pytest.approx(probe, rel=1e-12)
    fine = np.linspace(300.0, 348.0, 5001)
    assert np.all(np.diff(table.a(fine)) > 0)                            # monotone interpolant
    with pytest.raises(LossfitValueError, match="table range"):
        table.a(349.0)
    with pytest.raises(LossfitValueError, match="tabulated range"):
        table.field(1e5)
    with pytest.raises(LossfitValueError, match="monotonic"):
        ScatteringLengthTable([1.0, 2.0, 3.0], [1.0, 3.0, 2.0])
    with pytest.raises(LossfitValueError, match="increasing"):
        ScatteringLengthTable([1.0, 3.0, 2.0], [1.0, 2.0, 3.0])


# --- field noise --------------------------------------------------------------------------------

def test_field_noise_average_gaussian_moments():
    # E[B^2] = B^2 + s^2 and E[B^4] = B^4 + 6 B^2 s^2 + 3 s^4 (Gaussian moments);
    # E[exp(kB)] = exp(k B + k^2 s^2 / 2) (moment generating function)
    b, s = np.array([340.0, 351.5]), 0.07
    assert average_over_field_noise(lambda x: x ** 2, b, s) == pytest.approx(b ** 2 + s ** 2, rel=1e-14)
    assert average_over_field_noise(lambda x: x ** 4, b, s) == pytest.approx(
        b ** 4 + 6 * b ** 2 * s ** 2 + 3 * s ** 4, rel=1e-13)
    k = 3.0
    assert average_over_field_noise(lambda x: np.exp(k * (x - 340.0)), b, s) == pytest.approx(
        np.exp(k * (b - 340.0) + 0.5 * k ** 2 * s ** 2), rel=1e-12)
    assert average_over_field_noise(lambda x: x ** 2, b, 0.0) == pytest.approx(b ** 2, rel=0)


def test_field_noise_average_of_a_loss_peak_matches_quad():
    # a resonant loss feature in B of width 0.3 G blurred by 0.1 G noise; reference by quad
    def loss(bf):
        return 1.0 / (1.0 + ((np.asarray(bf) - 344.0) / 0.3) ** 2)

    s = 0.1

    def blurred(x, b):
        return loss(x) * math.exp(-(x - b) ** 2 / (2 * s * s)) / (math.sqrt(2 * math.pi) * s)

    for b in (343.7, 344.0, 344.5):
        ref, _ = quad(blurred, b - 12 * s, b + 12 * s, args=(b,), epsabs=0, epsrel=1e-12)
        assert average_over_field_noise(loss, b, s, n_nodes=60) == pytest.approx(ref, rel=1e-6)
    # a scalar-only callable is evaluated node by node
    assert average_over_field_noise(lambda x: float(loss(x)), 344.0, s, n_nodes=60) == pytest.approx(
        average_over_field_noise(loss, 344.0, s, n_nodes=60), rel=1e-14)


def test_field_noise_near_pole_raises(res):
    with pytest.raises(LossfitValueError, match="sigma_B"):
        # a threshold-law rate that diverges within 0.01 G of the pole
        average_over_field_noise(lambda x: np.where(np.abs(x - B0) < 0.01, np.inf, 1.0), B0 - 0.05, 0.02)
    with pytest.raises(LossfitValueError, match="sigma_B"):
        average_over_field_noise(res.a, 340.0, -0.1)
    with pytest.raises(LossfitValueError, match="n_nodes"):
        average_over_field_noise(res.a, 340.0, 0.1, n_nodes=0)


# --- binding energies ----------------------------------------------------------------------------

def test_binding_energy_formula():
    # E_b = hbar^2 / (m (a - abar)^2) (Gribakin & Flambaum 1993; Chin et al. 2010), as E_b/h in kHz
    a = 600.0
    m = K39.mass
    a_si = (a - K39.abar) * sc.physical_constants["Bohr radius"][0]
    expected = sc.hbar ** 2 / (m * a_si ** 2) / sc.h / 1e3
    assert binding_energy_khz(a, K39) == pytest.approx(expected, rel=1e-12)
    with pytest.raises(LossfitValueError, match="abar"):
        binding_energy_khz(50.0, K39)


def _synthetic(n=10, rel_err=0.02, seed=None):
    fields = np.linspace(B0 - 3.5, B0 - 0.3, n)          # a from ~ 300 a0 to ~ 3700 a0
    truth = FeshbachResonance(b0=B0, width=WIDTH, a_bg=ABG)
    energies = binding_energy_khz(truth.a(fields), K39)
    errors = rel_err * energies
    if seed is not None:
        energies = energies + errors * np.random.default_rng(seed).standard_normal(n)
    return fields, energies, errors


def test_calibration_recovers_truth_from_exact_data():
    fields, energies, errors = _synthetic()
    fit = calibrate_from_binding_energies(fields, energies, errors, K39, guess=(351.0, -30.0, -40.0))
    assert fit.params == pytest.approx([B0, WIDTH, ABG], rel=1e-7)
    assert fit.chi2 < 1e-10 and fit.dof == 7
    assert fit.resonance.a_std(340.0) > 0


@pytest.mark.slow
def test_calibration_errors_are_calibrated():
    # Frequentist coverage: over repeated noisy data sets (1 % energy errors) the 1-sigma
    # interval should contain the truth 68.3 % of the time; with 400 draws the binomial
    # standard error is 2.3 %, so [0.61, 0.76] is a 3-sigma window. A covariance 1.5x too
    # large would give ~78 %, one 1.5x too small ~58 %.
    truth = np.array([B0, WIDTH, ABG])
    inside = []
    for seed in range(400):
        fields, energies, errors = _synthetic(rel_err=0.01, seed=seed)
        fit = calibrate_from_binding_energies(fields, energies, errors, K39, guess=(351.0, -30.0, -40.0))
        inside.append(np.abs(fit.params - truth) < fit.errors)
    coverage = np.mean(inside, axis=0)
    assert np.all((coverage > 0.61) & (coverage < 0.76)), coverage


def test_calibration_bad_inputs():
    fields, energies, errors = _synthetic()
    guess = (351.0, -30.0, -40.0)
    with pytest.raises(LossfitValueError, match="at least 4") as info:
        calibrate_from_binding_energies(fields[:3], energies[:3], errors[:3], K39, guess=guess)
    assert info.value.argument == "B"
    with pytest.raises(LossfitValueError, match="one side") as info:
        calibrate_from_binding_energies(fields, energies, errors, K39, guess=(348.0, -30.0, -40.0))
    bad = energies.copy()
    bad[2] = -1.0
    with pytest.raises(LossfitValueError, match="E_b_kHz"):
        calibrate_from_binding_energies(fields, bad, errors, K39, guess=guess)
    with pytest.raises(LossfitValueError, match="E_b_err"):
        calibrate_from_binding_energies(fields, energies, 0 * errors, K39, guess=guess)
    with pytest.raises(LossfitValueError, match="guess"):
        calibrate_from_binding_energies(fields, energies, errors, K39, guess=(351.0, -30.0))
    with pytest.raises(LossfitValueError, match="equal length"):
        calibrate_from_binding_energies(fields, energies[:-1], errors, K39, guess=guess)
