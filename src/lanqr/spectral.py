"""Generalized problems, shift-invert and interval searches (public functions).

``A x = lambda M x`` with ``M`` symmetric positive (semi-)definite is solved
by the same thick-restart Lanczos controller as the standard problem; only the
operator and the vector space change:

* shift-invert ``S = (A - sigma M)^{-1} M`` (:class:`lanqr.ShiftInvert`) in
  the M-inner product, for the lowest modes of a stiffness/mass pair and for
  eigenvalues near a target: ``lambda = sigma + 1/nu``;
* ``M^{-1} A`` in the M-inner product for the highest modes.

Counts from Sylvester's law of inertia (:func:`lanqr.count_below`) certify
that nothing was missed: a result from :func:`lowest` with a mass matrix and
from :func:`between` carries a :class:`~lanqr.result.CountCheck`.
"""
from __future__ import annotations

import time
import warnings

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lanqr.options import (NotConvergedWarning, default_basis, resolve_sizes,
                           single_threaded_blas, validate_options)
from lanqr.inertia import InertiaError, check_mass_matrix, check_point, count_below
from lanqr.operators import as_operator
from lanqr.restart import thick_restart_lanczos, wanted_key
from lanqr.result import CountCheck, EigenResult
from lanqr.transforms import ShiftInvert, SingularShiftError
from lanqr.vectorspace import VectorSpace

__all__ = ["generalized_lowest", "generalized_highest", "nearest", "between"]

_EPS = np.finfo(np.float64).eps
_DENSE_MAX_ORDER = 200
# Most eigenpairs computed about one shift by `between` before the interval is split.
BETWEEN_MAX_PER_SHIFT = 40


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------

def _norm1(X):
    if X is None:
        return 1.0
    if sp.issparse(X):
        return float(spla.norm(X, 1))
    if isinstance(X, np.ndarray):
        return float(np.linalg.norm(X, 1))
    # A LinearOperator: SciPy's 1-norm estimator (symmetric, so the adjoint is itself).
    op = spla.aslinearoperator(X)
    sym = spla.LinearOperator(op.shape, matvec=op.matvec, rmatvec=op.matvec, dtype=np.float64)
    return float(spla.onenormest(sym))


def _check_inputs(A, M, allow_operator):
    if sp.issparse(A) or isinstance(A, np.ndarray):
        from lanqr.inertia import check_symmetric_matrix
        A = check_symmetric_matrix(A, "A")
    elif not allow_operator:
        raise ValueError("A must be an explicit matrix here (or give a solver)")
    else:
        as_operator(A)  # validates shape, dtype and symmetry by a random probe
    n = A.shape[0]
    if M is not None:
        M = check_mass_matrix(M, n)
    return A, M, n


def _mass_apply(M):
    return None if M is None else (lambda X: M @ X)


def _semidefinite(M):
    if M is None:
        return False
    diag = M.diagonal() if sp.issparse(M) else np.diag(M)
    return bool(np.any(diag == 0.0))


def _residuals(A, M, values, vectors, anorm, mnorm):
    """``||A x - l M x|| / ((||A|| + |l| ||M||) ||x||)`` for each pair, explicitly."""
    if vectors.shape[1] == 0:
        return np.zeros(0)
    AX = np.asarray(A @ vectors) if not isinstance(A, spla.LinearOperator) else A.matmat(vectors)
    MX = vectors if M is None else np.asarray(M @ vectors)
    R = AX - MX * values
    num = np.linalg.norm(R, axis=0)
    den = (anorm + np.abs(values) * mnorm) * np.linalg.norm(vectors, axis=0)
    return num / np.where(den > 0, den, 1.0)


