"""Chebyshev polynomial filters: Lanczos on p(A) for extreme eigenvalues in a tight cluster.

When the wanted eigenvalues sit in a cluster that is tiny next to the width
of the spectrum (the lowest modes of a fine grid, a graph's Fiedler values),
restarted Lanczos needs thousands of steps, and on a large problem every
step's basis work (Gram-Schmidt against tens of vectors, the restart
rotation) costs several operator products.  Running Lanczos on ``B = p(A)``
instead, where ``p`` is a Chebyshev polynomial of degree ``d`` that stays in
``[-1, 1]`` on the unwanted part of the spectrum and grows fast beyond it,
does the same job in a few dozen outer steps of ``d`` products each: the
basis work is spread over ``d`` products, and the filtered spectrum has the
wanted eigenvalues well apart from the rest.  ``p`` is applied by the
three-term Chebyshev recurrence, one fused pass per product for CSR input
(:meth:`lanqr.vecops.CsrProduct.chebyshev_step`).

The eigenvectors of ``B`` are those of ``A``, and ``p`` is monotone on the
wanted side of the damped interval, so the ``k`` largest eigenvalues of ``B``
belong to the ``k`` wanted eigenvalues of ``A`` as long as the damped
interval ``[lower, upper]`` contains every unwanted one.  The solver takes
the far end from a Gershgorin bound (a guaranteed bound on the spectrum) and
the near end, the cut, from Ritz values of ``A`` (upper bounds of the
eigenvalues they approximate), so the cut lies above the ``k``-th wanted
eigenvalue.

Residuals translate as follows (``mu`` a Ritz value of ``B`` above 1,
``lam = p^{-1}(mu)`` on the wanted branch): a component along an unwanted
eigenvector contributes ``|p_j - mu| >= mu - 1`` to the residual in ``B``
and at most ``width`` in ``A``; one on the wanted side contributes in the
ratio ``1 / |p'| <= (upper - lower) / (2 d^2)`` (``T_d'(x) >= d^2`` for
``|x| >= 1``).  Hence ``||A y - lam y|| <= kappa ||B y - mu y||`` with
``kappa = max(width / (mu - 1), (upper - lower) / (2 d^2))``, and the solver
locks a pair in ``B`` at its threshold in ``A`` divided by ``kappa``.

References
----------
Y. Saad, *Numerical Methods for Large Eigenvalue Problems*, 2nd ed., SIAM
2011, ch. 8 (Chebyshev acceleration and polynomial filtering).
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp

__all__ = ["ChebyshevFilter", "gershgorin_bounds", "filter_degree"]

# Largest log of the filter's value on the spectrum: T_d(x) ~ exp(d arccosh|x|)
# / 2, and the Lanczos vectors must not overflow on the way (1e300 ~ e^690).
_MAX_LOG_GROWTH = 300.0


def gershgorin_bounds(A):
    """Lower and upper bounds on the eigenvalues of a symmetric matrix (Gershgorin discs).

    Parameters
    ----------
    A : ndarray or scipy.sparse matrix, square, real

    Returns
    -------
    (float, float)
        ``min_i (a_ii - r_i)`` and ``max_i (a_ii + r_i)`` with ``r_i`` the
        sum of the ``|a_ij|``, ``j != i``: every eigenvalue lies between them.
    """
    if sp.issparse(A):
        A = sp.csr_matrix(A)
        diag = A.diagonal()
        radius = np.asarray(abs(A).sum(axis=1)).ravel() - np.abs(diag)
    else:
        A = np.asarray(A, dtype=np.float64)
        diag = np.diag(A).copy()
        radius = np.abs(A).sum(axis=1) - np.abs(diag)
    radius = np.maximum(radius, 0.0)
    return float(np.min(diag - radius)), float(np.max(diag + radius))


def filter_degree(basis, nnz_per_row, *, share=1.5, low=8, high=200):
    """Degree that spreads one outer step's basis work over enough products.

    An outer Lanczos step streams about ``2 basis`` vectors (Gram-Schmidt
    against the basis, twice when DGKS asks); one CSR product streams about
    ``1.5 nnz_per_row + 2`` vectors' worth of memory (values, 4-byte indices,
    the input and output).  The degree makes the products ``share`` times the
    basis work.  A higher degree cuts the outer steps but not in proportion:
    on the 2-D Laplacian 150x150 (lowest 10) degrees 8, 11, 16, 32 and 64
    took 2446, 2499, 2702, 3549 and 3868 products and 0.68, 0.40, 0.48,
    0.41 and 0.45 s, so the default ``share`` of 1.5 sits where the time
    levels off before the products grow.
    """
    product = 1.5 * float(nnz_per_row) + 2.0
    d = int(np.ceil(share * 2.0 * basis / product))
    return int(min(max(d, low), high))


class ChebyshevFilter:
    """``B = s T_d((2A - lower - upper) / (upper - lower))``, applied by recurrence.

    Parameters
    ----------
    apply : callable
        ``apply(x)`` returns ``A x`` (counted by its owner).
    lower, upper : float
        The damped interval; ``|p| <= 1`` on it.
    degree : int
        Polynomial degree ``d >= 1``.
    side : {"lowest", "highest"}
        The wanted side: below ``lower`` or above ``upper``.  The sign ``s``
        makes ``p`` positive and increasing away from the interval there.
    spectrum : (float, float)
        Bounds on the whole spectrum of ``A`` (Gershgorin), for the residual
        translation and the overflow guard.
    chebyshev_step : callable or None
        ``chebyshev_step(x, y, sigma, shift, tau)`` computing ``y <- sigma (A
        x - shift x) - tau y`` in place (one fused pass); by default built
        from ``apply``.

    Raises
    ------
    ValueError
        ``lower >= upper``, a degree below 1, or a degree whose values on the
        spectrum would overflow.
    """

    def __init__(self, apply, lower, upper, degree, side, spectrum, chebyshev_step=None):
        if not (np.isfinite(lower) and np.isfinite(upper) and lower < upper):
            raise ValueError(f"the damped interval needs lower < upper, got [{lower}, {upper}]")
        if degree < 1:
            raise ValueError(f"degree must be at least 1, got {degree}")
        if side not in ("lowest", "highest"):
            raise ValueError(f"side must be 'lowest' or 'highest', got {side!r}")
        self.lower, self.upper = float(lower), float(upper)
        self.degree = int(degree)
        self.side = side
        self.spectrum = (float(spectrum[0]), float(spectrum[1]))
        self.center = 0.5 * (self.lower + self.upper)
        self.half_width = 0.5 * (self.upper - self.lower)
        top = self.max_degree(self.lower, self.upper, side, self.spectrum)
        if self.degree > top:
            raise ValueError(f"degree {degree} would overflow on the spectrum (at most {top}: "
                             f"log growth above {_MAX_LOG_GROWTH:.0f})")
        self.sign = (-1.0) ** self.degree if side == "lowest" else 1.0
        self._apply = apply
        self._step = chebyshev_step

    @staticmethod
    def max_degree(lower, upper, side, spectrum):
        """The largest degree whose values on ``spectrum`` stay below overflow.

        ``T_d`` grows like ``exp(d arccosh|x|)`` at the far end of the
        spectrum on the wanted side; that exponent stays below 300.
        """
        center, half = 0.5 * (lower + upper), 0.5 * (upper - lower)
        far = spectrum[0] if side == "lowest" else spectrum[1]
        x = abs((far - center) / half)
        if x <= 1.0:
            return 10**6
        return int(_MAX_LOG_GROWTH / np.arccosh(x))

    def _x(self, lam):
        return (np.asarray(lam, dtype=np.float64) - self.center) / self.half_width

    def value(self, lam):
        """``p(lam)`` for eigenvalues of ``A`` (array or scalar)."""
        x = self._x(lam)
        ax = np.abs(x)
        inside = np.cos(self.degree * np.arccos(np.clip(x, -1.0, 1.0)))
        outside = np.sign(x) ** self.degree * np.cosh(
            self.degree * np.arccosh(np.maximum(ax, 1.0)))
        return self.sign * np.where(ax <= 1.0, inside, outside)

    def eigenvalue(self, mu):
        """The eigenvalue of ``A`` on the wanted side with ``p(lam) = mu``; NaN for ``mu <= 1``."""
        mu = np.asarray(mu, dtype=np.float64)
        t = np.cosh(np.arccosh(np.maximum(mu, 1.0)) / self.degree)
        lam = self.center - self.half_width * t if self.side == "lowest" else \
            self.center + self.half_width * t
        return np.where(mu > 1.0, lam, np.nan)

    def residual_factor(self, mu):
        """``kappa(mu)``: ``||A y - lam y|| <= kappa ||B y - mu y||`` (module notes); inf for ``mu <= 1``."""
        mu = np.asarray(mu, dtype=np.float64)
        width = self.spectrum[1] - self.spectrum[0]
        near = (self.upper - self.lower) / (2.0 * self.degree ** 2)
        with np.errstate(divide="ignore", invalid="ignore"):
            far = np.where(mu > 1.0, width / (mu - 1.0), np.inf)
        return np.maximum(far, near)

    def apply(self, x):
        """``B x`` (``degree`` applications of ``A``)."""
        x = np.asarray(x, dtype=np.float64)
        sigma1 = 1.0 / self.half_width
        sigma = 2.0 / self.half_width
        if self._step is not None:
            prev = x.copy()
            cur = np.empty_like(x)
            self._step(x, cur, sigma1, self.center, 0.0)
            for _ in range(self.degree - 1):
                # prev <- 2 t(A) cur - prev, in place, then swap roles.
                self._step(cur, prev, sigma, self.center, 1.0)
                prev, cur = cur, prev
        else:
            prev = x
            cur = (self._apply(x) - self.center * x) * sigma1
            for _ in range(self.degree - 1):
                nxt = (self._apply(cur) - self.center * cur) * sigma - prev
                prev, cur = cur, nxt
        if self.sign < 0:
            np.negative(cur, out=cur)
        return cur

    def __repr__(self):
        return (f"ChebyshevFilter(degree={self.degree}, damped=[{self.lower:.6g}, "
                f"{self.upper:.6g}], side={self.side!r})")
