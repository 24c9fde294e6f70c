"""The generalized and interior test problems against closed forms and published values."""
import numpy as np
import pytest
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lanqr import problems


def test_beam_roots_match_published_table():
    # reference-values.md §7 (Blevins 1979 / Thomson App. D; verified there with mpmath)
    cantilever = [1.8751040687119611664, 4.6940911329741745764, 7.8547574382376125649,
                  10.995540734875466991, 14.137168391046470581]
    free = [4.7300407448627040260, 7.8532046240958375565, 10.995607838001670907,
            14.137165491257464177, 17.278759657399481438]
    assert np.allclose(problems.cantilever_beam_values(5) ** 0.25, cantilever, rtol=1e-12, atol=0)
    assert np.allclose(problems.free_beam_values(5) ** 0.25, free, rtol=1e-12, atol=0)


def test_cantilever_converges_from_above_at_fourth_order():
    # reference-values.md §7: Hermite-cubic cantilever, O(h^4) (ratio ~16 per halving), from above
    exact = problems.cantilever_beam_values(3)
    errors = []
    for ne in (4, 8, 16):
        K, M = problems.cantilever_beam(ne)
        assert K.shape == (2 * ne, 2 * ne)
        lam = scipy.linalg.eigh(K.toarray(), M.toarray(), eigvals_only=True, subset_by_index=[0, 2])
        assert np.all(lam > exact)
        errors.append((lam - exact) / exact)
    errors = np.array(errors)
    # The table's own numbers at ne = 4, 8, 16 (λ1 relative errors 6.5e-5, 4.2e-6, 2.6e-7).
    assert errors[0, 0] == pytest.approx(6.5e-5, rel=0.02)
    assert errors[1, 0] == pytest.approx(4.2e-6, rel=0.02)
    assert errors[2, 0] == pytest.approx(2.6e-7, rel=0.02)
    rates = np.log2(errors[:-1] / errors[1:])
    # Asymptotic order 4: λ1 from the start, λ2 and λ3 on the finer pair (pre-asymptotic at ne = 4).
    assert np.all(np.abs(rates[:, 0] - 4.0) < 0.1), rates
    assert np.all(np.abs(rates[-1] - 4.0) < 0.1), rates


def test_cantilever_table_value_and_scaling():
    # §7 table: ne = 4 gives λ1 = 12.363172; scaling λ ∝ EI / (ρA L^4)
    K, M = problems.cantilever_beam(4)
    lam = scipy.linalg.eigh(K.toarray(), M.toarray(), eigvals_only=True)[0]
    assert lam == pytest.approx(12.363172, abs=5e-7)
    K2, M2 = problems.cantilever_beam(4, length=2.0, bending_stiffness=3.0, mass_per_length=5.0)
    lam2 = scipy.linalg.eigh(K2.toarray(), M2.toarray(), eigvals_only=True)[0]
    # §7 tolerance for the discrete pair: relative 1e-10 (κ grows like ne^4)
    assert lam2 == pytest.approx(lam * 3.0 / (5.0 * 16.0), rel=1e-10)


def test_string_pair_closed_form():
    # reference-values.md §10: λ_j = (6/h²)(1 - cos jπh)/(2 + cos jπh), exact for the FE pair
    n = 60
    K, M = problems.string_pair(n)
    lam = scipy.linalg.eigh(K.toarray(), M.toarray(), eigvals_only=True)
    exact = problems.string_pair_values(n)
    assert np.max(np.abs(lam - exact)) <= 10 * n * np.finfo(float).eps * exact[-1]
    # And from above towards (jπ)^2, by about λ² h²/12.
    h = 1.0 / (n + 1)
    j = np.arange(1, 4)
    assert np.all(exact[:3] > (j * np.pi) ** 2)
    assert np.allclose(exact[:3] - (j * np.pi) ** 2, (j * np.pi) ** 4 * h**2 / 12, rtol=0.02)


def test_l_shape_sizes_and_values_at_m25():
    # reference-values.md §8: order (2m-1)^2 - m^2, m = 200 has 119201 unknowns and 594409 non-zeros
    # (Moler 2004); m = 25 eigenvalues from the table (dense), λ3 exactly (8/h²) sin²(πh/2).
    A = problems.l_shape_membrane(25)
    assert A.shape == (1776, 1776)
    # SciPy's ARPACK in shift-invert mode, tol 1e-14, as the independent solver.
    lam = np.sort(spla.eigsh(A, k=4, sigma=0.0, which="LM", return_eigenvectors=False, tol=1e-14))
    assert np.allclose(lam, [9.6613312868, 15.1767358476, 19.7132467138, 29.4478492897], rtol=1e-9, atol=0)
    assert lam[2] == pytest.approx(problems.l_shape_exact_third(25), rel=1e-12)
    big = problems.l_shape_membrane(200)
    assert big.shape == (119201, 119201) and big.nnz == 594409


