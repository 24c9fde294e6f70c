"""Compiled vector kernels against SciPy/NumPy, side by side in one process.

Sections (all by default; pick with --only):

  setup      BLAS / OpenMP / thread setup, machine load
  bandwidth  streaming memory bandwidth (NumPy) and the SciPy CSR product's
             effective bandwidth (bytes it must move / time)
  matvec     y = A x: SciPy vs lanqr at 1 and 2 threads (static and dynamic
             row scheduling); 2-D Laplacian and random geometric graph,
             n = 1e4, 1e5, 1e6
  threshold  1 vs 2 threads on small matrices: where threads start to pay
  block      Y = A X, k = 4 and 8: SciPy vs lanqr (C- and F-order blocks)
  fused      one Lanczos recurrence step: NumPy ops vs fused kernels
  gs         Gram-Schmidt pass c = V^T w, w -= V c: NumPy vs lanqr (dgemv)
  rotate     V[:, :k] = V[:, :m] Y: NumPy (out of place) vs lanqr (chunked, in place)
  lanczos    60 Lanczos steps with full reorthogonalization: NumPy vs lanqr kernels,
             and the share of the time spent in the products
  reorder    random geometric graph in stored vs reverse Cuthill-McKee order

Every timing is the median of ``--repeats`` runs, the variants of a case run
round-robin so that load changes on a shared machine hit them alike.  Ratios
are SciPy/NumPy time divided by lanqr time (> 1: lanqr faster).

    python bench/bench_products.py            # everything (a few minutes)
    python bench/bench_products.py --quick    # n up to 1e5
    python bench/bench_products.py --only matvec block
"""
from __future__ import annotations

import argparse
import contextlib
import json
import os
import platform
import sys
import time
import tracemalloc

import numpy as np
import scipy
import scipy.sparse as sp

from lanqr import problems
from lanqr import _vecops
from lanqr.vecops import (
    CsrProduct,
    SERIAL_BELOW_NNZ,
    default_threads,
    orthogonalize,
    recurrence_update,
    rotate_basis,
)

try:
    import threadpoolctl
except ImportError:  # optional: the 'bench' extra
    threadpoolctl = None


T = 2  # threads of the multithreaded columns (--threads)
STAT = "median"  # or "min" (--stat): best of the repeats, the speed without interruptions


def load():
    return "load avg %.2f %.2f %.2f" % os.getloadavg()


def timed(variants, repeats):
    """Median and spread of each callable in ``variants`` (dict), round-robin."""
    times = {name: [] for name in variants}
    for f in variants.values():  # warm caches, first-touch pages
        f()
    for _ in range(repeats):
        for name, f in variants.items():
            t0 = time.perf_counter()
            f()
            times[name].append(time.perf_counter() - t0)
    reduce = np.min if STAT == "min" else np.median
    return {name: float(reduce(t)) for name, t in times.items()}


def table(header, rows):
    widths = [max(len(str(h)), *(len(str(r[i])) for r in rows)) for i, h in enumerate(header)]
    line = "  ".join(str(h).rjust(w) for h, w in zip(header, widths))
    print(line)
    print("-" * len(line))
    for r in rows:
        print("  ".join(str(c).rjust(w) for c, w in zip(r, widths)))
    print()


def ms(t):
    return f"{t * 1e3:.3f}"


def csr_bytes(A, n_vectors=1):
    """Bytes a CSR product must move at least: values, indices, indptr, x read
    once, y written (plus the write-allocate read of y)."""
    n_rows, n_cols = A.shape
    return (A.nnz * (A.data.itemsize + A.indices.itemsize) + (n_rows + 1) * A.indptr.itemsize
            + 8 * n_vectors * (n_cols + 2 * n_rows))


# ---------------------------------------------------------------------------

