"""Sylvester inertia counts against closed forms and LAPACK (numpy.linalg.eigvalsh)."""
import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp

from lanqr.inertia import InertiaError, count_below, sturm_count
from lanqr import problems


def _random_indefinite(n, seed, density=0.02):
    # A random diagonal keeps every shifted matrix's diagonal nonzero, so the
    # symmetric-mode LU can pivot on it; the spectrum straddles zero.
    rng = np.random.default_rng(seed)
    A = problems.random_sparse_symmetric(n, density, seed=seed)
    return (A + sp.diags(rng.standard_normal(n))).tocsr()


@pytest.mark.parametrize("n,points", [(100, [0.0123, 0.517, 1.0371, 2.5193, 3.9077, 4.5]), (257, [0.3111, 1.7093, 3.3017])])
def test_laplacian_1d_matches_closed_form(n, points):
    # reference-values.md §4 (Strang 2007, closed form) and §12 (counting check)
    exact = problems.laplacian_1d_values(n)
    A = problems.laplacian_1d(n)
    for x in points:
        assert count_below(A, x) == int(np.sum(exact < x))
        assert count_below(A.toarray(), x) == int(np.sum(exact < x))


def test_laplacian_2d_matches_closed_form_with_multiplicities():
    # reference-values.md §4: 2-D Kronecker sum, eigenvalue 4 has multiplicity N (N = 30)
    N = 30
    exact = problems.laplacian_grid_values((N, N))
    A = problems.laplacian_grid((N, N))
    for x in [0.05, 1.0, 3.99, 4.01, 6.5, 7.9]:
        assert count_below(A, x) == int(np.sum(exact < x))
    # The N-fold eigenvalue 4 lies between the two counts.
    assert count_below(A, 4.01) - count_below(A, 3.99) == int(np.sum(np.abs(exact - 4.0) < 0.01))


@pytest.mark.parametrize("seed", range(6))
def test_random_indefinite_sparse_matches_eigvalsh(seed):
    # LAPACK (numpy.linalg.eigvalsh) as the outside reference
    A = _random_indefinite(300, seed)
    ev = np.linalg.eigvalsh(A.toarray())
    rng = np.random.default_rng(100 + seed)
    for x in rng.uniform(ev[0] - 0.5, ev[-1] + 0.5, size=5):
        gap = np.min(np.abs(ev - x))
        if gap < 1e-8:
            continue
        assert count_below(A, x) == int(np.sum(ev < x))


@pytest.mark.parametrize("seed", range(3))
def test_random_dense_with_two_by_two_pivots_matches_eigvalsh(seed):
    # Zero diagonal forces Bunch-Kaufman 2x2 pivots; LAPACK eigvalsh is the reference.
    rng = np.random.default_rng(seed)
    B = rng.standard_normal((60, 60))
    A = B + B.T
    np.fill_diagonal(A, 0.0)
    ev = np.linalg.eigvalsh(A)
    for x in [0.0, ev[10] + 1e-3, ev[40] - 1e-3, 5.0]:
        assert count_below(A, x) == int(np.sum(ev < x))


def test_string_pair_matches_closed_form():
    # reference-values.md §10: linear-FE pair, closed-form generalized eigenvalues
    n = 400
    K, M = problems.string_pair(n)
    exact = problems.string_pair_values(n)
    for x in [5.0, 100.0, 1e4, 1e6]:
        assert count_below(K, x, M=M) == int(np.sum(exact < x))


def test_fe_pairs_match_generalized_eigh():
    # scipy.linalg.eigh(K, M) (LAPACK dsygvd) as the reference
    cases = [problems.cantilever_beam(40), problems.bracket_plate(10, 4)]
    for K, M in cases:
        ev = scipy.linalg.eigh(K.toarray(), M.toarray(), eigvals_only=True)
        for x in np.quantile(ev, [0.01, 0.3, 0.77]) * 1.0001:
            assert count_below(K, x, M=M) == int(np.sum(ev < x))
            assert count_below(K.toarray(), x, M=M.toarray()) == int(np.sum(ev < x))


def test_free_plate_counts_rigid_body_modes():
    # Three rigid-body modes at 0 (common practice: 2 translations + 1 rotation in 2-D)
    K, M = problems.bracket_plate(12, 6, clamped=False)
    ev = scipy.linalg.eigh(K.toarray(), M.toarray(), eigvals_only=True)
    assert count_below(K, -1.0, M=M) == 0
    below = 0.5 * ev[3]
    assert count_below(K, below, M=M) == 3
    with pytest.raises(InertiaError, match="x = 0.0"):
        count_below(K, 0.0, M=M)


def test_semidefinite_mass_counts_only_finite_eigenvalues():
    # Massless rotations: the pencil (K, M) has infinite eigenvalues, which must never count.
    # Reference: the inverse pencil (M, K) by LAPACK, mu = 1/lambda (K is positive definite).
    K, M = problems.cantilever_beam(30)
    M = M.tolil()
    for dof in range(1, K.shape[0], 2):
        M[dof, :] = 0.0
        M[:, dof] = 0.0
    M = M.tocsr()
    mu = scipy.linalg.eigh(M.toarray(), K.toarray(), eigvals_only=True)
    finite = 1.0 / mu[mu > 1e-12 * mu.max()]
    for x in [10.0, 1e3, 1e6, 1e9]:
        assert count_below(K, x, M=M) == int(np.sum(finite < x))


