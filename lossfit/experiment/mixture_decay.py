"""Rate equations of a two-species thermal mixture with B-B-X three-body loss.

Two identical bosons B and one atom X recombine into a deep dimer and all three leave the
trap (docs/heteronuclear.md, "Loss convention"). With the event coefficient K3 (cm^6/s,
the coefficient of the loss of X) and the overlap I = int n_B^2 n_X d^3r of
:class:`lossfit.experiment.mixture_trap.MixtureTrap` (two harmonic traps with their own
frequencies and the differential gravitational sag),

    dN_B/dt = -Gamma_B N_B - 2 K3 I,
    dN_X/dt = -Gamma_X N_X -   K3 I,          I = N_B^2 N_X G(T_B, T_X),

G being the overlap per atom cubed. Without one-body loss N_B - 2 N_X is conserved.

Anti-evaporation (docs/heteronuclear.md, "Decay curves of a mixture", derives it). Each
cloud stays a Boltzmann Gaussian in its own harmonic trap, so it holds 3 N_s k_B T_s. A
loss proportional to n_B^2 n_X removes, per lost atom of species s, the kinetic energy
(3/2) k_B T_s (position and velocity are independent in a Boltzmann gas, and K3 is taken
as independent of the atoms' velocities) and the potential energy u_s k_B T_s, the mean of
the trap potential U_s over the weight n_B^2 n_X:

    u_B = sum_i (1/2) [b_i/(a_i + 2 b_i) + d_i^2 a_i/(a_i + 2 b_i)^2],
    u_X = sum_i (1/2) [a_i/(a_i + 2 b_i) + 4 d_i^2 b_i/(a_i + 2 b_i)^2],

a_i = sigma_B,i^2, b_i = sigma_X,i^2 and d_i the offset of the two clouds (the sag, along
z). For one species in one trap u = 1/2, the identical-boson value of
:mod:`lossfit.experiment.decay`. Two temperature models:

* ``t0_x_nK=None``: one temperature T shared by both clouds (interspecies
  thermalisation much faster than the loss),
  dT/dt = K3 N_B^2 N_X G T (9/2 - 2 u_B - u_X) / (3 (N_B + N_X));
* ``t0_x_nK`` given: two temperatures, no heat exchange between the clouds,
  dT_B/dt = 2 K3 N_B N_X G T_B (3/2 - u_B)/3,   dT_X/dt = K3 N_B^2 G T_X (3/2 - u_X)/3.

One-body loss removes average atoms and leaves T unchanged; no recombination heating is
modelled. ``heating=False`` holds the temperatures at their initial values. The equations
are integrated with scipy's ``solve_ivp`` (DOP853, the 8(5,3) pair of Hairer, Norsett & Wanner, Solving
Ordinary Differential Equations I, 2nd ed. (1993)) in the scaled variables N_s/N_s(0) and
T_s/T_s(0).
"""

__all__ = ["MixtureDecay", "MixtureDecayModel", "simulate_mixture_decay", "loss_weighted_potential_energy",
           "mixture_system"]

from typing import NamedTuple

import numpy as np
from scipy.integrate import solve_ivp

from ..errors import LossfitValueError, check_positive, check_times
from ..mixture import HeteronuclearSystem
from ..universal.mixture_model import resolve_species
from .mixture_trap import MixtureTrap

# Integrator: an explicit high-order pair suits these smooth, non-stiff equations; the
# absolute tolerance applies to the scaled variables (all of order one at t = 0).
_METHOD = "DOP853"
_ATOL = 1e-12


class MixtureDecay(NamedTuple):
    """Solution of the mixture rate equations at the requested times.

    Attributes
    ----------
    t : ndarray
        Times in s.
    n_b, n_x : ndarray
        Atom numbers N_B(t) and N_X(t).
    temperature, temperature_x : ndarray
        T_B(t) and T_X(t) in nK (equal arrays with one common temperature).
    overlap : ndarray
        int n_B^2 n_X d^3r in cm^-6 at each time: the event rate is K3 times it.
    common_temperature : bool
        True when both clouds share one temperature.
    """

    t: np.ndarray
    n_b: np.ndarray
    n_x: np.ndarray
    temperature: np.ndarray
    temperature_x: np.ndarray
    overlap: np.ndarray
    common_temperature: bool


