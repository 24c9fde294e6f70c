"""Reading matrices from files for the shell command, with one-line diagnoses.

Two formats are accepted: Matrix Market (``.mtx``, ``.mm``, optionally gzip
compressed: ``.mtx.gz``), read with :func:`scipy.io.mmread` so that symmetric
storage (only one triangle in the file) is expanded, and SciPy's sparse
``.npz`` (:func:`scipy.sparse.save_npz`).  Every problem a user can cause is
reported as a :class:`MatrixFileError` whose message is a single line naming
the file and the problem; the shell turns it into exit status 2.
"""
from __future__ import annotations

import gzip
import hashlib
import os
import zipfile
import zlib
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

__all__ = ["MatrixFileError", "LoadedMatrix", "read_matrix", "check_symmetric", "check_mass"]

# Asymmetry below this (relative to the largest entry) is taken as rounding in
# the exporting program and removed by averaging with the transpose; above it
# the matrix is rejected.  Sixteen-digit exports of symmetric assemblies differ
# from their transposes by a few ulps, never by 1e-10 [common practice].
SYMMETRY_TOL = 1e-10

_MM_BANNER = b"%%matrixmarket"


class MatrixFileError(ValueError):
    """A matrix file cannot be used: missing, unreadable, wrong format or wrong shape."""


@dataclass
class LoadedMatrix:
    """A matrix read from a file, with what is known about where it came from.

    Attributes
    ----------
    matrix : scipy.sparse.csr_matrix
        The matrix, float64, CSR, duplicates summed.
    path : str
        The path as given.
    format : str
        ``"matrix-market"``, ``"matrix-market (gzip)"`` or ``"scipy-npz"``.
    storage : str
        For Matrix Market: the symmetry field of the header (``general``,
        ``symmetric``...); for ``.npz`` the SciPy format stored (``csr``...).
    asymmetry : float
        ``max |A - Aᵀ| / max |A|`` before symmetrization (0 for exact symmetry).
    sha256 : str
        SHA-256 digest of the file's bytes.
    """

    matrix: sp.csr_matrix
    path: str
    format: str
    storage: str
    asymmetry: float = 0.0
    sha256: str = ""

    @property
    def n(self) -> int:
        return self.matrix.shape[0]

    def describe(self) -> dict:
        return {
            "path": self.path,
            "format": self.format,
            "storage": self.storage,
            "rows": int(self.matrix.shape[0]),
            "columns": int(self.matrix.shape[1]),
            "stored_entries": int(self.matrix.nnz),
            "asymmetry": float(self.asymmetry),
            "sha256": self.sha256,
        }


def _sniff(path):
    """Return ``"mtx"``, ``"mtx.gz"``, ``"npz"`` or None from the name, else the first bytes."""
    lower = path.lower()
    if lower.endswith((".mtx.gz", ".mm.gz")):
        return "mtx.gz"
    if lower.endswith((".mtx", ".mm")):
        return "mtx"
    if lower.endswith(".npz"):
        return "npz"
    with open(path, "rb") as fh:
        head = fh.read(16)
    if head.lower().startswith(_MM_BANNER[:14]):
        return "mtx"
    if head[:2] == b"\x1f\x8b":
        with gzip.open(path, "rb") as fh:
            inner = fh.read(16)
        if inner.lower().startswith(_MM_BANNER[:14]):
            return "mtx.gz"
        return None
    if head[:4] == b"PK\x03\x04":
        return "npz"
    return None


def _mm_header(path, compressed):
    opener = gzip.open if compressed else open
    with opener(path, "rb") as fh:
        line = fh.readline(1024)
    words = line.strip().lower().split()
    if not words or words[0] != _MM_BANNER:
        raise MatrixFileError(f"{path}: not a Matrix Market file (first line does not start with %%MatrixMarket)")
    if len(words) != 5:
        raise MatrixFileError(f"{path}: Matrix Market header needs 4 words after the banner, found {len(words) - 1}")
    _, obj, layout, field, symmetry = (w.decode("ascii", "replace") for w in words)
    if obj != "matrix":
        raise MatrixFileError(f"{path}: Matrix Market object '{obj}' is not a matrix")
    if field == "complex":
        raise MatrixFileError(f"{path}: complex entries are not supported (lanqr solves real symmetric problems)")
    if symmetry in ("hermitian",):
        raise MatrixFileError(f"{path}: hermitian storage is not supported (lanqr solves real symmetric problems)")
    if symmetry == "skew-symmetric":
        raise MatrixFileError(f"{path}: the file declares a skew-symmetric matrix, which has no real eigenvalues to find")
    return layout, field, symmetry


