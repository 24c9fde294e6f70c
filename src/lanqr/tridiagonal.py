"""Python boundary of the compiled tridiagonal eigen-kernel.

Validation, dtypes and result shapes live here; the compiled module
``lanqr._tridiag`` trusts what it is given.  The kernel itself (implicit
Wilkinson-shifted QL/QR sweeps with Givens bulge chasing, splitting, per-block
scaling, a square-root-free variant for values only) is described at the top of
``_tridiag.pyx``.

The Lanczos solver calls :func:`tridiag_eigen` with ``rows=[-1]`` at every
step on matrices of order 20..200, so the fast path for float64 1-D arrays is
kept short.
"""
import numpy as np

from lanqr import _tridiag

__all__ = ["tridiag_values", "tridiag_eigen", "TridiagonalConvergenceError"]

#: Sweeps allowed per unit of order: the limit is about 30 n sweeps in total.
#: Well-behaved matrices need 1.3 to 2 sweeps per eigenvalue (common practice).
SWEEPS_PER_ORDER = 30

_FLOAT = np.dtype(np.float64)
_INTP = np.dtype(np.intp)


class TridiagonalConvergenceError(ArithmeticError):
    """The implicit QR iteration reached its sweep limit.

    Attributes
    ----------
    n : int
        Order of the matrix.
    n_converged : int
        How many eigenvalues had converged when the limit was reached.
    converged_values : ndarray
        Those eigenvalues, ascending.
    max_sweeps : int
        The sweep limit that was reached.
    """

    def __init__(self, n, n_converged, converged_values, max_sweeps):
        self.n = n
        self.n_converged = n_converged
        self.converged_values = converged_values
        self.max_sweeps = max_sweeps
        super().__init__(
            f"tridiagonal QR iteration did not converge within {max_sweeps} sweeps: "
            f"{n_converged} of {n} eigenvalues converged"
        )

    def __reduce__(self):
        # picklable (e.g. across process pools) despite the custom signature
        return (type(self), (self.n, self.n_converged, self.converged_values, self.max_sweeps))


def _as_vector(x, name):
    if type(x) is np.ndarray and x.dtype == _FLOAT and x.ndim == 1 and x.flags.c_contiguous:
        return x
    arr = np.asarray(x)
    if arr.ndim != 1:
        raise ValueError(f"{name} must be 1-D, got an array of shape {arr.shape}")
    if arr.dtype.kind not in "biuf":
        raise ValueError(f"{name} must hold real numbers, got dtype {arr.dtype}")
    return np.ascontiguousarray(arr, dtype=_FLOAT)


def _check_pair(d, e):
    d = _as_vector(d, "d")
    e = _as_vector(e, "e")
    n = d.shape[0]
    if e.shape[0] != (n - 1 if n > 0 else 0):
        raise ValueError(
            f"e must have length len(d) - 1 = {max(n - 1, 0)}, got length {e.shape[0]}"
        )
    return d, e, n


def _check_rows(rows, n):
    if type(rows) is list and len(rows) == 1 and type(rows[0]) is int:
        # Fast path for the solver's rows=[-1] at every Lanczos step.
        r = rows[0]
        if r < -n or r >= n:
            raise ValueError(f"row index {r} out of range for a matrix of order {n}")
        return np.array((r + n if r < 0 else r,), dtype=_INTP)
    idx = np.asarray(rows)
    if idx.ndim != 1:
        raise ValueError(f"rows must be a 1-D sequence of row indices, got shape {idx.shape}")
    if idx.shape[0] == 0:
        return np.empty(0, dtype=_INTP)
    if idx.dtype.kind not in "iu":
        raise ValueError(f"rows must hold integers, got dtype {idx.dtype}")
    lo = idx.min()
    hi = idx.max()
    if lo < -n or hi >= n:
        bad = lo if lo < -n else hi
        raise ValueError(f"row index {bad} out of range for a matrix of order {n}")
    idx = idx.astype(_INTP)  # always a fresh array, safe to modify
    if lo < 0:
        idx[idx < 0] += n
    return idx


def _raise_for(status, n, w, e_work, max_sweeps):
    if status == -1:
        raise ValueError("d contains NaN or Inf")
    if status == -2:
        raise ValueError("e contains NaN or Inf")
    mask = _tridiag._isolated_mask(e_work, n)
    raise TridiagonalConvergenceError(n, int(mask.sum()), np.sort(w[mask]), max_sweeps)


def _solve_values(d, e, max_sweeps=None):
    d, e, n = _check_pair(d, e)
    if n < 2:
        if n == 1 and not np.isfinite(d[0]):
            raise ValueError("d contains NaN or Inf")
        return d.copy()
    if max_sweeps is None:
        max_sweeps = SWEEPS_PER_ORDER * n
    status, w, e_work, _ = _tridiag.values(d, e, max_sweeps)
    if status:
        _raise_for(status, n, w, e_work, max_sweeps)
    return w


