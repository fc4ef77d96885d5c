"""Tests of the explicit trapped-dimer kinetics of lossfit.experiment.decay (dimers="explicit").

References outside the package: the law of mass action of ideal gases (Saha ratio
n_D/n^2 = 2^{3/2} lambda^3 e^{E_b/k_B T}, Landau & Lifshitz, Statistical Physics, sec. 101,
quoted from memory) with CODATA constants from scipy and Gaussian overlap integrals of a
harmonic trap; closed-form solutions of the rate equations; scipy.integrate.solve_ivp on
the rate equations written out here from the module docstring; and singular perturbation
theory (Tikhonov's theorem: the reduced, quasi-static system differs from the full one by
O(epsilon), epsilon the ratio of the fast to the slow time scale; quoted from memory).
"""

import math
import warnings

import numpy as np
import pytest
import scipy.constants as sc
from scipy.integrate import solve_ivp

import lossfit as lf
from lossfit.errors import LossfitValueError, ValidityWarning
from lossfit.experiment import decay
from lossfit.experiment.decay import (
    KINETICS_FIELDS,
    DecayBatch,
    TabulatedKinetics,
    kinetics_columns,
    simulate_decay,
    simulate_decay_batch,
)
from lossfit.experiment.trap import HarmonicTrap
from lossfit.species import species

SP = species("133Cs")
FREQS = (40.0, 40.0, 8.0)
TRAP = HarmonicTrap(FREQS)
EF = lf.Efimov.universal(a_minus=-900.0, eta=0.08)
A0 = sc.physical_constants["Bohr radius"][0]


def _rates(a, temp, depth):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        return lf.rates.dimer_kinetics_rates(a, temp, species=SP, efimov=EF, trap_depth=depth)


def _pair_integral_cm3(n_atoms, temp_nk, freqs=FREQS):
    """int n^2 d^3r in cm^-3 of a Boltzmann cloud: N^2 (m wbar^2 / (4 pi k T))^{3/2}
    (Gaussian integral of the squared density; dimers feel twice the potential at the
    same frequencies)."""
    wbar2 = (2 * math.pi) ** 2 * np.prod(freqs) ** (2.0 / 3.0)
    return n_atoms ** 2 * (SP.mass * wbar2 / (4 * math.pi * sc.k * temp_nk * 1e-9)) ** 1.5 * 1e-6


def _saha_cm3(a, temp_nk):
    """Equilibrium n_D / n^2 in cm^3 from the law of mass action: 2^{3/2} lambda^3 e^{E_b/kT},
    lambda = h / sqrt(2 pi m k T), E_b = hbar^2 / (m a^2) (universal shallow dimer)."""
    kt = sc.k * temp_nk * 1e-9
    lam = sc.h / math.sqrt(2 * math.pi * SP.mass * kt)
    e_b = sc.hbar ** 2 / (SP.mass * (a * A0) ** 2)
    return 2 ** 1.5 * lam ** 3 * math.exp(e_b / kt) * 1e6


# --- the integrator ----------------------------------------------------------------------

