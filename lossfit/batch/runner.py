"""Batch runs of job files: output folders, locking, resume, reports.

Output folder of ``lossfit run JOB --out DIR``:

* ``chains.h5`` — the chain (schema ``lossfit.chains``), checkpointed atomically, with
  the job text and provenance in its metadata;
* ``summary.json`` — posterior summary, diagnostics and provenance (written atomically
  at the end);
* ``corner.png``, ``spectrum.png`` — figures;
* ``.lossfit.lock`` — present while a process works on the folder.

Rules: a second process on the same folder refuses (lock; a lock left by a dead
process on the same host is taken over, with a message); an existing folder holding
the *same* job is resumed; one holding a different job, or finished results, is never
overwritten without ``overwrite=True``.
"""

__all__ = ["run_job", "report", "load_result", "OutputConflict", "EXIT_OK", "EXIT_BAD_INPUT", "EXIT_CONFLICT",
           "EXIT_INTERRUPTED"]

import json
import os
import socket
import sys
import time
import warnings

import matplotlib.pyplot as plt
import numpy as np

from .._io import atomic_path
from ..errors import LossfitValueError, OutputConflict, ValidityWarning
from ..experiment.feshbach import compare_binding_models
from ..inference.backends import read_chain_file
from ..inference.fitting import fit, prepare
from ..inference.global_fit import prepare_curves
from ..inference.model_comparison import compare_models
from ..inference.pools import make_pool
from ..inference.posterior import check_run_settings, make_result
from ..inference.temperature_study import temperature_study
from ..mixture import HeteronuclearSystem
from ..plotting.efimov import efimov_spectrum_plot
from ..plotting.spectra import corner_plot, spectrum_plot
from ..plotting.studies import binding_energy_plot, temperature_study_plot
from ..plotting.universality import universality_plot
from ..universal.spectrum import kappa_star
from .exit_codes import EXIT_BAD_INPUT, EXIT_CONFLICT, EXIT_INTERRUPTED, EXIT_OK
from .jobs import JobError, load_job, parse_job
from .provenance import now_utc, provenance

OUTPUTS = ("chains.h5", "summary.json", "corner.png", "spectrum.png", "universality.png")
LOCK = ".lossfit.lock"


def _pid_alive(pid):
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


class FolderLock:
    """Exclusive lock on an output folder (a file created with O_EXCL)."""

    def __init__(self, folder):
        self.path = os.path.join(folder, LOCK)
        self.held = False

    def acquire(self):
        me = {"pid": os.getpid(), "host": socket.gethostname(), "time": time.time()}
        for _ in range(2):
            try:
                fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
            except FileExistsError:
                try:
                    with open(self.path) as fh:
                        other = json.load(fh)
                except (OSError, ValueError):
                    other = {}
                if other.get("host") == me["host"] and isinstance(other.get("pid"), int) \
                        and not _pid_alive(other["pid"]):
                    print(f"lossfit: taking over the lock left by dead process {other['pid']}",
                          file=sys.stderr)
                    os.remove(self.path)
                    continue
                raise OutputConflict(f"{os.path.dirname(self.path)!r} is in use by process "
                                     f"{other.get('pid', '?')} on {other.get('host', '?')} (lock "
                                     f"{self.path}); if that process is gone, remove the lock file")
            with os.fdopen(fd, "w") as fh:
                json.dump(me, fh)
            self.held = True
            return self
        raise OutputConflict(f"could not lock {self.path}")

    def release(self):
        if self.held and os.path.exists(self.path):
            os.remove(self.path)
        self.held = False

    def __enter__(self):
        return self.acquire()

    def __exit__(self, *exc):
        self.release()
        return False


def _atomic_write_text(path, text):
    with atomic_path(path) as tmp, open(tmp, "w") as fh:
        fh.write(text)


def _atomic_savefig(fig, path):
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=150)


