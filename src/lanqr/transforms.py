"""Spectral transformations: shift-invert for ``A x = lambda x`` and ``A x = lambda M x``.

The operator ``S = (A - sigma M)^{-1} M`` has the same eigenvectors as the
pencil ``(A, M)`` and eigenvalues ``nu = 1 / (lambda - sigma)``; the
eigenvalues nearest ``sigma`` become the largest in magnitude and well
separated, which is what the Lanczos process finds fastest.  ``S`` is
self-adjoint in the M-inner product ``<u, v>_M = u^T M v`` (Ericsson and Ruhe
1980), so a Lanczos basis for it is built M-orthonormal.

The factorization of ``A - sigma M`` is the expensive part.  Sparse input is
factored once by SciPy's SuperLU in its symmetric mode (a minimum-degree
ordering of ``A + A^T`` applied to rows and columns alike, diagonal pivots
preferred): measured on the benchmark problems (``bench/bench_shift_invert.py``)
this gives about half the fill of the default column ordering and solves
2-3 times faster.  A pivot threshold of 0.1 keeps off-diagonal pivoting
available for indefinite shifted matrices, where purely diagonal pivoting
shows element growth.
"""
from __future__ import annotations

import time
import warnings

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lanqr.inertia import check_mass_matrix, check_point, check_symmetric_matrix, shifted_matrix

__all__ = ["ShiftInvert", "SingularShiftError"]

_EPS = np.finfo(np.float64).eps

# SuperLU options for a symmetric matrix (see the module note for the measurement).
SPARSE_LU_OPTIONS = dict(permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.1,
                         options=dict(SymmetricMode=True))


class SingularShiftError(ValueError):
    """``A - shift * M`` is singular or numerically singular.

    The shift is (to working precision) an eigenvalue of the pencil.  The
    caller decides whether to move the shift; ``shift`` and ``reason`` say
    what was found.
    """

    def __init__(self, shift, reason):
        self.shift = float(shift)
        self.reason = str(reason)
        super().__init__(f"shift {self.shift!r} is (numerically) an eigenvalue: A - shift*M is "
                         f"singular ({self.reason}); choose a different shift")


def _as_solver(solver, n):
    """A user's solver for ``(A - sigma M) y = b`` as a function of 1-D or 2-D ``b``."""
    if isinstance(solver, spla.LinearOperator) or hasattr(solver, "matvec"):
        if tuple(solver.shape) != (n, n):
            raise ValueError(f"solver has shape {tuple(solver.shape)}, expected {(n, n)}")

        def apply(b):
            return solver.matvec(b) if b.ndim == 1 else solver.matmat(b)
        return apply
    if callable(solver):
        def apply(b):
            if b.ndim == 1:
                return np.asarray(solver(b), dtype=np.float64).reshape(n)
            return np.column_stack([np.asarray(solver(b[:, j]), dtype=np.float64).reshape(n)
                                    for j in range(b.shape[1])])
        return apply
    raise ValueError(f"solver must be a LinearOperator or a callable, got {type(solver).__name__}")


