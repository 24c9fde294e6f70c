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


# ---------------------------------------------------------------------------
# Generalized pairs (K, M), interior problems and structures for the spectral
# transformations: beams, a string, the L-shaped membrane, a disordered
# lattice and a plane-stress plate.
# ---------------------------------------------------------------------------

def _assemble(element_dofs, element_matrix, size):
    """Sum one dense element matrix into the global matrix at ``element_dofs``.

    ``element_dofs`` has one row per element; a negative entry marks a DOF that
    is held fixed (its row and column are dropped).  COO assembly sums
    duplicates, which is exactly the finite-element sum.
    """
    element_dofs = np.asarray(element_dofs, dtype=np.int64)
    per = element_dofs.shape[1]
    rows = np.repeat(element_dofs, per, axis=1).ravel()
    cols = np.tile(element_dofs, (1, per)).ravel()
    data = np.tile(np.asarray(element_matrix, dtype=np.float64).ravel(), len(element_dofs))
    keep = (rows >= 0) & (cols >= 0)
    A = sp.coo_matrix((data[keep], (rows[keep], cols[keep])), shape=(size, size)).tocsr()
    A.sum_duplicates()
    A.sort_indices()
    # Symmetrize exactly: the element matrices are symmetric, but a sum taken in
    # a different order for (i, j) and (j, i) could differ in the last bit.
    return ((A + A.T) * 0.5).tocsr()


def cantilever_beam(elements, *, length=1.0, bending_stiffness=1.0, mass_per_length=1.0):
    """Stiffness and consistent mass of a cantilever of cubic Hermite beam elements.

    Euler-Bernoulli beam clamped at ``x = 0`` and free at ``x = length``,
    ``elements`` equal elements; unknowns are the deflection and rotation of
    nodes 1..elements (``2 * elements`` in all).

    Returns
    -------
    K, M : scipy.sparse.csr_matrix
        Symmetric positive definite, banded (bandwidth 3).

    Notes
    -----
    The generalized eigenvalues ``K x = lambda M x`` are squared angular
    frequencies; they converge from above to :func:`cantilever_beam_values`
    with relative error O(h^4) (reference-values.md section 7).  The
    condition number of the pair grows like ``elements**4``.
    """
    ne = int(elements)
    if ne < 1:
        raise ValueError(f"elements must be >= 1, got {elements!r}")
    l = float(length) / ne
    EI = float(bending_stiffness)
    rhoA = float(mass_per_length)
    Ke = EI / l**3 * np.array([[12, 6 * l, -12, 6 * l],
                               [6 * l, 4 * l * l, -6 * l, 2 * l * l],
                               [-12, -6 * l, 12, -6 * l],
                               [6 * l, 2 * l * l, -6 * l, 4 * l * l]])
    Me = rhoA * l / 420.0 * np.array([[156, 22 * l, 54, -13 * l],
                                      [22 * l, 4 * l * l, 13 * l, -3 * l * l],
                                      [54, 13 * l, 156, -22 * l],
                                      [-13 * l, -3 * l * l, -22 * l, 4 * l * l]])
    # Element e joins nodes e and e+1; node j carries DOFs 2j-2, 2j-1 once the
    # clamped node 0 is removed (its DOFs become -2, -1: dropped).
    first = 2 * np.arange(ne)[:, None] - 2
    dofs = first + np.arange(4)[None, :]
    return _assemble(dofs, Ke, 2 * ne), _assemble(dofs, Me, 2 * ne)


def _beam_roots(count, clamped_free):
    """Roots of cos x cosh x = -1 (cantilever) or +1 (free-free), ascending."""
    from scipy.optimize import brentq

    roots = []
    for n in range(1, count + 1):
        if clamped_free:
            # cos x + 1/cosh x = 0; the n-th root lies between (2n-1) pi/2 and
            # the neighbouring multiple of pi where cos x = -1.
            f = lambda x: np.cos(x) + 1.0 / np.cosh(x)
            mid = (2 * n - 1) * np.pi / 2
            other = n * np.pi if n % 2 else (n - 1) * np.pi
        else:
            f = lambda x: np.cos(x) - 1.0 / np.cosh(x)
            mid = (2 * n + 1) * np.pi / 2
            other = (n + 1) * np.pi if n % 2 else n * np.pi
        a, b = sorted((mid, other))
        roots.append(brentq(f, a, b, xtol=1e-15, rtol=4 * np.finfo(float).eps))
    return np.array(roots)


