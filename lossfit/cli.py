"""Command line for interactive and batch use.

``lossfit demo --out DIR [--from-curves | --mixture]``
    Fit the built-in invented scenario; writes data, job file, chain, summary, figures.
    ``--from-curves`` starts from invented raw decay curves (global fit).
``lossfit run JOB.toml --out DIR [--pool serial|processes|mpi] [--workers N] [--steps N|auto]``
    Run or resume a job (schema: :mod:`lossfit.batch.jobs`); under MPI start it as
    ``mpiexec -n N lossfit run JOB.toml --out DIR --pool mpi``.
``lossfit report DIR``
    Re-create summary and figures from the stored chain.
``lossfit tables BOSON OTHER [--c6 C6]``
    Build and cache the zero-range table of a B-B-X pair that does not ship with lossfit.

Exit codes: 0 success; 2 bad input (the message names the argument or job key);
3 the output folder is locked or holds results that need ``--overwrite``;
75 stopped by SIGTERM/SIGINT after saving the chain (run the same command to resume).
"""

__all__ = ["main"]

import argparse
import os
import signal
import sys
import warnings

from ._version import __version__
from .batch.exit_codes import EXIT_BAD_INPUT, EXIT_CONFLICT, EXIT_INTERRUPTED, EXIT_OK
from .errors import ConvergenceWarning, FitCheckWarning, Interrupted, LossfitValueError, OutputConflict

#: Default steps of the demos (kept here so that --help needs no library import; the
#: demo module checks that they agree with its own).
DEMO_STEPS = 5000

EXIT_CODES = f"""exit codes:
  {EXIT_OK}   success
  {EXIT_BAD_INPUT}   bad input: the message names the argument or job key
  {EXIT_CONFLICT}   the output folder is locked, or holds results that need --overwrite
  {EXIT_INTERRUPTED}  stopped by SIGTERM/SIGINT (after saving the chain, if sampling had begun):
       run the same command again to resume"""


# The command functions load the library when a command runs, not at start-up: the
# library's import chain costs ~1 s, which --help and argument errors should not pay.

def _cmd_demo(args):
    from .batch.demo import (  # loaded when the command runs
        CURVES_DEMO_STEPS,
        MIXTURE_DEMO_STEPS,
        run_curves_demo,
        run_demo,
        run_mixture_demo,
    )

    if args.from_curves and args.mixture:
        raise LossfitValueError("mixture", "the mixture demo fits spectra; it does not combine with --from-curves")

    progress = None if not args.quiet else False
    with warnings.catch_warnings():
        if args.quiet:
            warnings.simplefilter("ignore")
        if args.mixture:
            run_mixture_demo(args.out, walkers=args.walkers or 24, steps=args.steps or MIXTURE_DEMO_STEPS,
                             seed=args.seed, overwrite=args.overwrite, progress=progress, quiet=args.quiet)
        elif args.from_curves:
            run_curves_demo(args.out, walkers=args.walkers or 16, steps=args.steps or CURVES_DEMO_STEPS, seed=args.seed,
                            overwrite=args.overwrite, progress=progress, quiet=args.quiet)
        else:
            run_demo(args.out, walkers=args.walkers or 32, steps=args.steps or DEMO_STEPS, seed=args.seed,
                     overwrite=args.overwrite, progress=progress, quiet=args.quiet)
    return 0


def _notice(args, text):
    if not args.quiet:
        print(f"lossfit: {text}", file=sys.stderr)


def _cmd_run(args):
    from .batch.runner import run_job  # loaded when the command runs
    from .inference.pools import mpi_size  # loaded when the command runs

    if args.workers is not None and args.pool != "processes":
        _notice(args, f"--workers is ignored with --pool {args.pool} (it sets the processes of --pool processes)")
    if args.pool == "mpi":
        size = mpi_size()
        if size == 1:
            _notice(args, "--pool mpi on a single MPI rank runs serially; start it as "
                    "'mpiexec -n N lossfit run ... --pool mpi' to use N ranks")
    with warnings.catch_warnings():
        if args.quiet:
            warnings.simplefilter("ignore")
        run_job(args.job, args.out, pool=args.pool, workers=args.workers, steps=args.steps,
                overwrite=args.overwrite, progress=False if args.quiet else None, quiet=args.quiet)
    return 0


