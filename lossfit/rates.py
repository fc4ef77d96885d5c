"""Public loss coefficients: at fixed collision energy and thermally averaged.

All functions broadcast ``a`` against ``energy``/``temperature`` (numpy rules) and
return a float for scalar input. Units (docs/architecture.md, units): a in a0, energy and temperature in
nK (energy as E/k_B), L3 and K3 in cm^6/s (lossfit convention, see
:mod:`lossfit.universal.threshold`), beta in cm^3/s.
"""

__all__ = ["k3", "beta_energy", "l3", "beta", "dimer_kinetics_rates", "DimerKineticsRates", "natural_unit",
           "unitarity_bound", "validity_flags", "depth_over_temperature", "MIN_ABS_A_OVER_RVDW", "MAX_ENERGY_OVER_VDW"]

import math
import warnings
from typing import NamedTuple

import numba
import numpy as np

from .constants import HBAR
from .dimer_kinetics import DEFAULT_DEPTH_OVER_T, saha_ratio
from .efimov import Efimov
from .errors import LossfitValueError, ValidityWarning, check_nonzero, check_positive, is_real, user_stacklevel
from .mixture import HeteronuclearSystem
from .thermal import ATOM_DIMER, KERNEL_SIGNATURE, THREE_BODY, U_MAX, LazyCompiled, compiled
from .units import A0, CM3_PER_S, CM6_PER_S, NK
from .universal.averages import ETA_MIN
from .universal.mixture_model import beta_unitarity_prefactor, resolve_model, resolve_species
from .universal.models import (
    OBSERVED,
    UNITARITY_ATOM_DIMER,
    UNITARITY_THREE_BODY,
    channel_at_negative_a,
    scale_wavenumber_a0,
)

#: Below this |a|/r_vdW the zero-range theory is outside its validity range (warning only).
MIN_ABS_A_OVER_RVDW = 5.0
#: Above this k_B T (or E) over the van der Waals energy hbar^2/(m r_vdW^2) the collisions
#: probe the short-range potential: zero-range theory does not apply (warning only).
MAX_ENERGY_OVER_VDW = 0.1


def validity_flags(a, scale_nk, species):
    """Points outside the zero-range theory's validity range (docs/conventions.md).

    Parameters
    ----------
    a : array_like
        Scattering lengths in a0.
    scale_nk : array_like
        Temperatures (or collision energies E/k_B) in nK, broadcast against ``a``.
    species : Species or str

    Returns
    -------
    dict of bool arrays
        ``"short_a"``: |a| < 5 r_vdW; ``"hot"``: k_B T > 0.1 hbar^2/(m r_vdW^2);
        ``"weak_dimer"``: a > 0 with k_B T above the dimer binding energy hbar^2/(m a^2),
        where the theory holds but shallow dimers formed by three-body recombination are
        not lost on formation (they dissociate again), so ``channel="total"`` may count
        loss that the experiment does not see.
    """
    sp = resolve_species(species)
    a_b, s_b = np.broadcast_arrays(np.asarray(a, dtype=float), np.asarray(scale_nk, dtype=float))
    # (k_B T/E_b) = (a k_s)^2 with k_s = sqrt(m k_B T)/hbar
    q = a_b * scale_wavenumber_a0(np.maximum(s_b, 0.0) * NK, sp.mass)
    return {"short_a": np.abs(a_b) < MIN_ABS_A_OVER_RVDW * sp.r_vdw,
            "hot": s_b > MAX_ENERGY_OVER_VDW * sp.vdw_energy_nK,
            "weak_dimer": (a_b > 0) & (q * q > 1.0)}


def _evaluate_rows_py(kernel, params, x, out):
    for i in range(params.shape[0]):
        out[i] = kernel(x, params[i])


_evaluate_rows = LazyCompiled(_evaluate_rows_py, numba.types.void(
    numba.types.FunctionType(KERNEL_SIGNATURE), numba.types.float64[:, ::1], numba.types.float64,
    numba.types.float64[::1]))


