"""model="zero-range" at run time: table interpolation, thermal averages, limits.

The universal function s11(k|a|) comes from the project's solver (tests/universal/test_solver.py
checks the solver itself); these tests check what the runtime library does with it.
"""

import math
import warnings

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import quad

import lossfit as lf
from lossfit.universal.tables import load_atom_dimer_table, load_s11_table

CS = lf.species("133Cs")
S0 = lf.S0
LAMBDA = lf.SCALING_FACTOR


@pytest.fixture(autouse=True)
def _quiet():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lf.errors.ValidityWarning)
        yield


def test_interpolation_meets_the_tabulated_nodes_and_both_limits():
    tab = load_s11_table()
    with np.load(lf.universal.tables.table_path()) as d:
        nodes = d["s11"]
    np.testing.assert_allclose(tab.s11(tab.x), nodes, rtol=0, atol=1e-12)
    # unitarity, exact: |s11| = exp(-pi s0) (derivation in docs/solver.md)
    assert abs(tab.s11(1e9)) == pytest.approx(math.exp(-math.pi * S0), rel=1e-6)   # tail decays like 1/x
    # threshold: 1 - |s11|^2 -> c4 x^4
    from lossfit.universal.tables import s11_eval
    x = 1e-5
    assert s11_eval(tab.packed, x)[0] / x ** 4 == pytest.approx(tab.c4, rel=1e-4)
    # within the table's stated phase error (docs/solver.md: <= 1.2e-5 rad) plus O(x^2)
    assert s11_eval(tab.packed, x)[1] == pytest.approx(tab.delta0, abs=3e-5)


def test_low_temperature_limit_is_the_solvers_threshold_law():
    # K3 -> (72 sqrt3 pi^2 c4 / 2) sinh(2 eta)/(sin^2[s0 ln(a/a_-)] + sinh^2 eta) hbar a^4/m
    # (small-k limit of the three-body S-matrix form, docs/solver.md sec. 4).
    tab = load_s11_table()
    eta = 0.05
    ef = lf.Efimov(a_minus=-1000.0, eta_minus=eta)
    a = -np.geomspace(200.0, 5000.0, 13)
    c = 72 * math.sqrt(3) * math.pi ** 2 * tab.c4 / 2 * math.sinh(2 * eta) / (
        np.sin(S0 * np.log(a / -1000.0)) ** 2 + math.sinh(eta) ** 2)
    expected = c * sc.hbar * (a * sc.physical_constants["Bohr radius"][0]) ** 4 / CS.mass * 1e12
    got = lf.l3(a, 0.001, species=CS, efimov=ef, model="zero-range")
    np.testing.assert_allclose(got, expected, rtol=2e-4)
    # the library's threshold law uses the exact constant: the same numbers (the table's
    # threshold values carry its stated 1e-4 accuracy, docs/solver.md)
    ratio = got / lf.l3_threshold(a, species=CS, efimov=ef)
    assert np.all(np.abs(ratio - 1.0) < 2e-4)


@pytest.mark.parametrize("eta", [0.01, 0.1, 1.0])
def test_exact_model_at_zero_temperature_is_the_threshold_law(eta):
    # l3(T -> 0) = l3_threshold and beta(T -> 0) = beta_threshold to 1e-4, |a| from 1e2 to
    # 1e5 a0, both signs: the threshold laws carry the exact zero-range constants of the
    # solver tables (docs/conventions.md). At 1e-12 nK, k_T|a| <= 1e-5: finite-energy
    # corrections (linear in k for beta) are below 1e-5.
    ef = lf.Efimov(a_minus=-1000.0, eta_minus=eta, a_plus=300.0, eta_plus=eta, a_star=1200.0, eta_star=eta)
    a = np.geomspace(1e2, 1e5, 31)
    for values, law in ((lf.l3(-a, 1e-12, species=CS, efimov=ef), lf.l3_threshold(-a, species=CS, efimov=ef)),
                        (lf.l3(a, 1e-12, species=CS, efimov=ef), lf.l3_threshold(a, species=CS, efimov=ef)),
                        (lf.beta(a, 1e-12, species=CS, efimov=ef), lf.beta_threshold(a, species=CS, efimov=ef))):
        np.testing.assert_allclose(values, law, rtol=1e-4)


