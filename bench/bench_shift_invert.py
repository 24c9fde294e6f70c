"""Shift-invert side by side with scipy.sparse.linalg.eigsh (ARPACK, mode 3).

Cases (issue 4):
  plate    2-D plane-stress bracket plate, ~100,000 DOF, K x = l M x, lowest 10
  lap300   2-D Laplacian 300 x 300, lowest 10 by shift-invert about 0
  lattice  disordered 3-D lattice 40^3, 10 eigenvalues nearest 0

Both sides factor A - sigma M with SciPy's SuperLU (eigsh with its default
options, lanqr with a symmetric ordering) and the factorization time is
counted on both sides.  Every (case, solver, repeat) runs in a fresh Python
process so that peak memory (ru_maxrss of the child) is per solve; the
problem is built before the clock starts.  Reported: median wall time,
lanqr/eigsh ratios, operator applications (solves), max explicit relative
residual ||A x - l M x|| / ((||A||_1 + |l| ||M||_1) ||x||), peak RSS.

lanqr runs twice where a count check applies: "lanqr" with the inertia
certificate (one more factorization), "lanqr-nocert" without, which is the
like-for-like comparison with eigsh (which certifies nothing).

Usage:
  python bench/bench_shift_invert.py                 # all cases, 3 repeats
  python bench/bench_shift_invert.py --cases lap300 --repeats 5
  python bench/bench_shift_invert.py --quick         # smaller sizes, a smoke run
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import time

import numpy as np

TOL = 1e-8
K_WANTED = 10


def build(case, quick):
    from lanqr import problems
    if case == "plate":
        K, M = problems.bracket_plate(60 if quick else 316)
        return K, M, 0.0
    if case == "lap300":
        return problems.laplacian_grid((60, 60) if quick else (300, 300)), None, 0.0
    if case == "lattice":
        return problems.disordered_lattice((12, 12, 12) if quick else (40, 40, 40), seed=0), None, 0.0
    raise ValueError(case)


def residual(A, M, values, X):
    import scipy.sparse.linalg as spla
    an = spla.norm(A, 1)
    mn = 1.0 if M is None else spla.norm(M, 1)
    MX = X if M is None else M @ X
    R = A @ X - MX * values
    return float(np.max(np.linalg.norm(R, axis=0) / ((an + np.abs(values) * mn) * np.linalg.norm(X, axis=0))))


def child(case, solver, quick):
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla
    import lanqr
    from lanqr.spectral import generalized_lowest

    A, M, sigma = build(case, quick)
    t0 = time.perf_counter()
    if solver.startswith("lanqr"):
        certify = solver == "lanqr"
        if case == "lattice":
            res = lanqr.nearest(A, K_WANTED, sigma, tol=TOL, seed=0, certify=certify)
        else:
            res = generalized_lowest(A, K_WANTED, M=M, shift=sigma, tol=TOL, seed=0, certify=certify)
        elapsed = time.perf_counter() - t0
        values, X, applications = res.values, res.vectors, res.matvecs
        extra = {"converged": int(np.sum(res.converged)),
                 "count_ok": None if res.count_check is None else bool(res.count_check.ok),
                 "fill": res.info.get("factorization", {}).get("fill"),
                 "factor_s": res.info.get("factorization", {}).get("seconds"),
                 "restarts": res.restarts}
    else:
        counted = solver == "eigsh-counted"
        calls = [0]
        kwargs = {}
        if counted:
            # The same factorization eigsh builds internally (splu with default
            # options on A - sigma M), wrapped to count the solves.
            C = sp.csc_matrix(A - sigma * (M if M is not None else sp.identity(A.shape[0])))
            lu = spla.splu(C)

            def solve(b):
                calls[0] += 1 if b.ndim == 1 else b.shape[1]
                return lu.solve(b)
            kwargs["OPinv"] = spla.LinearOperator(A.shape, matvec=solve, dtype=float)
        values, X = spla.eigsh(A, k=K_WANTED, M=M, sigma=sigma, which="LM", tol=TOL, **kwargs)
        elapsed = time.perf_counter() - t0
        order = np.argsort(values)
        values, X = values[order], X[:, order]
        applications = calls[0] if counted else None
        extra = {}
    out = {"case": case, "solver": solver, "seconds": elapsed, "applications": applications,
           "residual": residual(A, M, values, X), "n": A.shape[0],
           "values": values.tolist(),
           "maxrss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0}
    out.update(extra)
    print("RESULT " + json.dumps(out))


def run_child(case, solver, quick):
    cmd = [sys.executable, __file__, "--child", case, solver] + (["--quick"] if quick else [])
    proc = subprocess.run(cmd, capture_output=True, text=True)
    for line in proc.stdout.splitlines():
        if line.startswith("RESULT "):
            return json.loads(line[7:])
    raise RuntimeError(f"child failed: {proc.stderr[-2000:]}")


def environment():
    info = {"python": platform.python_version(), "machine": platform.machine(),
            "cpus": os.cpu_count(), "OMP_NUM_THREADS": os.environ.get("OMP_NUM_THREADS")}
    import numpy
    import scipy
    info["numpy"], info["scipy"] = numpy.__version__, scipy.__version__
    try:
        from threadpoolctl import threadpool_info
        info["blas"] = [(p.get("internal_api"), p.get("num_threads")) for p in threadpool_info()]
    except ImportError:
        info["blas"] = "threadpoolctl not installed"
    return info


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cases", nargs="+", default=["plate", "lap300", "lattice"])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--child", nargs=2, metavar=("CASE", "SOLVER"))
    ap.add_argument("--json", help="write all raw results to this file")
    args = ap.parse_args()
    if args.child:
        child(args.child[0], args.child[1], args.quick)
        return
    print("environment:", json.dumps(environment()))
    rows, raw = [], []
    for case in args.cases:
        solvers = ["eigsh", "lanqr-nocert"] + (["lanqr"] if case != "lattice" else [])
        runs = {s: [] for s in solvers}
        # Interleave the solvers so a change in machine load hits both sides alike.
        for _ in range(args.repeats):
            for s in solvers:
                r = run_child(case, s, args.quick)
                runs[s].append(r)
                raw.append(r)
        counted = run_child(case, "eigsh-counted", args.quick)
        raw.append(counted)
        base = statistics.median(r["seconds"] for r in runs["eigsh"])
        base_mem = statistics.median(r["maxrss_mb"] for r in runs["eigsh"])
        ref_vals = np.array(runs["eigsh"][0]["values"])
        for s in solvers:
            t = statistics.median(r["seconds"] for r in runs[s])
            mem = statistics.median(r["maxrss_mb"] for r in runs[s])
            last = runs[s][-1]
            apps = counted["applications"] if s == "eigsh" else last["applications"]
            dv = float(np.max(np.abs(np.array(last["values"]) - ref_vals) / np.abs(ref_vals)))
            rows.append((case, last["n"], s, t, t / base, apps, last["residual"], mem, mem / base_mem,
                         dv, last.get("count_ok"), last.get("fill")))
    hdr = (f"{'case':8} {'n':>7} {'solver':13} {'median s':>9} {'ratio':>6} {'applic.':>7} "
           f"{'max resid':>9} {'peak MB':>8} {'mem ratio':>9} {'|dl|/l vs eigsh':>15} {'count':>6} {'fill':>5}")
    print(hdr)
    for case, n, s, t, ratio, apps, res, mem, mr, dv, ok, fill in rows:
        print(f"{case:8} {n:>7} {s:13} {t:9.2f} {ratio:6.2f} {str(apps):>7} {res:9.1e} {mem:8.0f} "
              f"{mr:9.2f} {dv:15.1e} {str(ok):>6} {('-' if fill is None else f'{fill:.1f}'):>5}")
    if args.json:
        with open(args.json, "w") as fh:
            json.dump({"environment": environment(), "runs": raw}, fh, indent=1)


if __name__ == "__main__":
    main()