def _prepare(a, scale_nk, species, efimov, model, scale_name, process):
    sp = resolve_species(species)
    if not isinstance(efimov, Efimov):
        raise LossfitValueError("efimov", f"must be a lossfit.Efimov, got {efimov!r}")
    mdl = resolve_model(model, sp)
    if is_real(a) and is_real(scale_nk) and math.isfinite(a) and a != 0 and math.isfinite(scale_nk) \
            and scale_nk > 0 and (process == THREE_BODY or a > 0):
        # one valid point: the same result without a dozen numpy calls on 0-d arrays
        if abs(a) < MIN_ABS_A_OVER_RVDW * sp.r_vdw:
            _warn_short(sp)
        if scale_nk > MAX_ENERGY_OVER_VDW * sp.vdw_energy_nK:
            _warn_hot(sp, scale_name)
        # the array path's expression, so that scalars and arrays give identical bits
        k_s = scale_wavenumber_a0(float(scale_nk) * NK, sp.mass)
        return sp, mdl, np.array(float(a)), np.array(float(scale_nk)), np.array(float(a) * k_s)
    a = check_nonzero("a", a)
    scale = check_positive(scale_name, scale_nk)
    if process == ATOM_DIMER and (a <= 0).any():
        raise LossfitValueError("a", "atom-dimer relaxation needs a shallow dimer: a must be > 0 a0, "
                                f"got {a[a <= 0][:5]!r}")
    try:
        a_b, scale_b = np.broadcast_arrays(a, scale)
    except ValueError:
        raise LossfitValueError("a", f"shape {a.shape} does not broadcast against "
                                f"{scale_name} shape {scale.shape}") from None
    if (np.abs(a_b) < MIN_ABS_A_OVER_RVDW * sp.r_vdw).any():
        _warn_short(sp)
    if (scale_b > MAX_ENERGY_OVER_VDW * sp.vdw_energy_nK).any():
        _warn_hot(sp, scale_name)
    q = a_b * scale_wavenumber_a0(scale_b * NK, sp.mass)
    return sp, mdl, a_b, scale_b, q


def _warn_hot(sp, scale_name):
    what = "k_B T" if scale_name == "temperature" else "the collision energy"
    warnings.warn(f"{what} above {MAX_ENERGY_OVER_VDW:g} hbar^2/(m r_vdW^2) "
                  f"({MAX_ENERGY_OVER_VDW * sp.vdw_energy_nK:.4g} nK for {sp.name}): the collisions probe the "
                  "van der Waals potential, where zero-range theory does not apply", ValidityWarning,
                  stacklevel=user_stacklevel())


def _warn_short(sp):
    warnings.warn(f"|a| < {MIN_ABS_A_OVER_RVDW:g} r_vdW ({MIN_ABS_A_OVER_RVDW * sp.r_vdw:.0f} a0 "
                  f"for {sp.name}): zero-range theory is not reliable there", ValidityWarning,
                  stacklevel=user_stacklevel())


def _x_max(scale_name):
    # fixed-energy calls evaluate the kernel at x = 1; thermal averages reach U_MAX^2
    return 1.0 if scale_name == "energy" else U_MAX ** 2


def natural_unit(process, scale_nk, mass):
    """The kernels' natural unit in public units at an energy scale E_s = k_B x scale_nk:
    hbar/(m k_s^4) in cm^6/s (three-body) or hbar/(m k_s) in cm^3/s (atom-dimer),
    k_s = sqrt(m E_s)/hbar. The one home of these unit factors."""
    k_s = scale_wavenumber_a0(np.ravel(scale_nk) * NK, mass) / A0
    if process == THREE_BODY:
        return HBAR / (mass * k_s ** 4) / CM6_PER_S
    return HBAR / (mass * k_s) / CM3_PER_S


