"""Public rate API: k3, beta_energy, l3, beta (docs/architecture.md, units) against independent physics.

References and derivations
--------------------------
* Threshold laws: Braaten & Hammer, Phys. Rep. 428, 259 (2006); lossfit L3 = 3 C hbar a^4/m
  (atoms lost, thermal gas; docs/conventions.md).
* Three-body J=0 unitarity bound, lossfit convention: K3(E) <= 72 sqrt(3) pi^2 hbar^5/(m^3 E^2)
  (derivation in lossfit/universal/models.py); its Boltzmann average over
  P3(E) = E^2 e^{-E/kT}/(2 (kT)^3) is <E^-2> = 1/(2 (kT)^2), giving
  L3 = 36 sqrt(3) pi^2 hbar^5/(m^3 (k_B T)^2): the prefactor of Rem et al., PRL 110,
  163202 (2013) (their (1 - e^{-4 eta}) -> 1, i.e. full absorption).
* Atom-dimer s-wave bound, derived here: sigma_inel <= pi/k^2 for distinguishable
  particles, so beta(E) <= v pi/k^2 = pi hbar/(mu k), mu = 2m/3, E = hbar^2 k^2/(2 mu).
  With <E^{-1/2}> = (2/sqrt(pi)) (kT)^{-1/2} over P2:
  beta = sqrt(2 pi) hbar^2 / (mu^{3/2} sqrt(k_B T)).
* Measured 7Li unitarity coefficient lambda3 = 2.5(3)stat(6)syst x 1e-20 uK^2 cm^6/s
  (Rem et al. 2013, as quoted in docs/architecture.md, conventions).
"""

import math
import warnings

import numpy as np
import pytest
from independent import A0, HBAR, KB, S0, SQRT_PI
from scipy.integrate import quad
from scipy.special import gammainc

import lossfit as lf
from lossfit.errors import LossfitValueError, ValidityWarning

UNITARITY_3 = 72 * math.sqrt(3) * math.pi ** 2

CS = lf.species("133Cs")
LI = lf.species("7Li")
EF = lf.Efimov(a_minus=-957.0, eta_minus=0.05, a_star=1020.0, eta_star=0.07, a_plus=210.0,
               eta_plus=0.06)


# ---------------------------------------------------------------------------- references (SI)

# Exact zero-range threshold coefficients (events; docs/conventions.md), written out again:
# P = 128 pi^2 (4 pi - 3 sqrt 3) (analytic, Braaten & Hammer 2006), C_- = P coth(pi s0)/2
# and C_beta = 19.4935 (the project's solvers, confirmed independently to 1e-6).
P_SHALLOW = 128 * math.pi ** 2 * (4 * math.pi - 3 * math.sqrt(3))
C_MINUS = P_SHALLOW / 2 / math.tanh(math.pi * S0)


def c_threshold(a, ef):
    """3 C(a) (lossfit convention), written out again."""
    if a < 0:
        s = math.sin(S0 * math.log(a / ef.a_minus))
        return 3 * C_MINUS * math.sinh(2 * ef.eta_minus) / (s * s + math.sinh(ef.eta_minus) ** 2)
    t = S0 * math.log(a / ef.a_plus)
    e = ef.eta_plus
    return 3 * ((P_SHALLOW * (math.sin(t) ** 2 + math.sinh(e) ** 2) + C_MINUS * math.sinh(2 * e))
                / (math.sinh(math.pi * S0 + e) ** 2 + math.cos(t) ** 2))


def c_beta(a, ef):
    s = math.sin(S0 * math.log(a / ef.a_star))
    return 19.4935 * math.sinh(2 * ef.eta_star) / (s * s + math.sinh(ef.eta_star) ** 2)


def k3_threshold_si(a, sp, ef):
    return c_threshold(a, ef) * HBAR * (a * A0) ** 4 / sp.mass                 # m^6/s


def k3_bound_si(energy_j, sp):
    return UNITARITY_3 * HBAR ** 5 / (sp.mass ** 3 * energy_j ** 2)             # m^6/s


def beta_threshold_si(a, sp, ef):
    return c_beta(a, ef) * HBAR * a * A0 / sp.mass                              # m^3/s


