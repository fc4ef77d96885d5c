"""Field-to-scattering-length conversion near magnetic Feshbach resonances.

Models (Chin, Grimm, Julienne & Tiesinga, RMP 82, 1225 (2010), "Feshbach resonances
in ultracold gases"):

* one resonance, a(B) = a_bg (1 - Delta / (B - B0));
* overlapping resonances as a product, a(B) = a_bg prod_i (1 - Delta_i / (B - B0_i));
* a user-supplied table a(B) on one branch, interpolated monotonically (PCHIP,
  Fritsch & Carlson, SIAM J. Numer. Anal. 17, 238 (1980)).

Also: linear propagation of a (b0, width, a_bg) covariance to a(B), averaging any
function of B over Gaussian field noise by Gauss-Hermite quadrature, and a fit of
(b0, width, a_bg) to measured Feshbach-dimer binding energies with the
mean-scattering-length-corrected universal formula E_b = hbar^2 / (m (a - abar)^2)
(Gribakin & Flambaum, PRA 48, 546 (1993); Chin et al. 2010).

Fields are in gauss, widths in gauss, scattering lengths in Bohr radii a0, binding
energies as E_b / h in kHz.
"""

__all__ = ["FeshbachResonance", "OverlappingResonances", "ScatteringLengthTable",
           "average_over_field_noise", "calibrate_from_binding_energies", "BindingEnergyFit",
           "binding_energy_khz", "resonance_scattering_length", "resonance_covariance", "compare_binding_models"]

import math
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq, least_squares

from ..errors import FitCheckWarning, LossfitValueError, ValidityWarning, check_finite, check_positive, check_table
from ..species import species as _lookup_species
from .binding import BINDING_MODELS, binding_energy_khz, check_binding_model, universal_scattering_length

_SIDES = ("above", "below")


def _field_array(B, name="B"):
    return check_finite(name, B)


def _check_side(side):
    if side is not None and side not in _SIDES:
        raise LossfitValueError("side", f"must be 'above', 'below' or None, got {side!r}")


class _ScatteringLengthModel:
    """Shared machinery: numerical inversion of a(B) on an interval without poles."""

    def a(self, B):  # pragma: no cover - abstract
        raise NotImplementedError

    def _invert_on(self, a_target, lo, hi, where):
        """The single B in the open interval (lo, hi) with a(B) = a_target."""
        # a dense grid in the open interval finds every crossing of a smooth rational a(B);
        # grid points are pulled in from poles at the ends by a relative 1e-9.
        eps = 1e-9 * max(1.0, abs(hi - lo))
        grid = np.linspace(lo + eps, hi - eps, 4001)
        diff = self._a_unchecked(grid) - a_target
        crossings = np.flatnonzero(np.sign(diff[:-1]) * np.sign(diff[1:]) <= 0)
        if crossings.size == 0:
            raise LossfitValueError("a", f"a = {a_target:g} a0 is not reached {where} "
                                    f"(B in ({lo:g}, {hi:g}) G)")
        if crossings.size > 1:
            roots = ", ".join(f"{grid[i]:.4g}" for i in crossings[:4])
            raise LossfitValueError("a", f"a = {a_target:g} a0 is reached at several fields {where} "
                                    f"(near {roots} G); pass a narrower bracket")
        i = int(crossings[0])
        if diff[i] == 0.0:
            return float(grid[i])
        return float(brentq(lambda b: self._a_unchecked(b) - a_target, grid[i], grid[i + 1],
                            xtol=1e-13, rtol=4 * np.finfo(float).eps))


def resonance_scattering_length(field, b0, width, a_bg):
    """a(B) = a_bg (1 - width / (B - b0)) of one resonance (Chin, Grimm, Julienne &
    Tiesinga, RMP 82, 1225 (2010)), without validation: fields in G, a_bg in a0; numpy
    arrays broadcast. The one home of this formula."""
    return a_bg * (1.0 - width / (field - b0))


