"""Speed and accuracy of the zero-range rates of two identical bosons and a third atom.

Prints, for each shipped system, the worst relative difference of the fixed thermal rule
(lossfit.universal.mixture_model.MixturePlan) from the adaptive reference quadrature over
a grid of points, temperatures and eta, and the time of a 60-point spectrum likelihood
(min/median of repeats) against two baselines measured in the same run: the same
likelihood on the reference path (adaptive quadrature at rtol 1e-7) and the identical-boson
zero-range likelihood of 60 a < 0 points (133Cs). The same for atom-dimer relaxation at a > 0
(beta of B + (BX), MixturePlan with process=ATOM_DIMER): accuracy over points whose
Boltzmann weight beyond the table's end is within the accepted limit, and a 60-point beta likelihood
against the identical-boson one (133Cs). Machines are shared: compare ratios.

Run: python benchmarks/bench_mixture.py
"""

import os
import sys
import warnings

import numpy as np

import lossfit as lf
from lossfit.inference.likelihood import SpectrumLikelihood
from lossfit.mixture import heteronuclear
from lossfit.rates import natural_unit
from lossfit.thermal import ATOM_DIMER, THREE_BODY
from lossfit.units import NK
from lossfit.universal.mixture_model import WEIGHT_BEYOND_TABLE_MAX, resolve_model, shipped_systems, weight_above
from lossfit.universal.models import scale_wavenumber_a0

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_targets import _times as bench_times  # noqa: E402


def _times(func, repeat=7, number=20):
    # the timing of bench_targets.py, with more calls per repeat
    return bench_times(func, repeat, number)


def accuracy(system):
    model = resolve_model(None, system)
    a = -np.geomspace(5.5 * system.r_vdw, 1e5, 60)
    worst = 0.0
    for temperature in (10.0, 100.0, 1000.0):
        q = a * scale_wavenumber_a0(temperature * NK, system.mass)
        unit = natural_unit(THREE_BODY, np.full(a.size, temperature), system.mass)
        plan = model.three_body_plan(a, q, unit)
        for a_minus in (-300.0, -2000.0):
            for eta in (0.005, 0.05, 0.5):
                efimov = lf.Efimov(a_minus=a_minus, eta_minus=eta)
                fast = plan.evaluate(efimov) / unit
                ref, _ = model.reference_average(THREE_BODY, a, q, efimov, "total", 1e-10)
                worst = max(worst, float(np.max(np.abs(fast / ref - 1.0))))
    return worst


def atom_dimer_accuracy(system):
    """Worst relative difference of the fixed rule from the adaptive reference (rtol 1e-10)
    for beta at 60 a > 0 per temperature (those within the breakup-weight limit), and the
    mean number of nodes per point."""
    model = resolve_model(None, system)
    a = np.geomspace(5.5 * system.r_vdw, 1e5, 60)
    worst, nodes = 0.0, []
    for temperature in (1.0, 10.0, 100.0):
        q = a * scale_wavenumber_a0(temperature * NK, system.mass)
        inside = weight_above(q * model.atom_dimer_wavenumber_ratio, model.atom_dimer_table.x_max) \
            <= WEIGHT_BEYOND_TABLE_MAX
        a_t, q_t = a[inside], q[inside]
        unit = natural_unit(ATOM_DIMER, np.full(a_t.size, temperature), system.mass)
        plan = model.atom_dimer_plan(a_t, q_t, unit)
        nodes.append(np.mean(plan._stop - plan._first))
        for a_star in (300.0, 2000.0):
            for eta in (0.005, 0.05, 0.5):
                efimov = lf.Efimov(a_star=a_star, eta_star=eta)
                fast = plan.evaluate(efimov) / unit
                ref, _ = model.reference_average(ATOM_DIMER, a_t, q_t, efimov, "relaxation", 1e-10)
                worst = max(worst, float(np.max(np.abs(fast / ref - 1.0))))
    return worst, float(np.mean(nodes))


def beta_spectrum(system, a_star, temperature):
    efimov = lf.Efimov(a_star=a_star, eta_star=0.1)
    a = np.geomspace(5.5 * system.r_vdw, 4.0 * a_star, 60)
    values = lf.beta(a, temperature, species=system, efimov=efimov)
    return lf.LossSpectrum(a=a, temperature=np.full(a.size, temperature), value=values, error=0.2 * values,
                           kind="beta"), efimov


def spectrum(system, a_minus):
    efimov = lf.Efimov(a_minus=a_minus, eta_minus=0.1)
    a = -np.geomspace(5.5 * system.r_vdw, 30.0 * abs(a_minus), 60)
    values = lf.l3(a, 100.0, species=system, efimov=efimov)
    return lf.LossSpectrum(a=a, temperature=np.full(a.size, 100.0), value=values, error=0.2 * values, kind="l3"), efimov