def test_discrete_scaling_of_k3():
    # K3(lambda a, E/lambda^2) = lambda^4 K3(a, E) (Braaten & Hammer 2006, discrete scale invariance)
    ef = lf.Efimov(a_minus=-900.0, eta_minus=0.1)
    a = -np.geomspace(300.0, 4000.0, 7)
    e = 37.0
    k = lf.k3(a, e, species=CS, efimov=ef, model="zero-range")
    k_scaled = lf.k3(LAMBDA * a, e / LAMBDA ** 2, species=CS, efimov=ef, model="zero-range")
    np.testing.assert_allclose(k_scaled, LAMBDA ** 4 * k, rtol=1e-6)


def test_loss_vanishes_linearly_as_eta_goes_to_zero():
    # K3 is proportional to (1 - exp(-4 eta)) times a function that is smooth at eta = 0.
    a = -np.geomspace(300.0, 4000.0, 5)
    v1 = lf.l3(a, 50.0, species=CS, efimov=lf.Efimov(a_minus=-1000.0, eta_minus=1e-7), model="zero-range")
    v2 = lf.l3(a, 50.0, species=CS, efimov=lf.Efimov(a_minus=-1000.0, eta_minus=2e-7), model="zero-range")
    np.testing.assert_allclose(v2 / v1, 2.0, rtol=1e-5)


def test_unitarity_limit_follows_inverse_square_temperature():
    # |a| -> infinity: L3 = lambda3 / T^2 with
    # lambda3 = 36 sqrt3 pi^2 hbar^5/(m^3 k_B^2) (1 - e^{-2 pi s0})(1 - e^{-4 eta})
    #           / |1 + e^{-pi s0 - 2 eta} e^{i psi(T)}|^2   (Rem et al., PRL 110, 163202 (2013)),
    # so L3 T^2 lies between the two extremes of the log-periodic modulation.
    eta = 0.2
    ef = lf.Efimov(a_minus=-1000.0, eta_minus=eta)
    t = np.geomspace(20.0, 20.0 * LAMBDA ** 2, 40)          # one full period in T
    lam = lf.l3(-1e9, t, species=CS, efimov=ef, model="zero-range") * 1e-12 * (t * 1e-9) ** 2
    base = 36 * math.sqrt(3) * math.pi ** 2 * sc.hbar ** 5 / (CS.mass ** 3 * sc.k ** 2)
    amp = math.exp(-math.pi * S0 - 2 * eta)
    core = base * (1 - math.exp(-2 * math.pi * S0)) * (1 - math.exp(-4 * eta))
    assert np.all(lam <= core / (1 - amp) ** 2 * 1.001) and np.all(lam >= core / (1 + amp) ** 2 * 0.999)
    modulation = (lam.max() - lam.min()) / (lam.max() + lam.min())
    assert 0.5 * 2 * amp < modulation < 1.2 * 2 * amp      # thermal averaging washes out a little
    # the same T^-2 law one period up in T
    np.testing.assert_allclose(lf.l3(-1e9, t * LAMBDA ** 2, species=CS, efimov=ef, model="zero-range")
                               * (t * LAMBDA ** 2) ** 2,
                               lam / 1e-12 / 1e-18, rtol=1e-5)


