"""Public solver functions: the k lowest or highest eigenpairs of a symmetric operator."""
from __future__ import annotations

import contextlib
import numbers
import time
import warnings

import numpy as np
import scipy.linalg

from lanqr.operators import as_operator
from lanqr.lanczos import REORTHOGONALIZATION
from lanqr.restart import FLOOR_FACTOR, thick_restart_lanczos
from lanqr.result import EigenResult
from lanqr.vectorspace import VectorSpace

__all__ = ["lowest", "highest", "NotConvergedWarning", "default_basis"]

_EPS = np.finfo(np.float64).eps

#: Reorthogonalization of standard problems when not told otherwise.
DEFAULT_REORTHOGONALIZATION = "partial"


class NotConvergedWarning(RuntimeWarning):
    """Some requested eigenpairs did not reach the tolerance; the result says which."""


def default_basis(k):
    """The default largest basis size for ``k`` wanted pairs (chosen by measurement).

    On the 2-D Laplacian 300x300 (lowest 10, tol 1e-8) a basis of 30, 40 and
    60 took 11717, 6062 and 4385 operator applications; on the 3-D Laplacian
    50^3 1559, 1377 and 1304; on the Heisenberg ring of 20 sites (lowest 4)
    the size made no difference (130 +- 3).  Clustered spectra gain from a
    larger basis; the memory is ``basis`` vectors of length n.
    """
    return max(4 * k + 10, 30)


# Fewest active Lanczos vectors beside k locked pairs: the verification round
# needs a few steps (VERIFY_MIN_STEPS) before it can certify anything.
_MIN_ACTIVE = 5

# Below this order (or when the basis would cover a large part of the space)
# a dense symmetric solver is faster and exact to rounding.
_DENSE_MAX_ORDER = 200


def _validate(k, tol, basis, max_restarts, start):
    if isinstance(k, bool) or not isinstance(k, numbers.Integral):
        raise ValueError(f"k must be an integer, got {k!r}")
    if not isinstance(tol, numbers.Real) or not np.isfinite(tol) or not (0.0 < tol < 1.0):
        raise ValueError(f"tol must be a number in (0, 1), got {tol!r}")
    if basis is not None and (isinstance(basis, bool) or not isinstance(basis, numbers.Integral)):
        raise ValueError(f"basis must be an integer, got {basis!r}")
    if max_restarts is not None and (isinstance(max_restarts, bool)
                                     or not isinstance(max_restarts, numbers.Integral)
                                     or max_restarts < 0):
        raise ValueError(f"max_restarts must be a non-negative integer, got {max_restarts!r}")
    if start is not None:
        start = np.asarray(start)
        if np.iscomplexobj(start):
            raise ValueError("start must be a real vector")
        start = start.astype(np.float64).ravel()
        if not np.all(np.isfinite(start)):
            raise ValueError("start contains NaN or Inf")
        if not np.any(start):
            raise ValueError("start must not be the zero vector")
    return start


