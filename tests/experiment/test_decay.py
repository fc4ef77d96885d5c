"""Tests of lossfit.experiment.decay: closed-form solutions, scipy.integrate.solve_ivp, energy balance.

The density coefficient c (<n^2> = c N^2 / T^3) is recomputed here from scipy.constants
with the closed form of docs/architecture.md, conventions (Weber et al., PRL 91, 123201 (2003)); the trap
module itself is tested against quadrature in test_trap.py.
"""

import importlib.util
import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import cubature, solve_ivp

from lossfit.errors import LossfitValueError
from lossfit.experiment import decay
from lossfit.experiment.decay import DecayBatch, TabulatedRate, simulate_decay, simulate_decay_batch, tabulate_rate
from lossfit.species import species

SP = species("133Cs")
FREQS = (80.0, 110.0, 15.0)
N0 = 1.2e5
T0 = 180.0                     # nK
L3 = 4.0e-25                   # cm^6/s
TIMES = np.linspace(0.0, 3.0, 15)


def _c3(freqs=FREQS):
    """c in cm^-6 nK^3 from N^2 (m wbar^2 / (2 pi k T))^3 / 3^{3/2} (docs/architecture.md, conventions)."""
    wbar2 = (2 * math.pi) ** 2 * np.prod(freqs) ** (2.0 / 3.0)
    per_k = (SP.mass * wbar2 / (2 * math.pi * sc.k)) ** 3 / 3 ** 1.5      # m^-6 K^3
    return per_k * 1e-12 * 1e27                                            # cm^-6 nK^3


def _cad(freqs=FREQS):
    """Atom-dimer overlap coefficient for equal frequencies: n_peak (2/3)^{3/2} / (N T^{-3/2})."""
    wbar2 = (2 * math.pi) ** 2 * np.prod(freqs) ** (2.0 / 3.0)
    per_k = (SP.mass * wbar2 / (2 * math.pi * sc.k)) ** 1.5 * (2.0 / 3.0) ** 1.5   # m^-3 K^{3/2}
    return per_k * 1e-6 * 1e9 ** 1.5                                                # cm^-3 nK^{3/2}


# --- closed forms without heating ---------------------------------------------------------

def test_constant_temperature_no_one_body_loss():
    # dN/dt = -K N^3 with K = L3 c / T^3  =>  N = N0 / sqrt(1 + 2 K N0^2 t)  (separable ODE)
    k = L3 * _c3() / T0 ** 3
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=L3, heating=False)
    expected = N0 / np.sqrt(1 + 2 * k * N0 ** 2 * TIMES)
    assert sol.atoms == pytest.approx(expected, rel=1e-7)
    assert np.all(sol.temperature == T0)
    assert sol.atoms[-1] < 0.7 * N0        # the scenario really decays
    assert sol.mean_n2 == pytest.approx(_c3() * expected ** 2 / T0 ** 3, rel=1e-7)


def test_constant_temperature_callable_is_evaluated_at_t0():
    k = _unitarity_like(T0) * _c3() / T0 ** 3
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=_unitarity_like,
                         heating=False)
    assert sol.atoms == pytest.approx(N0 / np.sqrt(1 + 2 * k * N0 ** 2 * TIMES), rel=1e-7)


def test_constant_temperature_with_one_body_loss():
    # dN/dt = -G N - K N^3 is a Bernoulli equation; u = N^-2 obeys du/dt = 2 G u + 2 K, so
    # N = [(N0^-2 + K/G) e^{2 G t} - K/G]^{-1/2}
    gamma = 0.35
    k = L3 * _c3() / T0 ** 3
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=L3, gamma=gamma,
                         heating=False)
    expected = ((N0 ** -2 + k / gamma) * np.exp(2 * gamma * TIMES) - k / gamma) ** -0.5
    assert sol.atoms == pytest.approx(expected, rel=1e-7)


# --- closed forms with anti-evaporation heating (T_h = 0) ---------------------------------

