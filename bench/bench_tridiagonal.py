"""Benchmark: lanqr's tridiagonal kernel against LAPACK (through SciPy), side by side.

Times, in one process and interleaved repeat by repeat, on random and 1-D
Laplacian tridiagonals:

* values only: ``lanqr.tridiag_values`` vs LAPACK ``dsterf`` (called directly
  through ``scipy.linalg.lapack``; ``eigh_tridiagonal(..., lapack_driver='sterf')``
  calls the same routine, and its default driver for values is 'stevd', so the
  driver is named explicitly), and 'stemr' (MRRR, a different O(n^2) algorithm,
  shown for honesty, not a target);
* all vectors: ``lanqr.tridiag_eigen`` vs LAPACK ``dstev`` (implicit QL/QR,
  rotations applied one at a time) and 'stemr';
* last row only: ``tridiag_eigen(rows=[-1])`` vs values only;
* the per-call overhead of the Python boundary at n = 50;
* with ``--tune``: the row-block / batch-size table behind the kernel's defaults.

Ratios are lanqr time / LAPACK time (below 1: lanqr faster), medians of
repeats.  Targets of the issue: values <= 1.0x 'sterf', vectors <= 0.5x 'stev',
rows=[-1] within 2x of values only.

Run:  python bench/bench_tridiagonal.py            (about 3-5 minutes)
      python bench/bench_tridiagonal.py --quick    (n <= 1000, a minute)
      python bench/bench_tridiagonal.py --vector-sizes 100,500,1000,2000,4000
      python bench/bench_tridiagonal.py --tune
"""
import argparse
import os
import platform
import statistics
import sys
import time
import timeit

import numpy as np
import scipy
import scipy.linalg
from scipy.linalg import lapack

import lanqr
from lanqr import _tridiag, tridiag_eigen, tridiag_values


def environment():
    lines = [
        f"python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}, "
        f"lanqr {lanqr.__version__}",
        f"machine: {platform.machine()} {platform.processor() or ''}, {os.cpu_count()} logical CPUs, "
        f"OMP_NUM_THREADS={os.environ.get('OMP_NUM_THREADS', 'unset')}",
    ]
    try:  # optional (the 'bench' extra)
        from threadpoolctl import threadpool_info
        for info in threadpool_info():
            lines.append(f"threadpool: {info.get('internal_api')} {info.get('version')} "
                         f"threads={info.get('num_threads')} ({os.path.basename(info.get('filepath', ''))})")
    except ImportError:
        lines.append("threadpool: threadpoolctl not installed (pip install '.[bench]')")
    lines.append("all timed routines are single-threaded (LAPACK stev/sterf/stemr use no BLAS-3)")
    return lines


def family(name, n, seed=0):
    if name == "random":
        rng = np.random.default_rng(seed + n)
        return rng.standard_normal(n), rng.standard_normal(n - 1)
    if name == "laplacian":
        return np.full(n, 2.0), np.full(n - 1, -1.0)
    raise ValueError(name)


def timed_median(funcs, repeats, clock=time.perf_counter):
    """Median time of each function, runs interleaved (order alternating).

    Wall time by default; the tuning table uses this thread's CPU time, which
    other processes on a shared machine disturb less.
    """
    times = [[] for _ in funcs]
    for r in range(repeats):
        order = range(len(funcs)) if r % 2 == 0 else reversed(range(len(funcs)))
        for i in order:
            t0 = clock()
            funcs[i]()
            times[i].append(clock() - t0)
    return [statistics.median(t) for t in times]


def repeats_for(n, base):
    return max(3, int(base * (1000 / n) ** 1.5)) if n < 1000 else base


def bench_values(sizes, repeats, families):
    print("\n## Values only (ratio = lanqr / LAPACK, median of repeats)\n")
    print("| family | n | lanqr ms | sterf ms | lanqr/sterf | stemr ms | lanqr/stemr | sweeps/n | rows=[-1] / values |")
    print("|---|---:|---:|---:|---:|---:|---:|---:|---:|")
    rows_out = []
    for fam in families:
        for n in sizes:
            d, e = family(fam, n)
            reps = repeats_for(n, repeats)
            t_ours, t_sterf, t_stemr, t_row = timed_median([
                lambda: tridiag_values(d, e),
                lambda: lapack.dsterf(d, e),
                lambda: scipy.linalg.eigh_tridiagonal(d, e, eigvals_only=True, lapack_driver="stemr"),
                lambda: tridiag_eigen(d, e, rows=[-1]),
            ], reps)
            sweeps = _tridiag.values(d, e, 30 * n)[3]
            print(f"| {fam} | {n} | {t_ours * 1e3:.2f} | {t_sterf * 1e3:.2f} | {t_ours / t_sterf:.2f} | "
                  f"{t_stemr * 1e3:.2f} | {t_ours / t_stemr:.2f} | {sweeps / n:.2f} | {t_row / t_ours:.2f} |",
                  flush=True)
            rows_out.append((fam, n, t_ours / t_sterf, t_row / t_ours))
    return rows_out