def test_rosenbrock_step_has_orders_four_and_three_and_damps_stiff_modes():
    # dN/dt = -K N^3 at constant T (L3 constant, no heating): N = N0 / sqrt(1 + 2 K N0^2 t),
    # separable ODE. Fixed steps h, h/2, h/4: errors of an order-p method fall by 2^p.
    l3, n0, temp, t_end = 1e-23, 1.2e5, 180.0, 3.0
    p = np.zeros(decay._NPAR)
    p[decay._C3], p[decay._L3] = TRAP.n2_coefficient(SP), l3
    k = l3 * p[decay._C3] / temp ** 3
    exact = n0 / math.sqrt(1 + 2 * k * n0 ** 2 * t_end)
    assert exact < 0.6 * n0                        # a real decay
    empty_k, empty_c = decay._EMPTY_KNOTS, decay._EMPTY_COEFS
    errors = []
    for n_steps in (6, 12, 24, 48):
        h = t_end / n_steps
        y, low = np.array([n0, 0.0, temp]), np.array([n0, 0.0, temp])
        for _ in range(n_steps):
            for state, embedded in ((y, False), (low, True)):
                f, jac = np.empty(3), np.empty((3, 3))
                work = [np.empty(3) for _ in range(5)]
                decay._rhs(state, p, empty_k, empty_c, empty_k, empty_c, f)
                decay._jacobian(state, f, p, empty_k, empty_c, empty_k, empty_c, np.ones(3), jac, work[0], work[1])
                g = np.empty((4, 3))
                status, _ = decay._ros_step(state, f, jac, h, p, empty_k, empty_c, empty_k, empty_c, 1e-6,
                                            np.full(3, 1e-12), np.empty((3, 3)), np.empty(3, dtype=np.int64), g,
                                            work[0], work[1], work[2], work[3], work[4])
                assert status == 0
                state[:] = work[2] - work[4] if embedded else work[2]    # yn, or yn - error estimate
        errors.append((abs(y[0] - exact), abs(low[0] - exact)))
    errors = np.array(errors)
    main, embedded = errors[:-1, 0] / errors[1:, 0], errors[:-1, 1] / errors[1:, 1]
    assert main[-1] == pytest.approx(16.0, rel=0.15)       # order 4
    assert embedded[-1] == pytest.approx(8.0, rel=0.15)    # order 3

    # y' = -k y with k h -> infinity: one step multiplies by R(-inf) = 1/3 (hand evaluation of
    # the Kaps-Rentrop form with these parameters: g1 = -y, g2 = y, g3 = g4 = 17/25 y)
    p = np.zeros(decay._NPAR)
    p[decay._GAMMA_D] = 1e9
    y = np.array([0.0, 1.0, temp])
    f, jac = np.empty(3), np.empty((3, 3))
    decay._rhs(y, p, empty_k, empty_c, empty_k, empty_c, f)
    decay._jacobian(y, f, p, empty_k, empty_c, empty_k, empty_c, np.ones(3), jac, np.empty(3), np.empty(3))
    yn = np.empty(3)
    decay._ros_step(y, f, jac, 1.0, p, empty_k, empty_c, empty_k, empty_c, 1e-6, np.full(3, 1e-12),
                    np.empty((3, 3)), np.empty(3, dtype=np.int64), np.empty((4, 3)), np.empty(3), np.empty(3),
                    yn, np.empty(3), np.empty(3))
    assert yn[1] == pytest.approx(1.0 / 3.0, rel=1e-6)


@pytest.mark.parametrize("method", ["dopri5", "rosenbrock"])
def test_both_integrators_match_closed_forms_of_the_atom_equations(method):
    # constant T, L3 and one-body loss: N = [(N0^-2 + K/G) e^{2Gt} - K/G]^{-1/2} (Bernoulli equation)
    l3, n0, temp, gamma = 4e-25, 1.2e5, 180.0, 0.35
    t = np.linspace(0.0, 3.0, 15)
    k = l3 * TRAP.n2_coefficient(SP) / temp ** 3
    sol = simulate_decay(t, species=SP, trap_hz=FREQS, n0=n0, t0_nK=temp, l3=l3, gamma=gamma, heating=False,
                         method=method)
    expected = ((n0 ** -2 + k / gamma) * np.exp(2 * gamma * t) - k / gamma) ** -0.5
    assert sol.atoms == pytest.approx(expected, rel=1e-7)
    assert sol.lost == pytest.approx(n0 - expected, rel=1e-6)


# --- (a) detailed balance: formation and breakup alone reach the Saha population ---------

@pytest.mark.parametrize("start", ["no dimers", "three times the equilibrium"])
def test_formation_and_breakup_alone_reach_the_saha_dimer_number(start):
    a, temp, n0 = 3000.0, 150.0, 1e5
    full = _rates(a, temp, 1e9)              # a trap 1e9 nK deep keeps every product
    assert full.shallow_atom_escapes == 0.0 and full.shallow_dimer_escapes == 0.0
    only = {name: 0.0 for name in KINETICS_FIELDS}
    only.update(shallow=float(full.shallow), breakup=float(full.breakup))
    table = TabulatedKinetics.constant(only)
    saha = _saha_cm3(a, temp)
    nd0 = 0.0 if start == "no dimers" else 3 * saha * _pair_integral_cm3(n0, temp)
    # relaxation to equilibrium at the rate breakup <n_A>_D: hold for 40 of those times
    tau = 1.0 / (full.breakup * TRAP.atom_dimer_overlap(n0, temp, SP))
    t = np.linspace(0.0, 40 * tau, 9)
    sol = simulate_decay(t, species=SP, trap_hz=FREQS, n0=n0, t0_nK=temp, l3=table, n_dimers0=nd0, heating=False)
    assert sol.lost == pytest.approx(np.zeros(t.size), abs=1e-9 * n0)
    equilibrium = saha * _pair_integral_cm3(sol.atoms[-1], temp)
    assert equilibrium > 1e-4 * n0                            # a visible population
    assert sol.dimers[-1] == pytest.approx(equilibrium, rel=1e-2)
    assert abs(sol.dimers[0] - equilibrium) > 0.5 * equilibrium   # it started away from there


