"""Two identical bosons B and a distinguishable atom X (the BBX system) near a B-X resonance.

:func:`heteronuclear` builds a :class:`HeteronuclearSystem`: the two species, their mass
ratio, the Efimov exponent s0 of two resonant B-X pairs and its scaling factor
exp(pi/s0), the B-X reduced mass, C6 and van der Waals length, the J = 0 unitarity bound
of the event rate K3 n_B^2 n_X and the three-body collision-energy distribution of a
Boltzmann mixture at one or two temperatures. The derivations are in
docs/heteronuclear.md:

* s0 solves s0 cosh(pi s0/2) sin(2 phi) = 2 sinh(phi s0), sin(phi) = m_B/(m_B + m_X)
  (V. Efimov, Nucl. Phys. A 210, 157 (1973), quoted from memory; E. Braaten & H.-W. Hammer,
  Phys. Rep. 428, 259 (2006)), found with scipy's brentq;
* collision energies in the centre-of-mass frame: E = E_BB + E_3, the B-B relative energy
  (temperature T_B) plus that of X against the B pair (temperature
  T_3 = (2 m_B T_X + m_X T_B)/(2 m_B + m_X)); at T_B = T_X it is E^2 e^{-E/k_BT}/(2(k_BT)^3);
* K3 counts recombination *events*, d N_B/dt = -2 K3 int n_B^2 n_X d^3r,
  d N_X/dt = -K3 int n_B^2 n_X d^3r (:func:`convert_k3`, :func:`loss_rates`).

Units as everywhere in lossfit (docs/architecture.md): lengths in a0, temperatures and
energies in nK (energy as E/k_B), K3 in cm^6/s, C6 in atomic units (E_h a0^6).
"""

__all__ = ["HeteronuclearSystem", "heteronuclear", "system_from_name", "efimov_exponent", "known_pairs",
           "three_body_energy_density", "mean_inverse_square_energy", "K3_CONVENTIONS",
           "convert_k3", "loss_rates"]

import functools
import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq
from scipy.special import ive

from .constants import ABAR_OVER_RVDW, BOHR, ELECTRON_MASS, HBAR, K_B
from .errors import LossfitValueError, check_finite, check_positive, is_real
from .species import Species, species_argument
from .units import CM6_PER_S, NK

_C6_DBD = ("C6: Derevianko, Babb & Dalgarno, PRA 63, 052704 (2001) (quoted from memory; "
           "isotope independent)")
# Interspecies C6 in atomic units, keyed by the unordered pair of species names.
_C6_TABLE = {
    frozenset(("133Cs", "6Li")): (3065.0, _C6_DBD),
    frozenset(("133Cs", "7Li")): (3065.0, _C6_DBD),
    frozenset(("87Rb", "40K")): (4274.0, _C6_DBD),
    frozenset(("87Rb", "41K")): (4274.0, _C6_DBD),
}
# Registered species that are fermions: two of them cannot be the identical bosons B.
_FERMIONS = frozenset(("6Li", "40K"))

# Bracket of the root search: s0 grows without bound as m_B/m_X grows (docs/heteronuclear.md).
_S_MAX = 256.0   # cosh(pi s/2) stays finite in double precision


def known_pairs():
    """The B-X pairs whose interspecies C6 lossfit holds, as (name, name) tuples."""
    return [tuple(sorted(pair)) for pair in _C6_TABLE]


def _sinhc(x):
    # sinh(x)/x, equal to 1 at x = 0
    return 1.0 if x == 0.0 else math.sinh(x) / x


def _coupling(s, angle):
    # 2 sinh(angle s)/(s sin(2 angle)): the Mellin transform of one exchange kernel at
    # s -> i s (docs/heteronuclear.md, eq. (S3)), divided by s
    return 2.0 * angle * _sinhc(angle * s) / math.sin(2.0 * angle)


