"""Zero-range recombination of two identical bosons and a third atom, a < 0, thermally averaged.

The B-B-X counterpart of :class:`lossfit.universal.models.ZeroRangeModel` for a < 0 (two
resonant B-X pairs, a_bb = 0, J = 0; for 133Cs-133Cs-6Li also a B-B length a_bb <= 0, below).
A table of the Efimov-channel reflection amplitude
s11(x), x = k|a| with E = hbar^2 k^2/(2 mu) (mu the B-X reduced mass), built by
``scripts/make_mixture_tables.py`` from the B-B-X momentum-space solver, gives the event
rate (K3 n_B^2 n_X events per volume and time)

    K3(E) = 8 pi^2 hbar^5 (2 m_B + m_X)^{3/2} / (m_B^3 m_X^{3/2} E^2)
            x (1 - |s11|^2)(1 - e^{-4 eta}) / |1 + s11 exp(2 i theta - 2 eta)|^2,

theta = s0 ln(kappa* |a|), kappa* = (kappa* a_-)/a_- with the table's kappa* a_-. The first
factor is the J = 0 unitarity bound of docs/heteronuclear.md section 5. Derivation, the
table's accuracy and the fixed rule's error: docs/heteronuclear-rates.md.

Natural units follow :mod:`lossfit.universal.models` with the boson mass m_B as the mass
(``HeteronuclearSystem.mass``): K3 in hbar/(m_B k_s^4), k_s = sqrt(m_B E_s)/hbar.

Thermal average at one temperature (the relative energy is then E^2 e^{-E/k_BT}/(2(k_BT)^3)
for any masses, docs/heteronuclear.md section 4):

    <K3> = [8 pi^2 ((2 m_B + m_X)/m_X)^{3/2} hbar^5/(m_B^3 (k_BT)^2)] (1/2) int_0^inf e^{-u} P(x_T sqrt u) du,

P the absorption probability above and x_T = k_T |a|, k_T = sqrt(2 mu k_BT)/hbar. The fast
path is a fixed composite Gauss-Legendre rule in ln u whose table values are prepared once
per point (:class:`MixturePlan`); the reference path is the adaptive engine of
:mod:`lossfit.thermal` on :attr:`MixtureZeroRangeModel.three_body_kernel`.

With a B-B scattering length a_bb (a property of the system, in a0) the rate depends also
on r = a_bb/a: :class:`lossfit.universal.tables.S11RatioTable` holds s11(x; r) and kappa* a_-(r)
on a grid of r, interpolated in ln r at each point's own r (fixed for a data set, so the fixed
rule's table values are prepared per point and node); s0 is then that of three resonant
pairs and kappa* = |kappa* a_-(a_bb/a_-)|/|a_-| (docs/heteronuclear-rates.md, "The B-B
interaction at a < 0").

Atom-dimer relaxation at a > 0, B + (BX) -> deep dimers (dimers lost, dn_D/dt = -beta n_B n_D),
has the same Efimov-channel form with the table s_AD(x) of
:class:`lossfit.universal.tables.MixtureAtomDimerTable`, x = k a, E = hbar^2 k^2/(2 mu_AD),
mu_AD = m_B (m_B + m_X)/(2 m_B + m_X):

    beta(E) = pi hbar/(mu_AD k) x T_AD (1 - e^{-4 eta*})/|1 + s_AD(x) exp(2 i theta - 2 eta*)|^2,

theta = s0 ln(kappa* a), kappa* = (kappa* a*)/a*, averaged over the atom-dimer relative energy
(2/sqrt pi) E^{1/2} (k_BT)^{-3/2} e^{-E/k_BT} by the same fixed rule (the weight u e^{-u} per
unit ln x is common to both rates, only the constant differs). The tables reach sixteen times
the dimer binding energy hbar^2/(2 mu a^2) (k a = 4 x_b, x_b the breakup threshold);
temperatures that put more than :data:`WEIGHT_BEYOND_TABLE_MAX` of the Boltzmann weight beyond
are refused (docs/heteronuclear-rates.md).

Three-body recombination at a > 0 (J = 0, :class:`lossfit.universal.tables.MixtureRecombinationTable`,
x = k a, E = hbar^2 k^2/(2 mu)) has the same prefactor as at a < 0 and the probability
(T_break (1 - e^{-4 eta}) [deep] + A + 2 Re(B w) + C |w|^2 [shallow])/|1 + s_AD w|^2,
w = exp(2 i theta - 2 eta), theta = s0 ln(kappa* a), kappa* = (kappa* a_+)/a_+ (or from a*);
channels "deep", "shallow" and "total" (the default), the table reaching 15 times the dimer
binding energy (docs/heteronuclear-rates.md, "Three-body recombination at a > 0").
"""

__all__ = ["MixtureZeroRangeModel", "MixtureThresholdModel", "MixturePlan", "mixture_table", "table_name",
           "atom_dimer_table_name", "recombination_table_name", "mixture_atom_dimer_table",
           "mixture_recombination_table", "shipped_systems", "resolve_model",
           "resolve_species", "rule_nodes", "weight_above", "beta_unitarity_prefactor", "WEIGHT_BEYOND_TABLE_MAX",
           "ratio_table_name", "mixture_ratio_table"]

import functools
import math
import os
from dataclasses import dataclass

import numba
import numpy as np
from scipy.special import gammaincc, gammainccinv

from ..errors import LossfitValueError
from ..mixture import HeteronuclearSystem, system_from_name
from ..species import Species
from ..species import species as _species
from ..thermal import ATOM_DIMER, FEATURES_SIGNATURE, KERNEL_SIGNATURE, THREE_BODY, U_MAX
from .averages import ETA_MIN
from .models import DEFAULT_MODEL, OBSERVED, EnergyModel, get_model
from .tables import (
    cache_directory,
    grid_limits,
    load_mixture_atom_dimer_table,
    load_mixture_recombination_table,
    load_s11_ratio_table,
    load_s11_table,
    mixture_recombination_eval,
    mixture_s_ad_eval,
    s11_eval,
    table_path,
)

# B-X pairs whose a < 0 table ships with the package (scripts/make_mixture_tables.py)
_SHIPPED = (("133Cs", "6Li"), ("133Cs", "7Li"), ("87Rb", "40K"), ("87Rb", "41K"))
# pairs whose a < 0 table on a grid of a_bb/a ships (scripts/make_mixture_abb_table.py)
_RATIO_SHIPPED = (("133Cs", "6Li"),)

# Fixed rule in y = ln x (x = k|a|), shared by all points of a plan: Gauss-Legendre panels
# no wider than _PANEL_MAX, and narrower where the Efimov resonance in x is sharp: its width
# in y is about (1 - |s11| e^{-2 eta_min})/(|s11| |d arg s11/dy|) (the denominator
# |1 + s11 e^{2i theta - 2 eta}|^2 passes through its minimum as arg s11 turns), and a panel
# spans at most _PANEL_PER_WIDTH of it.  Each point integrates u = E/k_BT = (x/x_T)^2 over
# [_U_LO, _U_HI]: below, the average holds < 1e-8 of its value (P <= 1); above, < e^-48.
_U_LO, _U_HI = 1e-8, 48.0
_PANEL_NODES = 6
_PANEL_MAX = 0.5
_PANEL_PER_WIDTH = 1.0
_FINE_STEP = 0.01
_TRIM = 1e-7
#: Largest Boltzmann weight of atom-dimer energies beyond the end of the atom-dimer table
#: that atom-dimer rates accept: beyond it the rates hold s_AD and T_AD at their last values
#: (docs/heteronuclear-rates.md bounds the error this makes).
WEIGHT_BEYOND_TABLE_MAX = 1e-3
# length of the stand-in for a missing table in the compiled kernels
_U_EMPTY = 16
_POSITIVE_COLUMNS = 7
# columns of a kernel row before the weights of the slices of r = a_bb/a
_ROW = 7
# (deep, shallow) weights of the a > 0 recombination channels
_POSITIVE_CHANNELS = {"deep": (1.0, 0.0), "shallow": (0.0, 1.0), "total": (1.0, 1.0)}