def bench_vectors(sizes, repeats, families):
    print("\n## All eigenvectors (ratio = lanqr / LAPACK, median of repeats)\n")
    print("| family | n | repeats | lanqr s | stev s | lanqr/stev | stemr s | lanqr/stemr | rows=[-1] / stev |")
    print("|---|---:|---:|---:|---:|---:|---:|---:|---:|")
    for fam in families:
        for n in sizes:
            d, e = family(fam, n)
            reps = 3 if n <= 1000 else (2 if n <= 2000 else 1)
            t_ours, t_stev, t_stemr, t_row = timed_median([
                lambda: tridiag_eigen(d, e),
                lambda: lapack.dstev(d, e, compute_v=1),
                lambda: scipy.linalg.eigh_tridiagonal(d, e, lapack_driver="stemr"),
                lambda: tridiag_eigen(d, e, rows=[-1]),
            ], reps)
            print(f"| {fam} | {n} | {reps} | {t_ours:.3f} | {t_stev:.3f} | {t_ours / t_stev:.3f} | "
                  f"{t_stemr:.3f} | {t_ours / t_stemr:.2f} | {t_row / t_stev:.4f} |", flush=True)


def bench_overhead():
    print("\n## Per-call cost of the Python boundary (best of 7 x 2000 calls, microseconds)\n")
    print("| n | tridiag_eigen(rows=[-1]) | compiled wrapper alone | boundary overhead | tridiag_values |")
    print("|---:|---:|---:|---:|---:|")
    for n in (1, 20, 50, 200):
        d, e = family("random", n, seed=7)
        rows = np.array([n - 1], dtype=np.intp)
        number = 2000 if n <= 50 else 200

        def best(f):
            return min(timeit.repeat(f, number=number, repeat=7)) / number * 1e6

        full = best(lambda: tridiag_eigen(d, e, rows=[-1]))
        core = best(lambda: _tridiag.eigen(d, e, rows, 30 * n))
        vals = best(lambda: tridiag_values(d, e))
        print(f"| {n} | {full:.1f} | {core:.1f} | {full - core:.1f} | {vals:.1f} |", flush=True)


def bench_tune(sizes):
    print("\n## Tuning: rows per block x sweeps per batch (lanqr/stev CPU time, random family)\n")
    blocks = (8, 16, 32, 64)
    batches = (1, 8, 32, 64)
    print("| n | rows/block | " + " | ".join(f"batch {b}" for b in batches) + " |")
    print("|---:|---:|" + "---:|" * len(batches))
    for n in sizes:
        d, e = family("random", n)
        reps = 3 if n <= 1000 else 1
        (t_stev,) = timed_median([lambda: lapack.dstev(d, e, compute_v=1)], reps, time.thread_time)
        for rb in blocks:
            cells = []
            for bs in batches:
                (t,) = timed_median([lambda: _tridiag.eigen(d, e, None, 30 * n, rb, bs)], reps,
                                    time.thread_time)
                cells.append(f"{t / t_stev:.3f}")
            print(f"| {n} | {rb} | " + " | ".join(cells) + " |", flush=True)


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--sizes", default="100,500,1000,2000,4000",
                   help="orders for the values-only table")
    p.add_argument("--vector-sizes", default="100,500,1000,2000",
                   help="orders for the all-vectors table (n = 4000 takes minutes with 'stev')")
    p.add_argument("--repeats", type=int, default=5, help="repeats at n = 1000 (more for smaller n)")
    p.add_argument("--families", default="random,laplacian")
    p.add_argument("--quick", action="store_true", help="n <= 1000 only")
    p.add_argument("--tune", action="store_true", help="only the row-block / batch table")
    args = p.parse_args(argv)

    sizes = [int(s) for s in args.sizes.split(",")]
    vsizes = [int(s) for s in args.vector_sizes.split(",")]
    if args.quick:
        sizes = [n for n in sizes if n <= 1000]
        vsizes = [n for n in vsizes if n <= 1000]
    families = args.families.split(",")

    print("# lanqr tridiagonal kernel vs LAPACK\n")
    for line in environment():
        print(f"- {line}")
    if args.tune:
        bench_tune([n for n in vsizes if n >= 500] or vsizes)
        return 0
    bench_values(sizes, args.repeats, families)
    bench_vectors(vsizes, args.repeats, families)
    bench_overhead()
    print("\nExtra memory beyond the n x n eigenvector matrix: lanqr 2 x 32 x n doubles "
          "(rotations of one batch of sweeps) + 2n; LAPACK dstev 2n - 2 doubles.")
    return 0


if __name__ == "__main__":
    sys.exit(main())
