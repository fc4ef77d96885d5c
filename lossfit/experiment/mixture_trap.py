"""Density overlaps of a two-species thermal mixture in harmonic traps (BBX loss).

Each species s in {B, X} forms a non-degenerate (Boltzmann) cloud in its own harmonic
potential, with its own trap frequencies omega_s,i (species-dependent polarisabilities and
masses) and its own temperature T_s:

    n_s(r) = N_s prod_i exp(-(x_i - c_s,i)^2/(2 sigma_s,i^2)) / sqrt(2 pi sigma_s,i^2),
    sigma_s,i^2 = k_B T_s/(m_s omega_s,i^2).

Gravity points along -z. Both traps share their minimum; gravity moves each cloud down by
its sag g/omega_s,z^2, so the X cloud sits

    Delta z = g (1/omega_X,z^2 - 1/omega_B,z^2)

below the B cloud (c_B = 0, c_X = (0, 0, -Delta z); a harmonic trap keeps its shape under a
uniform force). The loss integral of docs/heteronuclear.md is a product of Gaussian
integrals along each axis, with a_i = sigma_B,i^2, b_i = sigma_X,i^2, d_i the offset:

    int n_B^2 n_X d^3r = N_B^2 N_X prod_i exp(-d_i^2/(a_i + 2 b_i)) / (2 pi sqrt(a_i (a_i + 2 b_i))).

For one species in one trap this is lossfit's int n^3 = N <n^2>
(:mod:`lossfit.experiment.trap`). Standard gravity g = 9.80665 m/s^2 (exact by definition,
3rd CGPM 1901); local gravity differs by up to about 0.5 %: pass ``gravity=<m/s^2>`` for it.
"""

__all__ = ["MixtureTrap", "MixtureOverlap", "STANDARD_GRAVITY"]

import math
from typing import NamedTuple

import numpy as np

from ..errors import LossfitValueError, check_frequencies, check_positive, is_real
from ..species import species_argument
from ..units import CM3, HZ_TO_RAD_S, NK

#: Standard acceleration of gravity in m/s^2 (exact by definition, 3rd CGPM 1901).
STANDARD_GRAVITY = 9.80665
_UM = 1e-6          # m per micrometre


class MixtureOverlap(NamedTuple):
    """Density integrals of a B-X mixture (cm^-6 and cm^-3; arrays broadcast like the inputs).

    Attributes
    ----------
    integral : float or ndarray
        int n_B^2 n_X d^3r in cm^-6: the event rate is K3 times it.
    mean_nb_nx : float or ndarray
        (1/N_B) int n_B^2 n_X d^3r in cm^-6, so that d N_B/dt = -2 K3 N_B mean_nb_nx.
    mean_nb2 : float or ndarray
        (1/N_X) int n_B^2 n_X d^3r in cm^-6, so that d N_X/dt = -K3 N_X mean_nb2.
    peak_density_b, peak_density_x : float or ndarray
        Peak densities of the two clouds in cm^-3.
    sag_difference_um : float
        Delta z in micrometres (X below B when positive).
    """

    integral: object
    mean_nb_nx: object
    mean_nb2: object
    peak_density_b: object
    peak_density_x: object
    sag_difference_um: float


def _frequencies(name, value):
    if value is None:
        raise LossfitValueError(name, "trap frequencies are required: give (f_x, f_y, f_z) in Hz")
    return check_frequencies(name, value)




def _finish(values):
    values = np.asarray(values)
    return values.item() if values.ndim == 0 else values


