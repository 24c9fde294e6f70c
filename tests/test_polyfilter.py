"""Chebyshev polynomial filters and the solver's filtered phase.

References used here: NumPy's Chebyshev series (``numpy.polynomial.chebyshev``)
for the polynomial itself; closed forms of the Dirichlet grid Laplacians
(reference-values.md §4, via ``laplacian_grid_values``) and dense
``scipy.linalg.eigh`` for the solver; Gershgorin's disc theorem (common
practice) for the spectrum bounds.
"""
import warnings

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla

import lanqr
from lanqr.polyfilter import ChebyshevFilter, filter_degree, gershgorin_bounds
from lanqr.problems import heisenberg_ring, laplacian_grid, laplacian_grid_values
from lanqr.vecops import CsrProduct


def _diag_filter(lam, lower, upper, degree, side, fused=False):
    A = sp.diags(lam).tocsr()
    spectrum = (float(lam.min()), float(lam.max()))
    step = CsrProduct(A).chebyshev_step if fused else None
    return A, ChebyshevFilter(lambda x: A @ x, lower, upper, degree, side, spectrum,
                              chebyshev_step=step)


@pytest.mark.parametrize("side", ["lowest", "highest"])
@pytest.mark.parametrize("degree", [1, 2, 7, 16])
def test_value_matches_numpy_chebyshev(side, degree):
    lam = np.linspace(-1.0, 3.0, 41)
    _, filt = _diag_filter(lam, 0.5, 2.0, degree, side)
    x = (2 * lam - 2.5) / 1.5
    # NumPy reference: T_d as a Chebyshev series with one coefficient.
    ref = np.polynomial.chebyshev.chebval(x, [0] * degree + [1])
    sign = (-1.0) ** degree if side == "lowest" else 1.0
    np.testing.assert_allclose(filt.value(lam), sign * ref, rtol=1e-12, atol=1e-12)
    # At least 1 beyond the damped interval on the wanted side, at most 1 in
    # absolute value inside it.
    wanted = lam < 0.5 if side == "lowest" else lam > 2.0
    damped = (lam >= 0.5) & (lam <= 2.0)
    assert np.all(filt.value(lam[wanted]) >= 1.0 - 1e-12)
    assert np.all(np.abs(filt.value(lam[damped])) <= 1.0 + 1e-12)


@pytest.mark.parametrize("fused", [False, True])
@pytest.mark.parametrize("side", ["lowest", "highest"])
def test_apply_is_the_polynomial_of_a_diagonal_matrix(fused, side):
    rng = np.random.default_rng(1)
    lam = np.sort(rng.uniform(-2.0, 5.0, 300))
    A, filt = _diag_filter(lam, 0.0, 3.0, 12, side, fused=fused)
    x = rng.standard_normal(300)
    np.testing.assert_allclose(filt.apply(x), filt.value(lam) * x, rtol=1e-11,
                               atol=1e-11 * np.max(np.abs(filt.value(lam))))


def test_fused_and_generic_recurrences_agree():
    A = laplacian_grid((40, 40))
    lo, hi = gershgorin_bounds(A)
    step = CsrProduct(A).chebyshev_step
    fused = ChebyshevFilter(lambda x: A @ x, 0.3, hi, 20, "lowest", (lo, hi), chebyshev_step=step)
    plain = ChebyshevFilter(lambda x: A @ x, 0.3, hi, 20, "lowest", (lo, hi))
    x = np.random.default_rng(2).standard_normal(A.shape[0])
    np.testing.assert_allclose(fused.apply(x), plain.apply(x), rtol=1e-12)


def test_chebyshev_step_matches_numpy_bitwise():
    A = laplacian_grid((30, 30, 3))
    rng = np.random.default_rng(3)
    x = rng.standard_normal(A.shape[0])
    y0 = rng.standard_normal(A.shape[0])
    for threads in (1, 2):
        y = y0.copy()
        CsrProduct(A, n_threads=threads, serial_below=0).chebyshev_step(x, y, 0.7, 1.3, 1.0)
        np.testing.assert_array_equal(y, 0.7 * ((A @ x) - 1.3 * x) - 1.0 * y0)
        y = np.full_like(y0, np.nan)   # tau = 0: the old y is not read
        CsrProduct(A, n_threads=threads, serial_below=0).chebyshev_step(x, y, 0.7, 1.3, 0.0)
        np.testing.assert_array_equal(y, 0.7 * ((A @ x) - 1.3 * x))
    with pytest.raises(ValueError, match="overlap"):
        CsrProduct(A).chebyshev_step(x, x, 1.0, 0.0, 0.0)


