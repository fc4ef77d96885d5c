"""Job files (TOML) for batch runs: schema, validation and loading.

Schema (every key is checked; an unknown key, a missing file or a bad value is an
error that names the key)::

    [data]
    species = "133Cs"                      # name known to lossfit.species; data files recorded
                                           # for another species are refused unless
                                           # allow_species_mismatch = true; a mixture is
                                           # "B-B-X", e.g. "133Cs-133Cs-6Li"
    a_bb = -1500.0                         # optional, mixtures only: the B-B scattering length
                                           # (a0; default 0), lossfit.heteronuclear's a_bb
    spectra = ["data.h5"]                  # lossfit.spectra HDF5 files (paths relative
                                           # to the job file)
    csv = [{ path = "run1.csv", kind = "l3", label = "run 1" }]   # optional CSV tables; each may
                                           # add channel = "observed" (the L3 default) | "total" |
                                           # "shallow" | "deep" and trap_depth = 800.0 (nK, U/k_B;
                                           # default 10 k_B T); spectra files carry both themselves
    # or, instead of spectra: raw decay curves fitted globally (lossfit.data.curves schema;
    # its resonance is the nominal a(B)), with the campaign systematics density_scale,
    # temperature_scale, b0, width, a_bg, sigma_B allowed in [free]
    # campaign = "campaign.h5"
    exclude = "outside-validity"           # optional, spectra only: leave out points outside the
                                           # zero-range validity range (|a| < 5 r_vdW or
                                           # k_B T > 0.1 E_vdW), recorded in summary.json;
                                           # absent: every point is fitted (lossfit.fit's exclude)

    [model]
    name = "zero-range"                    # the default; see lossfit.available_models()
    tie = "none"                           # "none" or "universal"

    [free]                                 # one entry per sampled parameter
    a_minus = { prior = "log-uniform", lo = -3500.0, hi = -450.0 }
    eta_minus = { prior = "default" }      # library default prior
    density_scale = { prior = "log-normal", median = 1.0, sigma = 0.2 }
    # other priors: { prior = "uniform", lo = ..., hi = ... },
    #               { prior = "normal", mu = ..., sigma = ... }

    [fixed]                                # optional: Efimov parameters held fixed
    eta_plus = 0.1

    [sampler]
    walkers = 32
    steps = 5000                           # or "auto": until converged (50 tau after burn-in,
    max_steps = 50000                      # tau stable to 1 %), at most max_steps
    seed = 1
    burn = "auto"                          # or an integer number of steps
    thin = 1
    checkpoint_every = 100                 # steps between chain checkpoints
    log_every = 250                        # steps between log lines in batch mode

    [study]                                # optional: an analysis instead of one fit
    kind = "temperature"                   # each temperature with the zero-energy law and the
    feature = "a_minus"                    # exact model, then jointly ("a_minus" or "a_star");
    # kind = "model-comparison"            # or PSIS-LOO of variants of the [free] fit:
    # compare = ["free", "shared-eta", "universal"]   # as given / one eta / the universal tie
    # kind = "spectrum"                    # or the [free] fit drawn on the Efimov spectrum
    # kind = "calibration"                 # or a(B) from binding energies, every model:
    # guess = [549.9, -9.0, 190.0]         # (b0 G, width G, a_bg a0); optional r_star (a0);
    #                                      # data: [data] binding_energies = "binding.csv"
    #                                      # (lossfit.data.calibration), no [free] needed

Units follow the library: lengths in a0, temperatures in nK.
"""

__all__ = ["Job", "load_job", "parse_job", "JobError", "STUDY_KINDS", "COMPARE_VARIANTS"]

import dataclasses
import math
import os
import warnings

from ..data.calibration import read_binding_energies
from ..data.curves import read_campaign
from ..data.spectra import CHANNELS, read_csv, read_spectra
from ..errors import FitCheckWarning, LossfitValueError
from ..experiment.feshbach import FeshbachResonance
from ..inference.campaign_space import SYSTEMATIC_NAMES
from ..inference.fit_checks import same_species
from ..inference.fitting import EXCLUDE_CHOICES
from ..inference.parameters import EFIMOV_NAMES, NUISANCE_NAMES
from ..inference.priors import LogNormal, LogUniform, Normal, Uniform
from ..mixture import HeteronuclearSystem
from ..universal.mixture_model import resolve_species
from ..universal.models import DEFAULT_MODEL, available_models

try:
    import tomllib
except ModuleNotFoundError:        # Python 3.10
    import tomli as tomllib


