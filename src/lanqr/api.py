"""Public solver functions: the k lowest or highest eigenpairs of a symmetric operator."""
from __future__ import annotations

import time
import warnings

import numpy as np
import scipy.linalg

from lanqr.lanczos import REORTHOGONALIZATION
from lanqr.operators import as_operator
from lanqr.options import (NotConvergedWarning, default_basis, resolve_sizes,
                           single_threaded_blas, validate_options)
from lanqr.filtered import continue_filtered
from lanqr.restart import FLOOR_FACTOR, thick_restart_lanczos
from lanqr.result import EigenResult
from lanqr.spectral import generalized_highest, generalized_lowest
from lanqr.vectorspace import VectorSpace

__all__ = ["lowest", "highest", "NotConvergedWarning", "default_basis"]

_EPS = np.finfo(np.float64).eps

#: Reorthogonalization of standard problems when not told otherwise.  Partial
#: reorthogonalization (Simon) skips the Gram-Schmidt pass against the active
#: basis at most steps (71% on the 2-D Laplacian 150x150 in plain Lanczos; 94%,
#: 6 of about 108, on the Heisenberg ring of 22 sites with signed estimates and
#: the threshold following the tolerance from the first cycle,
#: lanczos.PartialOrthogonality.allow).  The coefficients it drops perturb the residual
#: estimates by about 2e-12 ||A||; before pairs were locked at half of tol
#: (restart.LOCK_SHARE) that once left an explicit residual at 1.007 tol (3-D
#: Laplacian 50^3, lowest 10).  With the half-tol locking, the whole test
#: suite and 260 random problems (grid Laplacians, scaled by up to 1e+-150,
#: random sparse, spin rings; tol 1e-5..1e-10, k 1..11, lowest and highest)
#: ended with every explicit residual <= 0.50 tol under the partial strategy;
#: after the estimates became signed, 510 more (tol 1e-3.5..1e-10) gave
#: <= 0.53 tol, and returned vectors orthonormal to 2.4e-15.
DEFAULT_REORTHOGONALIZATION = "partial"


# Fewest active Lanczos vectors beside k locked pairs: the verification round
# needs a few steps (VERIFY_MIN_STEPS) before it can certify anything.
_MIN_ACTIVE = 5

# Below this order (or when the basis would cover a large part of the space)
# a dense symmetric solver is faster and exact to rounding.
_DENSE_MAX_ORDER = 200