class FeshbachResonance(_ScatteringLengthModel):
    """A single magnetic Feshbach resonance, a(B) = a_bg (1 - width / (B - b0)).

    Parameters
    ----------
    b0 : float
        Resonance position in G.
    width : float
        Resonance width Delta in G (signed; the zero crossing is at b0 + width).
    a_bg : float
        Background scattering length in a0 (non-zero).
    covariance : array (3, 3), optional
        Covariance of (b0, width, a_bg) in (G, G, a0) units, e.g. from
        :func:`calibrate_from_binding_energies`.
    """

    def __init__(self, b0, width, a_bg, covariance=None):
        self.b0 = float(check_finite("b0", b0))
        self.width = float(check_finite("width", width))
        self.a_bg = float(check_finite("a_bg", a_bg))
        if self.width == 0.0:
            raise LossfitValueError("width", "must be non-zero")
        if self.a_bg == 0.0:
            raise LossfitValueError("a_bg", "must be non-zero")
        self.covariance = None if covariance is None else resonance_covariance(covariance)

    def __repr__(self):
        return (f"FeshbachResonance(b0={self.b0:g} G, width={self.width:g} G, "
                f"a_bg={self.a_bg:g} a0)")

    @property
    def params(self):
        """(b0, width, a_bg) in (G, G, a0)."""
        return np.array([self.b0, self.width, self.a_bg])

    def binding_energy_khz(self, B, species, *, model="universal", r_star=None):
        """Feshbach-dimer binding energy E_b/h (kHz) at fields ``B`` (G) on the a > 0 side, with
        a binding-energy model of :func:`lossfit.experiment.binding.binding_energy_khz`."""
        return binding_energy_khz(self.a(B), species, model=model, r_star=r_star)

    @property
    def zero_crossing(self):
        """Field where a = 0, b0 + width, in G."""
        return self.b0 + self.width

    def _a_unchecked(self, B):
        return resonance_scattering_length(B, self.b0, self.width, self.a_bg)

    def a(self, B):
        """Scattering length at field ``B``.

        Parameters
        ----------
        B : float or array
            Magnetic field in G (must differ from ``b0``).

        Returns
        -------
        float or ndarray
            a in a0.
        """
        b = _field_array(B)
        if np.any(b == self.b0):
            raise LossfitValueError("B", f"B = {self.b0:g} G is exactly the resonance position, "
                                    "where a diverges")
        return self._a_unchecked(b)

    def da_dB(self, B):
        """Slope da/dB = a_bg width / (B - b0)^2 in a0/G."""
        b = _field_array(B)
        if np.any(b == self.b0):
            raise LossfitValueError("B", f"B = {self.b0:g} G is exactly the resonance position")
        return self.a_bg * self.width / (b - self.b0) ** 2

    def field(self, a, side=None):
        """Field at which the scattering length equals ``a``.

        A single resonance maps every a != a_bg to exactly one field,
        B = b0 + width a_bg / (a_bg - a): values between a_bg and +-infinity on one side
        of b0, the rest on the other. ``side`` states which side of the resonance the
        caller expects; a value of ``a`` that the requested side cannot reach (for
        example a large positive a above a resonance whose positive-a branch lies
        below b0) raises instead of silently returning a field on the other side.

        Parameters
        ----------
        a : float or array
            Scattering length in a0 (!= a_bg).
        side : {"above", "below", None}
            Required side of the resonance (B > b0 or B < b0); None accepts either.

        Returns
        -------
        float or ndarray
            B in G.
        """
        _check_side(side)
        arr = check_finite("a", a)
        if np.any(arr == self.a_bg):
            raise LossfitValueError("a", f"a = a_bg = {self.a_bg:g} a0 is reached only at |B| -> infinity")
        offset = self.width * self.a_bg / (self.a_bg - arr)
        if side is not None:
            wrong = offset < 0 if side == "above" else offset > 0
            if np.any(wrong):
                bad = float(np.atleast_1d(arr)[np.atleast_1d(wrong)][0])
                other = "below" if side == "above" else "above"
                raise LossfitValueError("a", f"a = {bad:g} a0 occurs only {other} the resonance at "
                                        f"{self.b0:g} G (width {self.width:g} G, a_bg {self.a_bg:g} a0), "
                                        f"not {side} it")
        return self.b0 + offset

    def jacobian(self, B):
        """Derivatives of a(B) with respect to (b0, width, a_bg).

        Returns
        -------
        ndarray, shape (..., 3)
            (da/db0 [a0/G], da/dwidth [a0/G], da/da_bg [1]).
        """
        b = _field_array(B)
        if np.any(b == self.b0):
            raise LossfitValueError("B", f"B = {self.b0:g} G is exactly the resonance position")
        x = b - self.b0
        return np.stack([-self.a_bg * self.width / x ** 2,
                         -self.a_bg / x,
                         1.0 - self.width / x], axis=-1)

    def a_covariance(self, B, covariance=None):
        """Linearly propagated covariance of a at the fields ``B``.

        The values at different fields are correlated (they share the resonance
        parameters), so the full matrix is returned; its diagonal gives the variances.

        Parameters
        ----------
        B : float or array (n,)
            Fields in G.
        covariance : array (3, 3), optional
            Covariance of (b0, width, a_bg); default the resonance's own.

        Returns
        -------
        ndarray, shape (n, n)
            Covariance of a in a0^2.
        """
        cov = self._cov(covariance)
        jac = np.atleast_2d(self.jacobian(np.atleast_1d(B)))
        return jac @ cov @ jac.T

    def a_std(self, B, covariance=None):
        """Standard deviation of a(B) in a0 from the parameter covariance (linear)."""
        cov = self._cov(covariance)
        jac = self.jacobian(B)
        return np.sqrt(np.einsum("...i,ij,...j->...", jac, cov, jac))

    def _cov(self, covariance):
        if covariance is not None:
            return resonance_covariance(covariance)
        if self.covariance is None:
            raise LossfitValueError("covariance", "this resonance carries no covariance; pass one "
                                    "for (b0, width, a_bg)")
        return self.covariance