class ShiftInvert(spla.LinearOperator):
    """The shift-invert transformation ``(A - shift M)^{-1} M`` as a LinearOperator.

    Parameters
    ----------
    A : ndarray, scipy.sparse matrix or LinearOperator, shape (n, n)
        Symmetric.  A LinearOperator is accepted only together with ``solver``.
    shift : float
        The shift sigma.  The eigenvalues of the pencil nearest ``shift`` become
        the eigenvalues of largest magnitude of this operator.
    M : ndarray or scipy.sparse matrix or LinearOperator, optional
        Symmetric positive (semi-)definite mass matrix; identity if omitted.
    solver : LinearOperator or callable, optional
        Solves ``(A - shift M) y = b`` for ``b`` (1-D); replaces the built-in
        factorization (an iterative or multigrid solve of a matrix-free user).
        Its output is checked for finiteness at every application.

    Attributes
    ----------
    shift : float
    factorization : dict
        How ``A - shift M`` was factored: ``kind`` ("sparse LU", "dense
        Cholesky", "dense LU" or "user solver"), ``seconds``, ``nnz_matrix``,
        ``nnz_factors`` and ``fill`` (= nnz_factors / nnz_matrix) for the sparse
        LU, and ``min_pivot_ratio`` (smallest pivot magnitude over
        ``||A - shift M||_1``).
    applications : int
        How many vectors the operator has been applied to (a block of k counts k).

    Raises
    ------
    ValueError
        Non-square, non-symmetric or non-finite input, mismatched ``M``,
        non-finite shift, or a LinearOperator ``A`` without ``solver``.
    SingularShiftError
        (a ValueError) when ``A - shift M`` is singular or numerically
        singular: a zero pivot, a pivot below ``10 sqrt(n) eps ||A - shift
        M||_1`` or a non-finite solve.  The message names the shift; the
        caller decides whether to move it.  A user's solver that returns
        non-finite values raises it at application time.

    Notes
    -----
    Eigenvalues ``nu`` of the operator map back by ``lambda = shift + 1/nu``
    (:meth:`eigenvalues_from`).  The operator is self-adjoint in the
    M-inner product: ``M S = M (A - shift M)^{-1} M`` is symmetric;
    :meth:`rmatvec` applies ``S^T = M (A - shift M)^{-1}``.

    Sparse matrices are factored by ``scipy.sparse.linalg.splu`` with a
    symmetric ordering (``permc_spec='MMD_AT_PLUS_A'``,
    ``SymmetricMode=True``, ``diag_pivot_thresh=0.1``); dense ones by
    ``scipy.linalg.cho_factor`` when ``A - shift M`` is positive definite (the
    shift below the spectrum), otherwise ``scipy.linalg.lu_factor``.

    References
    ----------
    T. Ericsson and A. Ruhe, "The spectral transformation Lanczos method for
    the numerical solution of large sparse generalized symmetric eigenvalue
    problems", Math. Comp. 35 (1980) 1251-1268.

    Examples
    --------
    >>> import numpy as np
    >>> from lanqr import ShiftInvert
    >>> from lanqr.problems import string_pair
    >>> K, M = string_pair(50)
    >>> S = ShiftInvert(K, 5.0, M)
    >>> x = np.ones(50)
    >>> bool(np.allclose((K - 5.0 * M) @ (S @ x), M @ x))
    True
    """

    def __init__(self, A, shift, M=None, solver=None):
        sigma = check_point(shift, "shift")
        A = check_symmetric_matrix(A, "A", allow_operator=solver is not None)
        n = A.shape[0]
        if M is not None:
            if isinstance(M, spla.LinearOperator) and solver is None:
                raise ValueError("M may be a LinearOperator only together with a solver "
                                 "(the built-in factorization needs the matrix A - shift M)")
            M = check_mass_matrix(M, n) if not isinstance(M, spla.LinearOperator) else M
            if M.shape != (n, n):
                raise ValueError(f"M has shape {M.shape}, expected {(n, n)}")
        super().__init__(dtype=np.dtype(np.float64), shape=(n, n))
        self.shift = sigma
        self.A = A
        self.M = M
        self.applications = 0
        start = time.perf_counter()
        if solver is not None:
            self._solve = _as_solver(solver, n)
            self.factorization = {"kind": "user solver", "seconds": 0.0}
        elif sp.issparse(A):
            self._factor_sparse(A, M)
        else:
            self._factor_dense(A, M)
        self.factorization["seconds"] = time.perf_counter() - start

    # -- factorizations -----------------------------------------------------
    def _pivot_floor(self, norm1):
        return 10.0 * np.sqrt(max(self.shape[0], 1)) * _EPS * norm1

    def _factor_sparse(self, A, M):
        C = sp.csc_matrix(shifted_matrix(A, self.shift, M))
        C.sort_indices()
        norm1 = float(spla.norm(C, 1))
        try:
            lu = spla.splu(C, **SPARSE_LU_OPTIONS)
        except RuntimeError as exc:  # "Factor is exactly singular"
            raise SingularShiftError(self.shift, f"sparse LU: {exc}") from None
        pivots = np.abs(lu.U.diagonal())
        ratio = float(pivots.min()) / norm1 if norm1 > 0 and len(pivots) else 0.0
        if not np.all(np.isfinite(pivots)):
            raise SingularShiftError(self.shift, "non-finite pivot in the sparse LU")
        if norm1 == 0.0 or pivots.min() <= self._pivot_floor(norm1):
            raise SingularShiftError(self.shift, f"smallest LU pivot {pivots.min():.2e} against "
                                                 f"||A - shift M||_1 = {norm1:.3g}")
        nnz_factors = int(lu.L.nnz + lu.U.nnz - C.shape[0])
        self.factorization = {"kind": "sparse LU", "nnz_matrix": int(C.nnz),
                              "nnz_factors": nnz_factors, "fill": nnz_factors / max(int(C.nnz), 1),
                              "min_pivot_ratio": ratio}
        self._solve = lu.solve

    def _factor_dense(self, A, M):
        if M is not None and sp.issparse(M):
            M = M.toarray()
        C = shifted_matrix(A, self.shift, M)
        norm1 = float(np.linalg.norm(C, 1)) if C.size else 0.0
        floor = self._pivot_floor(norm1)
        try:
            # Positive definite (shift below the spectrum): Cholesky is half the work.
            factor = scipy.linalg.cho_factor(C, lower=False, check_finite=False)
            pivots = np.diag(factor[0]) ** 2
            kind = "dense Cholesky"
            solve = lambda b: scipy.linalg.cho_solve(factor, b, check_finite=False)
        except np.linalg.LinAlgError:
            # An exactly zero pivot is reported below as a SingularShiftError,
            # not as LAPACK's warning.
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", scipy.linalg.LinAlgWarning)
                lu, piv = scipy.linalg.lu_factor(C, check_finite=False)
            pivots = np.abs(np.diag(lu))
            kind = "dense LU"
            solve = lambda b: scipy.linalg.lu_solve((lu, piv), b, check_finite=False)
        if C.shape[0] and (not np.all(np.isfinite(pivots)) or norm1 == 0.0 or pivots.min() <= floor):
            raise SingularShiftError(self.shift, f"smallest pivot {pivots.min():.2e} against "
                                                 f"||A - shift M||_1 = {norm1:.3g}")
        ratio = float(pivots.min()) / norm1 if C.shape[0] and norm1 > 0 else 0.0
        self.factorization = {"kind": kind, "min_pivot_ratio": ratio}
        self._solve = solve

    # -- application --------------------------------------------------------
    def _mass(self, x):
        return x if self.M is None else self.M @ x

    def solve(self, b):
        """``(A - shift M)^{-1} b`` for a vector or a block of columns."""
        y = np.asarray(self._solve(np.asarray(b, dtype=np.float64)), dtype=np.float64)
        if not np.all(np.isfinite(y)):
            raise SingularShiftError(self.shift, "the solve returned non-finite values")
        return y

    def _matvec(self, x):
        x = np.asarray(x, dtype=np.float64).reshape(self.shape[0])
        self.applications += 1
        return self.solve(self._mass(x))

    def _matmat(self, X):
        X = np.asarray(X, dtype=np.float64)
        self.applications += X.shape[1]
        return self.solve(self._mass(X))

    def _rmatvec(self, x):
        x = np.asarray(x, dtype=np.float64).reshape(self.shape[0])
        return self._mass(self.solve(x))

    def _adjoint(self):
        return spla.LinearOperator(self.shape, matvec=self._rmatvec, dtype=self.dtype)

    def eigenvalues_from(self, nu):
        """Map eigenvalues ``nu`` of the operator back: ``lambda = shift + 1/nu``."""
        nu = np.asarray(nu, dtype=np.float64)
        with np.errstate(divide="ignore"):
            return self.shift + 1.0 / nu

    def __repr__(self):
        kind = self.factorization.get("kind", "?")
        return f"<ShiftInvert shift={self.shift!r} n={self.shape[0]} {kind}>"