def _scalar(name, value, *, allow_zero=False):
    arr = check_positive(name, value, allow_zero=allow_zero)
    if arr.ndim != 0:
        raise LossfitValueError(name, f"must be a single number, got shape {arr.shape}")
    return float(arr)


def mixture_system(species):
    """The :class:`~lossfit.mixture.HeteronuclearSystem` named by ``species``.

    Parameters
    ----------
    species : str or HeteronuclearSystem
        ``"B-B-X"`` (e.g. ``"133Cs-133Cs-6Li"``) or the result of ``lf.heteronuclear``.

    Returns
    -------
    HeteronuclearSystem
    """
    system = resolve_species(species)
    if not isinstance(system, HeteronuclearSystem):
        raise LossfitValueError("species", f"{system.name} is one species; mixture decay curves need two "
                                "bosons and a third atom, e.g. '133Cs-133Cs-6Li' or lf.heteronuclear(...)")
    return system


def _check_trap(trap, system):
    if not isinstance(trap, MixtureTrap):
        raise LossfitValueError("trap", f"must be a MixtureTrap (lossfit.experiment.mixture_trap), got "
                                f"{type(trap).__name__}")
    if trap.boson.name != system.boson.name or trap.other.name != system.other.name:
        raise LossfitValueError("trap", f"holds {trap.boson.name} and {trap.other.name}, but the system is "
                                f"{system.name}")
    return trap


def loss_weighted_potential_energy(trap, temperature_nk, temperature_x_nk=None):
    """Mean trap potential energy of the atoms a loss proportional to n_B^2 n_X removes.

    The average of U_B (and of U_X) over the weight n_B^2 n_X, each measured from the
    bottom of its own (sagged) trap, in units of k_B T_B (and k_B T_X); module docstring
    and docs/heteronuclear.md, "Decay curves of a mixture". The whole cloud averages 3/2.

    Parameters
    ----------
    trap : MixtureTrap
    temperature_nk : array_like
        T_B in nK.
    temperature_x_nk : array_like, optional
        T_X in nK (default T_B).

    Returns
    -------
    (float or ndarray, float or ndarray)
        u_B and u_X (dimensionless; 1/2 each for one species in one trap without sag).
    """
    if not isinstance(trap, MixtureTrap):
        raise LossfitValueError("trap", f"must be a MixtureTrap, got {type(trap).__name__}")
    width_b, width_x = trap.cloud_widths_um(temperature_nk, temperature_x_nk)
    a, b = width_b ** 2, width_x ** 2                      # um^2, shape (..., 3)
    d = np.array([0.0, 0.0, trap.sag_difference_um])
    spread = a + 2.0 * b
    u_b = 0.5 * np.sum(b / spread + d ** 2 * a / spread ** 2, axis=-1)
    u_x = 0.5 * np.sum(a / spread + 4.0 * d ** 2 * b / spread ** 2, axis=-1)
    return (u_b.item(), u_x.item()) if u_b.ndim == 0 else (u_b, u_x)


