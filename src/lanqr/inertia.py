"""Eigenvalue counts from Sylvester's law of inertia.

If ``P (A - x M) P^T = L D L^T`` with ``L`` unit lower triangular, the number of
negative entries of ``D`` (2x2 blocks counted by the signs of their
eigenvalues) equals the number of eigenvalues of the pencil ``(A, M)`` below
``x`` (``M`` symmetric positive definite).  This is the certificate that the
lowest modes a solver returns are really the lowest ones.

The count is only as good as the factorization:

* SciPy's sparse LU (SuperLU) is trustworthy for inertia only when it
  factors with a *symmetric* permutation and *diagonal* pivots.  With its
  default options (COLAMD column order, partial pivoting by rows) the row and
  column orders differ and the signs on the diagonal of ``U`` say nothing
  about the inertia (``bench/bench_inertia_options.py`` measures how often the
  count comes out wrong).  Here SuperLU runs in symmetric mode with a zero
  pivot threshold, and the result is accepted only if the row permutation
  equals the column permutation.
* Without off-diagonal pivoting an indefinite matrix can produce element
  growth; a solve with a random right-hand side measures the backward error
  of the factorization, and a pivot that is not clearly above that error
  level has no trustworthy sign.

When the count cannot be certified, :class:`InertiaError` says so and names
the point; callers may move the point slightly and try again.
"""
from __future__ import annotations

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla

__all__ = ["count_below", "sturm_count", "InertiaError"]

_EPS = np.finfo(np.float64).eps

# Up to this order a sparse matrix whose symmetric-mode LU needs off-diagonal
# pivots (an exactly zero leading minor, e.g. tridiag(-1, 1, -1)) is counted
# with the dense Bunch-Kaufman factorization instead: about a second at 2000.
DENSE_FALLBACK_ORDER = 2000


class InertiaError(ValueError):
    """The inertia of ``A - x M`` could not be certified at ``point``.

    Attributes
    ----------
    point : float
        The point at which the count was requested.
    reason : str
        Why the factorization cannot certify the count.
    """

    def __init__(self, point, reason):
        self.point = float(point)
        self.reason = str(reason)
        super().__init__(f"cannot certify the eigenvalue count below x = {self.point!r}: {self.reason}")


# ---------------------------------------------------------------------------
# Validation shared with transforms.py (same layer).
# ---------------------------------------------------------------------------

def _max_abs(A):
    if sp.issparse(A):
        return float(abs(A).max()) if A.nnz else 0.0
    return float(np.max(np.abs(A))) if A.size else 0.0


def check_symmetric_matrix(A, name="A", *, allow_operator=False):
    """Validate an explicit symmetric matrix; return it as float64 CSC or ndarray.

    Raises ValueError for a non-square, non-symmetric or non-finite matrix.  A
    ``scipy.sparse.linalg.LinearOperator`` is returned unchanged when
    ``allow_operator`` (only its shape is checked).
    """
    if isinstance(A, spla.LinearOperator):
        if not allow_operator:
            raise ValueError(f"{name} must be an explicit matrix (ndarray or scipy.sparse), "
                             f"got a LinearOperator")
        if A.shape[0] != A.shape[1]:
            raise ValueError(f"{name} must be square, got shape {A.shape}")
        return A
    if sp.issparse(A):
        if A.ndim != 2 or A.shape[0] != A.shape[1]:
            raise ValueError(f"{name} must be square, got shape {A.shape}")
        if np.iscomplexobj(A.data):
            raise ValueError(f"{name} must be real, got dtype {A.dtype}")
        A = sp.csc_matrix(A, dtype=np.float64)
        if not np.all(np.isfinite(A.data)):
            raise ValueError(f"{name} contains NaN or Inf entries")
        scale = _max_abs(A)
        asym = _max_abs(A - A.T)
    else:
        A = np.asarray(A)
        if A.ndim != 2 or A.shape[0] != A.shape[1]:
            raise ValueError(f"{name} must be a square 2-D matrix, got shape {A.shape}")
        if np.iscomplexobj(A):
            raise ValueError(f"{name} must be real, got dtype {A.dtype}")
        A = np.asarray(A, dtype=np.float64)
        if not np.all(np.isfinite(A)):
            raise ValueError(f"{name} contains NaN or Inf entries")
        scale = _max_abs(A)
        asym = _max_abs(A - A.T)
    # Assembled matrices may differ from their transpose in the last bits only.
    if asym > 1e-12 * scale:
        raise ValueError(f"{name} is not symmetric: max |{name} - {name}^T| = {asym:.3g} "
                         f"(max |{name}| = {scale:.3g})")
    return A