# --- (b) conservation of N + 2 N_D + L -----------------------------------------------------

@pytest.mark.parametrize("method", ["dopri5", "rosenbrock"])
def test_free_bound_and_lost_atoms_add_up(method):
    # every process of the kinetics acting, with heating and initial dimers
    n0, nd0, temp = 1.0e5, 800.0, 100.0
    t = np.linspace(0.0, 4.0, 12)
    sol = simulate_decay(t, species=SP, trap_hz=FREQS, n0=n0, t0_nK=temp, efimov=EF, a=1500.0, dimers="explicit",
                         trap_depth=900.0, gamma=0.05, gamma_dimer=0.2, recombination_heating_nK=40.0,
                         n_dimers0=nd0, method=method)
    total = sol.atoms + 2 * sol.dimers + sol.lost
    assert np.max(np.abs(total / (n0 + 2 * nd0) - 1)) < 1e-10
    assert sol.lost[-1] > 0.3 * n0 and sol.temperature[-1] > 1.05 * temp
    assert sol.counted == pytest.approx(sol.atoms + 2 * sol.dimers, rel=1e-15)


# --- (c) the quasi-static observed L3 as the limit of the explicit kinetics ---------------

def test_dimers_in_steady_state_lose_atoms_at_the_observed_l3():
    # With dN_D/dt = 0, d(N + 2 N_D)/dt = -L3_observed int n^3 (docs/global-fit.md derives it
    # from the rate equations; lossfit.dimer_kinetics combines the parts independently)
    for a, temp, depth in ((800.0, 150.0, 1500.0), (3000.0, 150.0, 1500.0), (5000.0, 400.0, 2000.0)):
        r = _rates(a, temp, depth)
        table = TabulatedKinetics.constant(r)
        p = np.zeros(decay._NPAR)
        p[decay._C3], p[decay._CAD], p[decay._KIN] = TRAP.n2_coefficient(SP), TRAP.overlap_coefficient(SP), 1.0
        n = 1e5
        i3 = n * TRAP.mean_n2(n, temp, SP)
        n_d = ((r.shallow - r.shallow_dimer_escapes) / 3 * i3
               / ((r.breakup + r.relaxation) * TRAP.atom_dimer_overlap(n, temp, SP)))
        out = np.empty(4)
        assert decay._rhs(np.array([n, n_d, temp, 0.0]), p, table._knots, table._coefs, decay._EMPTY_KNOTS,
                          decay._EMPTY_COEFS, out) == 0
        assert abs(out[1]) < 1e-9 * abs(out[0])
        assert out[0] + 2 * out[1] == pytest.approx(-r.observed * i3, rel=1e-9)


def _quasi_static_gap(a, temp, n0):
    """(epsilon, bound fraction 2 N_D/N of the steady state, largest relative gap between the
    counted N + 2 N_D of the explicit kinetics and the quasi-static N) over a hold that
    loses half the atoms, constant T, trap depth 10 k_B T."""
    depth = 10 * temp
    r = _rates(a, temp, depth)
    n2, n_ad = TRAP.mean_n2(n0, temp, SP), TRAP.atom_dimer_overlap(n0, temp, SP)
    eps = r.observed * n2 / ((r.breakup + r.relaxation) * n_ad)        # dimer lifetime / loss time
    bound = 2 * (r.shallow - r.shallow_dimer_escapes) / 3 * n2 / ((r.breakup + r.relaxation) * n_ad)
    t = np.linspace(0.0, 1.5 / (r.observed * n2), 21)                  # N0 -> N0/2 at the observed L3
    kw = dict(species=SP, trap_hz=FREQS, n0=n0, t0_nK=temp, efimov=EF, a=a, trap_depth=depth, heating=False,
              rtol=1e-9)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        quasi = simulate_decay(t, **kw)
        explicit = simulate_decay(t, dimers="explicit", **kw)
    assert quasi.atoms[-1] == pytest.approx(0.5 * n0, rel=1e-6)
    return eps, bound, float(np.max(np.abs(explicit.counted / quasi.atoms - 1)))