def beta_bound_si(energy_j, sp):
    mu = 2 * sp.mass / 3
    k = math.sqrt(2 * mu * energy_j) / HBAR
    return math.pi * HBAR / (mu * k)                                            # m^3/s


def quad_thermal_l3(a, t_nk, sp, ef):
    """Capped L3 in cm^6/s: quad of min(K3_thr, bound(E)) P3(E) in x = E/kT, split at the kink."""
    kt = KB * t_nk * 1e-9
    k0 = k3_threshold_si(a, sp, ef)
    xc = math.sqrt(UNITARITY_3 * HBAR ** 5 / (sp.mass ** 3 * kt ** 2) / k0)
    f = lambda x: (k0 if x <= xc else k3_bound_si(x * kt, sp)) * 0.5 * x * x * math.exp(-x)
    kw = dict(epsabs=0.0, epsrel=1e-12, limit=500)
    edges = sorted({0.0, 60.0} | ({xc} if xc < 60.0 else set()))
    total = sum(quad(f, lo, hi, **kw)[0] for lo, hi in zip(edges[:-1], edges[1:]))
    total += quad(f, 60.0, np.inf, **kw)[0]
    return total * 1e12, xc


def quad_thermal_beta(a, t_nk, sp, ef):
    """Capped beta in cm^3/s; the x^{1/2} endpoint on the first interval by QAWS."""
    kt = KB * t_nk * 1e-9
    b0 = beta_threshold_si(a, sp, ef)
    bound = lambda x: beta_bound_si(x * kt, sp)
    xc = (beta_bound_si(kt, sp) / b0) ** 2                        # bound(x) = bound(1)/sqrt(x)
    g = lambda x: (b0 if x <= xc else bound(x)) * 2 / SQRT_PI * math.exp(-x)
    kw = dict(epsabs=0.0, epsrel=1e-12, limit=500)
    edges = sorted({0.0, 60.0} | ({xc} if xc < 60.0 else set()))
    total = quad(g, edges[0], edges[1], weight="alg", wvar=(0.5, 0.0), **kw)[0]
    total += sum(quad(lambda x: g(x) * math.sqrt(x), lo, hi, **kw)[0]
                 for lo, hi in zip(edges[1:-1], edges[2:]))
    total += quad(lambda x: g(x) * math.sqrt(x), 60.0, np.inf, **kw)[0]
    return total * 1e6, xc


def rel(a, b):
    return np.abs(np.asarray(a) - b) / np.abs(b)


# ---------------------------------------------------------------------------- fixed energy

@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_k3_threshold_model_is_energy_independent(sp):
    a = np.array([-5e4, -957.0, -300.0, 210.0, 800.0, 3e5])
    for e_nk in (0.1, 10.0, 1e3, 1e5):
        got = lf.k3(a, e_nk, species=sp, efimov=EF, model="threshold")
        assert np.allclose(got, lf.l3_threshold(a, species=sp, efimov=EF), rtol=1e-13, atol=0)


@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_k3_capped_is_min_of_law_and_bound(sp):
    for a in (-1e6, -2e4, -957.0, -300.0, 210.0, 800.0, 3e4, 1e6):
        for e_nk in (0.3, 10.0, 300.0, 3e3):
            expected = min(k3_threshold_si(a, sp, EF), k3_bound_si(KB * e_nk * 1e-9, sp)) * 1e12
            got = lf.k3(a, e_nk, species=sp, efimov=EF, model="capped")
            assert got == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_beta_energy_capped_is_min_of_law_and_bound(sp):
    for a in (300.0, 1020.0, 3e4, 1e6):
        for e_nk in (0.3, 10.0, 300.0, 3e3):
            expected = min(beta_threshold_si(a, sp, EF), beta_bound_si(KB * e_nk * 1e-9, sp)) * 1e6
            assert lf.beta_energy(a, e_nk, species=sp, efimov=EF, model="capped") == \
                pytest.approx(expected, rel=1e-12)
            assert lf.beta_energy(a, e_nk, species=sp, efimov=EF, model="threshold") == \
                pytest.approx(beta_threshold_si(a, sp, EF) * 1e6, rel=1e-12)


