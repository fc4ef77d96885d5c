"""Build the a < 0 recombination tables of two identical bosons and a third atom (a_bb = 0).

Run:  OMP_NUM_THREADS=1 python scripts/make_mixture_tables.py [B-X ...] [--processes N]
      (default: the four shipped systems, about 25 min on two busy processes)
      python scripts/make_mixture_tables.py --repack   (recompute ln T of the shipped files)

For each system the B-B-X momentum-space solver (lossfit.universal.solver.stm_mixture,
docs/stm-mixture.md section 8) gives the deep-dimer recombination rate at energy
E = hbar^2 k^2/(2 mu) for a < 0, J = 0.  At each x = k|a| of a grid uniform in ln x the
rate over the unitarity bound, P = K3/bound, is solved at N_THETA values of kappa*|a| spread
evenly over one Efimov period and fitted with the Efimov-channel form

    P = T (1 - e^{-4 eta}) / |1 + s11 exp(2 i theta - 2 eta)|^2,   theta = s0 ln(kappa*|a|),

exact in zero-range theory (the three-body parameter enters through one short-distance
boundary condition of the single Efimov channel), which gives T(x) and s11(x).  The same fit
of the zero-energy rates gives the threshold law T -> c4 x^4, arg s11 -> delta0.  The table
stores ln T (T blended from the fitted T and 1 - |s11|^2, :func:`blended_transmission`) and the
unwrapped phase of s11 in the layout of the identical-boson table
(lossfit.universal.tables.S11Table).  Details and measured errors: docs/heteronuclear-rates.md.
"""

import json
import math
import os
import subprocess
import sys
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")

from multiprocessing import Pool  # noqa: E402

import numpy as np  # noqa: E402

from lossfit.mixture import heteronuclear  # noqa: E402
from lossfit.universal.solver import stm_mixture as sm  # noqa: E402

SYSTEMS = [("133Cs", "6Li"), ("133Cs", "7Li"), ("87Rb", "40K"), ("87Rb", "41K")]
X_GRID = np.exp(np.linspace(math.log(0.01), math.log(10.0), 25))      # 8 per decade
N_THETA = 5
ETA = 0.1
CUTOFF = 1e5
QMIN = 1e-4
OUT = Path(__file__).resolve().parents[1] / "lossfit" / "universal" / "data"


def channel_fit(theta, p, eta):
    """T, s11 (complex) and the relative residual from P over one period of theta."""
    y = (1.0 - math.exp(-4.0 * eta)) / np.asarray(p)
    a = np.c_[np.ones_like(theta), np.cos(2.0 * theta), np.sin(2.0 * theta)]
    c, *_ = np.linalg.lstsq(a, y, rcond=None)
    # T/(1 - e^-4eta)/P = 1 + |s|^2 e^{-4 eta} + 2 |s| e^{-2 eta} cos(2 theta + arg s)
    r = math.hypot(c[1], c[2]) / c[0]                 # 2 z/(1 + z^2), z = |s11| e^{-2 eta}
    z = (1.0 - math.sqrt(max(1.0 - r * r, 0.0))) / r
    phase = math.atan2(-c[2], c[1])
    return {"T": (1.0 + z * z) / c[0], "s11": z * math.exp(2.0 * eta) * complex(math.cos(phase), math.sin(phase)),
            "residual": float(np.max(np.abs(a @ c - y)) / np.max(np.abs(y)))}


def blended_transmission(t_fit, s11):
    """1 - |s11|^2 from the two fitted quantities, weighted by 1 - T.

    T = 1 - |s11|^2 is exact, but each fitted value carries the extrapolation error: a
    common relative error of the rates at one x goes into T alone (|s11| comes from a
    ratio), so where T -> 1 (|s11| small) 1 - |s11|^2 is the better value; where T -> 0
    (threshold) 1 - |s11|^2 loses every digit (its absolute error, ~1e-5, exceeds T there)
    and the fitted T is the one to keep.  The weight 1 - T of the fitted T makes the other
    term T (1 - |s11|^2), negligible at threshold.
    """
    t_fit = np.clip(t_fit, 0.0, 1.0)
    return (1.0 - t_fit) * t_fit + t_fit * (1.0 - np.abs(s11) ** 2)


def one_x(args):
    ratio, km, x = args
    s = sm.MixtureSTM(ratio, cutoff=CUTOFF, qmin=QMIN)
    kappas = abs(km) * np.exp(np.arange(N_THETA) * math.pi / (N_THETA * s.s0))
    p, err = [], []
    for k in kappas:
        out = s.recombination_energy(k, ETA, x * x)
        p.append(out["k3"] / out["bound"])
        err.append(out["error"] / out["k3"])
    return x, channel_fit(s.s0 * np.log(kappas), p, ETA), max(err)