def resonance_covariance(covariance):
    cov = check_finite("covariance", covariance)
    if cov.shape != (3, 3):
        raise LossfitValueError("covariance", "must be a 3x3 matrix for (b0, width, a_bg), "
                                f"got shape {cov.shape}")
    if not np.allclose(cov, cov.T, rtol=1e-10, atol=0.0):
        raise LossfitValueError("covariance", "must be symmetric")
    if np.linalg.eigvalsh(cov).min() < -1e-12 * max(np.abs(cov).max(), 1e-300):
        raise LossfitValueError("covariance", "must be positive semi-definite")
    return cov


class OverlappingResonances(_ScatteringLengthModel):
    """Several resonances in one channel, a(B) = a_bg prod_i (1 - width_i / (B - b0_i)).

    (Chin et al., RMP 82, 1225 (2010).)

    Parameters
    ----------
    resonances : sequence of (b0, width) pairs
        Positions and widths in G; positions must differ.
    a_bg : float
        Common background scattering length in a0.
    """

    def __init__(self, resonances, a_bg):
        try:
            pairs = np.array([(float(b0), float(w)) for b0, w in resonances], dtype=float)
        except (TypeError, ValueError):
            raise LossfitValueError("resonances", "must be a sequence of (b0, width) pairs in G") from None
        if pairs.shape[0] == 0:
            raise LossfitValueError("resonances", "need at least one (b0, width) pair")
        check_finite("resonances", pairs)
        if np.any(pairs[:, 1] == 0):
            raise LossfitValueError("resonances", "every width must be non-zero")
        order = np.argsort(pairs[:, 0])
        pairs = pairs[order]
        if np.any(np.diff(pairs[:, 0]) == 0):
            raise LossfitValueError("resonances", "resonance positions must differ")
        self.positions = pairs[:, 0]
        self.widths = pairs[:, 1]
        self.a_bg = float(check_finite("a_bg", a_bg))
        if self.a_bg == 0.0:
            raise LossfitValueError("a_bg", "must be non-zero")

    def __repr__(self):
        items = ", ".join(f"({b:g}, {w:g})" for b, w in zip(self.positions, self.widths))
        return f"OverlappingResonances([{items}], a_bg={self.a_bg:g})"

    def _a_unchecked(self, B):
        b = np.asarray(B, dtype=float)[..., None]
        return self.a_bg * np.prod(1.0 - self.widths / (b - self.positions), axis=-1)

    def a(self, B):
        """Scattering length in a0 at field(s) ``B`` in G (not at any resonance position)."""
        b = _field_array(B)
        hit = np.isin(b, self.positions)
        if np.any(hit):
            raise LossfitValueError("B", f"B = {float(np.atleast_1d(b)[np.atleast_1d(hit)][0]):g} G is "
                                    "exactly a resonance position, where a diverges")
        return self._a_unchecked(b)

    def field(self, a, *, resonance=0, side="above", bracket=None):
        """Field at which a(B) = ``a`` on a chosen branch.

        Between two poles a(B) is a rational function that can take a value more than
        once, so the branch is given explicitly: the interval from resonance number
        ``resonance`` (in order of increasing position) to its neighbouring pole on
        ``side``, or to 0 G / ``b0 + 1000 |width|`` beyond the outermost ones; or an
        explicit ``bracket`` (lo, hi) in G containing no resonance position.

        Parameters
        ----------
        a : float or array
            Scattering length in a0.
        resonance : int
            Index of the resonance (sorted by position).
        side : {"above", "below"}
        bracket : (float, float), optional

        Returns
        -------
        float or ndarray
            B in G; raises if ``a`` is reached zero or several times in the interval.
        """
        lo, hi, where = self._interval(resonance, side, bracket)
        arr = check_finite("a", a)
        flat = [self._invert_on(float(x), lo, hi, where) for x in np.atleast_1d(arr).ravel()]
        out = np.array(flat).reshape(np.shape(arr))
        return float(out) if out.ndim == 0 else out

    def _interval(self, resonance, side, bracket):
        if bracket is not None:
            lo, hi = (float(x) for x in check_finite("bracket", bracket))
            if not hi > lo:
                raise LossfitValueError("bracket", f"needs lo < hi, got ({lo:g}, {hi:g})")
            if np.any((self.positions >= lo) & (self.positions <= hi)):
                raise LossfitValueError("bracket", "must not contain a resonance position")
            return lo, hi, f"in the bracket ({lo:g}, {hi:g}) G"
        if side not in _SIDES:
            raise LossfitValueError("side", f"must be 'above' or 'below', got {side!r}")
        n = self.positions.size
        if not (isinstance(resonance, (int, np.integer)) and 0 <= resonance < n):
            raise LossfitValueError("resonance", f"must be an index 0..{n - 1}, got {resonance!r}")
        b0 = self.positions[resonance]
        span = 1000.0 * np.abs(self.widths).max()
        if side == "above":
            hi = self.positions[resonance + 1] if resonance + 1 < n else b0 + span
            return b0, hi, f"above the resonance at {b0:g} G"
        lo = self.positions[resonance - 1] if resonance > 0 else max(0.0, b0 - span)
        if lo >= b0:
            raise LossfitValueError("side", f"no positive fields below the resonance at {b0:g} G")
        return lo, b0, f"below the resonance at {b0:g} G"