def test_capped_bound_is_reached_at_large_a():
    # At |a| = 1e7 a0 and 100 nK the law exceeds the bound: K3 equals the bound exactly.
    e_nk = 100.0
    bound = k3_bound_si(KB * e_nk * 1e-9, CS) * 1e12
    assert k3_threshold_si(-1e7, CS, EF) * 1e12 > 100 * bound
    assert lf.k3(-1e7, e_nk, species=CS, efimov=EF, model="capped") == pytest.approx(bound, rel=1e-12)


# ---------------------------------------------------------------------------- thermal, low T

@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_l3_low_temperature_equals_threshold(sp):
    # k_B T << unitarity crossover: the kink x_c = E_c/kT lies far in the Boltzmann tail
    # (x_c > 30), where the capped part weighs < e^{-x_c} x_c^2/2 < 1e-10.
    a = np.array([-3000.0, -957.0, -500.0, -200.0, 210.0, 600.0, 2000.0])
    t_nk = 0.1
    for ai in a:
        _, xc = quad_thermal_l3(ai, t_nk, sp, EF)
        assert xc > 30
    got = lf.l3(a, t_nk, species=sp, efimov=EF, model="capped")
    assert np.all(rel(got, lf.l3_threshold(a, species=sp, efimov=EF)) < 1e-6)


@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_beta_low_temperature_equals_threshold(sp):
    # The atom-dimer bound ~ 1/k bites early on the a* resonance (C_b ~ 40/eta there):
    # at 0.1 nK it is already active for 133Cs at a = a*. Go colder, and check the regime.
    a = np.array([300.0, 1020.0, 3000.0])
    t_nk = 1e-3
    for ai in a:
        _, xc = quad_thermal_beta(ai, t_nk, sp, EF)
        assert xc > 30
    got = lf.beta(a, t_nk, species=sp, efimov=EF, model="capped")
    assert np.all(rel(got, lf.beta_threshold(a, species=sp, efimov=EF)) < 1e-6)


@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_threshold_model_l3_is_temperature_independent(sp):
    a = np.array([-1e6, -957.0, -200.0, 210.0, 5e3, 1e6])[:, None]
    t = np.geomspace(1.0, 3000.0, 7)[None, :]
    got = lf.l3(a, t, species=sp, efimov=EF, model="threshold")
    want = lf.l3_threshold(a, species=sp, efimov=EF) * np.ones_like(t)
    assert np.all(rel(got, want) < 1e-11)
    got_b = lf.beta(a[a > 0][:, None], t, species=sp, efimov=EF, model="threshold")
    want_b = lf.beta_threshold(a[a > 0][:, None], species=sp, efimov=EF) * np.ones_like(t)
    assert np.all(rel(got_b, want_b) < 1e-11)


def test_default_model_is_zero_range():
    # issue 3: the exact model is the default once its tables ship; the approximations stay
    args = dict(species=CS, efimov=EF)
    assert lf.l3(-2e4, 500.0, **args) == lf.l3(-2e4, 500.0, model="zero-range", **args)
    assert lf.l3(-2e4, 500.0, **args) != lf.l3(-2e4, 500.0, model="capped", **args)
    assert "capped" in lf.available_models() and "threshold" in lf.available_models()


# ---------------------------------------------------------------------------- thermal, end to end

@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_l3_capped_against_si_quadrature(sp):
    abs_a = np.geomspace(5 * sp.r_vdw, 1e6, 8)
    temps = np.geomspace(1.0, 3000.0, 6)
    worst = 0.0
    for sign in (-1, 1):
        for aa in abs_a:
            got = lf.l3(sign * aa, temps, species=sp, efimov=EF, model="capped")
            for t, g in zip(temps, got):
                worst = max(worst, rel(g, quad_thermal_l3(sign * aa, t, sp, EF)[0]))
    assert worst < 1e-6


@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_beta_capped_against_si_quadrature(sp):
    abs_a = np.geomspace(5 * sp.r_vdw, 1e6, 8)
    temps = np.geomspace(1.0, 3000.0, 6)
    worst = 0.0
    for aa in abs_a:
        got = lf.beta(aa, temps, species=sp, efimov=EF, model="capped")
        for t, g in zip(temps, got):
            worst = max(worst, rel(g, quad_thermal_beta(aa, t, sp, EF)[0]))
    assert worst < 1e-6


