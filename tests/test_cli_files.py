"""Reading matrix files and rejecting bad input (no solver needed).

Checks against SciPy: the matrices read back are compared with the ones
written by scipy.io.mmwrite / scipy.sparse.save_npz; symmetric storage must be
expanded to the full matrix as the Matrix Market format defines it
(R. F. Boisvert, R. Pozo, K. Remington, "The Matrix Market exchange formats",
NIST 1996 [from memory]: a symmetric file stores only the lower triangle).
"""
import gzip
import os
import shutil
import sys

import numpy as np
import pytest
import scipy.io
import scipy.sparse as sp

from lanqr.mmio import MatrixFileError, check_mass, check_symmetric, read_matrix
from lanqr.problems import laplacian_1d

from _cli_support import run_cli


def _sym(n=7, seed=3):
    rng = np.random.default_rng(seed)
    B = sp.random(n, n, density=0.4, random_state=rng, format="csr")
    return ((B + B.T) + sp.identity(n) * 3).tocsr()


@pytest.fixture
def files(tmp_path):
    A = _sym()
    paths = {}
    paths["general"] = tmp_path / "general.mtx"
    scipy.io.mmwrite(paths["general"], A.tocoo(), symmetry="general")
    paths["symmetric"] = tmp_path / "symmetric.mtx"
    scipy.io.mmwrite(paths["symmetric"], A.tocoo(), symmetry="symmetric")
    paths["gzip"] = tmp_path / "symmetric.mtx.gz"
    with open(paths["symmetric"], "rb") as src, gzip.open(paths["gzip"], "wb") as dst:
        shutil.copyfileobj(src, dst)
    paths["npz"] = tmp_path / "matrix.npz"
    sp.save_npz(paths["npz"], A.tocsc())
    paths["dense"] = tmp_path / "dense.mtx"
    scipy.io.mmwrite(paths["dense"], A.toarray())
    return A, paths


@pytest.mark.parametrize("kind", ["general", "symmetric", "gzip", "npz", "dense"])
def test_read_matches_written_matrix(files, kind):
    A, paths = files
    loaded = read_matrix(paths[kind])
    check_symmetric(loaded)
    # Exactly the matrix SciPy wrote (17 significant digits in the file).
    assert loaded.matrix.shape == A.shape
    np.testing.assert_allclose(loaded.matrix.toarray(), A.toarray(), rtol=1e-15, atol=0)
    assert loaded.asymmetry == 0.0


def test_symmetric_storage_file_written_by_hand(tmp_path):
    # Lower triangle only, as the format defines; the reader must mirror it.
    path = tmp_path / "hand.mtx"
    path.write_text("%%MatrixMarket matrix coordinate real symmetric\n% tridiag(-1,2,-1)\n"
                    "3 3 5\n1 1 2\n2 1 -1\n2 2 2\n3 2 -1\n3 3 2\n")
    loaded = read_matrix(path)
    np.testing.assert_array_equal(loaded.matrix.toarray(), laplacian_1d(3).toarray())
    assert "symmetric" in loaded.storage


def test_format_recognised_without_extension(files, tmp_path):
    A, paths = files
    for kind in ("symmetric", "gzip", "npz"):
        target = tmp_path / f"noext_{kind}"
        shutil.copy(paths[kind], target)
        np.testing.assert_allclose(read_matrix(target).matrix.toarray(), A.toarray(), rtol=1e-15)


def test_rounding_level_asymmetry_is_averaged(tmp_path):
    A = _sym().toarray()
    A[0, 1] *= 1 + 4e-16 / max(abs(A[0, 1]), 1)  # a few ulps, as from a 16-digit export
    A[0, 1] = A[0, 1] + 1e-15
    path = tmp_path / "nearly.mtx"
    scipy.io.mmwrite(path, sp.coo_matrix(A), symmetry="general")
    loaded = check_symmetric(read_matrix(path))
    assert 0 < loaded.asymmetry < 1e-12
    assert (loaded.matrix - loaded.matrix.T).count_nonzero() == 0