def _rayleigh_quotients(A, M, X, mapped):
    """Eigenvalues as Rayleigh quotients ``x^T A x / x^T M x`` of the returned vectors.

    ``shift + 1/nu`` carries the error of ``nu`` (about eps ||S||) divided by
    ``nu^2``: with a shift very close to one eigenvalue the others lose
    digits.  The Rayleigh quotient errs by ``||r||^2 / gap`` only.  Where the
    quotient is not finite (a vector with no mass), the mapped value is kept.
    """
    if X.shape[1] == 0:
        return mapped
    AX = np.asarray(A @ X) if not isinstance(A, spla.LinearOperator) else A.matmat(X)
    MX = X if M is None else np.asarray(M @ X)
    num = np.einsum("ij,ij->j", X, AX)
    den = np.einsum("ij,ij->j", X, MX)
    with np.errstate(divide="ignore", invalid="ignore"):
        rq = num / den
    return np.where(np.isfinite(rq) & (den > 0), rq, mapped)


def _m_normalize(M, X):
    if X.shape[1] == 0:
        return X
    MX = X if M is None else np.asarray(M @ X)
    norms = np.sqrt(np.maximum(np.einsum("ij,ij->j", X, MX), 0.0))
    return X / np.where(norms > 0, norms, 1.0)


def _finish(values, vectors, residuals, tol, matvecs, restarts, history, t0, method, info,
            count_check=None):
    order = np.argsort(values, kind="stable")
    result = EigenResult(values=values[order], vectors=np.asfortranarray(vectors[:, order]),
                         residuals=residuals[order], converged=residuals[order] <= tol,
                         matvecs=int(matvecs), restarts=int(restarts), history=history,
                         elapsed=time.perf_counter() - t0, tol=tol, method=method,
                         count_check=count_check, info=info)
    if not result.all_converged:
        warnings.warn(f"{int(np.sum(result.converged))} of {len(values)} eigenpairs reached "
                      f"tol={tol:g}; see result.converged", NotConvergedWarning, stacklevel=3)
    return result


def _count_margin(values, tol, anorm, mnorm):
    """How far above the top returned eigenvalue the certifying count is taken.

    The returned eigenvalues are accurate to about their backward error
    ``tol (||A|| + |l| ||M||) / ||M||``-ish; a margin well above that and well
    below typical gaps makes "count = number returned" a sharp test.
    """
    top = float(np.max(np.abs(values))) if len(values) else 1.0
    spread = float(np.ptp(values)) if len(values) > 1 else 0.0
    return max(1e3 * tol * max(top, spread), 1e3 * _EPS * anorm / mnorm, np.finfo(float).tiny)


def _certified_count(A, M, x, step, tries=4):
    """count_below at ``x``, moving ``x`` up by ``step`` (doubling) when it cannot be certified."""
    last = None
    for i in range(tries):
        point = x + step * (2 ** i - 1)
        try:
            return point, count_below(A, point, M=M)
        except InertiaError as exc:
            last = exc
    raise last


def _top_count_check(A, M, values, expected_below, tol, anorm, mnorm, what):
    """Count eigenvalues below a point just above the largest returned value."""
    if len(values) == 0:
        return None
    top = float(np.max(values))
    margin = _count_margin(values, tol, anorm, mnorm)
    try:
        point, count = _certified_count(A, M, top + margin, margin)
    except InertiaError as exc:
        return CountCheck(point=top + margin, count=-1, expected=expected_below,
                          message=f"count could not be certified: {exc.reason}")
    message = ""
    if count > expected_below:
        message = (f"{count - expected_below} eigenvalue(s) below {point:.10g} were not returned: "
                   f"the cluster at {top:.10g} was cut, or {what} skipped eigenvalues")
    elif count < expected_below:
        message = (f"only {count} eigenvalues lie below {point:.10g}, but {expected_below} were "
                   f"returned: some returned values are not eigenvalues")
    return CountCheck(point=point, count=count, expected=expected_below, message=message)