def test_thermal_average_against_quad():
    m = lf.universal.models.get_model("zero-range")
    from lossfit.rates import three_body_rows
    for eta in (0.005, 0.1, 1.0):
        ef = lf.Efimov(a_minus=-1000.0, eta_minus=eta)
        for t in (1.0, 100.0, 3000.0):
            a = -np.geomspace(5 * CS.r_vdw, 1e6, 6)
            _, params, unit, _ = three_body_rows(a, np.full(a.size, t), CS, ef, "zero-range")
            got = lf.l3(a, t, species=CS, efimov=ef, model="zero-range") / unit
            k = m.three_body_kernel
            for p, g in zip(params, got):
                pts = sorted(x for x in ((1e-3 / p[0]) ** 2, (1e3 / p[0]) ** 2) if x < 60)
                ref = quad(lambda x: k(x, p) * x * x * math.exp(-x) / 2, 0, 60, points=pts or None,
                           epsabs=0, epsrel=1e-12, limit=1000)[0]
                assert g == pytest.approx(ref, rel=1e-6), (eta, t, p)


def test_peak_moves_to_smaller_abs_a_as_temperature_rises():
    # Fact of the trade (common practice, no source): thermal broadening moves the a < 0
    # loss peak to smaller |a|. 133Cs, a_- = -1000 a0, eta = 0.05 (issue 3).
    ef = lf.Efimov(a_minus=-1000.0, eta_minus=0.05)
    a = -np.geomspace(500.0, 2000.0, 600)
    peaks = [abs(a[np.argmax(lf.l3(a, t, species=CS, efimov=ef, model="zero-range"))])
             for t in (10.0, 50.0, 200.0, 400.0)]
    assert all(p1 > p2 for p1, p2 in zip(peaks, peaks[1:]))
    assert peaks[0] == pytest.approx(985.0, abs=5.0)     # measured with this table, 2026-12-02


def test_relaxation_beyond_the_atom_dimer_table_follows_its_measured_approach():
    # Beyond k_AD a = 1e3 relaxation comes from the exact |a| = infinity solution plus the
    # table's last 1/x differences (docs/stm.md 7d): T_AD = 1 - |s_AD|^2 - T_break falls
    # like c/(k_AD a). The join is continuous, and c agrees with the limit that a
    # Richardson (1/k_AD a) extrapolation of the solver's own table gives from its last
    # half-decade (the table's approach; 0.5 % is the stated error of the tail).
    tab = load_atom_dimer_table()
    k_last = tab.kad_max
    t_in, s_in = tab.evaluate(np.array([k_last * (1 - 1e-9), k_last * (1 + 1e-9)]))
    assert t_in[1] == pytest.approx(t_in[0], rel=1e-6)
    assert s_in[1] == pytest.approx(s_in[0], rel=1e-6)
    k1, k2 = k_last / 10 ** 0.25, k_last
    (t1, t2), _ = tab.evaluate(np.array([k1, k2]))
    limit = (t2 * k2 * k2 - t1 * k1 * k1) / (k2 - k1)          # c + d/k: eliminate d
    t_far, _ = tab.evaluate(np.array([1e4, 1e6]))
    assert t_far * np.array([1e4, 1e6]) == pytest.approx([limit, limit], rel=5e-3)
    # and beta is finite and falls like 1/(k a) at fixed T as a grows (no refusal)
    ef = lf.Efimov.universal(-1000.0, 0.05)
    b = lf.beta(np.array([1e7, 1e8]), 3000.0, species=CS, efimov=ef)
    assert b[1] / b[0] == pytest.approx(0.1, rel=0.05)


# --- a > 0: atom-dimer relaxation from the STM table -------------------------------------

def _beta_unit(a):
    return sc.hbar * a * sc.physical_constants["Bohr radius"][0] / CS.mass * 1e6      # hbar a/m in cm^3/s


def _collision_nK(a, kad):
    # E - E_D = 3 hbar^2 k_AD^2 / (4 m), in nK
    a_m = a * sc.physical_constants["Bohr radius"][0]
    return 0.75 * kad ** 2 * sc.hbar ** 2 / (CS.mass * a_m ** 2 * sc.k) * 1e9