def _single_threaded_blas():
    """Limit BLAS to one thread while the Lanczos iteration runs.

    The iteration's BLAS work is small (dgemv on a basis of tens of columns,
    projected problems of order tens): measured on a loaded 2-core machine a
    Gram-Schmidt pass of 1e5 x 20 took 48 ms with two OpenBLAS threads and
    1.3 ms with one (bench/bench_products.py).  threadpoolctl is optional; it
    changes the process's BLAS setting for the duration of the solve and
    restores it afterwards.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def _solve(A, k, selector, tol, basis, max_restarts, seed, start, callback,
           reorthogonalization=None):
    t0 = time.perf_counter()
    start = _validate(k, tol, basis, max_restarts, start)
    if reorthogonalization is None:
        reorthogonalization = DEFAULT_REORTHOGONALIZATION
    if reorthogonalization not in REORTHOGONALIZATION:
        raise ValueError(f"reorthogonalization must be one of {REORTHOGONALIZATION}, "
                         f"got {reorthogonalization!r}")
    rng = np.random.default_rng(seed)
    op = as_operator(A, seed=rng)
    n = op.n
    if not (1 <= k < n):
        raise ValueError(f"k must satisfy 1 <= k < n = {n}, got k = {k}")
    if start is not None and start.size != n:
        raise ValueError(f"start has length {start.size}, expected n = {n}")
    if basis is None:
        basis = default_basis(k)
    basis = int(basis)
    if basis < k + _MIN_ACTIVE:
        raise ValueError(f"basis must be at least k + {_MIN_ACTIVE} = {k + _MIN_ACTIVE} "
                         f"(room for an active Lanczos basis beside the k locked pairs), "
                         f"got basis = {basis}")
    if max_restarts is None:
        max_restarts = 1000
    space = VectorSpace(n)
    info = {}

    if n <= max(_DENSE_MAX_ORDER, 2 * basis):
        dense = op.to_dense()
        lo, hi = (0, k - 1) if selector == "lowest" else (n - k, n - 1)
        vals, vecs = scipy.linalg.eigh(dense, subset_by_index=(lo, hi))
        anorm = float(np.max(np.abs(scipy.linalg.eigvalsh(dense, subset_by_index=(0, 0)))))
        anorm = max(anorm, float(np.max(np.abs(scipy.linalg.eigvalsh(
            dense, subset_by_index=(n - 1, n - 1))))))
        method = "dense (scipy.linalg.eigh)"
        restarts, history = 0, []
        vecs = np.asfortranarray(vecs)
        products = op.apply_block(vecs)
    else:
        basis = min(basis, n - 1)
        with _single_threaded_blas():
            out = thick_restart_lanczos(op.apply, space, n, k, selector, tol=tol, basis=basis,
                                        max_restarts=max_restarts, rng=rng, start=start,
                                        callback=callback, apply_block=op.apply_block,
                                        apply_dot=op.apply_dot, n_threads=op.n_threads,
                                        reorthogonalization=reorthogonalization)
        vals, vecs, products = out["values"], out["vectors"], out["products"]
        anorm = out["norm_estimate"]
        method = f"thick-restart Lanczos (basis {basis})"
        restarts, history = out["restarts"], out["history"]
        info.update(verification=out["verification"], verified=out["verified"],
                    exhausted=out["exhausted"], estimates=out["estimates"],
                    reorthogonalization=out["reorthogonalization"])

    # Explicit residuals, relative to the pair's own eigenvalue with a floor
    # at the rounding level of one product (see lowest(), Notes).
    anorm = max(anorm, float(np.max(np.abs(vals))))
    floor = FLOOR_FACTOR * _EPS * anorm / tol
    R = products - vecs * vals
    rnorm = space.column_norms(R)
    residuals = rnorm / np.maximum(np.abs(vals), floor) if floor > 0 else \
        np.where(rnorm == 0, 0.0, np.inf)
    converged = residuals <= tol

    order = np.argsort(vals, kind="stable")
    result = EigenResult(
        values=vals[order], vectors=np.asfortranarray(vecs[:, order]),
        residuals=residuals[order], converged=converged[order],
        matvecs=op.applications, restarts=restarts, history=history,
        elapsed=time.perf_counter() - t0, tol=tol, method=method, info=info)
    info["norm_estimate"] = anorm
    if result.all_converged and info.get("verified") is False:
        warnings.warn(
            f"all {k} pairs converged, but the search for further copies of repeated "
            f"eigenvalues stopped before it could certify the set (after {restarts} restarts"
            f"{', basis full of locked pairs' if info.get('exhausted') else ''}); raise "
            f"max_restarts or basis", NotConvergedWarning, stacklevel=3)
    if not result.all_converged:
        warnings.warn(
            f"{int(np.sum(result.converged))} of {k} eigenpairs converged to tol={tol:g} "
            f"after {restarts} restarts; see result.converged.  Converged pairs are "
            f"eigenpairs, but not necessarily the {k} {selector} ones: the search did not "
            f"finish (for a cluster near a spectral end, a shift-invert transformation "
            f"helps)", NotConvergedWarning, stacklevel=3)
    return result


_DOC_COMMON = """
    Parameters
    ----------
    A : ndarray, scipy.sparse matrix or array, LinearOperator, or object with ``shape`` and ``matvec``
        The real symmetric operator.  Sparse input is converted to CSR once;
        float32 is computed in float64; complex input is rejected.
    k : int, optional
        Number of eigenpairs, ``1 <= k < n``.
    M : ndarray or scipy.sparse matrix, optional
        Symmetric positive definite mass matrix: solve ``A x = lambda M x``
        (vectors M-orthonormal, residuals ``||A x - l M x|| / ((||A|| + |l|
        ||M||) ||x||)``).  The lowest modes of an explicit ``A`` are then found
        by shift-invert about 0 (stepped off a singular point such as
        rigid-body modes), with an inertia count check in ``count_check``; see
        :mod:`lanqr.spectral`.
    shift : float, optional (``lowest`` only)
        Shift-invert about ``shift`` (with or without ``M``).
    tol : float, optional
        Relative tolerance per pair (see Notes).
    basis : int, optional
        Largest basis size, at least ``k + 5``; default ``max(4 k + 10, 30)``
        (chosen by measurement).
    max_restarts : int, optional
        Bound on restarts (default 1000).
    seed : int, numpy.random.Generator or None, optional
        Drives every random choice: the same seed gives the same result bit for bit.
    start : array_like, optional
        Start vector (random by default).
    callback : callable, optional
        ``callback(info)`` after each restart; ``info`` is a dict with the
        restart number, phase, number of locked pairs, Ritz values and
        residual estimates.
    reorthogonalization : {"full", "partial"}, optional
        ``"full"``: every new Lanczos vector is orthogonalized against the
        whole basis.  ``"partial"``: against the active basis only when
        Simon's estimate of the loss of orthogonality exceeds sqrt(eps)
        (standard problems only, see Notes).  Default: ``"partial"`` for
        standard problems (chosen by measurement, ``bench/bench_speed.py``),
        ``"full"`` with ``M`` or ``shift``.

    Returns
    -------
    EigenResult
        ``values`` ascending, ``vectors`` (orthonormal columns), explicitly
        computed relative ``residuals``, ``converged`` flags, ``matvecs``
        (including the ``k`` products of the final residual check),
        ``restarts``, ``history``, ``elapsed``.

    Raises
    ------
    ValueError
        Non-square, complex, non-symmetric, NaN/Inf input; ``k`` out of range;
        bad ``tol``, ``basis``, ``max_restarts``, ``start`` or
        ``reorthogonalization`` (``"partial"`` with ``M`` or ``shift``).

    Warns
    -----
    NotConvergedWarning
        When some pairs did not converge within ``max_restarts``; the result
        holds the best approximations with ``converged`` False.  Also when
        every pair converged but the search for missed copies of repeated
        eigenvalues could not finish (``result.info["verified"]`` False).

    Notes
    -----
    A pair ``(t, x)``, ``||x|| = 1``, is converged when

        ``||A x - t x|| <= tol * max(|t|, floor)``,  ``floor = c eps ||A||_est / tol``

    with ``c = 100`` and ``||A||_est`` the largest |Ritz value| seen.  Each
    eigenvalue is thus accurate relative to itself, as the lowest modes of a
    stiff problem need; the floor only matters for eigenvalues within about
    ``c eps ||A|| / tol`` of zero, where it asks for a residual at the
    rounding level ``c eps ||A||`` of a single product (no smaller residual can
    be computed).  Everything is relative: multiplying ``A`` by 1e-150 or
    1e150 gives the same relative results.  ``residuals`` holds
    ``||A x - t x|| / max(|t|, floor)`` computed explicitly at the end.

    The method is Lanczos with full reorthogonalization (classical
    Gram-Schmidt, DGKS second pass) and thick restart with locking; after the
    wanted pairs converge, a verification round from a fresh random vector
    looks for copies of repeated eigenvalues (``result.info["verification"]``:
    rounds, copies found, steps; ``result.info["verified"]``: whether the
    round certified the set).  With ``reorthogonalization="partial"`` the
    basis is kept semi-orthogonal (``|q_i . q_j|`` about sqrt(eps)), which
    keeps the Ritz values accurate to working precision (Simon 1984) at a
    fraction of the Gram-Schmidt cost; the residuals are still computed
    explicitly at the end.  Sparse input is applied by lanqr's compiled CSR
    product (threads from ``OMP_NUM_THREADS``), and BLAS is limited to one
    thread during the iteration when threadpoolctl is installed.  Problems of order at most
    ``max(200, 2 basis)`` are solved densely with ``scipy.linalg.eigh``.

    References
    ----------
    K. Wu and H. Simon, SIAM J. Matrix Anal. Appl. 22 (2000) 602-616.
    B. N. Parlett, The Symmetric Eigenvalue Problem, SIAM 1998.
    H. D. Simon, Math. Comp. 42 (1984) 115-142 (partial reorthogonalization).