def _build_shift_invert(A, shift, M, solver, nudge, direction=1.0):
    """ShiftInvert at ``shift``; if singular and ``nudge``, step off and report it.

    The steps are ``sqrt(eps) max(|shift|, sqrt(eps) ||A||_1/||M||_1)`` times
    1, 100, 10^4 in ``direction``: far enough that the factorization is
    well conditioned (about 1/sqrt(eps)), close enough that the spectral
    transformation keeps its separation.
    """
    nudges = []
    try:
        return ShiftInvert(A, shift, M, solver=solver), nudges
    except SingularShiftError as first:
        if not nudge or solver is not None:
            raise
        nudges.append({"shift": shift, "reason": first.reason})
    step = _nudge_step(A, M, shift, automatic=direction < 0)
    for i in range(3):
        sigma = shift + direction * step * 100.0 ** i
        try:
            return ShiftInvert(A, sigma, M), nudges
        except SingularShiftError as exc:
            nudges.append({"shift": sigma, "reason": exc.reason})
    raise SingularShiftError(shift, "still singular after 3 nudges: " +
                             "; ".join(f"{d['shift']!r}: {d['reason']}" for d in nudges))


def _nudge_step(A, M, shift, automatic=False):
    """A step off a singular shift.

    A user's shift moves by ``sqrt(eps)`` relative (it stays where the user
    wants it).  The automatic shift 0 of a singular stiffness matrix moves
    down by ``sqrt(eps) ||A||_1 / ||M||_1`` (a bound on the spectrum times
    sqrt(eps)): the zero modes then map to ``nu = 1/step``, at most about
    1/sqrt(eps) times the elastic ones, so the elastic modes stay well above
    the rounding floor ``eps max |nu|`` of the Lanczos process.  A smaller step
    (say eps-relative) would bury them in it.
    """
    scale = _norm1(A) / _norm1(M)
    if automatic:
        return np.sqrt(_EPS) * scale
    return np.sqrt(_EPS) * max(abs(shift), np.sqrt(_EPS) * scale)


def _shift_invert_run(A, M, k, S, selector, *, tol, basis, max_restarts, rng, start, callback,
                      verify, anorm, mnorm):
    """Thick-restart Lanczos on ``S`` in the M-inner product; eigenpairs of the pencil back."""
    n = S.shape[0]
    space = VectorSpace(n, mass=_mass_apply(M))
    semidef = _semidefinite(M)
    if start is None:
        # One application puts the start vector in the range of S: free of the
        # infinite eigenvalues of a semi-definite M, and one step of inverse
        # iteration ahead.
        start = S.matvec(rng.standard_normal(n))
    basis = min(basis, n - 1)
    with single_threaded_blas():
        out = thick_restart_lanczos(S.matvec, space, n, k, selector, tol=tol, basis=basis,
                                    max_restarts=max_restarts, rng=rng, start=start,
                                    callback=callback, verify=verify, apply_block=S.matmat)
    nu = out["values"]
    X = out["vectors"]
    if semidef:
        # Purification (Nour-Omid, Parlett, Ericsson, Jensen 1987): S x / nu
        # removes components in the null space of M that the semi-inner
        # product cannot see.
        X = _m_normalize(M, out["products"] / nu)
    values = _rayleigh_quotients(A, M, X, S.eigenvalues_from(nu))
    residuals = _residuals(A, M, values, X, anorm, mnorm)
    info = {"shift": S.shift, "factorization": dict(S.factorization),
            "verification": out["verification"], "restarts": out["restarts"]}
    return values, X, residuals, out, info


def _deflated_run(A, M, S, X, m, selector, *, tol, basis, max_restarts, rng, callback):
    """The ``m`` wanted eigenpairs of ``S`` M-orthogonal to the columns of ``X``."""
    n = S.shape[0]
    space = VectorSpace(n, mass=_mass_apply(M))
    MX = X if M is None else np.asarray(M @ X)

    def project(Y):
        # X is M-orthonormal: I - X X^T M is the M-orthogonal projector onto its complement.
        return Y - X @ (MX.T @ Y)

    apply = lambda x: project(S.matvec(x))
    apply_block = lambda Y: project(S.matmat(Y))
    basis = min(max(basis, 2 * m + 10), n - X.shape[1] - 1)
    start = project(S.matvec(rng.standard_normal(n)))
    with single_threaded_blas():
        out = thick_restart_lanczos(apply, space, n, m, selector, tol=tol, basis=basis,
                                    max_restarts=max_restarts, rng=rng, start=start,
                                    callback=callback, verify=True, apply_block=apply_block)
    vectors = project(out["vectors"])
    vectors = _m_normalize(M, vectors)
    return _rayleigh_quotients(A, M, vectors, S.eigenvalues_from(out["values"])), vectors, out