def rule_nodes(table, y_lo, y_hi, eta_min):
    """Nodes y = ln x and Gauss-Legendre weights (in y) of the fixed rule over [y_lo, y_hi].

    Parameters
    ----------
    table : S11Table, S11RatioTable or MixtureAtomDimerTable
        Anything with ``amplitudes(x) -> (T, s)`` and ``kinks()`` (an S11RatioTable gives one
        row per slice of r; the rule resolves the sharpest of them).
    y_lo, y_hi : float
        The range of ln x to cover.
    eta_min : float
        The smallest eta the rule must resolve (> 0).
    """
    fine = np.arange(y_lo, y_hi + 2.0 * _FINE_STEP + _PANEL_MAX, _FINE_STEP)
    s = table.amplitudes(np.exp(fine))[1]
    mod = np.abs(s)
    turn = mod * np.abs(np.gradient(np.unwrap(np.angle(s), axis=-1), fine, axis=-1))
    width = np.minimum(_PANEL_MAX, _PANEL_PER_WIDTH * (1.0 - mod * math.exp(-2.0 * eta_min))
                       / np.maximum(turn, 1e-300))
    width = width.min(axis=0) if width.ndim > 1 else width
    # panel edges also at the ends of the table grid, where the interpolant meets its limits
    # with a jump in slope
    kinks = [math.log(v) for v in table.kinks() if y_lo < math.log(v) < y_hi]
    edges = [y_lo]
    while edges[-1] < y_hi:
        i = int((edges[-1] - y_lo) / _FINE_STEP)
        ahead = width[i:i + int(_PANEL_MAX / _FINE_STEP) + 2]
        # the narrowest width within one maximal panel ahead, so a panel never steps over a
        # sharp part
        step = max(float(ahead.min()), _FINE_STEP)
        nxt = [k for k in kinks if edges[-1] < k < edges[-1] + step]
        edges.append(nxt[0] if nxt else edges[-1] + step)
    edges = np.asarray(edges)
    g, w = np.polynomial.legendre.leggauss(_PANEL_NODES)
    half = 0.5 * np.diff(edges)
    y = (0.5 * (edges[:-1] + edges[1:]))[:, None] + half[:, None] * g[None, :]
    return y.ravel(), (half[:, None] * w[None, :]).ravel()


def shipped_systems():
    """The (boson, other) species pairs whose zero-range tables ship with lossfit."""
    return list(_SHIPPED)


def table_name(system):
    """File name of the a < 0 table of ``system`` (a :class:`HeteronuclearSystem`)."""
    return f"s11_mixture_{system.boson.name}_{system.other.name}.npz"


def atom_dimer_table_name(system):
    """File name of the a > 0 atom-dimer table of ``system`` (a :class:`HeteronuclearSystem`)."""
    return f"s_ad_mixture_{system.boson.name}_{system.other.name}.npz"


def recombination_table_name(system):
    """File name of the a > 0 recombination table of ``system`` (a :class:`HeteronuclearSystem`)."""
    return f"k3_positive_mixture_{system.boson.name}_{system.other.name}.npz"


def ratio_table_name(system):
    """File name of the a < 0 table of ``system`` on a grid of a_bb/a."""
    return f"s11_mixture_abb_{system.boson.name}_{system.other.name}.npz"


def mixture_ratio_table(system):
    """The a < 0 table of ``system`` on a grid of r = a_bb/a
    (:class:`lossfit.universal.tables.S11RatioTable`; docs/heteronuclear-rates.md, "The B-B
    interaction at a < 0").

    Raises
    ------
    LossfitValueError
        For a pair without such a table (naming a_bb).
    """
    if (system.boson.name, system.other.name) not in _RATIO_SHIPPED:
        pairs = ", ".join(f"{b}-{b}-{x}" for b, x in _RATIO_SHIPPED)
        raise LossfitValueError("a_bb", f"finite-energy rates with a_bb != 0 are tabulated for {pairs} only; "
                                f"{system.label} has them for a_bb = 0 (the finite-a_bb solver gives threshold "
                                "laws, docs/stm-mixture.md section 6)")
    return load_s11_ratio_table(table_path(ratio_table_name(system)))


def _require_a_bb_zero(system):
    if system.a_bb != 0.0:
        raise LossfitValueError("species", f"zero-range rates of {system.label} are tabulated for a_bb = 0 only "
                                f"(got a_bb = {system.a_bb:g} a0); the finite-a_bb solver gives threshold laws "
                                "(docs/stm-mixture.md section 6)")


def _checked_mass_ratio(table, system, path):
    if not math.isclose(table.mass_ratio, system.mass_ratio, rel_tol=1e-9):
        raise LossfitValueError("species", f"the cached table {path!r} was built for mass ratio "
                                f"{table.mass_ratio:.8g}, not {system.mass_ratio:.8g}; rebuild it")
    return table


def mixture_atom_dimer_table(system):
    """The a > 0 atom-dimer table of ``system``
    (:class:`lossfit.universal.tables.MixtureAtomDimerTable`): shipped, or built by
    ``lossfit tables BOSON OTHER --atom-dimer``
    (:func:`lossfit.universal.solver.mixture_atom_dimer.build_table`) into
    :func:`lossfit.universal.tables.cache_directory`.

    Raises
    ------
    LossfitValueError
        For a pair without a table, or with a_bb != 0.
    """
    return _table_of(system, atom_dimer_table_name(system), load_mixture_atom_dimer_table, "atom-dimer",
                     "a few minutes", " --atom-dimer")


def _table_of(system, name, loader, what, minutes, flag):
    """A table of ``system`` read by ``loader``: shipped, or built by ``lossfit tables BOSON
    OTHER`` (with ``flag``) into the cache."""
    _require_a_bb_zero(system)
    if (system.boson.name, system.other.name) in _SHIPPED:
        return loader(table_path(name))
    cached = os.path.join(cache_directory(), name)
    if not os.path.exists(cached):
        pairs = ", ".join(f"{b}-{b}-{x}" for b, x in _SHIPPED)
        raise LossfitValueError("species", f"no {what} table for {system.label}; tables ship for {pairs}. "
                                f"Build one ({minutes}) with: lossfit tables {system.boson.name} "
                                f"{system.other.name}{flag}")
    return _checked_mass_ratio(loader(cached), system, cached)


def mixture_recombination_table(system):
    """The a > 0 recombination table of ``system``
    (:class:`lossfit.universal.tables.MixtureRecombinationTable`): shipped, or built with the
    atom-dimer table by ``lossfit tables BOSON OTHER --atom-dimer``
    (:func:`lossfit.universal.solver.mixture_recombination.build_table`).

    Raises
    ------
    LossfitValueError
        For a pair without a table, or with a_bb != 0.
    """
    return _table_of(system, recombination_table_name(system), load_mixture_recombination_table,
                     "a > 0 recombination", "a few minutes", " --atom-dimer")


def beta_unitarity_prefactor(mass_ratio):
    """The s-wave bound of atom-dimer relaxation in natural units: beta <= c/sqrt(x).

    beta(E) <= pi hbar/(mu_AD k) (sigma <= pi/k^2, velocity hbar k/mu_AD) with
    E = hbar^2 k^2/(2 mu_AD) = x E_s, in units hbar/(m_B k_s), k_s = sqrt(m_B E_s)/hbar:
    k = sqrt(2 mu_AD/m_B) k_s sqrt(x), so c = pi (m_B/mu_AD)^{3/2}/sqrt 2 with
    m_B/mu_AD = (2 m_B + m_X)/(m_B + m_X).

    Parameters
    ----------
    mass_ratio : float
        m_B/m_X.

    Returns
    -------
    float
        c; 3 sqrt(3) pi/4 at equal masses (:data:`lossfit.universal.models.UNITARITY_ATOM_DIMER`).
    """
    ratio = (2.0 * mass_ratio + 1.0) / (mass_ratio + 1.0)
    return math.pi * ratio ** 1.5 / math.sqrt(2.0)


