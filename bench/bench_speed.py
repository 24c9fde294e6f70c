"""Speed of lanqr.lowest against scipy.sparse.linalg.eigsh, side by side in one process.

Three comparisons per case (issue 6):

* ``eigsh``      -- eigsh at its defaults (its own basis size) with the same k
  and tol as lanqr;
* ``eigsh-ncv``  -- eigsh given lanqr's basis size (``ncv=``), so the gain of
  the method is seen apart from the gain of the basis size;
* ``lanqr``      -- lanqr.lowest at its defaults.

Reported per case: wall time (median of repeats), operator applications, peak
memory (tracemalloc, one extra traced run), the largest explicitly computed
relative residual, the largest error against a closed form or published value
where one exists, and the ratios lanqr / eigsh.  Every solve runs in a forked
child with a time cap; a side that runs past it is recorded as 'did not
finish in N s'.

Two further sections:

* ``overhead``: wall / (operator applications x time of one product) for
  lanqr, on the Heisenberg ring of 22 sites (lowest 2) and the 2-D Laplacian
  1000x1000 (lowest 6, 10^6 unknowns); wall is the median of ``--repeats``
  runs (1 for the large case: ``--repeats 1``);
* ``product``: lanqr's compiled CSR product alone against SciPy's ``A @ x``
  on a 10^6-row matrix, 1 and 2 threads, with a bitwise comparison.

The BLAS and thread setup (threadpoolctl) is printed first.  On a shared
machine quote the ratios, not the absolute times, and the load (``uptime``).

Usage::

    python bench/bench_speed.py --quick                 # small sizes, a few minutes
    python bench/bench_speed.py --case lap2d150 --case heis20
    python bench/bench_speed.py --case overhead-heis22 --repeats 1
    python bench/bench_speed.py --case lap2d150 --seeds 5   # medians over start vectors
    python bench/bench_speed.py --case product
    python bench/bench_speed.py > bench/results/speed.log 2>&1 &   # everything (long)
"""
from __future__ import annotations

import argparse
import functools
import os
import platform
import statistics
import subprocess
import sys
import time

import numpy as np
import scipy
import scipy.sparse.linalg as spla

import lanqr
from _harness import (Counting, max_error, ratio_cells, relative_residuals, run_capped,
                      timed_child, zero_multiplicity_values)
from lanqr.api import default_basis
from lanqr.problems import (heisenberg_ring, laplacian_grid, laplacian_grid_values,
                            random_geometric_graph)

# reference-values.md §6 (exact diagonalisation and Bethe ansatz, computed there).
HEISENBERG_E0 = {16: -7.1422963606167798639, 18: -8.0227490870337570473,
                 20: -8.9043865298764423494, 22: -9.7868806517657049300}


def _grid(shape, k, cap):
    desc = "2-D" if len(shape) == 2 else "3-D"
    size = "x".join(str(s) for s in shape)
    return (lambda: laplacian_grid(shape), k,
            lambda kk: laplacian_grid_values(shape, kk), f"{desc} Laplacian {size}", cap)


def _heis(sites, k, cap):
    return (lambda: heisenberg_ring(sites), k, lambda kk: np.array([HEISENBERG_E0[sites]]),
            f"Heisenberg ring {sites}", cap)


def _rgg(nodes, cap, largest_component=False):
    if largest_component:
        return (lambda: random_geometric_graph(nodes, seed=0, largest_component=True), 10,
                "components", f"random geometric graph {nodes:,} points, largest connected "
                "component (as in bench_solver.py: Fiedler vectors of a connected graph)", cap)
    return (lambda: random_geometric_graph(nodes, seed=0), 10, "components",
            f"random geometric graph {nodes:,} (generator's node order; about 60 "
            "components, so the lowest 10 are copies of 0)", cap)