@pytest.mark.parametrize("gamma", [0.0, 0.4])
def test_anti_evaporation_closed_form(gamma):
    # With M = N e^{G t}: dM/dt = -L3 c M^3 e^{-2Gt} / T^3 and dT/T = -(1/3) dM/M, so
    # T = T0 (N0/M)^{1/3} and M^-3 = N0^-3 + 3 L3 c (1 - e^{-2Gt}) / (2 G T0^3 N0)
    # (-> 3 L3 c t / (T0^3 N0) as G -> 0). Derived for this test from Weber et al. (2003).
    q = L3 * _c3() / (T0 ** 3 * N0)
    growth = TIMES if gamma == 0 else (1 - np.exp(-2 * gamma * TIMES)) / (2 * gamma)
    m = (N0 ** -3 + 3 * q * growth) ** (-1.0 / 3.0)
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=L3, gamma=gamma)
    assert sol.atoms == pytest.approx(m * np.exp(-gamma * TIMES), rel=1e-7)
    assert sol.temperature == pytest.approx(T0 * (N0 / m) ** (1 / 3), rel=1e-7)
    assert sol.temperature[-1] > 1.05 * T0


# --- solve_ivp references with heating ---------------------------------------------------

def _reference(l3_of_t, gamma, t_h, times=TIMES, n0=N0, t0=T0, c3=None):
    """Weber et al. (2003) rate equations integrated by scipy's DOP853 at tight tolerance."""
    c3 = _c3() if c3 is None else c3

    def rhs(_, y):
        n, temp = y
        loss = l3_of_t(temp) * c3 * n * n / temp ** 3     # L3 <n^2>
        return [-gamma * n - loss * n, loss * (temp + t_h) / 3.0]

    ref = solve_ivp(rhs, (0.0, times[-1]), [n0, t0], t_eval=times, method="DOP853",
                    rtol=1e-12, atol=[1e-9 * n0, 1e-12 * t0])
    assert ref.success
    return ref.y


def test_heating_constant_l3_matches_solve_ivp():
    n_ref, t_ref = _reference(lambda temp: L3, gamma=0.2, t_h=90.0)
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=L3, gamma=0.2,
                         recombination_heating_nK=90.0)
    assert sol.atoms == pytest.approx(n_ref, rel=1e-6)
    assert sol.temperature == pytest.approx(t_ref, rel=1e-6)
    assert t_ref[-1] > 1.2 * T0


def _unitarity_like(temp):
    # L3 ~ lambda3 / T^2 near unitarity (docs/architecture.md, conventions; Rem et al., PRL 110, 163202 (2013)),
    # with an offset so that the function is not a pure power law
    return L3 * ((T0 / temp) ** 2 + 0.3)


def test_heating_temperature_dependent_l3_callable_matches_solve_ivp():
    n_ref, t_ref = _reference(_unitarity_like, gamma=0.1, t_h=150.0)
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=_unitarity_like,
                         gamma=0.1, recombination_heating_nK=150.0)
    assert sol.atoms == pytest.approx(n_ref, rel=1e-6)
    assert sol.temperature == pytest.approx(t_ref, rel=1e-6)


def test_strong_heating_extends_callable_table():
    # the temperature more than doubles, beyond the first tabulation window
    big = 40 * L3
    n_ref, t_ref = _reference(lambda temp: big * (T0 / temp) ** 2, gamma=0.0, t_h=2000.0)
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0,
                         l3=lambda temp: big * (T0 / temp) ** 2, recombination_heating_nK=2000.0)
    assert t_ref[-1] > 3 * T0
    assert sol.temperature == pytest.approx(t_ref, rel=1e-6)
    assert sol.atoms == pytest.approx(n_ref, rel=1e-6)