def cantilever_beam_values(count, *, length=1.0, bending_stiffness=1.0, mass_per_length=1.0):
    """Euler-Bernoulli limits of the lowest ``count`` eigenvalues (omega^2) of a cantilever.

    ``lambda_n = (beta_n L)^4 EI / (rho A L^4)`` with ``beta_n L`` the roots of
    ``cos x cosh x = -1`` (reference-values.md section 7).
    """
    roots = _beam_roots(int(count), clamped_free=True)
    return roots**4 * bending_stiffness / (mass_per_length * float(length) ** 4)


def free_beam_values(count, *, length=1.0, bending_stiffness=1.0, mass_per_length=1.0):
    """Lowest ``count`` nonzero eigenvalues (omega^2) of a free-free Euler-Bernoulli beam.

    Roots of ``cos x cosh x = 1`` (reference-values.md section 7); the two
    rigid-body modes at zero are not included.
    """
    roots = _beam_roots(int(count), clamped_free=False)
    return roots**4 * bending_stiffness / (mass_per_length * float(length) ** 4)


def string_pair(n, *, length=1.0):
    """Linear finite elements for ``-u'' = lambda u`` on (0, length), Dirichlet ends.

    ``K = (1/h) tridiag(-1, 2, -1)`` and ``M = (h/6) tridiag(1, 4, 1)`` with
    ``h = length/(n+1)``; see :func:`string_pair_values` for the closed form.
    """
    n = int(n)
    if n < 1:
        raise ValueError(f"n must be >= 1, got {n!r}")
    h = float(length) / (n + 1)
    K = laplacian_1d(n) / h
    one = np.ones(max(n - 1, 0))
    M = sp.diags([one, np.full(n, 4.0), one], [-1, 0, 1], shape=(n, n), format="csr") * (h / 6.0)
    return K.tocsr(), M.tocsr()


def string_pair_values(n, *, length=1.0):
    """Closed-form generalized eigenvalues of :func:`string_pair`, ascending.

    ``lambda_j = (6/h^2) (1 - cos(j pi h/L)) / (2 + cos(j pi h/L))``, j = 1..n
    (reference-values.md section 10): both matrices are diagonalised by the same
    sine vectors.
    """
    n = int(n)
    h = float(length) / (n + 1)
    theta = np.arange(1, n + 1) * np.pi / (n + 1)
    return 6.0 / h**2 * (1.0 - np.cos(theta)) / (2.0 + np.cos(theta))


def l_shape_membrane(m):
    """5-point difference Laplacian on the L-shaped membrane, ``h = 1/m``.

    Domain ``[-1, 1]^2`` minus the quadrant ``[0, 1] x [-1, 0]``, Dirichlet
    boundary; the matrix is ``(4 u_ij - neighbours) / h^2`` on the interior
    grid points, order ``(2m-1)^2 - m^2`` (m = 200: 119201, as in
    reference-values.md section 8).
    """
    m = int(m)
    if m < 2:
        raise ValueError(f"m must be >= 2, got {m!r}")
    h = 1.0 / m
    side = 2 * m - 1
    # Grid index i (x = -1 + i h) and j (y = -1 + j h), i, j = 1..2m-1, row-major in i.
    i = np.arange(1, side + 1)[:, None]
    j = np.arange(1, side + 1)[None, :]
    removed = (i >= m) & (j <= m)
    keep = np.flatnonzero(~removed.ravel())
    A = laplacian_grid((side, side))[keep][:, keep] / h**2
    return A.tocsr()


def l_shape_exact_third(m):
    """The exactly known third eigenvalue of :func:`l_shape_membrane`: ``(8/h^2) sin^2(pi h/2)``.

    The grid function ``sin(pi x) sin(pi y)`` vanishes on the re-entrant edges
    x = 0 and y = 0, so it is an exact eigenvector on the L-shape
    (reference-values.md section 8).
    """
    h = 1.0 / int(m)
    return 8.0 / h**2 * np.sin(np.pi * h / 2.0) ** 2


