"""``lanqr solve``, ``count`` and ``bench`` driven through the shell on small files."""
import csv
import gzip
import json
import os
import shutil

import numpy as np
import pytest
import scipy.io
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as sla

from lanqr.problems import drum_membrane, laplacian_1d, laplacian_1d_values, laplacian_grid, random_sparse_symmetric

from _cli_support import needs_count, needs_mass, needs_solver, needs_transforms, quiet_env, run_cli, table_rows, table_values

pytestmark = needs_solver

N1 = 60  # 1-D Laplacian order: closed-form spectrum, reference-values.md §4


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("solve")
    paths = {}
    L = laplacian_1d(N1)
    paths["lap_sym"] = folder / "lap_sym.mtx"
    scipy.io.mmwrite(paths["lap_sym"], L.tocoo(), symmetry="symmetric")
    paths["lap_gz"] = folder / "lap_sym.mtx.gz"
    with open(paths["lap_sym"], "rb") as src, gzip.open(paths["lap_gz"], "wb") as dst:
        shutil.copyfileobj(src, dst)
    paths["lap_npz"] = folder / "lap.npz"
    sp.save_npz(paths["lap_npz"], L)
    R = random_sparse_symmetric(120, density=0.05, seed=4)
    paths["rand_general"] = folder / "rand_general.mtx"
    scipy.io.mmwrite(paths["rand_general"], R.tocoo(), symmetry="general")
    drum = drum_membrane("square", cells=13, size=0.4)  # 12 x 12 interior grid
    paths["drum_K"] = folder / "drum_K.mtx"
    scipy.io.mmwrite(paths["drum_K"], drum["K"].tocoo(), symmetry="symmetric")
    paths["drum_M"] = folder / "drum_M.npz"
    sp.save_npz(paths["drum_M"], drum["M"])
    paths["grid"] = folder / "grid.npz"
    sp.save_npz(paths["grid"], laplacian_grid((30, 30)))
    return {"paths": paths, "L": L, "R": R, "drum": drum, "folder": folder}


@pytest.mark.parametrize("key", ["lap_sym", "lap_gz", "lap_npz"])
def test_lowest_matches_closed_form(files, key):
    proc = run_cli("solve", files["paths"][key], "-k", 4, "--tol", "1e-10")
    assert proc.returncode == 0, proc.stderr
    values = table_values(proc.stdout)
    # reference-values.md §4: 4 sin^2(j pi / (2(n+1))), Strang 2007.  Residual <= 1e-10 |λ|
    # bounds the error by 1e-10 |λ| (reference-values.md §12, residual bound 1).
    np.testing.assert_allclose(values, laplacian_1d_values(N1)[:4], rtol=2e-10, atol=0)
    assert "summary:" in proc.stdout and "operator applications" in proc.stdout
    assert proc.stderr == ""


def test_highest_matches_closed_form(files):
    proc = run_cli("solve", files["paths"]["lap_sym"], "-k", 3, "--highest", "--tol", "1e-10")
    assert proc.returncode == 0, proc.stderr
    # reference-values.md §4, top of the same closed-form spectrum.
    np.testing.assert_allclose(table_values(proc.stdout), laplacian_1d_values(N1)[-3:], rtol=2e-10)


def test_general_storage_matches_eigsh(files):
    proc = run_cli("solve", files["paths"]["rand_general"], "-k", 5, "--tol", "1e-10")
    assert proc.returncode == 0, proc.stderr
    expected = np.sort(sla.eigsh(files["R"], 5, which="SA", tol=1e-12, return_eigenvectors=False))
    scale = np.abs(scipy.linalg.eigvalsh(files["R"].toarray())).max()
    np.testing.assert_allclose(table_values(proc.stdout), expected, rtol=0, atol=1e-9 * scale)


