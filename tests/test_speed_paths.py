"""The fast paths of the solver: compiled CSR products, threads, partial reorthogonalization.

Every check is against something outside the fast path: SciPy's own product,
the generic (LinearOperator) path, closed forms from reference-values.md, and
explicitly computed inner products of the basis.
"""
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

import lanqr
import lanqr.lanczos
import lanqr.restart
from lanqr.operators import SymmetricOperator, as_operator
from lanqr.problems import heisenberg_ring, laplacian_grid, laplacian_grid_values
from lanqr.restart import thick_restart_lanczos
from lanqr.vecops import CsrProduct
from lanqr.vectorspace import VectorSpace

EPS = np.finfo(float).eps


def _threaded_operator(A, n_threads):
    # serial_below=0 forces the threaded kernels even for a small matrix,
    # so two threads really run (the default keeps small products serial).
    prod = CsrProduct(A, n_threads=n_threads, serial_below=0)
    return SymmetricOperator(
        A.shape[0], lambda X: prod.matvec(X) if X.ndim == 1 else prod.matmat(X),
        "forced threads", matrix=A, apply_dot=prod.matvec_dot, n_threads=n_threads), prod


@pytest.mark.parametrize("reorthogonalization", ["full", "partial"])
def test_one_and_two_threads_give_the_same_eigenvalues(reorthogonalization):
    # reference-values.md §4: 2-D Dirichlet Laplacian, closed form mu_j + mu_k.
    A = laplacian_grid((40, 40))
    tol = 1e-9
    exact = laplacian_grid_values((40, 40), 6)
    values = {}
    for threads in (1, 2):
        op, prod = _threaded_operator(A, threads)
        assert prod.n_threads == threads
        res = lanqr.lowest(op, 6, tol=tol, seed=3, reorthogonalization=reorthogonalization)
        assert res.all_converged and np.all(res.residuals <= tol)
        np.testing.assert_allclose(res.values, exact, rtol=tol, atol=0)
        values[threads] = res.values
    np.testing.assert_allclose(values[1], values[2], rtol=tol, atol=0)


def test_two_threads_above_the_serial_threshold_agree_with_one_thread():
    # The ring of 18 sites has 512k stored entries, above SERIAL_BELOW_NNZ, so
    # n_threads=2 really takes the threaded product through as_operator.
    # reference-values.md §6: E0(18) = -8.0227490870337570473 (exact diagonalisation).
    H = heisenberg_ring(18)
    tol = 1e-10
    op1, op2 = as_operator(H, n_threads=1), as_operator(H, n_threads=2)
    assert (op1.n_threads, op2.n_threads) == (1, 2)
    r1 = lanqr.lowest(op1, 1, tol=tol, seed=0)
    r2 = lanqr.lowest(op2, 1, tol=tol, seed=0)
    assert abs(r1.values[0] - (-8.0227490870337570473)) <= tol * 8.03
    assert abs(r2.values[0] - r1.values[0]) <= tol * 8.03
    assert r1.residuals[0] <= tol and r2.residuals[0] <= tol


@pytest.mark.parametrize("convert", [sp.csr_matrix, sp.csr_array, sp.coo_matrix, sp.csc_matrix])
def test_sparse_input_takes_the_compiled_product(convert):
    A = convert(laplacian_grid((15, 17)))
    op = as_operator(A)
    assert "compiled" in op.kind
    x = np.random.default_rng(0).standard_normal(op.n)
    # Bitwise SciPy's product (same summation order per row): SciPy as reference.
    assert np.array_equal(op.apply(x), sp.csr_matrix(A) @ x)
    y, alpha = op.apply_dot(x)
    assert np.array_equal(y, sp.csr_matrix(A) @ x)
    assert abs(alpha - x @ y) <= 1e-13 * abs(x) @ abs(y)
    X = np.asfortranarray(np.random.default_rng(1).standard_normal((op.n, 3)))
    np.testing.assert_allclose(op.apply_block(X), sp.csr_matrix(A) @ X, rtol=1e-14, atol=1e-14)
    assert op.applications == 5


def test_other_inputs_keep_their_own_products():
    A = laplacian_grid((10, 10))
    assert "compiled" not in as_operator(A.toarray()).kind
    assert "compiled" not in as_operator(spla.aslinearoperator(A)).kind


@pytest.mark.parametrize("side", ["lowest", "highest"])
def test_csr_path_agrees_with_generic_path(side):
    # reference-values.md §4: closed form for the 2-D Laplacian 30 x 24.
    A = laplacian_grid((30, 24))
    tol = 1e-9
    fast = getattr(lanqr, side)(A, 8, tol=tol, seed=5)
    generic = getattr(lanqr, side)(spla.aslinearoperator(A), 8, tol=tol, seed=5)
    exact = laplacian_grid_values((30, 24), 8, highest=(side == "highest"))
    np.testing.assert_allclose(fast.values, exact, rtol=tol, atol=0)
    np.testing.assert_allclose(generic.values, exact, rtol=tol, atol=0)
    np.testing.assert_allclose(fast.values, generic.values, rtol=tol, atol=0)
    assert np.all(fast.residuals <= tol) and np.all(generic.residuals <= tol)


