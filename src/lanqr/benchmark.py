"""lanqr and ``scipy.sparse.linalg.eigsh`` side by side, in one process.

This is the harness behind ``lanqr bench``.  Both solvers get the same matrix,
the same number of wanted pairs, the same tolerance and the same spectral
transformation (plain, or shift-invert with a sparse LU).  For each solver it
records

* wall time: the median of ``repeat`` timed runs (``time.perf_counter``);
* operator applications: lanqr's own count; for SciPy, the calls of a counting
  wrapper around the operator it iterates with (A, or the shift-invert solve);
* the largest normwise backward error ``||A x - λ M x|| / ((||A|| + |λ| ||M||) ||x||)``,
  computed here, the same way for both, from the returned pairs;
* peak memory: the largest growth of memory traced by :mod:`tracemalloc`
  during one extra, untimed run (NumPy and SciPy arrays register with it; the
  workspace of compiled factorizations does not, so shift-invert cases
  under-count equally for both);

and the ratios lanqr / SciPy (below 1: lanqr is faster or leaner).
"""
from __future__ import annotations

import os
import platform
import statistics
import time
import tracemalloc
from dataclasses import dataclass, field
from typing import Callable, Optional

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from lanqr import problems

__all__ = ["Problem", "Case", "CASES", "DEFAULT_TOL", "compare", "unsupported_reason", "max_backward_error", "machine_setup", "format_setup", "format_table"]

DEFAULT_TOL = 1e-8


@dataclass
class Problem:
    """One eigenproblem to run with both solvers.

    ``mode`` is ``"lowest"``, ``"highest"`` or ``"nearest"`` (then ``target``
    is used).  ``shift`` (lowest only) selects shift-invert about that value.
    """

    name: str
    A: sp.spmatrix
    k: int
    mode: str = "lowest"
    M: Optional[sp.spmatrix] = None
    target: Optional[float] = None
    shift: Optional[float] = None
    description: str = ""


@dataclass
class Case:
    name: str
    description: str
    make: Callable[[], Problem] = field(repr=False)

    def build(self) -> Problem:
        problem = self.make()
        problem.name = self.name
        problem.description = self.description
        return problem


def _drum():
    drum = problems.drum_membrane("crescent", cells=300)
    return Problem("", drum["K"], 10, mode="lowest", M=drum["M"], shift=0.0)


def _plate():
    K, M = problems.bracket_plate(60)
    return Problem("", K, 10, mode="lowest", M=M, shift=0.0)


# The problems of bench/bench_solver.py and bench/bench_shift_invert.py (their
# quick sizes, or near them), so that `lanqr bench` finishes in a few minutes.
CASES = {
    c.name: c
    for c in [
        Case("lap2d", "2-D Dirichlet Laplacian 100 x 100: lowest 10, no transformation",
             lambda: Problem("", problems.laplacian_grid((100, 100)), 10, mode="lowest")),
        Case("lap3d", "3-D Dirichlet Laplacian 20^3: lowest 10, no transformation",
             lambda: Problem("", problems.laplacian_grid((20, 20, 20)), 10, mode="lowest")),
        Case("heis16", "Heisenberg ring of 16 spins, Sz = 0 (12870): lowest 4",
             lambda: Problem("", problems.heisenberg_ring(16), 4, mode="lowest")),
        Case("rgg", "random geometric graph Laplacian, 20000 nodes (many components): 10 nearest -0.001",
             lambda: Problem("", problems.random_geometric_graph(20000, seed=0), 10, mode="nearest",
                             target=-1e-3)),
        Case("lap2d-shift", "2-D Dirichlet Laplacian 150 x 150: lowest 10 by shift-invert about 0",
             lambda: Problem("", problems.laplacian_grid((150, 150)), 10, mode="lowest", shift=0.0)),
        Case("plate", "steel bracket plate, plane stress, 60 x 30 elements, K x = λ M x: lowest 10",
             _plate),
        Case("lattice", "disordered 3-D lattice 20^3: 10 nearest 0 (dense interior)",
             lambda: Problem("", problems.disordered_lattice((20, 20, 20), seed=0), 10, mode="nearest",
                             target=0.0)),
        Case("drum", "crescent drumhead of the demo, 300 cells across, K x = λ M x: lowest 10", _drum),
    ]
}


