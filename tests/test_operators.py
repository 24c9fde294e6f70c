"""The operator adapter: every input kind gives the same products; bad input is refused."""
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lanqr.operators import as_operator
from lanqr.problems import laplacian_grid, random_sparse_symmetric


def _kinds(A):
    dense = A.toarray()
    yield "dense", dense
    yield "csr", A.tocsr()
    yield "coo", A.tocoo()
    yield "csc", A.tocsc()
    yield "csr_array", sp.csr_array(A)
    yield "linear operator (matvec only)", spla.LinearOperator(A.shape, matvec=lambda x: A @ x,
                                                               dtype=np.float64)

    class Plain:
        shape = A.shape

        def matvec(self, x):
            return A @ x

    yield "plain object", Plain()


@pytest.mark.parametrize("kind", [k for k, _ in _kinds(laplacian_grid((5, 4)))])
def test_every_kind_gives_the_same_product_and_counts(kind):
    A = random_sparse_symmetric(60, 0.1, seed=1)
    obj = dict(_kinds(A))[kind]
    op = as_operator(obj, seed=0)
    x = np.random.default_rng(2).standard_normal(60)
    X = np.random.default_rng(3).standard_normal((60, 3))
    # Reference: SciPy's own sparse product.
    np.testing.assert_allclose(op.apply(x), A @ x, rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(op.apply_block(X), A @ X, rtol=1e-13, atol=1e-13)
    assert op.applications == 4
    assert op.n == 60


def test_float32_is_computed_in_float64():
    A = laplacian_grid((6, 6)).astype(np.float32)
    op = as_operator(A)
    y = op.apply(np.ones(36))
    assert y.dtype == np.float64
    op = as_operator(A.toarray())
    assert op.apply(np.ones(36)).dtype == np.float64


@pytest.mark.parametrize("make", [
    lambda: np.ones((3, 4)),
    lambda: sp.random(3, 4, density=0.5, format="csr"),
    lambda: np.ones(5),
])
def test_non_square_is_refused(make):
    with pytest.raises(ValueError, match="square|two-dimensional"):
        as_operator(make())


def test_complex_is_refused():
    with pytest.raises(ValueError, match="complex"):
        as_operator(np.eye(4, dtype=complex))
    with pytest.raises(ValueError, match="complex"):
        as_operator(sp.identity(4, dtype=complex, format="csr"))
    op = spla.LinearOperator((4, 4), matvec=lambda x: x * 1j, dtype=complex)
    with pytest.raises(ValueError, match="complex"):
        as_operator(op)


def test_non_symmetric_is_refused():
    B = np.arange(16.0).reshape(4, 4)
    with pytest.raises(ValueError, match="not symmetric"):
        as_operator(B)
    with pytest.raises(ValueError, match="not symmetric"):
        as_operator(sp.csr_matrix(B))
    with pytest.raises(ValueError, match="not symmetric"):
        as_operator(spla.aslinearoperator(sp.csr_matrix(B)), seed=0)


def test_rounding_level_asymmetry_is_accepted():
    # common practice: an assembled matrix is symmetric only to rounding.
    A = random_sparse_symmetric(50, 0.2, seed=4).toarray()
    A[0, 1] *= 1 + 4e-16
    as_operator(A)
    as_operator(sp.csr_matrix(A))


@pytest.mark.parametrize("bad", [np.nan, np.inf])
def test_nan_and_inf_are_refused(bad):
    A = np.eye(4)
    A[1, 1] = bad
    with pytest.raises(ValueError, match="NaN or Inf"):
        as_operator(A)
    with pytest.raises(ValueError, match="NaN or Inf"):
        as_operator(sp.csr_matrix(A))
    with pytest.raises(ValueError, match="NaN or Inf"):
        as_operator(spla.aslinearoperator(sp.csr_matrix(A)), seed=0)


@pytest.mark.parametrize("scale", [1e-300, 1e300])
def test_symmetry_check_is_scale_free(scale):
    A = laplacian_grid((5, 5)) * scale
    as_operator(A)
    as_operator(A.toarray())
    as_operator(spla.aslinearoperator(A), seed=0)


def test_unknown_kind_is_a_type_error():
    with pytest.raises(TypeError):
        as_operator("matrix")