class JobError(LossfitValueError):
    """A job file is malformed; ``argument`` is the offending key."""


_SECTIONS = {"data": {"species", "a_bb", "spectra", "csv", "campaign", "binding_energies",
                      "allow_species_mismatch", "exclude"},
             "model": {"name", "tie"},
             "free": None,
             "fixed": None, "sampler": {"walkers", "steps", "max_steps", "seed", "burn", "thin",
                                        "checkpoint_every", "log_every"},
             "study": {"kind", "feature", "compare", "guess", "r_star"}}
_PRIOR_KEYS = {"log-uniform": {"lo", "hi"}, "uniform": {"lo", "hi"}, "log-normal": {"median", "sigma"},
               "normal": {"mu", "sigma"}, "default": set()}
_SAMPLER_DEFAULTS = {"walkers": 32, "steps": 5000, "max_steps": None, "seed": 0, "burn": "auto", "thin": 1,
                     "checkpoint_every": 100, "log_every": 250}


def _flag(key, value):
    if not isinstance(value, bool):
        raise JobError(key, f"must be true or false, got {value!r}")
    return value


def _number(key, value):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise JobError(key, f"must be a finite number, got {value!r}")
    return float(value)


def _integer(key, value, lo):
    if isinstance(value, bool) or not isinstance(value, int) or value < lo:
        raise JobError(key, f"must be an integer >= {lo}, got {value!r}")
    return value


@dataclasses.dataclass
class Job:
    """A validated job. ``text`` is the file's exact content (stored with results)."""

    path: str
    text: str
    species: str
    spectra: list
    csv: list
    campaign: object
    model: str
    tie: object
    free: list
    priors: dict
    fixed: dict
    sampler: dict
    study: object = None
    binding_energies: object = None
    allow_species_mismatch: bool = False
    exclude: object = None
    a_bb: float = 0.0

    @property
    def fitted_species(self):
        """What the fit runs with: the species name, or for a mixture with ``a_bb`` its
        HeteronuclearSystem (the B-B scattering length in a0)."""
        if self.a_bb == 0.0:
            return self.species
        return dataclasses.replace(resolve_species(self.species), a_bb=self.a_bb)

    @property
    def base_dir(self):
        return os.path.dirname(os.path.abspath(self.path))

    def data_paths(self):
        """Absolute paths of every data file."""
        return [os.path.join(self.base_dir, p) for p in self.spectra] + \
               [os.path.join(self.base_dir, c["path"]) for c in self.csv] + \
               ([os.path.join(self.base_dir, self.campaign)] if self.campaign else []) + \
               ([os.path.join(self.base_dir, self.binding_energies)] if self.binding_energies else [])

    def load_data(self):
        """The job's spectra (list of LossSpectrum), decay curves (list of DecayCurve) or, for a
        calibration, binding energies (B, E_b, E_b_err)."""
        if self.binding_energies:
            return read_binding_energies(os.path.join(self.base_dir, self.binding_energies))
        if self.campaign:
            camp = read_campaign(os.path.join(self.base_dir, self.campaign))
            self._check_species(self.campaign, camp.species)
            self._resonance = None if camp.resonance is None else FeshbachResonance(**camp.resonance)
            return list(camp.curves)
        out = []
        for p in self.spectra:
            spectra = read_spectra(os.path.join(self.base_dir, p))
            for s in spectra:
                self._check_species(p, s.species)
            out.extend(spectra)
        for c in self.csv:
            out.append(read_csv(os.path.join(self.base_dir, c["path"]), kind=c.get("kind", "l3"),
                                label=c.get("label"), species=self.species, channel=c.get("channel"),
                                trap_depth=c.get("trap_depth")))
        return out

    def _check_species(self, name, recorded):
        # refused before any sampling: a fit of the wrong species is wasted hours
        if recorded and not same_species(recorded, self.species):
            text = f"{name}: the data were recorded for {recorded}, the job fits {self.species}"
            if not self.allow_species_mismatch:
                raise JobError("data.species", text + "; set species to match, or add "
                               "allow_species_mismatch = true to [data] if that is meant")
            warnings.warn(text + " (allowed by the job)", FitCheckWarning, stacklevel=3)

    def variant_kwargs(self, variant, steps=None):
        """Keyword arguments of :func:`lossfit.fit` for a model-comparison variant: "free"
        (the job as written), "shared-eta" (every eta_* of [free] replaced by one eta) or
        "universal" (the universal tie: a_minus and one eta)."""
        kw = self.fit_kwargs(steps=steps)
        etas = [n for n in kw["free"] if n.startswith("eta")]
        others = [n for n in kw["free"] if not n.startswith("eta")]
        priors = {n: p for n, p in (kw["priors"] or {}).items() if not n.startswith("eta")}
        if variant == "shared-eta":
            kw.update(free=others + (["eta"] if etas else []), priors=priors)
        elif variant == "universal":
            kw.update(free=["a_minus", "eta"] + [n for n in others if n in NUISANCE_NAMES], priors=priors,
                      tie="universal")
        return kw

    def fit_kwargs(self, steps=None):
        """Keyword arguments of :func:`lossfit.fit` for this job."""
        s = self.sampler
        kw = dict(species=self.fitted_species, free=self.free, model=self.model, priors=self.priors,
                  walkers=s["walkers"], steps=steps or s["steps"], max_steps=s["max_steps"],
                  burn=None if s["burn"] == "auto" else s["burn"], thin=s["thin"], seed=s["seed"],
                  fixed=self.fixed, tie=self.tie, exclude=self.exclude)
        if self.campaign:
            kw["systematics"] = {n: p for n, p in self.priors.items() if n in SYSTEMATIC_NAMES}
            kw["priors"] = {n: p for n, p in self.priors.items() if n not in SYSTEMATIC_NAMES}
            kw["free"] = [n for n in self.free if n not in SYSTEMATIC_NAMES]
            kw["resonance"] = getattr(self, "_resonance", None)
        return kw