def _cmd_report(args):
    from .batch.runner import report  # loaded when the command runs

    report(args.dir, overwrite=args.overwrite)
    return 0


def _cmd_tables(args):
    from .mixture import heteronuclear  # loaded when the command runs
    from .universal.mixture_model import (
        atom_dimer_table_name,
        recombination_table_name,
        shipped_systems,
        table_name,
    )
    from .universal.solver import mixture_atom_dimer, mixture_recombination, mixture_tables
    from .universal.tables import cache_directory, load_mixture_atom_dimer_table

    system = heteronuclear(args.boson, args.other, c6_bx=args.c6)
    if args.atom_dimer:
        name, build, what = atom_dimer_table_name(system), mixture_atom_dimer.build_table, "a > 0 atom-dimer"
    else:
        name, build, what = table_name(system), mixture_tables.build_table, "a < 0"
    if (system.boson.name, system.other.name) in shipped_systems():
        _notice(args, f"the {what} table of {system.name} ships with lossfit; nothing to build")
        return 0
    path = os.path.join(cache_directory(), name)
    if os.path.exists(path) and not args.overwrite:
        raise OutputConflict(f"{path!r} exists; pass --overwrite to rebuild it")
    _notice(args, f"building the {what} table of {system.name} (s0 = {system.s0:.6f}) into {path}")
    meta = build(system, path, processes=args.processes, progress=not args.quiet)
    if args.atom_dimer:
        _notice(args, f"done: largest Efimov-channel fit residual {meta['channel_fit_residual_max']:.1e}, "
                f"largest spline error of T_AD {meta['spline_midpoint_error']['t_rel_max']:.1e} "
                "(docs/heteronuclear-rates.md)")
        # a > 0 recombination (shallow and deep, J = 0) in the atom-dimer table's phase convention
        kappa_a_star = load_mixture_atom_dimer_table(path).kappa_star_a_star
        k3_path = os.path.join(cache_directory(), recombination_table_name(system))
        _notice(args, f"building the a > 0 recombination table of {system.name} into {k3_path}")
        meta = mixture_recombination.build_table(system, k3_path, kappa_a_star, progress=not args.quiet)
        _notice(args, f"done: largest breakup fit residual {meta['breakup_fit_residual_max']:.1e}, largest J = 0 "
                f"share {meta['j0_bound_largest_share']:.4f} (docs/heteronuclear-rates.md)")
    else:
        _notice(args, f"done: largest Efimov-channel fit residual {meta['channel_fit_residual_max']:.1e}, largest "
                f"extrapolation error {meta['extrapolation_error_rel_max']:.1e} (docs/heteronuclear-rates.md)")
    return 0


def _steps(text):
    """--steps: an integer >= 2 or 'auto'."""
    if text == "auto":
        return text
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be an integer >= 2 or 'auto', got {text!r}") from None
    if value < 2:
        raise argparse.ArgumentTypeError(f"must be an integer >= 2 or 'auto', got {text!r}")
    return value