def _run(A, k, strategy, max_restarts=200, **kw):
    n = A.shape[0]
    return thick_restart_lanczos(lambda x: A @ x, VectorSpace(n), n, k, "lowest", tol=1e-10,
                                 basis=40, max_restarts=max_restarts, rng=np.random.default_rng(0),
                                 reorthogonalization=strategy, measure_orthogonality=True, **kw)


def test_partial_reorthogonalization_keeps_the_basis_semi_orthogonal():
    # Orthogonality measured explicitly (max |Q^T Q - I| of the whole basis
    # before every restart), not estimated.
    A = laplacian_grid((40, 40))
    out = _run(A, 4, "partial")
    stats = out["reorthogonalization"]
    assert out["orthogonality"] <= np.sqrt(EPS)
    # It is partial: most steps skip the Gram-Schmidt against the active basis.
    assert stats["reorthogonalizations"] < 0.5 * stats["steps"]
    # reference-values.md §4: closed form.
    exact = laplacian_grid_values((40, 40), 4)
    np.testing.assert_allclose(out["values"], exact, rtol=1e-9, atol=0)
    full = _run(A, 4, "full")
    assert full["orthogonality"] <= 1e3 * EPS


def test_without_reorthogonalization_orthogonality_is_lost(monkeypatch):
    # The check above can fail: with the threshold at infinity nothing but the
    # locked vectors is projected out, and the plain Lanczos basis loses
    # orthogonality as Ritz values converge (Paige; common practice).
    monkeypatch.setattr(lanqr.lanczos, "PARTIAL_THRESHOLD", np.inf)
    A = laplacian_grid((40, 40))
    out = _run(A, 4, "partial", max_restarts=8, verify=False)
    assert out["orthogonality"] > 1e-4


def test_first_cycle_raises_the_partial_threshold(monkeypatch):
    # The ground state of the ring lies at |theta| ~ ||A||, so the locking
    # threshold (tol |theta|) lets the partial threshold rise above eps^(3/4)
    # from the first cycle on; the basis must stay semi-orthogonal (measured)
    # and the energy right.
    H = heisenberg_ring(14)
    n = H.shape[0]

    def run():
        return thick_restart_lanczos(lambda x: H @ x, VectorSpace(n), n, 2, "lowest",
                                     tol=1e-8, basis=40, max_restarts=100,
                                     rng=np.random.default_rng(3), reorthogonalization="partial",
                                     measure_orthogonality=True)
    early = run()
    monkeypatch.setattr(lanqr.restart, "EARLY_ALLOW_STEPS", 10**9)
    late = run()
    assert (early["reorthogonalization"]["reorthogonalizations"]
            < late["reorthogonalization"]["reorthogonalizations"])
    for out in (early, late):
        assert out["orthogonality"] <= np.sqrt(EPS)
        # reference-values.md §6: E0(14) = -6.2635495335470370226 (exact diagonalisation
        # and Bethe ansatz).
        assert abs(out["values"][0] - (-6.2635495335470370226)) <= 1e-8 * 6.3
        X = out["vectors"]
        # Returned vectors are orthonormal to rounding whatever the threshold.
        assert np.abs(X.T @ X - np.eye(2)).max() <= 100 * EPS
        R = H @ X - X * out["values"]
        assert np.all(np.linalg.norm(R, axis=0) <= 1e-8 * np.abs(out["values"]))


def test_loosest_partial_threshold_keeps_semi_orthogonality():
    # tol 1e-5 at |theta| ~ ||A|| lets the threshold reach its cap, sqrt(eps):
    # the signed estimates are tight (not 10^3 too large), so this is where
    # a too-optimistic estimate would show.  Measured explicitly.
    H = heisenberg_ring(14)
    n = H.shape[0]
    out = thick_restart_lanczos(lambda x: H @ x, VectorSpace(n), n, 4, "lowest", tol=1e-5,
                                basis=30, max_restarts=300, rng=np.random.default_rng(0),
                                reorthogonalization="partial", measure_orthogonality=True)
    assert out["orthogonality"] <= np.sqrt(EPS)
    # reference-values.md §6: E0(14) = -6.2635495335470370226.
    assert abs(out["values"][0] - (-6.2635495335470370226)) <= 1e-5 * 6.3


def test_partial_and_full_agree_on_a_clustered_spectrum():
    # reference-values.md §4: 22 x 22 grid (N + 1 = 23 prime), doubles in the spectrum.
    A = laplacian_grid((22, 22))
    tol = 1e-8
    exact = laplacian_grid_values((22, 22), 10, highest=True)
    for strategy in ("full", "partial"):
        res = lanqr.highest(A, 10, tol=tol, seed=1, reorthogonalization=strategy)
        assert np.all(res.residuals <= tol)
        np.testing.assert_allclose(res.values, exact, rtol=tol, atol=0)
        assert np.abs(res.vectors.T @ res.vectors - np.eye(10)).max() < 1e-12


def test_bad_reorthogonalization_and_threads():
    A = laplacian_grid((20, 20))
    with pytest.raises(ValueError, match="reorthogonalization"):
        lanqr.lowest(A, 3, reorthogonalization="sometimes")
    with pytest.raises(ValueError, match="standard problems only"):
        lanqr.lowest(A, 3, M=sp.identity(400, format="csr"), reorthogonalization="partial")
    with pytest.raises(ValueError, match="n_threads"):
        as_operator(A, n_threads=0)