def section_setup(args, report):
    print("== setup ==")
    print(f"python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}")
    print(f"machine: {platform.machine()}, os.cpu_count() = {os.cpu_count()}, "
          f"affinity = {len(os.sched_getaffinity(0))} cpus, {load()}")
    print(f"lanqr._vecops: OpenMP {'on' if _vecops.openmp_enabled() else 'off'}, "
          f"omp_get_max_threads = {_vecops.openmp_max_threads()}, "
          f"default_threads = {default_threads()}, OMP_NUM_THREADS = "
          f"{os.environ.get('OMP_NUM_THREADS', '(unset)')}, "
          f"OMP_WAIT_POLICY = {os.environ.get('OMP_WAIT_POLICY', '(unset)')}, "
          f"serial below {SERIAL_BELOW_NNZ} stored entries")
    if threadpoolctl is not None:
        info = threadpoolctl.threadpool_info()
        for lib in info:
            print(f"threadpool: {lib.get('internal_api')} {lib.get('version')} "
                  f"threads={lib.get('num_threads')} arch={lib.get('architecture')} "
                  f"prefix={lib.get('prefix')}")
        report["threadpool"] = info
    else:
        print("threadpoolctl not installed; numpy's build configuration:")
        np.show_config()
    print()


def section_bandwidth(args, report):
    print("== memory bandwidth (1 thread, NumPy streaming) vs one SciPy CSR product ==")
    n = 20_000_000 if not args.quick else 4_000_000
    a = np.random.default_rng(0).standard_normal(n)
    b = np.empty_like(a)
    t = timed({"read": lambda: a.sum(), "copy": lambda: np.copyto(b, a),
               "scale": lambda: np.multiply(a, 3.0, out=b)}, args.repeats)
    read_bw = a.nbytes / t["read"] / 1e9
    copy_bw = 2 * a.nbytes / t["copy"] / 1e9
    scale_bw = 2 * a.nbytes / t["scale"] / 1e9
    print(f"arrays of {a.nbytes / 1e6:.0f} MB: read {read_bw:.1f} GB/s, copy {copy_bw:.1f} GB/s "
          f"(read+write), scale {scale_bw:.1f} GB/s   [{load()}]")
    del a, b
    rows = []
    for name, A in products_cases(args, sizes=(1000,) if not args.quick else (316,)):
        x = np.random.default_rng(1).standard_normal(A.shape[1])
        lanqr2 = CsrProduct(A, n_threads=T)
        y = np.empty(A.shape[0])
        t = timed({"scipy": lambda: A @ x, "lanqr2": lambda: lanqr2.matvec(x, out=y)},
                  args.repeats)
        nbytes = csr_bytes(A)
        rows.append([name, A.shape[0], A.nnz, f"{nbytes / 1e6:.0f}", ms(t["scipy"]),
                     f"{nbytes / t['scipy'] / 1e9:.1f}", f"{nbytes / t['scipy'] / 1e9 / read_bw:.2f}",
                     ms(t["lanqr2"]), f"{nbytes / t['lanqr2'] / 1e9:.1f}"])
    table(["matrix", "n", "nnz", "MB moved", "scipy ms", "scipy GB/s", "of stream read",
           f"lanqr {T}T ms", f"lanqr {T}T GB/s"], rows)
    report["bandwidth"] = {"read_GBs": read_bw, "copy_GBs": copy_bw, "products": rows}


def products_cases(args, sizes=None):
    if sizes is None:
        sizes = (100, 316, 1000) if not args.quick else (100, 316)
    for m in sizes:
        yield f"laplacian {m}x{m}", problems.laplacian_grid((m, m))
    for m in sizes:
        yield f"geometric graph {m * m}", problems.random_geometric_graph(m * m, seed=1)


def section_matvec(args, report):
    print("== y = A x: SciPy vs lanqr (bitwise equal results checked) ==")
    rows = []
    for name, A in products_cases(args):
        x = np.random.default_rng(2).standard_normal(A.shape[1])
        ref = A @ x
        variants = {"scipy": lambda: A @ x}
        kernels = {
            "1T": CsrProduct(A, n_threads=1),
            "nT static": CsrProduct(A, n_threads=T, serial_below=0, schedule="static"),
            "nT dynamic": CsrProduct(A, n_threads=T, serial_below=0, schedule="dynamic"),
            "auto": CsrProduct(A),
        }
        for key, kernel in kernels.items():
            out = np.empty(A.shape[0])
            assert np.array_equal(kernel.matvec(x, out=out), ref), key
            variants[key] = (lambda k=kernel, o=out: k.matvec(x, out=o))
        # Like SciPy, a fresh output array per product (page faults included).
        variants["1T new y"] = lambda k=kernels["1T"]: k.matvec(x)
        t = timed(variants, args.repeats)
        rows.append([name, A.shape[0], A.nnz, ms(t["scipy"]), f"{t['scipy'] / t['1T new y']:.2f}"]
                    + [f"{t['scipy'] / t[k]:.2f}" for k in kernels]
                    + [f"{A.nnz / t['scipy'] / 1e6:.0f}"])
    table(["matrix", "n", "nnz", "scipy ms", "1T new y x", "1T x", f"{T}T static x",
           f"{T}T dynamic x", "auto x", "scipy Mnnz/s"], rows)
    print("(x: SciPy time / lanqr time.  '1T new y' allocates the result like SciPy; the other\n"
          " columns write into a preallocated y, as the solver does.  'auto': default threads\n"
          f" and the serial threshold of {SERIAL_BELOW_NNZ} stored entries.)")
    print(f"[{load()}]\n")
    report["matvec"] = rows