def unitarity_bound(kind, temperature_nk, species):
    """The J = 0 unitarity bound of the thermally averaged coefficient at |a| = infinity,
    without the Efimov modulation: L3 = 36 sqrt3 pi^2 hbar^5/(m^3 (k_B T)^2) in cm^6/s
    (Rem et al., PRL 110, 163202 (2013)) or beta = (2/sqrt pi) 3 sqrt3 pi hbar/(4 m k_T)
    in cm^3/s, the limits of the "capped" model (docs/conventions.md). For two bosons and
    a third atom: the event rate's bound (docs/heteronuclear.md section 5) and, for beta,
    the s-wave bound pi hbar/(mu_AD k) averaged over the atom-dimer relative energy,
    2 sqrt(pi) hbar^2/(mu_AD sqrt(2 mu_AD k_BT)) (docs/heteronuclear-rates.md).

    Parameters
    ----------
    kind : {"l3", "beta"}
    temperature_nk : array_like
        Temperature in nK.
    species : Species or str
    """
    sp = resolve_species(species)
    t = check_positive("temperature", temperature_nk)
    if isinstance(sp, HeteronuclearSystem):
        if kind == "beta":
            return (2.0 / math.sqrt(math.pi) * beta_unitarity_prefactor(sp.mass_ratio)
                    * natural_unit(ATOM_DIMER, t, sp.mass).reshape(t.shape))
        if kind != "l3":
            raise LossfitValueError("kind", f"must be 'l3' or 'beta', got {kind!r}")
        return sp.unitarity_bound(t)
    if kind == "l3":
        return 0.5 * UNITARITY_THREE_BODY * natural_unit(THREE_BODY, t, sp.mass).reshape(t.shape)
    if kind == "beta":
        return 2.0 / math.sqrt(math.pi) * UNITARITY_ATOM_DIMER * natural_unit(ATOM_DIMER, t, sp.mass).reshape(t.shape)
    raise LossfitValueError("kind", f"must be 'l3' or 'beta', got {kind!r}")


def three_body_rows(a, scale_nk, species, efimov, model, scale_name="temperature",
                    channel="total"):
    """Parameter rows of the reference path: (model, params, natural unit in cm^6/s, shape)."""
    sp, mdl, a_b, scale_b, q = _prepare(a, scale_nk, species, efimov, model, scale_name,
                                        THREE_BODY)
    params = mdl.three_body_rows(a_b, efimov, q, channel=channel, x_max=_x_max(scale_name))
    return mdl, params, natural_unit(THREE_BODY, scale_b, sp.mass), a_b.shape


def atom_dimer_rows(a, scale_nk, species, efimov, model, scale_name="temperature",
                    channel="relaxation"):
    """Parameter rows of the reference path: (model, params, natural unit in cm^3/s, shape)."""
    sp, mdl, a_b, scale_b, q = _prepare(a, scale_nk, species, efimov, model, scale_name,
                                        ATOM_DIMER)
    params = mdl.atom_dimer_rows(a_b, efimov, q, channel=channel, x_max=_x_max(scale_name))
    return mdl, params, natural_unit(ATOM_DIMER, scale_b, sp.mass), a_b.shape


def _finish(values, shape):
    out = values.reshape(shape)
    return out.item() if out.ndim == 0 else out


def k3(a, energy, *, species, efimov, model=None, channel="total"):
    """Three-body loss rate coefficient at fixed three-body collision energy.

    Parameters
    ----------
    a : float or array_like
        Scattering length in a0 (non-zero).
    energy : float or array_like
        Collision energy E/k_B in nK (> 0), relative motion in the centre-of-mass frame.
    species : Species or str
    efimov : Efimov
    model : str, optional
        ``"zero-range"`` (the default), ``"threshold"``, ``"capped"`` (an approximation) or
        a registered model name.
    channel : {"total", "shallow", "deep"}
        Recombination into any dimer, into the shallow dimer (a > 0 only; 0 for a < 0)
        or into deep dimers. Only ``model="zero-range"`` resolves the two.

    Returns
    -------
    float or ndarray
        K3(a, E) in cm^6/s (lossfit convention: atoms lost, thermal gas).
    """
    mdl, params, unit, shape = three_body_rows(a, energy, species, efimov, model, scale_name="energy",
                                               channel=channel)
    out = np.empty(params.shape[0])
    _evaluate_rows(compiled(mdl.three_body_kernel), params, 1.0, out)
    return _finish(out * unit, shape)


