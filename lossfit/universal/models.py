"""Energy-resolved rate models behind ``model=...``: a small base class and its registry.

A model supplies, for each process, a numba kernel ``kernel(x, p)`` giving the rate at
collision energy E = x E_s in *natural units* of the energy scale E_s, the feature
points of that kernel, and a packer that turns (a, Efimov parameters, E_s) into one
parameter row per point. The adaptive engine (:mod:`lossfit.thermal`) averages any such
kernel (the reference path); fixed-energy evaluation uses x = 1 with E_s = E.

Thermal averages go through two methods that a model may override with something
faster (the built-in models do): ``thermal_three_body`` / ``thermal_atom_dimer`` at
arbitrary points, and ``three_body_plan`` / ``atom_dimer_plan``, which prepare fixed
points (a fit's data) once and return an object whose ``evaluate(efimov)`` gives the
averages. The base class implements both with the adaptive engine, so a registered
model needs only its kernels. ``"threshold"`` and ``"capped"`` have closed-form
averages (below); ``"zero-range"`` uses the fixed rules of
:mod:`lossfit.universal.averages`.

Natural units, with k_s = sqrt(m E_s)/hbar (m the atom mass):

* three-body:  K3 in units of hbar/(m k_s^4) = hbar^5 / (m^3 E_s^2)
* atom-dimer:  beta in units of hbar/(m k_s)

Unitarity bounds of the J = 0 channel (derivation, lossfit convention)
----------------------------------------------------------------------
*Three-body.* Take coordinates x = (r1-r2)/sqrt(2), y = sqrt(2/3)(r3-(r1+r2)/2): the
relative kinetic energy is -hbar^2/(2m)(∇_x^2 + ∇_y^2), a free particle of mass m in
6-D, with E = hbar^2 K^2/(2m), and d^3r1 d^3r2 d^3r3 = 3 sqrt(3) d^3R d^3x d^3y. The
projection of a unit-density 6-D plane wave on the constant hyperspherical harmonic
is 8 J_2(K rho)/(K rho)^2; its incoming part carries the flux 32 pi^2 hbar/(m K^4)
through a large hypersphere (surface pi^3 rho^5). At most all of it is absorbed.
In a thermal gas the n^3/3! unordered triples of identical bosons each have a
symmetric state whose J = 0 intensity is 3! times that of one ordering, so the event
rate per volume is 3 sqrt(3) n^3 x flux; three atoms are lost per event. Hence

    L3(E) <= 3 * 3 sqrt(3) * 32 pi^2 hbar/(m K^4) = 72 sqrt(3) pi^2 hbar^5 / (m^3 E^2),

i.e. 72 sqrt(3) pi^2 / x^2 in natural units. Its Boltzmann average over P3(E) is
36 sqrt(3) pi^2 hbar^5 / (m^3 (k_BT)^2), the unitarity-limited law with the
prefactor of Rem et al., PRL 110, 163202 (2013).

*Atom-dimer.* Atom and dimer are distinguishable; s-wave inelastic scattering is
bounded by sigma <= pi/k^2, so beta(E) <= v pi/k^2 = pi hbar/(mu k) with mu = 2m/3
and E = hbar^2 k^2/(2 mu); in natural units beta <= (3 sqrt(3) pi / 4) / sqrt(x).
"""

__all__ = ["EnergyModel", "ThresholdModel", "CappedModel", "ZeroRangeModel", "get_model", "register_model",
           "available_models", "UNITARITY_THREE_BODY", "UNITARITY_ATOM_DIMER", "REFERENCE_RTOL", "OBSERVED",
           "channel_at_negative_a"]

import functools
import math

import numba
import numpy as np

from ..constants import ARG_GAMMA_S0, HBAR, S0
from ..dimer_kinetics import breakup_from_formation, escape_cuts, observed_loss, relaxation_fraction
from ..errors import LossfitValueError
from ..thermal import (
    ATOM_DIMER,
    FEATURES_SIGNATURE,
    KERNEL_SIGNATURE,
    THREE_BODY,
    U_MAX,
    feature_points,
    probability_below,
    rate_kernel,
    thermal_average,
)
from ..units import A0
from . import averages
from .tables import (
    atom_dimer_grid_points,
    grid_limits,
    load_atom_dimer_table,
    load_recombination_table,
    load_s11_table,
    recombination_eval,
    recombination_grid_points,
    s11_eval,
    s_ad_eval,
)
from .threshold import beta_coefficient_unchecked, l3_coefficient_unchecked

# (shallow-dimer, deep-dimer) weights of the recombination channels; a < 0 has only deep.
# "observed" (what a trapped gas loses) combines them with atom-dimer loss: _ObservedPlan.
_CHANNEL_WEIGHTS = {"total": (1.0, 1.0), "shallow": (1.0, 0.0), "deep": (0.0, 1.0)}
OBSERVED = "observed"


def channel_at_negative_a(channel):
    """The formal channel that gives ``channel`` where a < 0: no shallow dimer exists
    there, so what a gas loses (``"observed"``) is the total (deep-dimer) rate."""
    return "total" if channel == OBSERVED else channel