class ScatteringLengthTable(_ScatteringLengthModel):
    """A user-supplied a(B) on one branch, interpolated monotonically (PCHIP).

    PCHIP keeps the interpolant monotonic between monotonic data, so the inverse
    :meth:`field` is unique. Tables must not straddle a pole; tabulate each side of a
    resonance separately. No extrapolation outside the table.

    Parameters
    ----------
    B : array (n,), n >= 2
        Strictly increasing fields in G.
    a : array (n,)
        Scattering lengths in a0, strictly monotonic in B.
    """

    def __init__(self, B, a):
        b, av = check_table("B", _field_array(B), "a", check_finite("a", a), 2)
        da = np.diff(av)
        if not (np.all(da > 0) or np.all(da < 0)):
            raise LossfitValueError("a", "must be strictly monotonic in B (one branch of a(B); "
                                    "split tables at a pole)")
        self.B = b
        self.a_values = av
        self._interp = PchipInterpolator(b, av, extrapolate=False)
        self._slope = self._interp.derivative()

    def __repr__(self):
        return f"ScatteringLengthTable({self.B.size} points, {self.B[0]:g}-{self.B[-1]:g} G)"

    def _a_unchecked(self, B):
        return self._interp(B)

    def _in_range(self, b):
        if np.any(b < self.B[0]) or np.any(b > self.B[-1]):
            raise LossfitValueError("B", f"outside the table range [{self.B[0]:g}, {self.B[-1]:g}] G")

    def a(self, B):
        """Interpolated scattering length in a0 at field(s) ``B`` in G."""
        b = _field_array(B)
        self._in_range(b)
        return self._interp(b)

    def da_dB(self, B):
        """Slope of the interpolant, a0/G."""
        b = _field_array(B)
        self._in_range(b)
        return self._slope(b)

    def field(self, a):
        """Field in G where the interpolated a equals ``a`` (a0), within the table range."""
        arr = check_finite("a", a)
        lo, hi = sorted((self.a_values[0], self.a_values[-1]))
        if np.any(arr < lo) or np.any(arr > hi):
            raise LossfitValueError("a", f"outside the tabulated range [{lo:g}, {hi:g}] a0")

        def one(x):
            if x == self.a_values[0]:
                return float(self.B[0])
            if x == self.a_values[-1]:
                return float(self.B[-1])
            return float(brentq(lambda b: self._interp(b) - x, self.B[0], self.B[-1], xtol=1e-13))

        out = np.array([one(float(x)) for x in np.atleast_1d(arr).ravel()]).reshape(np.shape(arr))
        return float(out) if out.ndim == 0 else out


