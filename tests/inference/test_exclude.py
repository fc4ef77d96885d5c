"""``lf.fit(..., exclude="outside-validity")``: exactly the points fit results flag as
outside the zero-range theory's range are left out before the priors and the likelihood
are built, recorded in the result, its table and summary.json (also through job files
and ``lossfit.load_result``); bad values and fits with nothing left are refused naming
``exclude``.

The validity thresholds (|a| < 5 r_vdW, k_B T > 0.1 hbar^2/(m r_vdW^2)) are the
project's choice (docs/conventions.md: common practice, no source); the tests use
points well on either side of them.
"""

import json
import warnings

import numpy as np
import pytest

import lossfit as lf
from lossfit.batch.jobs import JobError, parse_job
from lossfit.batch.runner import load_result, run_job
from lossfit.errors import ConvergenceWarning, FitCheckWarning, LossfitValueError
from lossfit.inference.fitting import prepare
from lossfit.rates import validity_flags

CS = lf.species("133Cs")
TRUTH = lf.Efimov(a_minus=-900.0, eta_minus=0.1)
# 300 a0 < 5 r_vdW = 505 a0 (point 0); 20 uK > 0.1 E_vdW = 12.8 uK (point 4)
A = -np.array([300.0, 600.0, 900.0, 1500.0, 3000.0])
T = np.array([50.0, 50.0, 50.0, 50.0, 20000.0])


def _spectrum(a=A, t=T, label="run 1"):
    value = lf.l3(a, t, species=CS, efimov=TRUTH)
    return lf.LossSpectrum(a, t, value, 0.1 * value, kind="l3", label=label)


