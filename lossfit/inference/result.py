"""The result of a fit: posterior samples, summaries, diagnostics and derived ratios."""

__all__ = ["FitResult", "FEATURES", "RANGE_REASONS", "validity_findings"]

import html
import json
import math
import os
import warnings

import numpy as np

from .._io import atomic_path
from ..constants import KAPPA_A_MINUS, KAPPA_A_PLUS, UNIVERSAL_A_STAR_OVER_A_MINUS, VDW_A_MINUS_OVER_RVDW
from ..efimov import Efimov
from ..errors import ConvergenceWarning, FitCheckWarning, LossfitValueError, ValidityWarning, user_stacklevel
from ..mixture import HeteronuclearSystem
from ..rates import validity_flags
from ..universal.mixture_model import resolve_model
from .diagnostics import MIN_STEPS_PER_TAU, autocorrelation_times, split_rhat
from .fit_checks import prior_bound_pileup
from .likelihood import SpectrumLikelihood
from .parameters import UNITS

#: Reference values printed beside the derived ratios.
REFERENCES = {
    "a_star/a_minus": (UNIVERSAL_A_STAR_OVER_A_MINUS,
                       "zero-range, next branch (Braaten & Hammer 2006; Gogolin, Mora & Egger 2008)"),
    "a_plus/a_minus": (KAPPA_A_PLUS / KAPPA_A_MINUS,
                       "zero-range, same branch (kappa* a_+ = 0.316472, the project's solver)"),
    "a_minus/r_vdw": (VDW_A_MINUS_OVER_RVDW,
                      "van der Waals universality (Wang, D'Incao, Esry & Greene 2012)"),
    "eta_star/eta_minus": (1.0, "one eta for every feature (zero range with one three-body inelasticity)"),
    "eta_plus/eta_minus": (1.0, "one eta for every feature (zero range with one three-body inelasticity)"),
}
#: Beside the ratios of two identical bosons and a third atom (no reference value: None).
MIXTURE_REFERENCES = {
    "a_minus/r_vdw": (None, "B-X van der Waals length; lossfit holds no reference value for this system"),
    "a_minus(1)": (None, "the next a < 0 resonance, scaling x a_- (discrete scale invariance)"),
    "a_minus(2)": (None, "the one after, scaling^2 x a_-"),
    "a_star(1)": (None, "the next atom-dimer resonance, scaling x a* (discrete scale invariance)"),
    "a_star/a_minus": (None, "zero range: kappa* a*/(kappa* a_-) of the mass ratio's tables, times a power of "
                             "the scaling factor that depends on which resonances a* and a_- label"),
}


#: The Efimov features, lengths in a0: the recombination resonance a_-, the atom-dimer
#: resonance a* and the recombination minimum a_+.
FEATURES = ("a_minus", "a_star", "a_plus")

#: Flags of :func:`lossfit.rates.validity_flags` that put a point outside the range in
#: which the zero-range theory holds, with the text results give as the reason. The
#: third flag, ``weak_dimer``, is about how the loss is interpreted, not about the
#: theory's range (docs/conventions.md).
RANGE_REASONS = (("short_a", "|a| < 5 r_vdW"), ("hot", "k_B T > 0.1 E_vdW"))


def _digits(row):
    # Enough significant digits that the 68 % interval is resolved (a field of 550.0 G
    # known to 0.01 G needs six), at least four.
    width = abs(row["hi68"] - row["lo68"])
    scale = max(abs(row["median"]), abs(row["lo95"]), abs(row["hi95"]))
    if width == 0 or scale == 0 or not math.isfinite(width / scale):
        return 4
    return int(min(10, max(4, math.ceil(math.log10(scale / width)) + 2)))


def _quantiles(x):
    q = np.percentile(x, [2.5, 16.0, 50.0, 84.0, 97.5])
    return {"median": q[2], "lo68": q[1], "hi68": q[3], "lo95": q[0], "hi95": q[4],
            "mean": float(np.mean(x)), "std": float(np.std(x))}