def test_default_lu_options_would_count_wrongly():
    # Why the options matter (measured): SuperLU's default column ordering and
    # partial pivoting give row/column orders that differ, and the signs on U's
    # diagonal then miscount.  Checked here so the reason stays visible.
    import scipy.sparse.linalg as spla
    n = 200
    A = problems.laplacian_1d(n)
    exact = int(np.sum(problems.laplacian_1d_values(n) < 1.3))
    lu = spla.splu(sp.csc_matrix(A - 1.3 * sp.identity(n)))
    naive = int(np.sum(lu.U.diagonal() < 0))
    assert not np.array_equal(lu.perm_r, lu.perm_c)
    assert naive != exact
    assert count_below(A, 1.3) == exact


def test_singular_point_is_reported():
    # tridiag(-1, 2, -1) of order 199 has the eigenvalue 2 exactly (§4, j = 100)
    A = problems.laplacian_1d(199)
    with pytest.raises(InertiaError, match="x = 2.0"):
        count_below(A, 2.0)
    with pytest.raises(InertiaError):
        count_below(A.toarray(), 2.0)


def test_exactly_zero_leading_minor_uses_dense_fallback():
    # tridiag(-1, 1, -1) has a zero 2x2 leading minor; x = 1 is no eigenvalue of
    # tridiag(-1, 2, -1) (§4 closed form), so the count exists and must be right.
    n = 100
    exact = int(np.sum(problems.laplacian_1d_values(n) < 1.0))
    assert count_below(problems.laplacian_1d(n), 1.0) == exact


def test_off_diagonal_pivots_refuse_to_certify():
    # Zero diagonal: diagonal pivoting is impossible, the sparse count must refuse
    # (above the order where the dense fallback takes over).
    from lanqr.inertia import DENSE_FALLBACK_ORDER
    n = DENSE_FALLBACK_ORDER + 100
    rng = np.random.default_rng(3)
    B = sp.random(n, n, density=3.0 / n, random_state=rng)
    A = (B + B.T).tocsr()
    A.setdiag(0.0)
    A.eliminate_zeros()
    with pytest.raises(InertiaError, match="cannot certify"):
        count_below(A, 0.0)


@pytest.mark.parametrize("bad,message", [
    (np.ones((3, 4)), "square"),
    (np.array([[1.0, 2.0], [0.0, 1.0]]), "not symmetric"),
    (np.array([[np.nan, 0.0], [0.0, 1.0]]), "NaN"),
])
def test_bad_matrices(bad, message):
    with pytest.raises(ValueError, match=message):
        count_below(bad, 0.5)
    if bad.shape[0] == bad.shape[1]:
        with pytest.raises(ValueError, match=message):
            count_below(sp.csr_matrix(bad), 0.5)


def test_bad_point_and_mass():
    A = problems.laplacian_1d(5)
    with pytest.raises(ValueError, match="finite"):
        count_below(A, np.inf)
    with pytest.raises(ValueError, match="order"):
        count_below(A, 1.0, M=sp.identity(4))
    with pytest.raises(ValueError, match="positive"):
        count_below(A, 1.0, M=-sp.identity(5))


@pytest.mark.parametrize("n", [1, 2, 50, 201])
def test_sturm_count_matches_closed_form_and_factorization(n):
    # reference-values.md §12: Sturm count; §4 closed form for tridiag(-1, 2, -1)
    exact = problems.laplacian_1d_values(n)
    d = np.full(n, 2.0)
    e = np.full(n - 1, -1.0)
    for x in np.linspace(-0.5, 4.5, 23):
        if np.min(np.abs(exact - x)) < 1e-9:
            continue
        assert sturm_count(d, e, x) == int(np.sum(exact < x))
        assert sturm_count(d, e, x) == count_below(problems.laplacian_1d(n), x)


def test_sturm_count_on_wilkinson_matrix_close_pair():
    # reference-values.md §1: W21+ top pair 10.746194182903393432 / ...321832 (gap 7.16e-14)
    d = np.abs(np.arange(-10, 11)).astype(float)
    e = np.ones(20)
    assert sturm_count(d, e, 10.7461941829033) == 19
    assert sturm_count(d, e, 10.74619418290336) == 20
    assert sturm_count(d, e, 10.7461941829035) == 21


@pytest.mark.parametrize("n", [4000, 30000])
def test_count_at_a_vanishing_leading_minor_is_certified_by_bracketing(n):
    # tridiag(-1, 2, -1) - I has a singular leading 2x2 minor (and every third
    # one after it), so diagonal pivoting meets zero pivots although x = 1 is
    # no eigenvalue for these n.  Closed form: reference-values.md §4
    # (Strang 2007, from memory; verified numerically there).
    A = problems.laplacian_1d(n)
    expected = int(np.sum(problems.laplacian_1d_values(n) < 1.0))
    assert count_below(A, 1.0) == expected
    assert count_below(A, 1.0 - 7e-12) == expected


def test_count_at_an_exact_eigenvalue_is_refused():
    # Odd order: 2 is an eigenvalue of tridiag(-1, 2, -1) exactly (j = (n+1)/2
    # in the closed form of reference-values.md §4).
    with pytest.raises(InertiaError, match="within"):
        count_below(problems.laplacian_1d(59), 2.0)
