"""Restart controller: Ritz extraction, convergence tests, locking, thick restart.

The controller works on any symmetric operator given as an apply function, a
:class:`~lanqr.vectorspace.VectorSpace` and an order ``n``.  It knows nothing
about standard versus generalized problems: a mass matrix enters only through
the vector space.  The wanted Ritz values are chosen by a selector:
``"lowest"`` or ``"highest"`` algebraic, or ``"magnitude"`` (largest |theta|,
for shift-invert).

Method
------
* The active Lanczos basis is extended by :func:`lanqr.lanczos.extend_basis`.
  After every step the projected tridiagonal matrix is solved by
  :func:`lanqr.tridiagonal.tridiag_eigen` with ``rows=[-1]``: the residual
  estimate of a Ritz pair is ``|beta_j s_{j,i}|`` from the last row of its
  eigenvector, so an easy problem stops as soon as it is solved.
* Thick restart (Wu and Simon): converged wanted pairs are locked (moved to
  the deflated block at the front of the basis); the next unconverged Ritz
  vectors are kept, with the last Lanczos vector as the continuation.  The
  kept block has an arrow-shaped projected matrix ``[diag(theta), s; s^T]``;
  an orthogonal (Householder) reduction that fixes the continuation vector
  brings it back to tridiagonal form, so the one tridiagonal kernel solves
  every projected problem.
* Repeated eigenvalues: a Krylov space from one start vector holds only one
  direction of each eigenspace, so copies of a repeated eigenvalue are found
  only through rounding.  After the wanted pairs converge, a verification
  round starts from a fresh random vector orthogonal to the locked pairs and
  runs until its extreme Ritz value is certified beyond the worst wanted
  eigenvalue, or a new copy converges (it is locked and the round goes on).

References
----------
K. Wu and H. Simon, "Thick-restart Lanczos method for large symmetric
eigenvalue problems", SIAM J. Matrix Anal. Appl. 22 (2000) 602-616.
B. N. Parlett, The Symmetric Eigenvalue Problem, SIAM 1998 (residual bounds).
"""
from __future__ import annotations


import numpy as np
import scipy.linalg

from lanqr.lanczos import (REORTHOGONALIZATION, PartialOrthogonality, extend_basis,
                           random_orthogonal_direction, reorthogonalize)
from lanqr.tridiagonal import tridiag_eigen
from lanqr.vecops import rotate_basis

__all__ = ["SELECTORS", "FLOOR_FACTOR", "thick_restart_lanczos", "wanted_key"]

SELECTORS = ("lowest", "highest", "magnitude")

_EPS = np.finfo(np.float64).eps

# The residual of a computed pair cannot fall much below the rounding level of
# one product, about eps * ||A|| times a modest factor (row lengths and the
# basis size enter through sums of tens to hundreds of terms).  A pair is
# converged when ||A x - theta x|| <= max(tol |theta|, FLOOR_FACTOR eps ||A||).
# With 100, eigenvalues at zero (graph Laplacians with several components,
# tests/test_solver.py) reach the floor and come back accurate to ~1e-14 ||A||;
# a smaller factor would ask for residuals below what one product can deliver.
FLOOR_FACTOR = 100.0
# Pairs whose threshold is the floor (eigenvalues at or near zero) are locked
# only when their estimate is below LOCK_FLOOR_SHARE of it.  The final
# Rayleigh-Ritz step rotates the locked vectors of a cluster (many zero
# eigenvalues of a graph with many components) into each other, and a
# rotated vector's residual is a combination of theirs: locked just under
# the floor, a third to a half of such pairs measured an explicit residual
# just over it (1.0x-1.01x) and came back flagged unconverged although the
# set was right (random geometric graphs of 1000-3000 nodes with 3-200
# components, tests/test_solver_verification.py).  A unit combination of
# residuals each below s * floor has norm below s * sqrt(count) * floor, so
# 0.1 leaves room for clusters of up to 100 copies.  Pairs away from zero
# (tol |theta| above the floor) are unaffected.
LOCK_FLOOR_SHARE = 0.1
# The same effect away from zero, smaller clusters: on the 3-D Laplacian 50^3
# (lowest 10, triple eigenvalues) one pair of a triple locked just under
# tol |theta| measured 1.007 tol after the final Rayleigh-Ritz rotation and
# came back flagged.  Locking at half the tolerance brought every explicit
# residual to <= 0.49 tol on the 2-D/3-D Laplacians and Heisenberg rings, at
# +1% products on the rings and small grids (107 -> 109, 95 -> 96, 135 -> 136,
# 1296 -> 1309, 1328 -> 1341; 0.3 cost +2-3%), +11% on the 2-D Laplacian
# 300x300 (4975 -> 5501, still 0.23x eigsh's).  The explicit check in
# lanqr.api still uses tol itself.
LOCK_SHARE = 0.5