def efimov_exponent(mass_ratio, *, resonant_pairs=2):
    """Efimov exponent s0 of two identical bosons B and a third atom X at unitarity (J = 0).

    Parameters
    ----------
    mass_ratio : float
        m_B/m_X (> 0).
    resonant_pairs : {2, 3}
        2: the two B-X pairs are resonant and the B-B pair does not interact (the
        equation s0 cosh(pi s0/2) sin 2phi = 2 sinh(phi s0), sin phi = m_B/(m_B + m_X));
        3: the B-B pair is resonant too (docs/heteronuclear.md, eq. (S5); at equal masses
        the identical-boson s0 = 1.00624).

    Returns
    -------
    float
        s0 (dimensionless, > 0).
    """
    if not (is_real(mass_ratio) and math.isfinite(mass_ratio) and mass_ratio > 0):
        raise LossfitValueError("mass_ratio", f"must be a positive finite number m_B/m_X, got {mass_ratio!r}")
    if resonant_pairs not in (2, 3) or isinstance(resonant_pairs, bool):
        raise LossfitValueError("resonant_pairs", f"must be 2 (B-X only) or 3 (B-B too), got {resonant_pairs!r}")
    # scipy.optimize costs ~0.3 s of start-up; `import lossfit` loads this module (docs/architecture.md)

    r = float(mass_ratio)
    phi = math.asin(r / (r + 1.0))                    # B-spectator to B-spectator
    psi = math.asin(math.sqrt(1.0 / (2.0 * (r + 1.0))))   # B-spectator to X-spectator

    # The defining equations divided by s (so that s -> 0 is regular): negative at s = 0,
    # positive for large s, one root in between.
    if resonant_pairs == 2:
        def excess(s):
            return math.cosh(0.5 * math.pi * s) - _coupling(s, phi)
    else:
        def excess(s):
            g_phi, g_psi = _coupling(s, phi), _coupling(s, psi)
            return math.cosh(0.5 * math.pi * s) - 0.5 * (g_phi + math.sqrt(g_phi ** 2 + 8.0 * g_psi ** 2))

    hi = 1.0
    while excess(hi) <= 0.0:
        hi *= 2.0
        if hi > _S_MAX:
            raise LossfitValueError("mass_ratio", f"s0 beyond {_S_MAX:g} for m_B/m_X = {r!r}")
    return brentq(excess, 0.0, hi, xtol=1e-15, rtol=4.0 * np.finfo(float).eps)


def _finish(values):
    return values.item() if values.ndim == 0 else values


def three_body_energy_density(energy_nk, pair_temperature_nk, third_temperature_nk):
    """Probability density of E = E_pair + E_third, two independent thermal relative energies.

    E_pair (the B-B relative energy) and E_third (X against the B pair) each have the
    Boltzmann density (2/sqrt pi) E^(1/2) e^{-E/theta}/theta^(3/2), theta = k_B T; their
    sum has (docs/heteronuclear.md, eq. (T4))

        P(E) = E^2 exp(-E/theta_max) [I_1(delta E)/(delta E)] / (theta_1 theta_2)^(3/2)
               x exp(-delta E),   delta = |1/theta_1 - 1/theta_2|/2,

    which at equal temperatures is E^2 e^{-E/theta}/(2 theta^3).

    Parameters
    ----------
    energy_nk : array_like
        Collision energy E/k_B in nK (>= 0).
    pair_temperature_nk, third_temperature_nk : array_like
        The two temperatures in nK (> 0), broadcast against ``energy_nk``.

    Returns
    -------
    float or ndarray
        P(E) in 1/nK.
    """
    # scipy.special costs start-up time; `import lossfit` loads this module (docs/architecture.md)

    e = check_positive("energy_nk", energy_nk, allow_zero=True)
    t1 = check_positive("pair_temperature_nk", pair_temperature_nk)
    t2 = check_positive("third_temperature_nk", third_temperature_nk)
    e, t1, t2 = np.broadcast_arrays(e, t1, t2)
    delta = 0.5 * np.abs(1.0 / t1 - 1.0 / t2)
    x = delta * e
    # I_1(x) e^{-x}/x, with its limit 1/2 at x = 0
    bessel = np.divide(ive(1, x), x, out=np.full(x.shape, 0.5), where=x > 0.0)
    density = e ** 2 * np.exp(-e / np.maximum(t1, t2)) * bessel / (t1 * t2) ** 1.5
    return _finish(density)