def _refuse_beyond_table(x_e, x_max, x_unit, shape, collisions, table_name, thermal):
    """Refuse energies beyond a table's end k a = ``x_max`` (fixed energy, ``x_e`` = k a of
    each point) or temperatures that put more than WEIGHT_BEYOND_TABLE_MAX of the Boltzmann
    weight (:func:`weight_above` with ``shape``) there (``x_e`` = k a at E = k_BT). Energies
    are reported in units of the dimer binding energy hbar^2/(2 mu a^2) = (k a/x_unit)^2 times
    it."""
    reach = (x_max / x_unit) ** 2
    if not thermal:
        if (x_e > x_max).any():
            raise LossfitValueError("energy", f"{table_name} is tabulated up to {reach:.3g} hbar^2/(2 mu a^2) "
                                    f"(k a = {x_max:.6g}); got k a up to {x_e.max():.4g}")
        return
    weight = weight_above(x_e, x_max, shape)
    if (weight > WEIGHT_BEYOND_TABLE_MAX).any():
        worst = int(np.argmax(weight))
        # E_max / k_BT at which Q(shape, E_max/k_BT) is the limit: 11.23 (shape 3), 8.13 (3/2)
        safe_ratio = gammainccinv(shape, WEIGHT_BEYOND_TABLE_MAX)
        raise LossfitValueError("temperature", f"{weight[worst]:.2g} of the {collisions} (point {worst}: k_BT = "
                                f"{(x_e[worst] / x_unit) ** 2:.3g} times the dimer binding energy hbar^2/(2 mu a^2)) "
                                f"lie beyond {reach:.3g} times it, where {table_name} ends; lossfit accepts at "
                                f"most {WEIGHT_BEYOND_TABLE_MAX:g} (k_BT below {reach / safe_ratio:.3g} times the "
                                "binding energy): lower the temperature or leave such points out")


def weight_above(x_t, x_edge, shape=1.5):
    """Boltzmann weight of collision energies above k a = x_edge: Q(shape, (x_edge/x_T)^2).

    Parameters
    ----------
    x_t : ndarray
        k a at E = k_BT (E = hbar^2 k^2/(2 mu_AD) for atom + dimer, hbar^2 k^2/(2 mu) for
        three atoms).
    x_edge : float
        k a of the edge (the breakup threshold x_b, or the table's end).
    shape : float
        3/2 for the atom-dimer energy density (2/sqrt pi) E^{1/2} (k_BT)^{-3/2} e^{-E/k_BT},
        3 for the three-atom density E^2 e^{-E/k_BT}/(2 (k_BT)^3).

    Returns
    -------
    ndarray
        The regularised upper incomplete gamma function Q(shape, y), y = E_edge/k_BT:
        erfc(sqrt y) + 2 sqrt(y/pi) e^{-y} for 3/2, e^{-y}(1 + y + y^2/2) for 3.
    """
    y = (x_edge / np.asarray(x_t, dtype=float)) ** 2
    return gammaincc(shape, y)


def mixture_table(system):
    """The a < 0 table of ``system`` (:class:`lossfit.universal.tables.S11Table`): shipped,
    or built by ``lossfit tables`` into :func:`lossfit.universal.tables.cache_directory`.

    Raises
    ------
    LossfitValueError
        For a pair without a shipped table, or with a_bb != 0 (tables exist for a_bb = 0).
    """
    return _table_of(system, table_name(system), load_s11_table, "zero-range", "10-30 min", "")


def resolve_species(species):
    """A :class:`~lossfit.species.Species` (from a name) or a :class:`HeteronuclearSystem`
    (passed through, or from a name "B-B-X" such as "133Cs-133Cs-6Li"): the two kinds of
    ``species=`` lossfit accepts."""
    if isinstance(species, HeteronuclearSystem):
        return species
    system = system_from_name(species)
    if system is not None:
        return system
    if not isinstance(species, (str, Species)):
        raise LossfitValueError("species", f"must be a species name, a Species or a HeteronuclearSystem "
                                f"(lf.heteronuclear), got {species!r}")
    return _species(species)


def resolve_model(model, species):
    """The rate model for ``model`` (a name, an EnergyModel or None) and ``species``.

    For a :class:`HeteronuclearSystem`: ``"zero-range"`` (default) or ``"threshold"`` (the
    zero-energy law from the same table, for comparison), built for that system's masses
    and table.
    """
    if not isinstance(species, HeteronuclearSystem):
        return get_model(DEFAULT_MODEL if model is None else model)
    if isinstance(model, MixtureZeroRangeModel):
        if model.system != species:
            raise LossfitValueError("model", f"was built for {model.system.label}, not {species.label}")
        return model
    name = model.name if isinstance(model, EnergyModel) else model
    if name not in (None, "zero-range", "threshold"):
        raise LossfitValueError("model", f"for two bosons and a third atom ({species.label}) lossfit has "
                                f"'zero-range' and 'threshold', got {name!r}")
    return _mixture_model(species, name or "zero-range")


@dataclass(frozen=True)
class _EfimovChannel:
    """What the fixed rule needs of one rate of the Efimov-channel form
    prefactor x P(x) (1/x^2 for K3, 1/sqrt x for beta, in the natural energy unit):
    its table (``amplitudes(x) -> (T, s)``, ``kinks()``, ``s0``), kappa* times the
    feature's length, the ratio x/(q sqrt u) (q = k_T |a| with k_T = sqrt(m_B k_BT)/hbar),
    the constant c of the average c int u e^{-u} P dy (y = ln x, u = E/k_BT), and the
    names and sign of the feature's parameters."""

    table: object
    kappa_feature: float
    wavenumber_ratio: float
    average_prefactor: float
    feature: str
    eta: str
    sign: float
    fallback: tuple = None
    a_bb: float = 0.0

    def parameters(self, efimov):
        """(feature length, eta) from ``efimov`` (floats or walker arrays); where the feature is
        not set, from ``fallback`` = (feature name, eta name, ratio): the same kappa* gives
        feature = ratio x the other feature (a_+ from a*: (kappa* a_+)/(kappa* a*)). (None, None)
        when neither is set."""
        feature, eta = getattr(efimov, self.feature), getattr(efimov, self.eta)
        if (feature is None or eta is None) and self.fallback is not None:
            name, eta_name, ratio = self.fallback
            other, other_eta = getattr(efimov, name), getattr(efimov, eta_name)
            if other is not None and other_eta is not None:
                feature = ratio * np.asarray(other, dtype=float) if feature is None else feature
                eta = other_eta if eta is None else eta
                if np.ndim(feature) == 0:
                    feature = float(feature)
        return feature, eta

    def require(self, efimov):
        """:meth:`parameters`, raising the usual error for missing ones."""
        feature, eta = self.parameters(efimov)
        if feature is None or eta is None:
            efimov.require(self.feature, self.eta)
        return feature, eta

    def ratios(self, a):
        """r = a_bb/a at the points ``a`` (a0), refused (naming a_bb) outside the table's range."""
        r = self.a_bb / np.asarray(a, dtype=float)
        lo, hi = self.table.r_range
        bad = (r < lo) | (r > hi)
        if bad.any():
            worst = np.asarray(a, dtype=float)[bad].ravel()
            raise LossfitValueError("a_bb", f"a_bb = {self.a_bb:g} a0 gives a_bb/a outside the tabulated "
                                    f"[{lo:g}, {hi:g}] at a = {worst[0]:g} a0 ({worst.size} point(s)): the "
                                    f"table covers |a| from {abs(self.a_bb) / hi:.4g} to {abs(self.a_bb) / lo:.4g} a0 "
                                    f"(a_bb of the sign of a) for this a_bb")
        return r

    def log_kappa(self, feature):
        """ln kappa* (kappa* in 1/a0) for the feature's length (a0, float or walker array):
        ln|kappa* a_f| - ln|a_f|, with kappa* a_- taken at r = a_bb/a_- where a_bb != 0."""
        if not self.a_bb:
            return math.log(abs(self.kappa_feature)) - np.log(np.abs(np.asarray(feature, dtype=float)))
        if np.ndim(feature) == 0:
            feature = float(feature)
            r = self.a_bb / feature
            bad = not self.table.r_range[0] <= r <= self.table.r_range[1]
            if not bad:
                return self.table.ln_abs_kappa_a_minus(r) - math.log(abs(feature))
        feature = np.asarray(feature, dtype=float)
        r = self.a_bb / feature
        lo, hi = self.table.r_range
        if np.min(r) < lo or np.max(r) > hi:
            raise LossfitValueError(self.feature, f"a_bb/{self.feature} must lie in the tabulated [{lo:g}, {hi:g}] "
                                    f"(a_bb = {self.a_bb:g} a0): {self.feature} between "
                                    f"{-abs(self.a_bb) / lo:.4g} and {-abs(self.a_bb) / hi:.4g} a0")
        return self.table.ln_abs_kappa_a_minus(r) - np.log(np.abs(feature))

    def two_theta(self, a, feature):
        """2 theta = 2 s0 ln(kappa* |a|) at ``a`` (a0) for the feature's length (a0)."""
        return 2.0 * self.table.s0 * (self.log_kappa(feature) + np.log(np.abs(np.asarray(a, dtype=float))))

    def image(self, feature, n):
        """The n-th next feature (a0) that the same kappa* and eta give: lambda^n times the
        feature where a_bb = 0 (lambda = e^{pi/s0}); with a_bb the |a| that solves
        kappa* |a| = lambda^n |kappa* a_-(a_bb/a)| (s0 of three resonant pairs at fixed r,
        iterated; NaN where a_bb/a leaves the table)."""
        feature = np.asarray(feature, dtype=float)
        step = n * math.pi / self.table.s0
        if not self.a_bb:
            return feature * math.exp(step)
        ln_kappa = self.log_kappa(feature)
        lo, hi = self.table.r_range
        ln_a = np.log(np.abs(feature)) + step
        for _ in range(40):       # ln|kappa* a_-| changes by < 0.1 per unit of ln r: a contraction
            r = np.clip(abs(self.a_bb) * np.exp(-ln_a), lo, hi)
            ln_a = step + np.log(np.abs(self.table.kappa_a_minus(r))) - ln_kappa
        r = abs(self.a_bb) * np.exp(-ln_a)
        return np.where((r < lo) | (r > hi), np.nan, np.sign(feature) * np.exp(ln_a))