def read_matrix(path):
    """Read a square real matrix from a Matrix Market or SciPy ``.npz`` file.

    Parameters
    ----------
    path : str or os.PathLike
        ``.mtx`` / ``.mm`` (optionally ``.gz``) or ``.npz``.  Without one of
        these endings the format is recognised from the first bytes.

    Returns
    -------
    LoadedMatrix
        The matrix in CSR form (float64) with its provenance.  Symmetry is not
        checked here: see :func:`check_symmetric`.

    Raises
    ------
    MatrixFileError
        Missing or unreadable file, unknown format, a malformed file, complex
        entries, a matrix that is not square or is empty, NaN or infinite entries.

    Examples
    --------
    >>> import os, tempfile, scipy.io, scipy.sparse as sp
    >>> p = os.path.join(tempfile.mkdtemp(), "a.mtx")
    >>> scipy.io.mmwrite(p, sp.identity(3, format="coo"), symmetry="symmetric")
    >>> read_matrix(p).storage
    'coordinate real symmetric'
    """
    path = os.fspath(path)
    if not os.path.exists(path):
        raise MatrixFileError(f"{path}: no such file")
    if os.path.isdir(path):
        raise MatrixFileError(f"{path}: is a directory, not a matrix file")
    try:
        kind = _sniff(path)
    except (OSError, EOFError, zlib.error) as exc:
        raise MatrixFileError(f"{path}: cannot read ({_first_line(exc)})") from None
    if kind is None:
        raise MatrixFileError(
            f"{path}: unknown format (expected Matrix Market .mtx / .mtx.gz or SciPy sparse .npz)"
        )
    try:
        if kind == "npz":
            matrix, fmt, storage = _read_npz(path)
        else:
            matrix, fmt, storage = _read_mm(path, compressed=(kind == "mtx.gz"))
    except MatrixFileError:
        raise
    except (OSError, EOFError, zipfile.BadZipFile, zlib.error) as exc:
        raise MatrixFileError(f"{path}: cannot read ({_first_line(exc)})") from None
    except MemoryError:
        raise MatrixFileError(f"{path}: cannot read (not enough memory)") from None
    except Exception as exc:  # noqa: BLE001 - any parser failure is a malformed file to the user
        raise MatrixFileError(f"{path}: malformed {fmt_name(kind)} file ({_first_line(exc)})") from None

    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1]:
        raise MatrixFileError(f"{path}: matrix is not square ({matrix.shape[0]} x {matrix.shape[1]})")
    if matrix.shape[0] == 0:
        raise MatrixFileError(f"{path}: matrix is empty (0 x 0)")
    if np.iscomplexobj(matrix.data):
        raise MatrixFileError(f"{path}: complex entries are not supported (lanqr solves real symmetric problems)")
    matrix = sp.csr_matrix(matrix, dtype=np.float64)
    matrix.sum_duplicates()
    bad = ~np.isfinite(matrix.data)
    if bad.any():
        where = np.flatnonzero(bad)[0]
        row = int(np.searchsorted(matrix.indptr, where, side="right") - 1)
        col = int(matrix.indices[where])
        raise MatrixFileError(
            f"{path}: {int(bad.sum())} entries are NaN or infinite (first at row {row + 1}, column {col + 1})"
        )
    return LoadedMatrix(matrix=matrix, path=path, format=fmt, storage=storage, sha256=_sha256(path))


def _sha256(path):
    """Digest of the file as stored, so a report names exactly the data it describes."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _first_line(exc):
    text = str(getattr(exc, "strerror", None) or exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def fmt_name(kind):
    return "SciPy .npz" if kind == "npz" else "Matrix Market"


def _read_mm(path, *, compressed):
    import scipy.io

    layout, field, symmetry = _mm_header(path, compressed)
    if compressed:
        # Through a file object, so that gzip files without a .gz ending work too.
        with gzip.open(path, "rb") as fh:
            data = scipy.io.mmread(fh)
    else:
        data = scipy.io.mmread(path)
    matrix = sp.csr_matrix(data) if not sp.issparse(data) else data.tocsr()
    fmt = "matrix-market (gzip)" if compressed else "matrix-market"
    return matrix, fmt, f"{layout} {field} {symmetry}"


def _read_npz(path):
    try:
        matrix = sp.load_npz(path)
    except ValueError as exc:
        # np.savez archives of dense arrays have no 'format' entry.
        raise MatrixFileError(f"{path}: not a SciPy sparse .npz file ({str(exc).splitlines()[0]})") from None
    return sp.csr_matrix(matrix), "scipy-npz", str(matrix.format)


def check_symmetric(loaded, *, tol=SYMMETRY_TOL):
    """Check that a loaded matrix is symmetric; average away rounding-level asymmetry.

    Parameters
    ----------
    loaded : LoadedMatrix
        Modified in place: ``matrix`` becomes ``(A + Aᵀ)/2`` when the
        asymmetry is positive but at most ``tol``; ``asymmetry`` is recorded.
    tol : float
        Largest accepted ``max |A - Aᵀ| / max |A|``.

    Raises
    ------
    MatrixFileError
        When the relative asymmetry exceeds ``tol``; the message names the
        worst entry.
    """
    A = loaded.matrix
    diff = (A - A.T).tocoo()
    diff.eliminate_zeros()
    if diff.nnz == 0:
        loaded.asymmetry = 0.0
        return loaded
    scale = float(np.max(np.abs(A.data))) if A.nnz else 0.0
    worst = int(np.argmax(np.abs(diff.data)))
    rel = float(abs(diff.data[worst]) / scale) if scale > 0 else float("inf")
    loaded.asymmetry = rel
    if rel > tol:
        i, j = int(diff.row[worst]), int(diff.col[worst])
        raise MatrixFileError(
            f"{loaded.path}: matrix is not symmetric: entry ({i + 1}, {j + 1}) is {A[i, j]:.6g} "
            f"but ({j + 1}, {i + 1}) is {A[j, i]:.6g} (relative asymmetry {rel:.1e} > {tol:.0e})"
        )
    loaded.matrix = ((A + A.T) * 0.5).tocsr()
    return loaded


def check_mass(stiffness, mass):
    """Check that a mass matrix fits its stiffness matrix and has a positive diagonal.

    Raises
    ------
    MatrixFileError
        Sizes differ, or a diagonal entry of the mass matrix is not positive
        (then it cannot be positive definite).
    """
    if mass.n != stiffness.n:
        raise MatrixFileError(
            f"{mass.path}: mass matrix is {mass.n} x {mass.n} but {stiffness.path} is "
            f"{stiffness.n} x {stiffness.n}"
        )
    diag = mass.matrix.diagonal()
    bad = np.flatnonzero(diag <= 0)
    if bad.size:
        raise MatrixFileError(
            f"{mass.path}: mass matrix is not positive definite: diagonal entry {bad[0] + 1} is {diag[bad[0]]:.6g}"
        )
