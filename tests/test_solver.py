"""lanqr.lowest / lanqr.highest against closed forms, published values, LAPACK and eigsh."""
import threading
import warnings

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla

import lanqr
from lanqr.problems import (disjoint_paths_laplacian, heisenberg_ring, laplacian_1d_values,
                            laplacian_grid, laplacian_grid_values, random_sparse_symmetric)

EPS = np.finfo(float).eps


def _check_pairs(A, res, tol):
    """Explicit residuals <= tol (recomputed here), orthonormal vectors."""
    X = res.vectors
    assert res.all_converged
    assert np.all(res.residuals <= tol)
    # Recompute the residuals independently with SciPy's sparse product.
    R = A @ X - X * res.values
    anorm = max(res.info.get("norm_estimate", 0.0), np.max(np.abs(res.values)))
    floor = 100 * EPS * anorm / tol
    rel = np.linalg.norm(R, axis=0) / np.maximum(np.abs(res.values), floor)
    assert np.all(rel <= tol * (1 + 1e-6))
    assert np.linalg.norm(X.T @ X - np.eye(X.shape[1])) <= 1e-10
    assert np.all(np.diff(res.values) >= 0)


@pytest.mark.parametrize("shape", [(22, 22), (12, 12, 12)])
@pytest.mark.parametrize("side", ["lowest", "highest"])
def test_laplacian_closed_form_with_multiplicities(shape, side):
    # reference-values.md §4: eigenvalues mu_j + mu_k (+ mu_l), mu_j = 4 sin^2(j pi/(2(N+1)));
    # N = 22 (N+1 prime) and N = 12 have doubles and triples.  All copies, none twice.
    A = laplacian_grid(shape)
    tol = 1e-8
    res = getattr(lanqr, side)(A, 10, tol=tol, seed=1)
    exact = laplacian_grid_values(shape, 10, highest=(side == "highest"))
    _check_pairs(A, res, tol)
    # A Ritz value with relative residual rho is within rho |theta| of an
    # eigenvalue (reference-values.md, general rules); with the right set the
    # sorted lists agree to that bound.
    np.testing.assert_allclose(res.values, exact, rtol=tol, atol=0)


def test_heisenberg_ring_16_ground_state():
    # reference-values.md §6: E0(16) = -7.1422963606167798639 (exact diagonalisation and
    # Bethe ansatz, both computed there).
    H = heisenberg_ring(16)
    res = lanqr.lowest(H, 1, tol=1e-10, seed=0)
    _check_pairs(H, res, 1e-10)
    assert abs(res.values[0] - (-7.1422963606167798639)) <= 1e-10 * 7.15


def test_graph_laplacian_components_give_zero_with_multiplicity():
    # reference-values.md §4 (graph Laplacians): a path P_n has spectrum
    # 4 sin^2(j pi/(2n)), j = 0..n-1, so four paths give 0 four times.
    lengths = [120, 150, 180, 210]
    A = disjoint_paths_laplacian(lengths)
    tol = 1e-8
    res = lanqr.lowest(A, 7, tol=tol, seed=2)
    _check_pairs(A, res, tol)
    exact = np.sort(np.concatenate([4 * np.sin(np.arange(m) * np.pi / (2 * m)) ** 2
                                    for m in lengths]))[:7]
    # Zero eigenvalues: accurate to the floor, c eps ||A|| (||A|| <= 4 by Gershgorin).
    np.testing.assert_allclose(res.values[:4], 0.0, atol=100 * EPS * 4)
    np.testing.assert_allclose(res.values[4:], exact[4:], rtol=tol)


@pytest.mark.parametrize("side", ["lowest", "highest"])
def test_indefinite_matrix_against_lapack(side):
    # Reference: LAPACK dense symmetric eigensolver (scipy.linalg.eigh).
    A = random_sparse_symmetric(600, 0.02, seed=5)
    tol = 1e-9
    res = getattr(lanqr, side)(A, 5, tol=tol, seed=3)
    _check_pairs(A, res, tol)
    w = scipy.linalg.eigvalsh(A.toarray())
    exact = w[:5] if side == "lowest" else w[-5:]
    assert res.values[0] < 0 if side == "lowest" else res.values[-1] > 0
    np.testing.assert_allclose(res.values, exact, rtol=tol, atol=0)


