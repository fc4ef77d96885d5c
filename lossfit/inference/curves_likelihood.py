"""The likelihood of the global fit: raw decay curves given Efimov parameters and systematics.

Every curve of a campaign is fitted at once with

* shared Efimov parameters (any of those of :func:`lossfit.fit`, or the universal tie),
* per-curve nuisances: initial number N0, initial temperature T0 and one-body loss
  rate Gamma (dimer curves: N_D0, N_A0, T0, Gamma_D),
* campaign-wide systematic nuisances with priors: ``density_scale`` (number/density
  calibration s: L3 acts as L3_true / s^2 and beta as beta_true / s on measured numbers,
  the convention of :mod:`lossfit.inference.parameters`), ``temperature_scale``
  (thermometry s_T: measured T = s_T T_true; the theory and the densities use T_true),
  the resonance parameters ``b0``, ``width``, ``a_bg`` of a(B) (Chin et al., RMP 82,
  1225 (2010)) and the field noise ``sigma_B`` (G).

Treatment of the per-curve nuisances (why the sampler stays efficient)
---------------------------------------------------------------------
Sampling 3 nuisances per curve would give emcee 120+ dimensions for 40 curves, far
beyond what an affine-invariant ensemble handles (Goodman & Weare 2010; Huijser,
Goodman & Brewer, ANZ J. Stat. 64, 34 (2022)). Instead they are eliminated inside the
likelihood by a Laplace approximation (Tierney & Kadane, JASA 81, 82 (1986)) with flat
priors: log L(theta) = -chi2_min(theta)/2 - (1/2) sum_j ln det H_j + const. Curves are
independent given theta, so the inner problem splits into 40 problems of 3 unknowns.
They are solved by *chord Gauss-Newton* (a Newton-type iteration with a frozen
Jacobian, e.g. Kelley, Iterative Methods for Linear and Nonlinear Equations, SIAM
1995, ch. 5). Before sampling, the posterior mode is located and every curve's
nuisances are solved exactly there (:meth:`CurvesLikelihood.refresh`: one
:func:`scipy.optimize.least_squares` problem with block-diagonal Jacobian sparsity, so
that its finite differences perturb one coordinate of *every* curve in the same
batched integration); the per-curve Jacobians J_j of the normalised residuals are
frozen at that reference. Each likelihood call then starts every curve from its
reference nuisances, takes ``inner_steps`` (default 1) steps
x <- x - (J^T J)^-1 J^T r(x) -- projected onto Gamma = 0 for a curve whose step would
make Gamma negative -- and evaluates chi2 *exactly* at the result (an upper bound of
the profile minimum). With the curvature frozen, ln det H_j is a constant and drops
out, so marginal and profile likelihood coincide up to a constant. Starting every
call from the same reference keeps log L a deterministic function of theta (a warm
start from the previous call would make it depend on the walker's history and break
detailed balance). Measured accuracy, cost and coverage: docs/global-fit.md.

Shallow dimers at a > 0. With a model that resolves the recombination channels (the
zero-range model), an atom curve at a > 0 runs the explicit trapped-dimer kinetics of
:mod:`lossfit.experiment.decay` (``dimers="explicit"``): free atoms, trapped shallow
dimers and lost atoms from the six coefficients of
:func:`lossfit.rates.dimer_kinetics_rates` at the curve's trap depth (``DecayCurve.trap_depth``;
none given: 10 k_B T0 with T0 the curve's first measured temperature, recorded in
:attr:`CurvesLikelihood.trap_depths`), the measured number being N + 2 N_D or N as the
curve's ``counts_dimers`` says, and the dimers' one-body rate that of the atoms.
Curves at a < 0, dimer curves and models without channels keep the effective L3 (or
beta). Equations, assumptions, and where the quasi-static observed L3 differs:
docs/global-fit.md.

L3(T) and beta(T) (or the six kinetics coefficients) at each curve's scattering length
enter the rate equations only through a table of the theory on a small, fixed grid of
true temperatures per curve
(``table_step`` in ln T, covering the curve's temperatures over the prior range of
``temperature_scale``); one thermal quadrature call evaluates all grid points of all
curves, and a batched cubic spline in ln T (the interpolation of
:class:`lossfit.experiment.decay.TabulatedRate` and
:class:`lossfit.experiment.decay.TabulatedKinetics`) feeds
:class:`lossfit.experiment.decay.DecayBatch`. With
field noise, the rate is averaged over sigma_B by Gauss-Hermite quadrature in B
(:func:`lossfit.experiment.feshbach.average_over_field_noise` uses the same rule) -- averaging
the rate rather than the curves, which is exact to first order in the loss.
"""

__all__ = ["CurvesLikelihood", "display_spectra"]


import copy
import math

import numba
import numpy as np
from scipy.interpolate import CubicSpline
from scipy.optimize import least_squares
from scipy.sparse import csr_matrix

from ..data.curves import check_curves
from ..data.spectra import LossSpectrum
from ..dimer_kinetics import DEFAULT_DEPTH_OVER_T
from ..efimov import Efimov
from ..errors import LossfitValueError
from ..experiment.decay import (
    KINETICS_FIELDS,
    DecayBatch,
    PackedTables,
    TabulatedKinetics,
    TabulatedRate,
    kinetics_columns,
)
from ..experiment.feshbach import resonance_scattering_length
from ..experiment.trap import as_trap
from ..rates import natural_unit
from ..species import species as _lookup_species
from ..thermal import ATOM_DIMER, THREE_BODY
from ..units import NK
from ..universal.averages import ETA_MIN
from ..universal.models import get_model, scale_wavenumber_a0
from .campaign_space import RESONANCE_NAMES
from .curve_fits import spectrum_from_curves
from .fit_checks import chi2_summary, poor_fit_message, temperature_plausibility
from .likelihood import PreparedPlanCache, RateBlock

# The decay integrator's tolerance: 1e-6 relative is far below counting noise and keeps a
# batched call of 40 curves near 0.5 ms.
_INTEGRATOR_RTOL = 1e-6


@numba.njit(cache=True)
def _rows_times(x, m):
    """x (rows, n) @ m (n, p), every element summed over n in order: a row's result does
    not depend on how many rows come with it. BLAS' products do (their edge kernels round
    differently), and the walkers of a set or the curves of a group (two-level
    parallelism) would then not give the same bits as alone (docs/cluster.md)."""
    out = np.zeros((x.shape[0], m.shape[1]))
    for r in range(x.shape[0]):
        row = out[r]
        for k in range(x.shape[1]):
            v = x[r, k]
            mk = m[k]
            for q in range(mk.size):
                row[q] += v * mk[q]
    return out