def section_threshold(args, report):
    print(f"== threshold: 1 vs {T} threads on small matrices (ratio t1/t{T}; > 1: threads pay) ==")
    rows = []
    for m in (20, 45, 70, 100, 140, 200, 280, 400):
        A = problems.laplacian_grid((m, m))
        x = np.random.default_rng(3).standard_normal(A.shape[1])
        one = CsrProduct(A, n_threads=1)
        two = CsrProduct(A, n_threads=T, serial_below=0)
        out = np.empty(A.shape[0])
        reps = max(args.repeats, 2000 // m)
        t = timed({"1": lambda: one.matvec(x, out=out), "2": lambda: two.matvec(x, out=out)}, reps)
        rows.append([A.shape[0], A.nnz, f"{t['1'] * 1e6:.1f}", f"{t['2'] * 1e6:.1f}",
                     f"{t['1'] / t['2']:.2f}"])
    table(["n", "nnz", "1T us", f"{T}T us", f"t1/t{T}"], rows)
    print(f"[{load()}]\n")
    report["threshold"] = rows


def section_block(args, report):
    print("== Y = A X (block of k vectors): SciPy A @ X (C-order X) vs lanqr (C- and F-order X) ==")
    rows = []
    sizes = (316, 1000) if not args.quick else (100, 316)
    for name, A in products_cases(args, sizes=sizes):
        for k in (4, 8):
            X = np.random.default_rng(4).standard_normal((A.shape[1], k))
            XF = np.asfortranarray(X)
            ref = A @ X
            P1 = CsrProduct(A, n_threads=1)
            P2 = CsrProduct(A, n_threads=T, serial_below=0)
            YC = np.empty((A.shape[0], k))
            YF = np.empty((A.shape[0], k), order="F")
            y = np.empty(A.shape[0])
            assert np.array_equal(P1.matmat(X, out=YC), ref)
            assert np.array_equal(P2.matmat(XF, out=YF), ref)
            xs = [np.ascontiguousarray(X[:, c]) for c in range(k)]

            def k_products():
                for c in range(k):
                    P1.matvec(xs[c], out=y)

            t = timed({
                "scipy": lambda: A @ X,
                "C 1T": lambda: P1.matmat(X, out=YC),
                "C nT": lambda: P2.matmat(X, out=YC),
                "F 1T": lambda: P1.matmat(XF, out=YF),
                "F nT": lambda: P2.matmat(XF, out=YF),
                "k matvecs 1T": k_products,
            }, args.repeats)
            rows.append([name, k, ms(t["scipy"])]
                        + [f"{t['scipy'] / t[v]:.2f}" for v in
                           ("C 1T", "C nT", "F 1T", "F nT")]
                        + [f"{t['k matvecs 1T'] / t['C 1T']:.2f}"])
    table(["matrix", "k", "scipy ms", "C 1T x", f"C {T}T x", "F 1T x", f"F {T}T x",
           "k matvecs 1T / block C 1T"], rows)
    print(f"[{load()}]\n")
    report["block"] = rows


def section_fused(args, report):
    print("== one Lanczos recurrence step: w = A v; alpha = v.w; w -= alpha v + beta u; ||w|| ==")
    rows = []
    sizes = (316, 1000) if not args.quick else (100, 316)
    for name, A in products_cases(args, sizes=sizes):
        if not name.startswith("laplacian"):
            continue
        rng = np.random.default_rng(5)
        v = rng.standard_normal(A.shape[0])
        v /= np.linalg.norm(v)
        u = rng.standard_normal(A.shape[0])
        u /= np.linalg.norm(u)
        beta = 0.5
        w = np.empty(A.shape[0])
        P = CsrProduct(A, n_threads=T)

        def numpy_step():
            w = A @ v
            alpha = v @ w
            w -= alpha * v
            w -= beta * u
            return np.linalg.norm(w)

        def product_then_numpy():
            P.matvec(v, out=w)
            alpha = v @ w
            w.__isub__(alpha * v)
            w.__isub__(beta * u)
            return np.linalg.norm(w)

        def fused():
            _, alpha = P.matvec_dot(v, out=w)
            return recurrence_update(w, v, u, alpha, beta)

        def product_only():
            P.matvec(v, out=w)

        ref = numpy_step()
        assert abs(fused() - ref) <= 1e-10 * ref
        t = timed({"scipy+numpy": numpy_step, "lanqr product+numpy": product_then_numpy,
                   "fused": fused, "product only": product_only}, args.repeats)
        rows.append([name, ms(t["scipy+numpy"]), ms(t["lanqr product+numpy"]), ms(t["fused"]),
                     ms(t["product only"]), f"{t['scipy+numpy'] / t['fused']:.2f}",
                     f"{t['lanqr product+numpy'] / t['fused']:.2f}",
                     f"{t['fused'] / t['product only']:.2f}"])
    table(["matrix", "scipy+numpy ms", "lanqr A@x + numpy ms", "fused ms", "product only ms",
           "numpy/fused", "unfused/fused", "fused/product"], rows)
    print(f"[{load()}]\n")
    report["fused"] = rows


def _blas_limits(threads):
    if threadpoolctl is None or threads is None:
        return contextlib.nullcontext()
    return threadpoolctl.threadpool_limits(limits=threads, user_api="blas")


def section_gs(args, report):
    print("== Gram-Schmidt pass c = V^T w; w -= V c (V column-major, n x j) ==")
    rows = []
    ns = (100_000, 1_000_000) if not args.quick else (100_000,)
    for n in ns:
        for j in (20, 50, 100):
            rng = np.random.default_rng(6)
            V = np.asfortranarray(rng.standard_normal((n, j)))
            V /= np.linalg.norm(V, axis=0)
            w0 = rng.standard_normal(n)
            w = w0.copy()
            coef = np.empty(j)

            def numpy_pass():
                w[:] = w0
                c = V.T @ w
                w.__isub__(V @ c)
                return c

            def numpy_dgks():
                w[:] = w0
                before = np.linalg.norm(w)
                c = V.T @ w
                w.__isub__(V @ c)
                after = np.linalg.norm(w)
                if after < 0.7071067811865476 * before:
                    c2 = V.T @ w
                    w.__isub__(V @ c2)

            def lanqr_pass():
                w[:] = w0
                orthogonalize(V, w, coefficients=coef, max_passes=1)

            def lanqr_dgks():
                w[:] = w0
                orthogonalize(V, w, coefficients=coef)

            def copy_only():
                w[:] = w0

            result = {}
            for threads in ((None, 1) if threadpoolctl is not None else (None,)):
                with _blas_limits(threads):
                    result[threads] = timed({"numpy": numpy_pass, "lanqr": lanqr_pass,
                                             "numpy dgks": numpy_dgks, "lanqr dgks": lanqr_dgks,
                                             "copy": copy_only},
                                            max(3, args.repeats // (4 if n >= 10**6 else 1)))
            base = result[None]
            vbytes = V.nbytes * 2  # one pass reads V twice
            rows.append([n, j, ms(base["numpy"] - base["copy"]), ms(base["lanqr"] - base["copy"]),
                         f"{(base['numpy'] - base['copy']) / (base['lanqr'] - base['copy']):.2f}",
                         f"{(base['numpy dgks'] - base['copy']) / (base['lanqr dgks'] - base['copy']):.2f}",
                         f"{vbytes / (base['lanqr'] - base['copy']) / 1e9:.1f}"]
                        + ([f"{(result[1]['numpy'] - result[1]['copy']) / (result[1]['lanqr'] - result[1]['copy']):.2f}",
                            f"{(base['lanqr'] - base['copy']) / (result[1]['lanqr'] - result[1]['copy']):.2f}"]
                           if 1 in result else []))
            del V
    header = ["n", "j", "numpy ms", "lanqr ms", "numpy/lanqr", "with DGKS test numpy/lanqr",
              "lanqr GB/s (V read twice)"]
    if threadpoolctl is not None:
        header += ["1 BLAS thread numpy/lanqr", "lanqr default/1 thread"]
    table(header, rows)
    print(f"[{load()}]\n")
    report["gs"] = rows


def section_rotate(args, report):
    print("== Ritz vectors V[:, :k] = V[:, :m] Y: NumPy (new array) vs lanqr (in place, chunks) ==")
    rows = []
    ns = (100_000, 1_000_000) if not args.quick else (100_000,)
    for n in ns:
        for m, k in ((60, 20), (100, 30)):
            rng = np.random.default_rng(7)
            V = np.asfortranarray(rng.standard_normal((n, m)))
            V0 = V.copy(order="F")
            Y = np.asfortranarray(np.linalg.qr(rng.standard_normal((m, m)))[0][:, :k])
            ref = V @ Y
            rotate_basis(V, Y)
            err = np.abs(V[:, :k] - ref).max() / np.abs(ref).max()
            del ref

            def numpy_rotate():
                V[:, :k] = V0 @ Y

            def lanqr_rotate():
                V[:, :] = V0
                rotate_basis(V, Y)

            def restore():
                V[:, :] = V0

            t = timed({"numpy": numpy_rotate, "lanqr": lanqr_rotate, "restore": restore},
                      max(3, args.repeats // (4 if n >= 10**6 else 1)))
            peaks = {}
            for name, f in (("numpy", lambda: V0 @ Y), ("lanqr", lambda: rotate_basis(V, Y))):
                tracemalloc.start()
                f()
                peaks[name] = tracemalloc.get_traced_memory()[1]
                tracemalloc.stop()
            rows.append([n, m, k, ms(t["numpy"]), ms(t["lanqr"] - t["restore"]),
                         f"{t['numpy'] / (t['lanqr'] - t['restore']):.2f}",
                         f"{peaks['numpy'] / 1e6:.1f}", f"{peaks['lanqr'] / 1e6:.2f}", f"{err:.1e}"])
            del V, V0
    table(["n", "m", "k", "numpy ms", "lanqr ms", "numpy/lanqr", "numpy extra MB",
           "lanqr extra MB", "rel. diff"], rows)
    print(f"[{load()}]\n")
    report["rotate"] = rows


def section_lanczos(args, report):
    print("== m Lanczos steps with full reorthogonalization (CGS + DGKS), basis n x m ==")
    print("   NumPy/SciPy (A @ v, V.T @ w, V @ c, norms) vs lanqr kernels (fused product,")
    print("   fused update, orthogonalize); 'product share' = m products / whole loop")
    rows = []
    m = 60
    sizes = (316, 1000) if not args.quick else (100, 316)
    for side in sizes:
        A = problems.laplacian_grid((side, side))
        n = A.shape[0]
        P = CsrProduct(A, n_threads=T)
        start = np.random.default_rng(8).standard_normal(n)
        V = np.zeros((n, m + 1), order="F")

        def numpy_loop():
            V[:, 0] = start / np.linalg.norm(start)
            beta = 0.0
            for j in range(m):
                w = A @ V[:, j]
                alpha = V[:, j] @ w
                w -= alpha * V[:, j]
                if j:
                    w -= beta * V[:, j - 1]
                before = np.linalg.norm(w)
                c = V[:, : j + 1].T @ w
                w -= V[:, : j + 1] @ c
                nw = np.linalg.norm(w)
                if nw < DGKS * before:
                    c = V[:, : j + 1].T @ w
                    w -= V[:, : j + 1] @ c
                    nw = np.linalg.norm(w)
                beta = nw
                V[:, j + 1] = w / beta

        w = np.empty(n)
        coef = np.empty(m + 1)

        def lanqr_loop():
            V[:, 0] = start / np.linalg.norm(start)
            beta = 0.0
            for j in range(m):
                _, alpha = P.matvec_dot(V[:, j], out=w)
                recurrence_update(w, V[:, j], V[:, j - 1] if j else None, alpha, beta,
                                  n_threads=T)
                proj = orthogonalize(V[:, : j + 1], w, coefficients=coef[: j + 1])
                beta = proj.norm
                np.multiply(w, 1.0 / beta, out=V[:, j + 1])

        def products_only():
            for j in range(m):
                P.matvec(V[:, j], out=w)

        def scipy_products_only():
            for j in range(m):
                A @ V[:, j]

        lanqr_loop()
        basis = V[:, : m + 1]
        orth = np.abs(basis.T @ basis - np.eye(m + 1)).max()
        reps = max(3, args.repeats // 5)
        t = timed({"numpy": numpy_loop, "lanqr": lanqr_loop, "products": products_only,
                   "scipy products": scipy_products_only}, reps)
        rows.append([n, m, ms(t["numpy"]), ms(t["lanqr"]), f"{t['numpy'] / t['lanqr']:.2f}",
                     f"{t['scipy products'] / t['numpy']:.2f}", f"{t['products'] / t['lanqr']:.2f}",
                     f"{orth:.1e}"])
    table(["n", "m", "numpy loop ms", "lanqr loop ms", "numpy/lanqr", "product share numpy",
           "product share lanqr", "max|VtV - I| lanqr"], rows)
    print(f"[{load()}]\n")
    report["lanczos"] = rows


def section_reorder(args, report):
    print("== random geometric graph: stored order vs reverse Cuthill-McKee order (1 thread) ==")
    from scipy.sparse.csgraph import reverse_cuthill_mckee

    rows = []
    for nodes in ((10**5, 10**6) if not args.quick else (10**5,)):
        A = problems.random_geometric_graph(nodes, seed=1)
        t0 = time.perf_counter()
        perm = reverse_cuthill_mckee(A, symmetric_mode=True)
        B = A[perm][:, perm].tocsr()
        t_reorder = time.perf_counter() - t0
        x = np.random.default_rng(9).standard_normal(nodes)
        y = np.empty(nodes)
        PA, PB = CsrProduct(A, n_threads=1), CsrProduct(B, n_threads=1)
        t = timed({"scipy": lambda: A @ x, "scipy rcm": lambda: B @ x,
                   "lanqr": lambda: PA.matvec(x, out=y), "lanqr rcm": lambda: PB.matvec(x, out=y)},
                  args.repeats)
        rows.append([nodes, A.nnz, ms(t["scipy"]), ms(t["scipy rcm"]), ms(t["lanqr"]),
                     ms(t["lanqr rcm"]), f"{t['lanqr'] / t['lanqr rcm']:.2f}",
                     f"{t_reorder:.2f}", f"{t_reorder / (t['lanqr'] - t['lanqr rcm']):.0f}"])
    table(["n", "nnz", "scipy ms", "scipy RCM ms", "lanqr ms", "lanqr RCM ms", "RCM gain",
           "reorder s", "products to repay"], rows)
    print(f"[{load()}]\n")
    report["reorder"] = rows


DGKS = 0.7071067811865476


SECTIONS = {
    "setup": section_setup,
    "bandwidth": section_bandwidth,
    "matvec": section_matvec,
    "threshold": section_threshold,
    "block": section_block,
    "fused": section_fused,
    "gs": section_gs,
    "rotate": section_rotate,
    "lanczos": section_lanczos,
    "reorder": section_reorder,
}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", nargs="+", choices=sorted(SECTIONS), help="sections to run")
    parser.add_argument("--quick", action="store_true", help="smaller sizes")
    parser.add_argument("--repeats", type=int, default=21, help="repeats per timing (median)")
    parser.add_argument("--json", help="write the tables to this JSON file")
    parser.add_argument("--stat", choices=["median", "min"], default="median",
                        help="statistic over the repeats (default median)")
    parser.add_argument("--threads", type=int, default=2,
                        help="thread count of the multithreaded columns (default 2)")
    parser.add_argument("--blas-threads", type=int, default=None,
                        help="limit BLAS threads for the whole run (threadpoolctl)")
    args = parser.parse_args(argv)
    report = {"argv": sys.argv[1:], "start": time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime())}
    names = args.only or list(SECTIONS)
    if "setup" not in names:
        names = ["setup"] + names
    global T, STAT
    T = args.threads
    STAT = args.stat
    print(f"statistic: {STAT} of {args.repeats} repeats (round-robin); ratios > 1: lanqr faster\n")
    limit = contextlib.nullcontext()
    if args.blas_threads is not None:
        if threadpoolctl is None:
            parser.error("--blas-threads needs threadpoolctl")
        limit = threadpoolctl.threadpool_limits(limits=args.blas_threads, user_api="blas")
    with limit:
        for name in names:
            SECTIONS[name](args, report)
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(report, fh, indent=1, default=str)


if __name__ == "__main__":
    main()