def wanted_key(theta, selector):
    """A sort key: smaller means more wanted."""
    theta = np.asarray(theta, dtype=np.float64)
    if selector == "lowest":
        return theta
    if selector == "highest":
        return -theta
    if selector == "magnitude":
        return -np.abs(theta)
    raise ValueError(f"unknown selector {selector!r}; use one of {SELECTORS}")


# Verification certificate margin: the best Ritz value of a verification
# round must lie more than VERIFY_MARGIN residuals beyond the worst wanted
# eigenvalue and be separated from its neighbouring Ritz value by as much.
VERIFY_MARGIN = 3.0
# Fewest steps of a round before a certificate is trusted: the first Ritz
# values of a random start sit in the bulk of the spectrum with residuals
# that do not yet resolve anything.
VERIFY_MIN_STEPS = 4
# Steps of the first cycle before its Ritz values set the partial
# reorthogonalization threshold (PartialOrthogonality.allow): by then the
# largest |Ritz value| estimates ||A|| well enough for the margin of allow()
# (a factor 100).  On the Heisenberg ring of 22 sites (lowest 2) the first
# cycle then reorthogonalizes 4 times instead of 9 (bench/bench_speed.py).
EARLY_ALLOW_STEPS = 8


def _certified(theta, est, order, steps, selector, worst_key, delta):
    """Whether a verification round's best Ritz value settles the wanted set.

    Keys orient everything so that smaller is more wanted.  Let ``t`` be the
    round's best key, ``rho`` its residual estimate, ``w`` the worst wanted
    (locked) key and ``t2``, ``rho2`` the next Ritz key and its residual.

    * Beyond: ``t - 3 rho > w`` and ``3 rho < t2 - t``: the Ritz value is
      resolved from its neighbour and its residual interval lies beyond ``w``.
      A random start has a component along every eigenvector of the deflated
      operator, and Lanczos resolves the extreme one first, so nothing is
      left on the wanted side of ``w`` (common practice; a heuristic, not a
      proof: a start vector with a tiny component along a missing copy could
      hide it).
    * Tie: ``|t - w| <= delta`` and the Kato-Temple bound
      ``t - rho^2 / (mu - t) >= w - delta`` with ``mu = t2 - rho2`` as the
      lower estimate of the next eigenvalue: the extreme eigenvalue of the
      deflated operator equals ``w`` to within the tolerance, so the wanted
      values are right whichever copy is returned.

    References
    ----------
    T. Kato, J. Phys. Soc. Japan 4 (1949) 334-339; G. Temple,
    Proc. Roy. Soc. A 119 (1928) 276-293 (the lower bound).
    """
    if steps < VERIFY_MIN_STEPS or len(order) < 2 or not np.isfinite(worst_key):
        return False
    key = wanted_key(theta, selector)
    i, i2 = order[0], order[1]
    t, rho, t2, rho2 = key[i], est[i], key[i2], est[i2]
    if t - worst_key > delta:
        return bool(t - VERIFY_MARGIN * rho > worst_key and VERIFY_MARGIN * rho < t2 - t)
    if abs(t - worst_key) <= delta:
        gap = (t2 - rho2) - t
        return bool(gap > rho and t - rho * rho / gap >= worst_key - delta)
    return False