def test_json_and_out_folder(files, tmp_path):
    out = tmp_path / "run1"
    proc = run_cli("solve", files["paths"]["lap_sym"], "-k", 4, "--tol", "1e-9", "--json", "--out", out)
    assert proc.returncode == 0, proc.stderr
    report = json.loads(proc.stdout)
    assert report["command"] == "solve"
    assert report["inputs"]["matrix"]["rows"] == N1
    assert report["inputs"]["matrix"]["storage"].endswith("symmetric")
    import hashlib
    assert report["inputs"]["matrix"]["sha256"] == hashlib.sha256(files["paths"]["lap_sym"].read_bytes()).hexdigest()
    assert report["options"]["k"] == 4 and report["options"]["tol"] == 1e-9
    assert {"lanqr", "numpy", "scipy", "python"} <= set(report["versions"])
    res = report["results"]
    np.testing.assert_allclose(res["values"], laplacian_1d_values(N1)[:4], rtol=2e-9)  # §4
    assert res["all_converged"] and all(r <= 1e-9 for r in res["relative_residuals"])
    assert res["operator_applications"] > 0

    # --out: the same report, a CSV with full precision and eigenvectors with small residuals.
    with open(out / "report.json") as fh:
        saved = json.load(fh)
    assert saved["results"] == report["results"]
    with open(out / "eigenpairs.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["index"] for r in rows] == ["1", "2", "3", "4"]
    csv_values = np.array([float(r["eigenvalue"]) for r in rows])
    np.testing.assert_array_equal(csv_values, res["values"])
    assert all(r["converged"] == "yes" for r in rows)
    vectors = np.load(out / "eigenvectors.npy")
    assert vectors.shape == (N1, 4)
    L = files["L"]
    # Residual recomputed here from the matrix, not taken from the solver.
    resid = np.linalg.norm(L @ vectors - vectors * csv_values, axis=0) / (np.abs(csv_values) * np.linalg.norm(vectors, axis=0))
    assert np.all(resid <= 1e-9)
    # Orthonormal columns (common practice for a symmetric eigensolver's output).
    assert np.linalg.norm(vectors.T @ vectors - np.eye(4)) < 1e-8


@needs_mass
def test_mass_matrix_frequencies(files, tmp_path):
    paths, drum = files["paths"], files["drum"]
    out = tmp_path / "drum"
    # k = 4: the 5th and 6th eigenvalues are a double pair (§4: (1,3) and (3,1)), k = 5 would cut it.
    proc = run_cli("solve", paths["drum_K"], "--mass", paths["drum_M"], "-k", 4, "--frequencies",
                   "--shift", "0", "--tol", "1e-10", "--out", out)
    assert proc.returncode == 0, proc.stderr
    # reference-values.md §4 (2-D closed form) scaled by T / (rho h^2), as in test_cli_demo.
    scale = drum["tension"] / (drum["areal_density"] * drum["h"] ** 2)
    expected = scale * np.sort(np.add.outer(laplacian_1d_values(12), laplacian_1d_values(12)).ravel())[:4]
    values = table_values(proc.stdout)
    np.testing.assert_allclose(values, expected, rtol=1e-9)
    with open(out / "eigenpairs.csv", newline="") as fh:
        freqs = np.array([float(r["frequency_hz"]) for r in csv.DictReader(fh)])
    np.testing.assert_allclose(freqs, np.sqrt(expected) / (2 * np.pi), rtol=1e-9)
    assert "frequency [Hz]" in proc.stdout
    assert proc.stdout.count("qualified engineer") == 1
    vectors = np.load(out / "eigenvectors.npy")
    # M-orthonormal eigenvectors for the pencil (design.md, result object).
    M = drum["M"]
    assert np.linalg.norm(vectors.T @ (M @ vectors) - np.eye(4)) < 1e-8
    assert "agrees" in proc.stdout  # the inertia count check of the lowest modes


@needs_mass
def test_cutting_a_double_eigenvalue_is_reported(files):
    # k = 5 takes one of the two copies of the 5th eigenvalue (reference-values.md §4:
    # mu_1 + mu_3 = mu_3 + mu_1): the inertia count sees one more eigenvalue below the
    # top of the returned ones, and the run must say so with exit status 3.
    paths = files["paths"]
    proc = run_cli("solve", paths["drum_K"], "--mass", paths["drum_M"], "-k", 5, "--shift", "0", "--tol", "1e-10")
    assert proc.returncode == 3, (proc.stdout, proc.stderr)
    assert "DISAGREES" in proc.stdout and "inertia count does not match" in proc.stdout


def test_unconverged_pairs_flagged_with_exit_3(files):
    # One restart cannot bring the lowest modes of a 900-point 2-D Laplacian to 1e-13
    # (their relative gaps are ~1e-3): the run must say so instead of pretending.
    proc = run_cli("solve", files["paths"]["grid"], "-k", 6, "--tol", "1e-13", "--max-restarts", 1)
    assert proc.returncode == 3, (proc.stdout, proc.stderr)
    rows = table_rows(proc.stdout)
    assert any("NOT CONVERGED" in rest for _, _, rest in rows)
    assert "did not reach the tolerance" in proc.stdout
    assert "Traceback" not in proc.stderr


def test_plot_convergence_history(files, tmp_path):
    pytest.importorskip("matplotlib")
    png = tmp_path / "history.png"
    proc = run_cli("solve", files["paths"]["grid"], "-k", 3, "--plot", png)
    assert proc.returncode == 0, proc.stderr
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_progress_only_on_a_terminal(files):
    import pty
    import subprocess
    import sys

    def stderr_through_pty(*extra):
        master, slave = pty.openpty()
        try:
            proc = subprocess.run(
                [sys.executable, "-m", "lanqr", "solve", str(files["paths"]["grid"]), "-k", "4", *extra],
                stdout=subprocess.PIPE, stderr=slave, text=True, timeout=120, env=quiet_env(),
            )
            os.close(slave)
            chunks = []
            while True:
                try:
                    data = os.read(master, 65536)
                except OSError:
                    break
                if not data:
                    break
                chunks.append(data)
            return proc, b"".join(chunks).decode(errors="replace")
        finally:
            os.close(master)

    proc, err = stderr_through_pty()
    assert proc.returncode == 0
    assert "restart" in err and "operator applications" in err and err.rstrip().endswith(" s")
    assert "restart" not in proc.stdout.split("summary:")[0]  # the table stays clean
    proc, err = stderr_through_pty("--quiet")
    assert proc.returncode == 0 and err == ""


@needs_transforms
def test_near_matches_eigsh_shift_invert(files):
    proc = run_cli("solve", files["paths"]["rand_general"], "-k", 4, "--near", "0.3", "--tol", "1e-10")
    assert proc.returncode == 0, proc.stderr
    expected = np.sort(sla.eigsh(files["R"], 4, sigma=0.3, which="LM", tol=1e-12, return_eigenvectors=False))
    np.testing.assert_allclose(table_values(proc.stdout), expected, rtol=0, atol=1e-9)


@needs_transforms
def test_between_finds_every_eigenvalue_in_interval(files):
    proc = run_cli("solve", files["paths"]["lap_sym"], "--between", "1.05", "1.55", "--tol", "1e-10")
    assert proc.returncode == 0, proc.stderr
    exact = laplacian_1d_values(N1)  # reference-values.md §4
    inside = exact[(exact >= 1.05) & (exact <= 1.55)]
    assert len(inside) == 6
    np.testing.assert_allclose(np.sort(table_values(proc.stdout)), inside, rtol=1e-9)


@needs_count
def test_count_below(files):
    proc = run_cli("count", files["paths"]["lap_npz"], "--below", "1.0")
    assert proc.returncode == 0, proc.stderr
    # reference-values.md §12 inertia check: #{j : 4 sin^2(j pi/(2(n+1))) < 1}.
    expected = int(np.sum(laplacian_1d_values(N1) < 1.0))
    assert proc.stdout.split()[0] == str(expected)
    proc = run_cli("count", files["paths"]["drum_K"], "--mass", files["paths"]["drum_M"], "--below", "1e7", "--json")
    assert proc.returncode == 0, proc.stderr
    drum = files["drum"]
    scale = drum["tension"] / (drum["areal_density"] * drum["h"] ** 2)
    exact = scale * np.add.outer(laplacian_1d_values(12), laplacian_1d_values(12)).ravel()
    report = json.loads(proc.stdout)
    assert report["results"]["count"] == int(np.sum(exact < 1e7)) and report["results"]["certified"]


def test_bench_on_a_file(files):
    proc = run_cli("bench", files["paths"]["rand_general"], "-k", 3, "--repeat", 1, "--json", "--tol", "1e-9")
    assert proc.returncode == 0, proc.stderr
    report = json.loads(proc.stdout)
    (case,) = report["cases"]
    assert case["order"] == 120 and case["k"] == 3
    for solver in ("lanqr", "scipy"):
        entry = case[solver]
        assert entry["median_s"] > 0 and entry["operator_applications"] > 0 and entry["peak_bytes"] > 0
    # Both solvers' residuals are recomputed by the harness from the matrix.
    assert case["lanqr"]["max_backward_error"] <= 1e-9
    assert case["max_value_difference"] < 1e-7
    assert case["ratios"]["time"] == pytest.approx(case["lanqr"]["median_s"] / case["scipy"]["median_s"])
    assert "cpus" in report["setup"]


def test_bench_table_layout(files):
    proc = run_cli("bench", files["paths"]["lap_npz"], "-k", 2, "--repeat", 1, "--quiet")
    assert proc.returncode == 0, proc.stderr
    assert "ratio = lanqr / SciPy" in proc.stdout
    assert "lap.npz" in proc.stdout


@needs_count
def test_count_at_an_eigenvalue_is_not_certified(tmp_path):
    # tridiag(-1, 2, -1) of order 3 has the eigenvalue 2 exactly (reference-values.md §4:
    # 4 sin^2(2 pi / 8) = 2): A - 2 I is singular, so no count can be certified.
    path = tmp_path / "t3.mtx"
    scipy.io.mmwrite(path, laplacian_1d(3).tocoo(), symmetry="symmetric")
    proc = run_cli("count", path, "--below", "2")
    assert proc.returncode == 3, (proc.stdout, proc.stderr)
    assert proc.stdout == ""
    err = proc.stderr.strip()
    assert "cannot certify" in err and "\n" not in err and "Traceback" not in err
    proc = run_cli("count", path, "--below", "2.001")
    assert proc.returncode == 0 and proc.stdout.split()[0] == "2"


@needs_mass
def test_plot_of_a_shift_invert_run(files, tmp_path):
    pytest.importorskip("matplotlib")
    png = tmp_path / "si.png"
    proc = run_cli("solve", files["paths"]["drum_K"], "--mass", files["paths"]["drum_M"], "-k", 4,
                   "--shift", "0", "--plot", png)
    assert proc.returncode == 0, proc.stderr
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("setting", ["on", "off"])
def test_polynomial_filter_flag(files, setting):
    # The 30 x 30 grid's lowest 6, closed form with multiplicities
    # (reference-values.md §4), with the filter forced on or kept off.
    from lanqr.problems import laplacian_grid_values

    proc = run_cli("solve", files["paths"]["grid"], "-k", 6, "--polynomial-filter", setting, "--json")
    assert proc.returncode == 0, proc.stderr
    report = json.loads(proc.stdout)
    np.testing.assert_allclose(report["results"]["values"], laplacian_grid_values((30, 30), 6),
                               rtol=1e-8)
    assert ("Chebyshev filter" in report["results"]["method"]) == (setting == "on")
    assert report["options"]["polynomial_filter"] == setting


def test_polynomial_filter_with_a_mass_matrix_is_an_input_error(files):
    proc = run_cli("solve", files["paths"]["drum_K"], "--mass", files["paths"]["drum_M"],
                   "--polynomial-filter", "on")
    assert proc.returncode == 2
    assert "standard problems only" in proc.stderr and "Traceback" not in proc.stderr