class MixtureTrap:
    """Two species in harmonic traps under gravity: the overlap integrals of BBX loss.

    Parameters
    ----------
    boson : str or Species
        Species B (two of its atoms take part in each event).
    other : str or Species
        Species X.
    frequencies_b_hz, frequencies_x_hz : sequence of 3 floats
        Trap frequencies (f_x, f_y, f_z) of each species in Hz (ordinary, not angular);
        gravity acts along z.
    gravity : bool or float, optional
        True (default): standard gravity; False: no sag; a number: g in m/s^2 (>= 0).
    """

    def __init__(self, boson, other, frequencies_b_hz, frequencies_x_hz, *, gravity=True):
        self._boson = species_argument("boson", boson)
        self._other = species_argument("other", other)
        self._f_b = _frequencies("frequencies_b_hz", frequencies_b_hz)
        self._f_x = _frequencies("frequencies_x_hz", frequencies_x_hz)
        if gravity is True:
            g = STANDARD_GRAVITY
        elif gravity is False:
            g = 0.0
        elif is_real(gravity) and math.isfinite(gravity) and gravity >= 0:
            g = float(gravity)
        else:
            raise LossfitValueError("gravity", f"must be True, False or g in m/s^2 (>= 0), got {gravity!r}")
        self._g = g

    def __repr__(self):
        fb = ", ".join(f"{f:g}" for f in self._f_b)
        fx = ", ".join(f"{f:g}" for f in self._f_x)
        return (f"MixtureTrap({self._boson.name}: ({fb}) Hz, {self._other.name}: ({fx}) Hz, "
                f"g={self._g:g} m/s^2, sag difference {self.sag_difference_um:.3g} um)")

    @property
    def boson(self):
        """Species B."""
        return self._boson

    @property
    def other(self):
        """Species X."""
        return self._other

    @property
    def frequencies_b_hz(self):
        """Trap frequencies of B in Hz."""
        return self._f_b

    @property
    def frequencies_x_hz(self):
        """Trap frequencies of X in Hz."""
        return self._f_x

    @property
    def gravity(self):
        """g in m/s^2 (0 without gravity)."""
        return self._g

    @property
    def sag_difference_um(self):
        """Differential sag Delta z = g (1/omega_X,z^2 - 1/omega_B,z^2) in micrometres."""
        w_b, w_x = HZ_TO_RAD_S * self._f_b[2], HZ_TO_RAD_S * self._f_x[2]
        return float(self._g * (1.0 / w_x ** 2 - 1.0 / w_b ** 2) / _UM)

    def _temperatures(self, temperature_nk, temperature_x_nk):
        t_b = check_positive("temperature_nk", temperature_nk)
        t_x = t_b if temperature_x_nk is None else check_positive("temperature_x_nk", temperature_x_nk)
        return t_b, t_x

    def _variances(self, t_b, t_x):
        # sigma^2 in m^2, shape (..., 3)
        var_b = (t_b[..., None] * NK) / (self._boson.mass * (HZ_TO_RAD_S * self._f_b) ** 2)
        var_x = (t_x[..., None] * NK) / (self._other.mass * (HZ_TO_RAD_S * self._f_x) ** 2)
        return var_b, var_x

    def cloud_widths_um(self, temperature_nk, temperature_x_nk=None):
        """Gaussian rms widths sigma_i = sqrt(k_B T/(m omega_i^2)) of the two clouds.

        Parameters
        ----------
        temperature_nk : array_like
            B temperature in nK.
        temperature_x_nk : array_like, optional
            X temperature in nK (default: that of B).

        Returns
        -------
        (ndarray, ndarray)
            Widths of B and of X in micrometres, shape (..., 3).
        """
        var_b, var_x = self._variances(*self._temperatures(temperature_nk, temperature_x_nk))
        return np.sqrt(var_b) / _UM, np.sqrt(var_x) / _UM

    def overlap(self, n_b, n_x, temperature_nk, temperature_x_nk=None):
        """The loss integral int n_B^2 n_X d^3r and the mean densities of the rate equations.

        Parameters
        ----------
        n_b, n_x : array_like
            Atom numbers N_B and N_X (>= 0).
        temperature_nk : array_like
            B temperature in nK.
        temperature_x_nk : array_like, optional
            X temperature in nK (default: that of B). All inputs broadcast.

        Returns
        -------
        MixtureOverlap
            The integral (cm^-6), the B- and X-weighted means (cm^-6), the peak densities
            (cm^-3) and the differential sag (um).
        """
        nb = check_positive("n_b", n_b, allow_zero=True)
        nx = check_positive("n_x", n_x, allow_zero=True)
        t_b, t_x = self._temperatures(temperature_nk, temperature_x_nk)
        nb, nx, t_b, t_x = np.broadcast_arrays(nb, nx, t_b, t_x)
        a, b = self._variances(t_b, t_x)
        offset = np.array([0.0, 0.0, self.sag_difference_um * _UM])
        spread = a + 2.0 * b
        per_axis = np.exp(-offset ** 2 / spread) / (2.0 * math.pi * np.sqrt(a * spread))
        geometry = np.prod(per_axis, axis=-1) * CM3 ** 2                   # m^-6 -> cm^-6
        peak_b = nb / np.prod(np.sqrt(2.0 * math.pi * a), axis=-1) * CM3
        peak_x = nx / np.prod(np.sqrt(2.0 * math.pi * b), axis=-1) * CM3
        return MixtureOverlap(integral=_finish(nb ** 2 * nx * geometry),
                              mean_nb_nx=_finish(nb * nx * geometry),
                              mean_nb2=_finish(nb ** 2 * geometry),
                              peak_density_b=_finish(peak_b),
                              peak_density_x=_finish(peak_x),
                              sag_difference_um=self.sag_difference_um)