def write_outputs(result, out_dir, provenance_info, *, truths=None):
    """summary.json, corner.png, spectrum.png and, for fits that determine a_-,
    universality.png (each written atomically)."""
    # figures are only saved: any backend does (matplotlib picks Agg where there is no screen)
    summary = result.to_dict()
    summary["provenance"] = provenance_info
    _atomic_write_text(os.path.join(out_dir, "summary.json"), json.dumps(summary, indent=2, default=str))
    fig = corner_plot(result, truths=truths)
    _atomic_savefig(fig, os.path.join(out_dir, "corner.png"))
    plt.close(fig)
    fig = spectrum_plot(result)
    _atomic_savefig(fig, os.path.join(out_dir, "spectrum.png"))
    plt.close(fig)
    if "a_minus/r_vdw" in result.derived and not isinstance(result.species, HeteronuclearSystem):
        # the fitted a_- among the published measurements of identical bosons (van der
        # Waals universality chart; lossfit holds no such table for mixtures)
        fig = universality_plot(result)
        _atomic_savefig(fig, os.path.join(out_dir, "universality.png"))
        plt.close(fig)


def check_output_folder(out_dir, argument="out"):
    """Refuse an output path that is a file, lies under a file, or cannot be written,
    before anything is created (the message names ``argument``)."""
    out_dir = os.path.abspath(os.fspath(out_dir))
    if os.path.exists(out_dir):
        if not os.path.isdir(out_dir):
            raise LossfitValueError(argument, f"{out_dir!r} is a file, not a folder")
        if not os.access(out_dir, os.W_OK | os.X_OK):
            raise LossfitValueError(argument, f"the folder {out_dir!r} is not writable")
        return out_dir
    parent = out_dir
    while not os.path.exists(parent):
        parent = os.path.dirname(parent)
    if not os.path.isdir(parent):
        raise LossfitValueError(argument, f"{out_dir!r} lies under {parent!r}, which is a file")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise LossfitValueError(argument, f"cannot create {out_dir!r}: {parent!r} is not writable")
    return out_dir


def _remove_if_empty(folder, created):
    # a rejected or stopped job leaves no empty folder behind
    if created and os.path.isdir(folder) and not os.listdir(folder):
        os.rmdir(folder)


def run_job(job_path, out_dir, *, pool="serial", workers=None, steps=None, overwrite=False,
            progress=None, truths=None, stream=None, quiet=False):
    """Run (or resume) a job file into ``out_dir``; returns the FitResult (None on MPI workers).

    The whole job (its keys, data files, sampler settings with ``steps``) and the output
    path are checked before any folder is made or any step is sampled.

    Raises :class:`OutputConflict` for a locked folder or results that would be
    overwritten, :class:`lossfit.inference.sampling.Interrupted` on SIGTERM/SIGINT
    after the chain is saved, and :class:`lossfit.errors.LossfitValueError` for bad input.
    ``quiet`` prints nothing (no log lines, no table).
    """
    stream = open(os.devnull, "w") if quiet else (stream or sys.stdout)
    job = load_job(job_path)
    if steps is not None and steps != "auto" and (isinstance(steps, bool) or not isinstance(steps, int) or steps < 2):
        raise LossfitValueError("steps", f"must be an integer >= 2 or 'auto', got {steps!r}")
    want_steps = steps or job.sampler["steps"]
    data = job.load_data()
    kw = job.fit_kwargs(steps=want_steps)
    try:
        check_run_settings(kw["walkers"], want_steps, kw["burn"], kw["thin"], kw["seed"])
    except LossfitValueError as err:
        raise JobError(f"sampler.{err.argument}", str(err).split(": ", 1)[1]) from None
    out_dir = check_output_folder(out_dir)
    pool_obj = make_pool(pool, workers)
    if pool == "mpi" and not pool_obj.is_master():
        pool_obj.wait()
        return None
    created = not os.path.exists(out_dir)
    try:
        os.makedirs(out_dir, exist_ok=True)
        with FolderLock(out_dir):
            if job.study is not None:
                return _run_study(job, data, want_steps, out_dir, overwrite, stream, progress=interactive_of(progress))
            chains = os.path.join(out_dir, "chains.h5")
            if os.path.exists(chains) and not overwrite:
                stored = read_chain_file(chains)
                if stored["metadata"].get("job_text") != job.text:
                    raise OutputConflict(f"{out_dir!r} holds results of a different job; choose another "
                                         "folder or pass --overwrite")
                if _finished(stored, want_steps, out_dir):
                    print(f"lossfit: {out_dir} already holds the finished run ({stored['iteration']} steps); "
                          "nothing to do (lossfit report re-creates figures)", file=stream)
                    return None
                print(f"lossfit: resuming {chains} at step {stored['iteration']}", file=stream)
            elif overwrite:
                for name in OUTPUTS:
                    if os.path.exists(os.path.join(out_dir, name)):
                        os.remove(os.path.join(out_dir, name))
            info = provenance(job_text=job.text, job_path=os.path.abspath(job.path),
                              data_paths=job.data_paths(), seed=job.sampler["seed"], pool=pool,
                              workers=getattr(pool_obj, "size", workers), started_utc=now_utc())
            interactive = interactive_of(progress)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ValidityWarning)
                result = fit(data, **kw, backend=chains,
                             pool=None if pool == "serial" else pool_obj, progress=interactive,
                             log_every=None if interactive or quiet else job.sampler["log_every"],
                             checkpoint_every=job.sampler["checkpoint_every"], metadata=info)
            info["finished_utc"] = now_utc()
            write_outputs(result, out_dir, info, truths=truths)
            print(result.table(), file=stream)
            return result
    finally:
        _remove_if_empty(out_dir, created)
        if hasattr(pool_obj, "close"):
            pool_obj.close()
        if hasattr(pool_obj, "join"):
            pool_obj.join()