def _dense_generalized(A, M, k, which):
    Ad = A.toarray() if sp.issparse(A) else np.asarray(A)
    Md = np.eye(Ad.shape[0]) if M is None else (M.toarray() if sp.issparse(M) else np.asarray(M))
    n = Ad.shape[0]
    lo, hi = (0, k - 1) if which == "lowest" else (n - k, n - 1)
    vals, vecs = scipy.linalg.eigh(Ad, Md, subset_by_index=(lo, hi))
    return vals, vecs


# ---------------------------------------------------------------------------
# public functions
# ---------------------------------------------------------------------------

def generalized_lowest(A, k=6, *, M=None, shift=None, tol=1e-8, basis=None, max_restarts=None,
                       seed=None, start=None, callback=None, certify=True, solver=None):
    """The ``k`` lowest eigenpairs of ``A x = lambda M x`` (``lanqr.lowest`` with ``M`` or ``shift``).

    See :func:`lanqr.lowest`; this is the implementation behind its ``M`` and
    ``shift`` arguments.

    Parameters
    ----------
    A : ndarray or scipy.sparse matrix (or LinearOperator with ``solver``)
    k : int
    M : ndarray or scipy.sparse matrix, optional
        Symmetric positive definite mass matrix (semi-definite allowed with
        shift-invert: massless degrees of freedom).
    shift : float, optional
        Shift-invert about this shift.  Without it, an explicit ``A`` with
        ``M`` is solved by shift-invert about 0, stepped off (slightly
        negative) when ``A`` is singular there (rigid-body modes); the zero
        modes are then among the returned ones.
    certify : bool
        Make the inertia count check (one extra factorization).
    solver : LinearOperator or callable, optional
        Solves ``(A - shift M) y = b`` (then ``shift`` is required).

    Returns
    -------
    EigenResult
        M-orthonormal vectors; residuals ``||A x - l M x|| / ((||A|| + |l| ||M||) ||x||)``.
    """
    t0 = time.perf_counter()
    start = validate_options(k, tol, basis, max_restarts, start)
    if solver is not None and shift is None:
        raise ValueError("a solver needs the shift it solves for")
    A, M, n = _check_inputs(A, M, allow_operator=solver is not None)
    if shift is not None:
        shift = check_point(shift, "shift")
    basis, max_restarts = resolve_sizes(k, n, basis, max_restarts)
    rng = np.random.default_rng(seed)
    anorm, mnorm = _norm1(A), _norm1(M)
    info = {"norm_estimates": (anorm, mnorm)}

    explicit = sp.issparse(A) or isinstance(A, np.ndarray)
    if explicit and n <= max(_DENSE_MAX_ORDER, 2 * basis) and shift is None and solver is None \
            and not _semidefinite(M):
        vals, vecs = _dense_generalized(A, M, k, "lowest")
        res = _residuals(A, M, vals, vecs, anorm, mnorm)
        cc = _top_count_check(A, M, vals, k, tol, anorm, mnorm, "the dense solver") if certify else None
        return _finish(vals, vecs, res, tol, k, 0, [], t0, "dense (scipy.linalg.eigh)", info, cc)

    if not explicit and solver is None:
        raise ValueError("lowest with M needs an explicit A, or a shift with a solver")
    sigma = 0.0 if shift is None else shift
    # Automatic shift: 0, stepped down (below the spectrum) when A is singular
    # there, as for a free-floating structure: its rigid-body modes then come
    # first (nu = 1/(0 - sigma)), followed by the elastic ones.
    S, nudges = _build_shift_invert(A, sigma, M, solver, nudge=True,
                                    direction=-1.0 if shift is None else 1.0)
    below = S.factorization.get("negative_pivots")
    if shift is None and below not in (None, 0) and not nudges:
        # Eigenvalues below 0: either zero modes that rounding put a hair below
        # (step down once more), or a genuinely indefinite A.
        nudges.append({"shift": sigma, "reason": f"{below} eigenvalue(s) below 0"})
        S = ShiftInvert(A, sigma - _nudge_step(A, M, sigma, automatic=True), M)
        below = S.factorization.get("negative_pivots")
    if nudges:
        info["shift_nudges"] = nudges
    if shift is None and below not in (None, 0):
        # Genuinely indefinite: the lowest eigenvalues are not the nearest to
        # 0; Lanczos on M^{-1} A finds them without a guess of a good shift.
        info["auto_shift"] = f"A has {below} eigenvalues below {S.shift!r}; solved on M^-1 A instead"
        return _inverse_mass_solve(A, M, k, "lowest", tol, basis, max_restarts, rng, start,
                                   callback, t0, info, anorm, mnorm, certify)
    selector = "highest" if below == 0 else "magnitude"
    values, X, res, out, run_info = _shift_invert_run(
        A, M, k, S, selector, tol=tol, basis=basis, max_restarts=max_restarts, rng=rng,
        start=start, callback=callback, verify=not certify, anorm=anorm, mnorm=mnorm)
    info.update(run_info)
    method = f"shift-invert Lanczos about {S.shift:.6g} ({S.factorization['kind']})"
    if nudges:
        method += f", shift moved off {sigma!r} (singular there)"
    cc = None
    if certify and explicit:
        cc = _top_count_check(A, M, values, k, tol, anorm, mnorm, "the solver")
        if cc.count > cc.expected:
            # Eigenvalues below the top returned one were skipped: copies of a
            # repeated eigenvalue that one Krylov space cannot hold.  The count
            # says how many; find them by Lanczos on S restricted to the
            # M-orthogonal complement of the pairs found, keep the best k of
            # all, and count again.
            info["first_count_check"] = cc
            missing = cc.count - cc.expected
            extra_vals, extra_X, out2 = _deflated_run(
                A, M, S, X, missing, selector, tol=tol, basis=basis, max_restarts=max_restarts,
                rng=rng, callback=callback)
            all_vals = np.concatenate([values, extra_vals])
            all_X = np.hstack([X, extra_X])
            nu = 1.0 / (all_vals - S.shift)
            keep = np.argsort(wanted_key(nu, selector), kind="stable")[:k]
            values, X = all_vals[keep], all_X[:, keep]
            res = _residuals(A, M, values, X, anorm, mnorm)
            out["restarts"] += out2["restarts"]
            out["history"] = out["history"] + out2["history"]
            method += f"; {missing} skipped eigenvalue(s) found by a deflated run after the count"
            cc = _top_count_check(A, M, values, k, tol, anorm, mnorm, "the solver")
    return _finish(values, X, res, tol, S.applications, out["restarts"], out["history"], t0,
                   method, info, cc)