@pytest.mark.parametrize("a, temp", [(800.0, 100.0), (2000.0, 200.0), (8000.0, 400.0)])
def test_explicit_kinetics_tends_to_the_quasi_static_l3_linearly_in_density(a, temp):
    # The gap is of the order of the small parameters (Tikhonov) -- the dimer lifetime over
    # the loss time and the bound fraction -- both proportional to the density: a quarter
    # of the atoms, a quarter of the gap.
    eps, bound, gap = _quasi_static_gap(a, temp, 1e5)
    assert eps + bound < 0.05
    assert 0.2 < gap / (eps + bound) < 1.0
    eps4, bound4, gap4 = _quasi_static_gap(a, temp, 2.5e4)
    assert (eps + bound) / (eps4 + bound4) == pytest.approx(4.0, rel=1e-6)
    assert gap / gap4 == pytest.approx(4.0, rel=0.05)


@pytest.mark.slow
def test_quasi_static_gap_across_scattering_length_and_temperature():
    # where both small parameters are below 5 %, the gap is 0.2-1 times their sum
    # (measured numbers: docs/global-fit.md); near unitarity at 50 nK the picture fails
    checked = 0
    for temp in (50.0, 100.0, 200.0, 400.0):
        for a in (800.0, 1300.0, 2000.0, 3000.0, 5000.0, 8000.0):
            eps, bound, gap = _quasi_static_gap(a, temp, 1e5)
            if eps + bound < 0.05:
                assert 0.2 < gap / (eps + bound) < 1.0
                checked += 1
    assert checked >= 16
    eps, bound, gap = _quasi_static_gap(5000.0, 50.0, 1e5)
    assert eps > 0.5 and gap > 0.2


# --- (d) against scipy's solver on the same equations ---------------------------------------

def _coefficients(temp):
    """Invented smooth coefficients of T (nK): power laws, a logistic escape fraction, a
    Boltzmann factor for breakup; cm^6/s and cm^3/s."""
    x = temp / 100.0
    shallow = 3e-24 * x ** -0.7
    return {"deep": 5e-25 * x ** -1.2, "shallow": shallow,
            "shallow_atom_escapes": shallow / (1 + np.exp(-(temp - 150.0) / 20.0)),
            "shallow_dimer_escapes": 0.2 * shallow / (1 + np.exp(-(temp - 160.0) / 15.0)),
            "relaxation": 8e-11 * x ** -0.3, "breakup": 2e-11 * np.exp(-90.0 / temp)}


def _reference(t, n0, nd0, temp0, gamma, gamma_d, t_h):
    """The rate equations of the module docstring, with its heating assumption, for solve_ivp."""
    c3, cad = TRAP.n2_coefficient(SP), TRAP.overlap_coefficient(SP)

    def rhs(_, y):
        n, n_d, temp, _lost = y
        k = _coefficients(temp)
        i3 = c3 * n ** 3 / temp ** 3
        j = cad * n * n_d / temp ** 1.5
        sh, sh_a, sh_d = k["shallow"], k["shallow_atom_escapes"], k["shallow_dimer_escapes"]
        dn = (-gamma * n - k["deep"] * i3 - sh * i3 + (sh - sh_a) / 3 * i3 + 2 * k["breakup"] * j
              - k["relaxation"] * j)
        dnd = -gamma_d * n_d + (sh - sh_d) / 3 * i3 - (k["breakup"] + k["relaxation"]) * j
        dl = (gamma * n + 2 * gamma_d * n_d + k["deep"] * i3 + sh_a / 3 * i3 + 2 * sh_d / 3 * i3
              + 3 * k["relaxation"] * j)
        # per event: deep or both products out 3T + 3T_h; atom out, dimer kept 4T + T_h;
        # both kept 3T; breakup -3T; relaxation 3T/2 -- over the capacity 3 (N + N_D)
        deep, form, out_a, out_d = k["deep"] * i3 / 3, sh * i3 / 3, sh_a * i3 / 3, sh_d * i3 / 3
        heat = (deep * (3 * temp + 3 * t_h) + out_d * (3 * temp + 3 * t_h) + (out_a - out_d) * (4 * temp + t_h)
                + (form - out_a) * 3 * temp - 3 * temp * k["breakup"] * j + 1.5 * temp * k["relaxation"] * j)
        return [dn, dnd, heat / (3 * (n + n_d)), dl]

    ref = solve_ivp(rhs, (0.0, t[-1]), [n0, nd0, temp0, 0.0], t_eval=t, method="Radau", rtol=1e-11,
                    atol=[1e-7 * n0, 1e-7 * n0, 1e-10 * temp0, 1e-7 * n0])
    assert ref.success
    return ref.y