def test_tabulated_rate_and_batch_match_solve_ivp():
    table = tabulate_rate(_unitarity_like, 100.0, 2000.0)
    assert table(np.array([T0, 700.0])) == pytest.approx(_unitarity_like(np.array([T0, 700.0])), rel=1e-8)
    n_ref, t_ref = _reference(_unitarity_like, gamma=0.3, t_h=50.0)
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=table, gamma=0.3,
                         recombination_heating_nK=50.0)
    assert sol.atoms == pytest.approx(n_ref, rel=1e-6)
    sols = simulate_decay_batch([TIMES, TIMES[:7]], species=SP, traps_hz=FREQS, n0=[N0, N0],
                                t0_nK=T0, l3=[table, table], gamma=[0.3, 0.3],
                                recombination_heating_nK=50.0, rtol=1e-9)
    assert sols[0].atoms == pytest.approx(n_ref, rel=1e-6)
    assert sols[1].temperature == pytest.approx(t_ref[:7], rel=1e-6)


def test_read_only_times_reuse_the_one_compiled_integrator():
    # a curve's own times are read-only, and numba compiles a kernel once per array type:
    # single curves and batches must reach the integrator with the same types, or a fresh
    # cache pays its compile (the largest of the library) twice
    frozen = TIMES.copy()
    frozen.setflags(write=False)
    simulate_decay(frozen, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=L3)
    simulate_decay_batch([frozen, frozen[:7]], species=SP, traps_hz=FREQS, n0=N0, t0_nK=T0, l3=L3)
    readonly = [sig for sig in decay._integrate_batch.signatures if sig[0].mutable is False]
    assert not readonly, readonly


def test_batch_mixture_curves_match_single_simulation():
    beta_table = tabulate_rate(lambda temp: 2e-13 * (T0 / temp), 150.0, 1000.0)
    sols = simulate_decay_batch([TIMES, TIMES[:9]], species=SP, traps_hz=FREQS, n0=[N0, 0.5 * N0],
                                t0_nK=T0, l3=L3, gamma=0.1, n_dimers0=[2e4, 0.0], beta=beta_table,
                                gamma_dimer=0.3, recombination_heating_nK=40.0, rtol=1e-9)
    ref = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=L3, gamma=0.1,
                         n_dimers0=2e4, beta=lambda temp: 2e-13 * (T0 / temp), gamma_dimer=0.3,
                         recombination_heating_nK=40.0, rtol=1e-10)
    assert sols[0].dimers == pytest.approx(ref.dimers, rel=1e-7)
    assert sols[0].atoms == pytest.approx(ref.atoms, rel=1e-7)
    assert sols[0].temperature == pytest.approx(ref.temperature, rel=1e-7)
    assert sols[1].dimers is None
    assert sols[0].dimers[-1] < 0.5 * 2e4


def test_batch_with_per_curve_constants_matches_solve_ivp():
    freqs_b = (50.0, 60.0, 10.0)
    l3s = np.array([L3, 3 * L3, 0.0])
    batch = DecayBatch([TIMES, TIMES, TIMES], species=SP, traps_hz=[FREQS, freqs_b, FREQS],
                       recombination_heating_nK=[0.0, 20.0, 0.0], rtol=1e-9)
    atoms, temps, dimers, _, _ = batch(n0=[N0, 2 * N0, N0], t0_nK=[T0, 300.0, T0], l3=l3s,
                                       gamma=[0.0, 0.1, 0.5])
    assert np.all(dimers == 0.0)
    n_ref, t_ref = _reference(lambda temp: 3 * L3, 0.1, 20.0, n0=2 * N0, t0=300.0, c3=_c3(freqs_b))
    sl = slice(batch.offsets[1], batch.offsets[2])
    assert atoms[sl] == pytest.approx(n_ref, rel=1e-6)
    assert temps[sl] == pytest.approx(t_ref, rel=1e-6)
    # third curve: pure one-body loss, N0 e^{-G t} at constant T
    sl = slice(batch.offsets[2], batch.offsets[3])
    assert atoms[sl] == pytest.approx(N0 * np.exp(-0.5 * TIMES), rel=1e-8)
    assert np.allclose(temps[sl], T0, rtol=1e-14)
    assert batch.n2_coefficients[1] == pytest.approx(_c3(freqs_b), rel=1e-12)