# (relaxation, breakup) weights of the atom-dimer loss channels
_ATOM_DIMER_CHANNEL_WEIGHTS = {"relaxation": (1.0, 0.0), "breakup": (0.0, 1.0), "total": (1.0, 1.0)}
UNITARITY_THREE_BODY = averages.UNITARITY_THREE_BODY
UNITARITY_ATOM_DIMER = averages.UNITARITY_ATOM_DIMER
#: Tolerance of the adaptive quadrature when a model has no faster thermal average.
REFERENCE_RTOL = 1e-9


def scale_wavenumber_a0(energy_joule, mass):
    """k_s = sqrt(m E_s)/hbar in 1/a0 for an energy scale in J and a mass in kg."""
    return np.sqrt(mass * energy_joule) / HBAR * A0


class EnergyModel:
    """Base class of energy-resolved models (see the module docstring for the contract).

    Subclasses set ``name``, ``description``, ``approximate`` and the four numba
    functions (wrapped in ``staticmethod``: numba dispatchers bind like methods
    otherwise), and implement :meth:`three_body_rows` and :meth:`atom_dimer_rows`.
    """

    name = None
    description = ""
    approximate = True
    #: True if the model resolves recombination into the shallow dimer and into deep
    #: dimers and gives atom-dimer breakup, which the observed channel needs.
    resolves_channels = False
    three_body_kernel = None
    three_body_features = None
    atom_dimer_kernel = None
    atom_dimer_features = None

    def three_body_rows(self, a, efimov, q, channel="total", x_max=U_MAX ** 2):
        """Parameter rows for K3: ``a`` in a0 (validated, non-zero), ``q = a k_s``
        (dimensionless), same shapes; one row per point in C order. ``channel`` is
        "total", or "shallow" / "deep" (recombination into the shallow dimer / deep
        dimers) for models that resolve them. ``x_max``: the largest E/E_s the caller will
        evaluate (U_MAX^2 for thermal averages, 1 at fixed energy), for range checks."""
        raise NotImplementedError

    def atom_dimer_rows(self, a, efimov, q, channel="relaxation", x_max=U_MAX ** 2):
        """Parameter rows for beta (a > 0). ``channel`` is "relaxation" (into deep dimers),
        or "breakup" / "total" for models that resolve dimer breakup."""
        raise NotImplementedError

    def reference_average(self, process, a, q, efimov, channel, rtol):
        """The reference path: adaptive quadrature of the kernel to ``rtol``.

        ``process`` is :data:`lossfit.thermal.THREE_BODY` or ``ATOM_DIMER``, ``q = k_T |a|``
        (k_T = sqrt(m k_BT)/hbar). Returns (averages in natural units, quadrature error
        estimates).
        """
        if process == THREE_BODY:
            rows = self.three_body_rows(a, efimov, q, channel=channel)
            return thermal_average(self.three_body_kernel, self.three_body_features, rows, process, rtol=rtol)
        rows = self.atom_dimer_rows(a, efimov, q, channel=channel)
        return thermal_average(self.atom_dimer_kernel, self.atom_dimer_features, rows, process, rtol=rtol)

    def thermal_three_body(self, a, q, efimov, scale, channel="total"):
        """Thermal averages of K3 at points (a, T): natural units hbar^5/(m^3 (k_BT)^2)
        times ``scale`` per point; ``q = k_T |a|``. The base class uses
        :meth:`reference_average`."""
        return self.reference_average(THREE_BODY, a, q, efimov, channel, REFERENCE_RTOL)[0] * scale

    def thermal_atom_dimer(self, a, q, efimov, scale, channel="relaxation"):
        """Thermal averages of beta (natural units hbar/(m k_T) times ``scale``); as
        :meth:`thermal_three_body`."""
        return self.reference_average(ATOM_DIMER, a, q, efimov, channel, REFERENCE_RTOL)[0] * scale

    def thermal(self, process, a, q, efimov, scale, channel=None):
        """:meth:`thermal_three_body` or :meth:`thermal_atom_dimer` by ``process`` (default channel)."""
        if process == THREE_BODY:
            return self.thermal_three_body(a, q, efimov, scale, channel=channel or "total")
        return self.thermal_atom_dimer(a, q, efimov, scale, channel=channel or "relaxation")

    def plan(self, process, a, q, scale, eta_min=averages.ETA_MIN):
        """:meth:`three_body_plan` or :meth:`atom_dimer_plan` by ``process`` (default channel)."""
        if process == THREE_BODY:
            return self.three_body_plan(a, q, scale, eta_min=eta_min)
        return self.atom_dimer_plan(a, q, scale, eta_min=eta_min)

    def three_body_plan(self, a, q, scale, channel="total", eta_min=averages.ETA_MIN):
        """Prepare the thermal K3 averages at fixed points (a fit's data): an object
        with ``evaluate(efimov) -> ndarray`` and ``n_points``. The base class
        recomputes through :meth:`thermal_three_body` at every evaluation."""
        return _RecomputingPlan(self.thermal_three_body, a, q, scale, channel)

    def atom_dimer_plan(self, a, q, scale, channel="relaxation", eta_min=averages.ETA_MIN):
        """As :meth:`three_body_plan` for beta (a > 0)."""
        return _RecomputingPlan(self.thermal_atom_dimer, a, q, scale, channel)

    def observed_plan(self, a, q, scale, depth_over_t, eta_min=averages.ETA_MIN, rtol=None):
        """The observed three-body loss (what a trapped gas loses): needs the shallow- and
        deep-dimer channels and atom-dimer relaxation, which only models that resolve
        them provide (:class:`ZeroRangeModel`)."""
        raise LossfitValueError("channel", f"model {self.name!r} gives only the total rate, not what a trapped gas "
                                "loses; use model='zero-range' or channel='total'")

    @property
    def default_three_body_channel(self):
        """``"observed"`` (what a trapped gas loses) for models that resolve the channels,
        else ``"total"``, the only rate such a model gives."""
        return OBSERVED if self.resolves_channels else "total"

    def resolve_channel(self, channel):
        """``channel`` with None replaced by :attr:`default_three_body_channel`."""
        return self.default_three_body_channel if channel is None else channel

    @property
    def label(self):
        """Name for outputs, with "approximation" spelled out where it applies."""
        return f"{self.name} (approximation: {self.description})" if self.approximate else self.name

    def __repr__(self):
        return f"<lossfit model {self.label}>"