def mean_inverse_square_energy(pair_temperature_nk, third_temperature_nk):
    """<1/E^2> over :func:`three_body_energy_density`, in 1/nK^2.

    Equal to 2/(sqrt(T_1 T_2) (sqrt T_1 + sqrt T_2)^2) (docs/heteronuclear.md, eq. (T5)),
    1/(2 T^2) at equal temperatures.

    Parameters
    ----------
    pair_temperature_nk, third_temperature_nk : array_like
        The two temperatures in nK (> 0).

    Returns
    -------
    float or ndarray
        <(E/k_B)^-2> in nK^-2.
    """
    t1 = check_positive("pair_temperature_nk", pair_temperature_nk)
    t2 = check_positive("third_temperature_nk", third_temperature_nk)
    root = np.sqrt(t1 * t2)
    return _finish(2.0 / (root * (np.sqrt(t1) + np.sqrt(t2)) ** 2))


@dataclass(frozen=True)
class HeteronuclearSystem:
    """Two identical bosons B and a third, distinguishable atom X with resonant B-X pairs.

    Build it with :func:`heteronuclear`.

    Parameters
    ----------
    boson : Species
        The species B of the two identical bosons.
    other : Species
        The species X of the third atom (boson or fermion).
    a_bb : float
        B-B scattering length in a0 (a finite a_bb leaves s0 unchanged: s0 describes
        hyperradii beyond |a_bb|, docs/heteronuclear.md).
    c6_bx : float
        Interspecies van der Waals coefficient C6 in atomic units (E_h a0^6).
    c6_source : str
        Where ``c6_bx`` comes from.
    """

    boson: Species
    other: Species
    a_bb: float = 0.0
    c6_bx: float = None
    c6_source: str = field(default="user-defined", compare=False)

    def __post_init__(self):
        for arg in ("boson", "other"):
            if not isinstance(getattr(self, arg), Species):
                raise LossfitValueError(arg, f"must be a Species, got {getattr(self, arg)!r}")
        if self.boson == self.other:
            raise LossfitValueError("other", f"is the boson species {self.boson.name!r} itself: three "
                                    "identical bosons are lossfit's single-species case (lf.l3)")
        if self.boson.name in _FERMIONS:
            raise LossfitValueError("boson", f"{self.boson.name} is a fermion; B must be a bosonic species "
                                    "(the B pair is symmetric)")
        if not (is_real(self.a_bb) and math.isfinite(self.a_bb)):
            raise LossfitValueError("a_bb", f"must be a finite B-B scattering length in a0, got {self.a_bb!r}")
        if not (is_real(self.c6_bx) and math.isfinite(self.c6_bx) and self.c6_bx > 0):
            raise LossfitValueError("c6_bx", f"must be a positive finite C6 in atomic units, got {self.c6_bx!r}")
        object.__setattr__(self, "a_bb", float(self.a_bb))
        object.__setattr__(self, "c6_bx", float(self.c6_bx))

    def __repr__(self):
        return (f"HeteronuclearSystem({self.boson.name}-{self.boson.name}-{self.other.name}, "
                f"m_B/m_X={self.mass_ratio:.5g}, s0={self.s0:.6f}, scaling={self.scaling:.5g}, "
                f"a_bb={self.a_bb:g} a0, r_vdW(BX)={self.r_vdw:.2f} a0)")

    @property
    def name(self):
        """The system as "B-B-X", e.g. "133Cs-133Cs-6Li" (used in outputs)."""
        return f"{self.boson.name}-{self.boson.name}-{self.other.name}"

    @property
    def label(self):
        """:attr:`name`, with a_bb where it is not zero."""
        return self.name if self.a_bb == 0.0 else f"{self.name} (a_bb = {self.a_bb:g} a0)"

    # -- masses and kinematics -------------------------------------------------------

    @property
    def mass(self):
        """The mass of lossfit's natural units for this system, m_B in kg: rates are in
        hbar^5/(m_B^3 (k_BT)^2) and thermal wavenumbers sqrt(m_B k_BT)/hbar."""
        return self.boson.mass

    @property
    def mass_boson(self):
        """m_B in kg."""
        return self.boson.mass

    @property
    def mass_other(self):
        """m_X in kg."""
        return self.other.mass

    @functools.cached_property
    def mass_ratio(self):
        """m_B/m_X (from the isotope masses in u)."""
        return self.boson.mass_u / self.other.mass_u

    @functools.cached_property
    def reduced_mass(self):
        """B-X reduced mass mu = m_B m_X/(m_B + m_X), in kg."""
        return self.mass_boson * self.mass_other / (self.mass_boson + self.mass_other)

    @functools.cached_property
    def kinematic_angle(self):
        """phi in rad, sin phi = m_B/(m_B + m_X): pi/2 minus the angle between the mass-scaled
        Jacobi coordinates of the two B-X pairs (docs/heteronuclear.md)."""
        return math.asin(self.mass_ratio / (self.mass_ratio + 1.0))

    # -- Efimov physics --------------------------------------------------------------

    @functools.cached_property
    def s0(self):
        """Efimov exponent s0 of the two resonant B-X pairs (J = 0, :func:`efimov_exponent`)."""
        return efimov_exponent(self.mass_ratio)

    @functools.cached_property
    def scaling(self):
        """Discrete scaling factor exp(pi/s0) between successive Efimov features."""
        return math.exp(math.pi / self.s0)

    # -- van der Waals ---------------------------------------------------------------

    @functools.cached_property
    def r_vdw(self):
        """B-X van der Waals length r_vdW = (1/2)(2 mu C6/hbar^2)^(1/4), in a0."""
        two_mu_au = 2.0 * self.reduced_mass / ELECTRON_MASS     # atomic units: hbar = m_e = a0 = 1
        return 0.5 * (two_mu_au * self.c6_bx) ** 0.25

    @functools.cached_property
    def vdw_energy_nK(self):
        """B-X van der Waals energy hbar^2/(2 mu r_vdW^2) as E/k_B, in nK (the identical-boson
        hbar^2/(m r_vdW^2) with m = 2 mu): collision energies near it probe the short-range
        potential, beyond zero-range theory."""
        return HBAR ** 2 / (2.0 * self.reduced_mass * (self.r_vdw * BOHR) ** 2) / K_B * 1e9

    @functools.cached_property
    def abar(self):
        """Gribakin-Flambaum mean scattering length of the B-X pair, 0.955978 r_vdW, in a0."""
        return ABAR_OVER_RVDW * self.r_vdw

    # -- thermal distributions ---------------------------------------------------------

    def _temperatures(self, temperature_nk, temperature_x_nk):
        t_b = check_positive("temperature_nk", temperature_nk)
        t_x = t_b if temperature_x_nk is None else check_positive("temperature_x_nk", temperature_x_nk)
        return t_b, t_x

    def effective_temperatures(self, temperature_nk, temperature_x_nk=None):
        """Temperatures of the two independent parts of the relative energy.

        Parameters
        ----------
        temperature_nk : array_like
            Temperature T_B of the bosons in nK.
        temperature_x_nk : array_like, optional
            Temperature T_X of the X atoms in nK (default T_B).

        Returns
        -------
        (float or ndarray, float or ndarray)
            T_BB = T_B of the B-B relative motion and T_3 = (2 m_B T_X + m_X T_B)/(2 m_B + m_X)
            of the X-(BB) motion, in nK.
        """
        t_b, t_x = self._temperatures(temperature_nk, temperature_x_nk)
        r = self.mass_ratio
        t_3 = (2.0 * r * t_x + t_b) / (2.0 * r + 1.0)
        return _finish(np.asarray(t_b, dtype=float)), _finish(np.asarray(t_3, dtype=float))

    def collision_energy_density(self, energy_nk, temperature_nk, temperature_x_nk=None):
        """Density of the three-body relative energy E of a B, B, X triple in a Boltzmann mixture.

        Parameters
        ----------
        energy_nk : array_like
            E/k_B in nK (>= 0), centre-of-mass frame.
        temperature_nk : array_like
            Boson temperature T_B in nK.
        temperature_x_nk : array_like, optional
            X temperature in nK (default T_B: then P3(E) = E^2 e^{-E/k_BT}/(2(k_BT)^3) for any
            masses).

        Returns
        -------
        float or ndarray
            P(E) in 1/nK (:func:`three_body_energy_density`).
        """
        t_bb, t_3 = self.effective_temperatures(temperature_nk, temperature_x_nk)
        return three_body_energy_density(energy_nk, t_bb, t_3)

    # -- unitarity -------------------------------------------------------------------

    @functools.cached_property
    def _bound_constant_si(self):
        # K3(E) E^2 <= 8 pi^2 hbar^5 (2 m_B + m_X)^(3/2)/(m_B^3 m_X^(3/2)), in m^6 J^2/s
        m_b, m_x = self.mass_boson, self.mass_other
        return 8.0 * math.pi ** 2 * HBAR ** 5 * (2.0 * m_b + m_x) ** 1.5 / (m_b ** 3 * m_x ** 1.5)

    def unitarity_bound_at_energy(self, energy_nk):
        """J = 0 unitarity bound of the event coefficient K3 at collision energy E.

        K3(E) <= 8 pi^2 hbar^5 (2 m_B + m_X)^(3/2)/(m_B^3 m_X^(3/2) E^2) for the event rate
        K3 n_B^2 n_X of a thermal (non-condensed) mixture (docs/heteronuclear.md).

        Parameters
        ----------
        energy_nk : array_like
            E/k_B in nK (> 0).

        Returns
        -------
        float or ndarray
            K3 in cm^6/s (events).
        """
        e = check_positive("energy_nk", energy_nk) * NK
        return _finish(self._bound_constant_si / e ** 2 / CM6_PER_S)

    def unitarity_bound(self, temperature_nk, temperature_x_nk=None):
        """Thermally averaged J = 0 unitarity bound of the event coefficient K3 (|a_BX| = infinity).

        4 pi^2 hbar^5 (2 m_B + m_X)^(3/2)/(m_B^3 m_X^(3/2) (k_B T)^2) at one temperature;
        with T_X != T_B, <1/E^2> of :func:`mean_inverse_square_energy` replaces 1/(2 (k_B T)^2).

        Parameters
        ----------
        temperature_nk : array_like
            Boson temperature T_B in nK.
        temperature_x_nk : array_like, optional
            X temperature in nK (default T_B).

        Returns
        -------
        float or ndarray
            K3 in cm^6/s, events: d N_X/dt = -K3 int n_B^2 n_X d^3r.
        """
        t_bb, t_3 = self.effective_temperatures(temperature_nk, temperature_x_nk)
        mean = np.asarray(mean_inverse_square_energy(t_bb, t_3)) / NK ** 2
        return _finish(self._bound_constant_si * mean / CM6_PER_S)




