#!/usr/bin/env python
"""Write lossfit/universal/data/s_ad_positive_a.npz: the a > 0 atom-dimer universal functions.

Deterministic (no timestamps, no random numbers; the only run-dependent metadata is the
git commit of the code, ``git rev-parse HEAD``).  Everything comes from the STM solver
(lossfit/universal/solver/stm.py, docs/stm.md): for each k_AD a one LU solve on the
deformed contour serves every three-body force h (rank one), and s_AD, T_AD and the
breakup coefficients are least-squares fits over 6 values of Phi (one period) at
eta = 0.1 and 0.4 (:func:`stm.s_ad_fit`).

Convention (docs/solver.md 5b; w = e^{2 i Phi - 2 eta}, Phi = s0 ln(kappa* a/sqrt 2)
- arg Gamma(1 + i s0)):

    P_relax = T_AD (1 - e^{-4 eta}) / |1 + s_AD w|^2,      T_AD = 1 - |s_AD|^2 below breakup,
    beta_relax = 3 pi hbar P_relax / (2 m k_AD),  E - E_D = 3 hbar^2 k_AD^2/(4 m),
    P_break = (A + 2 Re(B w) + C |w|^2) / |1 + s_AD w|^2   (above breakup).

Above breakup T_AD < 1 - |s_AD|^2: the Efimov-channel flux also leaves as three atoms.

Keys (float64 unless stated):
    kad                 k_AD a: two uniform-in-ln segments [1e-3, 2/sqrt 3], [2/sqrt 3, 1e3],
                        concatenated with 2/sqrt 3 once, at index junction_index (int)
    log_transmission    ln T_AD  (= ln(1 - |s_AD|^2) below breakup)
    log_one_minus_abs_s2  ln(1 - |s_AD|^2) (differs from log_transmission above breakup)
    phase               arg s_AD, unwrapped along the grid (rad)
    s_ad                complex128 s_AD
    breakup_A, breakup_B (complex128), breakup_C   NaN below breakup, 0 at the junction
    threshold_c1        lim T_AD/(k_AD a),  threshold_phase = lim arg s_AD (k_AD -> 0)
    kappa_star_a_star   kappa* a* where the eta -> 0 threshold relaxation peaks
    c_beta              3 pi c1 / 4
    kad_err, err_transmission_rel, err_phase, err_s_abs   error estimate (every 4th node)
    tail_kad, tail_s_over_s11   s_AD / s11(unitarity) on the top decade
    metadata            JSON string

Usage: OMP_NUM_THREADS=1 python scripts/make_atom_dimer_table.py [--per-decade N] [--quick]
       [--out PATH] [--no-midpoints]
"""

import argparse
import json
import math
import os
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
sys.path.insert(0, ROOT)
os.environ.setdefault("OMP_NUM_THREADS", "1")

from scipy.interpolate import CubicSpline  # noqa: E402
from scipy.special import loggamma  # noqa: E402

from lossfit.batch.provenance import git_revision  # noqa: E402
from lossfit.constants import S0  # noqa: E402
from lossfit.universal.solver import stm  # noqa: E402
from lossfit.universal.solver.scattering import s11_unitarity  # noqa: E402

KB = 2.0 / math.sqrt(3.0)          # breakup threshold k_AD a
ETAS = (0.1, 0.4)
NPHI = 6
KAPPA0 = 0.15

# dfac: (k_AD a <= 100, > 100) panel widths on the dense part of the ray, in units of
# k_AD a tan(phi) (convergence: T_AD to 1e-12 at 0.5, 5e-8 at 1.25 for k_AD a <= 150)
MAIN = dict(cut=1e8, dfac=(0.5, 1.25), per_decade=48, narc=32)
COARSE = dict(cut=1e7, dfac=(1.0, 1.6), per_decade=36, narc=24)


def git_hash():
    return git_revision() or "unknown"


