"""Compiled vector kernels against SciPy's sparse products and NumPy/BLAS references.

Reference for every product check: SciPy's ``A @ x`` (``csr_matvec`` /
``csr_matvecs`` in scipy.sparse._sparsetools), which sums each row
sequentially over its stored entries; our kernel promises the same order,
so the comparisons are bitwise.  Gram-Schmidt checks compare with a NumPy
version of the same algorithm and with the orthogonality it must reach.
"""
import os
import subprocess
import sys
import threading

import numpy as np
import pytest
import scipy.sparse as sp

from lanqr import problems
from lanqr.vecops import (
    DGKS_ETA,
    CsrProduct,
    default_threads,
    orthogonalize,
    orthogonalize_block,
    recurrence_update,
    resolve_threads,
    rotate_basis,
)

EPS = np.finfo(float).eps
THREADS = [1, 2]


def _with_index_dtype(A, dtype):
    A = A.tocsr(copy=True)
    A.indptr = A.indptr.astype(dtype)
    A.indices = A.indices.astype(dtype)
    return A


def _empty_rows_matrix():
    rng = np.random.default_rng(5)
    A = sp.random(300, 300, density=0.02, random_state=rng, format="lil")
    A[10:60, :] = 0.0  # a run of empty rows
    A[299, :] = 0.0    # empty last row
    A = A.tocsr()
    A.eliminate_zeros()
    return A


def _unsorted_matrix():
    A = problems.random_sparse_symmetric(400, density=0.03, seed=3)
    A = A.tocsr(copy=True)
    rng = np.random.default_rng(4)
    for i in range(A.shape[0]):
        lo, hi = A.indptr[i], A.indptr[i + 1]
        perm = lo + rng.permutation(hi - lo)
        A.indices[lo:hi] = A.indices[perm]
        A.data[lo:hi] = A.data[perm]
    A.has_sorted_indices = False
    return A


def _duplicates_matrix():
    # COO with repeated (i, j) pairs converted without summing: CSR keeps the
    # duplicates and SciPy's product adds every stored entry.
    rng = np.random.default_rng(6)
    rows = rng.integers(0, 200, 3000)
    cols = rng.integers(0, 200, 3000)
    vals = rng.standard_normal(3000)
    order = np.argsort(rows, kind="stable")
    rows, cols, vals = rows[order], cols[order], vals[order]
    indptr = np.searchsorted(rows, np.arange(201)).astype(np.int32)
    A = sp.csr_matrix((vals, cols.astype(np.int32), indptr), shape=(200, 200))
    assert not A.has_canonical_format
    return A


MATRICES = {
    "laplacian_2d": lambda: problems.laplacian_grid((40, 50)),
    "laplacian_3d": lambda: problems.laplacian_grid((12, 10, 9)),
    "geometric_graph": lambda: problems.random_geometric_graph(3000, seed=1),
    "random_indefinite": lambda: problems.random_sparse_symmetric(500, density=0.02, seed=2),
    "empty_rows": _empty_rows_matrix,
    "unsorted_indices": _unsorted_matrix,
    "duplicate_entries": _duplicates_matrix,
    "rectangular": lambda: sp.random(70, 130, density=0.1, random_state=np.random.default_rng(7),
                                     format="csr"),
    "one_by_one": lambda: sp.csr_matrix(np.array([[3.5]])),
    "all_zero": lambda: sp.csr_matrix((50, 50)),
}


@pytest.fixture(params=sorted(MATRICES), scope="module")
def matrix(request):
    return MATRICES[request.param]()


@pytest.mark.parametrize("index_dtype", [np.int32, np.int64])
@pytest.mark.parametrize("n_threads", THREADS)
@pytest.mark.parametrize("schedule", ["static", "dynamic"])
def test_matvec_bitwise_equal_to_scipy(matrix, index_dtype, n_threads, schedule):
    A = _with_index_dtype(matrix, index_dtype)
    x = np.random.default_rng(0).standard_normal(A.shape[1])
    product = CsrProduct(A, n_threads=n_threads, schedule=schedule, serial_below=0)
    assert product._indices.dtype == index_dtype
    # Reference: SciPy's csr_matvec, same summation order -> identical bits.
    np.testing.assert_array_equal(product.matvec(x), A @ x)