class _RateEquations:
    """Right-hand side in the scaled variables y = (N_B/N_B0, N_X/N_X0, T_B/T_B0, T_X/T_X0)."""

    def __init__(self, trap, t_b0, t_x0, common, heating, n_b0, n_x0, k3, gamma_b, gamma_x):
        self.trap = trap
        self.t_b0, self.t_x0 = t_b0, t_x0
        self.common, self.heating = common, heating
        self.n_b0, self.n_x0 = n_b0, n_x0
        self.k3, self.gamma_b, self.gamma_x = k3, gamma_b, gamma_x
        # without heating the geometry never changes: one overlap for the whole curve
        self.fixed_geometry = None if heating else self.geometry(t_b0, t_x0)

    def geometry(self, t_b, t_x):
        """int n_B^2 n_X d^3r per N_B^2 N_X, in cm^-6."""
        return self.trap.overlap(1.0, 1.0, t_b, t_x).integral

    def __call__(self, _t, y):
        n_b = max(y[0], 0.0) * self.n_b0       # a trial step may overshoot below zero
        n_x = max(y[1], 0.0) * self.n_x0
        t_b, t_x = y[2] * self.t_b0, y[3] * self.t_x0
        out = np.zeros(4)
        geometry = self.geometry(t_b, t_x) if self.heating else self.fixed_geometry
        events = self.k3 * n_b * n_b * n_x * geometry                   # events per s
        out[0] = (-self.gamma_b * n_b - 2.0 * events) / self.n_b0
        out[1] = (-self.gamma_x * n_x - events) / self.n_x0
        if self.heating and events > 0.0:
            u_b, u_x = loss_weighted_potential_energy(self.trap, t_b, t_x)
            if self.common:
                rate = events * (4.5 - 2.0 * u_b - u_x) / (3.0 * (n_b + n_x))   # (dT/dt)/T
                out[2] = out[3] = rate * y[2]
            else:
                out[2] = 2.0 * self.k3 * n_b * n_x * geometry * (1.5 - u_b) / 3.0 * y[2]
                out[3] = self.k3 * n_b * n_b * geometry * (1.5 - u_x) / 3.0 * y[3]
        return out


class MixtureDecayModel:
    """The mixture rate equations at fixed times, trap and temperatures, ready to be solved
    for many (N_B0, N_X0, K3, Gamma_B, Gamma_X): what a fit calls.

    Parameters
    ----------
    t : array_like, shape (n,)
        Strictly increasing hold times in s, >= 0 (the initial state is at t = 0).
    species : str or HeteronuclearSystem
        The B-B-X system (``"133Cs-133Cs-6Li"`` or ``lf.heteronuclear(...)``).
    trap : MixtureTrap
        The two traps; its species must be those of ``species``.
    t0_nK : float
        Initial temperature in nK (> 0): of both clouds, or of B if ``t0_x_nK`` is given.
    t0_x_nK : float, optional
        Initial temperature of X in nK. Given, the clouds keep separate temperatures (no
        heat exchange); None: one common temperature.
    heating : bool
        Anti-evaporation (module docstring); False holds the temperatures fixed.
    rtol : float
        Relative tolerance of the integrator (0 < rtol <= 1e-3).
    """

    def __init__(self, t, *, species, trap, t0_nK, t0_x_nK=None, heating=True, rtol=1e-10):
        self.t = check_times("t", t)
        self.system = mixture_system(species)
        self.trap = _check_trap(trap, self.system)
        self.t0_nK = _scalar("t0_nK", t0_nK)
        self.common_temperature = t0_x_nK is None
        self.t0_x_nK = self.t0_nK if self.common_temperature else _scalar("t0_x_nK", t0_x_nK)
        if not isinstance(heating, (bool, np.bool_)):
            raise LossfitValueError("heating", f"must be True or False, got {heating!r}")
        self.heating = bool(heating)
        rtol = _scalar("rtol", rtol)
        if rtol > 1e-3:
            raise LossfitValueError("rtol", f"must be at most 1e-3, got {rtol!r}")
        self.rtol = rtol

    def __repr__(self):
        temps = (f"T = {self.t0_nK:g} nK" if self.common_temperature
                 else f"T_B = {self.t0_nK:g} nK, T_X = {self.t0_x_nK:g} nK")
        return (f"MixtureDecayModel({self.system.name}, {self.t.size} times up to {self.t[-1]:g} s, {temps}, "
                f"heating={self.heating})")

    def __call__(self, n_b0, n_x0, k3, gamma_b=0.0, gamma_x=0.0):
        """Solve the rate equations.

        Parameters
        ----------
        n_b0, n_x0 : float
            Initial atom numbers of B and X (> 0).
        k3 : float
            Event coefficient K3 in cm^6/s (>= 0; docs/heteronuclear.md, "Loss convention").
        gamma_b, gamma_x : float
            One-body loss rates in 1/s (>= 0).

        Returns
        -------
        MixtureDecay
        """
        n_b0, n_x0 = _scalar("n_b0", n_b0), _scalar("n_x0", n_x0)
        k3 = _scalar("k3", k3, allow_zero=True)
        gamma_b = _scalar("gamma_b", gamma_b, allow_zero=True)
        gamma_x = _scalar("gamma_x", gamma_x, allow_zero=True)
        rhs = _RateEquations(self.trap, self.t0_nK, self.t0_x_nK, self.common_temperature, self.heating,
                             n_b0, n_x0, k3, gamma_b, gamma_x)
        y0 = np.ones(4)
        t_end = float(self.t[-1])
        if t_end == 0.0:
            y = np.ones((4, self.t.size))
        else:
            sol = solve_ivp(rhs, (0.0, t_end), y0, method=_METHOD, t_eval=self.t, rtol=self.rtol, atol=_ATOL)
            if not sol.success:
                raise LossfitValueError("k3", f"the rate equations could not be integrated ({sol.message}); "
                                        f"K3 = {k3:g} cm^6/s with N_B0 = {n_b0:g}, N_X0 = {n_x0:g}")
            y = sol.y
        n_b, n_x = y[0] * n_b0, y[1] * n_x0
        t_b, t_x = y[2] * self.t0_nK, y[3] * self.t0_x_nK
        overlap = self.trap.overlap(np.clip(n_b, 0.0, None), np.clip(n_x, 0.0, None), t_b, t_x).integral
        return MixtureDecay(t=self.t.copy(), n_b=n_b, n_x=n_x, temperature=t_b, temperature_x=t_x,
                            overlap=np.asarray(overlap, dtype=float), common_temperature=self.common_temperature)