def beta_energy(a, energy, *, species, efimov, model=None, channel="relaxation"):
    """Atom-dimer relaxation rate coefficient at fixed atom-dimer collision energy.

    Parameters
    ----------
    a : float or array_like
        Scattering length in a0 (> 0: the shallow dimer exists).
    energy : float or array_like
        Atom-dimer collision energy E/k_B in nK (> 0).
    species, efimov, model
        As for :func:`k3`.
    channel : {"relaxation", "breakup", "total"}
        Dimers lost into deep dimers (relaxation), by breakup into three free atoms (above
        the breakup threshold, E > E_b; all partial waves) or both. Only
        ``model="zero-range"`` gives breakup.

    Returns
    -------
    float or ndarray
        beta(a, E) in cm^3/s (dimers lost).
    """
    mdl, params, unit, shape = atom_dimer_rows(a, energy, species, efimov, model, scale_name="energy",
                                               channel=channel)
    out = np.empty(params.shape[0])
    _evaluate_rows(compiled(mdl.atom_dimer_kernel), params, 1.0, out)
    return _finish(out * unit, shape)


def depth_over_temperature(trap_depth, temperature):
    """U/(k_B T) per point: ``trap_depth`` (nK, as U/k_B) over the temperature (nK), or
    :data:`lossfit.dimer_kinetics.DEFAULT_DEPTH_OVER_T` where ``trap_depth`` is None."""
    temperature = np.asarray(temperature, dtype=float)
    if trap_depth is None:
        return np.full(temperature.shape, DEFAULT_DEPTH_OVER_T)
    depth = check_positive("trap_depth", trap_depth)
    try:
        return np.broadcast_to(depth, temperature.shape) / temperature
    except ValueError:
        raise LossfitValueError("trap_depth", f"shape {depth.shape} does not broadcast against the points "
                                f"{temperature.shape}") from None


def _smallest_eta(efimov):
    # one-off averages use the rules built for the eta at hand (coarser for larger eta)
    etas = [v for v in (efimov.eta_minus, efimov.eta_plus, efimov.eta_star) if v is not None]
    return min(etas) if etas else ETA_MIN


def _averaged(process, a, temperature, species, efimov, model, rtol, channel, trap_depth=None, temperature_x=None):
    if rtol is not None and not (is_real(rtol) and 0 < rtol < 1):
        raise LossfitValueError("rtol", f"must be None or a number in (0, 1), got {rtol!r}")
    sp, mdl, a_b, scale_b, q = _prepare(a, temperature, species, efimov, model, "temperature", process)
    unit = natural_unit(process, scale_b, sp.mass)
    a_f, q_f = a_b.ravel(), q.ravel()
    if temperature_x is not None:
        if not isinstance(sp, HeteronuclearSystem):
            raise LossfitValueError("temperature_x", "applies to two identical bosons and a third atom "
                                    "(species=lf.heteronuclear(...)), the third atom's temperature")
        if rtol is not None:
            raise LossfitValueError("rtol", "the reference path averages at one temperature; leave rtol=None "
                                    "with temperature_x")
        ratio = np.broadcast_to(check_positive("temperature_x", temperature_x), a_b.shape).ravel() / scale_b.ravel()
        return _finish(mdl.thermal_three_body(a_f, q_f, efimov, unit, channel=mdl.resolve_channel(channel),
                                              temperature_ratio=ratio), a_b.shape)
    if process == THREE_BODY:
        channel = mdl.resolve_channel(channel)
        if channel == OBSERVED:
            depth = depth_over_temperature(trap_depth, scale_b).ravel()
            pos = a_f > 0
            out = np.empty(a_f.size)
            if pos.any():
                plan = mdl.observed_plan(a_f[pos], q_f[pos], unit[pos], depth[pos], eta_min=_smallest_eta(efimov),
                                         rtol=rtol)
                out[pos] = plan.evaluate(efimov)
            if not pos.all():
                # a < 0 forms no shallow dimer: the formal rate there, by the path a scalar call takes
                out[~pos] = _averaged(process, a_f[~pos], scale_b.ravel()[~pos], sp, efimov, mdl, rtol,
                                      channel_at_negative_a(channel))
            return _finish(out, a_b.shape)
        if trap_depth is not None:
            raise LossfitValueError("trap_depth", f"applies to channel='observed' only, not {channel!r}")
    if rtol is not None:
        # the reference path: adaptive quadrature of the model's kernel to ``rtol``
        value, err = mdl.reference_average(process, a_f, q_f, efimov, channel, rtol)
        bad = err > max(rtol, 1e-7) * np.abs(value) * 10.0
        if bad.any():
            warnings.warn(f"thermal quadrature did not reach rtol={rtol:g} at {bad.sum()} point(s)",
                          RuntimeWarning, stacklevel=user_stacklevel())
        return _finish(value * unit, a_b.shape)
    return _finish(mdl.thermal(process, a_f, q_f, efimov, unit, channel=channel), a_b.shape)