# --- energy balance behind dT/dt = L3 <n^2> (T + T_h) / 3 --------------------------------------

def _weighted_potential_per_kt(weight_factors, freqs_list, masses):
    """<sum_j U_j> / kT over the weight prod_j exp(-U_j / kT), by 3-d cubature.

    U_j = (M_j/2) sum_i omega_ij^2 x_i^2 are the potentials of the particles taking part
    (one entry for each particle lost in one event).
    """
    temp_k = T0 * 1e-9

    def pots(r):
        return [0.5 * mj * np.sum((2 * math.pi * np.asarray(fj)) ** 2 * r ** 2, axis=-1) / (sc.k * temp_k)
                for mj, fj in zip(masses, freqs_list)]

    def weight(r):
        return np.exp(-sum(f * u for f, u in zip(weight_factors, pots(r))))

    sig = np.sqrt(sc.k * temp_k / (masses[0] * (2 * math.pi * np.asarray(freqs_list[0])) ** 2))
    lo, hi = -8 * sig, 8 * sig
    num = cubature(lambda r: weight(r) * sum(pots(r)), lo, hi, rtol=1e-10, atol=0.0).estimate
    den = cubature(weight, lo, hi, rtol=1e-10, atol=0.0).estimate
    return float(num / den)


def test_three_body_heating_rate_from_energy_balance():
    # Three atoms lost per event from the weight n^3 ~ exp(-3U/kT): each takes 3/2 kT kinetic
    # energy plus <U>_{n^3}; the cloud energy is E = 3 N k T (harmonic trap, equipartition).
    # dE = eps dN  =>  3 N k dT = (eps - 3kT) dN  =>  dT/dt = (3kT - eps)/(3k) * L3 <n^2>.
    # (Weber et al. 2003 give (T/3) L3 <n^2>; here eps is computed by quadrature.)
    u_lost = _weighted_potential_per_kt([3.0], [FREQS], [SP.mass])       # <U>/kT per lost atom
    assert u_lost == pytest.approx(0.5, rel=1e-8)
    eps_per_kt = 1.5 + u_lost
    n2 = _c3() * N0 ** 2 / T0 ** 3
    expected = (3.0 - eps_per_kt) * T0 / 3.0 * L3 * n2
    out = np.empty(4)
    p = np.zeros(decay._NPAR)
    p[decay._C3], p[decay._L3], p[decay._HEAT] = _c3(), L3, 1.0
    status = decay._rhs(np.array([N0, 0.0, T0, 0.0]), p, decay._EMPTY_KNOTS, decay._EMPTY_COEFS,
                        decay._EMPTY_KNOTS, decay._EMPTY_COEFS, out)
    assert status == 0
    assert out[2] == pytest.approx(expected, rel=1e-7)
    assert out[0] == pytest.approx(-L3 * n2 * N0, rel=1e-12)


def test_atom_dimer_heating_from_energy_balance():
    # One atom and one dimer lost per event from the weight n_A n_D; the module states the
    # lost potential energy is 3/2 kT for any frequencies. Check with unequal dimer trap.
    dimer_f = (60.0, 140.0, 9.0)
    u_lost = _weighted_potential_per_kt([1.0, 1.0], [FREQS, dimer_f], [SP.mass, 2 * SP.mass])
    assert u_lost == pytest.approx(1.5, rel=1e-8)
    # so each event removes 3 kT kinetic + 3/2 kT potential instead of 2 x 3 kT: the
    # remaining 3 (N_A + N_D) k heat capacity gains 3/2 kT per event
    from lossfit.experiment.trap import HarmonicTrap
    trap = HarmonicTrap(FREQS, dimer_frequencies_hz=dimer_f)
    beta, nd0 = 2e-11, 4e4
    p = np.zeros(decay._NPAR)
    p[decay._CAD], p[decay._BETA], p[decay._HEAT] = trap.overlap_coefficient(SP), beta, 1.0
    out = np.empty(4)
    status = decay._rhs(np.array([N0, nd0, T0, 0.0]), p, decay._EMPTY_KNOTS, decay._EMPTY_COEFS,
                        decay._EMPTY_KNOTS, decay._EMPTY_COEFS, out)
    assert status == 0
    events = beta * trap.atom_dimer_overlap(N0, T0, SP) * nd0
    assert out[1] == pytest.approx(-events, rel=1e-12)
    assert out[2] == pytest.approx((6.0 - 3.0 - u_lost) * T0 * events / (3 * (N0 + nd0)), rel=1e-7)


