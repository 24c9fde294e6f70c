"""Continue a Lanczos run on a Chebyshev filter p(A) (see :mod:`lanqr.polyfilter`).

Sits between the public functions and the restart controller: :mod:`lanqr.api`
runs plain thick-restart Lanczos with a product budget; when the wanted pairs
have not converged by then, :func:`continue_filtered` places a filter from
the Gershgorin bounds and the Ritz values found so far and runs the same
controller on p(A), with the locked pairs carried over, thresholds translated
from A, and the final Rayleigh-Ritz step in A.
"""
from __future__ import annotations

import numpy as np

from lanqr.polyfilter import ChebyshevFilter, filter_degree, gershgorin_bounds
from lanqr.restart import FLOOR_FACTOR, LOCK_FLOOR_SHARE, LOCK_SHARE, thick_restart_lanczos

__all__ = ["continue_filtered", "FILTER_SHARE", "FILTER_SHARE_LARGE",
           "FILTER_LARGE_BASIS_BYTES", "MIN_AMPLIFICATION"]

_EPS = np.finfo(np.float64).eps

# Degree shares (lanqr.polyfilter.filter_degree): products per outer step
# relative to the basis work, for a basis that fits the caches and for one
# that does not (beyond FILTER_LARGE_BASIS_BYTES).
FILTER_SHARE = 1.5
FILTER_SHARE_LARGE = 4.0
FILTER_LARGE_BASIS_BYTES = 64 * 2**20
# The filter's value at the last wanted Ritz value is kept at least this
# (cut placement in continue_filtered).
MIN_AMPLIFICATION = 2.0