def check_mass_matrix(M, n, name="M"):
    """Validate a mass matrix: symmetric, order ``n``, positive diagonal.

    A positive diagonal is necessary (not sufficient) for positive
    definiteness; the full check would cost a factorization.
    """
    M = check_symmetric_matrix(M, name)
    if M.shape[0] != n:
        raise ValueError(f"{name} has order {M.shape[0]} but A has order {n}")
    diag = M.diagonal() if sp.issparse(M) else np.diag(M)
    if np.any(diag < 0.0):
        bad = int(np.flatnonzero(diag < 0.0)[0])
        raise ValueError(f"{name} must be positive (semi-)definite, but {name}[{bad}, {bad}] = {diag[bad]!r} < 0")
    return M


def check_point(x, name="x"):
    try:
        value = float(x)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a real number, got {x!r}") from None
    if not np.isfinite(value):
        raise ValueError(f"{name} must be finite, got {x!r}")
    return value


def shifted_matrix(A, x, M):
    """``A - x M`` (or ``A - x I``) in the storage kind of ``A`` (CSC or dense)."""
    if sp.issparse(A):
        n = A.shape[0]
        other = sp.identity(n, format="csc") if M is None else sp.csc_matrix(M)
        return sp.csc_matrix(A - x * other) if x != 0.0 else A.copy()
    other = np.eye(A.shape[0]) if M is None else (M.toarray() if sp.issparse(M) else M)
    return A - x * other


# ---------------------------------------------------------------------------
# Counts
# ---------------------------------------------------------------------------

def _sparse_negative_pivots(C, point, seed):
    n = C.shape[0]
    try:
        lu = spla.splu(C, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                       options=dict(SymmetricMode=True))
    except RuntimeError as exc:  # SuperLU: "Factor is exactly singular"
        raise InertiaError(point, f"A - x M is singular ({exc})") from None
    if not np.array_equal(lu.perm_r, lu.perm_c):
        moved = int(np.count_nonzero(lu.perm_r != lu.perm_c))
        raise InertiaError(point, f"the sparse LU chose {moved} off-diagonal pivots "
                                  f"(row and column permutations differ), so U has no inertia meaning")
    pivots = lu.U.diagonal()
    norm1 = float(spla.norm(C, 1))
    # A random solve measures the backward error of P C P^T = L U; pivots whose
    # magnitude is within reach of that error have no certain sign.
    rng = np.random.default_rng(seed)
    b = rng.standard_normal(n)
    y = lu.solve(b)
    if not np.all(np.isfinite(y)) or not np.all(np.isfinite(pivots)):
        raise InertiaError(point, "the factorization produced non-finite values (element growth)")
    backward = float(np.linalg.norm(C @ y - b, 1)) / (norm1 * float(np.linalg.norm(y, 1)) + float(np.linalg.norm(b, 1)))
    return pivots, norm1, backward


def _dense_negative_pivots(C, point):
    # Bunch-Kaufman LDL^T with 1x1 and 2x2 pivots: stable, so its D has the inertia of C.
    _, D, _ = scipy.linalg.ldl(C, lower=True)
    n = C.shape[0]
    values = np.empty(n)
    i = 0
    while i < n:
        if i + 1 < n and D[i + 1, i] != 0.0:
            values[i:i + 2] = np.linalg.eigvalsh(D[i:i + 2, i:i + 2])
            i += 2
        else:
            values[i] = D[i, i]
            i += 1
    norm1 = float(np.linalg.norm(C, 1)) if n else 0.0
    return values, norm1, _EPS