# --- atom-dimer mixtures -----------------------------------------------------------------

def test_atom_dimer_relaxation_closed_form():
    # Constant T, L3 = 0, no one-body loss: N_A - N_D = D is conserved and
    # dN_D/dt = -k N_D (N_D + D), k = beta d / T^{3/2}; the logistic-type solution is
    # N_D = D x0 e^{-kDt} / (N_A0 - x0 e^{-kDt}).
    beta, nd0 = 2e-13, 3e4
    k = beta * _cad() / T0 ** 1.5
    diff = N0 - nd0
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=0.0, beta=beta,
                         n_dimers0=nd0, heating=False)
    decay_f = np.exp(-k * diff * TIMES)
    expected = diff * nd0 * decay_f / (N0 - nd0 * decay_f)
    assert sol.dimers == pytest.approx(expected, rel=1e-7)
    assert sol.atoms == pytest.approx(expected + diff, rel=1e-7)
    assert sol.dimers[-1] < 0.5 * nd0


def test_dimer_one_body_decay_and_mixture_vs_solve_ivp():
    beta, nd0, gd, g = 1.5e-13, 2e4, 0.3, 0.1

    def rhs(_, y):
        n, nd, temp = y
        r3 = _unitarity_like(temp) * _c3() * n ** 3 / temp ** 3
        rad = beta * _cad() * n * nd / temp ** 1.5
        return [-g * n - r3 - rad, -gd * nd - rad, (r3 * (temp + 30.0) + 1.5 * rad * temp) / (3 * (n + nd))]

    ref = solve_ivp(rhs, (0, TIMES[-1]), [N0, nd0, T0], t_eval=TIMES, method="DOP853", rtol=1e-12,
                    atol=[1e-9 * N0, 1e-9 * N0, 1e-12 * T0])
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=_unitarity_like,
                         beta=beta, n_dimers0=nd0, gamma=g, gamma_dimer=gd,
                         recombination_heating_nK=30.0)
    assert sol.atoms == pytest.approx(ref.y[0], rel=1e-6)
    assert sol.dimers == pytest.approx(ref.y[1], rel=1e-6)
    assert sol.temperature == pytest.approx(ref.y[2], rel=1e-6)


# --- theory rates ---------------------------------------------------------------------------

def test_efimov_route_uses_rates_module_or_says_it_is_missing():
    if importlib.util.find_spec("lossfit.rates") is None:
        with pytest.raises(LossfitValueError, match="lossfit.rates"):
            simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, efimov=object(), a=-500.0)
        return
    import lossfit as lf
    from lossfit.rates import l3 as theory_l3
    ef = lf.Efimov.universal(a_minus=-900.0, eta=0.08)
    sol = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, efimov=ef, a=-700.0)
    ref = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0,
                         l3=lambda temp: theory_l3(-700.0, temp, species=SP, efimov=ef))
    assert sol.atoms == pytest.approx(ref.atoms, rel=1e-9)
    # atom-dimer mixture on the a > 0 side: beta from lossfit.rates.beta at T(t)
    from lossfit.rates import beta as theory_beta
    mix = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, efimov=ef, a=700.0,
                         n_dimers0=1e4, model="threshold")
    ref = simulate_decay(TIMES, species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, n_dimers0=1e4,
                         l3=lambda temp: theory_l3(700.0, temp, species=SP, efimov=ef, model="threshold"),
                         beta=lambda temp: theory_beta(700.0, temp, species=SP, efimov=ef, model="threshold"))
    assert mix.dimers == pytest.approx(ref.dimers, rel=1e-9)


