"""Python boundary of the compiled vector kernels (``_vecops``).

Validation, dtypes, memory layout and the thread count live here; the kernels
trust what they are given.  Three groups:

* :class:`CsrProduct` -- y = A x and Y = A X for one CSR matrix, checked once
  at construction, multithreaded over rows (OpenMP), serial for small
  matrices.  Each row is summed sequentially over its stored entries, the
  order SciPy uses, so the result is bitwise SciPy's ``A @ x`` for any thread
  count.
* :func:`recurrence_update` -- the fused three-term recurrence update
  ``w -= alpha v + beta v_prev`` returning ``||w||`` (one pass over memory);
  :meth:`CsrProduct.matvec_dot` fuses the product with ``alpha = x . A x``.
* :func:`orthogonalize`, :func:`orthogonalize_block`, :func:`rotate_basis` --
  reorthogonalization and Ritz-vector formation through BLAS level 2/3 on a
  column-major basis.

No module state is written after import: two threads may use two
:class:`CsrProduct` objects (or the same one) at once.

Choices made by measurement (``bench/bench_products.py``, 2-core shared
machine):

* Blocks of vectors are row-major (C order): one stored entry multiplies k
  adjacent values, one cache line per gather; the row-major kernel ran
  1.5-1.9x SciPy's ``A @ X`` on one thread for k = 4, 8, the column-major one
  0.6-1.1x.  A block of k vectors costs 1.5-5x less than k single products.
* The Gram-Schmidt pass uses two dgemv calls: a row-blocked variant with our
  own loops (3 reads of V for two passes instead of 4) was 1.4-2x slower than
  single-threaded OpenBLAS here, being compute bound under load.
* Thread teams (OpenMP here, OpenBLAS's own for dgemv/dgemm) lose badly when
  the cores are busy with other processes: a region waits for a descheduled
  thread.  On a shared machine set ``OMP_NUM_THREADS=1`` (and limit BLAS
  threads with threadpoolctl), or ``OMP_WAIT_POLICY=passive`` to bound the loss.
"""
from __future__ import annotations

import functools
import os
from typing import NamedTuple

import numpy as np
import scipy.sparse as sp

from lanqr import _vecops

__all__ = [
    "CsrProduct",
    "Projection",
    "default_threads",
    "resolve_threads",
    "recurrence_update",
    "orthogonalize",
    "orthogonalize_block",
    "rotate_basis",
    "csr_asymmetry",
    "omega_advance",
    "SERIAL_BELOW_NNZ",
    "DGKS_ETA",
]

#: Below this many stored entries a product runs on one thread: starting a
#: thread team costs several microseconds (much more on a loaded machine),
#: about the time of a product with this many entries.  Measured with
#: ``bench/bench_products.py --threshold``.
SERIAL_BELOW_NNZ = 200_000

#: DGKS criterion: repeat the Gram-Schmidt pass when the norm falls below
#: ``DGKS_ETA`` times its value before the pass (1/sqrt(2): common practice,
#: Daniel, Gragg, Kaufman and Stewart 1976).
DGKS_ETA = 1.0 / np.sqrt(2.0)

#: Rows per chunk for :func:`rotate_basis`: the scratch is chunk x k doubles.
ROTATE_CHUNK_ROWS = 16384

_SCHEDULES = {"static": 0, "dynamic": 1}


@functools.cache
def default_threads():
    """Number of threads the compiled kernels use when not told otherwise.

    Resolved once per process: OpenMP's ``omp_get_max_threads()`` (which honours
    ``OMP_NUM_THREADS``), capped by the CPUs this process may run on; 1 when
    the module was built without OpenMP.

    Returns
    -------
    int
        At least 1.
    """
    if not _vecops.openmp_enabled():
        return 1
    try:
        cpus = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cpus = os.cpu_count() or 1
    return max(1, min(int(_vecops.openmp_max_threads()), cpus))


def resolve_threads(n_threads=None):
    """Turn a user's ``n_threads`` into a thread count.

    Parameters
    ----------
    n_threads : int or None
        None means :func:`default_threads`; otherwise a positive integer.

    Returns
    -------
    int

    Raises
    ------
    ValueError
        If ``n_threads`` is not None or a positive integer.
    """
    if n_threads is None:
        return default_threads()
    if isinstance(n_threads, (bool, np.bool_)) or not isinstance(n_threads, (int, np.integer)):
        raise ValueError(f"n_threads must be a positive integer or None, got {n_threads!r}")
    if n_threads < 1:
        raise ValueError(f"n_threads must be a positive integer or None, got {n_threads}")
    if not _vecops.openmp_enabled():
        return 1
    return int(n_threads)