def solve(kad, cut, dfac, per_decade, narc):
    """s_ad_fit dict at one k_AD a (cutoff cut * max(1, k_AD a))."""
    cutoff = cut * max(1.0, kad)
    phi = min(0.5, 0.6 * math.atan(2.0 / kad))
    fac = dfac[0] if kad <= 100.0 else dfac[1]
    dmax = fac * kad * math.tan(phi) if kad > 4.0 else None
    sol = stm.AtomDimerRankOne(kad, cutoff=cutoff, phi=phi, per_decade=per_decade,
                               narc=narc, dmax=dmax)
    r = stm.s_ad_fit(sol, ETAS, NPHI, KAPPA0, cutoff)
    r["nodes"] = sol.nodes
    return r


def grid(per_decade):
    n1 = int(round(math.log10(KB / 1e-3) * per_decade)) + 1
    n2 = int(round(math.log10(1e3 / KB) * per_decade)) + 1
    g1 = np.exp(np.linspace(math.log(1e-3), math.log(KB), n1))
    g2 = np.exp(np.linspace(math.log(KB), math.log(1e3), n2))
    g1[-1] = KB
    g2[0] = KB
    return np.concatenate([g1, g2[1:]]), n1 - 1


def unwrap_phase(s):
    return np.unwrap(np.angle(s))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--per-decade", type=int, default=32)
    ap.add_argument("--quick", action="store_true", help="8 per decade, up to k_AD a = 30")
    ap.add_argument("--no-midpoints", action="store_true")
    ap.add_argument("--out", default=os.path.join(ROOT, "lossfit", "universal", "data",
                                                  "s_ad_positive_a.npz"))
    args = ap.parse_args()
    t0 = time.time()
    per_decade = 8 if args.quick else args.per_decade
    kad, jidx = grid(per_decade)
    if args.quick:
        kad = kad[kad <= 30.0]
    n = kad.size

    res = []
    for i, k in enumerate(kad):
        res.append(solve(k, **MAIN))
        if i % 10 == 0 or k > 200:
            print(f"[{time.time() - t0:7.1f} s] {i}/{n} k_AD a = {k:.5g} nodes {res[-1]['nodes']}",
                  flush=True)
    s = np.array([r["s_ad"] for r in res])
    t_ad = np.array([r["t_ad"] for r in res])
    t1 = np.array([r["one_minus_abs_s2"] for r in res])
    ph = unwrap_phase(s)
    fit_res = max(r["max_rel_residual"] for r in res)
    mod_chk = max(abs(r["modulus_check"]) for r in res)
    above = kad > KB
    ba = np.full(n, np.nan)
    bb = np.full(n, np.nan + 0j)
    bc = np.full(n, np.nan)
    for i in np.nonzero(above)[0]:
        ba[i], bb[i], bc[i] = res[i]["breakup_A"], res[i]["breakup_B"], res[i]["breakup_C"]
    ba[jidx] = bc[jidx] = 0.0             # P_break = 0 at the breakup threshold
    bb[jidx] = 0.0
    br_res = max((res[i]["breakup_max_abs_residual"] for i in np.nonzero(above)[0]), default=0.0)
    below_chk = float(np.max(np.abs(t_ad[~above] / t1[~above] - 1)))
    print(f"[{time.time() - t0:7.1f} s] main grid done; max fit residual {fit_res:.1e}, "
          f"modulus check {mod_chk:.1e}, T_AD vs 1-|s|^2 below breakup {below_chk:.1e}",
          flush=True)

    # error estimate: smaller cutoff and coarser quadrature on every 4th node (+ last)
    idx = np.unique(np.r_[np.arange(0, n, 4), jidx, n - 1])
    idx = idx[idx < n]
    rc = [solve(kad[i], **COARSE) for i in idx]
    err_t = np.array([abs(r["t_ad"] / t_ad[i] - 1) for r, i in zip(rc, idx)])
    err_p = np.array([abs(np.angle(r["s_ad"] / s[i])) for r, i in zip(rc, idx)])
    err_s = np.array([abs(r["s_ad"] - s[i]) for r, i in zip(rc, idx)])
    print(f"[{time.time() - t0:7.1f} s] error estimate: T_AD {err_t.max():.1e}, phase "
          f"{err_p.max():.1e} rad, |ds| {err_s.max():.1e}", flush=True)

    # threshold limits: T_AD/k and arg s are analytic in k near 0 (fit c + d k + e k^2)
    kt = np.array([1e-6, 2e-6, 4e-6, 8e-6, 1.6e-5])
    rt = [solve(k, **MAIN) for k in kt]
    vt = np.array([r["t_ad"] for r in rt]) / kt
    pt = np.unwrap(np.angle([r["s_ad"] for r in rt]))
    xt = np.c_[np.ones_like(kt), kt, kt ** 2]
    c1 = float(np.linalg.lstsq(xt, vt, rcond=None)[0][0])
    ph0 = float(np.linalg.lstsq(xt, pt, rcond=None)[0][0])
    # peak of the eta -> 0 threshold relaxation: arg s + 2 Phi = pi (mod 2 pi)
    phi_star = (math.pi - ph0) / 2.0
    lk = (phi_star + float(np.imag(loggamma(1 + 1j * S0)))) / S0 + math.log(math.sqrt(2.0))
    period = math.pi / S0                      # Phi -> Phi + pi
    lk += period * round((math.log(0.07) - lk) / period)
    kas = math.exp(lk)
    c_beta = 3.0 * math.pi * c1 / 4.0
    print(f"[{time.time() - t0:7.1f} s] c1 = {c1:.8f}, C_beta = {c_beta:.6f}, "
          f"arg s(0) = {ph0:.9f}, kappa* a* = {kas:.8f}", flush=True)

    # approach to the unitarity s11 (k^2 = 3 k_AD^2/4 - 1/a^2, L = a) on the top decade
    top = np.nonzero(kad >= 100.0)[0]
    ku = np.sqrt(0.75 * kad[top] ** 2 - 1.0)
    ratio = s[top] / s11_unitarity(ku)
    dmod = np.abs(ratio) - 1.0
    dph = np.angle(ratio)
    pm = np.polyfit(np.log(kad[top]), np.log(np.abs(dmod)), 1)[0] if top.size > 2 else float("nan")
    pp = np.polyfit(np.log(kad[top]), np.log(np.abs(dph)), 1)[0] if top.size > 2 else float("nan")
    tk = t_ad[top] * kad[top]
    tail_note = (
        "k_AD a -> infinity: s_AD -> s11 of unitarity, s11 = -exp(-pi s0) (K a/2)^(-2 i s0) "
        "Gamma(1+i s0)/Gamma(1-i s0), K = sqrt(2) k, k^2 a^2 = 3 (k_AD a)^2/4 - 1 "
        "(docs/solver.md 3). On 100 <= k_AD a <= 1e3: |s_AD/s11| - 1 ~ (k_AD a)^%.2f "
        "(%.2e at the last node), arg(s_AD/s11) ~ (k_AD a)^%.2f (%.2e rad at the last node). "
        "T_AD k_AD a -> %.4f (T_AD ~ 1/(k_AD a): the atom-dimer entrance channel decouples)."
        % (pm, dmod[-1] if top.size else float("nan"), pp, dph[-1] if top.size else float("nan"),
           tk[-1] if top.size else float("nan")))
    print(tail_note, flush=True)

    # interpolation check: cubic splines in ln k per segment (T_AD from log_transmission,
    # Re and Im of s_AD, breakup A, B, C) against direct solves at interval midpoints
    interp = {}
    if not args.no_midpoints:
        segs = [np.arange(0, jidx + 1), np.arange(jidx, n)]
        rows = []
        for sg in segs:
            if sg.size < 4:
                continue
            lx = np.log(kad[sg])
            spt = CubicSpline(lx, np.log(t_ad[sg]))
            sps = CubicSpline(lx, s[sg])
            spp = CubicSpline(lx, ph[sg])
            brk = sg[0] == jidx
            if brk:
                spa, spb, spc = (CubicSpline(lx, v[sg]) for v in (ba, bb, bc))
            for j in range(sg.size - 1):
                km = math.exp(0.5 * (lx[j] + lx[j + 1]))
                if km > 100.0 and j % 4:
                    continue
                r = solve(km, **MAIN)
                x = math.log(km)
                dp = spp(x) - np.angle(r["s_ad"])
                row = [km, abs(math.exp(spt(x)) / r["t_ad"] - 1), abs(sps(x) - r["s_ad"]),
                       abs((dp + math.pi) % (2 * math.pi) - math.pi), 0.0]
                if brk:
                    # breakup numerator scale: A + C (>= |A + 2 Re(B w) + C|w|^2| bound)
                    scale = r["breakup_A"] + r["breakup_C"]
                    row[4] = max(abs(spa(x) - r["breakup_A"]), abs(spb(x) - r["breakup_B"]),
                                 abs(spc(x) - r["breakup_C"])) / scale
                rows.append(row)
        rows = np.array(rows)
        far = np.abs(np.log(rows[:, 0] / KB)) > 0.2
        interp = dict(
            scheme="cubic spline (not-a-knot) in ln k_AD a per segment of log_transmission, "
                   "Re s_ad, Im s_ad, breakup_A, Re/Im breakup_B, breakup_C",
            max_rel_err_transmission=float(rows[:, 1].max()),
            max_abs_err_s_ad=float(rows[:, 2].max()),
            max_rel_err_breakup=float(rows[:, 4].max()),
            worst_kad=dict(transmission=float(rows[rows[:, 1].argmax(), 0]),
                           s_ad=float(rows[rows[:, 2].argmax(), 0]),
                           breakup=float(rows[rows[:, 4].argmax(), 0])),
            beyond_20pc_of_breakup=dict(max_rel_err_transmission=float(rows[far, 1].max()),
                                        max_abs_err_s_ad=float(rows[far, 2].max()),
                                        max_rel_err_breakup=float(rows[far, 4].max())),
            phase_spline_max_err_rad=float(rows[:, 3].max()),
            phase_note="the phase spline is poor near breakup where |s_AD| ~ 2e-3 (phase "
                       "error x |s| is what matters); prefer Re/Im splines",
            midpoints="all intervals below k_AD a = 100, every 4th above")
        print(f"[{time.time() - t0:7.1f} s] interpolation: {interp}", flush=True)

    meta = dict(
        quantity="s_AD(k_AD a) of the Efimov channel, a > 0, J = 0, three identical bosons, "
                 "zero range; T_AD; breakup coefficients A, B, C",
        method=("STM (Skorniakov-Ter-Martirosian) equation with three-body force h tied to "
                "kappa* by the unitarity trimer on the same grid; deformed contour (ray at "
                "angle phi, arc, real tail) below and above breakup; one LU per k_AD a, h "
                "as a rank-one update; s_AD and T_AD from a linear least-squares fit of "
                "1/P_deep over 6 values of Phi (one period) at eta = 0.1 and 0.4; "
                "lossfit/universal/solver/stm.py, docs/stm.md"),
        conventions=dict(
            P_relax="T_AD (1 - exp(-4 eta)) / |1 + s_AD exp(2 i Phi - 2 eta)|^2; "
                    "T_AD = exp(log_transmission) (= 1 - |s_AD|^2 below breakup only)",
            Phi="s0 ln(kappa* a / sqrt 2) - arg Gamma(1 + i s0)",
            beta_relax="3 pi hbar P_relax / (2 m k_AD)  (dimers lost: dn_D/dt = -beta n_A n_D)",
            energy="E - E_D = 3 hbar^2 k_AD^2 / (4 m), E_D = -hbar^2/(m a^2); "
                   "breakup at k_AD a = 2/sqrt 3",
            P_break="(A + 2 Re(B w) + C |w|^2) / |1 + s_AD w|^2, w = exp(2 i Phi - 2 eta); "
                    "beta_break = 3 pi hbar P_break / (2 m k_AD)",
            threshold="T_AD -> c1 k_AD a; beta -> C_beta sinh(2 eta)/(sin^2[s0 ln(a/a*)] + "
                      "sinh^2 eta) hbar a/m, C_beta = 3 pi c1/4",
        ),
        kad_grid=dict(kind="two uniform-in-ln segments joined at 2/sqrt 3",
                      segments=[[1e-3, KB], [KB, 1e3]], per_decade=per_decade,
                      junction_index=int(jidx), n=int(n)),
        extraction=dict(etas=list(ETAS), nphi=NPHI, kappa0_a=KAPPA0,
                        max_rel_fit_residual=float(fit_res),
                        max_modulus_check=float(mod_chk),
                        below_breakup_T_AD_vs_1_minus_abs_s2=below_chk,
                        breakup_max_abs_fit_residual=float(br_res)),
        numerics=dict(cutoff="Lambda a = %g max(1, k_AD a)" % MAIN["cut"],
                      nodes_per_decade=MAIN["per_decade"], arc_nodes=MAIN["narc"],
                      gauss_order=8, qmin=1e-6,
                      contour_angle="phi = min(0.5, 0.6 atan(2/(k_AD a)))",
                      ray_end="Q = 20 max(1, k_AD a)",
                      dense_panels="k_AD a > 4: panels <= f k_AD a tan(phi) wide on "
                                   "[0, 1.5 k_AD a], f = %g (k_AD a <= 100), %g (above)"
                                   % MAIN["dfac"],
                      error_run=COARSE),
        estimated_error=dict(transmission_rel_max=float(err_t.max()),
                             phase_rad_max=float(err_p.max()), s_abs_max=float(err_s.max()),
                             note="difference to a run with Lambda/10 and a coarser "
                                  "quadrature (error_run); the cutoff error falls like "
                                  "1/Lambda, so this overstates the table's error ~10x"),
        interpolation=interp,
        threshold=dict(c1=c1, arg_s0=ph0, kappa_star_a_star=kas, c_beta=c_beta,
                       fit="T_AD/k and arg s fitted as c + d k + e k^2 on k_AD a = 1e-6..1.6e-5"),
        tail_note=tail_note,
        runtime_recommendation=(
            "spline each segment separately; P_relax numerator T_AD = exp(log_transmission) "
            "(NOT 1 - |s_AD|^2 above breakup); s_AD from splines of Re and Im of s_ad "
            "(1 - |s_AD|^2 = 0.999996 near breakup makes |s| from log_one_minus_abs_s2 "
            "ill-conditioned); below the grid T_AD = c1 k_AD a, s_AD -> s_ad[0]; above the "
            "grid s_AD ~ s11_unitarity (1 - 2.45/(k_AD a)), T_AD ~ 4.91/(k_AD a)"),
        s0=S0, git_hash=git_hash(),
    )
    os.makedirs(os.path.dirname(args.out), exist_ok=True)
    np.savez_compressed(
        args.out, kad=kad, junction_index=np.int64(jidx), log_transmission=np.log(t_ad),
        log_one_minus_abs_s2=np.log(t1), phase=ph, s_ad=s.astype(np.complex128),
        breakup_A=ba, breakup_B=bb.astype(np.complex128), breakup_C=bc,
        threshold_c1=c1, threshold_phase=ph0, kappa_star_a_star=kas, c_beta=c_beta,
        kad_err=kad[idx], err_transmission_rel=err_t, err_phase=err_p, err_s_abs=err_s,
        tail_kad=kad[top], tail_s_over_s11=ratio.astype(np.complex128),
        metadata=json.dumps(meta, sort_keys=True))
    print(f"wrote {args.out} ({os.path.getsize(args.out)} bytes) [{time.time() - t0:.0f} s]")


if __name__ == "__main__":
    main()