# ---------------------------------------------------------------------------- unitarity limit

def lambda3_si(sp):
    """36 sqrt(3) pi^2 hbar^5 / (m^3 k_B^2): L3 T^2 in m^6 K^2 / s (Rem et al. 2013)."""
    return 36 * math.sqrt(3) * math.pi ** 2 * HBAR ** 5 / (sp.mass ** 3 * KB ** 2)


@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
@pytest.mark.parametrize("sign", [-1, 1])
def test_capped_l3_t_minus_two_law_at_unitarity(sp, sign):
    a = sign * 1e7
    temps = np.array([1.0, 10.0, 100.0, 1000.0, 3000.0])
    got = lf.l3(a, temps, species=sp, efimov=EF, model="capped")    # cm^6/s
    l3_t2 = got * 1e-12 * (temps * 1e-9) ** 2                 # m^6 K^2 / s
    for t, v in zip(temps, l3_t2):
        # Closed form of the capped average (derived in test_thermal.py): with
        # x_c = sqrt(bound(kT)/K_thr), <K> = K_thr P(3, x_c) + bound(kT) e^{-x_c}/2, so the
        # relative deviation from bound/2 is 2 x_c/3 to first order.
        kt = KB * t * 1e-9
        k0 = k3_threshold_si(a, sp, EF)
        xc = math.sqrt(k3_bound_si(kt, sp) / k0)
        closed = k0 * gammainc(3, xc) + k3_bound_si(kt, sp) * math.exp(-xc) / 2
        assert v / (t * 1e-9) ** 2 == pytest.approx(closed, rel=1e-8)
        assert xc < 1e-3
        assert abs(v / lambda3_si(sp) - 1) < xc + 1e-9
    assert np.ptp(l3_t2) / l3_t2.mean() < 1e-3                # L3 T^2 constant


def test_l3_continuous_across_resonance_at_unitarity():
    # Rem et al. 2013: L3 is continuous across the resonance (here, to O(x_c); capped model:
    # the zero-range a > 0 table does not reach k_T a >> 1, docs/stm.md section 7).
    for t in (10.0, 1000.0):
        lo = lf.l3(-1e7, t, species=LI, efimov=EF, model="capped")
        hi = lf.l3(1e7, t, species=LI, efimov=EF, model="capped")
        assert abs(lo / hi - 1) < 1e-3


def test_lambda3_lithium_against_rem_2013():
    # Capped model = Rem et al.'s form with (1 - e^{-4 eta}) -> 1: an upper bound that the
    # measured 7Li value 2.5(3)(6)e-20 uK^2 cm^6/s must not exceed by more than its error;
    # hand value: 36 sqrt(3) pi^2 hbar^5/(m^3 k_B^2) = 2.66e-20 uK^2 cm^6/s for 7Li.
    t_nk = 100.0
    lam = lf.l3(-1e7, t_nk, species=LI, efimov=EF, model="capped") * (t_nk * 1e-3) ** 2   # uK^2 cm^6/s
    assert lam == pytest.approx(lambda3_si(LI) * 1e12 * 1e12, rel=1e-3)
    assert 2.5e-20 - 0.67e-20 < lam < 3.2e-20
    assert lam == pytest.approx(2.66e-20, rel=5e-3)


@pytest.mark.parametrize("sp", [CS, LI], ids=["Cs", "Li"])
def test_capped_beta_t_minus_half_law(sp):
    a = 1e7
    temps = np.array([1.0, 30.0, 1000.0, 3000.0])
    got = lf.beta(a, temps, species=sp, efimov=EF, model="capped")   # cm^3/s
    mu = 2 * sp.mass / 3
    const = math.sqrt(2 * math.pi) * HBAR ** 2 / (mu ** 1.5 * math.sqrt(KB))   # m^3 K^{1/2} / s
    for t, v in zip(temps, got):
        b0 = beta_threshold_si(a, sp, EF)
        xc = (beta_bound_si(KB * t * 1e-9, sp) / b0) ** 2
        assert xc < 1e-3
        # Relative deviation from the pure bound: x_c/3 to first order (derived as above).
        assert abs(v * 1e-6 * math.sqrt(t * 1e-9) / const - 1) < xc / 3 * 1.01 + 1e-9
        closed = b0 * gammainc(1.5, xc) + beta_bound_si(KB * t * 1e-9, sp) * 2 / SQRT_PI * math.exp(-xc)
        assert v * 1e-6 == pytest.approx(closed, rel=1e-8)


