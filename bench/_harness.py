"""Helpers shared by the solver benchmarks: time caps, residuals, errors.

Imported by bench_solver.py and bench_speed.py (run from the repository root;
Python puts bench/ on the path for a script in it).
"""
from __future__ import annotations

import multiprocessing as mp

import numpy as np


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