class _Counting(sla.LinearOperator):
    """Wraps a matrix-vector product and counts its applications (columns of a block count each)."""

    def __init__(self, apply, n):
        super().__init__(dtype=np.float64, shape=(n, n))
        self._apply = apply
        self.count = 0

    def _matvec(self, x):
        self.count += 1
        return self._apply(x)

    def _matmat(self, X):
        self.count += X.shape[1]
        return self._apply(X)


def _scipy_solve(problem, tol, seed, count):
    """eigsh with the transformation that matches what lanqr is asked to do."""
    A, M, k = problem.A, problem.M, problem.k
    n = A.shape[0]
    start_vector = np.random.default_rng(seed).standard_normal(n)
    sigma = problem.target if problem.mode == "nearest" else problem.shift
    counter = None
    if sigma is not None:
        if count:
            shifted = (A - sigma * M if M is not None else A - sigma * sp.identity(n, format="csr")).tocsc()
            lu = sla.splu(shifted)
            counter = _Counting(lu.solve, n)
            w, V = sla.eigsh(A, k, M=M, sigma=sigma, which="LM", OPinv=counter, tol=tol, v0=start_vector)
        else:
            w, V = sla.eigsh(A, k, M=M, sigma=sigma, which="LM", tol=tol, v0=start_vector)
    else:
        which = "LA" if problem.mode == "highest" else "SA"
        op = A
        if count:
            counter = _Counting(lambda x: A @ x, n)
            op = counter
        w, V = sla.eigsh(op, k, M=M, which=which, tol=tol, v0=start_vector)
    order = np.argsort(w)
    return w[order], V[:, order], (counter.count if counter is not None else None)


def _lanqr_solve(problem, tol, seed):
    import lanqr

    A, k = problem.A, problem.k
    # Only what the problem uses, so that a plain problem runs on any build.
    extra = {key: value for key, value in (("M", problem.M), ("shift", problem.shift)) if value is not None}
    if problem.mode == "nearest":
        extra.pop("shift", None)
        res = lanqr.nearest(A, k, problem.target, tol=tol, seed=seed, **extra)
    elif problem.mode == "highest":
        res = lanqr.highest(A, k, tol=tol, seed=seed, **extra)
    else:
        res = lanqr.lowest(A, k, tol=tol, seed=seed, **extra)
    return np.asarray(res.values), np.asarray(res.vectors), int(res.matvecs), res


def unsupported_reason(problem):
    """Why this build of lanqr cannot run ``problem`` (None when it can)."""
    import inspect

    import lanqr

    name = {"nearest": "nearest", "highest": "highest"}.get(problem.mode, "lowest")
    func = getattr(lanqr, name, None)
    if func is None:
        return f"lanqr.{name} is not in this build"
    params = inspect.signature(func).parameters
    for key, value in (("M", problem.M), ("shift", problem.shift)):
        if value is not None and key not in params and problem.mode != "nearest":
            return f"lanqr.{name} takes no {key}= in this build"
    return None


def max_backward_error(A, M, values, vectors):
    """Largest ``||A x - λ M x|| / ((||A||_1 + |λ| ||M||_1) ||x||)`` over the pairs.

    The normwise backward error of each pair (reference-values.md §12, the
    generalized form of LAPACK's test ratios): the same yardstick for both
    solvers, defined for zero eigenvalues too (graph Laplacians), and free of
    either solver's own convergence test.
    """
    if len(values) == 0:
        return float("nan")
    AV = A @ vectors
    MV = vectors if M is None else M @ vectors
    norm_a = float(sla.norm(A, 1)) if sp.issparse(A) else float(np.linalg.norm(A, 1))
    if M is None:
        norm_m = 1.0
    else:
        norm_m = float(sla.norm(M, 1)) if sp.issparse(M) else float(np.linalg.norm(M, 1))
    scale = (norm_a + np.abs(values) * norm_m) * np.linalg.norm(vectors, axis=0)
    return float(np.max(np.linalg.norm(AV - MV * values, axis=0) / scale))


