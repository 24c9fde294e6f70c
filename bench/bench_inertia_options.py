"""Why count_below uses SuperLU in symmetric mode: counts against numpy.linalg.eigvalsh.

For each problem and point x, three counts of eigenvalues below x:
  naive    negative diagonal entries of U from splu with default options
           (COLAMD column order, partial pivoting by rows)
  lanqr    lanqr.count_below (symmetric ordering, diagonal pivots, checked)
  exact    numpy.linalg.eigvalsh (LAPACK) on the dense matrix / pencil
The table shows how often each agrees with LAPACK, and how often the default
factorization happened to use a symmetric permutation at all.

Usage: python bench/bench_inertia_options.py [--points 8]
"""
from __future__ import annotations

import argparse

import numpy as np
import scipy.linalg
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lanqr import count_below, InertiaError
from lanqr import problems


def cases():
    yield "laplacian 1-D n=400", problems.laplacian_1d(400), None
    yield "laplacian 2-D 25x25", problems.laplacian_grid((25, 25)), None
    yield "string pair n=400", *problems.string_pair(400)
    yield "cantilever 60 el.", *problems.cantilever_beam(60)
    yield "plate 16x8 clamped", *problems.bracket_plate(16, 8)
    for seed in range(3):
        rng = np.random.default_rng(seed)
        A = problems.random_sparse_symmetric(500, 0.01, seed=seed) + sp.diags(rng.standard_normal(500))
        yield f"random indefinite #{seed}", A.tocsr(), None


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--points", type=int, default=8)
    args = ap.parse_args()
    print(f"{'problem':24} {'points':>6} {'naive ok':>8} {'naive sym.perm':>14} {'lanqr ok':>8} {'lanqr refused':>13}")
    totals = np.zeros(4, dtype=int)
    npts = 0
    for name, A, M in cases():
        Ad = A.toarray()
        ev = (scipy.linalg.eigh(Ad, M.toarray(), eigvals_only=True) if M is not None
              else np.linalg.eigvalsh(Ad))
        rng = np.random.default_rng(1)
        # Points between consecutive eigenvalues (never at one), spread over the spectrum.
        gaps = np.flatnonzero(np.diff(ev) > 1e-8 * np.max(np.abs(ev)))
        idx = np.sort(rng.choice(gaps, size=min(args.points, len(gaps)), replace=False))
        pts = 0.5 * (ev[idx] + ev[idx + 1])
        naive_ok = sym = ok = refused = 0
        for x in pts:
            exact = int(np.sum(ev < x))
            C = sp.csc_matrix(A - x * (M if M is not None else sp.identity(A.shape[0])))
            lu = spla.splu(C)
            naive_ok += int(np.sum(lu.U.diagonal() < 0)) == exact
            sym += bool(np.array_equal(lu.perm_r, lu.perm_c))
            try:
                ok += count_below(A, x, M=M) == exact
            except InertiaError:
                refused += 1
        print(f"{name:24} {len(pts):>6} {naive_ok:>8} {sym:>14} {ok:>8} {refused:>13}")
        totals += [naive_ok, sym, ok, refused]
        npts += len(pts)
    print(f"{'total':24} {npts:>6} {totals[0]:>8} {totals[1]:>14} {totals[2]:>8} {totals[3]:>13}")


if __name__ == "__main__":
    main()