def _finished(stored, want_steps, out_dir):
    """A stored run that needs no more steps: its summary exists and it reached the steps
    asked for, or (``"auto"``) it stopped for a reason of its own."""
    summary = os.path.join(out_dir, "summary.json")
    if not os.path.exists(summary):
        return False
    if want_steps == "auto":
        with open(summary) as fh:
            return json.load(fh).get("settings", {}).get("stopped") in ("converged", "max_steps")
    return stored["iteration"] >= want_steps


def load_result(run_dir):
    """The FitResult of a ``lossfit run`` folder, rebuilt from its chain and the job stored
    with it (finished or stopped runs; the data files must still be where the job names them).

    Parameters
    ----------
    run_dir : str or path-like
        Output folder of ``lossfit run`` or ``lossfit demo``.

    Returns
    -------
    FitResult
        Its ``to_dict()`` equals the folder's ``summary.json`` without ``provenance``.
    """
    run_dir = os.fspath(run_dir)
    chains = os.path.join(run_dir, "chains.h5")
    if not os.path.isfile(chains):
        raise LossfitValueError("run_dir", f"{run_dir!r} holds no chains.h5 (not a lossfit run folder?)")
    stored = read_chain_file(chains)
    meta = stored["metadata"]
    if "job_text" not in meta:
        raise LossfitValueError("run_dir", f"{chains!r} carries no job (not written by lossfit run)")
    job = parse_job(meta["job_text"], meta["job_path"])
    summary_path = os.path.join(run_dir, "summary.json")
    recorded = None
    if os.path.isfile(summary_path):
        with open(summary_path) as fh:
            recorded = json.load(fh).get("settings")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        data = job.load_data()
        kw = job.fit_kwargs()
        common = {k: kw[k] for k in ("species", "free", "model", "priors", "fixed", "tie")}
        if job.campaign:
            space, likelihood, _ = prepare_curves(data, resonance=kw["resonance"],
                                                  systematics=kw["systematics"], **common)
            # the chord reference of the nuisances sits at the best stored sample, as on resume
            chain, log_prob = stored["chain"], stored["log_prob"]
            best = chain.reshape(-1, chain.shape[-1])[int(np.argmax(log_prob.ravel()))]
            vals = space.values(best)
            likelihood.refresh(space.efimov(vals), vals)
        else:
            space, likelihood, _ = prepare(data, exclude=kw["exclude"], **common)
        # the run's own record of its settings where it has one (they are not recomputed)
        settings = recorded or {"walkers": kw["walkers"], "seed": kw["seed"], "steps": stored["iteration"]}
        return make_result(space, likelihood, stored["chain"], stored["log_prob"],
                           stored["accepted"] / max(stored["iteration"], 1), burn=kw["burn"],
                           thin=kw["thin"], settings=settings)