@pytest.mark.parametrize("scale", [1e-150, 1e150])
def test_scaled_problems_give_the_same_relative_results(scale):
    # reference-values.md §4 closed form; the tolerance is relative, so scaling A
    # must not change relative accuracy (no absolute floor).
    shape = (22, 22)
    A = laplacian_grid(shape) * scale
    tol = 1e-8
    res = lanqr.lowest(A, 6, tol=tol, seed=1)
    assert res.all_converged and np.all(res.residuals <= tol)
    exact = laplacian_grid_values(shape, 6) * scale
    np.testing.assert_allclose(res.values, exact, rtol=tol, atol=0)
    base = lanqr.lowest(laplacian_grid(shape), 6, tol=tol, seed=1)
    assert res.matvecs == base.matvecs
    assert np.linalg.norm(res.vectors.T @ res.vectors - np.eye(6)) <= 1e-10


def test_k_equal_one_and_n_minus_one():
    # Reference: LAPACK (scipy.linalg.eigvalsh) on the same matrix.
    A = random_sparse_symmetric(150, 0.05, seed=6)
    w = scipy.linalg.eigvalsh(A.toarray())
    r1 = lanqr.lowest(A, 1, seed=0)
    assert abs(r1.values[0] - w[0]) <= 1e-8 * abs(w[0])
    rn = lanqr.highest(A, 149, seed=0)
    np.testing.assert_allclose(rn.values, w[1:], rtol=1e-8, atol=1e-12 * np.max(np.abs(w)))
    assert rn.vectors.shape == (150, 149)
    big = laplacian_grid((30, 30))
    r = lanqr.highest(big, 1, seed=0)
    # reference-values.md §4 closed form.
    assert abs(r.values[0] - laplacian_grid_values((30, 30), 1, highest=True)[0]) <= 1e-8 * 8


@pytest.mark.parametrize("k", [0, -1, 400, 500])
def test_k_out_of_range(k):
    with pytest.raises(ValueError, match="k must"):
        lanqr.lowest(laplacian_grid((20, 20)), k)


@pytest.mark.parametrize("kw", [{"tol": 0.0}, {"tol": -1e-3}, {"tol": np.nan}, {"basis": 3}, {"basis": 9},
                                {"max_restarts": -1}, {"start": np.zeros(400)},
                                {"start": np.ones(7)}, {"start": np.full(400, np.nan)}])
def test_bad_arguments(kw):
    with pytest.raises(ValueError):
        lanqr.lowest(laplacian_grid((20, 20)), 5, **kw)


def test_bad_matrices():
    with pytest.raises(ValueError, match="square"):
        lanqr.lowest(np.ones((5, 6)), 1)
    with pytest.raises(ValueError, match="not symmetric"):
        lanqr.lowest(sp.random(300, 300, density=0.05, format="csr", random_state=1), 2)
    with pytest.raises(ValueError, match="complex"):
        lanqr.lowest(sp.identity(300, dtype=complex, format="csr"), 2)
    A = laplacian_grid((20, 20)).tolil()
    A[3, 3] = np.inf
    with pytest.raises(ValueError, match="NaN or Inf"):
        lanqr.lowest(A.tocsr(), 2)


def test_linear_operator_with_matvec_only_matches_sparse():
    A = laplacian_grid((25, 24))
    op = spla.LinearOperator(A.shape, matvec=lambda x: A @ x, dtype=np.float64)
    a = lanqr.lowest(A, 4, seed=7)
    b = lanqr.lowest(op, 4, seed=7)
    # reference-values.md §4 closed form for both.
    exact = laplacian_grid_values((25, 24), 4)
    np.testing.assert_allclose(a.values, exact, rtol=1e-8)
    np.testing.assert_allclose(b.values, exact, rtol=1e-8)
    assert np.all(b.residuals <= 1e-8)


def test_agreement_with_eigsh():
    # Reference: scipy.sparse.linalg.eigsh at a tight tolerance on the same matrix.
    A = random_sparse_symmetric(3000, 0.002, seed=8, diagonal_shift=0.5)
    tol = 1e-10
    res = lanqr.lowest(A, 6, tol=tol, seed=0)
    ref = np.sort(spla.eigsh(A, 6, which="SA", tol=1e-14)[0])
    _check_pairs(A, res, tol)
    np.testing.assert_allclose(res.values, ref, rtol=tol, atol=0)


def test_same_seed_same_result_bit_for_bit_and_threads():
    A = laplacian_grid((24, 20))
    a = lanqr.lowest(A, 5, seed=11)
    b = lanqr.lowest(A, 5, seed=11)
    assert np.array_equal(a.values, b.values)
    assert np.array_equal(a.vectors, b.vectors)
    assert a.matvecs == b.matvecs
    # Two threads solving two problems at once (no shared state).
    B = heisenberg_ring(12)
    out = {}

    def run(name, M, k):
        out[name] = lanqr.lowest(M, k, seed=11)

    ts = [threading.Thread(target=run, args=("A", A, 5)), threading.Thread(target=run, args=("B", B, 2))]
    for t in ts:
        t.start()
    for t in ts:
        t.join()
    assert np.array_equal(out["A"].values, a.values)
    assert np.array_equal(out["A"].vectors, a.vectors)
    # reference-values.md §6: E0(12) = -5.3873909174452059042.
    assert abs(out["B"].values[0] + 5.3873909174452059042) <= 1e-8 * 5.39