def _inverse_mass_solve(A, M, k, which, tol, basis, max_restarts, rng, start, callback, t0,
                        info, anorm, mnorm, certify):
    """Lanczos on ``M^{-1} A`` in the M-inner product (no shift)."""
    n = A.shape[0]
    try:
        Minv = ShiftInvert(M, 0.0) if M is not None else None
    except SingularShiftError:
        raise ValueError("M is singular: the highest modes of a pencil with a semi-definite M "
                         "are infinite; give a positive definite M") from None
    Aop = as_operator(A, seed=rng)
    if Minv is None:
        apply, apply_block = Aop.apply, Aop.apply_block
    else:
        apply = lambda x: Minv.solve(Aop.apply(x))
        apply_block = lambda X: Minv.solve(Aop.apply_block(X))
    space = VectorSpace(n, mass=_mass_apply(M))
    with single_threaded_blas():
        out = thick_restart_lanczos(apply, space, n, k, which, tol=tol, basis=min(basis, n - 1),
                                    max_restarts=max_restarts, rng=rng, start=start,
                                    callback=callback, verify=True, apply_block=apply_block)
    values, X = out["values"], out["vectors"]
    res = _residuals(A, M, values, X, anorm, mnorm)
    cc = None
    if certify and which == "lowest" and (sp.issparse(A) or isinstance(A, np.ndarray)):
        cc = _top_count_check(A, M, values, k, tol, anorm, mnorm, "the solver")
    return _finish(values, X, res, tol, Aop.applications, out["restarts"], out["history"], t0,
                   "Lanczos on M^-1 A in the M-inner product", info, cc)


