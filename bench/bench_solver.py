"""lanqr.lowest against scipy.sparse.linalg.eigsh, side by side in one process.

For every case: wall time (median of repeats), operator applications, peak
memory (tracemalloc, one separate run), the largest explicitly computed
relative residual, and the largest error against exact eigenvalues where a
closed form or published value exists (reference-values.md §4 and §6).
eigsh runs twice: with ``tol`` equal to lanqr's (ARPACK's test is also
relative to the Ritz value: the fair comparison) and at its defaults
(tol = machine precision).  Every solve runs in a forked child process with a
time cap; a side that does not finish is recorded as such.

Usage::

    python bench/bench_solver.py --quick            # small sizes, a minute or two
    python bench/bench_solver.py                    # the issue's sizes (long)
    python bench/bench_solver.py --case lap3d --repeats 3
"""
from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import time

import numpy as np
import scipy
import scipy.sparse.linalg as spla

import lanqr
from _harness import (Counting, max_error, ratio_cells, relative_residuals, run_capped,
                      timed_child, zero_multiplicity_values)
from lanqr.problems import (heisenberg_ring, laplacian_grid, laplacian_grid_values,
                            random_geometric_graph)

# reference-values.md §6 (exact diagonalisation and Bethe ansatz, computed there).
HEISENBERG_E0 = {16: -7.1422963606167798639, 18: -8.0227490870337570473,
                 20: -8.9043865298764423494, 22: -9.7868806517657049300}


def cases(quick):
    """name -> (builder, k, exact-values function or None, description)."""
    if quick:
        return {
            "lap2d": (lambda: laplacian_grid((100, 100)), 10,
                      lambda k: laplacian_grid_values((100, 100), k), "2-D Laplacian 100x100"),
            "lap3d": (lambda: laplacian_grid((20, 20, 20)), 10,
                      lambda k: laplacian_grid_values((20, 20, 20), k), "3-D Laplacian 20^3"),
            "heis20": (lambda: heisenberg_ring(16), 4,
                       lambda k: np.array([HEISENBERG_E0[16]]), "Heisenberg ring 16"),
            "rgg": (lambda: random_geometric_graph(20000, seed=0, largest_component=True), 10,
                    "components", "random geometric graph 20,000 points, largest connected "
                    "component (Fiedler vectors are asked of a connected graph)"),
            "heis22": (lambda: heisenberg_ring(18), 2,
                       lambda k: np.array([HEISENBERG_E0[18]]), "Heisenberg ring 18"),
        }
    return {
        "lap2d": (lambda: laplacian_grid((300, 300)), 10,
                  lambda k: laplacian_grid_values((300, 300), k), "2-D Laplacian 300x300"),
        "lap3d": (lambda: laplacian_grid((50, 50, 50)), 10,
                  lambda k: laplacian_grid_values((50, 50, 50), k), "3-D Laplacian 50^3"),
        "heis20": (lambda: heisenberg_ring(20), 4,
                   lambda k: np.array([HEISENBERG_E0[20]]), "Heisenberg ring 20"),
        "rgg": (lambda: random_geometric_graph(100000, seed=0, largest_component=True), 10,
                "components", "random geometric graph 100,000 points, largest connected "
                "component (Fiedler vectors are asked of a connected graph; the whole "
                "graph has ~60 components, a high-multiplicity zero tested at small size "
                "in tests/test_solver_verification.py)"),
        "heis22": (lambda: heisenberg_ring(22), 2,
                   lambda k: np.array([HEISENBERG_E0[22]]), "Heisenberg ring 22"),
    }


# Per-case time caps (seconds) for the full run: the graph Laplacian's lowest
# 10 lie in a tight cluster just above 0 (a single zero, then the Fiedler
# value and its neighbours, gaps ~1e-5 of ||A||), slow for both methods
# without a spectral transformation.
CASE_CAPS = {"rgg": 300.0}