def test_non_convergence_is_flagged_with_a_warning():
    A = laplacian_grid((60, 60))
    with pytest.warns(lanqr.NotConvergedWarning, match="of 8 eigenpairs converged"):
        res = lanqr.lowest(A, 8, tol=1e-12, max_restarts=1, seed=0)
    assert len(res.values) == 8
    assert not res.all_converged
    assert res.restarts <= 1
    assert np.all(res.residuals[~res.converged] > 1e-12)


def test_invariant_subspace_breakdown_and_repeated_values():
    # A diagonal matrix with three distinct values: the Krylov space becomes
    # invariant after three steps (exact fact: minimal polynomial of degree 3),
    # and the lowest value has multiplicity 100.
    d = np.concatenate([np.full(100, 1.0), np.full(200, 2.0), np.full(200, 3.0)])
    A = sp.diags(d, format="csr")
    res = lanqr.lowest(A, 5, seed=0)
    np.testing.assert_allclose(res.values, 1.0, rtol=1e-12)
    assert res.all_converged
    assert np.linalg.norm(res.vectors.T @ res.vectors - np.eye(5)) <= 1e-10
    # The vectors lie in the eigenspace: zero outside the first 100 rows.
    assert np.max(np.abs(res.vectors[100:])) <= 1e-8


def test_start_vector_callback_history_and_repr():
    A = laplacian_grid((30, 30))
    calls = []
    # An exact eigenvector as start (reference-values.md §4: products of sines).
    i = np.arange(1, 31)
    u = np.sin(i * np.pi / 31)
    start = np.kron(u, u)
    res = lanqr.lowest(A, 1, seed=0, start=start, callback=calls.append)
    assert res.values[0] == pytest.approx(laplacian_grid_values((30, 30), 1)[0], rel=1e-12)
    calls.clear()
    res = lanqr.lowest(A, 4, seed=0, callback=calls.append)
    assert len(calls) == res.restarts
    assert all("ritz" in c and "estimates" in c for c in calls)
    assert len(res.history) >= 1 and "ritz" in res.history[0]
    text = repr(res)
    assert "4 pairs" in text and "eigenvalue" in text


def test_small_problem_uses_dense_path():
    # Reference: closed form of the 1-D Dirichlet Laplacian (reference-values.md §4).
    A = laplacian_grid(50)
    res = lanqr.lowest(A, 3)
    assert "dense" in res.method
    np.testing.assert_allclose(res.values, laplacian_1d_values(50)[:3], rtol=1e-12)
    assert np.all(res.residuals <= 1e-8)


def test_unfinished_verification_is_flagged():
    # 3-D Laplacian 12^3 (reference-values.md §4: triple eigenvalues): with too
    # few restarts the search for missed copies cannot finish; that is said.
    A = laplacian_grid((12, 12, 12))
    with pytest.warns(lanqr.NotConvergedWarning):
        res = lanqr.lowest(A, 10, basis=16, max_restarts=3, seed=0)
    assert res.info.get("verified") is False or not res.all_converged


def test_operator_returning_its_input_or_its_own_buffer():
    # A matvec may return its argument (the identity) or reuse one output
    # buffer; the solver must not update those arrays in place.  Exact facts:
    # the identity has eigenvalue 1 (n-fold); diag(1..n) has eigenvalues 1..n.
    n = 600

    class Identity:
        shape = (n, n)

        def matvec(self, x):
            return x

    res = lanqr.lowest(Identity(), 3, seed=0)
    np.testing.assert_allclose(res.values, 1.0, rtol=1e-14)
    assert np.linalg.norm(res.vectors.T @ res.vectors - np.eye(3)) <= 1e-10

    d = np.arange(1.0, n + 1)

    class Buffered:
        shape = (n, n)

        def __init__(self):
            self.buf = np.empty(n)

        def matvec(self, x):
            np.multiply(d, x, out=self.buf)
            return self.buf

    res = lanqr.lowest(Buffered(), 3, tol=1e-10, seed=0)
    np.testing.assert_allclose(res.values, [1.0, 2.0, 3.0], rtol=1e-10)