def solver_cases(quick):
    """name -> (builder, k, exact-values function, description, cap in s)."""
    if quick:
        return {
            "lap2d150": _grid((100, 100), 10, 60),
            "lap3d50": _grid((20, 20, 20), 10, 60),
            "rgg": _rgg(20000, 60),
            "rggcc": _rgg(20000, 60, largest_component=True),
            "heis20": _heis(16, 4, 60),
            "heis22": _heis(18, 2, 60),
        }
    return {
        "lap2d150": _grid((150, 150), 10, 300),
        "lap2d300": _grid((300, 300), 10, 300),
        "lap3d50": _grid((50, 50, 50), 10, 300),
        "rgg": _rgg(100000, 300),
        "rggcc": _rgg(100000, 300, largest_component=True),
        "heis20": _heis(20, 4, 300),
        "heis22": _heis(22, 2, 300),
    }


def overhead_cases(quick):
    """name -> (builder, k, exact, description, cap): the overhead section."""
    if quick:
        return {"overhead-heis22": _heis(18, 2, 120),
                "overhead-lap2d1000": _grid((200, 200), 6, 120)}
    return {"overhead-heis22": _heis(22, 2, 600),
            "overhead-lap2d1000": _grid((1000, 1000), 6, 3000)}


#: lanqr keywords for every solve (set from the command line).
LANQR_OPTIONS = {}


def solve(side, A, k, tol, seed=0):
    """Run one solver; return (values, vectors, operator applications)."""
    if side == "lanqr":
        res = lanqr.lowest(A, k, tol=tol, seed=seed, **LANQR_OPTIONS)
        return res.values, res.vectors, res.matvecs
    op = Counting(A)
    v0 = np.random.default_rng(seed).standard_normal(A.shape[0])
    kw = {"tol": tol}
    if side == "eigsh-ncv":
        kw["ncv"] = default_basis(k)
    w, V = spla.eigsh(op, k, which="SA", v0=v0, **kw)
    order = np.argsort(w)
    return w[order], V[:, order], op.count


def measure_side(side, A, k, tol, repeats, cap, seed=0):
    """Median wall time over ``repeats`` untraced runs plus one traced run (memory)."""
    times, out, peak = [], None, float("nan")
    solve_seeded = functools.partial(solve, seed=seed)
    for rep in range(repeats + 1):
        traced = rep == 0
        msg = run_capped(timed_child, (solve_seeded, side, A, k, tol, traced), cap)
        if msg[0] != "ok":
            return msg, None, peak
        if traced:
            peak = msg[5]
            if repeats == 0:
                times.append(msg[1])
        else:
            times.append(msg[1])
        out = msg
    return out, statistics.median(times), peak


def _product_child(conn, A, n_threads, repeats):
    from lanqr.vecops import CsrProduct
    x = np.random.default_rng(1).standard_normal(A.shape[1])
    prod = CsrProduct(A, n_threads=n_threads)
    y_ref = A @ x

    def best_of(f):
        ts = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            f()
            ts.append(time.perf_counter() - t0)
        return statistics.median(ts)

    y = np.empty(A.shape[0])
    t_scipy = best_of(lambda: A @ x)
    t_ours = best_of(lambda: prod.matvec(x, out=y))
    bitwise = bool(np.array_equal(prod.matvec(x), y_ref))
    conn.send(("ok", t_scipy, t_ours, bitwise, prod.n_threads))
    conn.close()


def product_time(A, repeats=15):
    """Median time of lanqr's product with ``A`` (the one the solver uses)."""
    msg = run_capped(_product_child, (A, None, repeats), 600)
    return msg[2] if msg[0] == "ok" else float("nan")


def print_setup(args):
    print(f"# lanqr {lanqr.__version__}, numpy {np.__version__}, scipy {scipy.__version__}, "
          f"Python {platform.python_version()}, {os.cpu_count()} CPUs, "
          f"OMP_NUM_THREADS={os.environ.get('OMP_NUM_THREADS', 'unset')}, "
          f"OMP_WAIT_POLICY={os.environ.get('OMP_WAIT_POLICY', 'unset')}, "
          f"tol {args.tol:g}, repeats {args.repeats}, lanqr options {LANQR_OPTIONS or 'defaults'}",
          flush=True)
    try:
        from lanqr.vecops import default_threads
        print(f"# lanqr compiled kernels: default_threads() = {default_threads()}")
    except ImportError:
        pass
    try:
        from threadpoolctl import threadpool_info
        for pool in threadpool_info():
            print(f"# threadpool: {pool.get('user_api')} {pool.get('internal_api')} "
                  f"{pool.get('version')} threads={pool.get('num_threads')} "
                  f"arch={pool.get('architecture')} ({os.path.basename(pool.get('filepath', ''))})")
    except ImportError:
        print("# threadpoolctl not installed: BLAS setup unknown")
    try:
        load = subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip()
        print(f"# load: {load}", flush=True)
    except OSError:
        pass