"""


def _standard_only(reorthogonalization):
    if reorthogonalization not in (None, "full"):
        raise ValueError(f"reorthogonalization={reorthogonalization!r} is available for "
                         "standard problems only (no M, no shift)")


def lowest(A, k=6, *, M=None, shift=None, tol=1e-8, basis=None, max_restarts=None, seed=None,
           start=None, callback=None, reorthogonalization=None):
    if M is not None or shift is not None:
        _standard_only(reorthogonalization)
        from lanqr.spectral import generalized_lowest
        return generalized_lowest(A, k, M=M, shift=shift, tol=tol, basis=basis,
                                  max_restarts=max_restarts, seed=seed, start=start,
                                  callback=callback)
    return _solve(A, k, "lowest", tol, basis, max_restarts, seed, start, callback,
                  reorthogonalization)


def highest(A, k=6, *, M=None, tol=1e-8, basis=None, max_restarts=None, seed=None, start=None,
            callback=None, reorthogonalization=None):
    if M is not None:
        _standard_only(reorthogonalization)
        from lanqr.spectral import generalized_highest
        return generalized_highest(A, k, M=M, tol=tol, basis=basis, max_restarts=max_restarts,
                                   seed=seed, start=start, callback=callback)
    return _solve(A, k, "highest", tol, basis, max_restarts, seed, start, callback,
                  reorthogonalization)


lowest.__doc__ = """The ``k`` lowest (algebraically smallest) eigenpairs of a symmetric operator.
""" + _DOC_COMMON + """
    Examples
    --------
    >>> import lanqr
    >>> from lanqr.problems import laplacian_grid
    >>> res = lanqr.lowest(laplacian_grid((30, 30)), k=3, seed=0)
    >>> res.values.round(6)   # closed form 4 sin^2(j pi/62) + 4 sin^2(l pi/62)
    array([0.020523, 0.051201, 0.051201])
"""

highest.__doc__ = """The ``k`` highest (algebraically largest) eigenpairs of a symmetric operator.
""" + _DOC_COMMON + """
    Examples
    --------
    >>> import lanqr
    >>> from lanqr.problems import laplacian_grid
    >>> res = lanqr.highest(laplacian_grid((30, 30)), k=1, seed=0)
    >>> res.values.round(6)
    array([7.979477])
"""