def l3(a, temperature, *, species, efimov, model=None, rtol=None, channel=None, trap_depth=None,
       temperature_x=None):
    """Thermally averaged three-body loss coefficient of a non-degenerate gas.

    ``L3(a, T) = ∫ K3(a, E) P3(E) dE`` with P3(E) = E^2 exp(-E/k_BT)/(2 (k_BT)^3), for
    the formal channels; by default (``channel="observed"``) the loss that a trapped gas
    shows: at a > 0 shallow dimers formed by recombination are lost only when they or
    their partner leave the trap or relax into deep dimers (docs/conventions.md).

    Parameters
    ----------
    a : float or array_like
        Scattering length in a0 (non-zero).
    temperature : float or array_like
        Gas temperature in nK (> 0).
    species, efimov, model
        As for :func:`k3`.
    rtol : float, optional
        None (default): the model's own average -- closed forms for ``"threshold"`` and
        ``"capped"``, fixed quadrature rules accurate to about 3e-7 for ``"zero-range"``
        (docs/thermal-averages.md). A number: adaptive quadrature of the energy-resolved
        kernel to this relative tolerance (the reference path, 10-100x slower).
    channel : {None, "observed", "total", "shallow", "deep"}
        None (default): ``"observed"`` for ``model="zero-range"``, ``"total"`` for models
        that resolve no channels (``"threshold"``, ``"capped"``). ``"observed"``: the
        deep-dimer channel plus the shallow-dimer channel weighted by the atoms a trapped
        gas loses per formation (escape of the products, breakup and relaxation of
        trapped dimers, quasi-static; needs a*, eta* or ties them to a_+, eta_+). The
        others as for :func:`k3`.
    trap_depth : float or array_like, optional
        Atom trap depth U/k_B in nK (``"observed"`` only), broadcast against the points;
        None assumes U = 10 k_B T (common practice after evaporation, no source).
    temperature_x : float or array_like, optional
        Two identical bosons and a third atom only: the third atom's temperature in nK
        where it differs from ``temperature`` (the bosons'); the relative energy then has
        the two-temperature distribution of docs/heteronuclear.md section 4 (the absorption
        probability keeps its one-temperature average over directions: an approximation,
        docs/heteronuclear-rates.md).

    Returns
    -------
    float or ndarray
        L3 in cm^6/s; for ``species=lf.heteronuclear(...)`` the event coefficient K3
        (d n_X/dt = -K3 n_B^2 n_X, docs/heteronuclear-rates.md).
    """
    return _averaged(THREE_BODY, a, temperature, species, efimov, model, rtol, channel, trap_depth, temperature_x)


