"""Helpers shared by the solver benchmarks: time caps, residuals, errors.

Imported by bench_solver.py and bench_speed.py (run from the repository root;
Python puts bench/ on the path for a script in it).
"""
from __future__ import annotations

import multiprocessing as mp

import time
import tracemalloc

import numpy as np
import scipy.sparse.linalg as spla


def run_capped(target, args, cap):
    """Run ``target(conn, *args)`` in a forked child; ('timeout', cap) past the cap."""
    ctx = mp.get_context("fork")
    parent, child = ctx.Pipe(duplex=False)
    p = ctx.Process(target=target, args=(child, *args))
    p.start()
    child.close()
    if parent.poll(cap):
        msg = parent.recv()
        p.join()
        return msg
    p.kill()
    p.join()
    return ("timeout", cap)


def relative_residuals(A, vals, vecs, tol, anorm):
    """||A x - t x|| / max(|t|, floor), the definition lanqr documents
    (with the Gershgorin bound for ||A||, the same for every side)."""
    floor = 100 * np.finfo(float).eps * anorm / tol
    R = A @ vecs - vecs * vals
    return np.linalg.norm(R, axis=0) / np.maximum(np.abs(vals), floor)


def max_error(vals, exact, anorm):
    """Relative error per value; for an exact zero, |theta| / ||A||."""
    if exact is None:
        return float("nan")
    m = len(exact)
    scale = np.where(exact == 0.0, anorm, np.abs(exact))
    return float(np.max(np.abs(vals[:m] - exact) / scale))


def zero_multiplicity_values(A, k):
    """A graph Laplacian has eigenvalue 0 once per connected component (common
    practice; reference-values.md §4 graph Laplacians); components by SciPy."""
    from scipy.sparse.csgraph import connected_components
    ncomp = connected_components(A, directed=False)[0]
    return np.zeros(min(ncomp, k)), ncomp


class Counting(spla.LinearOperator):
    """A sparse matrix as a LinearOperator that counts vectors applied."""

    def __init__(self, A):
        super().__init__(dtype=np.float64, shape=A.shape)
        self.A = A
        self.count = 0

    def _matvec(self, x):
        self.count += 1
        return self.A @ x

    def _matmat(self, X):
        self.count += X.shape[1]
        return self.A @ X


def timed_child(conn, solve, side, A, k, tol, memory):
    """Child process body: time ``solve(side, A, k, tol)`` and send the outcome."""
    try:
        if memory:
            tracemalloc.start()
        t0 = time.perf_counter()
        vals, vecs, count = solve(side, A, k, tol)
        elapsed = time.perf_counter() - t0
        peak = tracemalloc.get_traced_memory()[1] if memory else 0
        if memory:
            tracemalloc.stop()
        conn.send(("ok", elapsed, vals, vecs, count, peak))
    except Exception as exc:  # report, do not hang
        conn.send(("error", repr(exc)))
    conn.close()


def ratio_cells(ours, theirs, *, time_width, time_digits, mem_width, missing):
    """``time  matvecs  memory`` ratios of two measured sides for a summary row.

    ``ours`` / ``theirs`` are dicts with ``time``, ``matvecs`` and ``mem``;
    when either is missing the row shows ``missing`` in the time column.
    """
    if ours and theirs:
        return (f"{ours['time'] / theirs['time']:{time_width}.{time_digits}f} "
                f"{ours['matvecs'] / theirs['matvecs']:7.2f} "
                f"{ours['mem'] / max(theirs['mem'], 1e-9):{mem_width}.2f}")
    return f"{missing:>{time_width}s} {'':7s} {'':{mem_width}s}"