def disordered_lattice(shape, *, disorder=6.0, hopping=1.0, seed=0):
    """Tight-binding Hamiltonian of a disordered lattice (open boundaries).

    ``H = sum_i eps_i |i><i| - hopping * sum_<ij> |i><j|`` on a 1-, 2- or 3-D
    grid, with on-site energies ``eps_i`` uniform in ``[-disorder/2,
    disorder/2]`` drawn from ``numpy.random.default_rng(seed)``.  Its
    spectrum lies in ``[-disorder/2 - 2 d hopping, disorder/2 + 2 d hopping]``
    and its interior (near 0) is dense: a test for shift-invert.
    """
    shape = (shape,) if np.isscalar(shape) else tuple(shape)
    L = laplacian_grid(shape)
    n = L.shape[0]
    d = len(shape)
    adjacency = sp.identity(n, format="csr") * (2.0 * d) - L
    rng = np.random.default_rng(seed)
    onsite = (rng.random(n) - 0.5) * float(disorder)
    H = sp.diags(onsite, format="csr") - float(hopping) * adjacency
    H = H.tocsr()
    H.eliminate_zeros()
    H.sort_indices()
    return H


def _plane_stress_quad(dx, dy, thickness, young, poisson, density):
    """Stiffness and consistent mass (8x8) of one bilinear rectangle, plane stress.

    Node order (0,0), (dx,0), (dx,dy), (0,dy); DOFs (u, v) per node.  2x2 Gauss
    integration is exact for both matrices on a rectangle.
    """
    D = young / (1.0 - poisson**2) * np.array([[1.0, poisson, 0.0],
                                               [poisson, 1.0, 0.0],
                                               [0.0, 0.0, (1.0 - poisson) / 2.0]])
    corners = np.array([[-1, -1], [1, -1], [1, 1], [-1, 1]], dtype=float)
    g = 1.0 / np.sqrt(3.0)
    K = np.zeros((8, 8))
    Mscalar = np.zeros((4, 4))
    jac = dx * dy / 4.0
    for xi in (-g, g):
        for eta in (-g, g):
            N = 0.25 * (1 + corners[:, 0] * xi) * (1 + corners[:, 1] * eta)
            dN_dx = 0.25 * corners[:, 0] * (1 + corners[:, 1] * eta) * (2.0 / dx)
            dN_dy = 0.25 * corners[:, 1] * (1 + corners[:, 0] * xi) * (2.0 / dy)
            B = np.zeros((3, 8))
            B[0, 0::2] = dN_dx
            B[1, 1::2] = dN_dy
            B[2, 0::2] = dN_dy
            B[2, 1::2] = dN_dx
            K += B.T @ D @ B * jac * thickness
            Mscalar += np.outer(N, N) * jac * thickness * density
    M = np.zeros((8, 8))
    M[0::2, 0::2] = Mscalar
    M[1::2, 1::2] = Mscalar
    return 0.5 * (K + K.T), M