def run_solver_case(name, spec, args, sides):
    build, k, exact_fn, desc, cap = spec
    cap = args.cap or cap
    t0 = time.perf_counter()
    A = build()
    print(f"\n## {name}: {desc}, n = {A.shape[0]}, nnz = {A.nnz}, k = {k}, "
          f"lanqr basis {default_basis(k)} (built in {time.perf_counter() - t0:.1f} s)",
          flush=True)
    anorm = float(abs(A).sum(axis=1).max())  # Gershgorin bound on ||A||
    if exact_fn == "components":
        exact, ncomp = zero_multiplicity_values(A, k)
        print(f"  {ncomp} connected components: eigenvalue 0 with multiplicity {ncomp}")
    else:
        exact = exact_fn(k) if exact_fn else None
    row = {"case": name, "n": A.shape[0], "k": k, "A": A}
    for side in sides:
        per_seed = []
        for seed in range(args.seeds):
            out, t, peak = measure_side(side, A, k, args.tol, args.repeats, cap, seed=seed)
            if out[0] != "ok":
                what = f"did not finish in {cap:g} s" if out[0] == "timeout" else out[1]
                print(f"  {side:10s} {what}" + (f" (seed {seed})" if args.seeds > 1 else ""),
                      flush=True)
                per_seed = None
                break
            _, _, vals, vecs, count, _ = out
            res = float(np.max(relative_residuals(A, vals, vecs, args.tol, anorm)))
            err = max_error(vals, exact, anorm)
            per_seed.append(dict(time=t, matvecs=count, res=res, err=err, mem=peak / 2**20))
            label = f"{side} s{seed}" if args.seeds > 1 else side
            print(f"  {label:10s} time {t:9.3f} s  matvecs {count:6d}  max res {res:.1e}  "
                  f"max err {err:.1e}  peak {peak / 2**20:8.1f} MiB", flush=True)
        if per_seed is None:
            row[side] = None
            continue
        # Several start vectors: medians of the time and the products (both
        # sides start from the same vector for each seed), worst residual.
        row[side] = dict(time=statistics.median(r["time"] for r in per_seed),
                         matvecs=int(statistics.median(r["matvecs"] for r in per_seed)),
                         res=max(r["res"] for r in per_seed),
                         err=max(r["err"] for r in per_seed),  # nan if no exact values
                         mem=max(r["mem"] for r in per_seed))
        if args.seeds > 1:
            print(f"  {side:10s} median over {args.seeds} seeds: time {row[side]['time']:.3f} s, "
                  f"matvecs {row[side]['matvecs']}", flush=True)
    return row


def summary(table):
    print("\n## Summary: ratios lanqr / eigsh (< 1: lanqr better)")
    print(f"{'case':20s} {'n':>8s} {'k':>3s} | {'wall/def':>8s} {'mv/def':>7s} {'mem/def':>7s} | "
          f"{'wall/ncv':>8s} {'mv/ncv':>7s} {'mem/ncv':>7s} | {'res lanqr':>9s} {'err lanqr':>9s}")
    for row in table:
        ours = row.get("lanqr")
        cells = []
        for other in ("eigsh", "eigsh-ncv"):
            # A side that ran but did not finish: lanqr is below the cap's ratio.
            unfinished = ours and other in row and row[other] is None
            cells.append(ratio_cells(ours, row.get(other), time_width=8, time_digits=3,
                                     mem_width=7, missing="<(dnf)" if unfinished else "n/a"))
        res = f"{ours['res']:9.1e} {ours['err']:9.1e}" if ours else f"{'dnf':>9s} {'':9s}"
        print(f"{row['case']:20s} {row['n']:8d} {row['k']:3d} | {cells[0]} | {cells[1]} | {res}")