# ---------------------------------------------------------------------------- broadcasting

def test_broadcasting_shapes_and_values():
    a = np.array([-3000.0, -957.0, 500.0])[:, None]
    t = np.array([1.0, 30.0, 300.0, 3000.0])
    for fun in (lf.l3, lf.k3):
        out = fun(a, t, species=CS, efimov=EF)
        assert out.shape == (3, 4)
        for i in range(3):
            for j in range(4):
                assert out[i, j] == fun(float(a[i, 0]), float(t[j]), species=CS, efimov=EF)
    b = lf.beta(np.array([500.0, 2000.0]), np.array([[10.0], [100.0], [1000.0]]), species=CS, efimov=EF)
    assert b.shape == (3, 2)
    assert b[2, 1] == lf.beta(2000.0, 1000.0, species=CS, efimov=EF)


def test_scalar_and_list_inputs():
    v = lf.l3(-957.0, 100.0, species=CS, efimov=EF)
    assert isinstance(v, float)
    assert isinstance(lf.beta(1000.0, 100.0, species=CS, efimov=EF), float)
    assert isinstance(lf.k3(-957.0, 100.0, species=CS, efimov=EF), float)
    lst = lf.l3([-957.0, -500.0], 100.0, species=CS, efimov=EF)
    assert lst.shape == (2,) and lst[0] == v
    assert lf.l3(np.float64(-957.0), np.array(100.0), species=CS, efimov=EF) == v
    assert lf.l3(-957.0, 100.0, species="133Cs", efimov=EF) == v


def test_validity_warning_below_5_rvdw():
    with pytest.warns(ValidityWarning):
        lf.l3(-2.0 * CS.r_vdw, 100.0, species=CS, efimov=EF)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        lf.l3(-6.0 * CS.r_vdw, 100.0, species=CS, efimov=EF)


# ---------------------------------------------------------------------------- bad input

BAD_SCALES = [-1.0, 0.0, float("nan"), float("inf"), -float("inf"), [100.0, -3.0], [float("nan"), 1.0]]


@pytest.mark.parametrize("bad", BAD_SCALES, ids=str)
@pytest.mark.parametrize("fun", [lf.l3, lf.beta], ids=["l3", "beta"])
def test_bad_temperature(fun, bad):
    with pytest.raises(LossfitValueError) as info:
        fun(1000.0, bad, species=CS, efimov=EF)
    assert info.value.argument == "temperature"
    assert "temperature" in str(info.value)


@pytest.mark.parametrize("bad", BAD_SCALES, ids=str)
@pytest.mark.parametrize("fun", [lf.k3, lf.beta_energy], ids=["k3", "beta_energy"])
def test_bad_energy(fun, bad):
    with pytest.raises(LossfitValueError) as info:
        fun(1000.0, bad, species=CS, efimov=EF)
    assert info.value.argument == "energy"
    assert str(info.value).startswith("energy:")


ALL = [lf.l3, lf.beta, lf.k3, lf.beta_energy]
IDS = ["l3", "beta", "k3", "beta_energy"]


@pytest.mark.parametrize("bad", [0.0, float("nan"), float("inf"), [500.0, 0.0]], ids=str)
@pytest.mark.parametrize("fun", ALL, ids=IDS)
def test_bad_scattering_length(fun, bad):
    with pytest.raises(LossfitValueError) as info:
        fun(bad, 100.0, species=CS, efimov=EF)
    assert info.value.argument == "a"


@pytest.mark.parametrize("fun", [lf.beta, lf.beta_energy], ids=["beta", "beta_energy"])
def test_beta_needs_positive_a(fun):
    for bad in (-1000.0, [1000.0, -5.0]):
        with pytest.raises(LossfitValueError) as info:
            fun(bad, 100.0, species=CS, efimov=EF)
        assert info.value.argument == "a"
        assert "> 0" in str(info.value)