def continue_filtered(op, space, first, k, selector, *, tol, basis, max_restarts, rng,
                      callback=None):
    """Continue a plain Lanczos run that gave up on its product budget with Lanczos on p(A).

    Parameters
    ----------
    op : lanqr.operators.SymmetricOperator
        An explicit matrix (``op.matrix`` dense or sparse): its Gershgorin
        bounds place the filter.
    space : VectorSpace
        The Euclidean space of ``op``.
    first : dict
        The hand-over of :func:`lanqr.restart.thick_restart_lanczos` with a
        ``product_budget``: locked pairs, the active Ritz values in wanted
        order and ``active_start``.
    k, selector, tol, basis, max_restarts, rng, callback
        As for the plain run (``max_restarts`` counts the plain run's too).

    Returns
    -------
    dict or None
        The controller's result in terms of ``A`` (values, vectors, products,
        history with operator applications of ``A``) plus
        ``polynomial_filter`` (degree, damped interval, spectrum bounds,
        products before the switch); None when no usable filter exists (the
        cut reached the spectrum bound, or overflow leaves degree < 2).
    """
    n = op.n
    spectrum = gershgorin_bounds(op.matrix)
    X, x_vals = first["locked_vectors"], first["locked_values"]
    y_vals = first["active_values"]
    need = k - X.shape[1]
    nnz_per_row = op.matrix.nnz / n if hasattr(op.matrix, "nnz") else n
    # A basis beyond the caches makes every outer step stream it from memory:
    # spread it over more products there (2-D Laplacian 1000x1000, lowest 6,
    # basis 34 of 8 MB vectors: degree 11 gave an overhead ratio of 1.51,
    # see FILTER_SHARE_LARGE).
    large = (basis + 1) * n * 8 > FILTER_LARGE_BASIS_BYTES
    degree = filter_degree(basis, nnz_per_row,
                           share=FILTER_SHARE_LARGE if large else FILTER_SHARE)
    # The cut: the Ritz value just beyond the wanted ones.  A Ritz value bounds
    # the eigenvalue of its rank from the unwanted side, so every wanted
    # eigenvalue lies on the amplified side.  A cut further out amplifies the
    # wanted ones less against their neighbours: the 10th, 15th and 20th
    # Ritz values took 2702, 3054 and 3454 products on the 2-D Laplacian
    # 150x150 (lowest 10, after 4 cycles).  But when the next eigenvalue
    # equals the last wanted one (a repeated eigenvalue at the cut, the
    # zero of a graph with many components) that Ritz value is no cut at
    # all, so the cut is moved out until the filter lifts the last wanted
    # Ritz value to at least MIN_AMPLIFICATION (any point beyond an upper
    # bound of the wanted eigenvalues is a valid cut).  The locked values
    # count too: a plain run that has not seen every copy of a repeated
    # eigenvalue locks values beyond the true k-th one (the 2-D Laplacian
    # 43x43, lowest 11: locked up to 0.127 while copies at 0.051 and 0.066
    # were still to come).  The k values of the locked pairs and the best
    # active Ritz pairs are Rayleigh quotients of k orthonormal vectors, so
    # their extreme bounds the k-th wanted eigenvalue, and the cut goes
    # beyond it.
    pool = np.concatenate([x_vals, y_vals[:max(need, 1)]])
    cut = float(y_vals[min(need + 1, len(y_vals)) - 1])
    u = np.cosh(np.arccosh(MIN_AMPLIFICATION) / degree) - 1.0
    if selector == "lowest":
        last = float(np.max(pool))
        cut = max(cut, (last + 0.5 * u * spectrum[1]) / (1.0 + 0.5 * u))
        lower, upper = cut, spectrum[1]
    else:
        last = float(np.min(pool))
        cut = min(cut, (last + 0.5 * u * spectrum[0]) / (1.0 + 0.5 * u))
        lower, upper = spectrum[0], cut
    if not lower < upper:
        return None
    degree = min(degree, ChebyshevFilter.max_degree(lower, upper, selector, spectrum))
    if degree < 2:
        return None
    filt = ChebyshevFilter(op.apply, lower, upper, degree, selector, spectrum,
                           chebyshev_step=op.fused_chebyshev_step())
    anorm = max(abs(spectrum[0]), abs(spectrum[1]))

    def pair_threshold(mu, anorm_filtered):
        # The threshold in A (as in the plain run) divided by the residual
        # factor kappa(mu); pairs the filter does not amplify never lock.
        lam = filt.eigenvalue(mu)
        with np.errstate(invalid="ignore"):
            in_a = LOCK_SHARE * np.maximum(tol * np.abs(lam), FLOOR_FACTOR * _EPS * anorm)
            thr = in_a / filt.residual_factor(mu)
        floor = LOCK_FLOOR_SHARE * FLOOR_FACTOR * _EPS * anorm_filtered
        return np.where(np.isfinite(thr), np.maximum(thr, floor), 0.0)

    def report(mu, est):
        # Pairs the filter does not amplify have no value in A (NaN) and an
        # unbounded residual factor.
        with np.errstate(invalid="ignore", over="ignore"):
            return filt.eigenvalue(mu), est * filt.residual_factor(mu)

    # Products so far, and each application of the filter counts ``degree``.
    switched = first["history"][-1]["matvecs"] if first["history"] else 0

    def in_products(count):
        return switched + degree * count

    wrapped = None
    if callback is not None:
        def wrapped(state):
            callback(dict(state, matvecs=in_products(state["matvecs"])))

    # Start from the wanted Ritz vectors the plain run was converging: the
    # filter amplifies exactly their directions.
    start = first["active_start"]
    out = thick_restart_lanczos(filt.apply, space, n, k, "highest", tol=tol, basis=basis,
                                max_restarts=max(max_restarts - first["restarts"], 0), rng=rng,
                                start=start, callback=wrapped, reorthogonalization="full",
                                initial_locked=(X, filt.value(x_vals)),
                                pair_threshold=pair_threshold,
                                final_apply_block=op.apply_block, final_selector=selector,
                                report=report)
    for entry in out["history"]:
        entry["matvecs"] = in_products(entry["matvecs"])
        entry["filtered"] = True
    out["restarts"] += first["restarts"]
    out["history"] = first["history"] + out["history"]
    out["norm_estimate"] = max(first["norm_estimate"], float(np.max(np.abs(out["values"]))))
    out["polynomial_filter"] = {"degree": degree, "damped": (lower, upper),
                                "spectrum_bounds": spectrum,
                                "switched_after": switched}
    return out