@pytest.mark.parametrize("method", ["dopri5", "rosenbrock"])
def test_explicit_kinetics_matches_solve_ivp(method):
    n0, nd0, temp0, gamma, gamma_d, t_h = 1.5e5, 300.0, 120.0, 0.05, 0.3, 300.0
    temps = np.geomspace(80.0, 600.0, 400)
    table = TabulatedKinetics(temps, _coefficients(temps))
    t = np.linspace(0.0, 2.0, 11)
    ref = _reference(t, n0, nd0, temp0, gamma, gamma_d, t_h)
    assert ref[2, -1] > 1.3 * temp0 and ref[0, -1] < 0.6 * n0      # heating through the escape window
    assert ref[1].max() > 1.5 * nd0                                 # dimers form
    sol = simulate_decay(t, species=SP, trap_hz=FREQS, n0=n0, t0_nK=temp0, l3=table, n_dimers0=nd0, gamma=gamma,
                         gamma_dimer=gamma_d, recombination_heating_nK=t_h, method=method, rtol=1e-9)
    assert sol.atoms == pytest.approx(ref[0], rel=1e-6)
    assert sol.dimers == pytest.approx(ref[1], rel=1e-5, abs=1e-6 * n0)
    assert sol.temperature == pytest.approx(ref[2], rel=1e-6)
    assert sol.lost == pytest.approx(ref[3], rel=1e-6, abs=1e-6 * n0)


def test_batch_runs_kinetics_and_atom_curves_side_by_side():
    temps = np.geomspace(80.0, 600.0, 400)
    table = TabulatedKinetics(temps, _coefficients(temps))
    t = np.linspace(0.0, 2.0, 11)
    ref = _reference(t, 1.5e5, 0.0, 120.0, 0.05, 0.05, 60.0)
    sols = simulate_decay_batch([t, t[:6]], species=SP, traps_hz=FREQS, n0=[1.5e5, 1e5], t0_nK=120.0,
                                l3=[table, 4e-25], gamma=0.05, recombination_heating_nK=60.0, rtol=1e-9,
                                counts_dimers=[False, True])
    assert sols[0].atoms == pytest.approx(ref[0], rel=1e-6)       # gamma_dimer defaults to gamma
    assert sols[0].counted == pytest.approx(ref[0], rel=1e-6)     # counts_dimers False: free atoms only
    assert sols[0].dimers[-1] > 0 and sols[1].dimers is None
    single = simulate_decay(t[:6], species=SP, trap_hz=FREQS, n0=1e5, t0_nK=120.0, l3=4e-25, gamma=0.05,
                            recombination_heating_nK=60.0, rtol=1e-9)
    assert sols[1].atoms == pytest.approx(single.atoms, rel=1e-7)
    assert sols[1].lost == pytest.approx(1e5 - single.atoms, rel=1e-9)


def test_kinetics_table_reproduces_its_coefficients_between_knots():
    # the splines of ln rate and of the escape fractions against the invented functions
    temps = np.geomspace(80.0, 600.0, 120)
    table = TabulatedKinetics(temps, _coefficients(temps))
    mid = np.sqrt(temps[1:] * temps[:-1])
    got, want = table(mid), _coefficients(mid)
    for name in ("deep", "shallow", "relaxation", "breakup"):
        assert got[name] == pytest.approx(want[name], rel=1e-6)
    for name in ("shallow_atom_escapes", "shallow_dimer_escapes"):        # fractions of shallow
        assert got[name] / got["shallow"] == pytest.approx(want[name] / want["shallow"], abs=1e-6)
    cols = kinetics_columns([want[n] for n in KINETICS_FIELDS])
    assert cols[2] == pytest.approx(want["shallow_atom_escapes"] / want["shallow"], rel=1e-14)
    assert cols[5] == pytest.approx(np.log(want["breakup"]), rel=1e-14)