@pytest.mark.parametrize("n_threads", THREADS)
@pytest.mark.parametrize("k", [1, 4, 7])
@pytest.mark.parametrize("order", ["C", "F"])
def test_matmat_bitwise_equal_to_scipy(matrix, n_threads, k, order):
    X = np.asarray(np.random.default_rng(1).standard_normal((matrix.shape[1], k)), order=order)
    product = CsrProduct(matrix, n_threads=n_threads, serial_below=0)
    Y = product.matmat(X)
    # Reference: SciPy's csr_matvecs (an axpy per stored entry, sequential per row).
    np.testing.assert_array_equal(Y, matrix @ X)
    if k > 1:
        assert (Y.flags.f_contiguous if order == "F" else Y.flags.c_contiguous)


def test_zero_by_zero_and_zero_columns():
    empty = sp.csr_matrix((0, 0))
    product = CsrProduct(empty)
    assert product.matvec(np.empty(0)).shape == (0,)
    assert product.matmat(np.empty((0, 3))).shape == (0, 3)
    y, alpha = product.matvec_dot(np.empty(0))
    assert y.shape == (0,) and alpha == 0.0
    tall = sp.csr_matrix((5, 0))
    # Reference: SciPy gives zeros for a product with no columns.
    np.testing.assert_array_equal(CsrProduct(tall).matvec(np.empty(0)), tall @ np.empty(0))
    np.testing.assert_array_equal(CsrProduct(tall).matmat(np.empty((0, 2))),
                                  tall @ np.empty((0, 2)))


def test_large_matrix_threads_agree_bitwise():
    # Above the serial threshold, with the default thread count.
    A = problems.laplacian_grid((300, 300))
    x = np.random.default_rng(2).standard_normal(A.shape[1])
    ref = A @ x  # reference: SciPy
    for n_threads in (1, 2, 3):
        np.testing.assert_array_equal(CsrProduct(A, n_threads=n_threads).matvec(x), ref)


@pytest.mark.parametrize("n_threads", THREADS)
def test_matvec_dot(matrix, n_threads):
    if matrix.shape[0] != matrix.shape[1]:
        with pytest.raises(ValueError, match="square"):
            CsrProduct(matrix).matvec_dot(np.ones(matrix.shape[1]))
        return
    x = np.random.default_rng(3).standard_normal(matrix.shape[1])
    y, alpha = CsrProduct(matrix, n_threads=n_threads, serial_below=0).matvec_dot(x)
    ref = matrix @ x  # reference: SciPy product, NumPy dot
    np.testing.assert_array_equal(y, ref)
    # A sum of n terms in a different order: |error| <= n eps sum|x_i y_i| (common practice).
    bound = len(x) * EPS * np.abs(x * ref).sum()
    assert abs(alpha - x @ ref) <= bound


def test_fused_reductions_do_not_depend_on_threads():
    A = problems.laplacian_grid((150, 140))  # 21000 rows: several reduction chunks
    x = np.random.default_rng(10).standard_normal(A.shape[1])
    results = [CsrProduct(A, n_threads=t, serial_below=0).matvec_dot(x) for t in (1, 2, 3)]
    for y, alpha in results[1:]:
        np.testing.assert_array_equal(y, results[0][0])
        assert alpha == results[0][1]
    rng = np.random.default_rng(11)
    w0, v, u = rng.standard_normal((3, 50_000))
    norms = []
    for t in (1, 2, 3):
        w = w0.copy()
        norms.append(recurrence_update(w, v, u, 0.3, 0.2, n_threads=t, serial_below=0))
    assert norms[0] == norms[1] == norms[2]


def test_input_vector_copied_when_needed():
    A = problems.laplacian_grid((20, 20))
    product = CsrProduct(A)
    rng = np.random.default_rng(4)
    x64 = rng.standard_normal(2 * A.shape[1])
    strided = x64[::2]  # non-contiguous: copied
    np.testing.assert_array_equal(product.matvec(strided), A @ np.ascontiguousarray(strided))
    x32 = x64[: A.shape[1]].astype(np.float32)  # other dtype: copied to float64
    np.testing.assert_array_equal(product.matvec(x32), A @ x32.astype(np.float64))
    ints = np.arange(A.shape[1])
    np.testing.assert_array_equal(product.matvec(ints), A @ ints.astype(np.float64))
    readonly = x64[: A.shape[1]].copy()
    readonly.flags.writeable = False
    np.testing.assert_array_equal(product.matvec(readonly), A @ readonly)
    X = rng.standard_normal((A.shape[1], 8))[:, ::2]  # neither C nor F: copied
    np.testing.assert_array_equal(product.matmat(X), A @ X)