def heteronuclear(boson, other, a_bb=0.0, *, c6_bx=None):
    """The BBX system of two identical bosons ``boson`` and one atom ``other``.

    Parameters
    ----------
    boson : str or Species
        Species B of the two identical bosons (``"133Cs"``, ``"87Rb"``, …).
    other : str or Species
        Species X of the third atom (``"6Li"``, ``"40K"``, …).
    a_bb : float, optional
        B-B scattering length in a0 (default 0). Rates with a_bb != 0 exist for
        133Cs-133Cs-6Li at a < 0 with a_bb <= 0 and 0.05 <= a_bb/a <= 15.8
        (docs/heteronuclear-rates.md, "The B-B interaction at a < 0"); elsewhere they are refused.
    c6_bx : float, optional
        Interspecies C6 in atomic units; required for pairs outside :func:`known_pairs`,
        and overrides the table otherwise.

    Returns
    -------
    HeteronuclearSystem
    """
    b = species_argument("boson", boson)
    x = species_argument("other", other)
    if c6_bx is not None:
        return HeteronuclearSystem(b, x, a_bb, c6_bx, "user-defined")
    entry = _C6_TABLE.get(frozenset((b.name, x.name)))
    if entry is None:
        known = ", ".join("-".join(pair) for pair in known_pairs())
        raise LossfitValueError("c6_bx", f"no interspecies C6 known for {b.name}-{x.name}; pass c6_bx= "
                                f"(atomic units). Known pairs: {known}")
    return HeteronuclearSystem(b, x, a_bb, entry[0], entry[1])


