"""Compile lossfit's numba kernels into their on-disk cache (run by conftest.py).

``python tests/_warm_kernels.py rates`` or ``... curves``: each part touches the compiled
paths that the test suite and its command-line subprocesses use, on tiny invented inputs
(not measured data). Nothing is checked here; the tests check the results.
"""

import sys
import warnings

import numpy as np

import lossfit as lf


def rates():
    cs = lf.species("133Cs")
    ef = lf.Efimov.universal(-900.0, 0.08)
    a = np.array([-2000.0, -900.0])
    for model in ("zero-range", "threshold", "capped"):
        lf.l3(a, 50.0, species=cs, efimov=ef, model=model)
        lf.l3(-a, 50.0, species=cs, efimov=ef, model=model)
        lf.beta(-a, 50.0, species=cs, efimov=ef, model=model)
    lf.l3(-a, 50.0, species=cs, efimov=ef, channel="total")
    lf.l3(a, 50.0, species=cs, efimov=ef, rtol=1e-6)
    cs_li = lf.heteronuclear("133Cs", "6Li")
    mix = lf.Efimov(a_minus=-320.0, eta_minus=0.1, a_star=400.0, eta_star=0.1, a_plus=500.0, eta_plus=0.1)
    lf.l3(np.array([-1500.0, -400.0]), 100.0, species=cs_li, efimov=mix)
    lf.beta(np.array([1500.0]), 100.0, species=cs_li, efimov=mix)
    rng = np.random.default_rng(0)
    values = lf.l3(a, 50.0, species=cs, efimov=ef) * (1 + 0.1 * rng.standard_normal(a.size))
    spec = lf.LossSpectrum(a, 50.0, values, 0.1 * values, kind="l3")
    lf.fit([spec], species=cs, free=["a_minus", "eta_minus"], walkers=6, steps=4, seed=0, progress=False)


def curves():
    from lossfit.inference.curve_fits import fit_curves_individually
    from lossfit.simulate import invented_campaign
    curves_, res, _ = invented_campaign(1, n_fields=1, dimer_fields=1, positive_fields=1)
    fit_curves_individually(curves_, species="133Cs", resonance=res)
    lf.fit(curves_[:2], species="133Cs", free=["a_minus", "eta_minus"], priors={"a_minus": (-3000.0, -300.0)},
           resonance=res, walkers=6, steps=2, seed=0, progress=False)


if __name__ == "__main__":
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        {"rates": rates, "curves": curves}[sys.argv[1]]()
