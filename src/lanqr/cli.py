"""The ``lanqr`` shell command."""
from __future__ import annotations

import argparse
import sys

import numpy as np

from lanqr._version import __version__


def _demo(args):
    from lanqr.problems import laplacian_1d_values
    from lanqr.tridiagonal import tridiag_values

    # A taut string of 200 interior points: tridiag(-1, 2, -1) has closed-form eigenvalues.
    n = 200
    values = tridiag_values(np.full(n, 2.0), np.full(n - 1, -1.0))
    exact = laplacian_1d_values(n)
    print(f"lanqr {__version__}: lowest 6 eigenvalues of tridiag(-1, 2, -1), order {n}")
    print(f"{'#':>3}  {'computed':>22}  {'closed form':>22}  {'|error|':>9}")
    for i in range(6):
        print(f"{i:>3}  {values[i]:>22.16f}  {exact[i]:>22.16f}  {abs(values[i] - exact[i]):>9.1e}")
    return 0


def build_parser():
    parser = argparse.ArgumentParser(
        prog="lanqr",
        description="Extreme eigenpairs of large sparse symmetric matrices.",
    )
    parser.add_argument("--version", action="version", version=f"lanqr {__version__}")
    sub = parser.add_subparsers(dest="command")
    demo = sub.add_parser("demo", help="solve the built-in example")
    demo.set_defaults(func=_demo)
    return parser


def main(argv=None):
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "func", None) is None:
        parser.print_help()
        return 0
    return args.func(args)