class FitResult:
    """Posterior of a lossfit fit.

    Attributes
    ----------
    names : list of str
        Free parameters in sampling order.
    samples : dict name -> ndarray
        Flattened posterior samples after burn-in, in physical units (a in a0).
    derived : dict name -> ndarray
        Samples of a*/a_-, a_+/a_-, a_-/r_vdW where the fit determines them.
    chain : ndarray, shape (steps, walkers, ndim)
        Full chain in sampling coordinates theta = ln|value|.
    log_prob : ndarray, shape (steps, walkers)
    burn, thin : int
    tau, ess, rhat : dict name -> float
        Integrated autocorrelation time (steps), effective sample size, split-R̂.
    acceptance_fraction : float
        Mean over walkers.
    warnings : list of str
        Convergence problems and validity notes (convergence problems are also issued
        as ConvergenceWarning).
    outside_validity : list of dict
        Fitted data points outside the zero-range theory's range or with a note on their
        loss interpretation (:func:`validity_findings`): spectrum index, point index, a
        (a0), T (nK), reasons ("|a| < 5 r_vdW", "k_B T > 0.1 E_vdW", and for L3 at a > 0
        with k_B T > E_b the loss channel the point was fitted with) and
        ``outside_range`` (True for the first two reasons).
    excluded : list of dict
        Data points left out of the likelihood by ``lf.fit(..., exclude=...)``: spectrum
        and point index in the data as given, its label and kind, a (a0), T (nK), value
        and error (cm^6/s or cm^3/s) and the reasons; empty when every point was fitted.
    loss_channels : list of dict
        Per spectrum: kind, the loss channel fitted (``"observed"``, ``"total"``, ...) and
        how the trap depth entered (given, or assumed 10 k_B T).
    fit_checks : dict
        ``chi2``, ``dof``, ``chi2_per_dof``, ``p_chi2`` at the posterior medians; spectrum
        fits add the posterior-predictive ``ppp`` and the standardized ``residuals`` per
        spectrum (:mod:`lossfit.inference.fit_checks`).
    check_warnings : list of str
        Failed fit checks (poor fit, posterior on a prior bound, implausible inputs),
        also in ``warnings`` and issued as FitCheckWarning.
    """

    def __init__(self, *, space, chain, log_prob, acceptance, burn, thin, likelihood, species,
                 model, settings):
        self.space = space
        self.names = list(space.names)
        self.chain = chain
        self.log_prob = log_prob
        self.burn = int(burn)
        self.thin = int(thin)
        self.likelihood = likelihood
        self.species = species
        self.model = model
        self.settings = dict(settings)
        self.acceptance_fraction = float(np.mean(acceptance))
        kept = chain[self.burn::self.thin]
        self._kept_theta = kept.reshape(-1, chain.shape[2])
        phys = space.physical(self._kept_theta)
        self.samples = {n: phys[:, i] for i, n in enumerate(self.names)}
        tau = autocorrelation_times(chain[self.burn:]) if kept.shape[0] > 1 else np.full(len(self.names), np.nan)
        rhat = split_rhat(chain[self.burn:])
        n_total = (chain.shape[0] - self.burn) * chain.shape[1]
        self.tau = dict(zip(self.names, map(float, tau)))
        self.ess = {n: float(n_total / t) if t > 0 else float("nan") for n, t in self.tau.items()}
        self.rhat = dict(zip(self.names, map(float, rhat)))
        self.warnings = []
        self.loss_channels = list(getattr(likelihood, "channels", []))
        self.outside_validity = validity_findings(getattr(likelihood, "spectra", []), species, self.loss_channels)
        # points the fit left out were chosen before the likelihood was built; it keeps the record
        self.excluded = list(getattr(likelihood, "excluded", []))
        validity = []
        if self.outside_validity:
            reasons = sorted({r for p in self.outside_validity for r in p["reasons"]})
            validity.append(f"{len(self.outside_validity)} data point(s) outside the zero-range validity "
                            f"range or its loss interpretation ({'; '.join(reasons)}); see outside_validity")
        steps_kept = chain.shape[0] - self.burn
        tau_max = float(np.nanmax(tau)) if np.isfinite(tau).any() else float("nan")
        if not math.isfinite(tau_max) or steps_kept < MIN_STEPS_PER_TAU * tau_max:
            self.warnings.append(f"chain too short: {steps_kept} steps after burn-in but "
                                 f"{MIN_STEPS_PER_TAU} x tau_max = {MIN_STEPS_PER_TAU * tau_max:.0f}; "
                                 "run longer before trusting intervals")
        bad_rhat = [n for n, r in self.rhat.items() if not (r < 1.05)]
        if bad_rhat:
            self.warnings.append(f"split-R-hat above 1.05 for {bad_rhat}")
        if not (0.15 <= self.acceptance_fraction <= 0.8):
            self.warnings.append(f"acceptance fraction {self.acceptance_fraction:.2f} outside 0.15-0.8")
        # each warning points at the user's call (lf.fit, a study, load_result), not here
        for w in self.warnings:
            warnings.warn(w, ConvergenceWarning, stacklevel=user_stacklevel())
        # validity findings are about the model and the data, not the chain
        for w in validity:
            warnings.warn(w, ValidityWarning, stacklevel=user_stacklevel())
        self.warnings = validity + self.warnings
        self.check_warnings = self._run_checks()
        for w in self.check_warnings:
            warnings.warn(w, FitCheckWarning, stacklevel=user_stacklevel())
        self.warnings += self.check_warnings
        self.derived = self._derived_samples()

    def _run_checks(self):
        self.fit_checks, messages = {}, []
        check = getattr(self.likelihood, "fit_check", None)      # a likelihood may offer none
        if check is not None:
            self.fit_checks, messages = check(self.space, self._kept_theta, self.median_values())
        return messages + prior_bound_pileup(self.space, self._kept_theta)

    def _fit_line(self):
        g = self.fit_checks
        if not g:
            return ""
        line = f"fit check: chi2/dof = {g['chi2_per_dof']:.3g} ({g['dof']} dof, p = {g['p_chi2']:.2g})"
        if "ppp" in g:
            line += f"; posterior-predictive p = {g['ppp']:.2f}"
        if g.get("residuals"):
            line += f"; largest |residual| {max(float(np.max(np.abs(r))) for r in g['residuals']):.2g} sigma"
        return line

    # ---- derived quantities -------------------------------------------------------
    def _values_per_sample(self):
        n = self._kept_theta.shape[0]
        vals = {k: np.full(n, v) for k, v in self.space.fixed.items()}
        vals.update(self.samples)
        return vals

    def _derived_samples(self):
        vals = self._values_per_sample()
        out = {}
        n = self._kept_theta.shape[0]
        if "a_minus" in vals:
            a_minus = vals["a_minus"]
            if self.space.tie == "universal":
                # the tie fixes these ratios exactly; report them for completeness
                out["a_star/a_minus"] = np.full(n, UNIVERSAL_A_STAR_OVER_A_MINUS)
                out["a_plus/a_minus"] = np.full(n, KAPPA_A_PLUS / KAPPA_A_MINUS)
            else:
                for name in ("a_star", "a_plus"):
                    if name in vals:
                        out[f"{name}/a_minus"] = vals[name] / a_minus
            out["a_minus/r_vdw"] = a_minus / self.species.r_vdw
            if isinstance(self.species, HeteronuclearSystem):
                # the resonances the same a_- and eta give within a few periods
                if self.species.a_bb:
                    # with a_bb the next resonances follow kappa* a_-(a_bb/a) (docs/heteronuclear-rates.md)
                    model = resolve_model(None, self.species)
                    out["a_minus(1)"] = model.a_minus_image(a_minus, 1)
                    out["a_minus(2)"] = model.a_minus_image(a_minus, 2)
                else:
                    out["a_minus(1)"] = a_minus * self.species.scaling
                    out["a_minus(2)"] = a_minus * self.species.scaling ** 2
        if "a_star" in self.names and isinstance(self.species, HeteronuclearSystem):
            # the next atom-dimer resonance the same a* and eta* give
            out["a_star(1)"] = vals["a_star"] * self.species.scaling
        if "eta_minus" in self.names:
            # the widths of the features against each other: 1 if one eta serves all
            for name in ("eta_star", "eta_plus"):
                if name in self.names:
                    out[f"{name}/eta_minus"] = vals[name] / vals["eta_minus"]
        return {k: np.broadcast_to(v, (n,)).copy() for k, v in out.items()
                if any(p in self.names for p in ("a_minus", "a_star", "a_plus", "eta_minus"))}

    # ---- summaries ----------------------------------------------------------------
    def summary(self):
        """List of dicts: name, units, median, 68 % and 95 % equal-tailed intervals,
        tau, ESS, R-hat (free parameters), then derived ratios with their references."""
        rows = []
        for n in self.names:
            row = {"name": n, "units": UNITS.get(n, ""), **_quantiles(self.samples[n]),
                   "tau": self.tau[n], "ess": self.ess[n], "rhat": self.rhat[n]}
            rows.append(row)
        references = dict(REFERENCES, **MIXTURE_REFERENCES) if isinstance(self.species, HeteronuclearSystem) \
            else REFERENCES
        for n, x in self.derived.items():
            ref, source = references[n]
            rows.append({"name": n, "units": "", **_quantiles(x), "reference": ref, "reference_source": source})
        return rows

    def feature_samples(self):
        """Posterior samples (a0) of the Efimov features the fit determines.

        Returns
        -------
        dict name -> ndarray
            ``a_minus``, ``a_star``, ``a_plus`` where sampled, or tied to a sampled a_- by
            ``tie="universal"``; fixed features are not fitted and not included.
        """
        tied = self.space.tie == "universal" and "a_minus" in self.names
        wanted = [n for n in FEATURES if n in self.names or tied]
        if not wanted:
            return {}
        efimov = self.space.efimov(self._values_per_sample())
        return {n: np.asarray(getattr(efimov, n), dtype=float) for n in wanted}

    def interval(self, name):
        """(median, lo68, hi68) of a free parameter, derived quantity or fitted feature
        (:meth:`feature_samples`), as in :meth:`summary`."""
        samples = self.samples.get(name, self.derived.get(name))
        if samples is None:
            samples = self.feature_samples().get(name)
        if samples is None:
            raise LossfitValueError("name", f"no parameter {name!r}; have "
                                            f"{self.names + list(self.derived) + list(self.feature_samples())}")
        q = _quantiles(samples)
        return float(q["median"]), float(q["lo68"]), float(q["hi68"])

    def correlation(self):
        """Correlation matrix of the free parameters (physical units), rows in ``names`` order."""
        x = np.column_stack([self.samples[n] for n in self.names])
        if x.shape[1] == 1:
            return np.ones((1, 1))
        return np.corrcoef(x, rowvar=False)

    def median_values(self):
        """Dict name -> posterior median of every free parameter, with the fixed ones."""
        out = dict(self.space.fixed)
        out.update({n: float(np.median(x)) for n, x in self.samples.items()})
        return out

    def efimov(self):
        """Efimov parameters at the posterior medians."""
        ef = self.space.efimov(self.median_values())
        return Efimov(**ef.as_dict())

    def draws(self, n, seed=0):
        """``n`` posterior draws as (Efimov, density_scale) pairs, for predictive bands."""
        rng = np.random.default_rng(seed)
        idx = rng.choice(self._kept_theta.shape[0], size=min(n, self._kept_theta.shape[0]), replace=False)
        out = []
        for i in idx:
            vals = self.space.values(self._kept_theta[i])
            out.append((self.space.efimov(vals), self.space.density_scale(vals)))
        return out

    def table(self):
        """Plain-text summary table."""
        rows = self.summary()
        w = max([16] + [len(r["name"]) + len(r["units"]) + 4 for r in rows])
        head = (f"{'parameter':<{w}}{'median':>12}{'68% interval':>26}{'95% interval':>26}"
                f"{'tau':>8}{'ESS':>9}{'R-hat':>7}")
        lines = [f"lossfit posterior — model: {self.model.label}; species {self.species.name}; "
                 f"{self.chain.shape[1]} walkers x {self.chain.shape[0]} steps, burn-in {self.burn}, "
                 f"acceptance {self.acceptance_fraction:.2f}", head, "-" * len(head)]
        for r in rows:
            d = _digits(r)
            ci68 = f"[{r['lo68']:.{d}g}, {r['hi68']:.{d}g}]"
            ci95 = f"[{r['lo95']:.{d}g}, {r['hi95']:.{d}g}]"
            name = r["name"] + (f" ({r['units']})" if r["units"] else "")
            if "tau" in r:
                lines.append(f"{name:<{w}}{r['median']:>12.{d + 1}g}{ci68:>26}{ci95:>26}"
                             f"{r['tau']:>8.1f}{r['ess']:>9.0f}{r['rhat']:>7.3f}")
            else:
                lines.append(f"{name:<{w}}{r['median']:>12.{d + 1}g}{ci68:>26}{ci95:>26}   {_reference_text(r)}")
        if len(self.names) > 1:
            lines.append("correlation matrix (" + ", ".join(self.names) + "):")
            for n, row in zip(self.names, self.correlation()):
                lines.append(f"  {n:<{w - 2}}" + " ".join(f"{v:+.2f}" for v in row))
        if self.fit_checks:
            lines.append(self._fit_line())
        if self.excluded:
            lines.append(self._excluded_line())
        for w in self.warnings:
            lines.append(f"WARNING: {w}")
        return "\n".join(lines)

    def _excluded_line(self):
        reasons = sorted({r for p in self.excluded for r in p["reasons"]})
        return (f"excluded from the fit: {len(self.excluded)} data point(s) outside the validity range "
                f"({'; '.join(reasons)}); see excluded")

    def __str__(self):
        return self.table()

    def __repr__(self):
        meds = ", ".join(f"{n}={np.median(x):.4g}" for n, x in self.samples.items())
        return f"<FitResult {meds}; {len(self.warnings)} warning(s)>"

    def _repr_html_(self):
        esc = html.escape
        rows = []
        for r in self.summary():
            extra = (f"<td>{r['tau']:.1f}</td><td>{r['ess']:.0f}</td><td>{r['rhat']:.3f}</td>"
                     if "tau" in r else f"<td colspan=3>{esc(_reference_text(r))}</td>")
            rows.append(f"<tr><td>{esc(r['name'])}</td><td>{esc(r['units'])}</td><td>{r['median']:.5g}</td>"
                        f"<td>[{r['lo68']:.4g}, {r['hi68']:.4g}]</td><td>[{r['lo95']:.4g}, {r['hi95']:.4g}]</td>"
                        f"{extra}</tr>")
        warn = "".join(f"<p style='color:#b00'>⚠ {esc(w)}</p>" for w in self.warnings)
        return (f"<div><p><b>lossfit posterior</b> — model {esc(self.model.label)}; {esc(self.species.name)}; "
                f"{self.chain.shape[1]} walkers × {self.chain.shape[0]} steps (burn-in {self.burn}); "
                f"acceptance {self.acceptance_fraction:.2f}</p><table><tr><th>parameter</th><th>units</th>"
                f"<th>median</th><th>68 %</th><th>95 %</th><th>τ</th><th>ESS</th><th>R̂</th></tr>"
                + "".join(rows) + f"</table><p>{esc(self._fit_line())}</p>"
                + (f"<p>{esc(self._excluded_line())}</p>" if self.excluded else "") + f"{warn}</div>")

    def to_dict(self):
        """JSON-ready summary: settings, summary rows, correlation, diagnostics, warnings."""
        def clean(v):
            if isinstance(v, (np.floating, float)):
                return float(v) if math.isfinite(v) else None
            if isinstance(v, np.integer):
                return int(v)
            return v
        return {"model": self.model.label, "species": self.species.name,
                "settings": {k: clean(v) for k, v in self.settings.items()},
                "walkers": int(self.chain.shape[1]), "steps": int(self.chain.shape[0]), "burn": self.burn,
                "thin": self.thin, "acceptance_fraction": self.acceptance_fraction,
                "summary": [{k: clean(v) for k, v in r.items()} for r in self.summary()],
                "correlation": {"names": self.names, "matrix": self.correlation().tolist()},
                "fixed": self.space.fixed, "tie": self.space.tie, "warnings": self.warnings,
                "outside_validity": self.outside_validity, "excluded": self.excluded,
                "loss_channels": self.loss_channels,
                "fit_checks": {k: ([r.tolist() for r in v] if k == "residuals" else clean(v))
                               for k, v in self.fit_checks.items()}}

    # ---- exports --------------------------------------------------------------------
    def _kept_physical(self):
        """``samples`` as an array of shape (steps kept, walkers, ndim), and their steps (the
        samples run step by step, walkers within a step)."""
        steps = np.arange(self.burn, self.chain.shape[0], self.thin)
        phys = np.stack([self.samples[n] for n in self.names], axis=-1)
        return phys.reshape(steps.size, self.chain.shape[1], len(self.names)), steps

    def to_dataframe(self):
        """The kept posterior samples as a pandas DataFrame: columns ``walker``, ``step``
        and one per free parameter (physical units; rows in the order of ``samples``).
        Needs pandas (``pip install 'lossfit[arviz]'`` brings it)."""
        import pandas as pd  # optional dependency: only this export needs it

        phys, steps = self._kept_physical()
        n_steps, n_walkers, _ = phys.shape
        columns = {"walker": np.tile(np.arange(n_walkers), n_steps), "step": np.repeat(steps, n_walkers)}
        columns.update({n: phys[:, :, i].ravel() for i, n in enumerate(self.names)})
        return pd.DataFrame(columns)

    def to_arviz(self, *, predictive=True, seed=0):
        """ArviZ's data object for the installed ArviZ (InferenceData; a DataTree from ArviZ
        1.0 on): the posterior with one chain per walker, ``sample_stats.lp``, and for
        spectrum fits the observed data, the pointwise log likelihood and a posterior
        predictive draw per sample (data = model + error x N(0, 1), seeded), so that ArviZ's
        diagnostics, LOO and plots work. Needs ArviZ (``pip install 'lossfit[arviz]'``)."""
        try:
            import arviz as az  # optional dependency: only this export needs it
        except ImportError:
            raise LossfitValueError("to_arviz", "needs ArviZ: pip install 'lossfit[arviz]'") from None

        phys, steps = self._kept_physical()
        groups = {"posterior": {n: phys[:, :, i].T for i, n in enumerate(self.names)},
                  "sample_stats": {"lp": self.log_prob[self.burn::self.thin].T}}
        dims, coords = {}, {"draw": steps}
        if predictive and isinstance(self.likelihood, SpectrumLikelihood):
            spectra = self.likelihood.spectra
            value = np.concatenate([s.value for s in spectra])
            error = np.concatenate([s.error for s in spectra])
            # every kept sample's prediction, a few thousand walker sets per call
            mu = np.concatenate([np.concatenate(self.likelihood.predict_values(self.space, self.space.values(chunk)),
                                                axis=-1)
                                 for chunk in np.array_split(self._kept_theta, -(-len(self._kept_theta) // 4096))])
            mu = mu.reshape(steps.size, self.chain.shape[1], value.size).transpose(1, 0, 2)
            z = (value - mu) / error
            rng = np.random.default_rng(seed)
            groups["observed_data"] = {"y": value}
            groups["posterior_predictive"] = {"y": mu + error * rng.standard_normal(mu.shape)}
            groups["log_likelihood"] = {"y": -0.5 * z * z - np.log(error * math.sqrt(2.0 * math.pi))}
            dims = {"y": ["point"]}
            coords["point"] = np.arange(value.size)
        if int(az.__version__.split(".")[0]) >= 1:
            return az.from_dict(groups, dims=dims, coords=coords)
        return az.from_dict(**groups, dims=dims, coords=coords)

    def to_netcdf(self, path, *, overwrite=False):
        """Write :meth:`to_arviz` to a netCDF file (ArviZ's format), atomically."""
        data = self.to_arviz()
        with atomic_path(path, overwrite=overwrite) as tmp:
            data.to_netcdf(tmp)
        return os.fspath(path)

    def write_json(self, path, *, overwrite=False):
        """Write :meth:`to_dict` atomically (temporary file, then rename)."""
        with atomic_path(path, overwrite=overwrite) as tmp, open(tmp, "w") as fh:
            json.dump(self.to_dict(), fh, indent=2, default=str)


def _weak_dimer_text(channel):
    if channel == "observed":
        return ("k_B T > E_b: shallow dimers formed and broken up in the trap; fitted with the observed "
                "channel (trap kinetics, docs/conventions.md)")
    return (f"k_B T > E_b: shallow dimers not lost on formation, but fitted with channel {channel!r}, which "
            "counts them as lost (use the default 'observed')")


def _reference_text(row):
    if row["reference"] is None:
        return row["reference_source"]
    return f"reference {row['reference']:.4g}: {row['reference_source']}"


def validity_findings(spectra, species, channels=()):
    """Points of spectra outside the zero-range validity range, and L3 points at a > 0
    where the shallow dimer is bound by less than k_B T (with the channel used).

    The one test of validity that fit results, their warnings, the exclusion of points
    (``lf.fit(..., exclude="outside-validity")``) and the figures share.

    Parameters
    ----------
    spectra : sequence of LossSpectrum
    species : Species or str
    channels : sequence of dict, optional
        The fit's loss channel per spectrum (``SpectrumLikelihood.channels``); a spectrum
        without an entry is described as fitted with ``"total"``.

    Returns
    -------
    list of dict
        One per flagged point: ``spectrum`` and ``point`` (indices), ``a`` (a0),
        ``temperature_nK``, ``reasons`` (texts) and ``outside_range``: True where a
        reason of :data:`RANGE_REASONS` applies (the theory does not hold there), False
        where the only note is the loss interpretation at k_B T > E_b.
    """
    out = []
    channel_of = {c["spectrum"]: c["channel"] for c in channels}
    for i, spec in enumerate(spectra):
        texts = RANGE_REASONS + (("weak_dimer", _weak_dimer_text(channel_of.get(i, "total"))),)
        flags = validity_flags(spec.a, spec.temperature, species)
        if spec.kind != "l3":
            flags["weak_dimer"][...] = False
        outside_range = np.logical_or.reduce([flags[key] for key, _ in RANGE_REASONS])
        for j in np.flatnonzero(outside_range | flags["weak_dimer"]):
            out.append({"spectrum": i, "point": int(j), "a": float(spec.a[j]),
                        "temperature_nK": float(np.broadcast_to(spec.temperature, spec.a.shape)[j]),
                        "reasons": [text for key, text in texts if flags[key][j]],
                        "outside_range": bool(outside_range[j])})
    return out
