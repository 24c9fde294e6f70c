"""Problem generators shared by the demo, the tests and the benchmarks.

Every function returns SciPy sparse matrices in CSR format (float64) unless
it says otherwise.  Closed-form spectra, where they exist, come with their own
function so tests and benchmarks can measure errors against them.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp


def laplacian_1d(n, *, format="csr"):
    """The Dirichlet difference matrix tridiag(-1, 2, -1) of order ``n``."""
    main = np.full(n, 2.0)
    off = np.full(max(n - 1, 0), -1.0)
    return sp.diags([off, main, off], [-1, 0, 1], shape=(n, n), format=format)


def laplacian_1d_values(n):
    """Closed-form eigenvalues of :func:`laplacian_1d`, ascending."""
    j = np.arange(1, n + 1)
    return 4.0 * np.sin(j * np.pi / (2.0 * (n + 1))) ** 2


def laplacian_grid(shape):
    """Dirichlet difference Laplacian on a 1-, 2- or 3-D grid of interior points.

    ``shape`` is an int or a tuple of grid sizes; the matrix is the Kronecker
    sum of 1-D matrices ``tridiag(-1, 2, -1)`` (unscaled, so its spectrum lies
    in ``(0, 4 d)``).
    """
    shape = (shape,) if np.isscalar(shape) else tuple(shape)
    total = None
    for axis, m in enumerate(shape):
        term = laplacian_1d(m, format="csr")
        before = int(np.prod(shape[:axis], dtype=np.int64))
        after = int(np.prod(shape[axis + 1:], dtype=np.int64))
        if before > 1:
            term = sp.kron(sp.identity(before, format="csr"), term, format="csr")
        if after > 1:
            term = sp.kron(term, sp.identity(after, format="csr"), format="csr")
        total = term if total is None else total + term
    return total.tocsr()


def laplacian_grid_values(shape, count=None, *, highest=False):
    """Closed-form eigenvalues of :func:`laplacian_grid` (sorted, with multiplicity).

    With ``count``, only the ``count`` lowest (or highest) are returned.
    """
    shape = (shape,) if np.isscalar(shape) else tuple(shape)
    vals = np.zeros(1)
    for m in shape:
        mu = laplacian_1d_values(m)
        vals = (vals[:, None] + mu[None, :]).ravel()
    vals.sort()
    if count is None:
        return vals
    return vals[-count:] if highest else vals[:count]


def heisenberg_ring(sites):
    """Spin-1/2 Heisenberg antiferromagnetic ring, J = 1, in the Sz = 0 sector.

    H = sum_i S_i . S_{i+1} with periodic bonds, in the basis of Sz product
    states with ``sites/2`` up spins (dimension C(sites, sites/2)).
    """
    L = int(sites)
    if L < 2 or L % 2:
        raise ValueError("sites must be an even number >= 2")
    # All L-bit integers with L/2 bits set, in increasing order.
    all_states = np.arange(1 << L, dtype=np.int64)
    popcount = np.zeros_like(all_states)
    for b in range(L):
        popcount += (all_states >> b) & 1
    states = all_states[popcount == L // 2]
    del all_states, popcount
    dim = len(states)
    diag = np.zeros(dim)
    rows, cols = [], []
    for i in range(L):
        j = (i + 1) % L
        bi = (states >> i) & 1
        bj = (states >> j) & 1
        parallel = bi == bj
        diag += np.where(parallel, 0.25, -0.25)
        flip_from = np.nonzero(~parallel)[0]
        flipped = states[flip_from] ^ ((1 << i) | (1 << j))
        rows.append(flip_from)
        cols.append(np.searchsorted(states, flipped))
    rows = np.concatenate(rows)
    cols = np.concatenate(cols)
    off = sp.csr_matrix((np.full(len(rows), 0.5), (rows, cols)), shape=(dim, dim))
    H = off + sp.diags(diag, format="csr")
    H.sum_duplicates()
    H.sort_indices()
    return H.tocsr()


def graph_laplacian(adjacency):
    """Combinatorial Laplacian D - W of a symmetric non-negative adjacency matrix."""
    W = sp.csr_matrix(adjacency, dtype=np.float64)
    W = W - sp.diags(W.diagonal())
    degree = np.asarray(W.sum(axis=1)).ravel()
    return (sp.diags(degree) - W).tocsr()


def random_geometric_graph(nodes, *, mean_degree=8.0, seed=0):
    """Laplacian of a random geometric graph in the unit square.

    Points uniform in [0, 1]^2, joined when closer than the radius that gives
    about ``mean_degree`` neighbours.  Isolated points give extra zero
    eigenvalues, as in real meshes and sensor networks.
    """
    from scipy.spatial import cKDTree

    rng = np.random.default_rng(seed)
    pts = rng.random((nodes, 2))
    radius = np.sqrt(mean_degree / (np.pi * nodes))
    pairs = cKDTree(pts).query_pairs(radius, output_type="ndarray")
    W = sp.coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(nodes, nodes))
    return graph_laplacian(W + W.T)


def disjoint_paths_laplacian(lengths):
    """Graph Laplacian of disjoint paths: one zero eigenvalue per component."""
    blocks = []
    for m in lengths:
        L = laplacian_1d(m, format="lil")
        L[0, 0] = 1.0
        L[m - 1, m - 1] = 1.0
        blocks.append(L.tocsr())
    return sp.block_diag(blocks, format="csr")


def random_sparse_symmetric(n, density=0.01, *, seed=0, diagonal_shift=0.0):
    """A random sparse symmetric (generally indefinite) matrix."""
    rng = np.random.default_rng(seed)
    B = sp.random(n, n, density=density, random_state=rng, format="csr")
    B.data = rng.standard_normal(B.nnz)
    A = (B + B.T) * 0.5 + sp.identity(n, format="csr") * diagonal_shift
    return A.tocsr()


# --- Drum membranes (the demo of the shell command) -------------------------------------


def drum_membrane(shape="crescent", *, cells=120, size=0.35, tension=3000.0, areal_density=0.26):
    """A vibrating drumhead of a given outline, clamped at its rim, in SI units.

    The transverse displacement ``u`` of a membrane under tension ``T``
    (N/m) with areal density ``rho`` (kg/m^2) obeys ``-T Δu = ω² rho u``
    inside the outline and ``u = 0`` on the rim.  On a square grid of spacing
    ``h`` the 5-point difference stencil gives the pencil ``K x = λ M x`` with

    * ``K = T · (4 u_ij - u_(i±1)j - u_i(j±1))`` over the grid points strictly
      inside the outline (neighbours outside count as clamped), in N/m;
    * ``M = rho h² I``, the mass carried by each grid point, in kg;

    so that ``λ = ω²`` in (rad/s)² and a mode's frequency is
    ``f = sqrt(λ) / (2π)`` Hz.  The rim is resolved to one grid cell
    (staircase), so eigenvalues converge at first order in ``h`` for curved
    outlines and exactly match the difference matrix for the square.

    Parameters
    ----------
    shape : {"crescent", "disc", "square"}
        ``"crescent"``: a disc of diameter ``size`` with an offset disc of
        diameter ``0.8 size`` cut away (a crescent-moon drumhead, thick on
        one side and tapering to two horns).  ``"disc"``: a round drum of
        diameter ``size`` (closed-form limit: ``ω₁ = j₀₁ c / R``).
        ``"square"``: side ``size`` (the grid then has ``cells - 1`` interior
        points per side and the discrete spectrum is known in closed form).
    cells : int
        Grid cells across ``size``; ``h = size / cells``.
    size : float
        Diameter (or side) in metres.
    tension : float
        Membrane tension ``T`` in N/m.
    areal_density : float
        Mass per area ``rho`` in kg/m².  The defaults (3000 N/m, 0.26 kg/m²:
        a 0.19 mm polyester film) give a wave speed near 107 m/s.

    Returns
    -------
    dict
        ``K`` and ``M`` (CSR), ``inside`` (bool mask on the ``(cells+1) x
        (cells+1)`` grid of nodes, row index = y), ``x`` and ``y`` (node
        coordinates, 1-D), ``h``, ``tension``, ``areal_density``,
        ``wave_speed`` and ``shape``.

    Examples
    --------
    >>> drum = drum_membrane("disc", cells=40)
    >>> drum["K"].shape == drum["M"].shape
    True
    """
    if shape not in ("crescent", "disc", "square"):
        raise ValueError(f"unknown drum shape {shape!r}: use 'crescent', 'disc' or 'square'")
    cells = int(cells)
    if cells < 3:
        raise ValueError(f"cells must be at least 3, got {cells}")
    h = size / cells
    coords = (np.arange(cells + 1) - cells / 2.0) * h
    X, Y = np.meshgrid(coords, coords)
    R = size / 2.0
    # A tiny margin keeps nodes that fall on the rim (within rounding) clamped.
    margin = 1e-9 * h
    if shape == "square":
        inside = (np.abs(X) < R - margin) & (np.abs(Y) < R - margin)
    else:
        inside = X**2 + Y**2 < (R - margin) ** 2
        if shape == "crescent":
            cut_radius = 0.4 * size
            cut_centre = 0.22 * size
            inside &= (X - cut_centre) ** 2 + Y**2 > (cut_radius + margin) ** 2
    number = -np.ones(inside.shape, dtype=np.int64)
    number[inside] = np.arange(int(inside.sum()))
    n = int(inside.sum())
    rows, cols = [np.arange(n)], [np.arange(n)]
    vals = [np.full(n, 4.0 * tension)]
    iy, ix = np.nonzero(inside)
    for dy, dx in ((0, 1), (1, 0), (0, -1), (-1, 0)):
        jy, jx = iy + dy, ix + dx
        valid = (jy >= 0) & (jy <= cells) & (jx >= 0) & (jx <= cells)
        neighbour = np.full(n, -1, dtype=np.int64)
        neighbour[valid] = number[jy[valid], jx[valid]]
        keep = neighbour >= 0
        rows.append(number[iy[keep], ix[keep]])
        cols.append(neighbour[keep])
        vals.append(np.full(int(keep.sum()), -tension))
    K = sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)
    )
    K.sum_duplicates()
    M = sp.diags(np.full(n, areal_density * h * h), format="csr")
    return {
        "K": K,
        "M": M,
        "inside": inside,
        "x": coords,
        "y": coords,
        "h": h,
        "tension": float(tension),
        "areal_density": float(areal_density),
        "wave_speed": float(np.sqrt(tension / areal_density)),
        "shape": shape,
    }
