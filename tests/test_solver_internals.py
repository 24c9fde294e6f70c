"""The layers under lanqr.lowest: vector space, Gram-Schmidt, arrow reduction, selectors."""
import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from lanqr.lanczos import extend_basis, random_orthogonal_direction, reorthogonalize
from lanqr.problems import laplacian_grid, random_sparse_symmetric
from lanqr.restart import _arrow_to_tridiagonal, thick_restart_lanczos
from lanqr.tridiagonal import tridiag_values
from lanqr.vectorspace import VectorSpace

EPS = np.finfo(float).eps


@pytest.mark.parametrize("scale", [1e-200, 1.0, 1e200])
def test_norm_is_safe_against_overflow_and_underflow(scale):
    # Closed form: ||c * ones(n)|| = c sqrt(n).
    x = np.full(1000, scale)
    assert VectorSpace(1000).norm(x) == pytest.approx(scale * np.sqrt(1000), rel=1e-14)
    M = sp.diags(np.full(1000, 4.0))
    assert VectorSpace(1000, mass=lambda v: M @ v).norm(x) == pytest.approx(
        2 * scale * np.sqrt(1000), rel=1e-14)


def test_dgks_reorthogonalization_of_a_nearly_dependent_vector():
    # common practice (DGKS, "twice is enough"): one classical Gram-Schmidt
    # pass leaves ~eps/cos components; the second pass restores orthogonality.
    rng = np.random.default_rng(0)
    V = np.asfortranarray(np.linalg.qr(rng.standard_normal((500, 20)))[0])
    w = V @ rng.standard_normal(20) + 1e-10 * rng.standard_normal(500)
    space = VectorSpace(500)
    _, before, after = reorthogonalize(space, V, w)
    assert after < 1e-8 * before
    assert np.max(np.abs(V.T @ (w / after))) <= 10 * EPS * np.sqrt(500)
    z = random_orthogonal_direction(space, V, rng)
    assert abs(np.linalg.norm(z) - 1) <= 1e-14 and np.max(np.abs(V.T @ z)) <= 1e-14


def test_lanczos_relation_holds():
    # The Lanczos relation A Q_j = Q_j T_j + beta_j q_{j+1} e_j^T (Lanczos 1950;
    # Parlett 1998, ch. 13) with orthonormal Q to working precision.
    A = random_sparse_symmetric(400, 0.05, seed=3)
    n, m = 400, 25
    Q = np.empty((n, m + 1), order="F")
    rng = np.random.default_rng(1)
    q0 = rng.standard_normal(n)
    Q[:, 0] = q0 / np.linalg.norm(q0)
    alpha, beta = np.zeros(m), np.zeros(m)
    steps = extend_basis(lambda x: A @ x, VectorSpace(n), Q, 0, 0, m, alpha, beta, rng)
    assert steps == m
    T = np.diag(alpha) + np.diag(beta[:m - 1], 1) + np.diag(beta[:m - 1], -1)
    R = A @ Q[:, :m] - Q[:, :m] @ T
    R[:, -1] -= beta[m - 1] * Q[:, m]
    anorm = scipy.sparse.linalg.norm(A, 1)
    assert np.linalg.norm(R) <= 1e3 * EPS * anorm
    assert np.linalg.norm(Q.T @ Q - np.eye(m + 1)) <= 1e-13


def test_arrow_reduction_is_orthogonal_and_keeps_the_spectrum():
    # Reference: LAPACK eigenvalues of the arrow matrix itself.
    rng = np.random.default_rng(2)
    p = 12
    theta = np.sort(rng.standard_normal(p))
    s = rng.standard_normal(p)
    s[3] = 0.0  # a decoupled (converged) Ritz pair
    alpha_r = 0.7
    Z, d, e, c = _arrow_to_tridiagonal(theta, s)
    assert np.linalg.norm(Z.T @ Z - np.eye(p)) <= 1e-13
    np.testing.assert_allclose(Z.T @ np.diag(theta) @ Z,
                               np.diag(d) + np.diag(e, 1) + np.diag(e, -1), atol=1e-13)
    assert abs(abs(c) - np.linalg.norm(s)) <= 1e-13
    arrow = np.zeros((p + 1, p + 1))
    arrow[:p, :p] = np.diag(theta)
    arrow[:p, p] = arrow[p, :p] = s
    arrow[p, p] = alpha_r
    tri = tridiag_values(np.append(d, alpha_r), np.append(e, c))
    np.testing.assert_allclose(tri, scipy.linalg.eigvalsh(arrow), atol=1e-13)


def test_magnitude_selector_against_lapack():
    # For shift-invert the controller selects the largest |theta|; reference
    # LAPACK eigenvalues of an indefinite matrix with both ends comparable.
    A = random_sparse_symmetric(800, 0.01, seed=9)
    w = scipy.linalg.eigvalsh(A.toarray())
    want = w[np.argsort(-np.abs(w))[:4]]
    out = thick_restart_lanczos(lambda x: A @ x, VectorSpace(800), 800, 4, "magnitude", tol=1e-10,
                                basis=30, max_restarts=500, rng=np.random.default_rng(0))
    np.testing.assert_allclose(np.sort(out["values"]), np.sort(want), rtol=1e-10)
    assert np.all(out["converged"])


def test_mass_inner_product_solves_a_generalized_problem():
    # K x = lambda M x with M diagonal SPD: the operator M^{-1} K is
    # self-adjoint in the M-inner product, which enters only through the
    # vector space.  Reference: LAPACK generalized symmetric eigensolver.
    K = laplacian_grid((20, 20))
    mdiag = 1.0 + np.random.default_rng(4).random(400)
    M = sp.diags(mdiag)
    space = VectorSpace(400, mass=lambda x: M @ x)
    out = thick_restart_lanczos(lambda x: (K @ x) / mdiag, space, 400, 5, "lowest", tol=1e-10,
                                basis=30, max_restarts=500, rng=np.random.default_rng(1))
    ref = scipy.linalg.eigh(K.toarray(), np.diag(mdiag), eigvals_only=True, subset_by_index=(0, 4))
    np.testing.assert_allclose(out["values"], ref, rtol=1e-10)
    X = out["vectors"]
    assert np.linalg.norm(X.T @ (mdiag[:, None] * X) - np.eye(5)) <= 1e-10


def test_unknown_selector():
    with pytest.raises(ValueError, match="selector"):
        thick_restart_lanczos(lambda x: x, VectorSpace(100), 100, 2, "middle", tol=1e-8,
                              basis=20, max_restarts=5, rng=np.random.default_rng(0))
