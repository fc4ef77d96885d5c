"""Command line: ``lossfit demo`` (and, for batch use, the job commands).

Exit codes: 0 success; 2 bad input (the message names the argument or key).
"""

__all__ = ["main"]

import argparse
import sys

from .errors import LossfitValueError


def _cmd_demo(args):
    from .demo import run_demo
    run_demo(args.out, walkers=args.walkers, steps=args.steps, seed=args.seed,
             overwrite=args.overwrite, progress=None if not args.quiet else False)
    return 0


def build_parser():
    parser = argparse.ArgumentParser(prog="lossfit", description="Thermally averaged zero-range fits "
                                     "of three-body and atom-dimer loss spectra (Efimov parameters).")
    from . import __version__
    parser.add_argument("--version", action="version", version=f"lossfit {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    demo = sub.add_parser("demo", help="fit the built-in invented demo scenario and write all outputs")
    demo.add_argument("--out", required=True, help="output folder (created; existing results are kept)")
    demo.add_argument("--walkers", type=int, default=32)
    demo.add_argument("--steps", type=int, default=5000)
    demo.add_argument("--seed", type=int, default=1)
    demo.add_argument("--overwrite", action="store_true", help="replace results already in --out")
    demo.add_argument("--quiet", action="store_true", help="no progress bar")
    demo.set_defaults(func=_cmd_demo)
    return parser


def main(argv=None):
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except LossfitValueError as err:
        print(f"lossfit: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
