"""Slow, obvious reference for the tridiagonal kernel: Sturm-sequence bisection.

A method independent of QR iteration: the number of eigenvalues of T below
sigma equals the number of negative pivots q_i of the LDL^T factorisation of
T - sigma I (Sylvester's law of inertia; reference-values.md §12),

    q_1 = d_1 - sigma,   q_i = d_i - sigma - e_{i-1}^2 / q_{i-1}.

Bisection on that count brackets every eigenvalue to a chosen absolute width.
Pure Python on purpose: small n only.
"""
import math


def sturm_count(d, e, sigma):
    """Number of eigenvalues of the tridiagonal (d, e) strictly below sigma."""
    count = 0
    q = 1.0
    scale = max([abs(x) for x in d] + [abs(x) for x in e] + [1e-300])
    pivmin = 1e-300 * scale
    for i in range(len(d)):
        coupling = e[i - 1] ** 2 / q if i > 0 else 0.0
        q = d[i] - sigma - coupling
        if abs(q) < pivmin:
            # A zero pivot: perturb it, as every Sturm-count code does
            # (common practice); it moves sigma by a negligible amount.
            q = -pivmin
        if q < 0.0:
            count += 1
    return count


def bisection_eigenvalues(d, e, abs_tol=None):
    """All eigenvalues, ascending, each bracketed to width ``abs_tol``.

    Default width: 4 eps times the Gershgorin bound of ||T||.
    """
    d = [float(x) for x in d]
    e = [float(x) for x in e]
    n = len(d)
    if n == 0:
        return []
    radius = [abs(e[i - 1]) if i > 0 else 0.0 for i in range(n)]
    for i in range(n - 1):
        radius[i] += abs(e[i])
    lo = min(d[i] - radius[i] for i in range(n))
    hi = max(d[i] + radius[i] for i in range(n))
    norm = max(abs(lo), abs(hi), 1e-300)
    if abs_tol is None:
        abs_tol = 4.0 * 2.0 ** -52 * norm
    lo -= abs_tol
    hi += abs_tol
    values = []
    for k in range(n):
        # Smallest sigma with more than k eigenvalues below it.
        a, b = lo, hi
        while b - a > abs_tol:
            mid = 0.5 * (a + b)
            if mid <= a or mid >= b:
                break
            if sturm_count(d, e, mid) > k:
                b = mid
            else:
                a = mid
        values.append(0.5 * (a + b))
    return values


def dense(d, e):
    """The tridiagonal matrix as a list of rows (for residual checks by hand)."""
    n = len(d)
    rows = [[0.0] * n for _ in range(n)]
    for i in range(n):
        rows[i][i] = float(d[i])
        if i + 1 < n:
            rows[i][i + 1] = rows[i + 1][i] = float(e[i])
    return rows


def _selfcheck():  # pragma: no cover - manual use
    vals = bisection_eigenvalues([2.0, 2.0, 2.0], [-1.0, -1.0])
    expect = [2.0 - math.sqrt(2.0), 2.0, 2.0 + math.sqrt(2.0)]
    return max(abs(a - b) for a, b in zip(vals, expect))