def solve(side, A, k, tol):
    """Run one solver; return (values, vectors, operator applications)."""
    if side == "lanqr":
        res = lanqr.lowest(A, k, tol=tol, seed=0)
        return res.values, res.vectors, res.matvecs
    op = Counting(A)
    v0 = np.random.default_rng(0).standard_normal(A.shape[0])
    kw = {} if side == "eigsh-default" else {"tol": tol}
    w, V = spla.eigsh(op, k, which="SA", v0=v0, **kw)
    order = np.argsort(w)
    return w[order], V[:, order], op.count


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes")
    ap.add_argument("--case", action="append", help="run only these cases (repeatable)")
    ap.add_argument("--repeats", type=int, default=3,
                    help="timed repeats (median); the first, extra run traces memory")
    ap.add_argument("--tol", type=float, default=1e-8)
    ap.add_argument("--cap", type=float, default=None, help="seconds per solve")
    ap.add_argument("--threads", type=int, default=1,
                    help="BLAS threads for both sides (threadpoolctl; default 1)")
    ap.add_argument("--sides", default="lanqr,eigsh-tol,eigsh-default")
    args = ap.parse_args(argv)
    cap = args.cap or (60.0 if args.quick else 600.0)
    sides = args.sides.split(",")

    limiter = None
    try:
        from threadpoolctl import threadpool_limits
        limiter = threadpool_limits(limits=args.threads, user_api="blas")
    except ImportError:
        pass
    print(f"# lanqr {lanqr.__version__}, numpy {np.__version__}, scipy {scipy.__version__}, "
          f"Python {platform.python_version()}, {os.cpu_count()} CPUs, BLAS threads "
          f"{args.threads if limiter is not None else 'default (threadpoolctl missing)'}, "
          f"tol {args.tol:g}, repeats {args.repeats}, cap {cap:g} s", flush=True)

    table = []
    for name, (build, k, exact_fn, desc) in cases(args.quick).items():
        if args.case and name not in args.case:
            continue
        t0 = time.perf_counter()
        A = build()
        print(f"\n## {name}: {desc}, n = {A.shape[0]}, nnz = {A.nnz}, k = {k} "
              f"(built in {time.perf_counter() - t0:.1f} s)", flush=True)
        anorm = float(abs(A).sum(axis=1).max())  # Gershgorin bound on ||A||
        if exact_fn == "components":
            exact, ncomp = zero_multiplicity_values(A, k)
            print(f"  {ncomp} connected components: eigenvalue 0 with multiplicity {ncomp}")
        else:
            exact = exact_fn(k) if exact_fn else None
        row = {"case": name, "n": A.shape[0], "k": k}
        case_cap = min(cap, CASE_CAPS.get(name, cap)) if not args.quick else cap
        for side in sides:
            # The first run traces memory (tracemalloc); with more than one
            # repeat the wall time is the median of the other, untraced runs.
            times, out, peak = [], None, float("nan")
            for rep in range(max(args.repeats, 1) + (1 if args.repeats > 1 else 0)):
                traced = rep == 0
                msg = run_capped(timed_child, (solve, side, A, k, args.tol, traced), case_cap)
                if msg[0] != "ok":
                    out = msg
                    break
                if traced:
                    peak = msg[5]
                if not traced or args.repeats <= 1:
                    times.append(msg[1])
                out = msg
            if out[0] != "ok":
                what = f"did not finish in {case_cap:g} s" if out[0] == "timeout" else out[1]
                print(f"  {side:14s} {what}", flush=True)
                row[side] = None
                continue
            _, _, vals, vecs, count, _ = out
            res = relative_residuals(A, vals, vecs, args.tol, anorm)
            err = max_error(vals, exact, anorm)
            t = statistics.median(times)
            row[side] = dict(time=t, matvecs=count, res=float(np.max(res)), err=err,
                             mem=peak / 2**20, values=vals)
            print(f"  {side:14s} time {t:8.3f} s  matvecs {count:6d}  max res {np.max(res):.1e}"
                  f"  max err {err:.1e}  peak {peak / 2**20:7.1f} MiB  values {np.array2string(vals, precision=10, max_line_width=400)}",
                  flush=True)
        table.append(row)

    print("\n## Summary (ratios lanqr / eigsh; < 1 means lanqr is better)")
    print(f"{'case':8s} {'n':>8s} {'k':>3s} | {'time/tol':>9s} {'mv/tol':>7s} {'mem/tol':>8s} | "
          f"{'time/def':>9s} {'mv/def':>7s} {'mem/def':>8s} | {'err lanqr':>9s} {'err tol':>9s} "
          f"{'err def':>9s} | {'res lanqr':>9s} {'res tol':>9s} {'res def':>9s}")
    for row in table:
        ours = row.get("lanqr")
        cells = []
        for other in ("eigsh-tol", "eigsh-default"):
            cells.append(ratio_cells(ours, row.get(other), time_width=9, time_digits=2,
                                     mem_width=8, missing="dnf/na"))
        errs = " ".join(f"{row[s]['err']:9.1e}" if row.get(s) else f"{'dnf':>9s}"
                        for s in ("lanqr", "eigsh-tol", "eigsh-default"))
        ress = " ".join(f"{row[s]['res']:9.1e}" if row.get(s) else f"{'dnf':>9s}"
                        for s in ("lanqr", "eigsh-tol", "eigsh-default"))
        print(f"{row['case']:8s} {row['n']:8d} {row['k']:3d} | {cells[0]} | {cells[1]} | {errs} | {ress}")
    if limiter is not None:
        limiter.restore_original_limits()
    return 0


if __name__ == "__main__":
    sys.exit(main())