def _timed(func, repeat):
    times = []
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = func()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), times, out


def _peak_memory(func):
    tracemalloc.start()
    try:
        base = tracemalloc.get_traced_memory()[0]
        func()
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    return max(peak - base, 0)


def compare(problem, *, repeat=3, tol=DEFAULT_TOL, seed=0):
    """Run both solvers on ``problem`` and return the measurements as a dict.

    Parameters
    ----------
    problem : Problem
    repeat : int
        Timed runs per solver; the median is reported.
    tol : float
        Tolerance handed to both solvers.
    seed : int
        Seed of both start vectors.

    Returns
    -------
    dict
        ``{"case", "order", "k", "mode", "lanqr": {...}, "scipy": {...},
        "ratios": {...}, "max_value_difference"}`` where each solver entry
        holds ``median_s``, ``times_s``, ``operator_applications``,
        ``max_backward_error``, ``peak_bytes``.
    """
    n = problem.A.shape[0]
    # Interleave so that a change of machine load hits both solvers alike.
    lanqr_times, scipy_times = [], []
    lanqr_out = scipy_out = None
    for _ in range(repeat):
        t_l, _, lanqr_out = _timed(lambda: _lanqr_solve(problem, tol, seed), 1)
        t_s, _, scipy_out = _timed(lambda: _scipy_solve(problem, tol, seed, count=False), 1)
        lanqr_times.append(t_l)
        scipy_times.append(t_s)
    _, _, scipy_matvecs = _scipy_solve(problem, tol, seed, count=True)
    lanqr_peak = _peak_memory(lambda: _lanqr_solve(problem, tol, seed))
    scipy_peak = _peak_memory(lambda: _scipy_solve(problem, tol, seed, count=False))

    l_values, l_vectors, l_matvecs, l_result = lanqr_out
    s_values, s_vectors, _ = scipy_out
    entry = {
        "case": problem.name,
        "description": problem.description,
        "order": n,
        "nonzeros": int(problem.A.nnz),
        "k": problem.k,
        "mode": problem.mode,
        "target": problem.target,
        "shift": problem.shift,
        "lanqr": {
            "median_s": statistics.median(lanqr_times),
            "times_s": lanqr_times,
            "operator_applications": l_matvecs,
            "max_backward_error": max_backward_error(problem.A, problem.M, l_values, l_vectors),
            "peak_bytes": lanqr_peak,
            "converged": int(np.sum(l_result.converged)),
            "method": getattr(l_result, "method", ""),
        },
        "scipy": {
            "median_s": statistics.median(scipy_times),
            "times_s": scipy_times,
            "operator_applications": scipy_matvecs,
            "max_backward_error": max_backward_error(problem.A, problem.M, s_values, s_vectors),
            "peak_bytes": scipy_peak,
        },
    }
    scale = max(float(np.max(np.abs(s_values))), np.finfo(float).tiny)
    entry["max_value_difference"] = (
        float(np.max(np.abs(l_values - s_values)) / scale) if len(l_values) == len(s_values) else None
    )

    def ratio(a, b):
        return float(a) / float(b) if a is not None and b not in (None, 0) else None

    entry["ratios"] = {
        "time": ratio(entry["lanqr"]["median_s"], entry["scipy"]["median_s"]),
        "operator_applications": ratio(l_matvecs, scipy_matvecs),
        "peak_memory": ratio(lanqr_peak, scipy_peak),
    }
    return entry