def count_below(A, x, *, M=None, seed=0):
    """Number of eigenvalues of ``A`` (or of the pencil ``(A, M)``) below ``x``.

    Parameters
    ----------
    A : ndarray or scipy.sparse matrix, shape (n, n)
        Symmetric matrix.
    x : float
        The point.  Eigenvalues strictly below ``x`` are counted.
    M : ndarray or scipy.sparse matrix, optional
        Symmetric positive definite mass matrix of the pencil ``A v = lambda M v``.
        A positive semi-definite ``M`` is allowed when ``A`` is positive
        definite on the null space of ``M`` (massless degrees of freedom):
        the infinite eigenvalues then never count as below ``x``.
    seed : int, optional
        Seed of the random right-hand side used to measure the backward error
        of a sparse factorization.

    Returns
    -------
    int
        The number of negative pivots of a symmetric factorization of
        ``A - x M``, which by Sylvester's law of inertia is the number of
        eigenvalues below ``x``.

    Raises
    ------
    ValueError
        For a non-square, non-symmetric or non-finite input, or a non-finite ``x``.
    InertiaError
        (a ValueError) when the factorization cannot certify the count: ``A - x M``
        singular or nearly so (``x`` at an eigenvalue, to working precision), the
        sparse LU left the diagonal to pivot, or a pivot's sign is lost in
        rounding.  Moving ``x`` slightly usually cures it.

    Notes
    -----
    Sparse input is factored by SuperLU (``scipy.sparse.linalg.splu``) with
    the options ``permc_spec='MMD_AT_PLUS_A'``, ``diag_pivot_thresh=0`` and
    ``SymmetricMode=True``; the count is accepted only if SuperLU's row and
    column permutations agree (then ``U = D L^T`` and the signs of its
    diagonal are the inertia).  Dense input uses the Bunch-Kaufman
    factorization ``scipy.linalg.ldl``.  For a symmetric tridiagonal matrix
    given by its diagonals, :func:`sturm_count` is cheaper.  A sparse matrix
    of order at most ``DENSE_FALLBACK_ORDER`` (2000) that the sparse
    factorization cannot certify is counted densely instead.

    A pivot counts as zero (no certain sign) when its magnitude is below
    ``max(10 sqrt(n) eps, 100 * backward error) * ||A - x M||_1``.

    References
    ----------
    J. J. Sylvester, "A demonstration of the theorem that every homogeneous
    quadratic polynomial is reducible by real orthogonal substitutions to the
    form of a sum of positive and negative squares", Philos. Mag. 4 (1852).
    B. N. Parlett, *The Symmetric Eigenvalue Problem*, SIAM 1998, ch. 3.

    Examples
    --------
    >>> import numpy as np
    >>> from lanqr import count_below
    >>> from lanqr.problems import laplacian_1d, laplacian_1d_values
    >>> A = laplacian_1d(100)
    >>> count_below(A, 1.0), int(np.sum(laplacian_1d_values(100) < 1.0))
    (33, 33)
    """
    point = check_point(x, "x")
    A = check_symmetric_matrix(A, "A")
    n = A.shape[0]
    if M is not None:
        M = check_mass_matrix(M, n)
        if sp.issparse(M) != sp.issparse(A):
            M = sp.csc_matrix(M) if sp.issparse(A) else M.toarray()
    if n == 0:
        return 0
    try:
        return _count_at(A, M, point, seed)
    except InertiaError as first:
        failure = first
    # A factorization with diagonal pivots can meet a tiny pivot although
    # A - x M is far from singular (a leading minor vanishes: on
    # tridiag(-1, 2, -1) at x = 1 every third one does).  Such points are
    # isolated, so count at x - d and x + d instead: equal counts mean no
    # eigenvalue lies in [x - d, x + d), hence the same count below x.
    scale = _spectral_scale(A, M)
    for relative in _BRACKET_STEPS:
        step = relative * max(scale, abs(point))
        try:
            below = _count_at(A, M, point - step, seed)
            above = _count_at(A, M, point + step, seed)
        except InertiaError:
            continue
        if below == above:
            return below
        raise InertiaError(point, f"{above - below} eigenvalue(s) lie within {step:.2e} of x, "
                                  f"so the count at x itself is not certain")
    raise failure


# Relative steps for the bracketing counts: far above rounding, far below any
# gap a count is asked to resolve; the odd factors avoid landing on another
# special point of a structured matrix.
_BRACKET_STEPS = (1.37e-9, 3.1e-7)


def _spectral_scale(A, M):
    """A cheap estimate of the spectral radius of the pencil: ||A||_1 / ||M||_1."""
    norm_a = float(spla.norm(A, 1)) if sp.issparse(A) else float(np.linalg.norm(A, 1))
    if M is None:
        return norm_a
    norm_m = float(spla.norm(M, 1)) if sp.issparse(M) else float(np.linalg.norm(M, 1))
    return norm_a / norm_m if norm_m > 0 else norm_a