def average_over_field_noise(func_of_B, B, sigma_B, *, n_nodes=40):
    """Average ``func_of_B`` over Gaussian shot-to-shot field noise.

    Computes <f>(B) = int f(B + x) exp(-x^2 / (2 sigma_B^2)) dx / (sqrt(2 pi) sigma_B) by
    Gauss-Hermite quadrature with ``n_nodes`` nodes. Near a resonance a(B) is steep and
    the loss rate is a non-linear function of a, so average the *loss rate* (or any
    observable), not a: ``func_of_B = lambda b: l3(res.a(b), T, ...)``. Gauss-Hermite
    is exact for polynomials of degree < 2 n_nodes and converges fast for smooth f; if
    the noise window reaches a pole where f diverges, f is not smooth and the
    quadrature is unreliable -- the function raises if f returns a non-finite value.

    Parameters
    ----------
    func_of_B : callable
        f(B) with B in G; called with an array of shape ``B.shape + (n_nodes,)`` if it
        accepts arrays, else node by node.
    B : float or array
        Mean fields in G.
    sigma_B : float
        Standard deviation of the field noise in G (>= 0; 0 returns f(B)).
    n_nodes : int
        Number of Gauss-Hermite nodes.

    Returns
    -------
    float or ndarray
        The averaged f, shaped like ``B`` (times any trailing shape f returns).
    """
    b = _field_array(B)
    sigma = check_positive("sigma_B", sigma_B, allow_zero=True)
    if sigma.ndim != 0:
        raise LossfitValueError("sigma_B", "must be a scalar")
    if not (isinstance(n_nodes, (int, np.integer)) and 1 <= n_nodes <= 200):
        raise LossfitValueError("n_nodes", f"must be an integer in 1..200, got {n_nodes!r}")
    if float(sigma) == 0.0:
        return func_of_B(b)
    x, w = np.polynomial.hermite.hermgauss(int(n_nodes))
    fields = b[..., None] + math.sqrt(2.0) * float(sigma) * x
    try:
        values = np.asarray(func_of_B(fields), dtype=float)
        if values.shape[:fields.ndim] != fields.shape:
            raise ValueError
    except (TypeError, ValueError):
        values = np.array([func_of_B(float(f)) for f in fields.ravel()], dtype=float)
        values = values.reshape(fields.shape + values.shape[1:])
    if not np.all(np.isfinite(values)):
        raise LossfitValueError("sigma_B", "func_of_B is not finite somewhere inside the noise window "
                                "(a pole within a few sigma_B of B?)")
    result = np.moveaxis(values, fields.ndim - 1, -1) @ (w / math.sqrt(math.pi))
    return float(result) if result.ndim == 0 else result


# --- binding-energy calibration -------------------------------------------------------