def machine_setup():
    """Processor count, thread variables and (with threadpoolctl) the BLAS/OpenMP pools."""
    import scipy

    setup = {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "machine": platform.machine(),
        "cpus": os.cpu_count(),
        "environment": {v: os.environ.get(v) for v in
                        ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS") if os.environ.get(v)},
    }
    try:
        import lanqr

        setup["lanqr"] = lanqr.__version__
    except ImportError:  # pragma: no cover
        setup["lanqr"] = None
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        setup["threadpools"] = None
    else:
        setup["threadpools"] = [
            {k: pool.get(k) for k in ("user_api", "internal_api", "num_threads", "version", "filepath")}
            for pool in threadpool_info()
        ]
    return setup


def format_setup(setup):
    lines = [
        f"lanqr {setup.get('lanqr')}, NumPy {setup['numpy']}, SciPy {setup['scipy']}, Python {setup['python']}, "
        f"{setup['cpus']} CPUs ({setup['machine']})"
    ]
    if setup["environment"]:
        lines.append("thread variables: " + ", ".join(f"{k}={v}" for k, v in setup["environment"].items()))
    pools = setup.get("threadpools")
    if pools is None:
        lines.append("thread pools: unknown (pip install threadpoolctl to record the BLAS and OpenMP setup)")
    else:
        for pool in pools:
            lines.append(f"thread pool: {pool.get('internal_api')} {pool.get('version') or ''} "
                         f"({pool.get('user_api')}), {pool.get('num_threads')} threads")
    return "\n".join(lines)


def _fmt_bytes(b):
    return f"{b / 2**20:.1f} MiB"


def _fmt_ratio(r):
    return "-" if r is None else f"{r:.2f}"


def format_table(rows, *, repeat, tol):
    """The side-by-side table printed by ``lanqr bench``."""
    runs = f"median of {repeat} runs each" if repeat > 1 else "1 run each"
    out = [f"{runs}, tolerance {tol:g}; ratio = lanqr / SciPy (below 1: lanqr better)", ""]
    head = (f"{'case':<16} {'order':>7} {'k':>3}  {'time lanqr':>10} {'eigsh':>9} {'ratio':>6}  "
            f"{'op. applications':>16} {'ratio':>6}  {'backward error':>19}  {'peak memory':>19} {'ratio':>6}"
            f"  {'|Δλ|':>7}  {'conv.':>5}")
    out.append(head)
    out.append("-" * len(head))
    for row in rows:
        lq, sc, ra = row["lanqr"], row["scipy"], row["ratios"]
        apps = f"{lq['operator_applications']} / {sc['operator_applications']}"
        resid = f"{lq['max_backward_error']:.1e} / {sc['max_backward_error']:.1e}"
        mem = f"{_fmt_bytes(lq['peak_bytes'])} / {_fmt_bytes(sc['peak_bytes'])}"
        out.append(
            f"{row['case'][:16]:<16} {row['order']:>7} {row['k']:>3}  {lq['median_s']:>9.3f}s {sc['median_s']:>8.3f}s "
            f"{_fmt_ratio(ra['time']):>6}  {apps:>16} {_fmt_ratio(ra['operator_applications']):>6}  "
            f"{resid:>19}  {mem:>19} {_fmt_ratio(ra['peak_memory']):>6}"
            f"  {_fmt_diff(row['max_value_difference']):>7}  {lq['converged']:>2}/{row['k']:<2}"
        )
    out.append("")
    out.append("op. applications, backward error, peak memory: lanqr / SciPy.  Backward error: the largest")
    out.append("||Ax - λMx|| / ((||A|| + |λ| ||M||) ||x||), computed here for both.")
    out.append("|Δλ|: largest difference of the two solvers' eigenvalues relative to the")
    out.append("largest |λ| (a large one usually means one solver skipped a copy of a repeated eigenvalue).")
    out.append("conv.: pairs lanqr reports converged.  Peak memory: traced NumPy/Python allocations.")
    return "\n".join(out)


def _fmt_diff(d):
    return "-" if d is None else f"{d:.0e}"