def build_parser():
    parser = argparse.ArgumentParser(prog="lossfit", description="Thermally averaged zero-range fits "
                                     "of three-body and atom-dimer loss spectra (Efimov parameters).",
                                     epilog=EXIT_CODES, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=f"lossfit {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    demo = sub.add_parser("demo", help="fit the built-in invented demo scenario and write all outputs",
                          epilog=EXIT_CODES, formatter_class=argparse.RawDescriptionHelpFormatter)
    demo.add_argument("--out", required=True, help="output folder (created; existing results are kept)")
    demo.add_argument("--from-curves", action="store_true",
                      help="start from invented raw decay curves (global fit) instead of spectra")
    demo.add_argument("--mixture", action="store_true",
                      help="the invented mixture scenario instead: two identical bosons and a third atom "
                           "(133Cs-133Cs-6Li, three a<0 resonances at two temperatures)")
    demo.add_argument("--walkers", type=int, default=None, help="default 32 (16 with --from-curves, 24 with --mixture)")
    demo.add_argument("--steps", type=int, default=None,
                      help=f"default {DEMO_STEPS} (fewer with --from-curves: lossfit.batch.demo.CURVES_DEMO_STEPS)")
    demo.add_argument("--seed", type=int, default=1)
    demo.add_argument("--overwrite", action="store_true", help="replace results already in --out")
    demo.add_argument("--quiet", action="store_true", help="print nothing but errors (warnings are kept in "
                      "summary.json)")
    demo.set_defaults(func=_cmd_demo)
    run = sub.add_parser("run", help="run or resume a job file (TOML)", epilog=EXIT_CODES,
                         formatter_class=argparse.RawDescriptionHelpFormatter)
    run.add_argument("job", help="job file")
    run.add_argument("--out", required=True, help="output folder")
    run.add_argument("--pool", choices=("serial", "processes", "mpi"), default="serial")
    run.add_argument("--workers", type=int, default=None, help="processes for --pool processes")
    run.add_argument("--steps", type=_steps, default=None,
                     help="override the job's number of steps (an integer, or 'auto': until converged)")
    run.add_argument("--overwrite", action="store_true", help="discard results already in --out")
    run.add_argument("--quiet", action="store_true", help="print nothing but errors (warnings are kept in "
                     "summary.json)")
    run.set_defaults(func=_cmd_run)
    rep = sub.add_parser("report", help="re-create summary and figures from stored chains", epilog=EXIT_CODES,
                         formatter_class=argparse.RawDescriptionHelpFormatter)
    rep.add_argument("dir", help="output folder of a run")
    rep.add_argument("--overwrite", action="store_true", help="replace existing summary and figures")
    rep.set_defaults(func=_cmd_report)
    tab = sub.add_parser("tables", help="build a zero-range table of two identical bosons and a third atom "
                         "for a pair that does not ship with lossfit (10-30 min; cached)", epilog=EXIT_CODES,
                         formatter_class=argparse.RawDescriptionHelpFormatter)
    tab.add_argument("boson", help="species of the two identical bosons, e.g. 87Rb")
    tab.add_argument("other", help="species of the third atom, e.g. 7Li")
    tab.add_argument("--c6", type=float, default=None, help="interspecies C6 in atomic units (needed for pairs "
                     "lossfit holds no C6 for)")
    tab.add_argument("--processes", type=int, default=2, help="worker processes (default 2)")
    tab.add_argument("--atom-dimer", action="store_true", help="build the a > 0 atom-dimer relaxation table "
                     "(a few minutes) instead of the a < 0 recombination table")
    tab.add_argument("--overwrite", action="store_true", help="rebuild a table already in the cache")
    tab.add_argument("--quiet", action="store_true", help="no progress bar or messages")
    tab.set_defaults(func=_cmd_tables)
    return parser


def _stop_during_startup(signum, frame):
    # before sampling starts there is no chain to save: stop cleanly (no traceback, no
    # empty output folder) with the same exit code as a stop during sampling
    raise Interrupted(signum, 0, saved=False)


class _WarningLines:
    """Warnings as one line each, ``lossfit: warning: ...``, each text once, without
    internal file paths or source lines. A fit's convergence and fit-check warnings are
    not repeated here: the result table printed after the run lists them (and
    summary.json keeps them)."""

    def __init__(self):
        self.seen = set()

    def __call__(self, message, category, filename, lineno, file=None, line=None):
        text = str(message)
        if issubclass(category, (ConvergenceWarning, FitCheckWarning)):
            return
        if text not in self.seen:
            self.seen.add(text)
            print(f"lossfit: warning: {text}", file=sys.stderr)


def main(argv=None):
    parser = build_parser()
    args = parser.parse_args(argv)
    previous = signal.signal(signal.SIGTERM, _stop_during_startup)
    shown = warnings.showwarning
    warnings.showwarning = _WarningLines()
    try:
        return args.func(args)
    except LossfitValueError as err:
        print(f"lossfit: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OutputConflict as err:
        print(f"lossfit: error: {err}", file=sys.stderr)
        return EXIT_CONFLICT
    except Interrupted as err:
        print(f"lossfit: {err}", file=sys.stderr)
        return EXIT_INTERRUPTED
    finally:
        signal.signal(signal.SIGTERM, previous)
        warnings.showwarning = shown


if __name__ == "__main__":
    sys.exit(main())