def simulate_mixture_decay(t, *, species, trap, n_b0, n_x0, t0_nK, k3, t0_x_nK=None, gamma_b=0.0,
                           gamma_x=0.0, heating=True, rtol=1e-10):
    """Atom numbers and temperatures of a B-X mixture losing atoms to B-B-X recombination.

    Integrates the rate equations of the module docstring (derivation:
    docs/heteronuclear.md, "Decay curves of a mixture").

    Parameters
    ----------
    t : array_like, shape (n,)
        Strictly increasing hold times in s, >= 0; the initial state is at t = 0.
    species : str or HeteronuclearSystem
        The B-B-X system, e.g. ``"133Cs-133Cs-6Li"`` or ``lf.heteronuclear("133Cs", "6Li")``.
    trap : MixtureTrap
        Trap frequencies of both species and gravity (their differential sag).
    n_b0, n_x0 : float
        Initial atom numbers N_B(0), N_X(0) (> 0).
    t0_nK : float
        Initial temperature in nK: of both clouds, or of B when ``t0_x_nK`` is given.
    k3 : float
        Event coefficient K3 in cm^6/s (>= 0): dN_X/dt = -K3 int n_B^2 n_X d^3r,
        dN_B/dt = -2 K3 int n_B^2 n_X d^3r (convert other definitions with
        :func:`lossfit.mixture.convert_k3`).
    t0_x_nK : float, optional
        Initial X temperature in nK; given, each cloud keeps its own temperature (no heat
        exchange between them). None: one common temperature.
    gamma_b, gamma_x : float
        One-body loss rates of B and X in 1/s (>= 0).
    heating : bool
        Anti-evaporation heating (True) or fixed temperatures (False).
    rtol : float
        Relative tolerance of ``scipy.integrate.solve_ivp`` (DOP853).

    Returns
    -------
    MixtureDecay
        Times (s), N_B, N_X, T_B and T_X (nK) and int n_B^2 n_X (cm^-6) at ``t``.
    """
    model = MixtureDecayModel(t, species=species, trap=trap, t0_nK=t0_nK, t0_x_nK=t0_x_nK, heating=heating,
                              rtol=rtol)
    return model(n_b0, n_x0, k3, gamma_b, gamma_x)