def _float_vector(x, length, name):
    # Fast path first: the solver passes float64 contiguous vectors every step.
    if (type(x) is np.ndarray and x.dtype == np.float64 and x.shape == (length,)
            and x.flags.c_contiguous):
        return x
    x = np.asarray(x)
    if np.iscomplexobj(x):
        raise ValueError(f"{name} must be real, got dtype {x.dtype}")
    if x.ndim != 1 or x.shape[0] != length:
        raise ValueError(f"{name} must have shape ({length},), got {x.shape}")
    # A copy only when the dtype or the layout is not the kernel's.
    return np.ascontiguousarray(x, dtype=np.float64)


def _out_array(out, shape, name, order="C", avoid=()):
    if out is None:
        return np.empty(shape, dtype=np.float64, order=order)
    if not isinstance(out, np.ndarray) or out.dtype != np.float64:
        raise ValueError(f"{name} must be a float64 ndarray")
    if out.shape != shape:
        raise ValueError(f"{name} must have shape {shape}, got {out.shape}")
    contiguous = out.flags.c_contiguous if order == "C" else out.flags.f_contiguous
    if not contiguous:
        raise ValueError(f"{name} must be {'C' if order == 'C' else 'Fortran'}-contiguous")
    if not out.flags.writeable:
        raise ValueError(f"{name} is read-only")
    for other in avoid:
        if np.may_share_memory(out, other):
            raise ValueError(f"{name} must not overlap the input")
    return out