def threshold(ratio):
    s = sm.MixtureSTM(ratio, cutoff=CUTOFF, qmin=QMIN)
    km = s.kappa_a_minus()
    kappas = abs(km) * np.exp(np.arange(N_THETA) * math.pi / (N_THETA * s.s0))
    # K3(0) = prefactor c4 (1 - e^-4eta)/|1 + e^{i delta0} e^{2 i theta - 2 eta}|^2 with the
    # bound's E^-2 absorbed: P/x^4 -> c4 (...) at x -> 0
    pref = s.unitarity_bound(1.0)                     # bound at eps = 1 (|a| = 1), hbar a^4/m_B
    k3 = [s.recombination(k, ETA, negative_a=True)["deep"] for k in kappas]
    fit = channel_fit(s.s0 * np.log(kappas), np.asarray(k3) / pref, ETA)
    return s, km, fit


def build(pair, pool):
    b, x = pair
    system = heteronuclear(b, x)
    ratio = system.mass_ratio
    s, km, thr = threshold(ratio)
    rows = sorted(pool.imap_unordered(one_x, [(ratio, km, v) for v in X_GRID]))
    xs = np.array([r[0] for r in rows])
    t_fit = np.array([r[1]["T"] for r in rows])
    s11 = np.array([r[1]["s11"] for r in rows])
    t = blended_transmission(t_fit, s11)
    phase = np.unwrap(np.angle(s11))
    # put the threshold phase on the table's branch
    delta0 = math.atan2(thr["s11"].imag, thr["s11"].real)
    delta0 += 2.0 * math.pi * round((phase[0] - delta0) / (2.0 * math.pi))
    residual = np.array([r[1]["residual"] for r in rows])
    extrapolation = np.array([r[2] for r in rows])
    git = subprocess.run(["git", "rev-parse", "HEAD"], capture_output=True, text=True).stdout.strip()
    meta = {
        "quantity": f"s11(k|a|) for a < 0, J = 0, a_bb = 0, {b}-{b}-{x} (two identical bosons B and X)",
        "energy_convention": "E = hbar^2 k^2/(2 mu), mu the B-X reduced mass; x = k|a|",
        "k3_formula": "K3 (events, rate K3 n_B^2 n_X) = 8 pi^2 hbar^5 (2 m_B + m_X)^{3/2}/(m_B^3 m_X^{3/2} E^2) "
                      "(1-|s11|^2)(1-exp(-4 eta))/|1 + s11 exp(2 i theta - 2 eta)|^2, theta = s0 ln(kappa*|a|), "
                      "kappa* = kappa_star_a_minus/a_minus",
        "method": "B-B-X STM equations at complex energy, extrapolated to the real axis (docs/stm-mixture.md "
                  "section 8); Efimov-channel fit over one period of kappa* (docs/heteronuclear-rates.md)",
        "cutoff": CUTOFF, "qmin": QMIN, "eta_used": ETA, "n_theta": N_THETA,
        "x_grid": {"kind": "logspace", "start": float(xs[0]), "stop": float(xs[-1]), "num": int(xs.size)},
        "channel_fit_residual_max": float(residual.max()),
        "extrapolation_error_rel_max": float(extrapolation.max()),
        "threshold_fit_residual": thr["residual"],
        "threshold_abs_s11": abs(thr["s11"]),
        "git_hash": git,
    }
    name = f"s11_mixture_{b}_{x}.npz"
    np.savez(OUT / name, x=xs, log_transmission=np.log(t), transmission_fit=t_fit, phase=phase, s11=s11,
             threshold_c4=thr["T"], threshold_phase=delta0, kappa_star_a_minus=km, s0=s.s0,
             mass_ratio=ratio, fit_residual=residual, extrapolation_error=extrapolation,
             metadata=json.dumps(meta, sort_keys=True))
    print(f"{name}: s0 = {s.s0:.6f}, kappa* a_- = {km:.7f}, c4 = {thr['T']:.6g}, |s11(0)| = {abs(thr['s11']):.6f}, "
          f"T(x_last) = {t[-1]:.5f} (unitarity {1 - math.exp(-2 * math.pi * s.s0):.5f}), max fit residual "
          f"{residual.max():.1e}, max extrapolation error {extrapolation.max():.1e}", flush=True)


def repack(path):
    """Rewrite a table's ln T from its stored fitted T and s11 (:func:`blended_transmission`)."""
    with np.load(path) as d:
        data = {k: d[k] for k in d.files}
    t_fit = data.get("transmission_fit", np.exp(data["log_transmission"]))
    data["transmission_fit"] = t_fit
    data["log_transmission"] = np.log(blended_transmission(t_fit, data["s11"]))
    np.savez(path, **data)
    print(f"{path.name}: T(x_last) = {math.exp(data['log_transmission'][-1]):.5f} (unitarity "
          f"{1 - math.exp(-2 * math.pi * float(data['s0'])):.5f})")


def main(argv):
    if "--repack" in argv:
        for pair in SYSTEMS:
            repack(OUT / f"s11_mixture_{pair[0]}_{pair[1]}.npz")
        return
    processes = 2
    if "--processes" in argv:
        i = argv.index("--processes")
        processes = int(argv[i + 1])
        del argv[i:i + 2]
    pairs = [tuple(p.split("-")) for p in argv] or SYSTEMS
    with Pool(processes) as pool:
        for pair in pairs:
            build(pair, pool)


if __name__ == "__main__":
    main(sys.argv[1:])