# ---- shared packers: both current models need only |q| and the threshold coefficient.
def _threshold_rows_three_body(a, efimov, q):
    rows = np.empty((a.size, 2))
    rows[:, 0] = np.abs(q).ravel()
    rows[:, 1] = l3_coefficient_unchecked(a.ravel(), efimov)
    return rows


def _threshold_rows_atom_dimer(a, efimov, q):
    rows = np.empty((a.size, 2))
    rows[:, 0] = np.abs(q).ravel()
    rows[:, 1] = beta_coefficient_unchecked(a.ravel(), efimov)
    return rows


class _RecomputingPlan:
    """A 'plan' that recomputes everything at each evaluation (models without a faster one)."""

    def __init__(self, average, a, q, scale, channel):
        self.average, self.a, self.q, self.scale, self.channel = average, a, q, scale, channel
        self.n_points = a.size

    def evaluate(self, efimov, out=None):
        value = efimov.each_walker(lambda one: self.average(self.a, self.q, one, self.scale, channel=self.channel))
        if out is None:
            return value
        out[...] = value
        return out


@numba.njit(cache=True)
def _closed_form(coefficient, q, scale, weight, capped, out):
    """Thermal average of the threshold law C |q|^4 (three-body) or C |q| (atom-dimer),
    saturated at the J = 0 unitarity bound if ``capped``:

    three-body: int min(K0, U/x^2) x^2 e^-x / 2 dx = K0 P(3, x_c) + (U/2) e^-x_c,
        x_c = sqrt(U/K0);
    atom-dimer: int min(K0, U/sqrt x) (2/sqrt pi) sqrt(x) e^-x dx
        = K0 P(3/2, x_c) + U (2/sqrt pi) e^-x_c, x_c = (U/K0)^2,

    with P the regularised lower incomplete gamma function (derivation: the models'
    docstring and docs/thermal-averages.md)."""
    for i in range(q.size):
        aq = abs(q[i])
        if weight == THREE_BODY:
            k0 = coefficient[i] * aq * aq * aq * aq
            if not capped:
                out[i] = k0 * scale[i]
                continue
            x_c = math.sqrt(UNITARITY_THREE_BODY / k0)
            out[i] = (k0 * probability_below(THREE_BODY, x_c) + 0.5 * UNITARITY_THREE_BODY * math.exp(-x_c)) * scale[i]
        else:
            k0 = coefficient[i] * aq
            if not capped:
                out[i] = k0 * scale[i]
                continue
            r = UNITARITY_ATOM_DIMER / k0
            x_c = r * r
            out[i] = (k0 * probability_below(ATOM_DIMER, x_c)
                      + 1.1283791670955126 * UNITARITY_ATOM_DIMER * math.exp(-x_c)) * scale[i]


class _ClosedFormPlan:
    """Fixed-point averages of the threshold and capped models: one coefficient pass."""

    def __init__(self, coefficients, a, q, scale, weight, capped):
        self.coefficients, self.a, self.q, self.scale = coefficients, a, q, scale
        self.weight, self.capped = weight, capped
        self.n_points = a.size
        self._tiles = (1, q, scale)

    def evaluate(self, efimov, out=None):
        # every walker in one pass: the coefficients come as rows (W, points)
        coefficients = self.coefficients(self.a, efimov)
        count = coefficients.shape[0] if coefficients.ndim == 2 else 1
        if out is None:
            out = np.empty(coefficients.shape)
        result = out if out.flags.c_contiguous else np.empty(coefficients.shape)
        q, scale = self._tiled(count)
        _closed_form(coefficients.ravel(), q, scale, self.weight, self.capped, result.reshape(-1))
        if result is not out:
            out[...] = result
        return out

    def _tiled(self, count):
        if self._tiles[0] != count:
            self._tiles = (count, np.tile(self.q, count), np.tile(self.scale, count))
        return self._tiles[1:]