def _solve_eigen(d, e, rows=None, max_sweeps=None):
    d, e, n = _check_pair(d, e)
    if rows is not None:
        rows = _check_rows(rows, n)
    if n == 0:
        return np.empty(0), np.empty((0 if rows is None else rows.shape[0], 0), order="F")
    if max_sweeps is None:
        max_sweeps = SWEEPS_PER_ORDER * n
    status, w, z, e_work, _ = _tridiag.eigen(d, e, rows, max_sweeps)
    if status:
        _raise_for(status, n, w, e_work, max_sweeps)
    return w, z


def tridiag_values(d, e):
    """Eigenvalues of a real symmetric tridiagonal matrix, ascending.

    Parameters
    ----------
    d : array_like, shape (n,)
        Diagonal, n >= 0.
    e : array_like, shape (n - 1,)
        Off-diagonal (empty when n <= 1).

    Returns
    -------
    values : ndarray of float64, shape (n,)
        The eigenvalues in ascending order.

    Raises
    ------
    ValueError
        If ``d`` or ``e`` is not 1-D, not real, has the wrong length, or
        contains NaN or Inf.
    TridiagonalConvergenceError
        If the iteration needs more than about 30 n sweeps; the exception
        carries the eigenvalues that did converge.

    Notes
    -----
    Implicit Wilkinson-shifted QL/QR iteration in its square-root-free form
    (Pal, Walker and Kahan), compiled and run without the GIL.  The matrix is
    split into unreduced blocks where ``|e_i| <= eps sqrt(|d_i d_{i+1}|)``;
    each block is scaled into a safe range and iterated from the end whose
    diagonal entry is smaller in magnitude, so graded matrices keep their small
    eigenvalues to high relative accuracy.  Cost: O(n^2) in practice.
    The inputs are not modified.

    References
    ----------
    .. [1] B. N. Parlett, *The Symmetric Eigenvalue Problem*, SIAM 1998, ch. 8.
    .. [2] H. Bowdler, R. S. Martin, C. Reinsch and J. H. Wilkinson, "The QR and
       QL algorithms for symmetric matrices", *Numer. Math.* 11 (1968) 293-306.

    Examples
    --------
    >>> import numpy as np
    >>> from lanqr import tridiag_values
    >>> tridiag_values([2.0, 2.0, 2.0], [-1.0, -1.0])   # 2 - sqrt(2), 2, 2 + sqrt(2)
    array([0.58578644, 2.        , 3.41421356])
    """
    return _solve_values(d, e)


def tridiag_eigen(d, e, rows=None):
    """Eigenvalues and eigenvectors (or chosen rows of them) of a symmetric tridiagonal matrix.

    Parameters
    ----------
    d : array_like, shape (n,)
        Diagonal, n >= 0.
    e : array_like, shape (n - 1,)
        Off-diagonal (empty when n <= 1).
    rows : sequence of int, optional
        Row indices of the eigenvector matrix to compute (negative indices count
        from the end, e.g. ``[-1]`` for the last row, ``[0, -1]`` for the first
        and last).  Default: all rows.

    Returns
    -------
    values : ndarray of float64, shape (n,)
        The eigenvalues in ascending order.
    vectors : ndarray of float64, shape (n, n) or (len(rows), n), Fortran order
        Column ``j`` belongs to ``values[j]``.  With ``rows`` only those rows
        of the orthonormal eigenvector matrix, computed in O(len(rows) n) work
        per sweep without forming the full matrix.

    Raises
    ------
    ValueError
        If ``d`` or ``e`` is not 1-D, not real, has the wrong length or
        contains NaN or Inf, or if a row index is out of range.
    TridiagonalConvergenceError
        If the iteration needs more than about 30 n sweeps.

    Notes
    -----
    Implicit Wilkinson-shifted QL/QR sweeps with Givens bulge chasing (one
    implicit Francis step per sweep), with the splitting, scaling and
    direction choice of :func:`tridiag_values`.  The rotations of a sweep are
    stored and applied to the kept rows of the eigenvector matrix in blocks of
    rows, each entry read and written once per sweep.  The GIL is released.

    ``rows=[0]`` gives the Golub-Welsch quadrature weights
    ``mu0 * vectors[0]**2``; ``rows=[-1]`` gives the Lanczos residual
    estimates ``|beta_k| * |vectors[-1]|``.

    References
    ----------
    .. [1] H. Bowdler, R. S. Martin, C. Reinsch and J. H. Wilkinson, "The QR and
       QL algorithms for symmetric matrices", *Numer. Math.* 11 (1968) 293-306.
    .. [2] G. H. Golub and J. H. Welsch, "Calculation of Gauss quadrature
       rules", *Math. Comp.* 23 (1969) 221-230.

    Examples
    --------
    >>> import numpy as np
    >>> from lanqr import tridiag_eigen
    >>> w, z = tridiag_eigen([2.0, 2.0], [1.0])
    >>> w
    array([1., 3.])
    >>> np.abs(z) * np.sqrt(2)
    array([[1., 1.],
           [1., 1.]])
    >>> w, last = tridiag_eigen([2.0, 2.0], [1.0], rows=[-1])
    >>> last.shape
    (1, 2)
    """
    return _solve_eigen(d, e, rows)