def generalized_highest(A, k=6, *, M=None, tol=1e-8, basis=None, max_restarts=None, seed=None,
                        start=None, callback=None):
    """The ``k`` highest eigenpairs of ``A x = lambda M x`` (``lanqr.highest`` with ``M``).

    Lanczos on ``M^{-1} A`` in the M-inner product; ``M`` is factored once
    (it must be positive definite).  Vectors come back M-orthonormal.
    """
    t0 = time.perf_counter()
    start = validate_options(k, tol, basis, max_restarts, start)
    A, M, n = _check_inputs(A, M, allow_operator=True)
    basis, max_restarts = resolve_sizes(k, n, basis, max_restarts)
    rng = np.random.default_rng(seed)
    anorm, mnorm = _norm1(A), _norm1(M)
    info = {"norm_estimates": (anorm, mnorm)}
    explicit = sp.issparse(A) or isinstance(A, np.ndarray)
    if explicit and n <= max(_DENSE_MAX_ORDER, 2 * basis) and not _semidefinite(M):
        vals, vecs = _dense_generalized(A, M, k, "highest")
        res = _residuals(A, M, vals, vecs, anorm, mnorm)
        return _finish(vals, vecs, res, tol, k, 0, [], t0, "dense (scipy.linalg.eigh)", info)
    return _inverse_mass_solve(A, M, k, "highest", tol, basis, max_restarts, rng, start,
                               callback, t0, info, anorm, mnorm, certify=False)