@pytest.mark.parametrize("side", ["lowest", "highest"])
def test_eigenvalue_inverts_value_on_the_wanted_side(side):
    lam = np.linspace(-3.0, 6.0, 200)
    _, filt = _diag_filter(lam, 0.0, 3.0, 9, side)
    wanted = lam < -1e-3 if side == "lowest" else lam > 3.0 + 1e-3
    np.testing.assert_allclose(filt.eigenvalue(filt.value(lam[wanted])), lam[wanted],
                               rtol=1e-9, atol=1e-9)
    assert np.all(np.isnan(filt.eigenvalue(np.array([0.5, 1.0, -4.0]))))


@pytest.mark.parametrize("seed", range(5))
def test_residual_factor_bounds_the_residual_in_a(seed):
    # The bound ||A y - lam y|| <= kappa(mu) ||B y - mu y|| holds for every y
    # and every mu > 1 (lanqr.polyfilter, module notes): check it on random
    # vectors near a wanted eigenvector of a diagonal matrix.
    rng = np.random.default_rng(seed)
    lam = np.sort(np.concatenate([rng.uniform(0.0, 0.05, 8), rng.uniform(0.05, 4.0, 400)]))
    A, filt = _diag_filter(lam, 0.05, 4.0, 14, "lowest")
    for _ in range(20):
        i = rng.integers(8)
        y = 1e-3 * rng.standard_normal(lam.size)
        y[i] += 1.0
        y /= np.linalg.norm(y)
        By = filt.apply(y)
        mu = float(y @ By)
        if mu <= 1.0:
            continue
        res_b = np.linalg.norm(By - mu * y)
        res_a = np.linalg.norm(A @ y - filt.eigenvalue(mu) * y)
        assert res_a <= filt.residual_factor(mu) * res_b * (1 + 1e-10)


def test_gershgorin_bounds_contain_the_spectrum():
    rng = np.random.default_rng(4)
    B = sp.random(120, 120, density=0.05, random_state=4)
    S = (B + B.T + sp.diags(rng.standard_normal(120))).tocsr()
    ev = scipy.linalg.eigvalsh(S.toarray())
    for M in (S, S.toarray()):
        lo, hi = gershgorin_bounds(M)
        assert lo <= ev[0] and ev[-1] <= hi
    assert gershgorin_bounds(laplacian_grid((10, 10))) == (0.0, 8.0)


def test_filter_degree_and_overflow_guard():
    assert filter_degree(50, 5) > filter_degree(50, 20)
    assert filter_degree(10, 1000) == 8 and filter_degree(10**4, 1) == 200
    top = ChebyshevFilter.max_degree(0.1, 8.0, "lowest", (-1e4, 8.0))
    ChebyshevFilter(None, 0.1, 8.0, top, "lowest", (-1e4, 8.0))
    with pytest.raises(ValueError, match="overflow"):
        ChebyshevFilter(None, 0.1, 8.0, top + 1, "lowest", (-1e4, 8.0))
    with pytest.raises(ValueError, match="lower < upper"):
        ChebyshevFilter(None, 1.0, 1.0, 3, "lowest", (0.0, 2.0))


# --- the solver's filtered phase ---------------------------------------------

@pytest.mark.parametrize("shape,k", [((40, 40), 10), ((12, 12, 12), 10), ((60, 60), 1)])
def test_filtered_lowest_matches_closed_form_with_multiplicities(shape, k):
    A = laplacian_grid(shape)
    res = lanqr.lowest(A, k, seed=0, polynomial_filter="on")
    assert "polynomial_filter" in res.info
    # reference-values.md §4: closed-form Dirichlet Laplacian eigenvalues,
    # repeated ones listed with their multiplicity.
    exact = laplacian_grid_values(shape, k)
    np.testing.assert_allclose(res.values, exact, rtol=1e-8)
    assert res.all_converged and np.all(res.residuals <= 1e-8)
    R = A @ res.vectors - res.vectors * res.values
    assert np.all(np.linalg.norm(R, axis=0) <= 1e-8 * np.abs(res.values))
    np.testing.assert_allclose(res.vectors.T @ res.vectors, np.eye(k), atol=1e-10)


def test_filtered_highest_and_indefinite():
    rng = np.random.default_rng(5)
    n = 1500
    B = sp.random(n, n, density=4 / n, random_state=5)
    A = (B + B.T + sp.diags(rng.standard_normal(n))).tocsr()
    ev = scipy.linalg.eigvalsh(A.toarray())   # reference: dense LAPACK
    for side, ref in (("lowest", ev[:6]), ("highest", ev[-6:])):
        res = getattr(lanqr, side)(A, 6, seed=1, polynomial_filter="on")
        np.testing.assert_allclose(res.values, ref, rtol=1e-8, atol=1e-10)
        assert res.all_converged