def test_atom_dimer_rate_matches_direct_stm_solves():
    # runtime beta(E) (table, spline, unit conversion) against fresh STM solves of the
    # solver (docs/stm.md), below and above the breakup threshold k_AD a = 2/sqrt 3
    from lossfit.universal.solver.stm import above_breakup
    from lossfit.universal.tables import load_atom_dimer_table
    tab = load_atom_dimer_table()
    eta, a_star = 0.1, 1000.0
    ef = lf.Efimov(a_star=a_star, eta_star=eta)
    for a in (700.0, 2500.0):
        kappa_a = tab.kappa_star_a_star * a / a_star
        for kad in (0.3, 1.5, 4.0):
            ref = above_breakup(0.75 * kad ** 2 - 1.0, kappa_a, eta)["beta_deep"] * _beta_unit(a)
            got = lf.beta_energy(a, _collision_nK(a, kad), species=CS, efimov=ef, model="zero-range")
            assert got == pytest.approx(ref, rel=2e-4), (a, kad)


def test_atom_dimer_threshold_law_and_peak_at_a_star():
    # beta -> C_beta sinh(2 eta)/(sin^2[s0 ln(a/a*)] + sinh^2 eta) hbar a/m as T -> 0
    # (Braaten & Hammer, Phys. Rep. 428, 259 (2006), form; C_beta = 19.4935 from both of
    # our solvers, docs/stm.md -- their 20.3 is 4.1 % higher)
    from lossfit.universal.tables import load_atom_dimer_table
    tab = load_atom_dimer_table()
    assert tab.c_beta == pytest.approx(19.4935, rel=2e-4)
    eta = 0.05
    ef = lf.Efimov(a_star=1000.0, eta_star=eta)
    a = np.geomspace(600.0, 1800.0, 11)
    expected = tab.c_beta * math.sinh(2 * eta) / (np.sin(S0 * np.log(a / 1000.0)) ** 2 + math.sinh(eta) ** 2)
    # the approach is linear in k_AD a, i.e. like sqrt(T): measured 3e-3 at the peak at
    # 1e-6 nK and 3e-5 at 1e-10 nK (a narrow peak magnifies the phase's linear term)
    got = lf.beta(a, 1e-10, species=CS, efimov=ef, model="zero-range") / _beta_unit(a)
    np.testing.assert_allclose(got, expected, rtol=1e-4)
    near = lf.beta(a, 1e-6, species=CS, efimov=ef, model="zero-range") / _beta_unit(a)
    dev_ratio = (near / expected - 1)[5] / (got / expected - 1)[5]
    assert 50 < dev_ratio < 200                                 # sqrt(1e4) = 100
    fine = np.geomspace(900.0, 1100.0, 401)
    peak = fine[np.argmax(lf.beta(fine, 1e-10, species=CS, efimov=ef, model="zero-range"))]
    assert peak == pytest.approx(1000.0, rel=1e-3)


def test_discrete_scaling_of_beta():
    # beta(lambda a, T/lambda^2) = lambda beta(a, T) (discrete scale invariance, Braaten & Hammer 2006)
    ef = lf.Efimov(a_star=900.0, eta_star=0.1)
    a = np.geomspace(600.0, 8000.0, 6)
    b = lf.beta(a, 80.0, species=CS, efimov=ef, model="zero-range")
    b_scaled = lf.beta(LAMBDA * a, 80.0 / LAMBDA ** 2, species=CS, efimov=ef, model="zero-range")
    np.testing.assert_allclose(b_scaled, LAMBDA * b, rtol=1e-6)


def test_thermal_beta_against_quad_and_the_unitarity_bound():
    from lossfit.rates import atom_dimer_rows
    m = lf.universal.models.get_model("zero-range")
    k = m.atom_dimer_kernel
    for eta in (0.01, 0.2, 1.0):
        ef = lf.Efimov(a_star=1000.0, eta_star=eta)
        for t in (1.0, 100.0, 2000.0):
            a = np.geomspace(5 * CS.r_vdw, 1e5, 5)
            _, params, unit, _ = atom_dimer_rows(a, np.full(a.size, t), CS, ef, "zero-range")
            got = lf.beta(a, t, species=CS, efimov=ef, model="zero-range") / unit
            # |S| <= 1: beta(E) <= 3 pi hbar/(2 m k_AD), so the average is <= (3 sqrt3 pi/4)(2/sqrt pi)
            assert np.all(got <= 3 * math.sqrt(3) * math.pi / 4 * 2 / math.sqrt(math.pi) * (1 + 1e-9))
            for p, g in zip(params, got):
                kinks = [(c / p[0]) ** 2 for c in (1e-3, 2 / math.sqrt(3), 1e3)]
                pts = sorted(x for x in kinks if x < 60) or None
                ref = quad(lambda x: k(x, p) * 2 / math.sqrt(math.pi) * math.sqrt(x) * math.exp(-x), 0, 60,
                           points=pts, epsabs=0, epsrel=1e-12, limit=1000)[0]
                assert g == pytest.approx(ref, rel=1e-6), (eta, t, p)


