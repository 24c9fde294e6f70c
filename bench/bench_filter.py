"""The polynomial filter's settings, measured: when to switch, which degree, on or off.

For each case lanqr.lowest runs with the filter off, with the defaults, and
with the switch point (``FILTER_AFTER_CYCLES``) and the degree share
(``FILTER_SHARE``, see ``filter_degree``) varied one at a time; every run reports wall
time (median of repeats), operator applications, the largest explicitly
computed relative residual and, where a closed form exists, the largest
error against it (reference-values.md §4).  The constants in
``lanqr/api.py``, ``lanqr/filtered.py`` and ``lanqr/polyfilter.py`` quote these
numbers.

Usage::

    python bench/bench_filter.py                 # 2-D 150^2, 3-D 30^3 (k = 10), ring 16 (k = 4)
    python bench/bench_filter.py --case lap3d50 --repeats 3
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import time

import numpy as np

import lanqr
import lanqr.api as api
import lanqr.filtered as filtered
from lanqr.problems import heisenberg_ring, laplacian_grid, laplacian_grid_values

CASES = {
    "lap2d150": (lambda: laplacian_grid((150, 150)), 10,
                 lambda k: laplacian_grid_values((150, 150), k)),
    "lap3d30": (lambda: laplacian_grid((30, 30, 30)), 10,
                lambda k: laplacian_grid_values((30, 30, 30), k)),
    "lap3d50": (lambda: laplacian_grid((50, 50, 50)), 10,
                lambda k: laplacian_grid_values((50, 50, 50), k)),
    "heis16": (lambda: heisenberg_ring(16), 4, None),
}


def run(A, k, exact, repeats, **options):
    times, res = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        res = lanqr.lowest(A, k, seed=0, **options)
        times.append(time.perf_counter() - t0)
    err = float(np.max(np.abs(res.values - exact))) if exact is not None else float("nan")
    pf = res.info.get("polynomial_filter")
    degree = pf["degree"] if pf else "-"
    return statistics.median(times), res.matvecs, float(np.max(res.residuals)), err, degree


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case", action="append", choices=sorted(CASES))
    ap.add_argument("--repeats", type=int, default=1)
    args = ap.parse_args(argv)
    print(f"# lanqr {lanqr.__version__}, OMP_NUM_THREADS={os.environ.get('OMP_NUM_THREADS')}, "
          f"repeats {args.repeats}, tol 1e-8, seed 0", flush=True)
    default_cycles = api.FILTER_AFTER_CYCLES
    default_share = filtered.FILTER_SHARE
    for name in args.case or ["lap2d150", "lap3d30", "heis16"]:
        build, k, exact_fn = CASES[name]
        A = build()
        exact = exact_fn(k) if exact_fn else None
        print(f"\n## {name}: n = {A.shape[0]}, k = {k}")
        print(f"  {'setting':32s} {'time s':>8s} {'matvecs':>8s} {'degree':>6s} "
              f"{'max res':>8s} {'max err':>8s}")
        settings = [("filter off", {}, None, None), ("defaults", {}, default_cycles, None)]
        settings += [(f"switch after {c} cycles", {}, c, None) for c in (2, 4, 8)
                     if c != default_cycles]
        settings += [(f"degree share {s}", {}, default_cycles, s) for s in (0.75, 3.0, 6.0)]
        for label, options, cycles, share in settings:
            if label == "filter off":
                options = {"polynomial_filter": "off"}
            api.FILTER_AFTER_CYCLES = cycles if cycles is not None else default_cycles
            # Cases here have a basis within the caches: FILTER_SHARE applies.
            filtered.FILTER_SHARE = default_share if share is None else share
            t, mv, res, err, degree = run(A, k, exact, args.repeats, **options)
            print(f"  {label:32s} {t:8.3f} {mv:8d} {degree!s:>6s} {res:8.1e} {err:8.1e}",
                  flush=True)
        api.FILTER_AFTER_CYCLES = default_cycles
        filtered.FILTER_SHARE = default_share
    return 0


if __name__ == "__main__":
    sys.exit(main())