def nearest(A, k, target, *, M=None, shift_solver=None, tol=1e-8, basis=None, max_restarts=None,
            seed=None, start=None, callback=None, certify=False):
    """The ``k`` eigenpairs of ``A x = lambda M x`` closest to ``target``, by shift-invert.

    Parameters
    ----------
    A : ndarray or scipy.sparse matrix, or a LinearOperator together with ``shift_solver``
        Symmetric.
    k : int
        Number of eigenpairs, ``1 <= k < n``.
    target : float
        The shift: the eigenvalues nearest it are returned.
    M : ndarray or scipy.sparse matrix, optional
        Symmetric positive (semi-)definite mass matrix; identity if omitted.
    shift_solver : LinearOperator or callable, optional
        Solves ``(A - target M) y = b``; replaces the sparse LU (an iterative or
        multigrid solve for a matrix-free ``A``).  Its accuracy limits the
        result's.
    tol : float, optional
        Relative tolerance of the residuals ``||A x - l M x|| / ((||A|| + |l| ||M||) ||x||)``.
    basis, max_restarts, seed, start, callback
        As for :func:`lanqr.lowest`.
    certify : bool, optional
        Count the eigenvalues in ``[min returned - margin, max returned + margin]``
        by two inertia factorizations: the result's ``count_check`` then says
        whether eigenvalues in between were skipped.

    Returns
    -------
    EigenResult
        Values ascending, M-orthonormal vectors, explicit residuals; ``info``
        holds the shift used (and any nudge) and the factorization statistics.

    Raises
    ------
    ValueError
        Bad input (non-square, non-symmetric, NaN/Inf, ``k`` out of range).
    SingularShiftError
        When ``target`` is an eigenvalue to working precision and a user
        solver is given (with the built-in factorization the shift is nudged
        by a relative ``sqrt(eps)`` step and the nudge is reported in
        ``info["shift_nudges"]`` and ``method``).

    Notes
    -----
    Lanczos with thick restart on ``(A - target M)^{-1} M`` in the M-inner
    product, wanted Ritz values of largest magnitude; ``lambda = target +
    1/nu`` (Ericsson and Ruhe 1980).

    References
    ----------
    T. Ericsson and A. Ruhe, Math. Comp. 35 (1980) 1251-1268.

    Examples
    --------
    >>> import lanqr
    >>> from lanqr.problems import laplacian_1d
    >>> res = lanqr.nearest(laplacian_1d(500), 2, 2.0, seed=0)
    >>> res.values.round(6)
    array([1.993729, 2.006271])
    """
    t0 = time.perf_counter()
    start = validate_options(k, tol, basis, max_restarts, start)
    target = check_point(target, "target")
    A, M, n = _check_inputs(A, M, allow_operator=shift_solver is not None)
    basis, max_restarts = resolve_sizes(k, n, basis, max_restarts)
    rng = np.random.default_rng(seed)
    anorm, mnorm = _norm1(A), _norm1(M)
    info = {"target": target, "norm_estimates": (anorm, mnorm)}
    explicit = sp.issparse(A) or isinstance(A, np.ndarray)
    if n <= max(basis + 1, 3 * k) and explicit and shift_solver is None and not _semidefinite(M):
        # Too small for a restarted Krylov basis: all pairs densely, then the nearest k.
        vals, vecs = _dense_generalized(A, M, n, "lowest")
        pick = np.argsort(np.abs(vals - target), kind="stable")[:k]
        vals, vecs = vals[pick], vecs[:, pick]
        res = _residuals(A, M, vals, vecs, anorm, mnorm)
        return _finish(vals, vecs, res, tol, n, 0, [], t0, "dense (scipy.linalg.eigh)", info)
    if n <= basis + 1:
        basis = n - 2
        if basis <= k:
            raise ValueError(f"k = {k} is too large for n = {n} with a user solver")
    S, nudges = _build_shift_invert(A, target, M, shift_solver, nudge=True)
    if nudges:
        info["shift_nudges"] = nudges
    values, X, res, out, run_info = _shift_invert_run(
        A, M, k, S, "magnitude", tol=tol, basis=basis, max_restarts=max_restarts, rng=rng,
        start=start, callback=callback, verify=True, anorm=anorm, mnorm=mnorm)
    info.update(run_info)
    method = f"shift-invert Lanczos about {S.shift:.6g} ({S.factorization['kind']})"
    if nudges:
        method += f", shift nudged from the eigenvalue {target!r}"
    cc = None
    if certify and explicit:
        margin = _count_margin(values, tol, anorm, mnorm)
        try:
            low_point, low = _certified_count(A, M, float(values.min()) - margin, -margin)
            info["count_lower"] = {"point": low_point, "count": low}
            cc = _top_count_check(A, M, values, low + k, tol, anorm, mnorm, "the solver")
        except InertiaError as exc:
            cc = CountCheck(point=float(values.min()) - margin, count=-1, expected=0,
                            message=f"count could not be certified: {exc.reason}")
    return _finish(values, X, res, tol, S.applications, out["restarts"], out["history"], t0,
                   method, info, cc)


