"""The Lanczos process: extend an orthonormal basis by the three-term recurrence.

The basis is one Fortran-order array ``Q`` of shape ``(n, columns)``.  Its
first ``offset`` columns are locked vectors (converged eigenvectors kept as a
deflated block); the active Lanczos vectors follow.  Each step applies the
operator once, subtracts the three-term recurrence, then reorthogonalizes
against every kept column by classical Gram-Schmidt with a second pass when
the norm drops (the DGKS criterion).  Reorthogonalization is one function,
:func:`reorthogonalize`, so a BLAS-3 or distributed version can replace it.

In the Euclidean inner product each step runs through the compiled kernels of
:mod:`lanqr.vecops`: the product fused with ``alpha = q . A q`` where the
operator offers it (compiled CSR product), the three-term update and its norm
in one pass, and Gram-Schmidt with DGKS as two BLAS dgemv calls per pass.  The
arithmetic is the same as the generic path's (the generic path, for M-inner
products, is kept).

Partial reorthogonalization (Simon) is the default for standard problems
(see :data:`lanqr.api.DEFAULT_REORTHOGONALIZATION`; full reorthogonalization
at every step stays available and serves M-inner products): the loss of
orthogonality of the new vector against the active basis is estimated by
Simon's omega recurrence from the tridiagonal coefficients, and the vector is
reorthogonalized against the active basis only when the estimate exceeds
:data:`PARTIAL_THRESHOLD` (then at two consecutive steps).  Locked vectors are always
projected out (their couplings of tolerance size were dropped, so the
recurrence does not describe them).  This keeps ``|q_i . q_j|`` below
sqrt(eps) (semi-orthogonality suffices for Ritz values accurate to working
precision, Simon 1984).

References
----------
C. Lanczos, J. Res. Nat. Bur. Standards 45 (1950) 255-282.
J. W. Daniel, W. B. Gragg, L. Kaufman, G. W. Stewart, "Reorthogonalization and
stable algorithms for updating the Gram-Schmidt QR factorization",
Math. Comp. 30 (1976) 772-795 (the DGKS criterion).
H. D. Simon, "The Lanczos algorithm with partial reorthogonalization",
Math. Comp. 42 (1984) 115-142.
"""
from __future__ import annotations

import numpy as np
from scipy.linalg.blas import daxpy, dgemv, dnrm2

from lanqr.vecops import omega_advance, orthogonalize, recurrence_update

__all__ = ["reorthogonalize", "subtract_combination", "random_orthogonal_direction",
           "extend_basis", "PartialOrthogonality", "REORTHOGONALIZATION"]

#: Reorthogonalization strategies: against every kept column at every step, or
#: only when Simon's estimate says orthogonality is being lost.
REORTHOGONALIZATION = ("full", "partial")

# DGKS: repeat the Gram-Schmidt pass when the norm dropped below
# 1/sqrt(2) of its value before the pass ("twice is enough" for this choice).
DGKS_ETA = 1.0 / np.sqrt(2.0)

_EPS = np.finfo(np.float64).eps
# Norms from a plain sum of squares are exact to rounding only between these
# (squares stay normal and finite, with room for a sum of 1e8 terms).
_SAFE_NORM_LOW = 1e-140
_SAFE_NORM_HIGH = 1e140
#: Partial reorthogonalization acts when Simon's estimate exceeds this.  The
#: classic choice is sqrt(eps); but the coefficients a reorthogonalization
#: removes (of the size of the estimate) are dropped from the tridiagonal
#: matrix, so the Ritz residual estimates carry errors of about
#: ``threshold * ||A||``.  At sqrt(eps) that made explicit residuals miss
#: tol = 1e-8 (4e-8 on the 2-D Laplacian 22 x 22, highest 10, of
#: tests/test_solver.py); at eps^(3/4) ~ 2e-12 they are far below any usable
#: tol, for about twice as many reorthogonalizations (still a small share of
#: the steps).
PARTIAL_THRESHOLD = float(_EPS ** 0.75)
#: The controller may raise the threshold (never above sqrt(eps), the classic
#: semi-orthogonality level) when the tolerance leaves room: see
#: :meth:`PartialOrthogonality.allow`.
PARTIAL_THRESHOLD_MAX = float(np.sqrt(_EPS))
#: Share of the smallest locking threshold that the dropped coefficients may
#: cost the residual estimates (their error is about threshold * ||A||).
PARTIAL_MARGIN = 0.01