def test_fit_with_the_exact_model_recovers_a_minus():
    # Invented spectra generated with the zero-range model itself, then fitted with it.
    ef = lf.Efimov(a_minus=-950.0, eta_minus=0.06)
    rng = np.random.default_rng(3)
    a = -np.geomspace(500.0, 3000.0, 14)
    spectra = []
    for t in (20.0, 150.0):
        m = lf.l3(a, t, species=CS, efimov=ef, model="zero-range")
        spectra.append(lf.LossSpectrum(a, t, m * (1 + 0.1 * rng.standard_normal(a.size)), 0.1 * m))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lf.errors.ConvergenceWarning)
        res = lf.fit(spectra, species=CS, free=["a_minus", "eta_minus"], model="zero-range",
                     walkers=12, steps=600, seed=1, progress=False)
    row = {r["name"]: r for r in res.summary()}["a_minus"]
    assert row["lo95"] <= -950.0 <= row["hi95"]
    assert "approximation" not in res.model.label


@pytest.mark.slow
def test_atom_dimer_amplitude_near_breakup_against_direct_stm():
    # just below and above k_AD a = 2/sqrt 3 the runtime s_AD (Re/Im splines) against
    # fresh STM extractions (docs/stm.md); 1 - |s_AD|^2 is ~1e-6 there, so a spline of
    # ln(1 - |s_AD|^2) would be off by 1e-4 in s_AD (measured)
    from lossfit.universal.solver.stm import s_ad_from_stm
    from lossfit.universal.tables import load_atom_dimer_table
    tab = load_atom_dimer_table()
    for kad in (1.114, 1.197):
        _, s = tab.evaluate(np.array([kad]))
        assert abs(s[0] - s_ad_from_stm(kad)) < 3e-5, kad


def test_validity_warning_at_van_der_waals_energies():
    # k_B T near hbar^2/(m r_vdW^2) probes the short-range potential (zero-range theory needs
    # E << E_vdW: common practice, no source); lossfit warns above 0.1 E_vdW, not below
    ef = lf.Efimov(a_minus=-900.0, eta_minus=0.1)
    e_vdw = CS.vdw_energy_nK
    # E_vdW = hbar^2/(m r_vdW^2) in nK, from CODATA constants here
    expected = sc.hbar ** 2 / (CS.mass * (CS.r_vdw * sc.physical_constants["Bohr radius"][0]) ** 2) / sc.k * 1e9
    assert e_vdw == pytest.approx(expected, rel=1e-12)
    with warnings.catch_warnings():
        warnings.simplefilter("error", lf.errors.ValidityWarning)
        lf.l3(-1e4, 0.09 * e_vdw, species=CS, efimov=ef)
        with pytest.raises(lf.errors.ValidityWarning, match="van der Waals"):
            lf.l3(-1e4, 1e6, species=CS, efimov=ef)
        with pytest.raises(lf.errors.ValidityWarning, match="collision energy"):
            lf.k3(-1e4, 0.2 * e_vdw, species=CS, efimov=ef)