def interactive_of(progress):
    """Progress bars on a terminal unless asked otherwise."""
    return sys.stderr.isatty() if progress is None else progress


STUDY_OUTPUTS = ("study.json", "study.png")


def _run_study(job, data, steps, out_dir, overwrite, stream, progress):
    """The job's [study]: study.json (the table as data) and study.png, written atomically."""
    present = [n for n in STUDY_OUTPUTS if os.path.exists(os.path.join(out_dir, n))]
    if present and not overwrite:
        raise OutputConflict(f"{out_dir!r} already holds {present}; pass --overwrite to re-run the study")
    kw = job.fit_kwargs(steps=steps)
    sampler = dict(walkers=kw["walkers"], steps=kw["steps"], seed=kw["seed"] or 0, progress=progress)
    info = provenance(job_text=job.text, job_path=os.path.abspath(job.path), data_paths=job.data_paths(),
                      seed=job.sampler["seed"], started_utc=now_utc())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        if job.study["kind"] == "calibration":
            b, e, err = data
            fits, preferred = compare_binding_models(b, e, err, kw["species"], job.study["guess"],
                                                     r_star=job.study.get("r_star"))
            record = {"kind": "calibration", "preferred": preferred,
                      "fits": [{"model": f.model, "params": f.params.tolist(), "covariance": f.covariance.tolist(),
                                "chi2": f.chi2, "dof": f.dof, "aic": f.aic, "r_star": f.r_star} for f in fits]}
            fig = binding_energy_plot(fits, b, e, err, species=kw["species"])
            text = "\n".join(f"{f.model:16s} chi2 = {f.chi2:9.2f} ({f.dof} dof)  b0 = {f.params[0]:.5f} G  "
                              f"width = {f.params[1]:.4f} G  a_bg = {f.params[2]:.2f} a0" for f in fits)
            text += f"\npreferred: {preferred or 'none (within 2 in AIC)'}"
        elif job.study["kind"] == "spectrum":
            result = fit(data, **dict(kw, progress=progress))
            record = {"kind": "spectrum", "fit": result.to_dict(), "kappa_star_per_a0": kappa_star(result.efimov())}
            fig, text = efimov_spectrum_plot(result), result.table()
        elif job.study["kind"] == "temperature":
            study = temperature_study(data, species=kw["species"], feature=job.study["feature"], **sampler)
            record = {"kind": "temperature", "feature": study.feature, "rows": study.rows, "joint": study.joint,
                      "chi2": study.chi2, "dof": study.dof, "p_value": study.p_value, "consistent": study.consistent}
            fig, text = temperature_study_plot(study), study.table()
        else:
            fits = {}
            for variant in job.study["compare"]:
                vkw = job.variant_kwargs(variant, steps=steps)
                vkw.update(progress=progress)
                fits[variant] = fit(data, **vkw)
            comparison = compare_models(fits)
            record = {"kind": "model-comparison", "rows": comparison.rows, "best": comparison.best,
                      "preferred": comparison.preferred(),
                      "fits": {name: r.to_dict() for name, r in fits.items()}}
            fig, text = efimov_spectrum_plot(fits[comparison.best]), comparison.table()
    info["finished_utc"] = now_utc()
    record["provenance"] = info
    _atomic_write_text(os.path.join(out_dir, "study.json"), json.dumps(record, indent=2, default=str))
    _atomic_savefig(fig, os.path.join(out_dir, "study.png"))
    plt.close(fig)
    print(text, file=stream)
    return record


def report(out_dir, *, overwrite=False, stream=None):
    """Re-create summary.json, corner.png and spectrum.png from the stored chain."""
    stream = stream or sys.stdout
    out_dir = os.fspath(out_dir)
    present = [n for n in OUTPUTS[1:] if os.path.exists(os.path.join(out_dir, n))]
    if present and not overwrite:
        raise OutputConflict(f"{out_dir!r} already holds {present}; pass --overwrite to re-create them")
    with FolderLock(out_dir):
        result = load_result(out_dir)
        write_outputs(result, out_dir, read_chain_file(os.path.join(out_dir, "chains.h5"))["metadata"])
    print(result.table(), file=stream)
    return result
