import numpy as np, time, os, threadpoolctl, sys
import lanqr._vecops as v
from lanqr.vecops import orthogonalize
n = int(sys.argv[1]) if len(sys.argv) > 1 else 200_000
for j in (20, 60, 100):
    rng = np.random.default_rng(0)
    V = np.asfortranarray(np.linalg.qr(rng.standard_normal((n, j)))[0])
    w0 = rng.standard_normal(n); w = w0.copy()
    wn = V @ rng.standard_normal(j) + 1e-3*w0  # triggers DGKS repeat
    coef = np.empty(j)
    # correctness
    for src in (w0, wn):
        w1 = src.copy(); r1 = v.cgs_dgks(V, w1, coef, 0.7071, 2); c1 = coef.copy()
        for nt in (1, 2):
            w2 = src.copy(); r2 = v.cgs_blocked(V, w2, coef, 0.7071, 2, nt)
            assert r1[2] == r2[2], (r1, r2)
            assert np.abs(w1-w2).max() < 1e-12 * np.abs(w1).max() + 1e-13, np.abs(w1-w2).max()
            assert np.abs(V.T@w2).max() < 1e-13 * r2[0]
    def med(f, r=9):
        ts=[]
        for _ in range(r):
            t=time.perf_counter(); f(); ts.append(time.perf_counter()-t)
        return np.median(ts)*1e3
    res = {}
    for name, src in (("1pass", w0), ("2pass", wn)):
        with threadpoolctl.threadpool_limits(1):
            res[name+" blas1"] = med(lambda: (w.__setitem__(slice(None), src), v.cgs_dgks(V, w, coef, 0.7071, 2)))
        res[name+" blas2"] = med(lambda: (w.__setitem__(slice(None), src), v.cgs_dgks(V, w, coef, 0.7071, 2)))
        with threadpoolctl.threadpool_limits(1):
          for nt in (1, 2):
            res[name+f" own{nt}"] = med(lambda: (w.__setitem__(slice(None), src), v.cgs_blocked(V, w, coef, 0.7071, 2, nt)))
    print(n, j, " ".join(f"{k}={x:.2f}" for k, x in res.items()), "load", os.getloadavg()[0])