def test_fit_result_records_points_outside_the_validity_range():
    ef = lf.Efimov(a_minus=-900.0, eta_minus=0.1)
    a = -np.array([300.0, 600.0, 900.0, 1500.0, 3000.0])        # 300 a0 < 5 r_vdW = 505 a0
    t = np.array([50.0, 50.0, 50.0, 50.0, 20000.0])              # 20 uK > 0.1 E_vdW = 12.8 uK
    v = lf.l3(a, t, species=CS, efimov=ef)
    spec = lf.LossSpectrum(a, t, v, 0.1 * v, kind="l3")
    res = lf.fit(spec, species=CS, free=["a_minus", "eta_minus"], walkers=8, steps=40, seed=1, progress=False,
                 initial={"a_minus": -900.0, "eta_minus": 0.1})
    flagged = {(p["point"], tuple(p["reasons"])) for p in res.outside_validity}
    assert flagged == {(0, ("|a| < 5 r_vdW",)), (4, ("k_B T > 0.1 E_vdW",))}
    assert any("validity" in w for w in res.warnings)
    assert res.to_dict()["outside_validity"][0]["a"] == -300.0


def test_weakly_bound_dimers_are_flagged_for_three_body_loss():
    # a > 0 with k_B T above E_b = hbar^2/(m a^2): shallow dimers formed by recombination
    # are not lost on formation (common practice, no source), so those L3 points are listed
    from lossfit.rates import validity_flags
    a0 = sc.physical_constants["Bohr radius"][0]
    e_b = sc.hbar ** 2 / (CS.mass * (np.array([3000.0, 6000.0]) * a0) ** 2) / sc.k * 1e9     # nK
    t = np.sqrt(e_b[0] * e_b[1])                                  # between the two binding energies
    flags = validity_flags(np.array([3000.0, 6000.0, -6000.0]), t, CS)
    assert flags["weak_dimer"].tolist() == [False, True, False]
    ef = lf.Efimov(a_plus=2000.0, eta_plus=0.1)
    a = np.array([1000.0, 3000.0, 6000.0])
    for channel, text in ((None, "fitted with the observed channel"), ("total", "not lost on formation")):
        v = lf.l3(a, t, species=CS, efimov=ef, channel=channel)
        spec = lf.LossSpectrum(a, t, v, 0.1 * v, kind="l3", channel=channel)
        res = lf.fit(spec, species=CS, free=["a_plus", "eta_plus"], walkers=8, steps=20, seed=1, progress=False,
                     initial={"a_plus": ef.a_plus, "eta_plus": 0.1})
        assert [p["point"] for p in res.outside_validity] == [2]
        assert text in res.outside_validity[0]["reasons"][0]
        assert res.loss_channels[0]["channel"] == (channel or "observed")
        assert res.to_dict()["loss_channels"][0]["trap_depth"].startswith("assumed 10 k_B T" if channel is None
                                                                          else "not used")


@pytest.mark.parametrize("grid", ["uniform", "uneven"])
def test_table_splines_are_scipys_not_a_knot_splines(grid):
    # lossfit writes the not-a-knot cubic spline out (start-up time); scipy's CubicSpline
    # (the default not-a-knot end conditions) is the reference
    from scipy.interpolate import CubicSpline

    from lossfit.universal.tables import spline_coefficients
    rng = np.random.default_rng(4)
    x = np.linspace(-7.0, 7.0, 241) if grid == "uniform" else np.cumsum(rng.uniform(0.1, 1.0, 30))
    y = np.sin(x) * np.exp(0.2 * x) + rng.normal(0.0, 0.1, x.size)
    ref = CubicSpline(x, y).c
    np.testing.assert_allclose(spline_coefficients(x, y), ref, rtol=0, atol=1e-12 * np.abs(ref).max())


def test_log_gamma_against_scipy():
    # lossfit.constants computes arg Gamma(1 + i s0) by Stirling's series (start-up time);
    # scipy.special.loggamma is the reference, here at several complex arguments
    from scipy.special import loggamma

    from lossfit.constants import _log_gamma
    for z in (1 + 1j * S0, 0.3 + 2j, 1 + 5j, 2.5 - 0.7j, 40 + 1j):
        assert abs(_log_gamma(z) - loggamma(z)) < 1e-12