@functools.lru_cache(maxsize=None)
def _mixture_model(system, name):
    return MixtureThresholdModel(system) if name == "threshold" else MixtureZeroRangeModel(system)


class MixtureZeroRangeModel(EnergyModel):
    """Exact zero-range rates of two identical bosons and a third atom: recombination at a < 0
    and atom-dimer relaxation B + (BX) -> deep dimers at a > 0.

    Parameters
    ----------
    system : HeteronuclearSystem
        A system with shipped or cached tables (:func:`shipped_systems`), a_bb = 0, or
        133Cs-133Cs-6Li with a_bb <= 0 (a < 0 only, :func:`mixture_ratio_table`); each table is
        loaded when its rate is first used.

    Notes
    -----
    Every event at a < 0 forms a deep dimer and removes two B and one X (docs/heteronuclear.md
    section 6), so the total, deep and observed channels coincide. Rates are events:
    d n_X/dt = -K3 n_B^2 n_X. beta counts dimers lost: d n_D/dt = -beta n_B n_D (cm^3/s).
    """

    name = "zero-range"
    description = ("exact zero-range rates of two identical bosons and a third atom (K3 at a < 0, J = 0 K3 into "
                   "shallow and deep dimers and atom-dimer relaxation at a > 0, a_bb = 0)")
    approximate = False
    resolves_channels = False

    def __init__(self, system):
        if not isinstance(system, HeteronuclearSystem):
            raise LossfitValueError("system", f"must be a HeteronuclearSystem, got {system!r}")
        self.system = system
        m_b, m_x = system.mass_boson, system.mass_other
        #: K3 (1/x^2) P in natural units: 8 pi^2 ((2 m_B + m_X)/m_X)^{3/2}
        self.k3_prefactor = 8.0 * math.pi ** 2 * ((2.0 * m_b + m_x) / m_x) ** 1.5
        #: x = k|a| from q = k_s|a| (mass m_B) at E = E_s: sqrt(2 mu/m_B)
        self.wavenumber_ratio = math.sqrt(2.0 * system.reduced_mass / m_b)
        mu_ad = m_b * (m_b + m_x) / (2.0 * m_b + m_x)
        #: beta = (this/sqrt x) P in natural units hbar/(m_B k_s) (the s-wave bound)
        self.beta_prefactor = beta_unitarity_prefactor(system.mass_ratio)
        #: k a of the atom-dimer collision from q = k_s a at E = E_s: sqrt(2 mu_AD/m_B)
        self.atom_dimer_wavenumber_ratio = math.sqrt(2.0 * mu_ad / m_b)
        self._kernel = None
        self._features = None
        self._ad_kernel = None
        self._ad_features = None
        self._ad_channel = None
        self._k3_channel = None
        self._k3_positive = None

    def __getstate__(self):
        return {"system": self.system}

    # each table is loaded on first use, so that K3 at a < 0 and beta at a > 0 each need only
    # their own (a pair built on demand may have one of them)
    @property
    def table(self):
        """The a < 0 table s11(k|a|) (:func:`mixture_table`)."""
        return self._three_body_channel.table

    @property
    def _three_body_channel(self):
        if self._k3_channel is None:
            if self.system.a_bb:
                if self.system.a_bb > 0:
                    raise LossfitValueError("a_bb", f"a_bb = {self.system.a_bb:g} a0 > 0 at a < 0 (a shallow B-B "
                                            "dimer, whose channel the finite-energy solver does not compute): "
                                            "lossfit tabulates a_bb <= 0 at a < 0")
                table = mixture_ratio_table(self.system)
                kappa = float("nan")                  # per a_- from the table (log_kappa)
            else:
                table = mixture_table(self.system)
                kappa = table.kappa_star_a_minus
            # (1/2) int u^2 e^-u (pref P/u^2) du = pref int u e^-u P dy
            self._k3_channel = _EfimovChannel(table, kappa, self.wavenumber_ratio, self.k3_prefactor, "a_minus",
                                              "eta_minus", -1.0, a_bb=self.system.a_bb)
        return self._k3_channel

    def __setstate__(self, state):
        self.__init__(state["system"])

    def __repr__(self):
        return f"<lossfit model {self.name} for {self.system.label}>"

    @property
    def positive_channel(self):
        """The a > 0 recombination channel (:func:`mixture_recombination_table`), loaded on
        first use: phase theta = s0 ln(kappa* a) with kappa* = (kappa* a_+)/a_+, or from a* and
        eta* (same kappa*, docs/heteronuclear-rates.md) where a_+ and eta_+ are not set."""
        if self._k3_positive is None:
            table = mixture_recombination_table(self.system)
            ratio = table.kappa_star_a_plus / table.kappa_star_a_star
            self._k3_positive = _EfimovChannel(table, table.kappa_star_a_plus, self.wavenumber_ratio,
                                               self.k3_prefactor, "a_plus", "eta_plus", 1.0,
                                               ("a_star", "eta_star", ratio))
        return self._k3_positive

    def _packed_or_empty(self, which):
        # a kernel serves both signs of a; a pair built on demand may lack one table (rows of
        # that sign are refused before the kernel runs)
        try:
            return getattr(self, which).table.packed
        except LossfitValueError:
            return np.zeros(_U_EMPTY)

    @property
    def three_body_kernel(self):
        # compiled on first use, with the tables baked in (not cached on disk)
        if self._kernel is None:
            packed = self._packed_or_empty("_three_body_channel")
            packed_pos = self._packed_or_empty("positive_channel")
            slices = packed if packed.ndim == 2 else np.zeros((1, packed.size))
            packed = packed if packed.ndim == 1 else packed[0]
            pref = self.k3_prefactor

            @numba.njit(KERNEL_SIGNATURE)
            def kernel(x, p):
                # p = [x_s = k_s|a| sqrt(2 mu/m_B), 2 theta, exp(-2 eta), 1 - exp(-4 eta), sign of a,
                #      deep weight, shallow weight] + the weights of the slices of r = a_bb/a
                #      (a_bb != 0: ln T and the relative phase interpolated in ln r,
                #      the phase's offset -2 s0 ln|kappa* a_-(r)| inside 2 theta)
                if p[4] < 0.0:
                    if p.size > _ROW:
                        logt, ph = 0.0, 0.0
                        for k in range(p.size - _ROW):
                            tk, phk = s11_eval(slices[k], p[0] * math.sqrt(x))
                            logt += p[_ROW + k] * math.log(tk)
                            ph += p[_ROW + k] * phk
                        t = math.exp(logt)
                    else:
                        t, ph = s11_eval(packed, p[0] * math.sqrt(x))
                    mod = math.sqrt(max(1.0 - t, 0.0)) * p[2]
                    den = 1.0 + 2.0 * mod * math.cos(ph + p[1]) + mod * mod
                    return pref * t * p[3] / (den * x * x)
                col = np.empty(_POSITIVE_COLUMNS)
                mixture_recombination_eval(packed_pos, p[0] * math.sqrt(x), col)
                return pref * p[0] ** 4 * _positive_probability(col, p)

            lo, hi = grid_limits(packed) if packed.size > _U_EMPTY else (1.0, 1.0)   # one x grid for all r
            lo_pos, hi_pos = (math.exp(packed_pos[1]), packed_pos[3]) if packed_pos.size > _U_EMPTY else (1.0, 1.0)

            @numba.njit(FEATURES_SIGNATURE)
            def features(p, out):
                # the ends of the table grid, where the interpolant meets its limits
                if p[4] < 0.0:
                    out[0] = (lo / p[0]) ** 2
                    out[1] = (hi / p[0]) ** 2
                else:
                    out[0] = (lo_pos / p[0]) ** 2
                    out[1] = (hi_pos / p[0]) ** 2
                return 2

            self._features = features
            self._kernel = kernel
        return self._kernel

    @property
    def three_body_features(self):
        self.three_body_kernel
        return self._features

    def _check(self, a, channel):
        a = np.asarray(a)
        if (a < 0).any() and channel not in ("total", "deep", OBSERVED):
            raise LossfitValueError("channel", f"at a < 0 every event forms a deep dimer: use 'total', 'deep' or "
                                    f"'observed' (all the same rate), got {channel!r}")
        if (a > 0).any() and channel not in _POSITIVE_CHANNELS:
            more = (": lossfit has no dimer kinetics for mixtures; 'total' counts every shallow B-X dimer as "
                    "lost, 'deep' none of them") if channel == OBSERVED else ""
            raise LossfitValueError("channel", f"at a > 0 the recombination of {self.system.label} has the channels "
                                    f"'total', 'deep' and 'shallow' (J = 0), got {channel!r}{more}")

    def observed_plan(self, a, q, scale, depth_over_t, eta_min=ETA_MIN, rtol=None):
        """Refused at a > 0 (what a trapped mixture loses needs dimer kinetics lossfit does not
        have for mixtures; :meth:`_check` names the channels there)."""
        self._check(a, OBSERVED)
        return super().observed_plan(a, q, scale, depth_over_t, eta_min=eta_min, rtol=rtol)

    def _check_positive(self, q, thermal, temperature_ratio=None):
        """Refuse a > 0 recombination where the table ends: energies beyond it (fixed energy) or
        temperatures with more than WEIGHT_BEYOND_TABLE_MAX of the three-atom Boltzmann weight
        there (thermal; Q(3, E_max/k_BT))."""
        if temperature_ratio is not None:
            raise LossfitValueError("temperature_x", f"a > 0 recombination of {self.system.label} is averaged at "
                                    "one temperature only")
        table = self.positive_channel.table
        _refuse_beyond_table(np.abs(np.ravel(q)) * self.wavenumber_ratio, table.x_max, 1.0, 3.0,
                             "three-atom collisions", f"the a > 0 recombination table of {self.system.label}",
                             thermal)

    def two_theta(self, a, a_minus):
        """2 theta = 2 s0 ln(kappa*|a|) at scattering lengths ``a`` (a0) for a_- (a0)."""
        return self._three_body_channel.two_theta(a, a_minus)

    def a_minus_range(self):
        """(largest, smallest) a_- in a0 the model accepts: None for a_bb = 0; with a_bb those
        that keep a_bb/a_- inside the table (its kappa* a_- is tabulated per r)."""
        if not self.system.a_bb:
            return None
        lo, hi = self._three_body_channel.table.r_range
        return -abs(self.system.a_bb) / hi, -abs(self.system.a_bb) / lo

    def a_minus_image(self, a_minus, n):
        """a_-^(n) (a0): the n-th next a < 0 resonance of the same kappa* and eta (lambda^n a_-
        for a_bb = 0; with a_bb the per-r kappa* a_- of the table, :class:`_EfimovChannel`)."""
        return self._three_body_channel.image(a_minus, n)

    def three_body_rows(self, a, efimov, q, channel="total", x_max=U_MAX ** 2):
        """Parameter rows of :attr:`three_body_kernel`; as the base class. At a > 0 ``channel``
        is 'total', 'deep' or 'shallow' (J = 0) and ``x_max`` = 1 (fixed energy) refuses
        energies beyond the table, larger values temperatures with too much weight beyond it."""
        self._check(a, channel)
        a = np.asarray(a, dtype=float).ravel()
        q = np.abs(np.ravel(q))
        pos = a > 0
        slices = self._three_body_channel.table.ratios.size if self.system.a_bb and (~pos).any() else 0
        rows = np.zeros((a.size, _ROW + slices))
        rows[:, 0] = q * self.wavenumber_ratio
        rows[:, 4] = np.where(pos, 1.0, -1.0)
        for side, name, weights in ((~pos, "_three_body_channel", (1.0, 0.0)),
                                    (pos, "positive_channel", _POSITIVE_CHANNELS.get(channel))):
            if not side.any():
                continue
            chan = getattr(self, name)
            if name == "positive_channel":
                self._check_positive(q[side], thermal=x_max > 1.0)
            feature, eta = chan.require(efimov)
            rows[side, 1] = chan.two_theta(a[side], feature)
            if chan.a_bb and chan.sign < 0:
                r = chan.ratios(a[side])
                rows[side, _ROW:] = chan.table.weights(r)
                rows[side, 1] -= 2.0 * chan.table.s0 * np.log(np.abs(chan.table.kappa_a_minus(r)))
            rows[side, 2] = math.exp(-2.0 * eta)
            rows[side, 3] = -math.expm1(-4.0 * eta)
            rows[side, 5:7] = weights
        return rows

    # -- atom-dimer relaxation at a > 0 -------------------------------------------------
    @property
    def atom_dimer_table(self):
        """The a > 0 table s_AD(k a) (:func:`mixture_atom_dimer_table`), loaded on first use."""
        return self.atom_dimer_channel.table

    @property
    def atom_dimer_channel(self):
        if self._ad_channel is None:
            table = mixture_atom_dimer_table(self.system)
            # (2/sqrt pi) int sqrt(u) e^-u (pref P/sqrt u) du = (4 pref/sqrt pi) int u e^-u P dy
            self._ad_channel = _EfimovChannel(table, table.kappa_star_a_star, self.atom_dimer_wavenumber_ratio,
                                              4.0 * self.beta_prefactor / math.sqrt(math.pi), "a_star", "eta_star",
                                              1.0)
        return self._ad_channel

    @property
    def atom_dimer_kernel(self):
        # compiled on first use, with the table baked in (not cached on disk)
        if self._ad_kernel is None:
            packed = self.atom_dimer_table.packed
            pref = self.beta_prefactor

            @numba.njit(KERNEL_SIGNATURE)
            def kernel(x, p):
                # p = [k a at E = E_s, 2 theta, exp(-2 eta*), 1 - exp(-4 eta*)]; x = E/E_s
                t, re, im = mixture_s_ad_eval(packed, p[0] * math.sqrt(x))
                c, s = math.cos(p[1]), math.sin(p[1])
                den = 1.0 + 2.0 * p[2] * (re * c - im * s) + p[2] * p[2] * (re * re + im * im)
                return pref * t * p[3] / (den * math.sqrt(x))

            first, breakup, last = self.atom_dimer_table.kinks()

            @numba.njit(FEATURES_SIGNATURE)
            def features(p, out):
                # the grid's ends, where the interpolant meets its limits, and the breakup
                # threshold between its two segments
                out[0] = (first / p[0]) ** 2
                out[1] = (breakup / p[0]) ** 2
                out[2] = (last / p[0]) ** 2
                return 3

            self._ad_features = features
            self._ad_kernel = kernel
        return self._ad_kernel

    @property
    def atom_dimer_features(self):
        self.atom_dimer_kernel
        return self._ad_features

    def _check_atom_dimer(self, a, q, channel, thermal):
        """Refuse what the atom-dimer tables do not give: a <= 0, channels other than
        relaxation, energies beyond the table (fixed energy) or temperatures that put more
        than WEIGHT_BEYOND_TABLE_MAX of the Boltzmann weight there."""
        if channel != "relaxation":
            raise LossfitValueError("channel", f"atom-dimer rates of {self.system.label} give relaxation into deep "
                                    f"dimers only (no breakup channel), got {channel!r}")
        if (np.asarray(a) <= 0).any():
            raise LossfitValueError("a", "atom-dimer relaxation needs a shallow B-X dimer: a must be > 0 a0")
        table = self.atom_dimer_table
        _refuse_beyond_table(np.abs(np.ravel(q)) * self.atom_dimer_wavenumber_ratio, table.x_max, table.breakup_x,
                             1.5, "atom-dimer collisions", f"the atom-dimer table of {self.system.label}", thermal)

    def atom_dimer_rows(self, a, efimov, q, channel="relaxation", x_max=U_MAX ** 2):
        """Parameter rows of :attr:`atom_dimer_kernel` (a > 0, relaxation); as the base class.
        ``x_max`` = 1 (fixed energy) refuses energies beyond the table, larger values (thermal
        averages) temperatures with more than :data:`WEIGHT_BEYOND_TABLE_MAX` beyond it."""
        self._check_atom_dimer(a, q, channel, thermal=x_max > 1.0)
        channel_ad = self.atom_dimer_channel
        a = np.asarray(a, dtype=float).ravel()
        a_star, eta = efimov.require("a_star", "eta_star")
        rows = np.empty((a.size, 4))
        rows[:, 0] = np.abs(np.ravel(q)) * channel_ad.wavenumber_ratio
        rows[:, 1] = channel_ad.two_theta(a, a_star)
        rows[:, 2] = math.exp(-2.0 * eta)
        rows[:, 3] = -math.expm1(-4.0 * eta)
        return rows

    def thermal_atom_dimer(self, a, q, efimov, scale, channel="relaxation"):
        # one-off averages: a rule built for the eta at hand
        eta = efimov.eta_star
        eta_min = ETA_MIN if eta is None else min(ETA_MIN, float(np.min(eta)))
        return self.atom_dimer_plan(a, q, scale, channel=channel, eta_min=eta_min).evaluate(efimov)

    def thermal_three_body(self, a, q, efimov, scale, channel="total", temperature_ratio=None):
        # one-off averages: a rule built for the eta at hand
        etas = [v for v in (efimov.eta_minus, efimov.eta_plus, efimov.eta_star) if v is not None]
        eta_min = min([ETA_MIN] + [float(np.min(v)) for v in etas])
        return self.three_body_plan(a, q, scale, channel=channel, eta_min=eta_min,
                                    temperature_ratio=temperature_ratio).evaluate(efimov)

    def three_body_plan(self, a, q, scale, channel="total", eta_min=ETA_MIN, temperature_ratio=None):
        """The fixed rule at fixed points (:class:`MixturePlan`, which explains
        ``temperature_ratio``); a < 0 and a > 0 points get a plan each."""
        self._check(a, channel)
        a, q, scale = np.ravel(a), np.ravel(q), np.ravel(scale) * np.ones(np.size(a))
        ratio = None if temperature_ratio is None else np.broadcast_to(temperature_ratio, a.shape)
        parts = []
        for side, weights in ((a < 0, None), (a > 0, _POSITIVE_CHANNELS.get(channel))):
            index = np.flatnonzero(side)
            if not index.size:
                continue
            if weights is not None:
                self._check_positive(q[index], thermal=True, temperature_ratio=temperature_ratio)
            parts.append((index, MixturePlan(self, a[index], q[index], scale[index], eta_min=eta_min,
                                             temperature_ratio=None if ratio is None else ratio[index],
                                             positive=weights)))
        return parts[0][1] if len(parts) == 1 else _SignSplitPlan(parts, a.size)

    def atom_dimer_plan(self, a, q, scale, channel="relaxation", eta_min=ETA_MIN):
        """The fixed rule of thermal beta at fixed points (a > 0; :class:`MixturePlan`)."""
        self._check_atom_dimer(a, q, channel, thermal=True)
        return MixturePlan(self, np.ravel(a), np.ravel(q), np.ravel(scale), eta_min=eta_min, process=ATOM_DIMER)


