"""Density overlap integrals of thermal (Boltzmann) clouds in a harmonic trap.

A non-degenerate cloud of N atoms of mass m at temperature T in the potential
U(r) = (m/2) sum_i omega_i^2 x_i^2 has the Gaussian density

    n(r) = n_peak exp(-U(r) / k_B T),   n_peak = N (m omega_bar^2 / (2 pi k_B T))^(3/2),

with omega_bar = (omega_x omega_y omega_z)^(1/3). The integrals that enter the rate
equations of :mod:`lossfit.experiment.decay` follow from Gaussian integrals:

* three-body loss, <n^2> = (1/N) int n^3 d^3r = n_peak^2 / 3^(3/2)
  (Weber, Herbig, Mark, Naegerl & Grimm, PRL 91, 123201 (2003));
* atom-dimer relaxation, (1/N_D) int n_A n_D d^3r = N_A prod_i [2 pi (s_Ai^2 + s_Di^2)]^(-1/2),
  where s_i^2 = k_B T / (M omega_i^2) are the per-axis variances of the atom (M = m)
  and dimer (M = 2m) clouds (product of two normalised Gaussians).

Polarizability assumption: a weakly bound Feshbach dimer is two atoms, so its
dynamic polarizability is twice the atomic one (common practice, no source). The
dimer then feels twice the potential at twice the mass, hence *the same trap
frequencies*; with equal temperatures the overlap reduces to
n_peak,A (2/3)^(3/2). Users with a different dimer polarizability pass
``dimer_frequencies_hz``.

The ``*_coefficient`` methods return the temperature and number scalings as plain
floats so that the numba kernels of :mod:`lossfit.experiment.decay` never convert units.
"""

__all__ = ["HarmonicTrap", "as_trap"]

import math

import numpy as np

from ..constants import HBAR, K_B
from ..errors import LossfitValueError, check_positive
from ..species import species as _lookup_species
from ..units import CM3, HZ_TO_RAD_S, NK


def _frequencies(name, value):
    if value is None:
        raise LossfitValueError(name, "trap frequencies are required: give (f_x, f_y, f_z) in Hz")
    arr = np.asarray(value, dtype=float)
    if arr.shape != (3,):
        raise LossfitValueError(name, f"must be three frequencies (f_x, f_y, f_z) in Hz, got {value!r}")
    return check_positive(name, arr)


