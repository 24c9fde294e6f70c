"""One internal operator shape for every kind of input the solvers accept.

A dense ndarray, any ``scipy.sparse`` matrix or array (converted to CSR once),
a ``scipy.sparse.linalg.LinearOperator`` or any object with ``shape`` and
``matvec`` becomes a :class:`SymmetricOperator`: a function that applies the
operator to one vector or to a block of vectors, plus a counter of
applications.  The counter lives on the object, and each solve builds its own
object, so two threads solving two problems never share state.

Input is validated here, once: square, real, finite, symmetric.  float32 input
is computed in float64.  The product is behind one method (``apply_block``), so
sparse input takes lanqr's compiled, multithreaded CSR product
(:class:`lanqr.vecops.CsrProduct`, bitwise SciPy's ``A @ x``) without the
callers knowing; every other kind of input keeps its own product.  The thread
count is resolved once per operator (``n_threads``; None honours
``OMP_NUM_THREADS``).
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.linalg.blas import dnrm2

from lanqr.vecops import CsrProduct, csr_asymmetry, resolve_threads

__all__ = ["SymmetricOperator", "as_operator"]

# ||A - A^T|| <= SYMMETRY_RTOL * ||A|| is accepted as symmetric.  Rounding in a
# matrix assembled from symmetric pieces leaves differences of a few eps
# relative to the entries; 1e-10 accepts those and still rejects every
# matrix whose asymmetry could change the computed eigenvalues at tol >= 1e-9
# (common practice: symmetry checks at about sqrt(eps) to 1e-10 relative).
SYMMETRY_RTOL = 1e-10


class SymmetricOperator:
    """A real symmetric linear operator of order ``n`` that counts its applications.

    Parameters
    ----------
    n : int
        The order.
    apply_block : callable
        ``apply_block(X)`` returns ``A @ X`` for a float64 array ``X`` of shape
        ``(n,)`` or ``(n, b)``.
    kind : str
        A short description of the input (for messages and results).
    matrix : ndarray or sparse matrix or None
        The explicit matrix where there is one (the dense path uses it).
    apply_dot : callable or None
        ``apply_dot(x)`` returns ``(A @ x, x . (A @ x))`` from one pass (the
        compiled CSR product fuses the Lanczos coefficient into the product);
        None: the product, then a dot product.
    n_threads : int
        Threads the product uses (1 for products without threads).

    Attributes
    ----------
    applications : int
        Number of vectors the operator has been applied to so far.
    """

    def __init__(self, n, apply_block, kind, matrix=None, *, apply_dot=None, n_threads=1,
                 chebyshev_step=None):
        self.n = int(n)
        self._apply_block = apply_block
        self._apply_dot = apply_dot
        self._chebyshev_step = chebyshev_step
        self.kind = kind
        self.matrix = matrix
        self.n_threads = int(n_threads)
        self.applications = 0

    def apply(self, x):
        """Return ``A @ x`` for one vector (counted as one application)."""
        self.applications += 1
        return np.asarray(self._apply_block(x), dtype=np.float64).reshape(self.n)

    def apply_dot(self, x, out=None):
        """Return ``(A @ x, x . A x)`` for one vector (counted as one application).

        The product is a writable, contiguous float64 array: ``out`` when
        given (a contiguous float64 vector not overlapping ``x``; the Lanczos
        process passes the next basis column, which saves allocating and
        copying a vector per step), else a fresh one.
        """
        if self._apply_dot is None:
            y = np.require(self.apply(x), dtype=np.float64, requirements=["C", "W"])
            if out is not None:
                out[:] = y
                y = out
            return y, float(x @ y)
        self.applications += 1
        return self._apply_dot(x, out=out)

    def fused_chebyshev_step(self):
        """A counted ``step(x, y, sigma, shift, tau)``: ``y <- sigma (A x - shift x) - tau y``
        in one pass (compiled CSR products only), else None."""
        if self._chebyshev_step is None:
            return None
        fused = self._chebyshev_step

        def step(x, y, sigma, shift, tau):
            self.applications += 1
            return fused(x, y, sigma, shift, tau)
        return step

    def apply_block(self, X):
        """Return ``A @ X`` for a block ``X`` of shape ``(n, b)`` (counted as ``b``)."""
        X = np.asarray(X, dtype=np.float64)
        if X.ndim == 1:
            return self.apply(X)
        self.applications += X.shape[1]
        return np.asarray(self._apply_block(X), dtype=np.float64).reshape(self.n, X.shape[1])

    def to_dense(self):
        """The operator as a dense ndarray (for small problems only)."""
        if self.matrix is not None:
            M = self.matrix
            return M.toarray() if sp.issparse(M) else np.array(M, dtype=np.float64)
        return self.apply_block(np.eye(self.n))


def _check_real(dtype, what):
    if np.issubdtype(dtype, np.complexfloating):
        raise ValueError(f"{what} is complex ({dtype}); only real symmetric operators are supported")
    if not (np.issubdtype(dtype, np.floating) or np.issubdtype(dtype, np.integer)
            or np.issubdtype(dtype, np.bool_)):
        raise ValueError(f"{what} has unsupported dtype {dtype}")


def _check_square(shape, what):
    if len(shape) != 2:
        raise ValueError(f"{what} must be two-dimensional, got shape {tuple(shape)}")
    if shape[0] != shape[1]:
        raise ValueError(f"{what} must be square, got shape {tuple(shape)}")


def _dense_operator(A):
    _check_square(A.shape, "the matrix")
    _check_real(A.dtype, "the matrix")
    A = np.asarray(A, dtype=np.float64)
    if not np.all(np.isfinite(A)):
        raise ValueError("the matrix contains NaN or Inf entries")
    scale = np.max(np.abs(A)) if A.size else 0.0
    if scale > 0:
        # Compare scaled copies so a matrix near the overflow threshold cannot
        # overflow in the difference.
        As = A / scale
        asym = np.linalg.norm(As - As.T, ord="fro")
        size = np.linalg.norm(As, ord="fro")
        if asym > SYMMETRY_RTOL * size:
            raise ValueError(
                f"the matrix is not symmetric: ||A - A^T||_F / ||A||_F = {asym / size:.3g}")
    A = np.asfortranarray(A) if not A.flags.c_contiguous else A
    return SymmetricOperator(A.shape[0], lambda X: A @ X, "dense", matrix=A)


def _sparse_operator(A, n_threads=None):
    _check_square(A.shape, "the sparse matrix")
    _check_real(A.dtype, "the sparse matrix")
    A = sp.csr_matrix(A, dtype=np.float64, copy=False)
    A.sum_duplicates()
    data = A.data
    if not np.all(np.isfinite(data)):
        raise ValueError("the sparse matrix contains NaN or Inf entries")
    scale = np.max(np.abs(data)) if data.size else 0.0
    if scale > 0:
        # Entry-wise difference of the scaled matrix and its transpose,
        # compiled, without forming the transpose: O(nnz log(row length)).
        asym = csr_asymmetry(A, scale=float(scale))
        size = float(dnrm2(data)) / scale  # overflow-safe, no scaled copy of the values
        if asym > SYMMETRY_RTOL * size:
            raise ValueError(
                f"the sparse matrix is not symmetric: ||A - A^T||_F / ||A||_F = {asym / size:.3g}")
    # Values were checked above; the product checks the index arrays once.
    product = CsrProduct(A, n_threads=n_threads, check_finite=False)

    def apply_block(X):
        # Both return fresh arrays: the solver updates products in place.
        return product.matvec(X) if X.ndim == 1 else product.matmat(X)

    return SymmetricOperator(A.shape[0], apply_block, "sparse CSR (compiled product)",
                             matrix=A, apply_dot=product.matvec_dot,
                             n_threads=product.n_threads,
                             chebyshev_step=product.chebyshev_step)


def _probe_symmetry(op, rng):
    """Random probe: x^T (A y) - y^T (A x) against ||A x|| ||y|| (costs 2 applications)."""
    n = op.n
    x = rng.standard_normal(n)
    y = rng.standard_normal(n)
    Ax = op.apply(x)
    Ay = op.apply(y)
    if not (np.all(np.isfinite(Ax)) and np.all(np.isfinite(Ay))):
        raise ValueError("the operator returned NaN or Inf")
    s = max(np.max(np.abs(Ax)), np.max(np.abs(Ay)))
    if s == 0.0:
        return
    # Divide by the largest entry so neither product can overflow or underflow.
    Ax = Ax / s
    Ay = Ay / s
    a = x @ Ay
    b = y @ Ax
    scale = np.linalg.norm(x) * np.linalg.norm(Ay) + np.linalg.norm(y) * np.linalg.norm(Ax)
    # Rounding in the two products is about sqrt(n) eps relative; 1e-8 leaves
    # a wide margin and still catches any asymmetry that matters at tol >= 1e-8.
    if abs(a - b) > 1e-8 * scale:
        raise ValueError(
            f"the operator is not symmetric: random probe |x^T(Ay) - y^T(Ax)| = "
            f"{abs(a - b) / scale:.3g} relative to ||x|| ||Ay|| + ||y|| ||Ax||")


def _callable_operator(A, rng, check):
    shape = tuple(A.shape)
    _check_square(shape, "the operator")
    dtype = getattr(A, "dtype", None)
    if dtype is not None:
        _check_real(np.dtype(dtype), "the operator")
    n = int(shape[0])
    matvec = A.matvec
    matmat = getattr(A, "matmat", None)
    has_matmat = callable(matmat)
    # A LinearOperator defined by matvec only still has matmat (a column loop);
    # use it anyway: it is never slower than our own loop.

    def apply_block(X):
        if X.ndim == 1:
            y = np.asarray(matvec(X))
        elif has_matmat:
            y = np.asarray(matmat(X))
        else:
            # Copy each column: a matvec may reuse one output buffer.
            y = np.empty((n, X.shape[1]))
            for i in range(X.shape[1]):
                col = np.asarray(matvec(X[:, i])).reshape(n)
                if np.iscomplexobj(col):
                    raise ValueError("the operator returned complex values")
                y[:, i] = col
        if np.iscomplexobj(y):
            raise ValueError("the operator returned complex values")
        # Always a fresh array: the solver updates products in place, and a
        # user's matvec may return its input or a view of its own storage.
        return np.array(y, dtype=np.float64, copy=True)

    op = SymmetricOperator(n, apply_block, "linear operator")
    if check and n > 0:
        _probe_symmetry(op, rng)
        op.applications = 0
    return op


def as_operator(A, *, seed=None, check=True, n_threads=None):
    """Turn ``A`` into a :class:`SymmetricOperator`, validating it once.

    Parameters
    ----------
    A : ndarray, scipy.sparse matrix/array, LinearOperator or object with ``shape`` and ``matvec``
        The symmetric operator.
    seed : int, Generator or None
        Drives the random symmetry probe for operators given by a product.
    check : bool
        Whether to check symmetry (explicit matrices exactly, operators by a
        random probe) and finiteness.
    n_threads : int or None
        Threads for the compiled product of sparse input (resolved once here;
        None: ``OMP_NUM_THREADS`` or the CPUs available, see
        :func:`lanqr.vecops.default_threads`).  Products of small matrices
        run on one thread whatever this says.

    Returns
    -------
    SymmetricOperator

    Raises
    ------
    ValueError
        Non-square, complex, NaN/Inf entries, not symmetric, or a bad ``n_threads``.
    TypeError
        ``A`` is none of the accepted kinds.
    """
    if isinstance(A, SymmetricOperator):
        return A
    n_threads = resolve_threads(n_threads)
    if sp.issparse(A):
        return _sparse_operator(A, n_threads)
    if isinstance(A, np.ndarray) or isinstance(A, (list, tuple)):
        return _dense_operator(np.asarray(A))
    if hasattr(A, "shape") and hasattr(A, "matvec"):
        rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
        return _callable_operator(A, rng, check)
    raise TypeError(
        f"cannot use an object of type {type(A).__name__} as an operator: give an ndarray, a "
        "scipy.sparse matrix, a LinearOperator or an object with shape and matvec")
