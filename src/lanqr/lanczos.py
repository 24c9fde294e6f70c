"""The Lanczos process: extend an orthonormal basis by the three-term recurrence.

The basis is one Fortran-order array ``Q`` of shape ``(n, columns)``.  Its
first ``offset`` columns are locked vectors (converged eigenvectors kept as a
deflated block); the active Lanczos vectors follow.  Each step applies the
operator once, subtracts the three-term recurrence, then reorthogonalizes
against every kept column by classical Gram-Schmidt with a second pass when
the norm drops (the DGKS criterion).  Reorthogonalization is one function,
:func:`reorthogonalize`, so a BLAS-3 or distributed version can replace it.

References
----------
C. Lanczos, J. Res. Nat. Bur. Standards 45 (1950) 255-282.
J. W. Daniel, W. B. Gragg, L. Kaufman, G. W. Stewart, "Reorthogonalization and
stable algorithms for updating the Gram-Schmidt QR factorization",
Math. Comp. 30 (1976) 772-795 (the DGKS criterion).
"""
from __future__ import annotations

import numpy as np
from scipy.linalg.blas import daxpy, dgemv, dnrm2

__all__ = ["reorthogonalize", "subtract_combination", "random_orthogonal_direction", "extend_basis"]

# DGKS: repeat the Gram-Schmidt pass when the norm dropped below
# 1/sqrt(2) of its value before the pass ("twice is enough" for this choice).
DGKS_ETA = 1.0 / np.sqrt(2.0)

_EPS = np.finfo(np.float64).eps


def reorthogonalize(space, V, w):
    """Make ``w`` orthogonal to the columns of ``V`` (classical Gram-Schmidt, DGKS).

    Parameters
    ----------
    space : VectorSpace
        Supplies the inner product.
    V : ndarray, shape (n, j), Fortran order
        Orthonormal columns.
    w : ndarray, shape (n,)
        Overwritten with its component orthogonal to ``V``.

    Returns
    -------
    coeffs : ndarray, shape (j,)
        The total coefficients removed (``V^T w`` summed over the passes).
    norm_before, norm_after : float
        Norms of ``w`` before and after.
    """
    if V.shape[1] == 0:
        norm = space.norm(w)
        return np.zeros(0), norm, norm
    total = space.coefficients(V, w)
    subtract_combination(V, total, w)
    norm_after = space.norm(w)
    # Pythagoras for V orthonormal: ||w||^2 = ||w - V h||^2 + ||h||^2, so the
    # norm before the pass costs no extra sweep over w (dnrm2 and hypot avoid
    # overflow and underflow).
    norm_before = float(np.hypot(norm_after, dnrm2(total)))
    reference = norm_before
    # At most two more passes: after a second pass the vector is orthogonal to
    # working precision unless it was (numerically) inside span(V).
    for _ in range(2):
        if norm_after >= DGKS_ETA * reference:
            break
        h = space.coefficients(V, w)
        subtract_combination(V, h, w)
        total += h
        reference = norm_after
        norm_after = space.norm(w)
    return total, norm_before, norm_after


def subtract_combination(V, h, w):
    """``w -= V @ h`` in place (one BLAS dgemv, no temporary vector)."""
    if V.dtype == np.float64 and V.flags.f_contiguous and w.flags.c_contiguous \
            and w.flags.writeable and w.dtype == np.float64:
        dgemv(-1.0, V, h, beta=1.0, y=w, overwrite_y=1)
    else:
        w -= V @ h


def random_orthogonal_direction(space, V, rng):
    """A random unit vector orthogonal to the columns of ``V``.

    Raises
    ------
    ArithmeticError
        If no direction orthogonal to ``V`` survives (``V`` spans the space).
    """
    n = V.shape[0]
    for _ in range(5):
        w = rng.standard_normal(n)
        _, before, after = reorthogonalize(space, V, w)
        if after > 1e-3 * before:
            return w / after
    raise ArithmeticError("no direction orthogonal to the kept vectors remains")


def extend_basis(apply, space, Q, offset, first, last, alpha, beta, rng, *,
                 norm_estimate=0.0, after_step=None):
    """Run Lanczos steps ``first .. last-1`` on the active part of ``Q``.

    Parameters
    ----------
    apply : callable
        ``apply(x)`` returns the operator applied to one vector.
    space : VectorSpace
    Q : ndarray, shape (n, columns), Fortran order
        Columns ``[0, offset)`` are locked; active vector ``j`` is column
        ``offset + j``.  On entry column ``offset + first`` holds a unit vector
        orthogonal to every earlier column.  On return column ``offset + j + 1``
        holds the next unit vector for the last step ``j`` taken.
    offset, first, last : int
        Locked count, first step, one past the last step allowed.
    alpha, beta : ndarray
        Diagonal and off-diagonal of the projected tridiagonal matrix; step
        ``j`` writes ``alpha[j]`` and ``beta[j]`` (the coupling of active
        vectors ``j`` and ``j + 1``).  ``beta[first - 1]`` must hold the
        coupling of the entry vector to the previous one (0 for a fresh start).
    rng : numpy.random.Generator
        For fresh directions after a breakdown.
    norm_estimate : float
        An estimate of ||A|| (largest |Ritz value| seen) for the breakdown test.
    after_step : callable or None
        ``after_step(steps)`` is called after each step with the active size;
        returning True stops the extension.

    Returns
    -------
    steps : int
        The active size reached (``j + 1`` for the last step ``j`` taken).
    """
    for j in range(first, last):
        c = offset + j
        q = Q[:, c]
        w = np.require(apply(q), dtype=np.float64, requirements=["C", "W"])
        a = space.dot(q, w)
        daxpy(q, w, a=-a)
        if j > 0 and beta[j - 1] != 0.0:
            daxpy(Q[:, c - 1], w, a=-beta[j - 1])
        coeffs, before, after = reorthogonalize(space, Q[:, :c + 1], w)
        a += coeffs[c]
        alpha[j] = a
        norm_estimate = max(norm_estimate, abs(a))
        # Breakdown: the Krylov space is (numerically) invariant.  Continue
        # with a fresh random direction, coupling 0, so the projected matrix
        # splits and the Ritz pairs of the invariant part are exact.
        if after <= 8.0 * _EPS * max(norm_estimate, before):
            beta[j] = 0.0
            Q[:, c + 1] = random_orthogonal_direction(space, Q[:, :c + 1], rng)
        else:
            beta[j] = after
            np.multiply(w, 1.0 / after, out=Q[:, c + 1])
        if after_step is not None and after_step(j + 1):
            return j + 1
    return last