def system_from_name(name):
    """The :class:`HeteronuclearSystem` named "B-B-X" (e.g. "133Cs-133Cs-6Li", a_bb = 0), or
    None if ``name`` is not of that form (then it names one species)."""
    parts = name.split("-") if isinstance(name, str) else []
    if len(parts) != 3 or parts[0].lower() != parts[1].lower():
        return None
    return heteronuclear(parts[0], parts[2])


# -- loss conventions ----------------------------------------------------------------

#: Atoms counted per recombination event by each definition of the coefficient
#: (docs/heteronuclear.md, "Loss convention"): lossfit's K3 counts events.
K3_CONVENTIONS = {
    "events": 1.0,       # events/(volume time) = K3 n_B^2 n_X
    "x-lost": 1.0,       # d n_X/dt = -L n_B^2 n_X
    "b-lost": 2.0,       # d n_B/dt = -L n_B^2 n_X
    "atoms-lost": 3.0,   # d (n_B + n_X)/dt = -L n_B^2 n_X
}


def convert_k3(value, from_convention, to_convention="events"):
    """Convert a BBX loss coefficient between the definitions of :data:`K3_CONVENTIONS`.

    Parameters
    ----------
    value : array_like
        Coefficient in cm^6/s, defined by ``from_convention``.
    from_convention, to_convention : {"events", "x-lost", "b-lost", "atoms-lost"}

    Returns
    -------
    float or ndarray
        The coefficient in cm^6/s under ``to_convention``.
    """
    for name, conv in (("from_convention", from_convention), ("to_convention", to_convention)):
        if conv not in K3_CONVENTIONS:
            raise LossfitValueError(name, f"must be one of {', '.join(K3_CONVENTIONS)}, got {conv!r}")
    v = check_finite("value", value)
    return _finish(v * (K3_CONVENTIONS[to_convention] / K3_CONVENTIONS[from_convention]))


def loss_rates(k3_events, overlap_cm6):
    """Atom-number loss rates of the two species from the event coefficient.

    Parameters
    ----------
    k3_events : array_like
        K3 in cm^6/s (events, >= 0).
    overlap_cm6 : array_like
        int n_B^2 n_X d^3r in cm^-6 (>= 0; lossfit.experiment.mixture_trap).

    Returns
    -------
    (float or ndarray, float or ndarray)
        d N_B/dt = -2 K3 int n_B^2 n_X and d N_X/dt = -K3 int n_B^2 n_X, in atoms/s.
    """
    k = check_positive("k3_events", k3_events, allow_zero=True)
    i = check_positive("overlap_cm6", overlap_cm6, allow_zero=True)
    events = k * i
    return _finish(-2.0 * events), _finish(-1.0 * events)