def _arrow_to_tridiagonal(theta, s):
    """Orthogonal reduction of the arrow ``[[diag(theta), s], [s^T, *]]``.

    Returns ``(Z, d, e, coupling)`` with ``Z`` orthogonal (p x p) such that in
    the basis ``Y Z`` the kept block is tridiagonal ``(d, e)`` and only the
    last kept vector couples (by ``coupling``) to the continuation vector.
    """
    p = len(theta)
    if p == 0:
        return np.zeros((0, 0)), np.zeros(0), np.zeros(0), 0.0
    # Put the continuation vector first: a Householder reduction to Hessenberg
    # (tridiagonal, by symmetry) form leaves the first basis vector fixed.  The
    # (0, 0) entry never enters the reflectors, so a placeholder is enough.
    B = np.zeros((p + 1, p + 1))
    B[0, 1:] = s
    B[1:, 0] = s
    B[np.arange(1, p + 1), np.arange(1, p + 1)] = theta
    H, Z = scipy.linalg.hessenberg(B, calc_q=True)
    Z = Z[1:, 1:]
    d = np.diag(H)[1:].copy()
    e = np.diag(H, -1)[1:].copy()
    coupling = float(H[1, 0])
    # Reverse so the vector coupled to the continuation comes last.
    return Z[:, ::-1], d[::-1].copy(), e[::-1].copy(), coupling