class _SignSplitPlan:
    """The plans of the a < 0 and a > 0 points of one data set, evaluated into one array."""

    def __init__(self, parts, n_points):
        self.parts = parts
        self.n_points = n_points
        self.n_nodes = sum(plan.n_nodes for _, plan in parts)

    def evaluate(self, efimov, out=None):
        walkers = efimov.n_walkers
        values = np.empty((walkers, self.n_points) if walkers else self.n_points)
        for index, plan in self.parts:
            values[..., index] = plan.evaluate(efimov)
        if out is None:
            return values
        out[...] = values
        return out


class MixturePlan:
    """Thermal K3 (a < 0) or beta (a > 0) of a B-B-X system at fixed points (a, T), prepared
    for repeated evaluation.

    The table values at every node of the rule (:func:`rule_nodes`) are computed once; an
    evaluation is one pass over them per point (and walker). Both rates are
    prefactor x P(x) with P of the Efimov-channel form, and both thermal averages are
    c int u e^{-u} P dy in y = ln x (u = E/k_BT): K3 over E^2 e^{-u}/(2 (k_BT)^3) with
    K3 ~ P/u^2, beta over (2/sqrt pi) u^{1/2} e^{-u}/k_BT with beta ~ P/u^{1/2}; only c, the
    table and the feature (a_-, eta_- or a*, eta*) differ.

    Parameters
    ----------
    model : MixtureZeroRangeModel
    a, q : ndarray
        Scattering lengths (a0; < 0 for K3, > 0 for beta) and q = k_T |a| with
        k_T = sqrt(m_B k_BT)/hbar.
    scale : ndarray
        The natural unit per point (hbar^5/(m_B^3 (k_BT)^2) for K3, hbar/(m_B k_T) for beta,
        in the caller's units).
    eta_min : float
        The smallest eta the rule resolves.
    temperature_ratio : ndarray, optional
        K3 only: T_X/T_B per point where the third atom's temperature differs: the relative
        energy then follows :meth:`HeteronuclearSystem.collision_energy_density` instead of
        E^2 e^{-E/k_BT}/(2 (k_BT)^3), with the absorption probability averaged over the
        directions of the incoming wave as at one temperature (an approximation,
        docs/heteronuclear-rates.md).
    process : int
        :data:`lossfit.thermal.THREE_BODY` (K3, default) or :data:`lossfit.thermal.ATOM_DIMER`.
    positive : tuple, optional
        K3 at a > 0: the (deep, shallow) weights of the channel (1, 0 deep; 0, 1 shallow; 1, 1
        total). The deep part has the form of the other rates with T = T_break; the shallow part
        the numerator A + 2 Re(B w) + C |w|^2 (docs/heteronuclear-rates.md, "Three-body
        recombination at a > 0").
    """

    def __init__(self, model, a, q, scale, eta_min=ETA_MIN, temperature_ratio=None, process=THREE_BODY,
                 positive=None):
        self.model = model
        self.a = np.asarray(a, dtype=float)
        self.n_points = self.a.size
        self.eta_min = float(eta_min)
        if not self.eta_min > 0:
            raise LossfitValueError("eta_min", f"must be > 0, got {eta_min!r}")
        if process == ATOM_DIMER and temperature_ratio is not None:
            raise LossfitValueError("temperature_x", "applies to three-body rates only")
        if positive is not None:
            channel = model.positive_channel
        else:
            channel = model.atom_dimer_channel if process == ATOM_DIMER else model._three_body_channel
        self.channel = channel
        x_t = np.abs(np.asarray(q, dtype=float)) * channel.wavenumber_ratio
        ln_x_t = np.log(x_t)
        ratio = None if temperature_ratio is None else np.broadcast_to(np.asarray(temperature_ratio, float), x_t.shape)
        # the energies reach as far as the hotter of the two parts of E (T_B and T_3)
        _, t_3 = model.system.effective_temperatures(1.0, 1.0 if ratio is None else ratio)
        u_hi = _U_HI * np.maximum(1.0, t_3)
        y_lo = float(ln_x_t.min()) + 0.5 * math.log(_U_LO)
        y_hi = float(np.max(ln_x_t + 0.5 * np.log(u_hi)))
        y, w_y = rule_nodes(channel.table, y_lo, y_hi, self.eta_min)
        self.n_nodes = y.size
        if channel.a_bb:
            # a_bb != 0: the table at each point's own r = a_bb/a (fixed for the plan, a_bb
            # being a property of the system), so T and s11 per (point, node)
            t, s, _ = channel.table.amplitudes(np.exp(y)[None, :], channel.ratios(self.a))
        else:
            t, s = (v[None, :] for v in channel.table.amplitudes(np.exp(y)))
        mod = np.abs(s)
        # per point only the nodes inside its window [x_T sqrt(u_lo), x_T sqrt(u_hi)]
        self._first = np.searchsorted(y, ln_x_t + 0.5 * math.log(_U_LO))
        self._stop = np.searchsorted(y, ln_x_t + 0.5 * np.log(u_hi))
        # (1/2) int e^{-u} u P dt = int e^{-u} u P dy (dt = 2 dy), u = (x/x_T)^2 per point
        # and node: the weights e^{-u} u w_y T per (point, node of its window)
        self._terms = np.ascontiguousarray(np.stack([s.real, s.imag, mod * mod]))
        self._breakup = None
        bound = t[0]
        if positive is not None and positive[1] > 0.0:
            # per node: T_break x deep weight, then A, Re B, Im B, C (the shallow numerator)
            col = channel.table.columns(np.exp(y)) * np.exp(4.0 * y)[None, :]
            self._breakup = np.ascontiguousarray(np.r_[positive[0] * t, col[3:7]])
            # the largest numerator any eta can give (|w| <= 1), for the trimming below
            bound = positive[0] * t[0] + col[3] + 2.0 * np.hypot(col[4], col[5]) + col[6]
            self._weights = _point_weights(y, w_y, ln_x_t, self._first, self._stop)
        else:
            self._weights = _point_weights(y, w_y, ln_x_t, self._first, self._stop) * t
        t_rows = np.broadcast_to(t, (self.n_points, y.size))
        if ratio is not None:
            # (1/2) u e^{-u} at one temperature becomes p(u) / u per unit y (dE = 2E dy,
            # K3 ~ 1/E^2), p the density of u = E/k_BT_B at T_X/T_B = ratio
            for i in range(self.n_points):
                j = slice(self._first[i], self._stop[i])
                u = np.exp(2.0 * (y[j] - ln_x_t[i]))
                self._weights[i, j] = (2.0 * model.system.collision_energy_density(u, 1.0, ratio[i]) / u
                                       * w_y[j] * t_rows[i, j])
        # drop the window's ends whose largest possible share (each node's weight over the
        # smallest denominator (1 - |s11| e^{-2 eta_min})^2 it can have) stays below
        # _TRIM of the smallest possible total (denominators <= (1 + |s11|)^2)
        trim_weights = (self._weights if self._breakup is None
                        else _point_weights(y, w_y * bound, ln_x_t, self._first, self._stop))
        _trim(trim_weights, mod, math.exp(-2.0 * self.eta_min), _TRIM, self._first, self._stop)
        # 2 theta = 2 s0 ln|a| + 2 s0 ln kappa*: the second part is the rotation of evaluate()
        theta0 = 2.0 * channel.table.s0 * np.log(np.abs(self.a))
        self._theta0 = np.ascontiguousarray(np.stack([np.cos(theta0), np.sin(theta0)]))
        self._scale = np.asarray(scale, dtype=float) * channel.average_prefactor * np.ones(self.n_points)
        self._one = np.empty((3, 1))          # rotation, e^{-2 eta}, 1 - e^{-4 eta} of one walker

    def evaluate(self, efimov, out=None):
        """Thermal K3 or beta at every point in the builder's units, shape (n_points,) or
        (W, n_points) for an Efimov set of W walker arrays."""
        channel = self.channel
        feature, eta = channel.require(efimov)
        walkers = efimov.n_walkers
        s0 = channel.table.s0
        side = "< 0" if channel.sign < 0 else "> 0"
        if not walkers:
            # one Efimov set of floats: scalars by math, into preallocated buffers
            if not feature * channel.sign > 0:
                raise LossfitValueError(channel.feature, f"must be {side} a0, got {feature!r}")
            if eta < self.eta_min:
                raise LossfitValueError(channel.eta, f"{eta:g} is below eta_min={self.eta_min:g}, the smallest eta "
                                        "this plan resolves; build it with a smaller eta_min")
            # theta = s0 ln|a| + s0 ln kappa*(a_-) (likewise a*): a rotation of the prepared
            # phases, kappa* = (kappa* a_-)/a_- (at r = a_bb/a_- where a_bb != 0)
            self._one[0, 0] = 2.0 * s0 * float(channel.log_kappa(feature))
            self._one[1, 0] = math.exp(-2.0 * eta)
            self._one[2, 0] = -math.expm1(-4.0 * eta)
            values = np.empty((1, self.n_points))
            self._sum(self._one[0], self._one[1], self._one[2], values)
        else:
            feature = np.asarray(feature, dtype=float)
            eta = np.asarray(eta, dtype=float)
            if (feature * channel.sign <= 0).any():
                raise LossfitValueError(channel.feature, f"must be {side} a0, got "
                                        f"{feature[feature * channel.sign <= 0][:3]!r}")
            if (eta < self.eta_min).any():
                raise LossfitValueError(channel.eta, f"{eta.min():g} is below eta_min={self.eta_min:g}, the "
                                        "smallest eta this plan resolves; build it with a smaller eta_min")
            rotation = np.broadcast_to(2.0 * s0 * channel.log_kappa(feature), (walkers,))
            values = np.empty((walkers, self.n_points))
            self._sum(np.ascontiguousarray(rotation), np.broadcast_to(np.exp(-2.0 * eta), (walkers,)).copy(),
                      np.broadcast_to(-np.expm1(-4.0 * eta), (walkers,)).copy(), values)
        result = values if walkers else values[0]
        if out is None:
            return result
        out[...] = result
        return out


    def _sum(self, rotation, e2, g, values):
        if self._breakup is None:
            _evaluate(self._terms, self._weights, self._first, self._stop, self._theta0, rotation, e2, g, self._scale,
                      values)
        else:
            _evaluate_breakup(self._terms, self._breakup, self._weights, self._first, self._stop, self._theta0,
                              rotation, e2, g, self._scale, values)