def test_matrix_converted_once():
    A = problems.laplacian_grid((15, 15)).astype(np.float32)
    x = np.random.default_rng(5).standard_normal(A.shape[1])
    # Reference: SciPy on the float64 matrix.
    np.testing.assert_array_equal(CsrProduct(A).matvec(x), A.astype(np.float64) @ x)
    mixed = problems.laplacian_grid((15, 15))
    mixed.indptr = mixed.indptr.astype(np.int64)  # indices stay int32
    product = CsrProduct(mixed)
    assert product._indices.dtype == np.int64
    np.testing.assert_array_equal(product.matvec(x), mixed @ x)


def test_out_argument():
    A = problems.laplacian_grid((20, 20))
    product = CsrProduct(A)
    x = np.random.default_rng(6).standard_normal(A.shape[1])
    out = np.empty(A.shape[0])
    assert product.matvec(x, out=out) is out
    np.testing.assert_array_equal(out, A @ x)
    with pytest.raises(ValueError, match="overlap"):
        product.matvec(x, out=x)
    with pytest.raises(ValueError, match="float64"):
        product.matvec(x, out=np.empty(A.shape[0], dtype=np.float32))
    with pytest.raises(ValueError, match="shape"):
        product.matvec(x, out=np.empty(A.shape[0] + 1))
    with pytest.raises(ValueError, match="contiguous"):
        product.matvec(x, out=np.empty(2 * A.shape[0])[::2])


@pytest.mark.parametrize(
    "make, message",
    [
        (lambda: problems.laplacian_grid((5, 5)).tocsc(), "CSR"),
        (lambda: problems.laplacian_grid((5, 5)).toarray(), "CSR"),
        (lambda: problems.laplacian_grid((5, 5)).astype(np.complex128), "real"),
        (lambda: sp.csr_matrix(np.array([[1.0, np.nan], [0.0, 1.0]])), "NaN or Inf"),
        (lambda: sp.csr_matrix(np.array([[1.0, np.inf], [0.0, 1.0]])), "NaN or Inf"),
    ],
)
def test_bad_matrix_rejected(make, message):
    with pytest.raises(ValueError, match=message):
        CsrProduct(make())


def test_malformed_indices_rejected():
    A = problems.laplacian_grid((5, 5))
    bad = A.copy()
    bad.indices = bad.indices.copy()
    bad.indices[3] = 25  # past the last column: would read out of bounds
    with pytest.raises(ValueError, match="column index out of range"):
        CsrProduct(bad)
    bad = A.copy()
    bad.indices = bad.indices.copy()
    bad.indices[0] = -1
    with pytest.raises(ValueError, match="column index out of range"):
        CsrProduct(bad)
    bad = A.copy()
    bad.indptr = bad.indptr.copy()
    bad.indptr[3], bad.indptr[4] = bad.indptr[4], bad.indptr[3]
    with pytest.raises(ValueError, match="non-decreasing"):
        CsrProduct(bad)


@pytest.mark.parametrize(
    "x, message",
    [
        (np.ones(24), "shape"),
        (np.ones((25, 1)), "shape"),
        (np.ones(25, dtype=complex), "real"),
    ],
)
def test_bad_vector_rejected(x, message):
    with pytest.raises(ValueError, match=message):
        CsrProduct(problems.laplacian_grid((5, 5))).matvec(x)


def test_bad_block_rejected():
    product = CsrProduct(problems.laplacian_grid((5, 5)))
    with pytest.raises(ValueError, match="shape"):
        product.matmat(np.ones((24, 2)))
    with pytest.raises(ValueError, match="shape"):
        product.matmat(np.ones(25))
    with pytest.raises(ValueError, match="real"):
        product.matmat(np.ones((25, 2), dtype=complex))


@pytest.mark.parametrize("bad", [0, -1, 1.5, "2", True])
def test_bad_thread_count_rejected(bad):
    with pytest.raises(ValueError, match="n_threads"):
        resolve_threads(bad)
    with pytest.raises(ValueError, match="n_threads"):
        CsrProduct(problems.laplacian_grid((5, 5)), n_threads=bad)


def test_bad_schedule_rejected():
    with pytest.raises(ValueError, match="schedule"):
        CsrProduct(problems.laplacian_grid((5, 5)), schedule="guided")