@feature_points
def _no_features(p, out):
    return 0


@rate_kernel
def _threshold_three_body(x, p):
    q2 = p[0] * p[0]
    return p[1] * q2 * q2


@rate_kernel
def _threshold_atom_dimer(x, p):
    return p[1] * p[0]


@rate_kernel
def _capped_three_body(x, p):
    q2 = p[0] * p[0]
    return min(p[1] * q2 * q2, UNITARITY_THREE_BODY / (x * x))


@feature_points
def _capped_three_body_features(p, out):
    q2 = p[0] * p[0]
    out[0] = math.sqrt(UNITARITY_THREE_BODY / (p[1] * q2 * q2))
    return 1


@rate_kernel
def _capped_atom_dimer(x, p):
    return min(p[1] * p[0], UNITARITY_ATOM_DIMER / math.sqrt(x))


@feature_points
def _capped_atom_dimer_features(p, out):
    r = UNITARITY_ATOM_DIMER / (p[1] * p[0])
    out[0] = r * r
    return 1


@numba.njit(cache=True)
def _recombination_over_e2(packed_pos, energy, cos2phi, sin2phi, e2eta):
    """a > 0, three-atom energy E (hbar^2/(m a^2)) > 0: (P_shallow / E^2, T_break / (E^2
    |1 + s_AD w|^2)) with w = e^{2 i Phi - 2 eta}; P_shallow is the breakup probability of
    an atom-dimer pair at the same total energy, summed over J with weights 2J + 1."""
    re, im, ca, cbr, cbi, cc, tb, hj = recombination_eval(packed_pos, energy)
    wr, wi = e2eta * cos2phi, e2eta * sin2phi
    w2 = e2eta * e2eta
    den = 1.0 + 2.0 * (re * wr - im * wi) + (re * re + im * im) * w2
    return (ca + 2.0 * (cbr * wr - cbi * wi) + cc * w2) / den + hj, tb / den


class _ReferencePart:
    """One part of the observed channel on the reference path (adaptive quadrature)."""

    def __init__(self, average):
        self.average = average

    def evaluate(self, efimov):
        return efimov.each_walker(self.average)


class _ObservedPlan:
    """Thermal averages of the observed three-body loss at fixed points: the deep-dimer
    channel plus the shallow channel weighted by the atoms a trapped gas loses per
    formation (:mod:`lossfit.dimer_kinetics`). Built from parts, fast plans or reference
    quadratures alike: ``deep(index)`` (a < 0 points), ``shallow_parts(index, x_atom,
    x_dimer)`` (a > 0: an array of deep, shallow and shallow above the two escape cuts,
    in the units of ``scale``) and ``relaxation(index)`` (natural units hbar/(m k_T)).
    Breakup of trapped dimers is the shallow channel's time reverse (detailed balance),
    so it costs no average of its own."""

    def __init__(self, a, q, scale, depth_over_t, deep, shallow_parts, relaxation):
        self.n_points = a.size
        self.negative = np.flatnonzero(a < 0)
        self.positive = np.flatnonzero(a > 0)
        self.deep = deep(self.negative) if self.negative.size else None
        self.parts = None
        if self.positive.size:
            pos = self.positive
            x_atom, x_dimer = escape_cuts(q[pos], depth_over_t[pos])
            self.parts = shallow_parts(pos, x_atom, x_dimer)
            self.relaxation = relaxation(pos)
            self.q, self.scale = q[pos], scale[pos]
        self.n_nodes = sum(getattr(p, "n_nodes", 0) for p in (self.deep, self.parts) if p is not None)

    def evaluate(self, efimov, out=None):
        walkers = efimov.n_walkers
        values = np.empty((walkers, self.n_points) if walkers else self.n_points)
        if self.deep is not None:
            values[..., self.negative] = self.deep.evaluate(efimov)
        if self.parts is not None:
            values[..., self.positive] = self.parts_at(efimov, check=False)["observed"]
        if out is None:
            return values
        out[...] = values
        return out

    def parts_at(self, efimov, check=True):
        """Every part at the points a > 0 (all points, if ``check``): three-body parts in
        the units of ``scale``, relaxation and breakup in hbar/(m k_T), the observed sum."""
        if check and self.positive.size != self.n_points:
            raise LossfitValueError("a", "the dimer kinetics needs a shallow dimer: every a must be > 0")
        deep, shallow, atom_escapes, dimer_escapes = np.moveaxis(self.parts.evaluate(efimov), -2, 0)
        relaxation = self.relaxation.evaluate(efimov.with_atom_dimer())
        breakup = breakup_from_formation(shallow / self.scale, self.q)
        return {"deep": deep, "shallow": shallow, "shallow_atom_escapes": atom_escapes,
                "shallow_dimer_escapes": dimer_escapes, "relaxation": relaxation, "breakup": breakup,
                "observed": observed_loss(deep, shallow, atom_escapes, dimer_escapes,
                                          relaxation_fraction(relaxation, breakup))}