class MixtureThresholdModel(MixtureZeroRangeModel):
    """The zero-energy laws of two identical bosons and a third atom (no thermal average),
    from the tables' threshold limits: at a < 0 K3 = 8 pi^2 ((2 m_B + m_X)/m_X)^{3/2} c4 x_s^4
    (1 - e^{-4 eta})/|1 + e^{i delta0} w|^2 (T -> c4 x^4, arg s11 -> delta0); at a > 0 the
    same prefactor times (tau (1 - e^{-4 eta}) [deep] + alpha + 2 Re(b w) + c |w|^2
    [shallow])/|1 + s_b w|^2 from the zero-energy solves, which is C_deep sinh 2eta/(sinh^2(pi
    s0 + eta) + cos^2 theta) and, at eta -> 0, C_+ sin^2 theta/(sinh^2 pi s0 + cos^2 theta)
    (docs/stm-mixture.md section 3). What a fit that ignores the collision energy assumes;
    compare it with the zero-range model to see the thermal shifts."""

    name = "threshold"
    description = "zero-energy law of two identical bosons and a third atom (no thermal average)"
    approximate = True

    def __init__(self, system):
        if isinstance(system, HeteronuclearSystem) and system.a_bb:
            raise LossfitValueError("model", f"'threshold' is built from the a_bb = 0 tables; {system.label} has "
                                    "a_bb != 0: use model='zero-range'")
        super().__init__(system)

    def limits(self, positive):
        """(tau, s, alpha, b, c) of the zero-energy law: a > 0 (``positive``) from the
        recombination table, a < 0 (c4, e^{i delta0}, 0, 0, 0) from the s11 table."""
        if positive:
            lim = self.positive_channel.table.limits
            return lim["tau"], lim["s_b"], lim["alpha"], lim["b"], lim["c"]
        return self.table.c4, complex(math.cos(self.table.delta0), math.sin(self.table.delta0)), 0.0, 0j, 0.0

    @property
    def three_body_kernel(self):
        if self._kernel is None:
            pref = self.k3_prefactor
            negative = np.array(self._limits_row(False))
            positive = np.array(self._limits_row(True))

            @numba.njit(KERNEL_SIGNATURE)
            def kernel(x, p):
                # independent of the energy x: the limits in place of the table columns
                return pref * p[0] ** 4 * _positive_probability(negative if p[4] < 0.0 else positive, p)

            @numba.njit(FEATURES_SIGNATURE)
            def features(p, out):
                return 0

            self._features = features
            self._kernel = kernel
        return self._kernel

    def _limits_row(self, positive):
        """The limits as the seven table columns (zeros where the table is missing)."""
        try:
            tau, s, alpha, b, c = self.limits(positive)
        except LossfitValueError:
            return [0.0] * _POSITIVE_COLUMNS
        return [tau, s.real, s.imag, alpha, b.real, b.imag, c]

    def _check_positive(self, q, thermal, temperature_ratio=None):
        # the zero-energy law holds (as an approximation) at any energy
        if temperature_ratio is not None:
            raise LossfitValueError("temperature_x", "the zero-energy law does not depend on the temperatures")
        self.positive_channel

    def _check_atom_dimer(self, a, q, channel, thermal):
        raise LossfitValueError("model", f"'threshold' gives the zero-energy three-body law of {self.system.label} "
                                "only; atom-dimer relaxation needs model='zero-range'")

    def three_body_plan(self, a, q, scale, channel="total", eta_min=ETA_MIN, temperature_ratio=None):
        # the zero-energy law does not depend on the collision energies
        self._check(a, channel)
        a = np.ravel(a)
        parts = [(index, _ThresholdPlan(self, a[index], np.ravel(q)[index], (np.ravel(scale) * np.ones(a.size))[index],
                                        weights))
                 for index, weights in ((np.flatnonzero(a < 0), None),
                                        (np.flatnonzero(a > 0), _POSITIVE_CHANNELS.get(channel)))
                 if index.size]
        return parts[0][1] if len(parts) == 1 else _SignSplitPlan(parts, a.size)


