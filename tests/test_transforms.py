"""ShiftInvert against dense inverses (LAPACK) and closed forms."""
import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lanqr import problems
from lanqr.transforms import ShiftInvert, SingularShiftError


def _cases():
    A = problems.random_sparse_symmetric(80, 0.08, seed=4) + sp.diags(np.linspace(-2, 2, 80))
    K, M = problems.string_pair(60)
    Kb, Mb = problems.bracket_plate(6, 3)
    return [("indefinite", A.tocsr(), None, 0.137),
            ("string", K, M, 333.0),
            ("plate", Kb, Mb, 2.0e7)]


@pytest.mark.parametrize("name,A,M,shift", _cases(), ids=lambda v: v if isinstance(v, str) else "")
@pytest.mark.parametrize("dense", [False, True])
def test_matches_dense_inverse(name, A, M, shift, dense):
    # Reference: LAPACK solve of the dense shifted matrix.
    n = A.shape[0]
    Ad = A.toarray()
    Md = np.eye(n) if M is None else M.toarray()
    S = ShiftInvert(Ad if dense else A, shift, None if M is None else (Md if dense else M))
    X = np.random.default_rng(0).standard_normal((n, 3))
    expected = np.linalg.solve(Ad - shift * Md, Md @ X)
    scale = np.linalg.norm(expected)
    assert np.linalg.norm(S @ X - expected) <= 1e-10 * scale
    assert np.linalg.norm(S.matvec(X[:, 0]) - expected[:, 0]) <= 1e-10 * np.linalg.norm(expected[:, 0])
    assert S.applications == 4
    # Self-adjoint in the M-inner product: M S is symmetric.
    u, v = X[:, 0], X[:, 1]
    assert abs(u @ Md @ (S @ v) - v @ Md @ (S @ u)) <= 1e-10 * np.linalg.norm(Md @ u) * np.linalg.norm(S @ v) * 10
    # The adjoint applies S^T = M (A - shift M)^{-1}.
    expected_adjoint = Md @ np.linalg.solve(Ad - shift * Md, u)
    assert np.linalg.norm(S.rmatvec(u) - expected_adjoint) <= 1e-10 * np.linalg.norm(expected_adjoint)


def test_eigenvalues_map_back_to_string_pair_closed_form():
    # reference-values.md §10: eigenvalues nu of (K - sigma M)^{-1} M give lambda = sigma + 1/nu
    n = 40
    K, M = problems.string_pair(n)
    sigma = 500.0
    S = ShiftInvert(K, sigma, M)
    dense_S = S @ np.eye(n)
    nu = np.linalg.eigvals(dense_S).real
    lam = np.sort(S.eigenvalues_from(nu))
    exact = problems.string_pair_values(n)
    assert np.max(np.abs(lam - exact) / exact) < 1e-11


def test_factorization_statistics_recorded():
    A = problems.laplacian_grid((40, 40))
    S = ShiftInvert(A, 0.1)
    info = S.factorization
    assert info["kind"] == "sparse LU"
    assert info["nnz_factors"] >= A.nnz - A.shape[0] and info["fill"] >= 1.0
    assert info["seconds"] >= 0.0 and 0.0 < info["min_pivot_ratio"] <= 1.0
    D = ShiftInvert(A.toarray(), 0.0)
    assert D.factorization["kind"] == "dense Cholesky"   # shift below the spectrum
    D = ShiftInvert(A.toarray(), 1.0)
    assert D.factorization["kind"] == "dense LU"


@pytest.mark.parametrize("dense", [False, True])
def test_shift_at_an_eigenvalue_is_reported(dense):
    # tridiag(-1, 2, -1), order 199: eigenvalue 2 exactly (reference-values.md §4, j = 100)
    A = problems.laplacian_1d(199)
    with pytest.raises(SingularShiftError, match="shift 2.0"):
        ShiftInvert(A.toarray() if dense else A, 2.0)


def test_shift_at_rigid_body_modes_is_reported():
    # A free-floating plate: K is singular (rigid-body modes, common practice), shift 0 must fail.
    K, M = problems.bracket_plate(10, 5, clamped=False)
    with pytest.raises(SingularShiftError, match="shift 0.0"):
        ShiftInvert(K, 0.0, M)
    # Stepping off the singular point works and the rigid-body modes come back as nu = 1/(0 - sigma).
    sigma = -1.0e3
    S = ShiftInvert(K, sigma, M)
    R = problems.bracket_plate_rigid_modes(10, 5)
    assert np.linalg.norm(S @ R - R / (0.0 - sigma)) <= 1e-8 * np.linalg.norm(R / sigma)


def test_shift_at_exact_eigenvalue_of_pencil_is_reported():
    # String pair at its first closed-form eigenvalue (reference-values.md §10) in floating point.
    n = 31
    K, M = problems.string_pair(n)
    lam = problems.string_pair_values(n)[15]   # theta = pi/2: lambda = 3/h^2 exactly representable
    with pytest.raises(SingularShiftError):
        ShiftInvert(K, lam, M)


def test_user_solver_callable_and_operator():
    K, M = problems.string_pair(50)
    sigma = 77.0
    lu = spla.splu(sp.csc_matrix(K - sigma * M))
    reference = ShiftInvert(K, sigma, M)
    x = np.random.default_rng(1).standard_normal(50)
    S1 = ShiftInvert(K, sigma, M, solver=lu.solve)
    S2 = ShiftInvert(spla.aslinearoperator(K), sigma, M,
                     solver=spla.LinearOperator((50, 50), matvec=lu.solve, dtype=float))
    assert S1.factorization["kind"] == "user solver"
    assert np.allclose(S1 @ x, reference @ x, rtol=1e-12, atol=0)
    assert np.allclose(S2 @ x, reference @ x, rtol=1e-12, atol=0)
    X = np.column_stack([x, 2 * x])
    assert np.allclose(S1 @ X, reference @ X, rtol=1e-12, atol=0)


def test_user_solver_returning_nonfinite_is_reported():
    K, M = problems.string_pair(10)
    S = ShiftInvert(K, 3.0, M, solver=lambda b: b / 0.0)
    with pytest.raises(SingularShiftError, match="non-finite"):
        with np.errstate(divide="ignore", invalid="ignore"):
            S @ np.ones(10)


def test_bad_input():
    A = problems.laplacian_1d(6)
    with pytest.raises(ValueError, match="square"):
        ShiftInvert(np.ones((3, 4)), 0.0)
    with pytest.raises(ValueError, match="not symmetric"):
        ShiftInvert(sp.csr_matrix(np.triu(np.ones((4, 4)))), 0.5)
    with pytest.raises(ValueError, match="finite"):
        ShiftInvert(A, np.nan)
    with pytest.raises(ValueError, match="NaN"):
        ShiftInvert(np.array([[1.0, np.inf], [np.inf, 1.0]]), 0.5)
    with pytest.raises(ValueError, match="order"):
        ShiftInvert(A, 0.5, M=sp.identity(5))
    with pytest.raises(ValueError, match="LinearOperator"):
        ShiftInvert(spla.aslinearoperator(A), 0.5)
    with pytest.raises(ValueError, match="solver"):
        ShiftInvert(A, 0.5, solver=42)