class ThresholdModel(EnergyModel):
    """The zero-energy law used at every collision energy."""

    name = "threshold"
    description = "zero-energy law at every collision energy"
    three_body_kernel = staticmethod(_threshold_three_body)
    three_body_features = staticmethod(_no_features)
    atom_dimer_kernel = staticmethod(_threshold_atom_dimer)
    atom_dimer_features = staticmethod(_no_features)

    def _check_channel(self, channel, only):
        if channel == OBSERVED:
            raise LossfitValueError("channel", f"model {self.name!r} gives only the total rate, not what a "
                                    "trapped gas loses; use model='zero-range' or channel='total'")
        if channel != only:
            more = "'shallow' and 'deep'" if only == "total" else "'breakup' and 'total'"
            raise LossfitValueError("channel", f"model {self.name!r} gives only the {only} rate; "
                                    f"model='zero-range' resolves {more}")

    def three_body_rows(self, a, efimov, q, channel="total", x_max=U_MAX ** 2):
        self._check_channel(channel, "total")
        return _threshold_rows_three_body(a, efimov, q)

    def atom_dimer_rows(self, a, efimov, q, channel="relaxation", x_max=U_MAX ** 2):
        self._check_channel(channel, "relaxation")
        return _threshold_rows_atom_dimer(a, efimov, q)

    _capped = False

    def thermal_three_body(self, a, q, efimov, scale, channel="total"):
        return self.three_body_plan(a, q, scale, channel=channel).evaluate(efimov)

    def thermal_atom_dimer(self, a, q, efimov, scale, channel="relaxation"):
        return self.atom_dimer_plan(a, q, scale, channel=channel).evaluate(efimov)

    def three_body_plan(self, a, q, scale, channel="total", eta_min=averages.ETA_MIN):
        self._check_channel(channel, "total")
        return _ClosedFormPlan(l3_coefficient_unchecked, np.ravel(a), np.ravel(q), np.ravel(scale), THREE_BODY,
                               self._capped)

    def atom_dimer_plan(self, a, q, scale, channel="relaxation", eta_min=averages.ETA_MIN):
        self._check_channel(channel, "relaxation")
        return _ClosedFormPlan(beta_coefficient_unchecked, np.ravel(a), np.ravel(q), np.ravel(scale), ATOM_DIMER,
                               self._capped)


class CappedModel(ThresholdModel):
    """The zero-energy law saturated (hard minimum) at the J = 0 unitarity bound."""

    name = "capped"
    description = "zero-energy law saturated at the J=0 unitarity bound"
    _capped = True
    three_body_kernel = staticmethod(_capped_three_body)
    three_body_features = staticmethod(_capped_three_body_features)
    atom_dimer_kernel = staticmethod(_capped_atom_dimer)
    atom_dimer_features = staticmethod(_capped_atom_dimer_features)