class _ThresholdPlan:
    """The zero-energy law at fixed points of one sign of a: closed form per walker."""

    def __init__(self, model, a, q, scale, positive=None):
        self.model, self.a = model, np.asarray(a, dtype=float)
        self.n_points = self.a.size
        self.n_nodes = 0
        self.channel = model.positive_channel if positive is not None else model._three_body_channel
        self.deep, self.shallow = (1.0, 0.0) if positive is None else positive
        self.tau, self.s, self.alpha, self.b, self.c = model.limits(positive is not None)
        x4 = (np.abs(np.asarray(q, dtype=float)) * model.wavenumber_ratio) ** 4
        self._scale = np.asarray(scale, dtype=float) * model.k3_prefactor * x4
        self._theta0 = self.channel.two_theta(self.a, self.channel.sign)

    def evaluate(self, efimov, out=None):
        feature, eta = self.channel.require(efimov)
        feature = np.asarray(feature, dtype=float)[..., None]
        eta = np.asarray(eta, dtype=float)[..., None]
        if (feature * self.channel.sign <= 0).any():
            raise LossfitValueError(self.channel.feature, f"must be {'<' if self.channel.sign < 0 else '>'} 0 a0")
        # w = e^{2 i theta - 2 eta}; (n_points,) for one walker (scalars broadcast), (W, n_points) for arrays
        w = np.exp(1j * (self._theta0 - 2.0 * self.channel.table.s0 * np.log(np.abs(feature))) - 2.0 * eta)
        numerator = (self.deep * self.tau * -np.expm1(-4.0 * eta)
                     + self.shallow * (self.alpha + 2.0 * (self.b * w).real + self.c * np.abs(w) ** 2))
        values = self._scale * numerator / np.abs(1.0 + self.s * w) ** 2
        if out is None:
            return values
        out[...] = values
        return out