class DimerKineticsRates(NamedTuple):
    """The rate coefficients of atoms and trapped shallow dimers at a > 0 (arrays of the
    points' shape; docs/conventions.md, "What a trapped gas loses at a > 0").

    Three-body coefficients count atoms lost (3 per event), in cm^6/s; beta in cm^3/s
    (dimers lost); ``saha`` is the equilibrium n_D/n^2 in cm^3.
    """

    deep: np.ndarray                   #: L3 into deep dimers
    shallow: np.ndarray                #: L3 into the shallow dimer (all formations)
    shallow_atom_escapes: np.ndarray   #: formations whose atom leaves the trap
    shallow_dimer_escapes: np.ndarray  #: formations whose dimer (and atom) leave
    relaxation: np.ndarray             #: beta of trapped dimers into deep dimers
    breakup: np.ndarray                #: beta of dimer breakup (detailed balance with ``shallow``)
    saha: np.ndarray                   #: equilibrium n_D / n^2
    observed: np.ndarray               #: the observed L3 these give (quasi-static)


def dimer_kinetics_rates(a, temperature, *, species, efimov, trap_depth=None, model=None):
    """Every rate coefficient of the atom + shallow-dimer kinetics in a trap, at a > 0.

    The parts of :func:`l3`'s ``channel="observed"`` (which combines them assuming the
    dimers follow the atoms quasi-statically); the explicit rate equations of
    :mod:`lossfit.experiment.decay` use them directly.

    Parameters
    ----------
    a : float or array_like
        Scattering length in a0 (> 0).
    temperature : float or array_like
        Temperature in nK (> 0); atoms and dimers share it.
    species, efimov, model
        As for :func:`l3` (the model must resolve the channels: ``"zero-range"``).
    trap_depth : float or array_like, optional
        Atom trap depth U/k_B in nK; None assumes 10 k_B T.

    Returns
    -------
    DimerKineticsRates
    """
    sp, mdl, a_b, scale_b, q = _prepare(a, temperature, species, efimov, model, "temperature", ATOM_DIMER)
    if not mdl.resolves_channels:
        raise LossfitValueError("model", f"{mdl.name!r} does not resolve shallow and deep dimers; use 'zero-range'")
    unit = natural_unit(THREE_BODY, scale_b, sp.mass)
    depth = depth_over_temperature(trap_depth, scale_b).ravel()
    plan = mdl.observed_plan(a_b.ravel(), q.ravel(), unit, depth, eta_min=_smallest_eta(efimov))
    parts = plan.parts_at(efimov)
    beta_unit = natural_unit(ATOM_DIMER, scale_b, sp.mass)
    k_t = scale_wavenumber_a0(scale_b.ravel() * NK, sp.mass) / A0 / 100.0          # 1/cm
    values = dict(parts, relaxation=parts["relaxation"] * beta_unit, breakup=parts["breakup"] * beta_unit,
                  saha=saha_ratio(q.ravel()) / k_t ** 3)
    return DimerKineticsRates(**{k: _finish(np.asarray(v, dtype=float), a_b.shape) for k, v in values.items()})


def beta(a, temperature, *, species, efimov, model=None, rtol=None, channel="relaxation"):
    """Thermally averaged atom-dimer relaxation coefficient.

    ``beta(a, T) = ∫ beta(a, E) P2(E) dE`` with
    P2(E) = (2/sqrt(pi)) E^(1/2) (k_BT)^(-3/2) exp(-E/k_BT); atoms and dimers share T.

    Parameters
    ----------
    a : float or array_like
        Scattering length in a0 (> 0).
    temperature : float or array_like
        Temperature in nK (> 0).
    species, efimov, model, rtol
        As for :func:`l3`.
    channel : {"relaxation", "breakup", "total"}
        As for :func:`beta_energy`.

    Returns
    -------
    float or ndarray
        beta in cm^3/s.
    """
    return _averaged(ATOM_DIMER, a, temperature, species, efimov, model, rtol, channel)