class HarmonicTrap:
    """A harmonic trap for atoms (and their Feshbach dimers).

    Parameters
    ----------
    frequencies_hz : sequence of 3 floats
        Atomic trap frequencies (f_x, f_y, f_z) in Hz (ordinary, not angular).
    dimer_frequencies_hz : sequence of 3 floats, optional
        Trap frequencies felt by dimers of mass 2m, in Hz. Default: equal to the atomic
        ones (dimer polarizability twice the atomic one, see the module notes).
    """

    def __init__(self, frequencies_hz, dimer_frequencies_hz=None):
        self._f = _frequencies("frequencies_hz", frequencies_hz)
        self._f_dimer = (self._f.copy() if dimer_frequencies_hz is None
                         else _frequencies("dimer_frequencies_hz", dimer_frequencies_hz))
        self._f.setflags(write=False)
        self._f_dimer.setflags(write=False)

    def __repr__(self):
        f = ", ".join(f"{x:g}" for x in self._f)
        return f"HarmonicTrap(frequencies_hz=({f}), mean={self.mean_frequency_hz:.4g} Hz)"

    @property
    def frequencies_hz(self):
        """Atomic trap frequencies (f_x, f_y, f_z) in Hz."""
        return self._f

    @property
    def dimer_frequencies_hz(self):
        """Dimer trap frequencies in Hz."""
        return self._f_dimer

    @property
    def mean_frequency_hz(self):
        """Geometric mean frequency f_bar = (f_x f_y f_z)^(1/3) of the atoms, in Hz."""
        return float(np.prod(self._f) ** (1.0 / 3.0))

    # -- coefficients (SI -> public units done once, here) -------------------------

    def _peak_coefficient_si(self, mass, freqs):
        # n_peak = N * coef / T^(3/2) with T in K, n in m^-3.
        omega_bar2 = (HZ_TO_RAD_S ** 2) * float(np.prod(freqs)) ** (2.0 / 3.0)
        return (mass * omega_bar2 / (2.0 * math.pi * K_B)) ** 1.5

    def peak_coefficient(self, species, *, particle="atom"):
        """Coefficient p with n_peak = p N / T^(3/2).

        Parameters
        ----------
        species : str or Species
        particle : {"atom", "dimer"}
            Dimers have mass 2m and feel ``dimer_frequencies_hz``.

        Returns
        -------
        float
            p in cm^-3 nK^(3/2).
        """
        sp = _lookup_species(species)
        if particle == "atom":
            mass, freqs = sp.mass, self._f
        elif particle == "dimer":
            mass, freqs = 2.0 * sp.mass, self._f_dimer
        else:
            raise LossfitValueError("particle", f"must be 'atom' or 'dimer', got {particle!r}")
        # K^(3/2) -> nK^(3/2) is a temperature factor, m^-3 -> cm^-3 a volume factor.
        return self._peak_coefficient_si(mass, freqs) * CM3 * (K_B / NK) ** 1.5

    def n2_coefficient(self, species):
        """Coefficient c with <n^2> = (1/N) int n^3 d^3r = c N^2 / T^3.

        Returns
        -------
        float
            c in cm^-6 nK^3, equal to p^2 / 3^(3/2) with p from :meth:`peak_coefficient`.
        """
        return self.peak_coefficient(species) ** 2 / 3.0 ** 1.5

    def overlap_coefficient(self, species):
        """Coefficient d with (1/N_D) int n_A n_D d^3r = d N_A / T^(3/2).

        Atoms and dimers share the temperature T. For equal trap frequencies
        d = p (2/3)^(3/2).

        Returns
        -------
        float
            d in cm^-3 nK^(3/2).
        """
        sp = _lookup_species(species)
        w_a = HZ_TO_RAD_S * self._f
        w_d = HZ_TO_RAD_S * self._f_dimer
        # per-axis variance times 1/T: s^2 / T = k_B / (M omega^2), in m^2/K
        var_sum = K_B / (sp.mass * w_a ** 2) + K_B / (2.0 * sp.mass * w_d ** 2)
        coef_si = float(np.prod(1.0 / np.sqrt(2.0 * math.pi * var_sum)))
        return coef_si * CM3 * (K_B / NK) ** 1.5

    # -- densities -----------------------------------------------------------------

    @staticmethod
    def _n_t(n_atoms, temperature_nK, n_name="n_atoms"):
        n = check_positive(n_name, n_atoms, allow_zero=True)
        t = check_positive("temperature_nK", temperature_nK)
        return n, t

    def peak_density(self, n_atoms, temperature_nK, species, *, particle="atom"):
        """Peak density of a thermal cloud.

        Parameters
        ----------
        n_atoms : float or array
            Number of atoms (or dimers with ``particle="dimer"``).
        temperature_nK : float or array
            Temperature in nK (broadcast against ``n_atoms``).
        species : str or Species
        particle : {"atom", "dimer"}

        Returns
        -------
        float or ndarray
            Peak density in cm^-3.
        """
        n, t = self._n_t(n_atoms, temperature_nK)
        return self.peak_coefficient(species, particle=particle) * n / t ** 1.5

    def mean_n2(self, n_atoms, temperature_nK, species):
        """Density-weighted mean square density <n^2> = (1/N) int n^3 d^3r.

        Equal to N^2 (m omega_bar^2 / (2 pi k_B T))^3 / 3^(3/2) (docs/architecture.md, conventions).

        Parameters
        ----------
        n_atoms : float or array
            Atom number.
        temperature_nK : float or array
            Temperature in nK.
        species : str or Species

        Returns
        -------
        float or ndarray
            <n^2> in cm^-6.
        """
        n, t = self._n_t(n_atoms, temperature_nK)
        return self.n2_coefficient(species) * n ** 2 / t ** 3

    def atom_dimer_overlap(self, n_atoms, temperature_nK, species):
        """Atom density seen by a dimer, (1/N_D) int n_A n_D d^3r.

        Dimers of mass 2m at the atoms' temperature, in a trap with
        ``dimer_frequencies_hz``. Independent of the dimer number.

        Parameters
        ----------
        n_atoms : float or array
            Atom number N_A.
        temperature_nK : float or array
            Common temperature in nK.
        species : str or Species

        Returns
        -------
        float or ndarray
            Overlap density in cm^-3.
        """
        n, t = self._n_t(n_atoms, temperature_nK)
        return self.overlap_coefficient(species) * n / t ** 1.5

    def phase_space_density(self, n_atoms, temperature_nK, species):
        """Peak phase-space density n_peak lambda_dB^3 = N (hbar omega_bar / k_B T)^3.

        The Boltzmann description of this module needs it to be well below 1
        (degeneracy sets in near 1.202 for bosons in a harmonic trap).

        Parameters
        ----------
        n_atoms : float or array
        temperature_nK : float or array
            Temperature in nK.
        species : str or Species

        Returns
        -------
        float or ndarray
            Dimensionless phase-space density.
        """
        sp = _lookup_species(species)
        n, t = self._n_t(n_atoms, temperature_nK)
        lam = 2.0 * math.pi * HBAR / np.sqrt(2.0 * math.pi * sp.mass * K_B * t * (NK / K_B))
        n_peak_si = self.peak_density(n, t, sp) / CM3
        return n_peak_si * lam ** 3

    def cloud_widths(self, temperature_nK, species, *, particle="atom"):
        """Gaussian rms widths sigma_i = sqrt(k_B T / (M omega_i^2)).

        Returns
        -------
        ndarray, shape (3,) (or broadcast (..., 3))
            Widths in metres.
        """
        sp = _lookup_species(species)
        t = check_positive("temperature_nK", temperature_nK)
        if particle == "atom":
            mass, freqs = sp.mass, self._f
        elif particle == "dimer":
            mass, freqs = 2.0 * sp.mass, self._f_dimer
        else:
            raise LossfitValueError("particle", f"must be 'atom' or 'dimer', got {particle!r}")
        kt = np.asarray(t)[..., None] * NK
        return np.sqrt(kt / (mass * (HZ_TO_RAD_S * freqs) ** 2))


def as_trap(trap_hz, name="trap_hz"):
    """Return ``trap_hz`` as a :class:`HarmonicTrap`: a trap, 3 frequencies in Hz, or a
    decay curve (its ``trap_hz`` and ``dimer_trap_hz``)."""
    if isinstance(trap_hz, HarmonicTrap):
        return trap_hz
    if hasattr(trap_hz, "dimer_trap_hz"):
        return HarmonicTrap(trap_hz.trap_hz, trap_hz.dimer_trap_hz)
    if trap_hz is None:
        raise LossfitValueError(name, "trap frequencies are required: give (f_x, f_y, f_z) in Hz "
                                "or a HarmonicTrap")
    try:
        return HarmonicTrap(trap_hz)
    except LossfitValueError as exc:
        raise LossfitValueError(name, str(exc).split(": ", 1)[1]) from None