@dataclass(frozen=True)
class BindingEnergyFit:
    """Result of :func:`calibrate_from_binding_energies`.

    Attributes
    ----------
    resonance : FeshbachResonance
        Best-fit resonance carrying the parameter covariance.
    params : ndarray (3,)
        (b0 [G], width [G], a_bg [a0]).
    covariance : ndarray (3, 3)
        Covariance of ``params``.
    chi2 : float
        Sum of squared normalised residuals.
    dof : int
        Degrees of freedom (points - 3).
    residuals : ndarray
        (model - data) / error per point.
    model : str
        The binding-energy model (:data:`lossfit.experiment.binding.BINDING_MODELS`).
    r_star : float or None
        The effective range used (a0; ``model="effective-range"``).
    aic : float
        Akaike's criterion chi2 + 2 x 3 (Akaike, IEEE Trans. Autom. Control 19, 716 (1974)):
        with the same three fitted parameters the models compare by chi2.
    """

    resonance: FeshbachResonance
    params: np.ndarray
    covariance: np.ndarray
    chi2: float
    dof: int
    residuals: np.ndarray
    model: str = "universal"
    aic: float = float("nan")
    r_star: float | None = None

    @property
    def errors(self):
        """One-sigma uncertainties of (b0, width, a_bg)."""
        return np.sqrt(np.diag(self.covariance))


def calibrate_from_binding_energies(B, E_b_kHz, E_b_err, species, guess, *, absolute_sigma=True,
                                    model="universal", r_star=None):
    """Fit (b0, width, a_bg) to measured Feshbach-dimer binding energies.

    Model: a(B) = a_bg (1 - width / (B - b0)) (Chin et al. 2010) and E_b(a) from
    :func:`lossfit.experiment.binding.binding_energy_khz` with ``model`` -- ``"universal"``
    (hbar^2/(m (a - abar)^2), Gribakin & Flambaum 1993), ``"effective-range"`` (a narrow
    resonance with effective range ``r_star`` in a0, Petrov 2004) or ``"van-der-waals"``
    (the -C6/r^6 bound state). :func:`compare_binding_models` fits all of them. Weighted least squares
    (trust-region reflective, :func:`scipy.optimize.least_squares`); the covariance is
    (J^T J)^-1 at the optimum, scaled by chi2/dof unless ``absolute_sigma``.

    The fit first matches a(B) to the scattering lengths a_i = abar + hbar / sqrt(m E_i)
    implied by each point (a smooth, branch-free problem), then refines on the energies
    themselves. All points must lie on the same side of the resonance (where a > 0).

    Parameters
    ----------
    B : array (n,), n >= 4
        Fields in G.
    E_b_kHz : array (n,)
        Binding energies E_b / h in kHz (> 0).
    E_b_err : array (n,)
        One-sigma uncertainties in kHz (> 0).
    species : str or Species
    guess : (b0, width, a_bg)
        Starting values in (G, G, a0); b0 must lie outside the range of ``B``.
    absolute_sigma : bool
        Treat ``E_b_err`` as absolute (True) or as relative weights (False).
    model : {"universal", "effective-range", "van-der-waals"}
    r_star : float, optional
        Effective range R* in a0 (``model="effective-range"``).

    Returns
    -------
    BindingEnergyFit
    """
    sp = _lookup_species(species)
    b = _field_array(B)
    e = check_positive("E_b_kHz", E_b_kHz)
    err = check_positive("E_b_err", E_b_err)
    if b.ndim != 1 or b.shape != e.shape or b.shape != err.shape:
        raise LossfitValueError("E_b_kHz", f"B, E_b_kHz and E_b_err must be 1-d of equal length, "
                                f"got shapes {b.shape}, {e.shape}, {err.shape}")
    if b.size < 4:
        raise LossfitValueError("B", f"need at least 4 points to fit 3 parameters, got {b.size}")
    g = check_finite("guess", guess)
    if g.shape != (3,):
        raise LossfitValueError("guess", f"must be (b0, width, a_bg), got {guess!r}")
    if g[1] == 0 or g[2] == 0:
        raise LossfitValueError("guess", "width and a_bg must be non-zero")
    if not (np.all(b > g[0]) or np.all(b < g[0])):
        raise LossfitValueError("B", f"all fields must lie on one side of the guessed b0 = {g[0]:g} G "
                                "(binding energies exist only on the a > 0 side)")
    check_binding_model(model, r_star)
    abar = sp.abar
    floor = 0.0 if model == "effective-range" else abar

    def a_of(params):
        return resonance_scattering_length(b, *params)

    # Stage 1: scattering lengths implied by each energy through the universal law (a
    # smooth, branch-free start for every model), errors propagated linearly.
    a_data = universal_scattering_length(e, sp)
    a_err = 0.5 * (a_data - abar) * err / e
    first = least_squares(lambda p: (a_of(p) - a_data) / a_err, g, x_scale="jac", method="lm")

    def energy_residuals(params):
        a_model = a_of(params)
        if np.any(a_model <= floor * 1.0001):
            return np.full(b.size, 1e6)        # off the dimer's side: a large, finite penalty
        return (binding_energy_khz(a_model, sp, model=model, r_star=r_star) - e) / err

    fit = least_squares(energy_residuals, first.x, x_scale="jac", method="lm",
                        xtol=1e-15, ftol=1e-15, gtol=1e-15)
    params = fit.x
    a_fit = a_of(params)
    if not fit.success or not np.all(np.isfinite(fit.fun)):
        raise LossfitValueError("guess", f"the fit did not converge ({fit.message}); try a better guess")
    if np.any(a_fit <= abar) or not (np.all(b > params[0]) or np.all(b < params[0])):
        raise LossfitValueError("guess", "the fit ended on an unphysical branch (a <= abar at a data "
                                "point or b0 inside the data); try a better guess")
    jac = fit.jac
    try:
        cov = np.linalg.inv(jac.T @ jac)
    except np.linalg.LinAlgError:
        raise LossfitValueError("B", "the data do not constrain all three parameters "
                                "(singular Jacobian); add points over a wider field range") from None
    chi2 = float(np.sum(fit.fun ** 2))
    dof = int(b.size - 3)
    if not absolute_sigma and dof > 0:
        cov = cov * chi2 / dof
    cov = 0.5 * (cov + cov.T)
    if np.any(a_fit < 2.0 * abar):
        warnings.warn("some points have a < 2 abar, where the near-threshold formula is only "
                      "approximate (Chin et al. 2010)", ValidityWarning, stacklevel=2)
    res = FeshbachResonance(*params, covariance=cov)
    return BindingEnergyFit(resonance=res, params=params.copy(), covariance=cov, chi2=chi2, dof=dof,
                            residuals=fit.fun.copy(), model=model, aic=chi2 + 6.0, r_star=r_star)