@pytest.mark.parametrize("scale", [1e-300, 1e-200, 1e-150, 1e150, 1e200, 1e300])
@pytest.mark.parametrize("setting", ["on", "off"])
def test_scaling_invariance_filtered_and_partial(scale, setting):
    # Regression: the fused recurrence norm (a plain sum of squares) overflowed
    # or went subnormal beyond 1e+-150, and partial reorthogonalization, which
    # uses it, returned wrong values at 1e+-160.  Closed form: reference-values §4.
    A = laplacian_grid((30, 30))
    res = lanqr.lowest(A * scale, 4, seed=2, polynomial_filter=setting)
    np.testing.assert_allclose(res.values / scale, laplacian_grid_values((30, 30), 4),
                               rtol=1e-8)
    assert res.all_converged


def test_auto_switches_only_when_plain_lanczos_is_slow():
    # The 2-D Laplacian's lowest modes cluster: auto switches.  The ground
    # state of a spin ring stands apart and converges in a few cycles: no
    # switch.
    res = lanqr.lowest(laplacian_grid((80, 80)), 10, seed=0)
    assert "polynomial_filter" in res.info and res.all_converged
    res = lanqr.lowest(heisenberg_ring(14), 2, seed=0)
    assert "polynomial_filter" not in res.info and res.all_converged


def test_filtered_run_is_deterministic():
    A = laplacian_grid((50, 50))
    a = lanqr.lowest(A, 6, seed=7, polynomial_filter="on")
    b = lanqr.lowest(A, 6, seed=7, polynomial_filter="on")
    np.testing.assert_array_equal(a.values, b.values)
    np.testing.assert_array_equal(a.vectors, b.vectors)


def test_filter_option_errors():
    A = laplacian_grid((30, 30))
    with pytest.raises(ValueError, match="polynomial_filter must be one of"):
        lanqr.lowest(A, 3, polynomial_filter="yes")
    op = spla.aslinearoperator(A)
    with pytest.raises(ValueError, match="explicit matrix"):
        lanqr.lowest(op, 3, polynomial_filter="on")
    with pytest.raises(ValueError, match="standard problems only"):
        lanqr.lowest(A, 3, M=sp.identity(900, format="csr"), polynomial_filter="on")
    # A LinearOperator runs without a filter under "auto".
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = lanqr.lowest(op, 3, seed=0)
    assert "polynomial_filter" not in res.info


def test_cut_lies_beyond_locked_values_when_copies_were_missed():
    # Regression: the plain phase of the 2-D Laplacian 43x43 (lowest 11,
    # tol 1e-9) locks values up to 0.127 before it has seen the second
    # copies at 0.051 and 0.066; a cut placed from the active Ritz values
    # alone (0.066) left locked pairs unamplified and the run never
    # certified.  reference-values.md §4: closed form with multiplicities.
    A = laplacian_grid((43, 43))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = lanqr.lowest(A, 11, tol=1e-9, seed=0)
    assert "polynomial_filter" in res.info
    np.testing.assert_allclose(res.values, laplacian_grid_values((43, 43), 11), rtol=1e-9)
    assert res.all_converged and res.info["verified"]


def test_filtered_history_counts_products_of_a():
    # The history and the callback report operator applications of A (each
    # filter application counts its degree), Ritz values in A.
    A = laplacian_grid((40, 40))
    seen = []
    res = lanqr.lowest(A, 6, seed=3, polynomial_filter="on", callback=seen.append)
    pf = res.info["polynomial_filter"]
    counts = [h["matvecs"] for h in res.history]
    assert counts == sorted(counts) and counts[-1] <= res.matvecs
    assert [s["matvecs"] for s in seen] == sorted(s["matvecs"] for s in seen)
    filtered = [h for h in res.history if h.get("filtered")]
    assert filtered and filtered[0]["matvecs"] > pf["switched_after"]
    # Ritz values the filter amplifies lie below the cut, reported in A.
    ritz = filtered[-1]["ritz"]
    known = ritz[np.isfinite(ritz)]
    assert known.size and np.all(known < pf["damped"][0])
    assert "Chebyshev filter" in res.method


def test_without_a_usable_filter_the_plain_run_goes_on(monkeypatch):
    # When no filter can be placed, the solver continues plain Lanczos with
    # the pairs already locked; the answer is the closed form (reference-values §4).
    import lanqr.api

    monkeypatch.setattr(lanqr.api, "continue_filtered", lambda *a, **kw: None)
    A = laplacian_grid((40, 40))
    res = lanqr.lowest(A, 8, seed=0, polynomial_filter="on")
    assert "polynomial_filter" not in res.info
    np.testing.assert_allclose(res.values, laplacian_grid_values((40, 40), 8), rtol=1e-8)
    assert res.all_converged and res.info["verified"]