@numba.njit(cache=True)
def _point_weights(y, weight_t, ln_x_t, first, stop):
    out = np.zeros((ln_x_t.size, y.size))
    for i in range(ln_x_t.size):
        for j in range(first[i], stop[i]):
            u = math.exp(2.0 * (y[j] - ln_x_t[i]))
            out[i, j] = u * math.exp(-u) * weight_t[j]
    return out


@numba.njit(cache=True)
def _trim(weights, mod_rows, e2_min, tol, first, stop):
    # mod_rows: |s11| per node, one row shared by all points or one row per point (a_bb != 0)
    for i in range(first.size):
        mod = mod_rows[i if mod_rows.shape[0] > 1 else 0]
        lower = 0.0
        for j in range(first[i], stop[i]):
            lower += weights[i, j] / (1.0 + mod[j]) ** 2
        budget = 0.5 * tol * lower
        dropped = 0.0
        while first[i] < stop[i]:
            j = first[i]
            share = weights[i, j] / (1.0 - mod[j] * e2_min) ** 2
            if dropped + share > budget:
                break
            dropped += share
            first[i] += 1
        dropped = 0.0
        while stop[i] > first[i]:
            j = stop[i] - 1
            share = weights[i, j] / (1.0 - mod[j] * e2_min) ** 2
            if dropped + share > budget:
                break
            dropped += share
            stop[i] -= 1


@numba.njit(cache=True, inline="always")
def _rotated_phase(theta0, i, cos_r, sin_r, e):
    # 2 e cos and 2 e sin of point i's angle 2 theta0_i turned by a walker's rotation, and e^2
    c = theta0[0, i] * cos_r - theta0[1, i] * sin_r
    s = theta0[1, i] * cos_r + theta0[0, i] * sin_r
    return 2.0 * e * c, 2.0 * e * s, e * e


@numba.njit(cache=True, fastmath=True)
def _evaluate(terms, weights, first, stop, theta0, rotation, e2, g, scale, out):
    # out[w, i] = scale_i g_w sum_j weight_ij / |1 + s_j e^{i(2 theta0_i + r_w)} e2_w|^2
    # over the nodes of point i's window; theta0 holds cos and sin of 2 theta0_i; terms
    # (Re s, Im s, |s|^2) per node in one row for all points, or one row per point (a_bb != 0)
    shared = terms.shape[1] == 1
    for w in range(rotation.size):
        cos_r, sin_r = math.cos(rotation[w]), math.sin(rotation[w])
        for i in range(theta0.shape[1]):
            # 1 + 2 e Re(s_j e^{i angle}) + e^2 |s_j|^2 = 1 + a_j ca - b_j sa + e^2 |s_j|^2
            ca, sa, e_sq = _rotated_phase(theta0, i, cos_r, sin_r, e2[w])
            k = 0 if shared else i
            total = 0.0
            for j in range(first[i], stop[i]):
                total += weights[i, j] / (1.0 + terms[0, k, j] * ca - terms[1, k, j] * sa + e_sq * terms[2, k, j])
            out[w, i] = scale[i] * g[w] * total


@numba.njit(cache=True, fastmath=True)
def _evaluate_breakup(terms, numer, weights, first, stop, theta0, rotation, e2, g, scale, out):
    # as _evaluate (terms shared by all points), with the numerator of a > 0 recombination per node j:
    # g_w numer[0, j] (deep: weight x T_break) + A_j + 2 Re(B_j w) + C_j |w|^2 (shallow)
    for w in range(rotation.size):
        cos_r, sin_r = math.cos(rotation[w]), math.sin(rotation[w])
        for i in range(theta0.shape[1]):
            ca, sa, e_sq = _rotated_phase(theta0, i, cos_r, sin_r, e2[w])
            total = 0.0
            for j in range(first[i], stop[i]):
                num = g[w] * numer[0, j] + numer[1, j] + numer[2, j] * ca - numer[3, j] * sa + e_sq * numer[4, j]
                total += weights[i, j] * num / (1.0 + terms[0, 0, j] * ca - terms[1, 0, j] * sa + e_sq * terms[2, 0, j])
            out[w, i] = scale[i] * total


@numba.njit(cache=True)
def _positive_probability(col, p):
    """(deep + shallow) J = 0 probability over x^4 at a > 0 from the table columns ``col``
    (T_break, Re s, Im s, A, Re B, Im B, C, all but s over x^4) and a kernel row ``p``
    (2 theta, e^{-2 eta}, 1 - e^{-4 eta} in p[1:4], deep and shallow weights in p[5:7])."""
    wr, wi = p[2] * math.cos(p[1]), p[2] * math.sin(p[1])
    w2 = p[2] * p[2]
    den = 1.0 + 2.0 * (col[1] * wr - col[2] * wi) + (col[1] * col[1] + col[2] * col[2]) * w2
    shallow = col[3] + 2.0 * (col[4] * wr - col[5] * wi) + col[6] * w2
    return (p[5] * p[3] * col[0] + p[6] * shallow) / den
