"""Python boundary of the tridiagonal kernel (temporary SciPy-backed version).

The compiled implicit-shift QR kernel replaces the body of these functions;
the signatures and behaviour documented here are the contract.
"""
import numpy as np
import scipy.linalg


class TridiagonalConvergenceError(ArithmeticError):
    """The implicit QR iteration hit its iteration limit."""


def _check(d, e):
    d = np.asarray(d, dtype=np.float64)
    e = np.asarray(e, dtype=np.float64)
    if d.ndim != 1 or e.ndim != 1:
        raise ValueError("d and e must be 1-D")
    if len(e) != max(len(d) - 1, 0):
        raise ValueError("e must have length len(d) - 1")
    return d, e


def tridiag_values(d, e):
    d, e = _check(d, e)
    if len(d) == 0:
        return np.empty(0)
    return scipy.linalg.eigh_tridiagonal(d, e, eigvals_only=True)


def tridiag_eigen(d, e, rows=None):
    d, e = _check(d, e)
    n = len(d)
    if n == 0:
        return np.empty(0), np.empty((0 if rows is None else len(rows), 0))
    w, z = scipy.linalg.eigh_tridiagonal(d, e)
    if rows is None:
        return w, np.asfortranarray(z)
    return w, z[np.asarray(rows, dtype=np.intp), :]