def _prior(key, spec):
    if not isinstance(spec, dict) or "prior" not in spec:
        raise JobError(key, f"must be a table with a 'prior' key, got {spec!r}")
    kind = spec["prior"]
    if kind not in _PRIOR_KEYS:
        raise JobError(f"{key}.prior", f"must be one of {sorted(_PRIOR_KEYS)}, got {kind!r}")
    given = set(spec) - {"prior"}
    if given != _PRIOR_KEYS[kind]:
        extra, missing = given - _PRIOR_KEYS[kind], _PRIOR_KEYS[kind] - given
        bad = sorted(extra)[0] if extra else sorted(missing)[0]
        raise JobError(f"{key}.{bad}", f"prior {kind!r} takes exactly {sorted(_PRIOR_KEYS[kind])}")
    vals = {k: _number(f"{key}.{k}", v) for k, v in spec.items() if k != "prior"}
    try:
        if kind == "log-uniform":
            return LogUniform(vals["lo"], vals["hi"])
        if kind == "uniform":
            return Uniform(vals["lo"], vals["hi"])
        if kind == "log-normal":
            return LogNormal(vals["median"], vals["sigma"])
        if kind == "normal":
            return Normal(vals["mu"], vals["sigma"])
    except LossfitValueError as err:
        raise JobError(key, str(err)) from None
    return None


def load_job(path):
    """Read and validate a job file; every problem raises :class:`JobError`."""
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise JobError("job", f"no such job file {path!r}")
    with open(path, "rb") as fh:
        raw = fh.read()
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise JobError("job", f"{path!r} is not UTF-8 text ({err})") from None
    return parse_job(text, path)


