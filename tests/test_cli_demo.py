"""The drumhead problem behind ``lanqr demo`` and the demo command itself."""
import numpy as np
import pytest
import scipy.linalg
import scipy.sparse.linalg as sla

from lanqr.problems import drum_membrane, laplacian_grid_values

from _cli_support import needs_mass, needs_solver, run_cli, table_rows, table_values

# j_{0,1}, first zero of the Bessel function J0 [from memory: 2.404825557695773;
# verified here against scipy.special.jn_zeros in test_disc_drum_tends_to_bessel_limit].
J01 = 2.404825557695773


def test_square_drum_matches_closed_form():
    # reference-values.md §4: the 5-point Laplacian on an N x N interior grid has
    # eigenvalues mu_j + mu_k, mu_j = 4 sin^2(j pi / (2(N+1))) (Strang 2007 §1.5,
    # LeVeque 2007 §2.10); K = T * that matrix and M = rho h^2 I scale it by T/(rho h^2).
    N = 10
    drum = drum_membrane("square", cells=N + 1, size=0.5, tension=2000.0, areal_density=0.3)
    assert drum["K"].shape == (N * N, N * N)
    values = scipy.linalg.eigh(drum["K"].toarray(), drum["M"].toarray(), eigvals_only=True)
    scale = drum["tension"] / (drum["areal_density"] * drum["h"] ** 2)
    expected = scale * laplacian_grid_values((N, N))
    # Dense generalized solver: absolute error ~ n eps ||K|| / rho h^2 (reference-values.md §12).
    tol = 10 * N * N * np.finfo(float).eps * 8 * scale
    np.testing.assert_allclose(values, expected, rtol=0, atol=tol)


def test_disc_drum_tends_to_bessel_limit():
    from scipy.special import jn_zeros

    assert abs(jn_zeros(0, 1)[0] - J01) < 1e-14
    # Continuum: omega_1 = j01 c / R for a clamped circular membrane [common practice;
    # Rayleigh, The Theory of Sound, 1877, §200, from memory].  The staircase rim makes
    # the error first order in h: it must be small and shrink as the grid is refined.
    errors = []
    for cells in (40, 80):
        drum = drum_membrane("disc", cells=cells, size=0.35)
        lowest = sla.eigsh(drum["K"], 1, M=drum["M"], sigma=0, which="LM", return_eigenvectors=False)[0]
        exact = (J01 * drum["wave_speed"] / 0.175) ** 2
        errors.append(abs(lowest / exact - 1))
    assert errors[0] < 0.04 and errors[1] < 0.02
    assert errors[1] < 0.7 * errors[0]


def test_drum_is_symmetric_positive_definite_with_si_units():
    drum = drum_membrane("crescent", cells=30)
    K, M = drum["K"], drum["M"]
    assert (K - K.T).count_nonzero() == 0
    # Diagonally dominant with a clamped neighbour somewhere: positive definite.
    assert np.all(M.diagonal() == pytest.approx(drum["areal_density"] * drum["h"] ** 2))
    assert np.linalg.eigvalsh(K.toarray())[0] > 0
    assert drum["wave_speed"] == pytest.approx(np.sqrt(3000.0 / 0.26))


def test_drum_rejects_unknown_shape():
    with pytest.raises(ValueError, match="unknown drum shape"):
        drum_membrane("hexagon")


@needs_mass
def test_demo_small_grid_matches_dense_eigh():
    cells = 40
    proc = run_cli("demo", "--cells", cells)
    assert proc.returncode == 0, proc.stderr
    rows = table_rows(proc.stdout)
    values = table_values(proc.stdout)
    drum = drum_membrane("crescent", cells=cells)
    dense = scipy.linalg.eigh(drum["K"].toarray(), drum["M"].toarray(), eigvals_only=True)[: len(values)]
    assert len(values) == 8
    # The table prints 15 significant digits; tolerance 1e-10 asked of the solver.
    np.testing.assert_allclose(values, dense, rtol=1e-9)
    # Frequency column: f = sqrt(lambda) / (2 pi), printed to 3 decimals.
    freqs = np.array([float(rest.split()[0]) for _, _, rest in rows])
    np.testing.assert_allclose(freqs, np.sqrt(dense) / (2 * np.pi), atol=6e-4)
    assert all("converged" in rest and "NOT" not in rest for _, _, rest in rows)
    assert "qualified engineer" in proc.stdout and proc.stdout.count("Caution") == 1


@needs_mass
def test_demo_default_runs_and_plots(tmp_path):
    pytest.importorskip("matplotlib")
    png = tmp_path / "modes.png"
    proc = run_cli("demo", "--plot", png)
    assert proc.returncode == 0, proc.stderr
    assert len(table_values(proc.stdout)) == 8
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert proc.stderr == ""  # no progress when stderr is not a terminal