def compare_binding_models(B, E_b_kHz, E_b_err, species, guess, *, r_star=None, absolute_sigma=True):
    """Fit the binding energies with every model and say which the data prefer.

    The three models have the same three fitted parameters (b0, width, a_bg; R* is given),
    so Akaike's criterion orders them by chi2; a difference below 2 does not separate
    them (Burnham & Anderson, Model Selection and Multimodel Inference (2002)).

    Parameters
    ----------
    B, E_b_kHz, E_b_err, species, guess, absolute_sigma
        As in :func:`calibrate_from_binding_energies`.
    r_star : float, optional
        Effective range in a0; without it the effective-range model is left out.

    Returns
    -------
    (fits, preferred) : (list of BindingEnergyFit, str or None)
        Fits ordered by AIC; the preferred model's name, or None if the best two lie
        within 2 of each other.
    """
    models = [m for m in BINDING_MODELS if m != "effective-range" or r_star is not None]
    fits = []
    for m in models:
        try:
            fits.append(calibrate_from_binding_energies(B, E_b_kHz, E_b_err, species, guess, model=m,
                                                        r_star=r_star if m == "effective-range" else None,
                                                        absolute_sigma=absolute_sigma))
        except LossfitValueError as err:
            if err.argument not in ("guess", "a"):
                raise
            # a model that cannot describe the data at all is left out, and said so
            warnings.warn(f"binding-energy model {m!r} could not be fitted ({err}); it is left out of the "
                          "comparison", FitCheckWarning, stacklevel=2)
    if not fits:
        raise LossfitValueError("guess", "no binding-energy model could be fitted; try a better guess")
    fits.sort(key=lambda f: f.aic)
    preferred = fits[0].model if len(fits) == 1 or fits[1].aic - fits[0].aic > 2.0 else None
    return fits, preferred