class CsrProduct:
    """Compiled, multithreaded products with one CSR matrix.

    The matrix is checked and converted once here; every product afterwards
    only checks its vector.

    Parameters
    ----------
    matrix : scipy.sparse CSR matrix or array
        Any shape.  Data are used as float64 (other real dtypes are copied once);
        indices and indptr as int32 or int64 (mixed or other integer dtypes are
        copied once to int64).  Duplicate entries are summed and unsorted
        column indices are allowed, as in SciPy's own product.
    n_threads : int or None
        Threads for large products; None means :func:`default_threads`.
    check_finite : bool
        Reject NaN or Inf among the stored values.
    schedule : {"static", "dynamic"}
        Row distribution among threads: one block per thread holding an equal
        share of the stored entries, or dynamic chunks of 8192 rows.  Either
        gives bitwise the same result.
    serial_below : int
        Products with fewer stored entries run on one thread (default
        :data:`SERIAL_BELOW_NNZ`; 0 forces the threaded path, for tests).

    Raises
    ------
    ValueError
        Not a CSR matrix, complex values, NaN/Inf values (with ``check_finite``),
        malformed index arrays (indptr not non-decreasing, column index out of
        range), bad ``n_threads`` or ``schedule``.

    Notes
    -----
    Products of matrices with fewer than :data:`SERIAL_BELOW_NNZ` stored entries
    run on one thread, where a thread team costs more than it saves.

    Each output entry is ``sum(data[p] * x[indices[p]])`` accumulated from zero
    in storage order, exactly as SciPy's ``csr_matvec``; rows never share an
    accumulator, so the result does not depend on the thread count.

    Examples
    --------
    >>> import numpy as np
    >>> from lanqr.problems import laplacian_grid
    >>> from lanqr.vecops import CsrProduct
    >>> A = laplacian_grid((30, 30))
    >>> x = np.ones(A.shape[1])
    >>> bool(np.array_equal(CsrProduct(A).matvec(x), A @ x))
    True
    """

    def __init__(self, matrix, *, n_threads=None, check_finite=True, schedule="static",
                 serial_below=SERIAL_BELOW_NNZ):
        if not sp.issparse(matrix) or matrix.format != "csr":
            kind = type(matrix).__name__
            fmt = getattr(matrix, "format", None)
            raise ValueError(f"CsrProduct needs a scipy.sparse CSR matrix, got {kind}"
                             + (f" in {fmt} format" if fmt else ""))
        if matrix.ndim != 2:
            raise ValueError(f"matrix must be 2-D, got {matrix.ndim}-D")
        if np.iscomplexobj(matrix.data):
            raise ValueError(f"matrix must be real, got dtype {matrix.dtype}")
        if schedule not in _SCHEDULES:
            raise ValueError(f"schedule must be 'static' or 'dynamic', got {schedule!r}")
        n_rows, n_cols = matrix.shape
        indptr = np.asarray(matrix.indptr)
        indices = np.asarray(matrix.indices)
        data = np.asarray(matrix.data)
        if indptr.ndim != 1 or indptr.shape[0] != n_rows + 1:
            raise ValueError(f"indptr must have length {n_rows + 1}, got {indptr.shape}")
        nnz = int(indptr[-1]) if n_rows else 0
        if int(indptr[0]) != 0 or nnz > min(indices.shape[0], data.shape[0]):
            raise ValueError("indptr does not match the index and value arrays")
        index_dtype = indices.dtype
        if index_dtype not in (np.int32, np.int64) or indptr.dtype != index_dtype:
            index_dtype = np.int64
        indptr = np.ascontiguousarray(indptr, dtype=index_dtype)
        indices = np.ascontiguousarray(indices[:nnz], dtype=index_dtype)
        data = np.ascontiguousarray(data[:nnz], dtype=np.float64)
        if n_rows and np.any(np.diff(indptr) < 0):
            raise ValueError("indptr must be non-decreasing")
        if nnz and (int(indices.min()) < 0 or int(indices.max()) >= n_cols):
            raise ValueError(f"column index out of range [0, {n_cols})")
        if check_finite and nnz and not np.isfinite(data).all():
            raise ValueError("matrix contains NaN or Inf")
        self._indptr = indptr
        self._indices = indices
        self._data = data
        self.shape = (int(n_rows), int(n_cols))
        self.nnz = nnz
        threads = resolve_threads(n_threads)
        self.n_threads = 1 if nnz < serial_below else threads
        self._schedule = _SCHEDULES[schedule]

    def matvec(self, x, out=None):
        """Return ``y = A x``.

        Parameters
        ----------
        x : array_like, shape (n_cols,)
            Real vector; copied once if not float64 and contiguous.
        out : ndarray, optional
            Float64, C-contiguous, shape (n_rows,), not overlapping ``x``.

        Returns
        -------
        ndarray, shape (n_rows,)

        Raises
        ------
        ValueError
            Wrong shape, complex ``x``, unusable ``out``.
        """
        x = _float_vector(x, self.shape[1], "x")
        y = _out_array(out, (self.shape[0],), "out", avoid=(x,))
        _vecops.csr_matvec(self._indptr, self._indices, self._data, x, y,
                           self.n_threads, self._schedule)
        return y

    def matvec_dot(self, x, out=None):
        """Return ``(y, alpha)`` with ``y = A x`` and ``alpha = x . y`` in one pass.

        The Lanczos coefficient ``alpha_j = v_j^T A v_j`` comes for free while
        the product streams the matrix.  Square matrices only.

        Parameters
        ----------
        x : array_like, shape (n,)
        out : ndarray, optional
            As in :meth:`matvec`.

        Returns
        -------
        y : ndarray, shape (n,)
        alpha : float
            Summed over fixed row chunks whose partial sums are added in
            order, so ``alpha`` is the same for every thread count (it may
            differ in the last bits from ``np.dot``).

        Raises
        ------
        ValueError
            Non-square matrix, or as :meth:`matvec`.
        """
        if self.shape[0] != self.shape[1]:
            raise ValueError(f"matvec_dot needs a square matrix, got shape {self.shape}")
        x = _float_vector(x, self.shape[1], "x")
        y = _out_array(out, (self.shape[0],), "out", avoid=(x,))
        alpha = _vecops.csr_matvec_dot(self._indptr, self._indices, self._data, x, y,
                                       self.n_threads)
        return y, float(alpha)

    def chebyshev_step(self, x, y, sigma, shift, tau):
        """In place: ``y <- sigma (A x - shift x) - tau y`` in one pass over memory.

        The three-term recurrence of a Chebyshev polynomial in ``A`` (see
        :mod:`lanqr.polyfilter`) costs one product this way: the old ``y`` is
        read and overwritten row by row (not read at all when ``tau == 0``).

        Parameters
        ----------
        x : ndarray, shape (n,)
            Float64, contiguous, not overlapping ``y``.
        y : ndarray, shape (n,)
            Float64, contiguous, writable; overwritten.
        sigma, shift, tau : float

        Raises
        ------
        ValueError
            Non-square matrix, wrong shapes or layouts, overlapping vectors.
        """
        if self.shape[0] != self.shape[1]:
            raise ValueError(f"chebyshev_step needs a square matrix, got shape {self.shape}")
        n = self.shape[0]
        x = _float_vector(x, n, "x")
        y = _writable_vector(y, "y")
        if y.shape[0] != n:
            raise ValueError(f"y must have length {n}, got {y.shape[0]}")
        if np.may_share_memory(x, y):
            raise ValueError("y must not overlap x")
        _vecops.csr_chebyshev_step(self._indptr, self._indices, self._data, x, y,
                                   float(sigma), float(shift), float(tau), self.n_threads)
        return y

    def matmat(self, X, out=None):
        """Return ``Y = A X`` for a block of vectors.

        Parameters
        ----------
        X : array_like, shape (n_cols, k)
            Row-major (C-order) blocks are the fast layout: the k values one
            stored entry multiplies are adjacent in memory, one cache line per
            gather.  A Fortran-order ``X`` is used as it is (k separate gathers
            per entry); any other layout or dtype is copied to C order.
        out : ndarray, optional
            Float64, shape (n_rows, k), in the layout of the (possibly copied)
            ``X``, not overlapping it.

        Returns
        -------
        ndarray, shape (n_rows, k)
            Same memory order as the ``X`` used.

        Raises
        ------
        ValueError
            Wrong shape, complex ``X``, unusable ``out``.
        """
        X = np.asarray(X)
        if np.iscomplexobj(X):
            raise ValueError(f"X must be real, got dtype {X.dtype}")
        if X.ndim != 2 or X.shape[0] != self.shape[1]:
            raise ValueError(f"X must have shape ({self.shape[1]}, k), got {X.shape}")
        k = X.shape[1]
        if X.dtype == np.float64 and X.flags.f_contiguous and not X.flags.c_contiguous:
            Y = _out_array(out, (self.shape[0], k), "out", order="F", avoid=(X,))
            _vecops.csr_matmat_f(self._indptr, self._indices, self._data, X, Y, self.n_threads)
            return Y
        X = np.ascontiguousarray(X, dtype=np.float64)
        Y = _out_array(out, (self.shape[0], k), "out", order="C", avoid=(X,))
        _vecops.csr_matmat_c(self._indptr, self._indices, self._data, X, Y, self.n_threads)
        return Y

    def __repr__(self):
        return (f"CsrProduct(shape={self.shape}, nnz={self.nnz}, "
                f"index dtype={self._indices.dtype}, n_threads={self.n_threads})")