def test_disordered_lattice_structure():
    # Hopping on a cubic grid plus a bounded random diagonal: Gershgorin bounds (common practice).
    H = problems.disordered_lattice((5, 6, 7), disorder=4.0, seed=3)
    assert H.shape == (210, 210)
    assert abs(H - H.T).max() == 0.0
    d = H.diagonal()
    assert np.all(np.abs(d) <= 2.0) and np.std(d) > 0.5
    ev = np.linalg.eigvalsh(H.toarray())
    assert ev[0] >= -2.0 - 6.0 and ev[-1] <= 2.0 + 6.0
    assert ev[0] < 0.0 < ev[-1]
    same = problems.disordered_lattice((5, 6, 7), disorder=4.0, seed=3)
    assert (H != same).nnz == 0
    # Zero disorder: the closed-form spectrum 2d - (Laplacian eigenvalues) of §4, with a minus sign.
    clean = problems.disordered_lattice((4, 5), disorder=0.0)
    exact = np.sort(problems.laplacian_grid_values((4, 5)) - 4.0)
    assert np.allclose(np.linalg.eigvalsh(clean.toarray()), exact, atol=1e-13)


def test_plate_sizes_symmetry_and_mass():
    K, M = problems.bracket_plate(12, 5)
    assert K.shape == M.shape == (2 * 12 * 6, 2 * 12 * 6)
    assert abs(K - K.T).max() == 0.0 and abs(M - M.T).max() == 0.0
    Kf, Mf = problems.bracket_plate(12, 5, clamped=False)
    assert Kf.shape == (2 * 13 * 6, 2 * 13 * 6)
    # Consistent mass: a rigid translation carries the plate's mass ρ t L H (common practice).
    R = problems.bracket_plate_rigid_modes(12, 5)
    total = 7850.0 * 0.006 * 0.4 * 0.2
    assert R[:, 0] @ Mf @ R[:, 0] == pytest.approx(total, rel=1e-13)
    assert R[:, 1] @ Mf @ R[:, 1] == pytest.approx(total, rel=1e-13)
    # nx = 316 reaches ~100,000 unknowns (size formula only; the benchmark builds it).
    assert 2 * 316 * (316 // 2 + 1) == 100488


def test_free_plate_has_exactly_three_rigid_body_modes():
    # 2-D rigid motions (two translations, one rotation) lie in the null space of K (common practice).
    Kf, Mf = problems.bracket_plate(10, 4, clamped=False)
    R = problems.bracket_plate_rigid_modes(10, 4)
    assert np.linalg.norm(Kf @ R) <= 1e-13 * abs(Kf).max() * np.linalg.norm(R)
    lam = scipy.linalg.eigh(Kf.toarray(), Mf.toarray(), eigvals_only=True)
    scale = lam[-1]
    assert np.all(np.abs(lam[:3]) < 1e-11 * scale)
    assert lam[3] > 1e-6 * scale
    K, M = problems.bracket_plate(10, 4)
    assert scipy.linalg.eigh(K.toarray(), M.toarray(), eigvals_only=True)[0] > 1e-6 * scale


def _lowest_by_shift_invert(K, M, k):
    # SciPy's ARPACK shift-invert as an independent solver.
    vals = spla.eigsh(K, k=k, M=M, sigma=0.0, which="LM", return_eigenvectors=False, tol=1e-12)
    return np.sort(vals)


def test_slender_plate_approaches_beam_theory():
    # A slender plate (L/H = 20) bends like an Euler-Bernoulli beam with EI = E t H^3/12
    # (reference-values.md §7); bilinear elements are too stiff in bending (shear locking,
    # common practice), so the first frequency falls towards the beam value as the mesh is refined.
    # Clamped rod, first axial mode (π/2L)² E/ρ: common practice.
    L, H, t, E, rho = 1.0, 0.05, 0.006, 210e9, 7850.0
    beam = problems.cantilever_beam_values(1, length=L, bending_stiffness=E * t * H**3 / 12,
                                           mass_per_length=rho * t * H)[0]
    rod = (np.pi / (2 * L)) ** 2 * E / rho
    ratios = []
    for nx, ny in [(40, 2), (80, 4), (160, 8)]:
        K, M = problems.bracket_plate(nx, ny, length=L, height=H)
        lam = _lowest_by_shift_invert(K, M, 4)
        ratios.append(lam[0] / beam)
        axial = lam[np.argmin(np.abs(lam / rod - 1.0))]
        assert abs(axial / rod - 1.0) < 0.005
    ratios = np.array(ratios)
    assert np.all(np.diff(ratios) < 0) and np.all(ratios > 1.0)
    assert ratios[-1] - 1.0 < 0.01


def test_free_slender_plate_approaches_free_beam():
    # Free-free beam, (4.7300407448627...)^4 EI/(ρA L^4) (reference-values.md §7), plus three zeros.
    L, H, t, E, rho = 1.0, 0.05, 0.006, 210e9, 7850.0
    beam = problems.free_beam_values(1, length=L, bending_stiffness=E * t * H**3 / 12,
                                     mass_per_length=rho * t * H)[0]
    K, M = problems.bracket_plate(120, 6, length=L, height=H, clamped=False)
    vals = spla.eigsh(K, k=4, M=M, sigma=-1.0, which="LM", return_eigenvectors=False, tol=1e-12)
    vals = np.sort(vals)
    assert np.all(np.abs(vals[:3]) < 1e-6 * vals[3])
    # Bending of a beam of depth L/20: shear deformation lowers it by ~1%, locking raises it.
    assert abs(vals[3] / beam - 1.0) < 0.02