def test_default_threads_respects_omp_num_threads():
    code = "from lanqr.vecops import default_threads; print(default_threads())"
    env = dict(os.environ, OMP_NUM_THREADS="1")
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                         text=True, check=True)
    assert out.stdout.strip().splitlines()[-1] == "1"  # editable builds may log first
    assert default_threads() >= 1
    assert resolve_threads(None) == default_threads()


def test_concurrent_products_from_two_threads():
    # No shared mutable state: two Python threads, two matrices, at once.
    mats = [problems.laplacian_grid((200, 150)), problems.random_geometric_graph(20000, seed=3)]
    vecs = [np.random.default_rng(i).standard_normal(m.shape[1]) for i, m in enumerate(mats)]
    refs = [m @ v for m, v in zip(mats, vecs)]  # reference: SciPy
    products = [CsrProduct(m, n_threads=2, serial_below=0) for m in mats]
    failures = []

    def work(i):
        for _ in range(20):
            if not np.array_equal(products[i].matvec(vecs[i]), refs[i]):
                failures.append(i)

    threads = [threading.Thread(target=work, args=(i,)) for i in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not failures


# ---------------------------------------------------------------------------
# Fused recurrence update
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("n_threads", THREADS)
@pytest.mark.parametrize("with_prev", [True, False])
def test_recurrence_update(n_threads, with_prev):
    rng = np.random.default_rng(8)
    n = 10_001
    w, v, v_prev = rng.standard_normal((3, n))
    alpha, beta = 0.7, -1.3
    # Reference: NumPy, the same two subtractions in the same order per entry.
    ref = (w - alpha * v) - beta * v_prev if with_prev else w - alpha * v
    norm = recurrence_update(w, v, v_prev if with_prev else None, alpha, beta,
                             n_threads=n_threads, serial_below=0)
    np.testing.assert_array_equal(w, ref)
    assert abs(norm - np.linalg.norm(ref)) <= n * EPS * np.linalg.norm(ref)


def test_recurrence_update_rejects_bad_w():
    v = np.ones(10)
    with pytest.raises(ValueError, match="float64"):
        recurrence_update(np.ones(10, dtype=np.float32), v, None, 1.0, 0.0)
    with pytest.raises(ValueError, match="contiguous"):
        recurrence_update(np.ones(20)[::2], v, None, 1.0, 0.0)
    with pytest.raises(ValueError, match="shape"):
        recurrence_update(np.ones(10), np.ones(9), None, 1.0, 0.0)


# ---------------------------------------------------------------------------
# Gram-Schmidt through BLAS
# ---------------------------------------------------------------------------

def _orthonormal_basis(n, j, capacity=None, seed=0):
    """Fortran n x capacity array whose first j columns are orthonormal."""
    capacity = capacity or j
    store = np.zeros((n, capacity), order="F")
    q, _ = np.linalg.qr(np.random.default_rng(seed).standard_normal((n, j)))
    store[:, :j] = q
    return store


def _cgs_dgks_numpy(V, w, eta=DGKS_ETA, max_passes=2):
    """Plain NumPy version of the same algorithm (the reference)."""
    w = w.copy()
    coef = np.zeros(V.shape[1])
    before = np.linalg.norm(w)
    passes = 0
    while passes < max_passes:
        c = V.T @ w
        w -= V @ c
        coef += c
        passes += 1
        after = np.linalg.norm(w)
        if after >= eta * before:
            break
        before = after
    return w, coef, after, passes


@pytest.mark.parametrize("n, j", [(2000, 1), (2000, 30), (500, 120), (1, 1)])
def test_orthogonalize_matches_numpy(n, j):
    store = _orthonormal_basis(n, j, capacity=j + 7)
    V = store[:, :j]  # leading block of a preallocated basis
    w = np.random.default_rng(1).standard_normal(n)
    ref_w, ref_c, ref_norm, ref_passes = _cgs_dgks_numpy(V, w)
    proj = orthogonalize(V, w)
    assert proj.passes == ref_passes
    scale = np.linalg.norm(ref_c) + ref_norm
    np.testing.assert_allclose(proj.coefficients, ref_c, rtol=0, atol=10 * n * EPS * scale)
    np.testing.assert_allclose(w, ref_w, rtol=0, atol=10 * n * EPS * scale)
    assert abs(proj.norm - np.linalg.norm(w)) <= n * EPS * proj.norm
    # Orthogonality reached: ||V^T w|| ~ eps ||w_in|| (common practice for CGS2).
    assert np.linalg.norm(V.T @ w) <= 10 * np.sqrt(n) * EPS * proj.norm_before


def test_orthogonalize_dgks_second_pass():
    n, j = 3000, 40
    V = _orthonormal_basis(n, j)
    rng = np.random.default_rng(2)
    # Mostly inside span(V): a single pass leaves rounding-sized components of
    # relative size eps * ||w|| / ||w_perp|| ~ 1e-8 along V.
    w = V @ rng.standard_normal(j) + 1e-8 * rng.standard_normal(n)
    one = w.copy()
    single = orthogonalize(V, one, max_passes=1)
    assert single.passes == 1
    double = orthogonalize(V, w)
    assert double.passes == 2
    rel_single = np.linalg.norm(V.T @ one) / single.norm
    rel_double = np.linalg.norm(V.T @ w) / double.norm
    assert rel_double <= 10 * np.sqrt(n) * EPS
    assert rel_double < rel_single


def test_orthogonalize_in_span_reports_breakdown():
    n, j = 1000, 10
    V = _orthonormal_basis(n, j)
    w = V @ np.arange(1.0, j + 1)
    proj = orthogonalize(V, w, max_passes=2)
    assert proj.passes == 2
    assert proj.norm <= 10 * n * EPS * proj.norm_before


def test_orthogonalize_row_block_of_larger_array():
    # V[:n, :j] of a taller Fortran array: leading dimension larger than n.
    store = np.asfortranarray(np.random.default_rng(3).standard_normal((900, 12)))
    V = store[:600, :9]
    w = np.random.default_rng(4).standard_normal(600)
    ref_w, ref_c, _, _ = _cgs_dgks_numpy(V, w, max_passes=1)
    proj = orthogonalize(V, w, max_passes=1)
    scale = np.linalg.norm(ref_c) + np.linalg.norm(ref_w)
    np.testing.assert_allclose(proj.coefficients, ref_c, rtol=0, atol=100 * 600 * EPS * scale)
    np.testing.assert_allclose(w, ref_w, rtol=0, atol=100 * 600 * EPS * scale)


def test_orthogonalize_empty_basis_and_out():
    w = np.array([3.0, 4.0])
    proj = orthogonalize(np.empty((2, 0), order="F"), w)
    assert proj.passes == 0 and proj.norm == 5.0 and proj.coefficients.shape == (0,)
    V = _orthonormal_basis(50, 5)
    coef = np.empty(5)
    w = np.random.default_rng(5).standard_normal(50)
    assert orthogonalize(V, w, coefficients=coef).coefficients is coef


def test_orthogonalize_rejects_bad_layout():
    V = np.ascontiguousarray(_orthonormal_basis(100, 5))
    w = np.ones(100)
    with pytest.raises(ValueError, match="column-major"):
        orthogonalize(V, w)
    with pytest.raises(ValueError, match="length"):
        orthogonalize(np.asfortranarray(V), np.ones(99))
    with pytest.raises(ValueError, match="float64"):
        orthogonalize(np.asfortranarray(V), np.ones(100, dtype=np.float32))
    with pytest.raises(ValueError, match="eta"):
        orthogonalize(np.asfortranarray(V), w, eta=1.5)
    with pytest.raises(ValueError, match="max_passes"):
        orthogonalize(np.asfortranarray(V), w, max_passes=0)
    store = np.asfortranarray(np.ones((100, 6)))
    with pytest.raises(ValueError, match="overlap"):
        orthogonalize(store[:, :5], store[:, 4])
    # The next column of the same array is the usual place for w: allowed.
    store[:, :5] = _orthonormal_basis(100, 5)
    store[:, 5] = np.random.default_rng(9).standard_normal(100)
    orthogonalize(store[:, :5], store[:, 5])
    assert np.linalg.norm(store[:, :5].T @ store[:, 5]) <= 100 * EPS * np.linalg.norm(store[:, 5])


def test_orthogonalize_block_matches_numpy():
    n, j, b = 2500, 25, 6
    V = _orthonormal_basis(n, j, capacity=j + 3)[:, :j]
    rng = np.random.default_rng(6)
    W = np.asfortranarray(rng.standard_normal((n, b)))
    W[:, 2] = V @ rng.standard_normal(j) + 1e-9 * rng.standard_normal(n)  # needs DGKS
    ref = W.copy()
    ref_c = np.zeros((j, b))
    for _ in range(2):  # reference: NumPy block CGS, two passes
        c = V.T @ ref
        ref -= V @ c
        ref_c += c
    proj = orthogonalize_block(V, W)
    assert proj.passes == 2
    scale = np.abs(ref_c).max()
    np.testing.assert_allclose(proj.coefficients, ref_c, rtol=0, atol=10 * n * EPS * scale)
    np.testing.assert_allclose(W, ref, rtol=0, atol=10 * n * EPS * scale)
    # Orthogonality reached, column by column (common practice for CGS2).
    assert np.all(np.linalg.norm(V.T @ W, axis=0) <= 10 * np.sqrt(n) * EPS * proj.norm_before)
    np.testing.assert_allclose(proj.norm, np.linalg.norm(W, axis=0), rtol=1e-14)


@pytest.mark.parametrize("chunk_rows", [1, 97, 4096])
@pytest.mark.parametrize("m, k", [(30, 10), (30, 30), (5, 1)])
def test_rotate_basis_matches_numpy(chunk_rows, m, k):
    n, capacity = 1000, 34
    store = np.asfortranarray(np.random.default_rng(7).standard_normal((n, capacity)))
    Y = np.random.default_rng(8).standard_normal((m, k))
    ref = store[:, :m] @ Y  # reference: NumPy/BLAS out of place
    untouched = store[:, k:].copy()
    rotate_basis(store, Y, chunk_rows=chunk_rows)
    np.testing.assert_allclose(store[:, :k], ref, rtol=0, atol=10 * m * EPS * np.abs(ref).max())
    np.testing.assert_array_equal(store[:, k:], untouched)


@pytest.mark.parametrize("chunk_rows", [1, 97, 4096])
@pytest.mark.parametrize("m, k", [(30, 10), (5, 1)])
def test_rotate_basis_gram_matches_numpy(chunk_rows, m, k):
    n = 1000
    store = np.asfortranarray(np.random.default_rng(7).standard_normal((n, 34)))
    Y = np.random.default_rng(8).standard_normal((m, k))
    probe = np.random.default_rng(9).standard_normal(n)
    _, gram = rotate_basis(store, Y, chunk_rows=chunk_rows, probe=probe)
    W = store[:, :k]
    # Reference: NumPy/BLAS inner products of the rotated columns.
    ref = np.vstack([np.column_stack([W.T @ W[:, -1], W.T @ probe]),
                     [probe @ W[:, -1], probe @ probe]])
    np.testing.assert_allclose(gram, ref, rtol=0, atol=10 * n * EPS * np.abs(ref).max())
    with pytest.raises(ValueError, match="probe"):
        rotate_basis(store, Y, probe=probe[:-1])


def test_rotate_basis_rejects_bad_input():
    store = np.asfortranarray(np.ones((10, 5)))
    with pytest.raises(ValueError, match="k <= m"):
        rotate_basis(store, np.ones((6, 2)))
    with pytest.raises(ValueError, match="k <= m"):
        rotate_basis(store, np.ones((2, 3)))
    with pytest.raises(ValueError, match="column-major"):
        rotate_basis(np.ones((10, 5)), np.ones((5, 2)))


@pytest.mark.parametrize("seed", range(12))
def test_random_shapes_bitwise(seed):
    # Bounded random cases: shapes including empty ones, random densities,
    # both index dtypes, forced threading; reference: SciPy's product.
    rng = np.random.default_rng(100 + seed)
    n_rows, n_cols = (int(v) for v in rng.integers(0, 60, 2))
    density = float(rng.uniform(0.0, 0.5))
    A = sp.random(n_rows, n_cols, density=density, random_state=rng, format="csr")
    A = _with_index_dtype(A, np.int64 if seed % 2 else np.int32)
    x = rng.standard_normal(n_cols)
    X = rng.standard_normal((n_cols, 1 + seed % 6))
    for n_threads in THREADS:
        product = CsrProduct(A, n_threads=n_threads, serial_below=0)
        np.testing.assert_array_equal(product.matvec(x), A @ x)
        np.testing.assert_array_equal(product.matmat(X), A @ X)


# --- symmetry check and Simon's recurrence ---------------------------------

def _dense_asymmetry(A):
    """Reference: NumPy on the dense matrix, ||A - A^T||_F / max |a_ij|."""
    D = A.toarray()
    scale = np.max(np.abs(D))
    return np.linalg.norm(D - D.T) / scale if scale else 0.0


@pytest.mark.parametrize("index_dtype", [np.int32, np.int64])
@pytest.mark.parametrize("seed", range(4))
def test_csr_asymmetry_matches_dense(index_dtype, seed):
    from lanqr.vecops import csr_asymmetry
    rng = np.random.default_rng(seed)
    n = 60
    B = sp.random(n, n, density=0.08, random_state=seed, format="csr")
    S = (B + B.T).tocsr()
    # Symmetric, one-sided (pairs stored on one side only), and a perturbed
    # symmetric matrix with both sides stored.
    P = S.copy()
    P.data = P.data + 1e-3 * rng.standard_normal(P.nnz)
    for A in (S, B, P):
        A = _with_index_dtype(A, index_dtype)
        assert csr_asymmetry(A.copy()) == pytest.approx(_dense_asymmetry(A), rel=1e-12, abs=1e-15)
    assert csr_asymmetry(_with_index_dtype(S, index_dtype)) == 0.0


def test_csr_asymmetry_unsorted_duplicates_empty_rows():
    from lanqr.vecops import csr_asymmetry
    # Row 1 empty; row 0 stores (0, 2) twice and out of order; the mirror
    # (2, 0) holds their sum, so the matrix is symmetric.
    indptr = np.array([0, 3, 3, 4])
    indices = np.array([2, 0, 2])
    data = np.array([1.0, 5.0, 2.0])
    A = sp.csr_matrix((np.r_[data, 3.0], np.r_[indices, 0], indptr), shape=(3, 3))
    assert csr_asymmetry(A) == 0.0
    A[2, 0] = 4.0
    assert csr_asymmetry(A.tocsr()) == pytest.approx(_dense_asymmetry(A), rel=1e-12)
    assert csr_asymmetry(sp.csr_matrix((0, 0))) == 0.0
    assert csr_asymmetry(sp.csr_matrix((4, 4))) == 0.0


def test_csr_asymmetry_rejects_bad_input():
    from lanqr.vecops import csr_asymmetry
    with pytest.raises(ValueError, match="square"):
        csr_asymmetry(sp.csr_matrix(np.ones((2, 3))))
    with pytest.raises(ValueError, match="CSR"):
        csr_asymmetry(np.eye(3))
    with pytest.raises(ValueError, match="float64"):
        csr_asymmetry(sp.csr_matrix(np.eye(3, dtype=np.float32)))


def _omega_reference(cur, prev, alpha, beta, j, beta_j, eps1, local):
    """Simon's recurrence written out in NumPy (Simon 1984, eq. 4.1)."""
    new = np.zeros_like(cur)
    k = np.arange(j)
    t = beta[k] * cur[k + 1] + (alpha[k] - alpha[j]) * cur[k]
    t[1:] += beta[k[1:] - 1] * cur[k[1:] - 1]
    t -= beta[j - 1] * prev[k] if j > 0 else 0.0
    noise = eps1 * (np.hypot(alpha[k], beta[k]) + np.hypot(alpha[j], beta_j))
    t += np.where(t >= 0, noise, -noise)
    new[:j] = t / beta_j
    new[j] = local
    new[j + 1] = 1.0
    return new, (float(np.abs(new[:j]).max()) if j else 0.0)


@pytest.mark.parametrize("j", [0, 1, 2, 7, 18])
def test_omega_advance_matches_numpy(j):
    from lanqr.vecops import omega_advance
    rng = np.random.default_rng(j)
    size = 21
    alpha = rng.standard_normal(size)
    beta = rng.uniform(0.5, 2.0, size)
    # Signed estimates (Simon's recurrence keeps the signs).
    cur = rng.standard_normal(size) * 1e-10
    prev = rng.standard_normal(size) * 1e-10
    new = np.full(size, np.nan)
    worst = omega_advance(new, cur, prev, alpha, beta, j, 1.3, 1e-15, 2e-16)
    ref, ref_worst = _omega_reference(cur, prev, alpha, beta, j, 1.3, 1e-15, 2e-16)
    np.testing.assert_array_equal(new, ref)
    assert worst == ref_worst
    with pytest.raises(ValueError, match="inconsistent"):
        omega_advance(new[:j + 1], cur, prev, alpha, beta, j, 1.3, 1e-15, 2e-16)