class PartialOrthogonality:
    """Simon's estimates ``omega[j, k] ~ q_j . q_k`` for the active Lanczos vectors.

    Only the last two rows are kept: the recurrence

        beta_j w_{j+1,k} = beta_k w_{j,k+1} + (alpha_k - alpha_j) w_{j,k}
                           + beta_{k-1} w_{j,k-1} - beta_{j-1} w_{j-1,k}

    needs nothing else.  Rounding enters as ``eps1 (|(alpha_k, beta_k)| +
    |(alpha_j, beta_j)|)`` with the sign of the term, ``eps1 = sqrt(n) eps / 2``
    (Simon 1984; common practice).  The estimates keep their signs, so
    terms of later steps can cancel as the true inner products do; the
    largest |estimate| triggers a reorthogonalization.  The rows start from the measured inner
    products of the entry vector and its predecessor with the active basis,
    so a thick restart, whose kept Ritz vectors carry the orthogonality level
    of the basis they came from, starts from the truth, not from ``eps``.

    Parameters
    ----------
    n : int
        Vector length.
    size : int
        Largest active basis size (columns).
    """

    def __init__(self, n, size):
        self.eps1 = 0.5 * np.sqrt(max(n, 1)) * _EPS
        self.threshold = PARTIAL_THRESHOLD
        self.prev = np.zeros(size + 1)
        self.cur = np.zeros(size + 1)
        self.spare = np.zeros(size + 1)
        self.force = False
        self.reorthogonalizations = 0
        self.steps = 0

    def allow(self, smallest_lock_threshold, norm_estimate):
        """Set the threshold from the tolerance: the dropped coefficients must
        cost the residual estimates at most PARTIAL_MARGIN of the smallest
        locking threshold, within [PARTIAL_THRESHOLD, PARTIAL_THRESHOLD_MAX].

        On the Heisenberg ring of 22 sites (lowest 2, tol 1e-8) that is about
        5e-11 instead of 2e-12: fewer reorthogonalizations; on the grid
        Laplacians (eigenvalues far below ||A||) it stays at eps^(3/4).
        """
        wish = PARTIAL_THRESHOLD
        if norm_estimate > 0 and np.isfinite(smallest_lock_threshold):
            wish = PARTIAL_MARGIN * smallest_lock_threshold / norm_estimate
        self.threshold = max(PARTIAL_THRESHOLD, min(wish, PARTIAL_THRESHOLD_MAX))

    def start(self, active, first, rows=None):
        """Measure the rows of the entry vector ``first`` and of ``first - 1``.

        ``active`` holds the active columns ``0 .. first`` (Fortran order).
        Costs one sweep over the active basis, once per restart, unless
        ``rows`` (``active[:, :first + 1].T @ active[:, first - 1:first + 1]``)
        were measured already (:func:`lanqr.vecops.rotate_basis` with a probe).
        """
        self.prev[:] = 0.0
        self.cur[:] = 0.0
        self.force = False
        self.cur[first] = 1.0
        if first == 0:
            return
        if rows is None:
            rows = active[:, :first + 1].T @ active[:, first - 1:first + 1]
        # Signed, like the recurrence; at least eps1 in size.
        self.prev[:first + 1] = np.copysign(np.maximum(np.abs(rows[:, 0]), self.eps1), rows[:, 0])
        self.cur[:first + 1] = np.copysign(np.maximum(np.abs(rows[:, 1]), self.eps1), rows[:, 1])
        self.prev[first - 1] = 1.0
        self.cur[first] = 1.0

    def advance(self, j, alpha, beta, beta_j, anorm):
        """Estimate the row ``j + 1`` from step ``j`` (``beta_j`` the new norm).

        Returns the largest estimate against columns ``0 .. j - 1``: the new
        vector is orthogonal to ``q_j`` to rounding by construction.  The
        recurrence runs compiled (:func:`lanqr.vecops.omega_advance`) into a
        spare row, so a step allocates nothing.
        """
        new = self.spare
        # Local orthogonality after one subtraction of the recurrence.
        local = max(self.eps1, _EPS * anorm / beta_j)
        worst = omega_advance(new, self.cur, self.prev, alpha, beta, j, beta_j, self.eps1,
                              local)
        self.spare, self.prev, self.cur = self.prev, self.cur, new
        return worst

    def reset(self, j):
        """The new vector ``j + 1`` was reorthogonalized against columns ``0..j``."""
        self.cur[:j + 1] = self.eps1
        self.cur[j + 1] = 1.0

    def fresh(self, j):
        """After a breakdown: row ``j + 1`` is a fresh direction orthogonalized
        against every column (the recurrence did not run for it)."""
        self.prev[:] = self.cur
        self.cur[:] = 0.0
        self.reset(j)
        self.force = False


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
                 norm_estimate=0.0, after_step=None, apply_dot=None, partial=None,
                 n_threads=1):
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
    apply_dot : callable or None
        ``apply_dot(x, out=None)`` returns ``(A x, x . A x)`` in one pass,
        the product written to ``out`` (the next basis column); used instead
        of ``apply`` in the Euclidean space.
    partial : PartialOrthogonality or None
        None: full reorthogonalization at every step.  Otherwise partial
        reorthogonalization driven by this state (Euclidean space only), which
        must have been started on the entry vector (:meth:`PartialOrthogonality.start`).
    n_threads : int
        Threads for the fused vector update (long vectors only).

    Returns
    -------
    steps : int
        The active size reached (``j + 1`` for the last step ``j`` taken).
    """
    if space.mass is not None:
        if partial is not None:
            raise ValueError("partial reorthogonalization needs the Euclidean inner product")
        return _extend_generic(apply, space, Q, offset, first, last, alpha, beta, rng,
                               norm_estimate, after_step)
    coef = np.empty(Q.shape[1])
    for j in range(first, last):
        c = offset + j
        q = Q[:, c]
        if apply_dot is not None:
            # The product lands in the next basis column, where the new
            # vector ends up anyway: no allocation (page faults on a fresh
            # vector cost ~1 ms per 10^6 entries) and no copy.
            w, a = apply_dot(q, out=Q[:, c + 1])
        else:
            w = np.require(apply(q), dtype=np.float64, requirements=["C", "W"])
            a = float(q @ w)
        prev = Q[:, c - 1] if j > 0 and beta[j - 1] != 0.0 else None
        b = float(beta[j - 1]) if prev is not None else 0.0
        # One pass over memory: w -= a q + b q_prev, and ||w|| from the same pass.
        after = recurrence_update(w, q, prev, a, b, n_threads=n_threads)
        if not (_SAFE_NORM_LOW < after < _SAFE_NORM_HIGH):
            # The fused pass sums plain squares: for a matrix scaled near
            # 1e+-160 they overflow or go subnormal.  dnrm2 scales as it goes.
            after = float(dnrm2(w))
        before = after
        if partial is None:
            proj = orthogonalize(Q[:, :c + 1], w, coefficients=coef[:c + 1], max_passes=3)
            a += coef[c]
            before, after = proj.norm_before, proj.norm
        else:
            partial.steps += 1
            if offset:
                # Locked vectors: always (their couplings were dropped).
                proj = orthogonalize(Q[:, :offset], w, coefficients=coef[:offset], max_passes=2)
                after = proj.norm
        alpha[j] = a
        norm_estimate = max(norm_estimate, abs(a))
        if partial is not None and after > 8.0 * _EPS * max(norm_estimate, before):
            worst = partial.advance(j, alpha, beta, after, max(norm_estimate, after))
            if partial.force or worst > max(PARTIAL_THRESHOLD, partial.threshold):
                # Reorthogonalize this vector and the next one (Simon): the
                # estimate of the next row is built from this one's.
                proj = orthogonalize(Q[:, offset:c + 1], w, coefficients=coef[:j + 1],
                                     max_passes=2)
                alpha[j] = a = a + coef[j]
                after = proj.norm
                partial.reset(j)
                partial.reorthogonalizations += 1
                partial.force = not partial.force
        if _store_next(space, Q, c, j, w, before, after, norm_estimate, beta, rng) \
                and partial is not None:
            partial.fresh(j)
        if after_step is not None and after_step(j + 1):
            return j + 1
    return last


def _store_next(space, Q, c, j, w, before, after, norm_estimate, beta, rng):
    """Put the next Lanczos vector in column ``c + 1``; True on a breakdown.

    Breakdown: the Krylov space is (numerically) invariant.  Continue with a
    fresh random direction, coupling 0, so the projected matrix splits and
    the Ritz pairs of the invariant part are exact.
    """
    if after <= 8.0 * _EPS * max(norm_estimate, before):
        beta[j] = 0.0
        Q[:, c + 1] = random_orthogonal_direction(space, Q[:, :c + 1], rng)
        return True
    beta[j] = after
    np.multiply(w, 1.0 / after, out=Q[:, c + 1])  # in place when w is that column
    return False


def _extend_generic(apply, space, Q, offset, first, last, alpha, beta, rng,
                    norm_estimate, after_step):
    """:func:`extend_basis` for any inner product (full reorthogonalization)."""
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
        _store_next(space, Q, c, j, w, before, after, norm_estimate, beta, rng)
        if after_step is not None and after_step(j + 1):
            return j + 1
    return last