def _count_at(A, M, point, seed):
    """The inertia count at one point, or InertiaError when it is not certain there."""
    n = A.shape[0]
    C = shifted_matrix(A, point, M)
    if sp.issparse(C):
        try:
            pivots, norm1, backward = _sparse_negative_pivots(sp.csc_matrix(C), point, seed)
        except InertiaError:
            if n > DENSE_FALLBACK_ORDER:
                raise
            pivots, norm1, backward = _dense_negative_pivots(C.toarray(), point)
    else:
        pivots, norm1, backward = _dense_negative_pivots(C, point)
    if norm1 == 0.0:
        raise InertiaError(point, "A - x M is the zero matrix")
    if backward > 1e-6:
        raise InertiaError(point, f"diagonal pivoting was unstable (backward error {backward:.1e})")
    # Rounding moves a pivot by about eps * (local norms) * growth; the random
    # solve's backward error bounds the growth from above.
    floor = max(10.0 * np.sqrt(n) * _EPS, 100.0 * backward) * norm1
    small = np.abs(pivots) <= floor
    if np.any(small):
        raise InertiaError(point, f"{int(np.count_nonzero(small))} pivot(s) of magnitude <= {floor:.2e} "
                                  f"(||A - x M||_1 = {norm1:.3g}): x is (nearly) an eigenvalue, or "
                                  f"a leading minor of A - x M (nearly) vanishes")
    return int(np.count_nonzero(pivots < 0.0))


def sturm_count(diagonal, offdiagonal, x):
    """Number of eigenvalues below ``x`` of a symmetric tridiagonal matrix (Sturm count).

    Parameters
    ----------
    diagonal : array_like, shape (n,)
    offdiagonal : array_like, shape (n-1,)
    x : float

    Returns
    -------
    int
        The number of negative ``q_i`` in ``q_1 = d_1 - x``,
        ``q_i = d_i - x - e_{i-1}^2 / q_{i-1}``.

    Notes
    -----
    A ``q_i`` that is exactly zero is replaced by ``-pivmin`` (a tiny
    negative number), as in LAPACK's bisection code; the count is then the
    one at ``x`` plus a tiny amount, so an eigenvalue exactly at ``x`` may be
    counted.  The recurrence is backward stable (Kahan), so the count is the
    exact one for a matrix within a few ulps of the input.

    References
    ----------
    W. Kahan, "Accurate eigenvalues of a symmetric tri-diagonal matrix",
    Stanford tech. report CS41 (1966).

    Examples
    --------
    >>> from lanqr.inertia import sturm_count
    >>> sturm_count([2.0, 2.0, 2.0], [-1.0, -1.0], 2.5)   # eigenvalues 2 - sqrt 2, 2, 2 + sqrt 2
    2
    """
    d = np.asarray(diagonal, dtype=np.float64)
    e = np.asarray(offdiagonal, dtype=np.float64)
    if d.ndim != 1 or e.ndim != 1 or len(e) != max(len(d) - 1, 0):
        raise ValueError(f"need a diagonal of length n and an off-diagonal of length n-1, "
                         f"got {d.shape} and {e.shape}")
    if not (np.all(np.isfinite(d)) and np.all(np.isfinite(e))):
        raise ValueError("the tridiagonal matrix contains NaN or Inf entries")
    point = check_point(x, "x")
    if len(d) == 0:
        return 0
    e2 = (e * e).tolist()
    scale = max(float(np.max(np.abs(d))), float(np.max(np.abs(e))) if len(e) else 0.0, 1e-300)
    pivmin = np.finfo(np.float64).tiny * max(1.0, max(e2) if e2 else 1.0) / max(scale, 1.0)
    pivmin = max(pivmin, np.finfo(np.float64).tiny)
    count = 0
    q = d[0] - point
    dl = d.tolist()
    if q == 0.0:
        q = -pivmin
    if q < 0.0:
        count += 1
    for i in range(1, len(dl)):
        q = dl[i] - point - e2[i - 1] / q
        if q == 0.0:
            q = -pivmin
        if q < 0.0:
            count += 1
    return count