def parse_job(text, path):
    """Validate job ``text``; relative data paths are taken from the folder of ``path``."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise JobError("job", f"{path!r} is not valid TOML ({err})") from None
    for section in doc:
        if section not in _SECTIONS:
            raise JobError(section, f"unknown section; known: {sorted(_SECTIONS)}")
        if not isinstance(doc[section], dict):
            raise JobError(section, "must be a table")
        allowed = _SECTIONS[section]
        for key in doc[section]:
            if allowed is not None and key not in allowed:
                raise JobError(f"{section}.{key}", f"unknown key; known: {sorted(allowed)}")
    calibration = isinstance(doc.get("study"), dict) and doc["study"].get("kind") == "calibration"
    for section in ("data",) if calibration else ("data", "free"):
        if section not in doc:
            raise JobError(section, "missing section")
    data = doc["data"]
    if "species" not in data:
        raise JobError("data.species", "missing")
    try:
        system = resolve_species(data["species"])
    except LossfitValueError as err:
        raise JobError("data.species", str(err)) from None
    sp = system.name
    a_bb = _a_bb(data, system)
    spectra = data.get("spectra", [])
    if not isinstance(spectra, list) or not all(isinstance(p, str) for p in spectra):
        raise JobError("data.spectra", f"must be a list of file names, got {spectra!r}")
    csv = data.get("csv", [])
    if not isinstance(csv, list):
        raise JobError("data.csv", "must be a list of tables")
    for i, c in enumerate(csv):
        if not isinstance(c, dict) or "path" not in c or set(c) - {"path", "kind", "label", "channel", "trap_depth"}:
            raise JobError(f"data.csv[{i}]", "must be a table with 'path' and optional 'kind', 'label', 'channel', "
                           f"'trap_depth'; got {c!r}")
        kind = c.get("kind", "l3")
        if kind not in ("l3", "beta"):
            raise JobError(f"data.csv[{i}].kind", f"must be 'l3' or 'beta', got {c['kind']!r}")
        if "channel" in c and c["channel"] not in CHANNELS[kind]:
            raise JobError(f"data.csv[{i}].channel", f"a {kind} table measures one of {list(CHANNELS[kind])}, "
                           f"got {c['channel']!r}")
        depth = c.get("trap_depth")
        if depth is not None and (kind != "l3" or isinstance(depth, bool) or not isinstance(depth, (int, float))
                                  or not 0 < depth < float("inf")):
            raise JobError(f"data.csv[{i}].trap_depth",
                           f"must be a positive number of nK on an L3 table, got {depth!r}")
    campaign = data.get("campaign")
    if campaign is not None and (not isinstance(campaign, str) or spectra or csv):
        raise JobError("data.campaign", "must be one file name, and spectra/csv must then be absent")
    binding = data.get("binding_energies")
    if calibration:
        if not isinstance(binding, str) or spectra or csv or campaign is not None:
            raise JobError("data.binding_energies", "a calibration job names one binding-energy CSV file "
                           "and no other data")
        if not os.path.isfile(os.path.join(os.path.dirname(os.path.abspath(path)), binding)):
            raise JobError("data.binding_energies", f"no such file {binding!r}")
    elif binding is not None:
        raise JobError("data.binding_energies", "belongs to [study] kind = 'calibration'")
    elif not spectra and not csv and campaign is None:
        raise JobError("data.spectra", "the job names no data file")
    if campaign is not None and not os.path.isfile(os.path.join(os.path.dirname(os.path.abspath(path)), campaign)):
        raise JobError("data.campaign", f"no such file {campaign!r}")
    base = os.path.dirname(os.path.abspath(path))
    for key, p in [(f"data.spectra[{i}]", p) for i, p in enumerate(spectra)] + \
                  [(f"data.csv[{i}].path", c["path"]) for i, c in enumerate(csv)]:
        if not os.path.isfile(os.path.join(base, p)):
            raise JobError(key, f"no such file {os.path.join(base, p)!r}")
    model = doc.get("model", {})
    name = model.get("name", DEFAULT_MODEL)
    if name not in available_models():
        raise JobError("model.name", f"unknown model {name!r}; available: {available_models()}")
    tie = model.get("tie", "none")
    if tie not in ("none", "universal"):
        raise JobError("model.tie", f"must be 'none' or 'universal', got {tie!r}")
    allowed_free = set(EFIMOV_NAMES) | {"eta"} | set(NUISANCE_NAMES)
    if campaign is not None:
        allowed_free |= set(SYSTEMATIC_NAMES)
    free, priors = [], {}
    if not calibration and not doc["free"]:
        raise JobError("free", "name at least one parameter")
    for key, spec in doc.get("free", {}).items():
        if key not in allowed_free:
            raise JobError(f"free.{key}", f"unknown parameter; known: {sorted(allowed_free)}")
        prior = _prior(f"free.{key}", spec)
        free.append(key)
        if prior is not None:
            priors[key] = prior
    fixed = {}
    for key, value in doc.get("fixed", {}).items():
        if key not in EFIMOV_NAMES:
            raise JobError(f"fixed.{key}", f"unknown Efimov parameter; known: {list(EFIMOV_NAMES)}")
        fixed[key] = _number(f"fixed.{key}", value)
    sampler = dict(_SAMPLER_DEFAULTS)
    for key, value in doc.get("sampler", {}).items():
        if key == "burn":
            if value != "auto":
                _integer("sampler.burn", value, 0)
        elif key == "steps" and value == "auto":
            pass
        elif key in ("walkers", "steps", "thin", "checkpoint_every", "log_every"):
            _integer(f"sampler.{key}", value, {"walkers": 2, "steps": 2}.get(key, 1))
        elif key == "max_steps":
            _integer("sampler.max_steps", value, 200)
        elif key == "seed":
            _integer("sampler.seed", value, 0)
        sampler[key] = value
    for par in free:
        if par in ("density_scale", "temperature_scale", "b0", "width", "a_bg", "sigma_B") \
                and par not in priors:
            raise JobError(f"free.{par}", "needs an explicit prior (e.g. log-normal, sigma = 0.2)")
    study = _study(doc.get("study"), campaign, free)
    exclude = _exclude(data, campaign, study)
    return Job(path=path, text=text, species=sp, spectra=spectra, csv=csv, campaign=campaign, model=name,
               tie=None if tie == "none" else tie, free=free, priors=priors, fixed=fixed, sampler=sampler,
               study=study, binding_energies=binding,
               allow_species_mismatch=_flag("data.allow_species_mismatch", data.get("allow_species_mismatch", False)),
               exclude=exclude, a_bb=a_bb)


def _a_bb(data, system):
    """The validated ``[data] a_bb`` (B-B scattering length of a mixture, a0), 0 if absent."""
    if "a_bb" not in data:
        return 0.0
    value = data["a_bb"]
    if not isinstance(system, HeteronuclearSystem):
        raise JobError("data.a_bb", f"is the B-B scattering length of a mixture species 'B-B-X'; "
                       f"{system.name} is one species")
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise JobError("data.a_bb", f"must be a number (a0), got {value!r}")
    return float(value)


def _exclude(data, campaign, study):
    """The validated ``[data] exclude`` (lossfit.fit's ``exclude``), or None."""
    if "exclude" not in data:
        return None
    value = data["exclude"]
    named = [c for c in EXCLUDE_CHOICES if c is not None]
    if value not in named:
        raise JobError("data.exclude", f"must be one of {named} (leave the key out to fit every point), "
                       f"got {value!r}")
    if campaign is not None:
        raise JobError("data.exclude", "applies to spectra; a campaign's decay curves are fitted whole")
    if study is not None and study["kind"] in ("temperature", "calibration"):
        raise JobError("data.exclude", f"is not used by [study] kind = {study['kind']!r}; select the points "
                       "in the data files instead")
    return value


#: The analyses a ``[study]`` section may name as ``kind``.
STUDY_KINDS = ("temperature", "model-comparison", "spectrum", "calibration")
#: The fit variants ``kind = "model-comparison"`` may list in ``compare``.
COMPARE_VARIANTS = ("free", "shared-eta", "universal")


def _study(spec, campaign, free):
    """The validated [study] section, or None."""
    if spec is None:
        return None
    kind = spec.get("kind")
    if kind not in STUDY_KINDS:
        raise JobError("study.kind", f"must be one of {list(STUDY_KINDS)}, got {kind!r}")
    if campaign is not None:
        raise JobError("study.kind", "studies run on spectra; a campaign job fits curves globally")
    extra = set(spec) - {"kind"} - {"temperature": {"feature"}, "model-comparison": {"compare"}, "spectrum": set(),
                                    "calibration": {"guess", "r_star"}}[kind]
    if extra:
        raise JobError(f"study.{sorted(extra)[0]}", f"is not a key of kind = {kind!r}")
    if kind == "spectrum":
        return {"kind": kind}
    if kind == "calibration":
        guess = spec.get("guess")
        if not isinstance(guess, list) or len(guess) != 3:
            raise JobError("study.guess", f"must be [b0 (G), width (G), a_bg (a0)], got {guess!r}")
        out = {"kind": kind, "guess": [_number(f"study.guess[{i}]", v) for i, v in enumerate(guess)]}
        if "r_star" in spec:
            out["r_star"] = _number("study.r_star", spec["r_star"])
        return out
    if kind == "temperature":
        if "compare" in spec:
            raise JobError("study.compare", "belongs to kind = 'model-comparison'")
        feature = spec.get("feature", "a_minus")
        if feature not in ("a_minus", "a_star"):
            raise JobError("study.feature", f"must be 'a_minus' or 'a_star', got {feature!r}")
        return {"kind": kind, "feature": feature}
    if "feature" in spec:
        raise JobError("study.feature", "belongs to kind = 'temperature'")
    compare = spec.get("compare", list(COMPARE_VARIANTS))
    if not isinstance(compare, list) or len(compare) < 2 or any(c not in COMPARE_VARIANTS for c in compare) \
            or len(set(compare)) != len(compare):
        raise JobError("study.compare", f"must list two or more of {list(COMPARE_VARIANTS)}, got {compare!r}")
    if "universal" in compare and "a_minus" not in free:
        raise JobError("study.compare", "the universal tie needs a_minus in [free]")
    return {"kind": kind, "compare": compare}