def main():
    warnings.simplefilter("ignore")
    print("fixed rule vs adaptive reference (rtol 1e-10): 60 points 5.5 r_vdW..1e5 a0, 10/100/1000 nK, "
          "a_- -300/-2000 a0, eta 0.005/0.05/0.5")
    for boson, other in shipped_systems():
        system = heteronuclear(boson, other)
        print(f"  {system.name:<18} worst relative difference {accuracy(system):.1e}")
    print("\n60-point L3 likelihood, one walker (min / median of 7 x 20 calls)")
    cs_li = heteronuclear("133Cs", "6Li")
    data, efimov = spectrum(cs_li, -320.0)
    fast = SpectrumLikelihood(data, cs_li, None)
    reference = SpectrumLikelihood(data, cs_li, None, rtol=1e-7)
    cs = lf.species("133Cs")
    cs_data, cs_efimov = spectrum(cs, -900.0)
    identical = SpectrumLikelihood(cs_data, cs, None)
    plan = fast.blocks[0].plan
    t_plan = _times(lambda: plan.evaluate(efimov))
    t_fast = _times(lambda: fast(efimov))
    t_ref = _times(lambda: reference(efimov), repeat=3, number=2)
    t_identical = _times(lambda: identical(cs_efimov))
    print(f"  thermal averages alone       {t_plan[0] * 1e6:8.1f} / {t_plan[1] * 1e6:8.1f} us   "
          f"= {t_plan[0] / data.a.size * 1e6:.2f} us per point (target 0.3), "
          f"{np.mean(plan._stop - plan._first):.0f} nodes per point")
    print(f"  133Cs-133Cs-6Li fixed rule   {t_fast[0] * 1e6:8.1f} / {t_fast[1] * 1e6:8.1f} us")
    print(f"  same, reference path         {t_ref[0] * 1e6:8.1f} / {t_ref[1] * 1e6:8.1f} us   "
          f"ratio {t_ref[1] / t_fast[1]:.0f}x")
    print(f"  133Cs identical bosons       {t_identical[0] * 1e6:8.1f} / {t_identical[1] * 1e6:8.1f} us   "
          f"mixture/identical {t_fast[1] / t_identical[1]:.2f}")

    print(f"\natom-dimer beta (a > 0): fixed rule vs adaptive reference (rtol 1e-10): 60 points "
          f"5.5 r_vdW..1e5 a0 less those with more than {WEIGHT_BEYOND_TABLE_MAX:g} of the weight beyond the table, "
          "1/10/100 nK, a* 300/2000 a0, eta* 0.005/0.05/0.5")
    for boson, other in shipped_systems():
        system = heteronuclear(boson, other)
        worst, nodes = atom_dimer_accuracy(system)
        print(f"  {system.name:<18} worst relative difference {worst:.1e}, {nodes:.0f} nodes per point")
    print("\n60-point beta likelihood, one walker (min / median of 7 x 20 calls)")
    ad_data, ad_efimov = beta_spectrum(cs_li, 900.0, 10.0)
    ad_fast = SpectrumLikelihood(ad_data, cs_li, None)
    ad_reference = SpectrumLikelihood(ad_data, cs_li, None, rtol=1e-7)
    cs_ad, cs_ad_efimov = beta_spectrum(cs, 1000.0, 100.0)
    ad_identical = SpectrumLikelihood(cs_ad, cs, None)
    ad_plan = ad_fast.blocks[0].plan
    t_plan = _times(lambda: ad_plan.evaluate(ad_efimov))
    t_fast = _times(lambda: ad_fast(ad_efimov))
    t_ref = _times(lambda: ad_reference(ad_efimov), repeat=3, number=2)
    t_identical = _times(lambda: ad_identical(cs_ad_efimov))
    print(f"  thermal averages alone       {t_plan[0] * 1e6:8.1f} / {t_plan[1] * 1e6:8.1f} us   "
          f"= {t_plan[0] / ad_data.a.size * 1e6:.2f} us per point, "
          f"{np.mean(ad_plan._stop - ad_plan._first):.0f} nodes per point")
    print(f"  133Cs-133Cs-6Li fixed rule   {t_fast[0] * 1e6:8.1f} / {t_fast[1] * 1e6:8.1f} us")
    print(f"  same, reference path         {t_ref[0] * 1e6:8.1f} / {t_ref[1] * 1e6:8.1f} us   "
          f"ratio {t_ref[1] / t_fast[1]:.0f}x")
    print(f"  133Cs identical bosons       {t_identical[0] * 1e6:8.1f} / {t_identical[1] * 1e6:8.1f} us   "
          f"mixture/identical {t_fast[1] / t_identical[1]:.2f}")


if __name__ == "__main__":
    main()