# --- bad input ------------------------------------------------------------------------------

def _call(**overrides):
    kwargs = dict(species=SP, trap_hz=FREQS, n0=N0, t0_nK=T0, l3=L3)
    t = overrides.pop("t", TIMES)
    kwargs.update(overrides)
    return simulate_decay(t, **kwargs)


@pytest.mark.parametrize("overrides, argument", [
    ({"t": np.array([0.0, 1.0, 1.0, 2.0])}, "t"),
    ({"t": np.array([0.0, 2.0, 1.0])}, "t"),
    ({"t": np.array([-1.0, 2.0])}, "t"),
    ({"t": np.array([])}, "t"),
    ({"n0": -5.0}, "n0"),
    ({"n0": float("nan")}, "n0"),
    ({"t0_nK": -100.0}, "t0_nK"),
    ({"t0_nK": 0.0}, "t0_nK"),
    ({"trap_hz": None}, "trap_hz"),
    ({"trap_hz": (100.0, 100.0)}, "trap_hz"),
    ({"gamma": -0.1}, "gamma"),
    ({"l3": -1e-25}, "l3"),
    ({"l3": None}, "l3"),
    ({"recombination_heating_nK": -10.0}, "recombination_heating_nK"),
    ({"n_dimers0": -1.0}, "n_dimers0"),
    ({"n_dimers0": 1e4}, "beta"),                   # a mixture needs beta
    ({"efimov": object()}, "l3"),                   # l3 and efimov together
    ({"l3": None, "efimov": object()}, "a"),        # efimov without a
    ({"l3": None, "efimov": object(), "a": -300.0, "n_dimers0": 1e4}, "a"),   # dimers need a > 0
    ({"l3": lambda temp: -1.0 + 0 * temp}, "l3"),   # callable returning nonsense
])
def test_bad_inputs_raise_naming_the_argument(overrides, argument):
    with pytest.raises(LossfitValueError) as info:
        _call(**overrides)
    assert info.value.argument == argument


def test_dimers_on_negative_a_side_rejected_and_degenerate_cloud_warned():
    with pytest.raises(LossfitValueError, match="a > 0") as info:
        _call(beta=1e-11, n_dimers0=1e4, a=-200.0)
    assert info.value.argument == "a"
    from lossfit.errors import ValidityWarning
    with pytest.warns(ValidityWarning, match="phase-space density"):
        _call(n0=1e7, t0_nK=50.0, t=np.array([0.0, 1e-4]))


def test_table_range_is_enforced():
    table = TabulatedRate(np.geomspace(150.0, 190.0, 6), np.full(6, 40 * L3))
    with pytest.raises(LossfitValueError, match="tabulated range"):
        _call(l3=table)
    with pytest.raises(LossfitValueError, match="temperature_nK"):
        table(200.0)
    with pytest.raises(LossfitValueError, match="temperature_nK"):
        TabulatedRate([1.0, 3.0, 2.0, 4.0], [1.0, 1.0, 1.0, 1.0])
    batch = DecayBatch([TIMES], species=SP, traps_hz=FREQS)
    with pytest.raises(LossfitValueError, match="l3"):
        batch(N0, T0, [table])
    with pytest.raises(LossfitValueError, match="beta"):
        batch(N0, T0, L3, n_dimers0=1e4, beta=table)
    with pytest.raises(LossfitValueError, match="n0"):
        batch([N0, N0], T0, L3)
    with pytest.raises(LossfitValueError, match="callables"):
        batch(N0, T0, _unitarity_like)