def _quick_fit(data, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        warnings.simplefilter("ignore", FitCheckWarning)
        return lf.fit(data, species=CS, free=["a_minus", "eta_minus"], walkers=6, steps=12, seed=1,
                      progress=False, initial={"a_minus": -900.0, "eta_minus": 0.1}, **kw)


def test_the_points_fit_results_flag_are_the_points_left_out():
    spec = _spectrum()
    flags = validity_flags(spec.a, spec.temperature, CS)
    assert (flags["short_a"] | flags["hot"]).tolist() == [True, False, False, False, True]
    space, likelihood, _ = prepare(spec, species=CS, free=["a_minus", "eta_minus"], exclude="outside-validity")
    kept = likelihood.spectra[0]
    assert kept.a.tolist() == [-600.0, -900.0, -1500.0] and kept.label == "run 1"
    assert likelihood.n_points == 3
    # the default prior spans the points fitted, not the ones left out
    prior = space.priors[0]
    assert (prior.sign, prior.lo, prior.hi) == (-1.0, 600.0, 1500.0)
    assert [(r["spectrum"], r["point"], r["a"], r["reasons"]) for r in likelihood.excluded] == [
        (0, 0, -300.0, ["|a| < 5 r_vdW"]), (0, 4, -3000.0, ["k_B T > 0.1 E_vdW"])]
    assert likelihood.excluded[1]["temperature_nK"] == 20000.0
    assert likelihood.excluded[0]["value"] == spec.value[0] and likelihood.excluded[0]["error"] == spec.error[0]
    # default: every point is fitted
    _, full, _ = prepare(spec, species=CS, free=["a_minus", "eta_minus"])
    assert full.n_points == 5 and full.excluded == []


def test_the_result_and_its_summary_record_what_was_left_out():
    kept_alone = _spectrum(label="kept")
    res = _quick_fit([_spectrum(), kept_alone.select([False, True, True, True, False])], exclude="outside-validity")
    assert [(r["spectrum"], r["point"], r["label"]) for r in res.excluded] == [(0, 0, "run 1"), (0, 4, "run 1")]
    assert res.outside_validity == []                     # nothing outside the range was fitted
    assert res.settings["exclude"] == "outside-validity"
    record = json.loads(json.dumps(res.to_dict(), default=str))
    assert record["excluded"][1]["reasons"] == ["k_B T > 0.1 E_vdW"]
    assert record["settings"]["exclude"] == "outside-validity"
    assert "excluded from the fit: 2 data point(s) outside the validity range" in res.table()
    assert "excluded from the fit: 2 data point(s)" in res._repr_html_()
    # without exclude the same data are fitted whole and flagged as before
    res = _quick_fit(_spectrum())
    assert res.excluded == [] and res.settings["exclude"] == ""
    assert [(p["point"], p["outside_range"]) for p in res.outside_validity] == [(0, True), (4, True)]
    assert "excluded from the fit" not in res.table()


def test_a_spectrum_left_with_no_point_is_dropped_and_indices_stay_those_of_the_data():
    hot = _spectrum(a=-np.array([800.0, 1200.0]), t=20000.0, label="hot")
    _, likelihood, _ = prepare([hot, _spectrum()], species=CS, free=["a_minus", "eta_minus"],
                               exclude="outside-validity")
    assert [s.label for s in likelihood.spectra] == ["run 1"]
    assert [(r["spectrum"], r["point"]) for r in likelihood.excluded] == [(0, 0), (0, 1), (1, 0), (1, 4)]


def test_weakly_bound_dimer_points_are_modelled_not_left_out():
    # a > 0 with k_B T > E_b: the observed channel models these points (docs/conventions.md),
    # so they are a note in outside_validity, not outside the range
    a = np.array([1000.0, 3000.0, 6000.0])
    # E_b = hbar^2/(m a^2) (Chin et al., RMP 82, 1225 (2010)) equals k_B x 200 nK at a = 2.6e3 a0 for 133Cs
    t = 200.0
    assert validity_flags(a, t, CS)["weak_dimer"].tolist() == [False, True, True]
    ef = lf.Efimov(a_plus=2000.0, eta_plus=0.1, a_star=450.0, eta_star=0.1)
    value = lf.l3(a, t, species=CS, efimov=ef)
    spec = lf.LossSpectrum(a, t, value, 0.1 * value, kind="l3")
    _, likelihood, _ = prepare(spec, species=CS, free=["a_plus", "eta_plus"], fixed={"a_star": 450.0, "eta_star": 0.1},
                               exclude="outside-validity")
    assert likelihood.n_points == 3 and likelihood.excluded == []


def test_nothing_left_is_refused_naming_exclude():
    hot = _spectrum(a=-np.array([800.0, 1200.0, 2000.0]), t=20000.0)
    with pytest.raises(LossfitValueError, match=r"^exclude: .*leaves no data point: all 3"):
        prepare(hot, species=CS, free=["a_minus", "eta_minus"], exclude="outside-validity")
    # every a < 0 point gone while a_minus is free: said in terms of the exclusion
    short = lf.LossSpectrum(-np.array([300.0, 400.0]), 50.0, [1e-25, 1e-25], [1e-26, 1e-26], kind="l3")
    beta = lf.LossSpectrum(np.array([600.0, 900.0]), 50.0, [1e-10, 1e-10], [1e-11, 1e-11], kind="beta")
    with pytest.raises(LossfitValueError, match=r"^exclude: a_minus is free but no data point has a < 0 once "):
        prepare([short, beta], species=CS, free=["a_minus", "eta_minus"], exclude="outside-validity")


def test_bad_values_and_decay_curves_are_refused_naming_exclude():
    for bad in ("outside", True, "outside_validity"):
        with pytest.raises(LossfitValueError, match=r"^exclude: must be None \(keep every point\) or "):
            prepare(_spectrum(), species=CS, free=["a_minus"], fixed={"eta_minus": 0.1}, exclude=bad)
    curve = lf.DecayCurve(t=[0.0, 0.1, 0.2], atoms=[1e5, 9e4, 8e4], atoms_err=[1e3] * 3, temperature=100.0,
                          temperature_err=5.0, a=-900.0, trap_hz=(50.0, 50.0, 10.0))
    with pytest.raises(LossfitValueError, match=r"^exclude: applies to spectra"):
        lf.fit([curve], species=CS, free=["a_minus"], exclude="outside-validity")


JOB = """[data]
species = "133Cs"
csv = [{{ path = "run1.csv", kind = "l3", label = "run 1" }}]
{extra}
[free]
a_minus = {{ prior = "default" }}
eta_minus = {{ prior = "default" }}

[sampler]
walkers = 6
steps = 12
seed = 1
"""


def _write_csv(path):
    spec = _spectrum()
    rows = ["a,temperature,value,error"] + [f"{a:.17g},{t:.17g},{v:.17g},{e:.17g}" for a, t, v, e in
                                             zip(spec.a, spec.temperature, spec.value, spec.error)]
    path.write_text("\n".join(rows) + "\n")


@pytest.mark.slow
def test_job_files_take_the_key_and_report_rebuilds_the_same_fit(tmp_path):
    # an end-to-end run (figures included, about 5 s): the slow tier
    _write_csv(tmp_path / "run1.csv")
    job_path = tmp_path / "job.toml"
    job_path.write_text(JOB.format(extra='exclude = "outside-validity"'))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        warnings.simplefilter("ignore", FitCheckWarning)
        result = run_job(job_path, tmp_path / "out", quiet=True)
        rebuilt = load_result(tmp_path / "out")
    with open(tmp_path / "out" / "summary.json") as fh:
        summary = json.load(fh)
    assert [(r["point"], r["a"]) for r in summary["excluded"]] == [(0, -300.0), (4, -3000.0)]
    assert summary["settings"]["exclude"] == "outside-validity"
    assert rebuilt.excluded == result.excluded and rebuilt.likelihood.n_points == 3


@pytest.mark.parametrize("extra, message", [
    ('exclude = "all"', "must be one of ['outside-validity']"),
    ('exclude = "outside-validity"\n[study]\nkind = "temperature"', "is not used by [study] kind = 'temperature'"),
])
def test_job_files_refuse_bad_exclude_values(tmp_path, extra, message):
    _write_csv(tmp_path / "run1.csv")
    with pytest.raises(JobError, match=r"^data\.exclude: ") as err:
        parse_job(JOB.format(extra=extra), str(tmp_path / "job.toml"))
    assert message in str(err.value)
    job = parse_job(JOB.format(extra=""), str(tmp_path / "job.toml"))
    assert job.exclude is None and job.fit_kwargs()["exclude"] is None
    job = parse_job(JOB.format(extra='exclude = "outside-validity"'), str(tmp_path / "job.toml"))
    assert job.fit_kwargs()["exclude"] == job.variant_kwargs("universal")["exclude"] == "outside-validity"
