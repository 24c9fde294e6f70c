"""Bad input to the tridiagonal kernel: a ValueError that names the problem."""
import numpy as np
import pytest
import scipy.linalg

from lanqr import tridiag_eigen, tridiag_values

GOOD_D = np.array([1.0, 2.0, 3.0, 4.0])
GOOD_E = np.array([0.5, 0.5, 0.5])


def both(d, e):
    yield lambda: tridiag_values(d, e)
    yield lambda: tridiag_eigen(d, e)
    yield lambda: tridiag_eigen(d, e, rows=[-1])


@pytest.mark.parametrize("bad,where", [
    (np.nan, "d"), (np.inf, "d"), (-np.inf, "d"),
    (np.nan, "e"), (np.inf, "e"), (-np.inf, "e"),
])
@pytest.mark.parametrize("position", [0, -1])
def test_non_finite_entries(bad, where, position):
    d, e = GOOD_D.copy(), GOOD_E.copy()
    (d if where == "d" else e)[position] = bad
    for call in both(d, e):
        with pytest.raises(ValueError, match=rf"^{where} contains NaN or Inf"):
            call()


def test_non_finite_order_one():
    for call in both(np.array([np.nan]), np.array([])):
        with pytest.raises(ValueError, match="d contains NaN or Inf"):
            call()


@pytest.mark.parametrize("d,e", [
    (GOOD_D, GOOD_E[:2]),
    (GOOD_D, np.ones(4)),
    (GOOD_D[:1], GOOD_E[:1]),
    (np.array([]), np.array([1.0])),
])
def test_wrong_lengths(d, e):
    for call in both(d, e):
        with pytest.raises(ValueError, match="e must have length len"):
            call()


@pytest.mark.parametrize("d,e,name", [
    (np.ones((2, 2)), np.ones(1), "d"),
    (np.float64(1.0), np.ones(0), "d"),
    (GOOD_D, GOOD_E[None, :], "e"),
])
def test_not_one_dimensional(d, e, name):
    for call in both(d, e):
        with pytest.raises(ValueError, match=rf"^{name} must be 1-D"):
            call()


@pytest.mark.parametrize("d,e,name", [
    (GOOD_D + 1j, GOOD_E, "d"),
    (GOOD_D, np.array(["a", "b", "c"]), "e"),
    (GOOD_D, np.array([object(), 1, 2], dtype=object), "e"),
])
def test_not_real(d, e, name):
    for call in both(d, e):
        with pytest.raises(ValueError, match=rf"^{name} must hold real numbers"):
            call()


@pytest.mark.parametrize("rows,msg", [
    ([4], "row index 4 out of range for a matrix of order 4"),
    ([-5], "row index -5 out of range"),
    ([0, 1, 100], "row index 100 out of range"),
    ([0.0], "rows must hold integers"),
    ([[0]], "rows must be a 1-D sequence"),
])
def test_bad_rows(rows, msg):
    with pytest.raises(ValueError, match=msg):
        tridiag_eigen(GOOD_D, GOOD_E, rows=rows)


def test_rows_on_empty_matrix_out_of_range():
    with pytest.raises(ValueError, match="out of range for a matrix of order 0"):
        tridiag_eigen([], [], rows=[0])


def test_extreme_but_finite_entries_are_fine():
    # Entries at the edge of the range are valid input, not errors (the
    # eigenvalues here lie within ||T||_1 <= 1.375 big, still finite).
    big = np.finfo(float).max / 2
    d, e = [big, -big, big / 2], [big / 4, big / 8]
    w = tridiag_values(d, e)
    w2, z = tridiag_eigen(d, e)
    assert np.all(np.isfinite(w)) and np.all(np.isfinite(w2)) and np.all(np.isfinite(z))
    # LAPACK (through SciPy) as referee, relative to ||T||
    ref = scipy.linalg.eigh_tridiagonal(np.array(d) / big, np.array(e) / big, eigvals_only=True)
    np.testing.assert_allclose(w / big, ref, rtol=0, atol=30 * np.finfo(float).eps)
    np.testing.assert_allclose(w2 / big, ref, rtol=0, atol=30 * np.finfo(float).eps)
    tiny = np.finfo(float).smallest_subnormal
    w, z = tridiag_eigen([tiny, 2 * tiny], [tiny])
    assert np.all(np.isfinite(w)) and np.all(np.isfinite(z))