@pytest.mark.parametrize("kwargs, argument", [
    (dict(a_minus=-900.0, eta_minus=0.0), "eta_minus"),
    (dict(a_minus=-900.0, eta_minus=-0.01), "eta_minus"),
    (dict(a_plus=200.0, eta_plus=0.0), "eta_plus"),
    (dict(a_star=900.0, eta_star=-1.0), "eta_star"),
    (dict(a_minus=900.0, eta_minus=0.1), "a_minus"),
])
def test_bad_efimov_parameters(kwargs, argument):
    with pytest.raises(LossfitValueError) as info:
        lf.Efimov(**kwargs)
    assert info.value.argument == argument


def test_missing_efimov_parameter_for_side_requested():
    neg = lf.Efimov(a_minus=-957.0, eta_minus=0.05)
    pos = lf.Efimov(a_plus=210.0, eta_plus=0.05)
    lf.l3(-2000.0, 100.0, species=CS, efimov=neg)
    lf.l3(2000.0, 100.0, species=CS, efimov=pos)
    cases = [(lf.l3, 2000.0, neg, "a_plus"), (lf.k3, 2000.0, neg, "a_plus"),
             (lf.l3, -2000.0, pos, "a_minus"), (lf.l3, [-2000.0, 2000.0], neg, "a_plus"),
             (lf.beta, 2000.0, neg, "a_star"), (lf.beta_energy, 2000.0, pos, "a_star")]
    for fun, a, ef, name in cases:
        with pytest.raises(LossfitValueError) as info:
            fun(a, 100.0, species=CS, efimov=ef)
        assert info.value.argument == "efimov"
        assert name in str(info.value)


@pytest.mark.parametrize("fun", ALL, ids=IDS)
def test_unknown_model(fun):
    with pytest.raises(LossfitValueError) as info:
        fun(1000.0, 100.0, species=CS, efimov=EF, model="zero-range-typo")
    assert info.value.argument == "model"


@pytest.mark.parametrize("fun", ALL, ids=IDS)
def test_efimov_of_wrong_type(fun):
    with pytest.raises(LossfitValueError) as info:
        fun(1000.0, 100.0, species=CS, efimov={"a_minus": -900.0})
    assert info.value.argument == "efimov"


@pytest.mark.parametrize("fun", ALL, ids=IDS)
def test_unknown_species(fun):
    with pytest.raises(LossfitValueError) as info:
        fun(1000.0, 100.0, species="999Xx", efimov=EF)
    assert info.value.argument == "species"


@pytest.mark.parametrize("fun, scale_name", [(lf.l3, "temperature"), (lf.beta, "temperature"),
                                             (lf.k3, "energy"), (lf.beta_energy, "energy")],
                         ids=IDS)
def test_mismatched_shapes(fun, scale_name):
    # The message must name both arguments of *this* function.
    with pytest.raises(LossfitValueError) as info:
        fun(np.array([1000.0, 2000.0, 3000.0]), np.array([10.0, 20.0]), species=CS, efimov=EF)
    msg = str(info.value)
    assert info.value.argument in ("a", scale_name)
    assert "a" in msg and scale_name in msg
    assert "(3,)" in msg and "(2,)" in msg


def test_empty_input_gives_empty_output():
    # numpy convention: an empty a broadcasts to an empty result (no crash).
    empty = np.array([])
    assert lf.l3_threshold(empty, species=CS, efimov=EF).shape == (0,)
    assert lf.beta_threshold(empty, species=CS, efimov=EF).shape == (0,)
    for fun in ALL:
        assert fun(empty, 100.0, species=CS, efimov=EF).shape == (0,)


@pytest.mark.parametrize("bad", [0.0, float("nan")], ids=str)
@pytest.mark.parametrize("fun", [lf.l3, lf.beta], ids=["l3", "beta"])
def test_bad_rtol(fun, bad):
    # Every public argument is validated (docs/architecture.md, rules, "no silent NaN").
    with pytest.raises(LossfitValueError) as info:
        fun(1000.0, 100.0, species=CS, efimov=EF, rtol=bad)
    assert info.value.argument == "rtol"