#: Polynomial filter settings (see lanqr.polyfilter): "auto" switches to
#: Lanczos on a Chebyshev filter of A when plain Lanczos has not converged
#: after FILTER_AFTER_CYCLES times the basis size in products (explicit
#: matrices only: the filter needs Gershgorin bounds), "on" after the first
#: cycle, "off" never.
POLYNOMIAL_FILTER = ("auto", "on", "off")
# The plain cycles before the switch also place the filter: the cut is the
# Ritz value just beyond the wanted ones, and later Ritz values lie closer to
# the eigenvalues.  Measured on the 2-D Laplacian 150x150 / 3-D 30^3 (lowest
# 10): switching after 2, 4 and 6 cycles took 3370 / 1226, 2702 / 1092 and
# 2160 / 1065 products (plain Lanczos alone: 2046 / 807, at twice the time).
# The Heisenberg rings (lowest 2 and 4) converge within 3 cycles and never
# switch.
FILTER_AFTER_CYCLES = 6
def _solve(A, k, selector, tol, basis, max_restarts, seed, start, callback,
           reorthogonalization=None, polynomial_filter="auto"):
    t0 = time.perf_counter()
    start = validate_options(k, tol, basis, max_restarts, start)
    if reorthogonalization is None:
        reorthogonalization = DEFAULT_REORTHOGONALIZATION
    if reorthogonalization not in REORTHOGONALIZATION:
        raise ValueError(f"reorthogonalization must be one of {REORTHOGONALIZATION}, "
                         f"got {reorthogonalization!r}")
    rng = np.random.default_rng(seed)
    op = as_operator(A, seed=rng)
    n = op.n
    basis, max_restarts = resolve_sizes(k, n, basis, max_restarts, min_active=_MIN_ACTIVE)
    if start is not None and start.size != n:
        raise ValueError(f"start has length {start.size}, expected n = {n}")
    if polynomial_filter not in POLYNOMIAL_FILTER:
        raise ValueError(f"polynomial_filter must be one of {POLYNOMIAL_FILTER}, "
                         f"got {polynomial_filter!r}")
    if polynomial_filter == "on" and op.matrix is None:
        raise ValueError("polynomial_filter='on' needs an explicit matrix (dense or sparse): "
                         "its Gershgorin bounds place the filter")
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
        budget = None
        if op.matrix is not None and polynomial_filter != "off":
            budget = basis if polynomial_filter == "on" else FILTER_AFTER_CYCLES * basis
        method = f"thick-restart Lanczos (basis {basis})"
        with single_threaded_blas():
            out = thick_restart_lanczos(op.apply, space, n, k, selector, tol=tol, basis=basis,
                                        max_restarts=max_restarts, rng=rng, start=start,
                                        callback=callback, apply_block=op.apply_block,
                                        apply_dot=op.apply_dot, n_threads=op.n_threads,
                                        reorthogonalization=reorthogonalization,
                                        product_budget=budget)
            if out["budget_exhausted"]:
                first = out
                out = continue_filtered(op, space, first, k, selector, tol=tol, basis=basis,
                                        max_restarts=max_restarts, rng=rng, callback=callback)
                if out is None:
                    # No usable filter (the cut reached the spectrum bound):
                    # go on without one, keeping the locked pairs and the
                    # restarts already spent, from the wanted Ritz vectors.
                    out = thick_restart_lanczos(
                        op.apply, space, n, k, selector, tol=tol, basis=basis,
                        max_restarts=max(max_restarts - first["restarts"], 0), rng=rng,
                        start=first["active_start"], callback=callback,
                        apply_block=op.apply_block, apply_dot=op.apply_dot,
                        n_threads=op.n_threads, reorthogonalization=reorthogonalization,
                        initial_locked=(first["locked_vectors"], first["locked_values"]))
                    out["restarts"] += first["restarts"]
                    out["history"] = first["history"] + out["history"]
                else:
                    pf = out["polynomial_filter"]
                    method += (f", then Lanczos on a degree-{pf['degree']} Chebyshev filter "
                               f"after {pf['switched_after']} products")
                    info["polynomial_filter"] = pf
        vals, vecs, products = out["values"], out["vectors"], out["products"]
        anorm = out["norm_estimate"]
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
        head = (f"{int(np.sum(result.converged))} of {k} eigenpairs converged to tol={tol:g} "
                f"after {restarts} restarts; see result.converged.  ")
        if restarts >= max_restarts:
            tail = (f"Converged pairs are eigenpairs, but not necessarily the {k} {selector} "
                    f"ones: the search reached max_restarts (for a cluster near a spectral "
                    f"end, a shift-invert transformation helps)")
        else:
            # The iteration finished on its residual estimates; only the explicit
            # check at the end fell short (rounding in the final Rayleigh-Ritz step).
            tail = ("The iteration finished, but the explicitly computed residuals of the "
                    "flagged pairs exceed tol")
        warnings.warn(head + tail, NotConvergedWarning, stacklevel=3)
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
        Simon's estimate of the loss of orthogonality exceeds eps^(3/4)
        (standard problems only, see Notes).  Default ``"partial"`` for
        standard problems, ``"full"`` with ``M`` or ``shift``.
    polynomial_filter : {"auto", "on", "off"}, optional
        Standard problems with an explicit matrix only.  ``"auto"`` (default):
        when plain Lanczos has not converged after six basis-sized cycles (a
        cluster of wanted eigenvalues, tiny next to the spectrum's width),
        go on with Lanczos on a Chebyshev polynomial of ``A`` (see Notes);
        ``"on"``: switch after the first cycle; ``"off"``: never.

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
        bad ``tol``, ``basis``, ``max_restarts``, ``start``,
        ``reorthogonalization`` (``"partial"`` with ``M`` or ``shift``) or
        ``polynomial_filter`` (``"on"`` with an operator, ``M`` or ``shift``).

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

    The method is Lanczos with partial reorthogonalization (classical
    Gram-Schmidt with a DGKS second pass whenever Simon's estimate of the
    loss of orthogonality exceeds a threshold between eps^(3/4) and sqrt(eps)
    set from ``tol``; locked vectors are projected out
    at every step) and thick restart with locking; after the
    wanted pairs converge, a verification round from a fresh random vector
    looks for copies of repeated eigenvalues (``result.info["verification"]``:
    rounds, copies found, steps; ``result.info["verified"]``: whether the
    round certified the set).  The partial strategy keeps the basis
    semi-orthogonal (``|q_i . q_j|`` below sqrt(eps)), which keeps the Ritz
    values accurate to working precision (Simon 1984) at a fraction of the
    Gram-Schmidt cost; ``reorthogonalization="full"`` orthogonalizes every
    new vector against the whole basis (the safe choice when in doubt, and
    the only one for ``M`` or ``shift``).  Either way the residuals are
    computed explicitly at the end, and a pair above ``tol`` is flagged in
    ``converged``.

    The polynomial filter ``p`` (degree ``d``, see :mod:`lanqr.polyfilter`)
    lies in ``[-1, 1]`` between a Ritz value just beyond the wanted ones and
    the Gershgorin bound of the spectrum, and grows fast beyond the cut, so
    the wanted eigenvalues become the well separated largest ones of
    ``p(A)``; each outer step costs ``d`` products (one fused pass each for
    sparse input) and the basis work is spread over them.  Pairs are locked
    on ``p(A)`` at a threshold translated from the one in ``A``, and the final
    Rayleigh-Ritz step and the explicit residuals use ``A`` itself
    (``result.info["polynomial_filter"]``: degree, damped interval, products
    before the switch).  Sparse input is applied by lanqr's compiled CSR
    product (threads from ``OMP_NUM_THREADS``), and BLAS is limited to one
    thread during the iteration when threadpoolctl is installed.  Problems of order at most
    ``max(200, 2 basis)`` are solved densely with ``scipy.linalg.eigh``.

    References
    ----------
    K. Wu and H. Simon, SIAM J. Matrix Anal. Appl. 22 (2000) 602-616.
    B. N. Parlett, The Symmetric Eigenvalue Problem, SIAM 1998.
    H. D. Simon, Math. Comp. 42 (1984) 115-142 (partial reorthogonalization).
"""


def _no_filter(polynomial_filter):
    if polynomial_filter not in ("auto", "off"):
        raise ValueError(f"polynomial_filter={polynomial_filter!r} is available for standard "
                         "problems only (no M, no shift: shift-invert already separates the "
                         "wanted eigenvalues)")


def _standard_only(reorthogonalization):
    if reorthogonalization not in (None, "full"):
        raise ValueError(f"reorthogonalization={reorthogonalization!r} is available for "
                         "standard problems only (no M, no shift)")


def lowest(A, k=6, *, M=None, shift=None, tol=1e-8, basis=None, max_restarts=None, seed=None,
           start=None, callback=None, reorthogonalization=None, polynomial_filter="auto"):
    if M is not None or shift is not None:
        _standard_only(reorthogonalization)
        _no_filter(polynomial_filter)
        return generalized_lowest(A, k, M=M, shift=shift, tol=tol, basis=basis,
                                  max_restarts=max_restarts, seed=seed, start=start,
                                  callback=callback)
    return _solve(A, k, "lowest", tol, basis, max_restarts, seed, start, callback,
                  reorthogonalization, polynomial_filter)


def highest(A, k=6, *, M=None, tol=1e-8, basis=None, max_restarts=None, seed=None, start=None,
            callback=None, reorthogonalization=None, polynomial_filter="auto"):
    if M is not None:
        _standard_only(reorthogonalization)
        _no_filter(polynomial_filter)
        return generalized_highest(A, k, M=M, tol=tol, basis=basis, max_restarts=max_restarts,
                                   seed=seed, start=start, callback=callback)
    return _solve(A, k, "highest", tol, basis, max_restarts, seed, start, callback,
                  reorthogonalization, polynomial_filter)


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