def bracket_plate(nx, ny=None, *, clamped=True, length=0.4, height=0.2, thickness=0.006,
                  young=210e9, poisson=0.3, density=7850.0):
    """In-plane vibration of a steel wall-bracket plate: plane stress, bilinear quadrilaterals.

    A rectangular plate ``length x height`` (metres, thickness ``thickness``)
    of ``nx x ny`` equal bilinear elements, bolted to a wall along its edge
    ``x = 0`` (all displacements there held, ``clamped=True``) or floating
    free (``clamped=False``: three rigid-body modes, two translations and a
    rotation, at eigenvalue 0).  SI units; steel by default.

    Returns
    -------
    K, M : scipy.sparse.csr_matrix
        Stiffness and consistent mass; eigenvalues are ``omega^2`` in (rad/s)^2.
        Clamped: ``2 nx (ny + 1)`` unknowns (``nx = 316`` gives 100,488);
        free: ``2 (nx + 1)(ny + 1)``.

    Notes
    -----
    Nodes are numbered along the height first, which keeps the bandwidth at
    about ``2 (ny + 1)``.  No closed form exists for the plate; for a slender
    plate the lowest in-plane modes approach Euler-Bernoulli beam values with
    ``EI = young * thickness * height^3 / 12`` (reference-values.md section 7),
    and the first axial mode of the clamped plate approaches the rod value
    ``(pi / (2 length))^2 young / density``.
    """
    nx = int(nx)
    ny = max(1, nx // 2) if ny is None else int(ny)
    if nx < 1 or ny < 1:
        raise ValueError(f"nx and ny must be >= 1, got {nx!r}, {ny!r}")
    Ke, Me = _plane_stress_quad(length / nx, height / ny, thickness, young, poisson, density)
    rows_per_column = ny + 1
    i = np.repeat(np.arange(nx), ny)
    j = np.tile(np.arange(ny), nx)
    corner_nodes = np.stack([i * rows_per_column + j,
                             (i + 1) * rows_per_column + j,
                             (i + 1) * rows_per_column + j + 1,
                             i * rows_per_column + j + 1], axis=1)
    dofs = np.empty((len(i), 8), dtype=np.int64)
    dofs[:, 0::2] = 2 * corner_nodes
    dofs[:, 1::2] = 2 * corner_nodes + 1
    size = 2 * (nx + 1) * rows_per_column
    if clamped:
        # Nodes of column i = 0 sit on the wall: drop their DOFs and renumber.
        dofs -= 2 * rows_per_column
        size -= 2 * rows_per_column
    return _assemble(dofs, Ke, size), _assemble(dofs, Me, size)


def bracket_plate_rigid_modes(nx, ny=None, *, length=0.4, height=0.2):
    """The three rigid-body displacement fields of the free plate (columns).

    Translation in x, translation in y and the rotation ``(-y, x)`` about the
    origin, in the DOF order of ``bracket_plate(..., clamped=False)``; the free
    stiffness matrix annihilates them exactly (common practice).
    """
    nx = int(nx)
    ny = max(1, nx // 2) if ny is None else int(ny)
    x = np.repeat(np.linspace(0.0, length, nx + 1), ny + 1)
    y = np.tile(np.linspace(0.0, height, ny + 1), nx + 1)
    R = np.zeros((2 * len(x), 3))
    R[0::2, 0] = 1.0
    R[1::2, 1] = 1.0
    R[0::2, 2] = -y
    R[1::2, 2] = x
    return R


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


def random_geometric_graph(nodes, *, mean_degree=8.0, seed=0, largest_component=False):
    """Laplacian of a random geometric graph in the unit square.

    Points uniform in [0, 1]^2, joined when closer than the radius that gives
    about ``mean_degree`` neighbours.  Isolated points and small clusters
    give extra zero eigenvalues (one per connected component), as in real
    meshes and sensor networks.

    Parameters
    ----------
    nodes : int
        Number of random points.
    mean_degree : float, optional
        Expected number of neighbours of a point away from the border.
    seed : int, optional
        Seed of the point positions; the same seed gives the same graph.
    largest_component : bool, optional
        When True, return the Laplacian of the largest connected component
        only (its nodes in their original order; a tie in size goes to the
        component holding the lowest-numbered node).  A connected graph has
        the single zero eigenvalue whose next neighbour is the Fiedler
        value, which is what a spectral partitioning asks for.  Default
        False: the whole graph, every component.

    Returns
    -------
    scipy.sparse.csr_matrix
        The graph Laplacian, of order ``nodes`` (or the size of the largest
        component).

    Examples
    --------
    >>> L = random_geometric_graph(2000, seed=0, largest_component=True)
    >>> L.shape[0] < 2000
    True
    """
    from scipy.sparse.csgraph import connected_components
    from scipy.spatial import cKDTree

    rng = np.random.default_rng(seed)
    pts = rng.random((nodes, 2))
    radius = np.sqrt(mean_degree / (np.pi * nodes))
    pairs = cKDTree(pts).query_pairs(radius, output_type="ndarray")
    W = sp.coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(nodes, nodes))
    W = (W + W.T).tocsr()
    if largest_component:
        _, labels = connected_components(W, directed=False)
        sizes = np.bincount(labels)
        # argmax takes the first maximum: the label of the lowest-numbered
        # node among equal sizes (labels are numbered in node order).
        keep = np.flatnonzero(labels == int(np.argmax(sizes)))
        W = W[keep][:, keep]
    return graph_laplacian(W)


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