def run_overhead_case(name, spec, args):
    build, k, exact_fn, desc, cap = spec
    cap = args.cap or cap
    A = build()
    print(f"\n## {name}: {desc}, n = {A.shape[0]}, nnz = {A.nnz}, k = {k}", flush=True)
    t_prod = product_time(A)
    out, t, _ = measure_side("lanqr", A, k, args.tol, args.repeats, cap)
    if out[0] != "ok":
        what = f"did not finish in {cap:g} s" if out[0] == "timeout" else out[1]
        print(f"  lanqr {what}", flush=True)
        return
    _, _, vals, vecs, count, _ = out
    anorm = float(abs(A).sum(axis=1).max())
    res = float(np.max(relative_residuals(A, vals, vecs, args.tol, anorm)))
    err = max_error(vals, exact_fn(k), anorm)
    ratio = t / (count * t_prod)
    print(f"  lanqr took {t:.2f} s, {count} products of {t_prod * 1e3:.3f} ms each "
          f"({count * t_prod:.2f} s in products); overhead ratio wall / (matvecs x product) "
          f"= {ratio:.2f}; max res {res:.1e}; max err {err:.1e}", flush=True)


def run_product(args):
    rows = 200 if args.quick else 1000
    A = laplacian_grid((rows, rows))
    print(f"\n## product: 2-D Laplacian {rows}x{rows} (n = {A.shape[0]}, nnz = {A.nnz}), "
          "compiled product vs SciPy A @ x, median of 15", flush=True)
    for threads in (1, 2):
        msg = run_capped(_product_child, (A, threads, 15), 600)
        _, t_scipy, t_ours, bitwise, used = msg
        print(f"  n_threads={threads} (used {used}): SciPy {t_scipy * 1e3:.3f} ms, lanqr "
              f"{t_ours * 1e3:.3f} ms, speed-up {t_scipy / t_ours:.2f}x, bitwise equal: {bitwise}",
              flush=True)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes")
    ap.add_argument("--case", action="append",
                    help="run only these cases (repeatable): solver case names, "
                         "overhead-heis22, overhead-lap2d1000, product")
    ap.add_argument("--repeats", type=int, default=3,
                    help="timed repeats (median); one extra run traces memory")
    ap.add_argument("--tol", type=float, default=1e-8)
    ap.add_argument("--seeds", type=int, default=1,
                    help="start vectors 0..S-1 for both sides; the summary takes medians")
    ap.add_argument("--cap", type=float, default=None, help="seconds per solve (overrides)")
    ap.add_argument("--sides", default="lanqr,eigsh,eigsh-ncv")
    ap.add_argument("--reorthogonalization", choices=("full", "partial"), default=None,
                    help="lanqr's reorthogonalization (default: lanqr's default)")
    ap.add_argument("--polynomial-filter", choices=("auto", "on", "off"), default=None,
                    help="lanqr's polynomial_filter (default: lanqr's default, auto)")
    ap.add_argument("--blas-threads", type=int, default=None,
                    help="limit BLAS threads for every side (threadpoolctl); default: as found")
    args = ap.parse_args(argv)
    sides = args.sides.split(",")
    if args.reorthogonalization:
        LANQR_OPTIONS["reorthogonalization"] = args.reorthogonalization
    if args.polynomial_filter:
        LANQR_OPTIONS["polynomial_filter"] = args.polynomial_filter
    limiter = None
    if args.blas_threads is not None:
        from threadpoolctl import threadpool_limits
        limiter = threadpool_limits(limits=args.blas_threads, user_api="blas")
    print_setup(args)

    wanted = set(args.case) if args.case else None
    table = []
    for name, spec in solver_cases(args.quick).items():
        if wanted is None or name in wanted:
            table.append(run_solver_case(name, spec, args, sides))
    if table:
        summary(table)
    for name, spec in overhead_cases(args.quick).items():
        if wanted is None or name in wanted:
            run_overhead_case(name, spec, args)
    if wanted is None or "product" in wanted:
        run_product(args)
    if limiter is not None:
        limiter.restore_original_limits()
    return 0


if __name__ == "__main__":
    sys.exit(main())