@pytest.mark.parametrize(
    "content, message",
    [
        ("%%MatrixMarket matrix coordinate real general\n2 3 1\n1 1 1.0\n", "not square (2 x 3)"),
        ("%%MatrixMarket matrix coordinate real general\n2 2 2\n1 2 1.0\n2 1 5.0\n", "not symmetric"),
        ("%%MatrixMarket matrix coordinate real general\n2 2 2\n1 1 nan\n2 2 1.0\n", "NaN or infinite"),
        ("%%MatrixMarket matrix coordinate complex general\n1 1 1\n1 1 1.0 2.0\n", "complex"),
        ("%%MatrixMarket matrix coordinate real general\n2 2 5\n1 1 1.0\n", "malformed"),
        ("hello, this is not a matrix\n", "unknown format"),
    ],
)
def test_bad_content_raises_one_line(tmp_path, content, message):
    suffix = ".mtx" if content.startswith("%%") else ".txt"
    path = tmp_path / f"bad{suffix}"
    path.write_text(content)
    with pytest.raises(MatrixFileError) as info:
        check_symmetric(read_matrix(path))
    text = str(info.value)
    assert message in text and "\n" not in text and str(path) in text


def test_mass_checks(tmp_path):
    from lanqr.mmio import LoadedMatrix

    K = LoadedMatrix(laplacian_1d(4), "K.mtx", "matrix-market", "general")
    with pytest.raises(MatrixFileError, match="mass matrix is 3 x 3 but K.mtx is 4 x 4"):
        check_mass(K, LoadedMatrix(sp.identity(3, format="csr"), "M.mtx", "matrix-market", "general"))
    with pytest.raises(MatrixFileError, match="not positive definite"):
        check_mass(K, LoadedMatrix(sp.diags([1.0, 1.0, 0.0, 1.0], format="csr"), "M.mtx", "x", "general"))


# --- the same problems through the shell: one line on stderr, exit status 2 ---------------


def _one_line_error(proc, *needles):
    assert proc.returncode == 2, (proc.returncode, proc.stdout, proc.stderr)
    err = proc.stderr.strip()
    assert "Traceback" not in err and "\n" not in err, err
    for needle in needles:
        assert needle in err, err
    assert proc.stdout == ""


@pytest.fixture
def bad_files(tmp_path):
    paths = {}
    def write(name, text):
        paths[name] = tmp_path / name
        paths[name].write_text(text)
    write("good.mtx", "%%MatrixMarket matrix coordinate real symmetric\n3 3 5\n1 1 2\n2 1 -1\n2 2 2\n3 2 -1\n3 3 2\n")
    write("mass2.mtx", "%%MatrixMarket matrix coordinate real general\n2 2 2\n1 1 1\n2 2 1\n")
    write("rect.mtx", "%%MatrixMarket matrix coordinate real general\n3 2 1\n1 1 1\n")
    write("unsym.mtx", "%%MatrixMarket matrix coordinate real general\n2 2 3\n1 1 1\n1 2 3\n2 2 1\n")
    write("notes.txt", "just some words\n")
    paths["broken.mtx.gz"] = tmp_path / "broken.mtx.gz"
    paths["broken.mtx.gz"].write_bytes(b"\x1f\x8b\x08\x00garbage-not-really-gzip")
    return paths


def test_shell_missing_file(tmp_path):
    _one_line_error(run_cli("solve", tmp_path / "nothing.mtx"), "nothing.mtx", "no such file")


def test_shell_unreadable_file(bad_files):
    _one_line_error(run_cli("solve", bad_files["broken.mtx.gz"]), "broken.mtx.gz", "cannot read")


def test_shell_directory_given(tmp_path):
    _one_line_error(run_cli("count", tmp_path, "--below", "1"), "is a directory")


def test_shell_unknown_format(bad_files):
    _one_line_error(run_cli("solve", bad_files["notes.txt"]), "unknown format")


def test_shell_not_square(bad_files):
    _one_line_error(run_cli("solve", bad_files["rect.mtx"]), "not square (3 x 2)")


def test_shell_not_symmetric(bad_files):
    _one_line_error(run_cli("count", bad_files["unsym.mtx"], "--below", "0"), "not symmetric", "(1, 2)")


def test_shell_mass_size_mismatch(bad_files):
    _one_line_error(run_cli("solve", bad_files["good.mtx"], "--mass", bad_files["mass2.mtx"]),
                    "mass matrix is 2 x 2", "3 x 3")


@pytest.mark.parametrize("k", ["0", "4"])
def test_shell_k_out_of_range(bad_files, k):
    _one_line_error(run_cli("solve", bad_files["good.mtx"], "-k", k), f"-k {k} is out of range", "order 3")


def test_shell_frequencies_need_mass(bad_files):
    _one_line_error(run_cli("solve", bad_files["good.mtx"], "--frequencies"), "--frequencies needs a mass matrix")


def test_shell_unknown_bench_case():
    _one_line_error(run_cli("bench", "--case", "no-such-case"), "unknown case 'no-such-case'")


