"""Options shared by the public solver functions: validation, defaults, the warning class.

Both :mod:`lanqr.api` and :mod:`lanqr.spectral` build on this module, so neither
has to import the other's internals.
"""
from __future__ import annotations

import contextlib
import numbers

import numpy as np

__all__ = ["NotConvergedWarning", "default_basis", "validate_options", "resolve_sizes",
           "single_threaded_blas"]

#: Restart bound when the caller gives none.
DEFAULT_MAX_RESTARTS = 1000


class NotConvergedWarning(RuntimeWarning):
    """Some requested eigenpairs did not reach the tolerance; the result says which."""


def default_basis(k):
    """The default largest basis size for ``k`` wanted pairs (chosen by measurement).

    On the 2-D Laplacian 300x300 (lowest 10, tol 1e-8) a basis of 30, 40 and
    60 took 11717, 6062 and 4385 operator applications; on the 3-D Laplacian
    50^3 1559, 1377 and 1304; on the Heisenberg ring of 20 sites (lowest 4)
    the size made no difference (130 +- 3).  Clustered spectra gain from a
    larger basis; the memory is ``basis`` vectors of length n.
    """
    return max(4 * k + 10, 30)


def validate_options(k, tol, basis, max_restarts, start):
    if isinstance(k, bool) or not isinstance(k, numbers.Integral):
        raise ValueError(f"k must be an integer, got {k!r}")
    if not isinstance(tol, numbers.Real) or not np.isfinite(tol) or not (0.0 < tol < 1.0):
        raise ValueError(f"tol must be a number in (0, 1), got {tol!r}")
    if basis is not None and (isinstance(basis, bool) or not isinstance(basis, numbers.Integral)):
        raise ValueError(f"basis must be an integer, got {basis!r}")
    if max_restarts is not None and (isinstance(max_restarts, bool)
                                     or not isinstance(max_restarts, numbers.Integral)
                                     or max_restarts < 0):
        raise ValueError(f"max_restarts must be a non-negative integer, got {max_restarts!r}")
    if start is not None:
        start = np.asarray(start)
        if np.iscomplexobj(start):
            raise ValueError("start must be a real vector")
        start = start.astype(np.float64).ravel()
        if not np.all(np.isfinite(start)):
            raise ValueError("start contains NaN or Inf")
        if not np.any(start):
            raise ValueError("start must not be the zero vector")
    return start


def single_threaded_blas():
    """Limit BLAS to one thread while the Lanczos iteration runs.

    The iteration's BLAS work is small (dgemv on a basis of tens of columns,
    projected problems of order tens): measured on a loaded 2-core machine a
    Gram-Schmidt pass of 1e5 x 20 took 48 ms with two OpenBLAS threads and
    1.3 ms with one (bench/bench_products.py).  threadpoolctl is a dependency
    but imported guardedly (without it nothing is limited); it changes the
    process's BLAS setting for the duration of the iteration and restores it
    afterwards.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def resolve_sizes(k, n, basis, max_restarts, *, min_active=1):
    """Check ``k`` against the order ``n`` and fill in the basis size and restart bound.

    ``min_active`` is the fewest active Lanczos vectors the caller needs beside
    ``k`` locked pairs.  Returns ``(basis, max_restarts)``.
    """
    if not (1 <= k < n):
        raise ValueError(f"k must satisfy 1 <= k < n = {n}, got k = {k}")
    basis = default_basis(k) if basis is None else int(basis)
    if basis < k + min_active:
        if min_active == 1:
            raise ValueError(f"basis must exceed k = {k}, got basis = {basis}")
        raise ValueError(f"basis must be at least k + {min_active} = {k + min_active} "
                         f"(room for an active Lanczos basis beside the k locked pairs), "
                         f"got basis = {basis}")
    if max_restarts is None:
        max_restarts = DEFAULT_MAX_RESTARTS
    return basis, max_restarts