class _FastTable(TabulatedRate):
    """A TabulatedRate built from precomputed spline coefficients (no re-validation:
    the likelihood produces them from finite, positive theory values)."""

    def __init__(self, knots, coefs, temps, values):
        self._knots = knots
        self._coefs = coefs
        self.temperature_nK = temps
        self.values = values


class _FastKinetics(TabulatedKinetics):
    """A TabulatedKinetics built from precomputed spline coefficients (as :class:`_FastTable`)."""

    def __init__(self, knots, coefs, temps):
        self._knots = knots
        self._coefs = coefs
        self.temperature_nK = temps
        self.values = None


class _KineticsBlock(PreparedPlanCache):
    """The six coefficients of the explicit dimer kinetics at fixed points (a > 0, T,
    trap depth), prepared once as the zero-range model's observed-channel plan.

    Parameters
    ----------
    a, temperature, depth : ndarray
        Scattering lengths (a0), temperatures (nK) and atom trap depths U/k_B (nK), 1-D.
    species : Species
    model : EnergyModel
        A model that resolves the channels.
    rtol : float, optional
        None: the fast averages; a number: the adaptive reference quadrature.
    """

    def __init__(self, a, temperature, depth, species, model, rtol=None):
        self.a = np.asarray(a, dtype=float)
        temperature = np.asarray(temperature, dtype=float)
        self.k_s = scale_wavenumber_a0(temperature * NK, species.mass)               # 1/a0
        self.unit = natural_unit(THREE_BODY, temperature, species.mass)             # cm^6/s
        self.beta_unit = natural_unit(ATOM_DIMER, temperature, species.mass)        # cm^3/s
        self.depth_over_t = np.asarray(depth, dtype=float) / temperature
        self.model = model
        self.rtol = rtol
        self.eta_min = ETA_MIN

    def _plan_at(self, a):
        return self.model.observed_plan(a, a * self.k_s, self.unit, self.depth_over_t, eta_min=self.eta_min,
                                        rtol=self.rtol)

    def predict(self, efimov, a=None):
        """The six coefficients (order of :data:`lossfit.experiment.decay.KINETICS_FIELDS`;
        cm^6/s, cm^3/s) at every point; ``a`` (a0) replaces the stored scattering
        lengths (then the plan is rebuilt)."""
        if a is None:
            if self._plan is None:
                self._plan = self._plan_at(self.a)
            plan = self._plan
        else:
            plan = self._plan_at(np.asarray(a, dtype=float))
        parts = plan.parts_at(efimov)
        return [parts[n] * (self.beta_unit if n in ("relaxation", "breakup") else 1.0) for n in KINETICS_FIELDS]


def _temperature_groups(temps, ratio=1.3):
    """Cluster temperatures: a new group starts above ``ratio`` x the group's first member."""
    order = np.argsort(temps)
    labels = np.empty(len(temps), dtype=int)
    start, g = None, -1
    for i in order:
        if start is None or temps[i] > ratio * start:
            g += 1
            start = temps[i]
        labels[i] = g
    return labels


def display_spectra(spectra):
    """Two-stage spectra split into groups of similar temperature, each point at the
    group's median temperature (for figures only; fits use the exact temperatures)."""
    out = []
    for s in spectra:
        labels = _temperature_groups(s.temperature)
        for g in np.unique(labels):
            m = labels == g
            t = float(np.median(s.temperature[m]))
            out.append(LossSpectrum(s.a[m], t, s.value[m], s.error[m], kind=s.kind,
                                    label=f"{s.kind}, ~{t:.3g} nK (per-curve fits)", species=s.species,
                                    channel=s.channel, trap_depth=None if s.trap_depth is None else s.trap_depth[m]))
    return out