def test_bench_lists_cases():
    from lanqr.benchmark import CASES

    proc = run_cli("bench", "--list")
    assert proc.returncode == 0
    assert [line.split()[0] for line in proc.stdout.splitlines()] == list(CASES)


def test_plot_without_matplotlib_is_a_clear_message(bad_files, monkeypatch, capsys):
    from lanqr import cli

    monkeypatch.setitem(sys.modules, "matplotlib", None)  # import matplotlib now fails
    status = cli.main(["solve", str(bad_files["good.mtx"]), "--plot", os.devnull])
    err = capsys.readouterr().err
    assert status == 2
    assert "matplotlib" in err and "pip install 'lanqr[plot]'" in err and "\n" not in err.strip()


def test_help_names_every_subcommand():
    proc = run_cli("--help")
    assert proc.returncode == 0
    for name in ("solve", "count", "demo", "bench"):
        assert name in proc.stdout


def test_convergence_plot_follows_each_copy_of_a_double_eigenvalue():
    # Synthetic restart records: eigenvalues 1 and 2 (double).  The second copy of 2
    # appears only at the third restart, as in Lanczos, where a copy must enter from
    # rounding or a fresh start.  Ritz values farther from a pair than their residual
    # estimate cannot approximate it (reference-values.md §12, bound 1) and are skipped.
    from types import SimpleNamespace

    from lanqr.cli import _follow_pairs

    result = SimpleNamespace(values=np.array([1.0, 2.0, 2.0]), tol=1e-8)
    history = [
        {"ritz": np.array([1.1, 2.2, 5.0]), "estimates": np.array([0.3, 0.5, 2.0])},
        {"ritz": np.array([1.0 + 1e-10, 2.0 + 1e-5, 4.0]), "estimates": np.array([1e-9, 1e-4, 1.0])},
        {"ritz": np.array([2.0 + 1e-12, 2.5, 3.5]), "estimates": np.array([1e-9, 0.6, 1.0])},
        {"ritz": np.array([2.0 + 1e-3, 3.5]), "estimates": np.array([1e-2, 1.0])},
        {"ritz": np.array([2.0 + 1e-13, 3.5]), "estimates": np.array([1e-9, 1.0])},
    ]
    traces = _follow_pairs(result, history)
    # Pair 1: followed until its estimate meets the tolerance, then locked (not followed).
    assert traces[0][0] == [0, 1]
    # Pair 2 converges at restart 2; pair 3 is the copy that appears at restart 2 (2.5,
    # within its estimate 0.6 of 2) and converges at restart 4.
    assert traces[1][0] == [0, 1, 2]
    assert traces[2][0] == [2, 3, 4]
    assert traces[2][1][-1] == pytest.approx(1e-9 / 2.0)


def test_convergence_plot_skips_pairs_a_polynomial_filter_left_unamplified():
    # A filtered run records NaN (no value in A) and an infinite estimate for
    # Ritz pairs outside the amplified range; the matching must skip them.
    from types import SimpleNamespace

    from lanqr.cli import _follow_pairs

    result = SimpleNamespace(values=np.array([1.0, 2.0]), tol=1e-8)
    history = [
        {"ritz": np.array([1.0 + 1e-3, np.nan, 2.0 + 1e-3]),
         "estimates": np.array([1e-2, np.inf, 1e-2])},
        {"ritz": np.array([1.0, 2.0, np.nan]), "estimates": np.array([1e-9, 1e-9, np.inf])},
    ]
    traces = _follow_pairs(result, history)
    assert traces[0][0] == [0, 1] and traces[1][0] == [0, 1]


def test_bench_backward_error_on_closed_form_pairs():
    # reference-values.md §4: sin(i j pi/(n+1)) are exact eigenvectors of tridiag(-1, 2, -1)
    # with eigenvalues 4 sin^2(j pi/(2(n+1))); their backward error is at rounding level,
    # and a wrong eigenvalue gives exactly |Δλ| ||x|| / ((||A||_1 + |λ|) ||x||).
    from lanqr.benchmark import max_backward_error
    from lanqr.problems import laplacian_1d_values

    n = 50
    A = laplacian_1d(n)
    i = np.arange(1, n + 1)[:, None]
    j = np.arange(1, 4)[None, :]
    X = np.sin(i * j * np.pi / (n + 1))
    lam = laplacian_1d_values(n)[:3]
    assert max_backward_error(A, None, lam, X) < 10 * np.finfo(float).eps
    shifted = lam + np.array([0.0, 0.0, 1e-6])
    assert max_backward_error(A, None, shifted, X) == pytest.approx(1e-6 / (4.0 + shifted[2]), rel=1e-6)