# --- (e) bad input ------------------------------------------------------------------------------

def _explicit(**over):
    kw = dict(species=SP, trap_hz=FREQS, n0=1e5, t0_nK=150.0, efimov=EF, a=1500.0, dimers="explicit")
    kw.update(over)
    return simulate_decay(np.linspace(0.0, 0.5, 4), **kw)


@pytest.mark.parametrize("over, argument", [
    ({"trap_depth": -100.0}, "trap_depth"),
    ({"trap_depth": 0.0}, "trap_depth"),
    ({"trap_depth": float("nan")}, "trap_depth"),
    ({"trap_depth": [1000.0, 2000.0]}, "trap_depth"),
    ({"counts_dimers": "yes"}, "counts_dimers"),
    ({"counts_dimers": 1}, "counts_dimers"),
    ({"dimers": "implicit"}, "dimers"),
    ({"method": "euler"}, "method"),
    ({"a": -1500.0}, "a"),
    ({"beta": 1e-10}, "beta"),
    ({"model": "capped"}, "model"),
    ({"efimov": None, "l3": 3e-25}, "l3"),
    ({"efimov": None, "l3": 3e-25, "trap_depth": 900.0}, "trap_depth"),
    ({"gamma_dimer": -1.0}, "gamma_dimer"),
    ({"n_dimers0": -3.0}, "n_dimers0"),
])
def test_bad_input_names_the_argument(over, argument):
    with pytest.raises(LossfitValueError) as info:
        _explicit(**over)
    assert info.value.argument == argument


@pytest.mark.parametrize("rates, argument", [
    ({**dict.fromkeys(KINETICS_FIELDS, 1e-25), "relaxation": -1e-11}, "rates.relaxation"),
    ({**dict.fromkeys(KINETICS_FIELDS, 1e-25), "shallow_atom_escapes": 2e-25}, "rates.shallow_atom_escapes"),
    ({**dict.fromkeys(KINETICS_FIELDS, 1e-25), "deep": float("inf")}, "rates.deep"),
    ({name: 1e-25 for name in KINETICS_FIELDS[:-1]}, "rates"),
])
def test_bad_kinetics_tables_name_the_coefficient(rates, argument):
    with pytest.raises(LossfitValueError) as info:
        TabulatedKinetics.constant(rates)
    assert info.value.argument == argument


def test_tables_go_where_they_belong():
    table = TabulatedKinetics.constant(dict.fromkeys(KINETICS_FIELDS, 1e-25), 50.0, 500.0)
    rate = lf.TabulatedRate(np.geomspace(50.0, 500.0, 6), np.full(6, 1e-25))
    with pytest.raises(LossfitValueError) as info:
        simulate_decay([0.0, 1.0], species=SP, trap_hz=FREQS, n0=1e5, t0_nK=150.0, l3=rate, dimers="explicit")
    assert info.value.argument == "l3"
    with pytest.raises(LossfitValueError) as info:
        simulate_decay([0.0, 1.0], species=SP, trap_hz=FREQS, n0=1e5, t0_nK=150.0, l3=1e-25, beta=table,
                       n_dimers0=10.0)
    assert info.value.argument == "beta"
    batch = DecayBatch([np.array([0.0, 1.0])], species=SP, traps_hz=FREQS)
    with pytest.raises(LossfitValueError) as info:
        batch(1e5, 150.0, 1e-25, n_dimers0=10.0, beta=[table])
    assert info.value.argument == "beta"
    with pytest.raises(LossfitValueError) as info:
        DecayBatch([np.array([0.0, 1.0])], species=SP, traps_hz=FREQS, counts_dimers=[True, False])
    assert info.value.argument == "counts_dimers"
    with pytest.raises(LossfitValueError, match="tabulated"):
        simulate_decay([0.0, 1.0], species=SP, trap_hz=FREQS, n0=1e5, t0_nK=800.0, l3=table)
    with pytest.raises(LossfitValueError) as info:
        kinetics_columns(np.ones((5, 3)))
    assert info.value.argument == "values"
