"""The one place where inner products and norms are taken.

Every inner product, norm and projection of the Lanczos process and the
restart controller goes through a :class:`VectorSpace`.  The Euclidean space
is the default; an SPD mass matrix ``M`` gives the M-inner product
``<x, y> = x^T M y`` through the same methods, and a distributed backend (rows
split across processes, the small reductions done by an all-reduce) can
replace the object without touching the solver.
"""
from __future__ import annotations

import numpy as np
from scipy.linalg.blas import dnrm2

__all__ = ["VectorSpace"]


class VectorSpace:
    """Real vectors of length ``n`` with the Euclidean or an M-inner product.

    Parameters
    ----------
    n : int
        Vector length.
    mass : callable or None
        ``mass(x)`` returns ``M @ x`` for an SPD matrix ``M`` (a vector or a
        block of columns).  ``None`` means the Euclidean inner product.

    Notes
    -----
    Norms are computed without overflow or underflow for any representable
    vector (BLAS ``dnrm2`` scales internally), so a problem multiplied by 1e-150
    or 1e150 behaves like the unscaled one.  Blocks of vectors are Fortran-order
    arrays of columns, so ``V^T w`` and ``V h`` are single BLAS-2 calls.
    """

    def __init__(self, n, mass=None):
        self.n = int(n)
        self.mass = mass

    def _m(self, x):
        return x if self.mass is None else np.asarray(self.mass(x), dtype=np.float64)

    def dot(self, x, y):
        """The inner product ``<x, y>``."""
        return float(x @ self._m(y))

    def norm(self, x):
        """The norm ``sqrt(<x, x>)``, safe against overflow and underflow."""
        if self.mass is None:
            return float(dnrm2(x))
        s = float(np.max(np.abs(x))) if x.size else 0.0
        if s == 0.0:
            return 0.0
        xs = x / s
        return s * float(np.sqrt(max(xs @ self._m(xs), 0.0)))

    def coefficients(self, V, w):
        """The coefficients ``<V_i, w>`` for every column of ``V`` (``V^T M w``)."""
        return V.T @ self._m(w)

    def gram(self, V, W):
        """The matrix of inner products ``V^T M W``."""
        return V.T @ self._m(W)

    def column_norms(self, X):
        """Norms of the columns of ``X`` (each safe against overflow/underflow)."""
        if self.mass is None:
            return np.array([dnrm2(X[:, i]) for i in range(X.shape[1])])
        return np.array([self.norm(X[:, i]) for i in range(X.shape[1])])