def _writable_vector(w, name):
    if not isinstance(w, np.ndarray) or w.dtype != np.float64 or w.ndim != 1:
        raise ValueError(f"{name} must be a 1-D float64 ndarray (it is updated in place)")
    if not w.flags.c_contiguous or not w.flags.writeable:
        raise ValueError(f"{name} must be contiguous and writable (it is updated in place)")
    return w


def _column_major(V, name, writable=False):
    """Accept a float64 2-D array whose columns are contiguous: a Fortran array
    or a leading block ``V[:n, :j]`` of one.  Never copied (it may be large)."""
    if not isinstance(V, np.ndarray) or V.dtype != np.float64 or V.ndim != 2:
        raise ValueError(f"{name} must be a 2-D float64 ndarray")
    n, j = V.shape
    if V.size == 0:
        return V
    if n > 1 and V.strides[0] != V.itemsize:
        raise ValueError(f"{name} must be column-major (np.asfortranarray), got strides {V.strides}")
    if j > 1 and (V.strides[1] < n * V.itemsize or V.strides[1] % V.itemsize):
        raise ValueError(f"{name} columns must not overlap, got strides {V.strides}")
    if writable and not V.flags.writeable:
        raise ValueError(f"{name} is read-only")
    if max(n, j) >= 2**31 or (j > 1 and V.strides[1] // V.itemsize >= 2**31):
        raise ValueError(f"{name} is too large for 32-bit BLAS")
    return V


def csr_asymmetry(A, scale=None):
    """``||A - A^T||_F / max|a_ij|`` of a square CSR matrix, in O(nnz log(row length)).

    Parameters
    ----------
    A : scipy.sparse CSR matrix or array, float64, square
        Duplicates are summed and indices sorted in place if needed (neither
        changes the matrix it represents).
    scale : float or None
        ``max |a_ij|`` when the caller has it already (one pass fewer).

    Returns
    -------
    float
        The Frobenius norm of ``A - A^T`` divided by the largest absolute
        stored entry (0 for an empty or all-zero matrix).  Scaling first keeps
        matrices near the overflow threshold finite.

    Notes
    -----
    Each stored off-diagonal entry finds its mirror by binary search in the
    mirrored row; no transpose is formed (SciPy's ``A - A.T`` builds two
    matrices of the size of ``A``: 5x slower on a 7e5-row matrix here).
    """
    if not sp.issparse(A) or A.format != "csr":
        raise ValueError("csr_asymmetry needs a scipy.sparse CSR matrix")
    if A.shape[0] != A.shape[1]:
        raise ValueError(f"csr_asymmetry needs a square matrix, got shape {A.shape}")
    if A.dtype != np.float64:
        raise ValueError(f"csr_asymmetry needs float64 data, got {A.dtype}")
    A.sum_duplicates()  # also sorts the indices
    if not A.has_sorted_indices:
        A.sort_indices()
    if A.nnz == 0:
        return 0.0
    if scale is None:
        scale = float(np.max(np.abs(A.data)))
    if scale == 0.0 or not np.isfinite(scale):
        return 0.0 if scale == 0.0 else float("nan")
    indices = np.ascontiguousarray(A.indices)
    indptr = np.ascontiguousarray(A.indptr, dtype=indices.dtype)
    return float(_vecops.csr_asymmetry(indptr, indices, np.ascontiguousarray(A.data), scale))


def omega_advance(new, cur, prev, alpha, beta, j, beta_j, eps1, local):
    """One step of Simon's recurrence for the orthogonality estimates (compiled).

    Writes row ``j + 1`` into ``new`` from rows ``j`` (``cur``) and ``j - 1``
    (``prev``) and the tridiagonal coefficients ``alpha[:j + 1]``,
    ``beta[:j]`` (``beta_j`` is the new coupling); ``eps1`` scales the
    rounding term, ``local`` is the estimate against ``q_j``.  Estimates are
    signed (the rounding term takes the sign of the rest).  Returns the
    largest |estimate| against columns ``0 .. j - 1``.  Called once per Lanczos
    step by :class:`lanqr.lanczos.PartialOrthogonality`, so only the lengths
    are checked: every array is a contiguous float64 vector the caller owns.
    """
    if not (0 <= j < alpha.shape[0] and j + 1 < new.shape[0] == cur.shape[0] == prev.shape[0]
            and beta.shape[0] >= j):
        raise ValueError(f"omega_advance: inconsistent lengths for step j = {j}")
    return _vecops.omega_advance(new, cur, prev, alpha, beta, int(j), float(beta_j),
                                 float(eps1), float(local))


def recurrence_update(w, v, v_prev, alpha, beta, *, n_threads=None,
                      serial_below=SERIAL_BELOW_NNZ):
    """Three-term recurrence update in one pass: ``w -= alpha v + beta v_prev``.

    Parameters
    ----------
    w : ndarray, shape (n,)
        Float64, contiguous, writable; overwritten.
    v, v_prev : array_like, shape (n,)
        Current and previous Lanczos vectors; ``v_prev`` may be None (first step).
    alpha, beta : float
    n_threads : int or None
        Threads for long vectors.
    serial_below : int
        Vectors shorter than this are updated on one thread.

    Returns
    -------
    float
        ``||w||`` after the update, from the same pass, the same for every
        thread count (fixed row chunks, partial sums added in order).  The
        square root of a plain sum of squares: fine for Lanczos vectors of
        norm ``<= ||A||``; use ``np.linalg.norm`` for data near overflow.

    Raises
    ------
    ValueError
        Shapes differ, or ``w`` is not a writable contiguous float64 vector.
    """
    w = _writable_vector(w, "w")
    n = w.shape[0]
    v = _float_vector(v, n, "v")
    if v_prev is not None:
        v_prev = _float_vector(v_prev, n, "v_prev")
    threads = resolve_threads(n_threads)
    if n < serial_below:
        threads = 1
    return float(np.sqrt(_vecops.recurrence_update(w, v, v_prev, float(alpha), float(beta),
                                                   threads)))


class Projection(NamedTuple):
    """Outcome of a Gram-Schmidt projection.

    coefficients : projection coefficients ``V^T w`` summed over all passes
    norm : norm of the projected vector
    norm_before : norm of the vector before the first pass
    passes : passes made (1, or more when DGKS asked for a repeat)
    """

    coefficients: np.ndarray
    norm: np.ndarray | float
    norm_before: np.ndarray | float
    passes: int


def _check_dgks(eta, max_passes):
    if not 0.0 < eta < 1.0:
        raise ValueError(f"eta must lie in (0, 1), got {eta}")
    if int(max_passes) < 1:
        raise ValueError(f"max_passes must be at least 1, got {max_passes}")


def orthogonalize(basis, w, *, coefficients=None, eta=DGKS_ETA, max_passes=2):
    """Classical Gram-Schmidt of ``w`` against the columns of ``basis``, with DGKS.

    One pass is ``c = V^T w; w -= V c`` with two BLAS dgemv calls.  When the
    norm of ``w`` falls below ``eta`` times its value before the pass, much of
    ``w`` cancelled and rounding left components along ``V``; the pass is
    repeated (Daniel-Gragg-Kaufman-Stewart), at most ``max_passes`` times in
    all ("twice is enough", Parlett-Kahan).

    Parameters
    ----------
    basis : ndarray, shape (n, j)
        Float64, column-major with orthonormal columns; may be the leading
        block ``V[:, :j]`` (or ``V[:n, :j]``) of a larger Fortran array.  Not
        copied; other layouts are rejected.
    w : ndarray, shape (n,)
        Float64, contiguous, writable; overwritten by its projection.
    coefficients : ndarray, shape (j,), optional
        Output for the coefficients (e.g. a column of the projected matrix).
    eta : float
        DGKS threshold in (0, 1); default 1/sqrt(2) (common practice).
    max_passes : int
        At least 1.

    Returns
    -------
    Projection
        ``(coefficients, norm, norm_before, passes)``.  If ``passes ==
        max_passes`` and ``norm < eta * (norm before the last pass)``, ``w``
        lay numerically in the span of the basis (breakdown).

    Raises
    ------
    ValueError
        Shapes, dtypes or layouts the kernel cannot use; bad ``eta`` or
        ``max_passes``.

    Notes
    -----
    Memory traffic per pass is two reads of ``V``: CGS reads the basis in
    BLAS-2 sweeps instead of the ``j`` separate vector passes of modified
    Gram-Schmidt.

    References
    ----------
    J. W. Daniel, W. B. Gragg, L. Kaufman, G. W. Stewart, "Reorthogonalization
    and stable algorithms for updating the Gram-Schmidt QR factorization",
    Math. Comp. 30 (1976) 772-795.

    Examples
    --------
    >>> import numpy as np
    >>> from lanqr.vecops import orthogonalize
    >>> V = np.asfortranarray(np.linalg.qr(np.random.default_rng(0).random((50, 5)))[0])
    >>> w = np.random.default_rng(1).random(50)
    >>> proj = orthogonalize(V, w)
    >>> bool(np.abs(V.T @ w).max() < 1e-14)
    True
    """
    basis = _column_major(basis, "basis")
    n, j = basis.shape
    w = _writable_vector(w, "w")
    if w.shape[0] != n:
        raise ValueError(f"w must have length {n}, got {w.shape[0]}")
    _check_dgks(eta, max_passes)
    if coefficients is None:
        coefficients = np.empty(j)
    else:
        coefficients = _writable_vector(coefficients, "coefficients")
        if coefficients.shape[0] != j:
            raise ValueError(f"coefficients must have length {j}, got {coefficients.shape[0]}")
    if np.may_share_memory(w, basis):
        raise ValueError("w must not overlap the basis")
    norm_before, norm, passes = _vecops.cgs_dgks(basis, w, coefficients,
                                                 float(eta), int(max_passes))
    return Projection(coefficients, float(norm), float(norm_before), int(passes))


def orthogonalize_block(basis, block, *, eta=DGKS_ETA, max_passes=2):
    """Block classical Gram-Schmidt with BLAS-3: ``C = V^T W; W -= V C``.

    Repeated (DGKS, per column) while any column's norm fell below ``eta``
    times its value before the pass, at most ``max_passes`` passes in all.
    Orthogonalizes the block against ``V`` only, not its columns against each
    other.

    Parameters
    ----------
    basis : ndarray, shape (n, j)
        Float64, column-major (as in :func:`orthogonalize`).
    block : ndarray, shape (n, b)
        Float64, column-major, writable; overwritten.
    eta : float
    max_passes : int

    Returns
    -------
    Projection
        Coefficients of shape (j, b) (Fortran order), column norms after and
        before, passes made.

    Raises
    ------
    ValueError
        Shapes, dtypes or layouts the kernel cannot use.
    """
    basis = _column_major(basis, "basis")
    block = _column_major(block, "block", writable=True)
    n, j = basis.shape
    if block.shape[0] != n:
        raise ValueError(f"block must have {n} rows, got {block.shape[0]}")
    _check_dgks(eta, max_passes)
    if np.may_share_memory(block, basis):
        raise ValueError("block must not overlap the basis")
    b = block.shape[1]
    total = np.zeros((j, b), order="F")
    step = np.empty((j, b), order="F")
    norms_before = np.linalg.norm(block, axis=0)
    before = norms_before
    passes = 0
    while passes < max_passes:
        _vecops.block_project(basis, block, step)
        total += step
        passes += 1
        after = np.linalg.norm(block, axis=0)
        if not np.any(after < eta * before):
            break
        before = after
    return Projection(total, after, norms_before, passes)


def rotate_basis(basis, rotation, *, chunk_rows=ROTATE_CHUNK_ROWS, probe=None):
    """In place ``V[:, :k] = V[:, :m] @ Y`` (Ritz vectors for a thick restart).

    Formed by dgemm in chunks of rows: an output row needs only the same input
    row, so a chunk is overwritten as soon as it is done, and the extra memory
    is ``chunk_rows x k`` instead of a second ``n x k`` array.

    Parameters
    ----------
    basis : ndarray, shape (n, p)
        Float64, column-major, writable, ``p >= m``.  Columns ``k..p`` are
        untouched.
    rotation : array_like, shape (m, k)
        ``k <= m``; copied to Fortran order (it is small).
    chunk_rows : int
        Rows per dgemm call.
    probe : ndarray, shape (n,), optional
        Also return inner products measured while each chunk is in cache
        (no extra pass over the basis): see Returns.

    Returns
    -------
    ndarray
        ``basis`` (updated in place); with ``probe``, the pair ``(basis,
        gram)`` where ``gram`` has shape ``(k + 1, 2)``: rows ``c < k`` hold
        ``W[:, c] . W[:, k-1]`` and ``W[:, c] . probe`` for the new columns
        ``W``, row ``k`` holds ``probe . W[:, k-1]`` and ``probe . probe``.

    Raises
    ------
    ValueError
        Shapes, dtypes or layouts the kernel cannot use.
    """
    basis = _column_major(basis, "basis", writable=True)
    Y = np.asarray(rotation)
    if np.iscomplexobj(Y) or Y.ndim != 2:
        raise ValueError("rotation must be a real 2-D array")
    Y = np.asfortranarray(Y, dtype=np.float64)
    m, k = Y.shape
    n, p = basis.shape
    if m > p or k > m:
        raise ValueError(f"rotation shape {Y.shape} needs k <= m <= {p}")
    if int(chunk_rows) < 1:
        raise ValueError(f"chunk_rows must be positive, got {chunk_rows}")
    if probe is None:
        if n and k:
            _vecops.rotate_basis(basis[:, :m], Y, int(chunk_rows))
        return basis
    probe = _float_vector(probe, n, "probe")
    if k == 0:
        raise ValueError("probe needs at least one new column")
    gram = np.zeros((k + 1, 2))
    _vecops.rotate_basis(basis[:, :m], Y, int(chunk_rows), probe, gram)
    return basis, gram