class ZeroRangeModel(EnergyModel):
    """Exact zero-range theory from the project's solver tables.

    Three-body loss, a < 0 (table s11 from the hyperspherical solver, docs/solver.md):

        K3(E) = 72 sqrt(3) pi^2 hbar/(m k^4) (1 - |s11|^2)(1 - e^{-4 eta})
                / |1 + s11 exp(2 i Phi - 2 eta)|^2,   x = k|a|, E = hbar^2 k^2/m,

    all of it into deep dimers.

    Three-body loss, a > 0 (table from the STM solver, docs/stm.md section 7), with
    w = exp(2 i Phi - 2 eta):

        K3_shallow(E) = 72 sqrt(3) pi^2 hbar/(m k^4) [(A + 2 Re(B w) + C |w|^2)/|1 + s_AD w|^2
                                                      + sum_{J>=1} (2J + 1) P_J],
        K3_deep(E)    = 72 sqrt(3) pi^2 hbar/(m k^4) T_break (1 - e^{-4 eta}) / |1 + s_AD w|^2,

    the shallow part by detailed balance from dimer breakup in every partial wave, the
    deep part (J = 0 only: only J = 0 reaches short distance) from the three-atom
    transmission T_break into the Efimov channel. ``channel`` selects either.

    Atom-dimer relaxation, a > 0 (table s_AD from the STM solver), below and above the
    breakup threshold (J = 0 is the whole relaxation rate):

        beta(E) = 3 pi hbar / (2 m k_AD) T_AD (1 - e^{-4 eta})
                  / |1 + s_AD exp(2 i Phi - 2 eta)|^2,   E = 3 hbar^2 k_AD^2/(4m),

    T_AD being the atom-dimer -> Efimov-channel transmission (1 - |s_AD|^2 below breakup,
    less above it, where flux also leaves as three free atoms).

    Phi = s0 ln(kappa* |a| / sqrt 2) - arg Gamma(1 + i s0). kappa* comes from a_- (a < 0
    three-body), a_+ (a > 0 three-body) or a* (relaxation) with each table's own
    kappa* a_-, kappa* a_+ or kappa* a*, so that the threshold features sit at the given
    positions. Every channel reaches any a > 0: above the three-body table the atom-dimer
    table and, beyond k_AD a = 1e3, the exact |a| = infinity solution with its measured
    1/(k a) approach carry the J = 0 quantities (s_AD, T_break, T_AD; :mod:`.tables`,
    docs/stm.md sections 7b and 7d), the high-energy extension the J >= 1 sum (7c).
    """

    name = "zero-range"
    description = "exact zero-range universal functions (K3 both signs of a, beta for a > 0)"
    approximate = False
    resolves_channels = True

    def __init__(self):
        self._kernel = None
        self._features = None
        self._ad_kernel = None
        self._ad_features = None

    def __getstate__(self):
        return {}                      # rebuilt lazily where unpickled

    def __setstate__(self, state):
        self.__init__()

    @property
    def three_body_features(self):
        self.three_body_kernel
        return self._features

    @property
    def table(self):
        return load_s11_table()

    @property
    def recombination_table(self):
        return load_recombination_table()

    @property
    def three_body_kernel(self):
        # Compiled on first use and not cached on disk: the tables are baked into the
        # machine code, and a cache would not notice a regenerated table.
        if self._kernel is None:
            packed = self.table.packed
            pref = self.table.k3_prefactor
            packed_pos = self.recombination_table.packed

            @numba.njit(KERNEL_SIGNATURE)
            def kernel(x, p):
                # p = [q = k_s |a|, cos 2Phi, sin 2Phi, exp(-2 eta), 1 - exp(-4 eta),
                #      shallow weight, deep weight, sign of a, 2 Phi, lower energy cut x]
                if x < p[9]:
                    return 0.0
                if p[7] < 0.0:
                    # a < 0: every recombination goes to deep dimers (one cosine per call)
                    t, ph = s11_eval(packed, p[0] * math.sqrt(x))
                    mod = math.sqrt(max(1.0 - t, 0.0)) * p[3]
                    den = 1.0 + 2.0 * mod * math.cos(ph + p[8]) + mod * mod
                    return p[6] * pref * t * p[4] / (den * x * x)
                # a > 0: E m a^2/hbar^2 = q^2 x; the table holds the E^2-suppressed
                # numerators over E^2, and K3 x^2 = (that) q^4 in natural units
                q2 = p[0] * p[0]
                shallow, deep = _recombination_over_e2(packed_pos, q2 * x, p[1], p[2], p[3])
                out = p[6] * deep * p[4]
                if p[5] != 0.0:
                    out += p[5] * shallow
                return pref * q2 * q2 * out

            lo, hi = grid_limits(packed)
            e_lo, e_hi, e_unitarity = recombination_grid_points(packed_pos)

            @numba.njit(FEATURES_SIGNATURE)
            def features(p, out):
                # the ends of the table grids, where the interpolants meet their limits,
                # and the energy cut (a step)
                n = 0
                if p[9] > 0.0:
                    out[0] = p[9]
                    n = 1
                if p[7] < 0.0:
                    out[n] = (lo / p[0]) ** 2
                    out[n + 1] = (hi / p[0]) ** 2
                    return n + 2
                out[n] = e_lo / (p[0] * p[0])
                out[n + 1] = e_hi / (p[0] * p[0])
                out[n + 2] = e_unitarity / (p[0] * p[0])
                return n + 3
            self._features = features
            self._kernel = kernel
        return self._kernel

    @staticmethod
    def _channel_weights(table, channel):
        weights = table.get(channel)
        if weights is None:
            raise LossfitValueError("channel", f"must be one of {list(table)}, got {channel!r}")
        return weights

    def three_body_rows(self, a, efimov, q, channel="total", x_max=U_MAX ** 2, cut=None):
        """As the base class; ``cut`` (per point, in units of the energy scale) drops
        collision energies below it (the parts of the observed channel)."""
        if channel == OBSERVED:
            raise LossfitValueError("channel", "the observed channel is a thermal average over the gas (it needs a "
                                    "temperature and a trap depth): use lf.l3, not a fixed-energy rate")
        weights = self._channel_weights(_CHANNEL_WEIGHTS, channel)
        a = np.asarray(a, dtype=float).ravel()
        q = np.abs(np.asarray(q, dtype=float)).ravel()
        neg = a < 0
        kappa = np.empty(a.size)
        eta = np.empty(a.size)
        if neg.any():
            a_minus, eta_minus = efimov.require("a_minus", "eta_minus")
            kappa[neg] = self.table.kappa_star_a_minus / a_minus          # 1/a0
            eta[neg] = eta_minus
        if (~neg).any():
            a_plus, eta_plus = efimov.require("a_plus", "eta_plus")
            kappa[~neg] = self.recombination_table.kappa_star_a_plus / a_plus
            eta[~neg] = eta_plus
        two_phi = 2.0 * (S0 * np.log(kappa * np.abs(a) / math.sqrt(2.0)) - ARG_GAMMA_S0)
        rows = np.empty((a.size, 10))
        rows[:, 9] = 0.0 if cut is None else np.maximum(np.ravel(cut), 0.0)
        rows[:, 0] = q
        rows[:, 1] = np.cos(two_phi)
        rows[:, 2] = np.sin(two_phi)
        rows[:, 3] = np.exp(-2.0 * eta)
        rows[:, 4] = -np.expm1(-4.0 * eta)
        rows[:, 5] = np.where(neg, 0.0, weights[0])
        rows[:, 6] = weights[1]
        rows[:, 7] = np.where(neg, -1.0, 1.0)
        rows[:, 8] = two_phi
        return rows

    @property
    def atom_dimer_table(self):
        return load_atom_dimer_table()

    @property
    def atom_dimer_features(self):
        self.atom_dimer_kernel
        return self._ad_features

    @property
    def atom_dimer_kernel(self):
        # as for the three-body kernel: the table is baked in, so no disk cache
        if self._ad_kernel is None:
            packed = self.atom_dimer_table.packed
            packed_pos = self.recombination_table.packed

            @numba.njit(KERNEL_SIGNATURE)
            def kernel(x, p):
                # p = [k_AD a at E = E_s, cos 2Phi, sin 2Phi, exp(-2 eta), 1 - exp(-4 eta),
                #      relaxation weight, breakup weight];
                # x = E / E_s; den = |1 + s_AD exp(2 i Phi - 2 eta)|^2
                kad = p[0] * math.sqrt(x)
                out = 0.0
                if p[5] != 0.0:
                    t_ad, re, im = s_ad_eval(packed, kad)
                    den = 1.0 + 2.0 * p[3] * (re * p[1] - im * p[2]) + p[3] * p[3] * (re * re + im * im)
                    out += p[5] * t_ad * p[4] / den
                energy = 0.75 * kad * kad - 1.0           # three-atom energy, hbar^2/(m a^2)
                if p[6] != 0.0 and energy > 0.0:
                    shallow, _ = _recombination_over_e2(packed_pos, energy, p[1], p[2], p[3])
                    out += p[6] * shallow * energy * energy
                return UNITARITY_ATOM_DIMER * out / math.sqrt(x)

            first, breakup, last = atom_dimer_grid_points(packed)
            e_lo, e_hi, _ = recombination_grid_points(packed_pos)
            kad_lo = math.sqrt(4.0 * (e_lo + 1.0) / 3.0)
            kad_hi = math.sqrt(4.0 * (e_hi + 1.0) / 3.0)
            kad_he = math.sqrt(4.0 * (self.recombination_table.high_energy_max + 1.0) / 3.0)

            @numba.njit(FEATURES_SIGNATURE)
            def features(p, out):
                # the start of the grid, the breakup threshold (square-root kink) and the
                # start of the unitarity tail; with breakup, the three-body grid's ends
                out[0] = (first / p[0]) ** 2
                out[1] = (breakup / p[0]) ** 2
                out[2] = (last / p[0]) ** 2
                if p[6] == 0.0:
                    return 3
                out[3] = (kad_lo / p[0]) ** 2
                out[4] = (kad_hi / p[0]) ** 2
                out[5] = (kad_he / p[0]) ** 2
                return 6
            self._ad_features = features
            self._ad_kernel = kernel
        return self._ad_kernel

    def atom_dimer_rows(self, a, efimov, q, channel="relaxation", x_max=U_MAX ** 2):
        weights = self._channel_weights(_ATOM_DIMER_CHANNEL_WEIGHTS, channel)
        a_star, eta = efimov.require("a_star", "eta_star")
        table = self.atom_dimer_table
        kappa = table.kappa_star_a_star / a_star          # 1/a0
        rows = np.empty((a.size, 7))
        # E = 3 hbar^2 k_AD^2 / (4 m) and x = E / E_s with E_s = hbar^2 k_s^2 / m:
        # k_AD a = (2/sqrt 3) q sqrt(x)
        rows[:, 0] = (2.0 / math.sqrt(3.0)) * np.abs(q).ravel()
        two_phi = 2.0 * (S0 * np.log(kappa * np.asarray(a, dtype=float).ravel() / math.sqrt(2.0)) - ARG_GAMMA_S0)
        rows[:, 1] = np.cos(two_phi)
        rows[:, 2] = np.sin(two_phi)
        rows[:, 3] = math.exp(-2.0 * eta)
        rows[:, 4] = -math.expm1(-4.0 * eta)
        rows[:, 5], rows[:, 6] = weights
        return rows

    # -- the observed channel -------------------------------------------------------------
    def observed_plan(self, a, q, scale, depth_over_t, eta_min=averages.ETA_MIN, rtol=None):
        """Thermal averages of the observed three-body loss at fixed points (a, T): the
        deep-dimer channel plus the shallow channel weighted by what a trapped gas loses
        (:mod:`lossfit.dimer_kinetics`, docs/conventions.md).

        Parameters
        ----------
        a, q, scale
            As for :meth:`three_body_plan`.
        depth_over_t : ndarray
            Atom trap depth U/(k_B T) per point.
        eta_min : float
            As for :meth:`three_body_plan`.
        rtol : float, optional
            None: the fast rules; a number: every part by adaptive quadrature to ``rtol``.

        Returns
        -------
        object with ``evaluate(efimov) -> ndarray`` (units set by ``scale``)
        """
        a, q, scale = np.ravel(a), np.abs(np.ravel(q)), np.ravel(scale)
        depth = np.broadcast_to(np.asarray(depth_over_t, dtype=float), a.shape)
        if rtol is None:
            def deep(index):
                return self.three_body_plan(a[index], q[index], scale[index], channel="deep", eta_min=eta_min)

            def shallow_parts(index, x_atom, x_dimer):
                return averages.shallow_parts_plan(a[index], q[index], scale[index], x_atom, x_dimer, eta_min=eta_min)

            def relaxation(index):
                return self.atom_dimer_plan(a[index], q[index], np.ones(index.size), channel="relaxation",
                                            eta_min=eta_min)
        else:
            def reference(index, channel, cut):
                rows = functools.partial(self.three_body_rows, a[index], q=q[index], channel=channel, cut=cut)
                return lambda efimov: thermal_average(self.three_body_kernel, self.three_body_features,
                                                      rows(efimov), THREE_BODY, rtol=rtol)[0] * scale[index]

            def deep(index):
                return _ReferencePart(reference(index, "deep", None))

            def shallow_parts(index, x_atom, x_dimer):
                parts = [reference(index, "deep", None)] + [reference(index, "shallow", cut)
                                                            for cut in (None, x_atom, x_dimer)]
                return _ReferencePart(lambda efimov: np.array([part(efimov) for part in parts]))

            def relaxation(index):
                return _ReferencePart(lambda efimov: self.reference_average(ATOM_DIMER, a[index], q[index], efimov,
                                                                            "relaxation", rtol)[0])
        return _ObservedPlan(a, q, scale, depth, deep, shallow_parts, relaxation)

    # -- fast thermal averages (lossfit.universal.averages) -----------------------------
    def thermal_three_body(self, a, q, efimov, scale, channel="total", cut=None):
        if channel == OBSERVED:
            raise LossfitValueError("channel", "the observed channel needs the trap depth: use observed_plan")
        shallow, deep = self._channel_weights(_CHANNEL_WEIGHTS, channel)
        a, q, scale = np.ravel(a), np.abs(np.ravel(q)), np.ravel(scale)
        neg = a < 0
        n_neg = int(np.count_nonzero(neg))
        cut = None if cut is None else np.broadcast_to(np.asarray(cut, dtype=float), a.shape)
        if n_neg in (0, a.size):
            family = averages.NEGATIVE_A if n_neg else averages.POSITIVE_A
            return averages.general_average(family, a, q, efimov, scale, weights=(shallow, deep), cut=cut)
        out = np.empty(a.size)
        for family, sel in ((averages.NEGATIVE_A, neg), (averages.POSITIVE_A, ~neg)):
            out[sel] = averages.general_average(family, a[sel], q[sel], efimov, scale[sel], weights=(shallow, deep),
                                                cut=None if cut is None else cut[sel])
        return out

    def thermal_atom_dimer(self, a, q, efimov, scale, channel="relaxation"):
        weights = self._channel_weights(_ATOM_DIMER_CHANNEL_WEIGHTS, channel)
        kad = (2.0 / math.sqrt(3.0)) * np.abs(np.ravel(q))
        parts = tuple(p for p in (0, 1) if weights[p])
        return averages.general_average(averages.ATOM_DIMER_A, np.ravel(a), kad, efimov, np.ravel(scale),
                                        weights=weights, parts=parts)

    def three_body_plan(self, a, q, scale, channel="total", eta_min=averages.ETA_MIN, cut=None):
        if channel == OBSERVED:
            raise LossfitValueError("channel", "the observed channel needs the trap depth: use observed_plan")
        shallow, deep = self._channel_weights(_CHANNEL_WEIGHTS, channel)
        a, q = np.ravel(a), np.abs(np.ravel(q))
        return averages.three_body_plan(a, q, np.ravel(scale), shallow=shallow, deep=deep, eta_min=eta_min, cut=cut)

    def atom_dimer_plan(self, a, q, scale, channel="relaxation", eta_min=averages.ETA_MIN):
        relaxation, breakup = self._channel_weights(_ATOM_DIMER_CHANNEL_WEIGHTS, channel)
        q = np.abs(np.ravel(q))
        return averages.atom_dimer_plan(np.ravel(a), q, np.ravel(scale), relaxation=relaxation, breakup=breakup,
                                        eta_min=eta_min)


_MODELS = {}


def register_model(model):
    """Make an :class:`EnergyModel` instance available as ``model=model.name``."""
    if not isinstance(model, EnergyModel) or not model.name:
        raise LossfitValueError("model", f"must be a named EnergyModel instance, got {model!r}")
    _MODELS[model.name] = model
    return model


def get_model(model):
    """Resolve ``model`` (a name or an :class:`EnergyModel`) to a model instance."""
    if isinstance(model, EnergyModel):
        return model
    if model in _MODELS:
        return _MODELS[model]
    raise LossfitValueError("model", f"unknown model {model!r}; available: {available_models()}")


def available_models():
    """Names of the registered models."""
    return list(_MODELS)


register_model(ThresholdModel())
register_model(CappedModel())
register_model(ZeroRangeModel())

#: Model used when ``model`` is not given.
DEFAULT_MODEL = "zero-range"