class CurvesLikelihood:
    """log L of raw decay curves given Efimov parameters and campaign systematics.

    Parameters
    ----------
    curves : sequence of DecayCurve
    species : str or Species
    model : str or EnergyModel
    resonance : FeshbachResonance, optional
        Nominal a(B); needed for curves given by field (and for resonance systematics).
    reference_fits : list of CurveFit
        Per-curve fits providing the initial reference nuisances.
    heating : bool
    recombination_heating_nK : float or array (one per curve)
    temperature_scale_range : (float, float)
        Range of ``temperature_scale`` the T tables must cover.
    field_noise : bool
        Average rates over Gaussian field noise (sigma_B free or fixed > 0).
    field_noise_nodes : int
        Gauss-Hermite nodes of that average.
    inner_steps : int
        Chord Gauss-Newton steps per call (module docstring); 0 uses the linearised chi2.
    table_step : float
        Knot spacing of the T tables in ln T.
    rtol : float, optional
        None: the model's fast thermal averages; a number: the adaptive reference
        quadrature at this tolerance (slow; for checks).
    shift_margin : float
        Extra reach of the T tables on both sides, in ln T (default 0;
        :func:`lossfit.inference.global_fit.prepare_curves` sets it from the priors). With
        free resonance parameters or field noise, a walker whose scattering lengths move by
        factors rho with 2 |ln rho| <= ``shift_margin`` (every curve and noise node) reuses
        the prepared thermal averages on knots shifted by -2 ln rho
        (:meth:`lossfit.universal.averages.ThermalPlan.evaluate_scaled`); other walkers
        rebuild them at their a.

    Attributes
    ----------
    species, model, curves
    spectra : list of LossSpectrum
        Two-stage spectra grouped by temperature (for :func:`lossfit.plotting.spectrum_plot`).
    two_stage_spectra : list of LossSpectrum
        Per-curve fits with exact temperatures.
    """

    def __init__(self, curves, species, model, *, resonance=None, reference_fits, heating=True,
                 recombination_heating_nK=0.0, temperature_scale_range=(1.0, 1.0), field_noise=False,
                 field_noise_nodes=7, inner_steps=1, table_step=0.16, rtol=None, shift_margin=0.0):
        self.curves = check_curves(curves)
        self.species = _lookup_species(species)
        self.model = get_model(model)
        self.resonance = resonance
        self.rtol = rtol
        if not (isinstance(shift_margin, (int, float)) and 0.0 <= shift_margin <= 2.0):
            raise LossfitValueError("shift_margin", f"must be a number in 0..2 (ln T), got {shift_margin!r}")
        self.shift_margin = float(shift_margin)
        if not (isinstance(inner_steps, (int, np.integer)) and 0 <= inner_steps <= 10):
            raise LossfitValueError("inner_steps", f"must be an integer in 0..10, got {inner_steps!r}")
        self.inner_steps = int(inner_steps)
        m = len(self.curves)
        self.n_curves = m
        self.n_points = sum(len(c) for c in self.curves)
        self.dimers = np.array([c.kind == "dimers" for c in self.curves])
        self.batch = DecayBatch([c.t for c in self.curves], species=self.species,
                                traps_hz=[as_trap(c) for c in self.curves], heating=heating,
                                recombination_heating_nK=recombination_heating_nK, rtol=_INTEGRATOR_RTOL,
                                counts_dimers=[c.counts_dimers for c in self.curves])
        self.offsets = self.batch.offsets
        self._batches = {1: self.batch}
        self._packing = {}
        self.recombination_heating = np.broadcast_to(np.asarray(recombination_heating_nK, dtype=float),
                                                     (m,)).copy()
        self.t_max = np.array([c.t[-1] for c in self.curves])
        self.fields = np.array([np.nan if c.field is None else c.field for c in self.curves])
        self.by_field = np.isfinite(self.fields)
        if self.by_field.any() and resonance is None:
            raise LossfitValueError("resonance", "some curves are given by field; pass resonance=")
        self.a_nominal = np.array([c.scattering_length(resonance) for c in self.curves])
        self.signs = np.sign(self.a_nominal)
        # atom curves at a > 0 carry the trapped shallow dimers explicitly (module docstring)
        self.explicit = (~self.dimers) & (self.a_nominal > 0) & bool(self.model.resolves_channels)
        given = np.array([np.nan if c.trap_depth is None else c.trap_depth for c in self.curves])
        self.depth = np.where(np.isnan(given), DEFAULT_DEPTH_OVER_T * np.array([c.initial_temperature
                                                                              for c in self.curves]), given)
        self.trap_depths = [_depth_record(given[j], self.depth[j]) if self.explicit[j] else "not used"
                            for j in range(m)]
        self._setup_data()
        self._setup_tables(reference_fits, temperature_scale_range, table_step, field_noise,
                           field_noise_nodes)
        # which way the tables are made is decided for the whole campaign, so that a group
        # of its curves (:meth:`split`) takes the same way and gives the same bits
        self._packed_path = not (self.dimers.any() or self.explicit.any())
        self._rescalable = not self.explicit.any()
        self._campaign_a = (self.a_nominal, self.fields, self.by_field)
        self._campaign_index = np.arange(m)
        self._set_reference(np.array([self._coords_of_fit(f) for f in reference_fits]),
                            self._jacobian_of_fits(reference_fits))
        self.two_stage_spectra = spectrum_from_curves(self.curves, species=self.species, fits=reference_fits)
        self.spectra = display_spectra(self.two_stage_spectra)

    # -- setup ------------------------------------------------------------------------
    def _setup_data(self, width=None):
        cs = self.curves
        self.main = np.concatenate([c.atoms for c in cs])
        self.main_err = np.concatenate([c.atoms_err for c in cs])
        self.t_mask = np.concatenate([np.full(len(c), c.temperature_series) for c in cs])
        self.t_data = np.concatenate([c.temperature for c in cs if c.temperature_series] or [np.empty(0)])
        self.t_err = np.concatenate([c.temperature_err for c in cs if c.temperature_series] or [np.empty(0)])
        self.p_mask = np.concatenate([np.full(len(c), c.kind == "dimers" and c.partner_atoms.ndim == 1)
                                      for c in cs])
        self.p_data = np.concatenate([c.partner_atoms for c in cs if self._partner_series(c)] or [np.empty(0)])
        self.p_err = np.concatenate([c.partner_atoms_err for c in cs if self._partner_series(c)] or [np.empty(0)])
        # single measurements of initial values act as Gaussian constraints
        self.t0_curves = np.array([j for j, c in enumerate(cs) if not c.temperature_series], dtype=int)
        self.t0_data = np.array([float(cs[j].temperature) for j in self.t0_curves])
        self.t0_err = np.array([float(cs[j].temperature_err) for j in self.t0_curves])
        self.na_curves = np.array([j for j, c in enumerate(cs) if c.kind == "dimers" and c.partner_atoms.ndim == 0
                                   and c.partner_atoms_err is not None], dtype=int)
        self.na_data = np.array([float(cs[j].partner_atoms) for j in self.na_curves])
        self.na_err = np.array([float(cs[j].partner_atoms_err) for j in self.na_curves])
        # coordinates per curve: ln n0, ln n_atoms0 (dimers), ln t0, gamma t_max  (k = 4, padded)
        self._point_is_dimer = np.repeat(self.dimers, [len(c) for c in cs])
        self.k = 4
        self.active = np.ones((self.n_curves, self.k), dtype=bool)
        self.active[~self.dimers, 1] = False
        # residual index of every curve's residuals (padded with a pointer to a zero)
        owner = []
        for j, c in enumerate(cs):
            owner += [j] * len(c)
        owner = np.array(owner)
        parts = [owner, owner[self.t_mask], owner[self.p_mask], self.t0_curves, self.na_curves]
        res_owner = np.concatenate(parts)
        self.n_res = res_owner.size
        lists = [np.flatnonzero(res_owner == j) for j in range(self.n_curves)]
        width = max(len(x) for x in lists) if width is None else width
        self.res_index = np.full((self.n_curves, width), self.n_res, dtype=np.int64)
        for j, x in enumerate(lists):
            self.res_index[j, :len(x)] = x

    @staticmethod
    def _partner_series(c):
        return c.kind == "dimers" and c.partner_atoms.ndim == 1

    def _setup_tables(self, fits, s_range, step, field_noise, nodes):
        lo_s, hi_s = s_range
        lo, hi = np.empty(self.n_curves), np.empty(self.n_curves)
        for j, (c, f) in enumerate(zip(self.curves, fits)):
            # measured range +- 4 sigma and the per-curve model; T(t) outside the table at
            # some theta means a heating far beyond anything measured: zero likelihood there
            t_meas = np.concatenate([np.atleast_1d(c.temperature + 4 * c.temperature_err), f.model_temperature])
            low = np.atleast_1d(c.temperature - 4 * c.temperature_err).clip(min=0.5 * c.initial_temperature)
            t_min = min(np.min(low), np.min(f.model_temperature))
            lo[j] = 0.9 * t_min / hi_s * math.exp(-self.shift_margin)
            hi[j] = 1.3 * np.max(t_meas) / lo_s * math.exp(self.shift_margin)
        span = float(np.max(np.log(hi / lo)))
        n_knots = max(5, int(math.ceil(span / step)) + 1)
        self.rel_knots = np.linspace(0.0, span, n_knots)           # ln(T / T_lo,j)
        self.t_lo = lo
        self.grid = lo[:, None] * np.exp(self.rel_knots)[None, :]   # true T, (m, n_knots)
        self.n_knots = n_knots
        if field_noise:
            x, w = np.polynomial.hermite.hermgauss(int(nodes))
            self.gh_x, self.gh_w = math.sqrt(2.0) * x, w / math.sqrt(math.pi)
        else:
            self.gh_x, self.gh_w = np.zeros(1), np.ones(1)
        self._make_blocks()
        self._knots_all = np.log(self.t_lo)[:, None] + self.rel_knots[None, :]
        # not-a-knot cubic spline of ln rate in ln T (as TabulatedRate): coefficients of the
        # unit vectors, so that any table's coefficients are M @ values
        self._spline_matrix = CubicSpline(self.rel_knots, np.eye(n_knots)).c   # (4, n-1, n)
        # the same as a (n, 4 (n-1)) matrix: values (rows) @ it = coefficients (power, interval)
        self._spline_rows = np.ascontiguousarray(self._spline_matrix.reshape(-1, n_knots).T)

    def _make_blocks(self):
        """The prepared thermal averages, one rows block per kind; rows ordered (curve,
        knot, node). Noise nodes only matter for curves given by field, but the layout is
        uniform for simplicity."""
        n_knots, nh = self.n_knots, self.gh_x.size
        self.blocks = {}
        for kind, sel in (("l3", ~self.dimers & ~self.explicit), ("beta", self.dimers), ("kinetics", self.explicit)):
            idx = np.flatnonzero(sel)
            if idx.size == 0:
                continue
            a = np.repeat(self.a_nominal[idx], n_knots * nh)
            temps = np.repeat(self.grid[idx].ravel(), nh)
            if kind == "kinetics":
                depth = np.repeat(self.depth[idx], n_knots * nh)
                block = _KineticsBlock(a, temps, depth, self.species, self.model, rtol=self.rtol)
            else:
                block = RateBlock(kind, a, temps, self.species, self.model, rtol=self.rtol)
            self.blocks[kind] = (idx, block)

    def _coords_of_fit(self, f):
        x = np.zeros(self.k)
        x[0] = math.log(f.params["n0"])
        x[1] = math.log(f.params["n_atoms0"]) if f.kind == "beta" else 0.0
        x[2] = math.log(f.params["t0_nK"])
        x[3] = f.params["gamma"] * f.curve.t[-1]
        return x

    def _jacobian_of_fits(self, fits):
        # the per-curve fits use the same nuisance coordinates and residual order, plus the
        # loss coefficient in column 0: their Jacobians seed the chord iteration
        jac = np.zeros((self.n_curves, self.res_index.shape[1], self.k))
        for j, f in enumerate(fits):
            cols = np.flatnonzero(self.active[j])
            if f.jacobian.shape[1] - 1 < cols.size:      # gamma held fixed: no gamma column
                cols = cols[:f.jacobian.shape[1] - 1]
            n = f.jacobian.shape[0]
            jac[j, :n][:, cols] = f.jacobian[:, 1:1 + cols.size]
        return jac

    def _set_reference(self, x_ref, jac=None):
        self.x_ref = np.array(x_ref, dtype=float)
        self.jac_ready = jac is not None
        if jac is None:
            return
        # pseudo-inverse per curve restricted to the active coordinates: P_j = (J^T J)^-1 J^T
        self.jac = jac
        # P_j = (J^T J)^-1 J^T, and the same with Gamma held fixed (for steps that would
        # take Gamma below its bound 0, where the model is flat in Gamma: projected step)
        width = self.res_index.shape[1]
        self.pinv = np.zeros((self.n_curves, self.k, width))
        self.pinv_fixed_gamma = np.zeros((self.n_curves, self.k, width))
        for j in range(self.n_curves):
            for target, act in ((self.pinv, self.active[j]),
                                (self.pinv_fixed_gamma, self.active[j] & (np.arange(self.k) != 3))):
                target[j][act] = np.linalg.pinv(jac[j][:, act])

    def set_eta_min(self, eta_min):
        """Make the prepared thermal averages resolve every eta >= ``eta_min`` (the lower
        edge of the eta priors; default 0.005)."""
        for _, block in self.blocks.values():
            block.eta_min = eta_min

    # -- evaluation -----------------------------------------------------------------------
    def scattering_lengths(self, values):
        """Scattering length of every curve (a0) under the resonance systematics in ``values``."""
        # the nominal array itself (prepared averages reused) only where no curve of the
        # whole campaign moves: a curve group (:meth:`split`) then takes the campaign's way
        if not self._campaign_a[2].any() or not any(n in values for n in RESONANCE_NAMES):
            return self.a_nominal
        r = self.resonance
        b0, width, a_bg = (values.get(n, getattr(r, n)) for n in RESONANCE_NAMES)
        a = self.a_nominal.copy()
        a[self.by_field] = resonance_scattering_length(self.fields[self.by_field], b0, width, a_bg)
        return a

    def tables(self, efimov, values):
        """Per-curve rate tables (cm^6/s or cm^3/s, on measured numbers; TabulatedKinetics for
        the curves with explicit dimers) or None if invalid."""
        parts = self._spline_coefficients(efimov, values)
        if parts is None:
            return None
        coefs, kinetics = parts
        out = [_FastTable(self._knots_all[j], coefs[j], self.grid[j], None) for j in range(self.n_curves)]
        if kinetics is not None:
            for i, j in enumerate(self.blocks["kinetics"][0]):
                out[j] = _FastKinetics(self._knots_all[j], kinetics[i], self.grid[j])
        return out

    def _packed(self, coefs, knots=None):
        """Spline coefficients (c m, 4, n_knots - 1) of c sets of effective rates, packed for
        the decay batch without one table object per curve; ``knots`` (c m, n_knots) in
        ln T, default every curve's own."""
        count = coefs.shape[0]
        if count not in self._packing:
            self._packing[count] = (np.tile(self._knots_all.ravel(), count // self.n_curves),
                                    np.arange(count + 1, dtype=np.int64) * self.n_knots,
                                    np.arange(count + 1, dtype=np.int64) * (self.n_knots - 1))
        tiled, knot_offsets, coef_offsets = self._packing[count]
        knots = tiled if knots is None else np.ascontiguousarray(knots).ravel()
        return PackedTables(knots, np.ascontiguousarray(coefs.transpose(1, 0, 2)).reshape(4, -1), knot_offsets,
                            coef_offsets)

    def _spline_coefficients(self, efimov, values):
        """(coefficients (m, 4, n_knots - 1) of ln rate per curve, kinetics coefficients of
        the explicit-dimer curves or None), or None if invalid."""
        a = self.scattering_lengths(values)
        if np.any(np.sign(a) != self.signs):
            return None            # a resonance shift moved a curve across the pole
        s_n = values.get("density_scale", 1.0)
        sigma_b = values.get("sigma_B", 0.0)
        nh = self.gh_x.size
        logv = np.empty((self.n_curves, self.n_knots))
        kinetics = None
        for kind, (idx, block) in self.blocks.items():
            a_block = None
            if nh > 1 or a is not self.a_nominal:
                a_rows = np.repeat(a[idx], self.n_knots * nh).reshape(idx.size, self.n_knots, nh)
                if nh > 1 and sigma_b > 0:
                    fld = self.by_field[idx]
                    b = self.fields[idx][fld][:, None] + sigma_b * self.gh_x[None, :]
                    r = self.resonance
                    b0, width, a_bg = (values.get(n, getattr(r, n)) for n in RESONANCE_NAMES)
                    a_nodes = resonance_scattering_length(b, b0, width, a_bg)
                    if np.any(np.sign(a_nodes) != self.signs[idx][fld][:, None]):
                        return None
                    a_rows[fld] = a_nodes[:, None, :]
                a_block = a_rows.ravel()
            if kind == "kinetics":
                kinetics = self._kinetics_coefficients(block.predict(efimov, a=a_block), idx.size, s_n)
                if kinetics is None:
                    return None
                continue
            pred = self._over_nodes(block.predict(efimov, a=a_block).reshape(idx.size, self.n_knots, nh))
            if not np.all(np.isfinite(pred)) or np.any(pred <= 0):
                return None
            power = 2.0 if kind == "l3" else 1.0
            logv[idx] = np.log(pred) - power * math.log(s_n)
        # spline coefficients are linear in the tabulated values: one matrix product
        return self._spline_of(logv), kinetics                                        # (m, 4, n_knots - 1)

    def _over_nodes(self, v):
        """The field-noise average: Gauss-Hermite sum over the last axis. Summed row by row
        in C order, so that a row's bits do not depend on the rows beside it (a matrix-vector
        product's do: its kernels block the rows)."""
        return np.sum(np.ascontiguousarray(v) * self.gh_w, axis=-1)

    def _spline_of(self, logv):
        """Coefficients (rows, 4, n_knots - 1) of the not-a-knot splines through rows of
        values (..., n_knots) on the T-table knots: linear in the values, one product."""
        rows = np.ascontiguousarray(logv.reshape(-1, self.n_knots))
        return _rows_times(rows, self._spline_rows).reshape(-1, 4, self.n_knots - 1)

    def _kinetics_coefficients(self, parts, n, s_n):
        """Spline coefficients (n, 4, 6 (n_knots - 1)) of the kinetics tables of ``n`` curves
        from the six coefficients on the (curve, knot, node) rows, or None if invalid.
        On measured numbers the three-body parts act as L3 / s^2, beta as beta / s."""
        avg = self._over_nodes(np.reshape(parts, (6, n, self.n_knots, self.gh_x.size)))    # (6, n, knots)
        avg /= (s_n ** np.array([2.0, 2.0, 2.0, 2.0, 1.0, 1.0]))[:, None, None]
        if not np.all(np.isfinite(avg)) or np.any(avg[1] <= 0):
            return None
        # the spline coefficients are linear in the tabulated columns: one product for all,
        # reordered to (curve, power, column block, interval)
        coefs = self._spline_of(kinetics_columns(avg)).reshape(6, n, 4, -1)
        return np.ascontiguousarray(coefs.transpose(1, 2, 0, 3)).reshape(n, 4, -1)

    def _batch_for(self, copies):
        """The decay batch of ``copies`` repetitions of the campaign (one per walker)."""
        if copies not in self._batches:
            self._batches[copies] = self.batch.repeated(copies)
        return self._batches[copies]

    def _solve(self, x, tables, s_t):
        """Integrate ``c`` copies of every curve: x (c m, 4), tables (c m, or PackedTables),
        s_t (c,)."""
        copies = x.shape[0] // self.n_curves
        per_curve = np.repeat(np.asarray(s_t, dtype=float), self.n_curves)
        n0 = np.exp(x[:, 0])
        t0_true = np.exp(x[:, 2]) / per_curve
        gamma = np.maximum(x[:, 3], 0.0) / np.tile(self.t_max, copies)
        batch = self._batch_for(copies)
        if not self.dimers.any():
            return batch(n0, t0_true, tables, gamma)
        # the one-body rate: of the dimers in a mixture, of atoms and trapped dimers alike
        # with the explicit kinetics (the batch's default), of the atoms otherwise
        d, explicit = np.tile(self.dimers, copies), np.tile(self.explicit, copies)
        atoms0 = np.where(d, np.exp(x[:, 1]), n0)
        l3 = [0.0 if d[j] else tab for j, tab in enumerate(tables)]
        beta = [tab if d[j] else 0.0 for j, tab in enumerate(tables)]
        return batch(atoms0, t0_true, l3, np.where(d, 0.0, gamma), n_dimers0=np.where(d, n0, 0.0),
                     beta=beta, gamma_dimer=np.where(d | explicit, gamma, 0.0))

    def residuals(self, x, tables, s_t):
        """Normalised residuals of all curves for nuisance coordinates ``x`` (m, 4)."""
        r, res = self._residuals_many(x[None], tables, np.array([s_t], dtype=float))
        return r[0], res

    def _residuals_many(self, x, tables, s_t):
        """Residuals (c, n_res + 1) of ``c`` parameter sets at once: x (c, m, 4), tables
        (c m; set after set), s_t (c,); the last column is the zero the padding points at."""
        copies = x.shape[0]
        res = self._solve(x.reshape(-1, self.k), tables, s_t)
        counted = res.counted.reshape(copies, -1)
        main = (np.where(self._point_is_dimer, res.dimers.reshape(copies, -1), counted)
                if self.dimers.any() else counted)
        parts = [(main - self.main) / self.main_err,
                 (s_t[:, None] * res.temperature.reshape(copies, -1)[:, self.t_mask] - self.t_data) / self.t_err,
                 (res.atoms.reshape(copies, -1)[:, self.p_mask] - self.p_data) / self.p_err,
                 (np.exp(x[:, self.t0_curves, 2]) - self.t0_data) / self.t0_err,
                 (np.exp(x[:, self.na_curves, 1]) - self.na_data) / self.na_err]
        return np.concatenate(parts + [np.zeros((copies, 1))], axis=1), res

    def _per_curve(self, r):
        """Residuals (c, n_res + 1) laid out per curve: (c, m, width), C-ordered. The fancy
        index alone returns another memory order, in which einsum sums in an order that
        depends on c and m: a walker's or a curve's sums would change with the set or group
        it comes in."""
        return np.ascontiguousarray(r[:, self.res_index])

    def _chord_step(self, x, r):
        """One chord Gauss-Newton step of every curve: x (m, 4) or (c, m, 4), r (n_res + 1,)
        or (c, n_res + 1)."""
        if x.ndim == 2:
            return self._chord_step(x[None], r[None])[0]
        per_curve = self._per_curve(r)
        new = x - np.einsum("jkn,cjn->cjk", self.pinv, per_curve)
        low = new[..., 3] < 0.0
        if low.any():
            # Gamma would turn negative: put it on its bound and re-solve the others
            j = np.nonzero(low)[1]
            fixed = x[low].copy()
            fixed[:, 3] = 0.0
            # residuals at Gamma = 0, linearised: r + J_gamma (0 - gamma)
            r_fixed = per_curve[low] - self.jac[j][:, :, 3] * x[low][:, 3][:, None]
            fixed -= np.einsum("jkn,jn->jk", self.pinv_fixed_gamma[j], r_fixed)
            fixed[:, 3] = 0.0
            new[low] = fixed
        return new

    def given_values(self, efimov, values):
        """log L for the Efimov set and a dict of every parameter value (nuisances)."""
        return self(efimov, values)

    #: Posterior.batch hands whole walker sets (:meth:`__call__`).
    vectorized = True

    def __call__(self, efimov, values):
        """log L of one parameter set (floats), or of every walker of a walker-array set
        (``Efimov.trusted`` with arrays, values of W walkers): an array of W. The curves of
        all walkers are integrated in one batched call."""
        out = self.log_likelihood_of(self.curve_chi2(efimov, values))
        return out if efimov.n_walkers else float(out)

    def curve_chi2(self, efimov, values):
        """chi2 of every curve after the chord steps: shape (m,) for one parameter set
        (floats), (W, m) for a walker-array set; inf where the parameters are outside the
        support. :meth:`log_likelihood_of` turns it into log L."""
        if not efimov.n_walkers:
            if self._rescalable:
                # a set of one: the same tables, knots and bits as inside a walker set
                one = Efimov.trusted(**{k: np.array([v]) for k, v in vars(efimov).items() if v is not None})
                return self.curve_chi2(one, values)[0]
            return self._curve_chi2s([efimov], [values])[0]
        count = efimov.n_walkers
        per_walker = [{k: (float(np.asarray(v).reshape(-1)[w]) if np.ndim(v) else v) for k, v in values.items()}
                      for w in range(count)]
        return self._curve_chi2s(efimov.walkers(), per_walker, walker_set=(efimov, values))

    @staticmethod
    def log_likelihood_of(chi2):
        """log L = -chi2 / 2 summed over curves (last axis) from :meth:`curve_chi2`, or from
        the curve groups of :meth:`split` side by side; -inf outside the support."""
        total = -0.5 * np.sum(chi2, axis=-1)
        return np.where(np.isfinite(total), total, -math.inf)

    def split(self, groups):
        """The likelihood cut into ``groups`` (at most the number of curves) likelihoods of
        consecutive curves, for two-level parallelism: given the same parameters, their
        :meth:`curve_chi2` side by side are this one's, bit for bit. They keep this one's
        temperature knots, reference nuisances and frozen Jacobians (refresh before
        splitting), and decide as this one does, from the whole campaign, which walkers
        reuse the prepared averages under resonance shifts."""
        if not (isinstance(groups, (int, np.integer)) and 1 <= groups <= self.n_curves):
            raise LossfitValueError("groups", f"must be an integer in 1..{self.n_curves}, got {groups!r}")
        return [self._curve_group(idx) for idx in np.array_split(np.arange(self.n_curves), groups)]

    #: per-curve arrays (first axis: curve) that a curve group takes its rows of
    _PER_CURVE = ("dimers", "recombination_heating", "t_max", "fields", "by_field", "a_nominal", "signs",
                  "explicit", "depth", "t_lo", "grid", "_knots_all", "x_ref", "jac", "pinv", "pinv_fixed_gamma",
                  "_campaign_index")

    def _curve_group(self, idx):
        group = copy.copy(self)
        group.curves = [self.curves[j] for j in idx]
        group.n_curves = idx.size
        group.n_points = sum(len(c) for c in group.curves)
        for name in self._PER_CURVE:
            if name in self.__dict__:            # no Jacobians before a reference is set
                setattr(group, name, getattr(self, name)[idx])
        group.trap_depths = [self.trap_depths[j] for j in idx]
        # the per-kind spectra for figures are the campaign's: a group carries none
        del group.two_stage_spectra, group.spectra
        group.batch = self.batch.select(idx)
        group.offsets = group.batch.offsets
        group._batches, group._packing = {1: group.batch}, {}
        # the padded width of the residual layout stays this one's (the same sums per curve)
        group._setup_data(width=self.res_index.shape[1])
        group._make_blocks()
        for kind, (_, block) in group.blocks.items():
            block.eta_min = self.blocks[kind][1].eta_min
        return group

    def _spline_coefficients_of_set(self, efimov, values):
        """Coefficients (c m, 4, n_knots - 1) of the c valid walkers of a walker-array set
        and their indices, for effective-rate curves at their nominal scattering lengths."""
        count = efimov.n_walkers
        ln_scale = np.log(np.broadcast_to(np.asarray(values.get("density_scale", 1.0), dtype=float), (count,)))
        logv = np.empty((count, self.n_curves, self.n_knots))
        valid = np.ones(count, dtype=bool)
        for kind, (idx, block) in self.blocks.items():
            pred = block.predict(efimov).reshape(count, idx.size, self.n_knots)
            valid &= np.all(np.isfinite(pred) & (pred > 0), axis=(1, 2))
            with np.errstate(divide="ignore", invalid="ignore"):
                logv[:, idx] = np.log(pred) - (2.0 if kind == "l3" else 1.0) * ln_scale[:, None, None]
        ok = np.flatnonzero(valid)
        coefs = self._spline_of(logv[ok])
        return coefs, list(ok)

    def _rescaled_coefficients_of_set(self, efimov, values):
        """Tables of a walker-array set whose resonance parameters (or field noise) move the
        scattering lengths, from the plans prepared at the nominal ones: (coefficients
        (c m, 4, n_knots - 1), knots (c m, n_knots), the c walkers served, the walkers left
        to rebuild their plans).

        A curve whose a moves to rho a keeps its prepared averages, which hold at
        (rho a, T / rho^2) (:meth:`lossfit.universal.averages.ThermalPlan.evaluate_scaled`):
        the same values on knots shifted by -2 ln rho in ln T, so that the spline
        coefficients (uniform spacing) are unchanged. With field noise every node has its
        own rho: the table's knots move by the nodes' mean shift and each node's values
        are read off its own spline at the offset of its shift from that mean, then
        averaged over the nodes (docs/global-fit.md, "Resonance shifts"). Walkers with
        2 |ln rho| beyond ``shift_margin`` for some curve or node (whose own table would
        no longer cover the curve's range), or with plans that cannot scale, are left to
        the rebuilding path; walkers with a curve across the pole are invalid (as there)."""
        count, m, n, nodes = efimov.n_walkers, self.n_curves, self.n_knots, self.gh_x.size
        r = self.resonance
        b0, width, a_bg = (np.broadcast_to(np.asarray(values.get(k, getattr(r, k)), dtype=float),
                                           (count,))[:, None, None] for k in RESONANCE_NAMES)
        sigma_b = np.broadcast_to(np.asarray(values.get("sigma_B", 0.0), dtype=float), (count,))[:, None, None]
        # decided over the whole campaign (a curve group of :meth:`split` decides as it does)
        a_nominal, fields, by_field = self._campaign_a
        a = np.broadcast_to(a_nominal[None, :, None], (count, a_nominal.size, nodes)).copy()
        a[:, by_field] = resonance_scattering_length(fields[by_field][None, :, None] + sigma_b * self.gh_x,
                                                     b0, width, a_bg)
        with np.errstate(invalid="ignore", divide="ignore"):
            ln_rho = np.log(a / a_nominal[None, :, None])                             # (c, campaign, nodes)
        valid = np.all(np.sign(a) == np.sign(a_nominal)[None, :, None], axis=(1, 2))
        # every node's own table still covers the curve's range (the margin is padding)
        near = valid & np.all(2.0 * np.abs(ln_rho) <= self.shift_margin, axis=(1, 2))
        if not all(block.rtol is None and hasattr(block.plan, "evaluate_scaled") for _, block in self.blocks.values()):
            near[:] = False
        # only the walkers served evaluate the prepared plans
        served = np.flatnonzero(near)
        if served.size == 0:
            return np.empty((0, 4, n - 1)), np.empty((0, n)), [], list(np.flatnonzero(valid))
        ln_rho = ln_rho[served][:, self._campaign_index]                                # (s, m, nodes)
        shift = 2.0 * self._over_nodes(ln_rho)                                            # (s, m)
        offset = 2.0 * ln_rho - shift[..., None]
        subset = Efimov.trusted(**{k: (v[served] if isinstance(v, np.ndarray) and v.ndim else v)
                                   for k, v in vars(efimov).items()})
        ln_scale = np.log(np.broadcast_to(np.asarray(values.get("density_scale", 1.0), dtype=float), (count,)))
        logv = np.empty((served.size, m, n))
        finite = np.ones(served.size, dtype=bool)
        for kind, (idx, block) in self.blocks.items():
            rows = np.broadcast_to(ln_rho[:, idx, None, :], (served.size, idx.size, n, nodes))  # (curve, knot, node)
            pred = block.plan.evaluate_scaled(subset, rows.reshape(served.size, -1)).reshape(rows.shape)
            finite &= np.all(np.isfinite(pred) & (pred > 0), axis=(1, 2, 3))
            with np.errstate(divide="ignore", invalid="ignore"):
                if nodes > 1:
                    moved = self._at_offset(np.log(pred).transpose(0, 1, 3, 2), offset[:, idx])
                    pred = np.exp(moved).transpose(0, 1, 3, 2)
                power = 2.0 if kind == "l3" else 1.0
                logv[:, idx] = np.log(self._over_nodes(pred)) - power * ln_scale[served][:, None, None]
        # a served walker with an invalid rate goes the rebuilding way too (which refuses it)
        near[served[~finite]] = False
        coefs = self._spline_of(logv[finite])
        knots = self._knots_all[None] - shift[finite][:, :, None]
        return coefs, knots.reshape(-1, n), list(served[finite]), list(np.flatnonzero(valid & ~near))

    def _at_offset(self, logv, offset):
        """Each row's not-a-knot cubic spline on the T-table knots (..., n_knots), read at
        every knot moved by ``offset`` (...,) in ln T (the end intervals' cubics beyond
        the ends)."""
        n, h = self.n_knots, self.rel_knots[1]
        coefs = self._spline_of(logv).reshape(logv.shape[:-1] + (4, n - 1))
        where = self.rel_knots + offset[..., None]
        interval = np.clip(np.floor(where / h).astype(np.int64), 0, n - 2)
        dx = where - self.rel_knots[interval]
        c = np.take_along_axis(coefs, interval[..., None, :], axis=-1)
        return ((c[..., 0, :] * dx + c[..., 1, :]) * dx + c[..., 2, :]) * dx + c[..., 3, :]

    def _curve_chi2s(self, efimovs, values, walker_set=None):
        out = np.full((len(efimovs), self.n_curves), math.inf)
        packed = self._packed_path
        tables, knots, s_t, ok = [], [], [], []
        slow = range(len(efimovs))
        moved = self.gh_x.size > 1 or any(n in values[0] for n in RESONANCE_NAMES)
        if walker_set is not None and packed and not moved:
            # nothing moves the scattering lengths: every walker's tables in one plan call
            coefs, ok = self._spline_coefficients_of_set(*walker_set)
            slow = []
            tables.append(coefs)
        elif walker_set is not None and moved and self._rescalable:
            coefs, shifted, ok, slow = self._rescaled_coefficients_of_set(*walker_set)
            if packed:
                tables.append(coefs)
                knots.append(shifted)
            else:
                # dimer curves too: table objects on the shifted knots (exp(knots): their T)
                tables += [_FastTable(k, c, np.exp(k), None) for k, c in zip(shifted, coefs)]
        for w in slow:
            t = self._spline_coefficients(efimovs[w], values[w]) if packed else self.tables(efimovs[w], values[w])
            if t is not None:
                if packed:
                    tables.append(t[0])
                    knots.append(self._knots_all)
                else:
                    tables += t
                ok.append(w)
        if not ok:
            return out
        s_t = [values[w].get("temperature_scale", 1.0) for w in ok]
        if packed:
            tables = self._packed(np.concatenate(tables),
                                  np.concatenate([k.reshape(-1, self.n_knots) for k in knots]) if knots else None)
        try:
            out[ok] = self._chi2_many(tables, np.array(s_t, dtype=float))
        except LossfitValueError:
            if len(ok) == 1:
                return out     # T(t) left the table or the integrator failed: outside support
            # one walker's curve failed: the others keep their values (each set alone)
            for w in ok:
                out[w] = self.curve_chi2(efimovs[w], values[w])
        return out

    def _chi2_many(self, tables, s_t):
        """chi2 of every curve after the chord steps for c parameter sets (tables of c m
        curves, s_t (c,)): shape (c, m)."""
        copies = s_t.size
        x = np.broadcast_to(self.x_ref, (copies,) + self.x_ref.shape)
        r, _ = self._residuals_many(x, tables, s_t)
        if self.inner_steps == 0:
            per_curve = self._per_curve(r) + np.einsum("jnk,cjk->cjn", self.jac, self._chord_step(x, r) - x)
        else:
            for _ in range(self.inner_steps):
                x = self._chord_step(x, r)
                r, _ = self._residuals_many(x, tables, s_t)
            per_curve = self._per_curve(r)
        return np.einsum("cjn,cjn->cj", per_curve, per_curve)

    def fit_check(self, space, kept_theta, median_values):
        """(checks dict, messages) of a finished fit: chi^2 of the curves (and the initial-value
        constraints) at the posterior medians with the nuisances re-solved there, per degree
        of freedom (residuals minus nuisances minus sampled parameters), and the temperatures'
        plausibility. No posterior-predictive p here: replicating raw curves would need the
        nuisances of every draw (:mod:`lossfit.inference.fit_checks`)."""
        chi2 = -2.0 * self.given_values(space.efimov(median_values), median_values)
        checks = chi2_summary(chi2, self.n_res - int(self.active.sum()) - space.ndim)
        messages = [m for m in (temperature_plausibility(f"curve {j} ({c.label})", c.temperature)
                                for j, c in enumerate(self.curves)) if m]
        poor = poor_fit_message(checks)
        return checks, messages + ([poor] if poor else [])

    # -- reference point ------------------------------------------------------------------
    def jacobian(self, x, tables, s_t, h=1e-3):
        """Finite-difference Jacobians of every curve's residuals, shape (m, width, 4).

        One coordinate of all curves is perturbed per batched integration (curves are
        independent), so the cost is 5 batch calls whatever the number of curves.
        """
        r0, _ = self.residuals(x, tables, s_t)
        jac = np.zeros((self.n_curves, self.res_index.shape[1], self.k))
        for i in range(self.k):
            if not self.active[:, i].any():
                continue
            xp = x.copy()
            xp[:, i] += h
            rp, _ = self.residuals(xp, tables, s_t)
            jac[:, :, i] = (rp - r0)[self.res_index] / h
        jac[self.res_index == self.n_res] = 0.0
        return jac

    def _solve_inner(self, efimov, values):
        """Exact per-curve nuisances at (efimov, values): (x, chi2_min, tables, s_t).

        One :func:`scipy.optimize.least_squares` problem over all curves' nuisances with
        the block-diagonal Jacobian sparsity declared, so that its finite differences
        perturb all curves at once (Curtis, Powell & Reid, IMA J. Appl. Math. 13, 117
        (1974)); Gamma is bounded below by 0.
        """
        tables = self.tables(efimov, values)
        if tables is None:
            raise LossfitValueError("values", "zero likelihood at these parameters")
        s_t = values.get("temperature_scale", 1.0)
        act = self.active
        base = self.x_ref.copy()

        def fun(z):
            x = base.copy()
            x[act] = z
            try:
                return self.residuals(x, tables, s_t)[0][:-1]
            except LossfitValueError:
                return np.full(self.n_res, 1e4)      # trial step outside the table: go back

        sparsity = nuisance_sparsity(self.res_index, self.n_res, act)
        lower = np.where(np.nonzero(act)[1] == 3, 0.0, -np.inf)
        z0 = np.maximum(base[act], lower)
        sol = least_squares(fun, z0, jac_sparsity=sparsity, bounds=(lower, np.inf), method="trf",
                            xtol=1e-10, ftol=1e-10, gtol=1e-10, max_nfev=200)
        x = base.copy()
        x[act] = sol.x
        return x, 2.0 * float(sol.cost), tables, s_t

    def profile_chi2(self, efimov, values):
        """Exact minimum over every curve's nuisances of chi2 (what the chord step approximates)."""
        return self._solve_inner(efimov, values)[1]

    def refresh(self, efimov, values):
        """Solve every curve's nuisances exactly at (efimov, values) and make that the
        reference point, with fresh Jacobians frozen there."""
        try:
            x, _, tables, s_t = self._solve_inner(efimov, values)
        except LossfitValueError:
            raise LossfitValueError("initial", "the reference point has zero likelihood") from None
        self._set_reference(x, self.jacobian(x, tables, s_t))

    def nuisances(self, efimov, values):
        """Per-curve nuisances at (efimov, values) after the chord steps: list of dicts
        with ``n0``, ``t0_nK`` (measured scale), ``gamma`` (1/s), ``n_atoms0`` (dimers),
        ``table`` (the rate table on true temperatures, measured-number units; a
        TabulatedKinetics for curves with explicit dimers) and ``counts_dimers``."""
        tables = self.tables(efimov, values)
        if tables is None:
            raise LossfitValueError("values", "zero likelihood at these parameters")
        s_t = values.get("temperature_scale", 1.0)
        x = self.x_ref
        for _ in range(max(self.inner_steps, 1)):
            r, _ = self.residuals(x, tables, s_t)
            x = self._chord_step(x, r)
        out = []
        for j in range(self.n_curves):
            d = {"n0": math.exp(x[j, 0]), "t0_nK": math.exp(x[j, 2]),
                 "gamma": max(x[j, 3], 0.0) / self.t_max[j], "table": tables[j],
                 "temperature_scale": s_t, "counts_dimers": self.curves[j].counts_dimers}
            if self.dimers[j]:
                d["n_atoms0"] = math.exp(x[j, 1])
            out.append(d)
        return out


def nuisance_sparsity(res_index, n_res, active):
    """Jacobian sparsity of the residuals with respect to the active per-curve nuisances.

    Residual i depends on nuisance coordinate c only when both belong to the same curve,
    so the pattern is block diagonal. It is built as a ``scipy.sparse`` matrix from the
    residual rows of each curve and never formed densely: at 500 curves a dense pattern
    (1.5 10^4 residuals x 1.5 10^3 coordinates, 180 MB) made least_squares' column
    grouping and finite differences dominate the refinement (measured in docs/cluster.md).

    Parameters
    ----------
    res_index : ndarray of int, shape (m, width)
        Residual rows of each of the m curves, padded with ``n_res``.
    n_res : int
        Number of residuals.
    active : ndarray of bool, shape (m, k)
        Active nuisance coordinates of each curve; the columns follow ``x[active]``
        (row-major: curve by curve).

    Returns
    -------
    scipy.sparse.csr_matrix, shape (n_res, active.sum())
        1 where residual i and coordinate c belong to the same curve, else 0.
    """
    curve_of_coord = np.nonzero(active)[0]
    rows = res_index[curve_of_coord]                   # (coordinates, width) rows each acts on
    cols = np.broadcast_to(np.arange(curve_of_coord.size)[:, None], rows.shape)
    keep = rows < n_res                                # drop the padding
    return csr_matrix((np.ones(int(keep.sum()), dtype=np.int8), (rows[keep], cols[keep])),
                      shape=(n_res, curve_of_coord.size))


def _depth_record(given, used):
    """How a curve's trap depth entered the fit (nK)."""
    if np.isnan(given):
        return f"assumed {DEFAULT_DEPTH_OVER_T:g} k_B T0 = {used:.4g} nK (none given)"
    return f"{used:.4g} nK"