def between(A, lower, upper, *, M=None, tol=1e-8, seed=None, max_restarts=None,
            max_per_shift=BETWEEN_MAX_PER_SHIFT):
    """Every eigenpair of ``A x = lambda M x`` with ``lower <= lambda <= upper``.

    Parameters
    ----------
    A : ndarray or scipy.sparse matrix
        Symmetric.
    lower, upper : float
        The interval (closed), ``lower < upper``.
    M : ndarray or scipy.sparse matrix, optional
        Symmetric positive definite mass matrix.
    tol : float, optional
        Relative residual tolerance (as for :func:`nearest`).
    seed, max_restarts
        As for :func:`lanqr.lowest`.
    max_per_shift : int, optional
        Most eigenpairs computed about one shift; a larger interval is split
        at its midpoint (one more count) until each piece holds fewer.

    Returns
    -------
    EigenResult
        All eigenpairs in the interval, ascending; ``count_check`` compares the
        number found with the inertia counts at both ends
        (``info["count_lower"]``).

    Raises
    ------
    ValueError
        Bad input or ``lower >= upper``.
    InertiaError
        If the count at an end cannot be certified even after moving the end
        outward by tiny steps.

    Notes
    -----
    The number of eigenvalues in ``[lower, upper]`` is ``count_below(upper+) -
    count_below(lower-)`` (Sylvester's law of inertia).  For a piece
    ``[a, b]`` holding ``m`` of them, the ``m`` eigenvalues nearest its
    midpoint are exactly those in the piece (every one inside is at most
    ``(b - a)/2`` away, every one outside farther), so one shift-invert run
    about the midpoint finds them.

    Examples
    --------
    >>> import lanqr
    >>> from lanqr.problems import string_pair, string_pair_values
    >>> K, M = string_pair(300)
    >>> res = lanqr.between(K, 100.0, 1000.0, M=M, seed=0)
    >>> len(res.values), int(((string_pair_values(300) >= 100) & (string_pair_values(300) <= 1000)).sum())
    (7, 7)
    """
    t0 = time.perf_counter()
    lo, hi = check_point(lower, "lower"), check_point(upper, "upper")
    if not lo < hi:
        raise ValueError(f"need lower < upper, got {lower!r}, {upper!r}")
    A, M, n = _check_inputs(A, M, allow_operator=False)
    rng = np.random.default_rng(seed)
    anorm, mnorm = _norm1(A), _norm1(M)
    # Closed interval: move the ends outward by a rounding-level step so that an
    # eigenvalue exactly at an end counts as inside.
    edge = max(1e3 * _EPS * max(abs(lo), abs(hi)), 1e3 * _EPS * anorm / mnorm)
    lo_point, c_lo = _certified_count(A, M, lo - edge, -edge)
    hi_point, c_hi = _certified_count(A, M, hi + edge, edge)
    info = {"count_lower": {"point": lo_point, "count": c_lo}, "pieces": []}
    pieces = [(lo_point, hi_point, c_lo, c_hi)]
    leaves = []
    while pieces:
        a, b, ca, cb = pieces.pop()
        m = cb - ca
        if m == 0:
            continue
        if m > max_per_shift and n > 2 * max_per_shift:
            mid = 0.5 * (a + b)
            step = 1e-9 * (b - a)
            mid, cm = _certified_count(A, M, mid, step)
            pieces.append((mid, b, cm, cb))
            pieces.append((a, mid, ca, cm))
            continue
        leaves.append((a, b, m))
    values, vectors, matvecs, restarts, history = [], [], 0, 0, []
    for a, b, m in leaves:
        mid = 0.5 * (a + b)
        if n <= max(_DENSE_MAX_ORDER, 2 * default_basis(m)):
            vals, vecs = _dense_generalized(A, M, n, "lowest")
            keep = (vals >= a) & (vals < b)
            vals, vecs = vals[keep], vecs[:, keep]
            info["pieces"].append({"interval": (a, b), "expected": m, "found": len(vals),
                                   "method": "dense"})
        else:
            res = nearest(A, m, mid, M=M, tol=tol, seed=rng, max_restarts=max_restarts)
            vals, vecs = res.values, res.vectors
            matvecs += res.matvecs
            restarts += res.restarts
            history.extend(res.history)
            info["pieces"].append({"interval": (a, b), "expected": m, "found": len(vals),
                                   "shift": res.info.get("shift"), "matvecs": res.matvecs})
        values.append(vals)
        vectors.append(vecs)
    values = np.concatenate(values) if values else np.zeros(0)
    vectors = np.hstack(vectors) if vectors else np.zeros((n, 0))
    inside = (values >= lo_point) & (values <= hi_point)
    values, vectors = values[inside], vectors[:, inside]
    res = _residuals(A, M, values, vectors, anorm, mnorm)
    message = ""
    if len(values) != c_hi - c_lo:
        message = (f"{c_hi - c_lo} eigenvalues lie in [{lo_point:.10g}, {hi_point:.10g}] by "
                   f"inertia counts, {len(values)} were found")
    cc = CountCheck(point=hi_point, count=c_hi, expected=c_lo + len(values), message=message)
    method = f"shift-invert Lanczos about {len(leaves)} shift(s), certified by inertia counts"
    return _finish(values, vectors, res, tol, matvecs, restarts, history, t0, method, info, cc)