def thick_restart_lanczos(apply, space, n, k, selector, *, tol, basis, max_restarts, rng,
                          start=None, callback=None, keep_extra=None, verify=True,
                          apply_block=None, apply_dot=None, reorthogonalization="full",
                          n_threads=1, measure_orthogonality=False, product_budget=None,
                          initial_locked=None, pair_threshold=None, final_apply_block=None,
                          final_selector=None, report=None):
    """Thick-restart Lanczos for the ``k`` wanted eigenpairs of a symmetric operator.

    Parameters
    ----------
    apply : callable
        ``apply(x)`` returns the operator applied to one vector of length ``n``.
    space : VectorSpace
        Inner products and norms (Euclidean or an M-inner product).
    n, k : int
        Order and number of wanted pairs (``k < basis < n``).
    selector : {"lowest", "highest", "magnitude"}
        Which Ritz values are wanted.
    tol : float
        Relative tolerance (see :func:`lanqr.api.lowest`, Notes).
    basis : int
        Largest basis size (locked plus active vectors).
    max_restarts : int
        Bound on the number of restarts.
    rng : numpy.random.Generator
        Drives every random choice.
    start : ndarray or None
        Start vector (random when None).
    callback : callable or None
        Called after each restart with a dict describing the state.
    keep_extra : int or None
        Unconverged Ritz vectors kept beyond the wanted ones at a restart.
    verify : bool
        Run the repeated-eigenvalue verification round.
    apply_block : callable or None
        ``apply_block(X)`` applies the operator to the columns of ``X`` (for
        the final Rayleigh-Ritz step); by default ``apply`` column by column.
    apply_dot : callable or None
        ``apply_dot(x, out=None)`` returns ``(A x, x . A x)`` in one pass (see
        :func:`lanqr.lanczos.extend_basis`).
    reorthogonalization : {"full", "partial"}
        Full reorthogonalization at every step, or Simon's partial
        reorthogonalization (Euclidean space only).
    n_threads : int
        Threads for the fused vector updates.
    measure_orthogonality : bool
        Record ``max |Q^T Q - I|`` of the whole basis before every restart and
        at the end (one Gram matrix each time: for tests and diagnostics).
    product_budget : int or None
        Give up the main phase at the first restart after this many operator
        applications: the result then has ``budget_exhausted`` True, the
        locked pairs, the active Ritz values in wanted order and, in
        ``active_start``, the sum of the unconverged wanted Ritz vectors (a
        caller switching to another operator continues from it).
    initial_locked : tuple (X, values) or None
        Converged eigenvectors (orthonormal columns) and their eigenvalues of
        this operator, locked from the start.
    pair_threshold : callable or None
        ``pair_threshold(theta, norm_estimate)`` returns the residual estimate
        below which each Ritz pair counts as converged (locked); by default
        ``max(LOCK_SHARE tol |theta|, LOCK_FLOOR_SHARE FLOOR_FACTOR eps
        ||A||)``.  A filtered operator translates its residuals this way.
    final_apply_block, final_selector : callable, str or None
        Operator and selector for the final Rayleigh-Ritz step (default: the
        iteration's own); with a polynomial filter the final step uses ``A``.
    report : callable or None
        ``report(theta, estimates)`` returns the Ritz values and residual
        estimates recorded in ``history`` and passed to ``callback`` (a
        filtered operator reports them in terms of ``A``).

    Returns
    -------
    dict
        ``budget_exhausted`` (False here; see ``product_budget`` for the
        other shape), ``values``, ``vectors`` (the best ``k`` in wanted order), ``estimates``,
        ``converged``, ``restarts``, ``history``, ``norm_estimate``,
        ``products`` (the operator applied to ``vectors``),
        ``verification`` (statistics of the verification round),
        ``reorthogonalization`` (strategy and, for the partial one, the steps
        and reorthogonalizations made), ``orthogonality`` (with
        ``measure_orthogonality``: the largest ``max |Q^T Q - I|`` seen).
    """
    if selector not in SELECTORS:
        raise ValueError(f"unknown selector {selector!r}; use one of {SELECTORS}")
    m = int(basis)
    if not (k < m < n):
        raise ValueError(f"need k < basis < n, got k={k}, basis={m}, n={n}")
    if keep_extra is None:
        keep_extra = max((m - k) // 2, 1)
    if reorthogonalization not in REORTHOGONALIZATION:
        raise ValueError(f"reorthogonalization must be one of {REORTHOGONALIZATION}, "
                         f"got {reorthogonalization!r}")
    partial = PartialOrthogonality(n, m) if reorthogonalization == "partial" else None

    def reorthogonalization_stats():
        return {"strategy": reorthogonalization,
                "steps": partial.steps if partial is not None else None,
                "reorthogonalizations": partial.reorthogonalizations if partial is not None else None}
    worst_orthogonality = [0.0]

    def measure(columns):
        if measure_orthogonality and columns:
            G = Q[:, :columns].T @ Q[:, :columns]
            worst_orthogonality[0] = max(worst_orthogonality[0],
                                         float(np.max(np.abs(G - np.eye(columns)))))

    Q = np.empty((n, m + 1), order="F")
    alpha = np.zeros(m)
    beta = np.zeros(m)
    locked_vals = np.zeros(0)
    L = 0  # locked columns at the front of Q
    if initial_locked is not None:
        X0, values0 = initial_locked
        L = X0.shape[1]
        if L >= m - 1:
            raise ValueError(f"{L} initially locked vectors leave no room in a basis of {m}")
        Q[:, :L] = X0
        locked_vals = np.array(values0, dtype=np.float64).reshape(L)

    if start is None:
        v = rng.standard_normal(n)
    else:
        v = np.array(start, dtype=np.float64).reshape(n)
    if L:
        _, before, after = reorthogonalize(space, Q[:, :L], v)
        if not (after > 1e-3 * before):
            v = random_orthogonal_direction(space, Q[:, :L], rng)
    nv = space.norm(v)
    if not np.isfinite(nv) or nv == 0.0:
        v = rng.standard_normal(n)
        if L:
            v = random_orthogonal_direction(space, Q[:, :L], rng)
        nv = space.norm(v)
    Q[:, L] = v / nv
    if report is None:
        def report(theta, est):
            return theta, est

    applied = [0]  # operator applications by this solve (history, callback)

    def counted_apply(x):
        applied[0] += 1
        return apply(x)

    counted_apply_dot = None
    if apply_dot is not None:
        def counted_apply_dot(x, out=None):
            applied[0] += 1
            return apply_dot(x, out=out)

    state = {"anorm": 0.0, "phase": "main", "round_found": False, "certified": False}
    history = []
    restarts = 0
    first = 0
    verification = {"rounds": 0, "copies_found": 0, "steps": 0}
    last_est = np.zeros(0)
    last_theta = np.zeros(0)
    last_raw = np.zeros(0)
    exhausted = False
    start_rows = None  # measured by the rotation at a restart, for partial.start

    def threshold(theta):
        if pair_threshold is not None:
            return pair_threshold(theta, state["anorm"])
        floor = LOCK_FLOOR_SHARE * FLOOR_FACTOR * _EPS * state["anorm"]
        return np.maximum(LOCK_SHARE * tol * np.abs(theta), floor)

    # First cycle: raise the partial reorthogonalization threshold as soon as
    # the Ritz values allow (later cycles do it at each restart, below).
    early_allow = (partial is not None and pair_threshold is None
                   and selector in ("lowest", "highest"))

    def interlaced_threshold(worst_wanted):
        """A lower bound on the locking threshold of every wanted pair.

        Cauchy interlacing: the i-th lowest Ritz value is at least the i-th
        lowest eigenvalue.  When the worst wanted Ritz value lies below zero
        (lowest; above zero for highest) every wanted eigenvalue lies
        farther out, so its |theta| is at least that Ritz value's; otherwise
        a wanted eigenvalue may be zero and only the floor is safe.
        """
        outward = -worst_wanted if selector == "lowest" else worst_wanted
        return threshold(np.array([max(outward, 0.0)]))[0]

    def worst_locked_key():
        keys = np.sort(wanted_key(locked_vals, selector))
        return keys[k - 1] if len(keys) >= k else np.inf

    def after_step(j):
        nw = k - L if state["phase"] == "main" else 1
        if j < nw:
            return False
        theta, s = tridiag_eigen(alpha[:j], beta[:j - 1], rows=[-1])
        if len(theta):
            state["anorm"] = max(state["anorm"], float(np.max(np.abs(theta))))
        est = np.abs(beta[j - 1] * s[0])
        order = np.argsort(wanted_key(theta, selector), kind="stable")
        thr = threshold(theta)
        if early_allow and not len(last_theta) and j >= EARLY_ALLOW_STEPS:
            partial.allow(float(interlaced_threshold(theta[order[max(nw, 1) - 1]])),
                          state["anorm"])
        if state["phase"] == "main":
            w = order[:nw]
            return bool(np.all(est[w] <= thr[w]))
        # Verification round: stop when the best Ritz pair converged (a copy
        # or the next eigenvalue), or when it is certified not to lie
        # meaningfully beyond the worst wanted value (see _certified).
        i = order[0]
        if est[i] <= thr[i]:
            return True
        if _certified(theta, est, order, j, selector, worst_locked_key(), thr[i]):
            state["certified"] = True
            return True
        return False

    while True:
        state["certified"] = False
        offset = L
        if partial is not None:
            if len(last_theta):
                nw_now = max(k - L, 1) if state["phase"] == "main" else 1
                partial.allow(float(np.min(threshold(last_raw[:nw_now]))), state["anorm"])
            partial.start(Q[:, offset:], first, rows=start_rows)
            start_rows = None
        steps = extend_basis(counted_apply, space, Q, offset, first, m - L, alpha, beta, rng,
                             norm_estimate=state["anorm"], after_step=after_step,
                             apply_dot=counted_apply_dot, partial=partial, n_threads=n_threads)
        measure(offset + steps + 1)
        if state["phase"] == "verify":
            verification["steps"] += steps - first
        j = steps
        theta, S = tridiag_eigen(alpha[:j], beta[:j - 1])
        state["anorm"] = max(state["anorm"], float(np.max(np.abs(theta))))
        est = np.abs(beta[j - 1] * S[-1, :])
        order = np.argsort(wanted_key(theta, selector), kind="stable")
        thr = threshold(theta)
        last_raw = theta[order]
        last_theta, last_est = report(last_raw, est[order])
        history.append({"ritz": np.array(last_theta), "estimates": np.array(last_est),
                        "matvecs": applied[0],
                        "locked": L, "phase": state["phase"]})

        # Decide which active pairs to lock and which to keep.
        if state["phase"] == "main":
            nw = k - L
            wanted = order[:nw]
            lock = [i for i in wanted if est[i] <= thr[i]]
            rest = [i for i in order if i not in set(lock)]
            done_main = len(lock) == nw
        else:
            i0 = order[0]
            lock = []
            done_main = True
            if est[i0] <= thr[i0]:
                key0 = wanted_key(theta[i0], selector)
                if key0 < worst_locked_key() - thr[i0]:
                    # A copy of a repeated eigenvalue (or a skipped one)
                    # below the worst wanted value: lock it, go on.
                    lock = [i0]
                    verification["copies_found"] += 1
                    state["round_found"] = True
                else:
                    state["certified"] = True
            rest = [i for i in order if i not in set(lock)]

        nl = len(lock)
        finished = False
        fresh_round = False
        if state["phase"] == "main" and done_main and not verify:
            finished = True
        elif state["phase"] == "verify" and state["certified"]:
            # A round that locked a copy has lost the direction of that
            # eigenspace; only a round that found nothing certifies the set.
            if state["round_found"]:
                fresh_round = True
                state["round_found"] = False
            else:
                finished = True

        if L + nl >= m - 1:
            # No room left for an active basis: stop with what is locked.
            exhausted = True
            finished = True

        if (product_budget is not None and applied[0] >= product_budget
                and state["phase"] == "main" and not done_main and not finished
                and restarts < max_restarts):
            # Hand over: the locked pairs (with the newly converged ones) and
            # the best unconverged Ritz vectors, in wanted order.
            # One vector, the sum of the unconverged wanted Ritz vectors (no
            # second basis-sized array while the caller goes on); values for
            # every Ritz pair.
            keep = rest[:min(len(rest), j)]
            wanted_left = keep[:max(k - L - nl, 1)]
            return {
                "budget_exhausted": True,
                "locked_vectors": np.hstack([Q[:, :L], Q[:, L:L + j] @ S[:, lock]]),
                "locked_values": np.concatenate([locked_vals, theta[lock]]),
                "active_start": Q[:, L:L + j] @ S[:, wanted_left].sum(axis=1),
                "active_values": theta[keep],
                "active_estimates": est[keep],
                "restarts": restarts,
                "history": history,
                "norm_estimate": state["anorm"],
                "verification": verification,
                "reorthogonalization": reorthogonalization_stats(),
            }

        if finished or restarts >= max_restarts:
            # Lock the converged ones; if fewer than k are locked, add the
            # best unconverged Ritz pairs (flagged) and stop.
            need = max(k - L - nl, 0)
            act = rest[:need]
            cols = list(lock) + list(act)
            final_vals = np.concatenate([locked_vals, theta[cols]])
            final_vecs = np.empty((n, L + len(cols)), order="F")
            final_vecs[:, :L] = Q[:, :L]
            if cols:
                np.matmul(Q[:, L:L + j], S[:, cols], out=final_vecs[:, L:])
            final_est = np.concatenate([np.zeros(L), est[cols]])
            final_conv = np.concatenate([np.ones(L + nl, dtype=bool), est[act] <= thr[act]])
            break

        restarts += 1
        if state["phase"] == "main" and done_main:
            # All wanted pairs converged: lock them and begin verification
            # from a fresh random vector orthogonal to the locked ones.
            p = 0
            state["phase"] = "verify"
            verification["rounds"] += 1
        elif fresh_round:
            p = 0
            verification["rounds"] += 1
        else:
            nwant_left = (k - L - nl) if state["phase"] == "main" else 1
            p = min(max(nwant_left, 1) + keep_extra, len(rest), m - L - nl - 2)
        keep = rest[:p]

        # New basis: [locked | newly locked | kept Ritz vectors (tridiagonal) | continuation].
        Zs = S[:, lock]
        if p:
            Zk, dk, ek, coupling = _arrow_to_tridiagonal(theta[keep], beta[j - 1] * S[-1, keep])
            Zs = np.hstack([Zs, S[:, keep] @ Zk]) if nl else S[:, keep] @ Zk
        r = Q[:, L + j].copy()
        if Zs.shape[1] and partial is not None and p:
            # In place, in row chunks: no second n x p array.  The inner
            # products that start the orthogonality estimates of the next
            # cycle are summed while each chunk is in cache, instead of a
            # sweep over the kept vectors of their own.
            gram = rotate_basis(Q[:, L:L + j], Zs, probe=r)[1]  # no view of Q kept
            start_rows = gram[nl:]
        elif Zs.shape[1]:
            rotate_basis(Q[:, L:L + j], Zs)
        if nl:
            locked_vals = np.concatenate([locked_vals, theta[lock]])
            L += nl
        if p:
            alpha[:p] = dk
            beta[:p - 1] = ek
            beta[p - 1] = coupling
            Q[:, L + p] = r
            first = p
        else:
            Q[:, L] = random_orthogonal_direction(space, Q[:, :L], rng)
            first = 0
        if callback is not None:
            callback({"restart": restarts, "phase": state["phase"], "locked": L,
                      "matvecs": applied[0],
                      "ritz": last_theta.copy(), "estimates": last_est.copy()})

    # Final Rayleigh-Ritz step on every locked and returned vector.  Locking
    # drops couplings of tolerance size between the locked vectors and the
    # active basis; pairs of a cluster locked at different restarts therefore
    # carry small components of each other.  One projection onto their span
    # removes them, so each residual is the part orthogonal to all of them.
    # The basis is no longer needed: release it before the products below
    # (the peak memory is the basis or the final block, not both).
    Q = None
    if final_apply_block is not None:
        apply_block = final_apply_block
        apply = lambda x: final_apply_block(x[:, None])[:, 0]  # noqa: E731
    if final_selector is not None:
        selector = final_selector
    K = final_vecs.shape[1]
    if apply_block is None:
        AX = np.empty_like(final_vecs)
        for i in range(K):
            AX[:, i] = apply(final_vecs[:, i])
    else:
        AX = np.asarray(apply_block(final_vecs), dtype=np.float64)
    G = space.gram(final_vecs, AX)
    G = 0.5 * (G + G.T)
    if space.mass is None:
        # Partial reorthogonalization leaves the locked vectors orthogonal
        # only to about its threshold (up to ~1e-12 on the 22 x 22 grid
        # Laplacian, highest 10): the Rayleigh-Ritz step in the metric of
        # their Gram matrix returns vectors orthonormal to rounding.  (With
        # M, full reorthogonalization keeps them M-orthonormal already, and
        # the Gram matrix would cost products with M.)
        B = final_vecs.T @ final_vecs
        try:
            vals_rr, U = scipy.linalg.eigh(G, 0.5 * (B + B.T))
        except np.linalg.LinAlgError:
            # Numerically dependent vectors (never seen): keep the plain step.
            vals_rr, U = scipy.linalg.eigh(G)
    else:
        vals_rr, U = scipy.linalg.eigh(G)
    # Keep each pair's convergence flag with the Ritz vector it mixes into most.
    owner = np.argmax(np.abs(U), axis=0)
    final_conv = final_conv[owner]
    final_est = final_est[owner]
    final_vals = vals_rr
    # In place (row chunks): no second copy of either block.
    rotate_basis(final_vecs, U)
    AX = np.asfortranarray(AX)
    rotate_basis(AX, U)
    pick = np.argsort(wanted_key(final_vals, selector), kind="stable")[:k]
    return {
        "budget_exhausted": False,
        "values": final_vals[pick],
        "vectors": np.asfortranarray(final_vecs[:, pick]),
        "products": np.asfortranarray(AX[:, pick]),
        "estimates": final_est[pick],
        "converged": final_conv[pick],
        "restarts": restarts,
        "history": history,
        "norm_estimate": state["anorm"],
        "verification": verification,
        "exhausted": exhausted,
        "verified": bool(state["phase"] == "verify" and state["certified"]),
        "reorthogonalization": reorthogonalization_stats(),
        "orthogonality": worst_orthogonality[0] if measure_orthogonality else None,
    }


