# Compiled vector kernels for the Lanczos process.
#
# Design note
# -----------
# A Lanczos step on a large sparse matrix is memory bound: one CSR product,
# a handful of vector updates and a reorthogonalization against the basis.
# This module holds the pieces that numpy/SciPy cannot do in one pass or on
# more than one core:
#
# * CSR products y = A x and Y = A X (float64 data, int32 or int64 indices as
#   a fused type).  Rows are independent, so threads split the rows; each row
#   is summed sequentially over its stored entries, exactly as SciPy's
#   ``csr_matvec`` does, hence the result is bitwise the same for any thread
#   count (and equal to SciPy's ``A @ x``, provided the C compiler does not
#   contract a*b+c into an FMA: the build uses the baseline x86-64 target).
#   Static scheduling splits the rows into one block per thread holding an
#   equal share of the stored entries (a binary search in indptr); dynamic
#   scheduling hands out fixed row chunks.  Static is the default: in
#   bench/bench_products.py it was as fast or faster in most cases, and its
#   partition is fixed (no atomics, the same rows per thread every call).
# * A fused product: y = A x and alpha = x.y in the same row loop, and a fused
#   recurrence update w -= alpha v + beta v_prev returning ||w||^2, so the three
#   term recurrence costs two passes over memory instead of five.  Their sums
#   are formed over fixed row chunks and added in chunk order, so alpha and
#   ||w|| do not depend on the thread count either.
# * Reorthogonalization through BLAS (scipy.linalg.cython_blas): classical
#   Gram-Schmidt with dgemv and the DGKS test for a second pass, a block
#   version with dgemm, and an in-place basis rotation V[:, :k] <- V[:, :m] Y
#   done in row chunks so that the only extra memory is one chunk.  Scratch
#   comes from PyMem_RawMalloc so tracemalloc sees it in memory benchmarks.
#
# Every core is a ``cdef ... noexcept nogil`` function on raw pointers; the
# ``def`` wrappers only unpack typed memoryviews.  The Python boundary
# (``vecops.py``) validates shapes, dtypes and contiguity; the kernels trust
# their input.

from libc.stdint cimport int32_t, int64_t
from cpython.mem cimport PyMem_RawMalloc, PyMem_RawFree
from libc.string cimport memcpy
from libc.math cimport sqrt, fabs, hypot
from cython.parallel cimport parallel, prange

from scipy.linalg.cython_blas cimport ddot, dgemv, dgemm, dnrm2

cdef extern from *:
    """
    #ifdef _OPENMP
    #include <omp.h>
    static int lanqr_max_threads(void) { return omp_get_max_threads(); }
    static int lanqr_thread_num(void) { return omp_get_thread_num(); }
    static int lanqr_num_threads(void) { return omp_get_num_threads(); }
    #define LANQR_HAVE_OPENMP 1
    #else
    static int lanqr_max_threads(void) { return 1; }
    static int lanqr_thread_num(void) { return 0; }
    static int lanqr_num_threads(void) { return 1; }
    #define LANQR_HAVE_OPENMP 0
    #endif
    """
    int lanqr_max_threads() noexcept nogil
    int lanqr_thread_num() noexcept nogil
    int lanqr_num_threads() noexcept nogil
    int LANQR_HAVE_OPENMP

ctypedef fused index_t:
    int32_t
    int64_t

# Row chunk for dynamic scheduling: large enough that the scheduling cost
# (one atomic per chunk) is negligible, small enough to balance a loaded core.
cdef enum:
    DYNAMIC_CHUNK_ROWS = 8192
# Reductions (alpha, ||w||) add partial sums of fixed row chunks in order.
cdef enum:
    REDUCE_CHUNKS = 1024
    REDUCE_MIN_ROWS = 4096


def openmp_enabled():
    """True when the module was compiled with OpenMP."""
    return bool(LANQR_HAVE_OPENMP)


def openmp_max_threads():
    """omp_get_max_threads(): OMP_NUM_THREADS if set, else the cores seen."""
    return lanqr_max_threads()


# ----------------------------------------------------------------------------
# Row partition
# ----------------------------------------------------------------------------

cdef inline Py_ssize_t _nnz_split(const index_t* indptr, Py_ssize_t n_rows,
                                  Py_ssize_t part, Py_ssize_t parts) noexcept nogil:
    """First row of block ``part`` when rows are cut into ``parts`` blocks of
    (nearly) equal stored entries: the smallest row r with indptr[r] >= target."""
    cdef Py_ssize_t lo, hi, mid
    cdef int64_t nnz, target
    if part <= 0:
        return 0
    if part >= parts:
        return n_rows
    nnz = <int64_t>indptr[n_rows] - <int64_t>indptr[0]
    # nnz * part fits in int64 unless nnz * threads exceeds 2**63.
    target = <int64_t>indptr[0] + (nnz * part) // parts
    lo = 0
    hi = n_rows
    while lo < hi:
        mid = lo + (hi - lo) // 2
        if <int64_t>indptr[mid] < target:
            lo = mid + 1
        else:
            hi = mid
    return lo


# ----------------------------------------------------------------------------
# CSR times one vector
# ----------------------------------------------------------------------------

cdef inline double _row_sum(const index_t* indptr, const index_t* indices,
                            const double* data, const double* x,
                            Py_ssize_t i) noexcept nogil:
    # Same order as SciPy's csr_matvec: a sequential sum from zero.
    cdef Py_ssize_t jj
    cdef double s = 0.0
    for jj in range(indptr[i], indptr[i + 1]):
        s = s + data[jj] * x[indices[jj]]
    return s


cdef void _csr_rows(const index_t* indptr, const index_t* indices,
                    const double* data, const double* x, double* y,
                    Py_ssize_t r0, Py_ssize_t r1) noexcept nogil:
    cdef Py_ssize_t i
    for i in range(r0, r1):
        y[i] = _row_sum(indptr, indices, data, x, i)


cdef double _csr_rows_dot(const index_t* indptr, const index_t* indices,
                          const double* data, const double* x, double* y,
                          Py_ssize_t r0, Py_ssize_t r1) noexcept nogil:
    # x[i] and y[i] are touched in order while the row is done, so the inner
    # product needs no separate pass over x and y.
    cdef Py_ssize_t i
    cdef double s, acc = 0.0
    for i in range(r0, r1):
        s = _row_sum(indptr, indices, data, x, i)
        y[i] = s
        acc = acc + x[i] * s
    return acc


cdef void _csr_matvec(const index_t* indptr, const index_t* indices,
                      const double* data, const double* x, double* y,
                      Py_ssize_t n_rows, int n_threads, int schedule) noexcept nogil:
    cdef int t, nt
    cdef Py_ssize_t r0, r1, c, n_chunks
    if n_threads <= 1 or n_rows < 2:
        _csr_rows(indptr, indices, data, x, y, 0, n_rows)
        return
    if schedule == 0:
        with parallel(num_threads=n_threads):
            t = lanqr_thread_num()
            nt = lanqr_num_threads()
            r0 = _nnz_split(indptr, n_rows, t, nt)
            r1 = _nnz_split(indptr, n_rows, t + 1, nt)
            _csr_rows(indptr, indices, data, x, y, r0, r1)
    else:
        n_chunks = (n_rows + DYNAMIC_CHUNK_ROWS - 1) // DYNAMIC_CHUNK_ROWS
        for c in prange(n_chunks, schedule="dynamic", num_threads=n_threads):
            _csr_rows(indptr, indices, data, x, y, c * DYNAMIC_CHUNK_ROWS,
                      min((c + 1) * DYNAMIC_CHUNK_ROWS, n_rows))


cdef inline Py_ssize_t _reduce_chunk(Py_ssize_t n) noexcept nogil:
    # Rows per partial sum: fixed by n alone (never by the thread count), and
    # at most REDUCE_CHUNKS chunks so the partial sums fit on the stack.
    cdef Py_ssize_t chunk = (n + REDUCE_CHUNKS - 1) // REDUCE_CHUNKS
    return chunk if chunk > REDUCE_MIN_ROWS else REDUCE_MIN_ROWS


cdef double _csr_matvec_dot(const index_t* indptr, const index_t* indices,
                            const double* data, const double* x, double* y,
                            Py_ssize_t n_rows, int n_threads) noexcept nogil:
    # Partial sums over fixed row chunks, added in chunk order: alpha is the
    # same for every thread count.
    cdef double partial[REDUCE_CHUNKS]
    cdef double acc = 0.0
    cdef Py_ssize_t c, chunk = _reduce_chunk(n_rows)
    cdef Py_ssize_t n_chunks = (n_rows + chunk - 1) // chunk
    if n_threads <= 1:
        for c in range(n_chunks):
            partial[c] = _csr_rows_dot(indptr, indices, data, x, y, c * chunk,
                                       min((c + 1) * chunk, n_rows))
    else:
        for c in prange(n_chunks, schedule="static", num_threads=n_threads):
            partial[c] = _csr_rows_dot(indptr, indices, data, x, y, c * chunk,
                                       min((c + 1) * chunk, n_rows))
    for c in range(n_chunks):
        acc = acc + partial[c]
    return acc


def csr_matvec(const index_t[::1] indptr, const index_t[::1] indices,
               const double[::1] data, const double[::1] x, double[::1] y,
               int n_threads, int schedule):
    """y = A x for CSR arrays (validated by the caller)."""
    cdef Py_ssize_t n_rows = y.shape[0]
    if n_rows == 0:
        return
    with nogil:
        _csr_matvec(&indptr[0], &indices[0] if indices.shape[0] else NULL,
                    &data[0] if data.shape[0] else NULL,
                    &x[0] if x.shape[0] else NULL, &y[0],
                    n_rows, n_threads, schedule)


def csr_matvec_dot(const index_t[::1] indptr, const index_t[::1] indices,
                   const double[::1] data, const double[::1] x, double[::1] y,
                   int n_threads):
    """y = A x and return x . y (square A, validated by the caller)."""
    cdef Py_ssize_t n_rows = y.shape[0]
    cdef double alpha = 0.0
    if n_rows == 0:
        return 0.0
    with nogil:
        alpha = _csr_matvec_dot(&indptr[0], &indices[0] if indices.shape[0] else NULL,
                                &data[0] if data.shape[0] else NULL,
                                &x[0], &y[0], n_rows, n_threads)
    return alpha


# ----------------------------------------------------------------------------
# Fused Chebyshev step
# ----------------------------------------------------------------------------

cdef void _cheb_rows(const index_t* indptr, const index_t* indices,
                     const double* data, const double* x, double* y,
                     double sigma, double shift, double tau,
                     Py_ssize_t r0, Py_ssize_t r1) noexcept nogil:
    # y[i] <- sigma (A x - shift x)[i] - tau y[i]: the old y[i] is read once
    # and overwritten in the same row, so the three-term recurrence of a
    # Chebyshev polynomial costs one pass (the product's) instead of three.
    cdef Py_ssize_t i
    cdef double s
    for i in range(r0, r1):
        s = _row_sum(indptr, indices, data, x, i)
        if tau == 0.0:
            y[i] = sigma * (s - shift * x[i])
        else:
            y[i] = sigma * (s - shift * x[i]) - tau * y[i]


def csr_chebyshev_step(const index_t[::1] indptr, const index_t[::1] indices,
                       const double[::1] data, const double[::1] x, double[::1] y,
                       double sigma, double shift, double tau, int n_threads):
    """y <- sigma (A x - shift x) - tau y for a square CSR A (validated by the caller).

    With ``tau == 0`` the old ``y`` is not read.  Rows are independent, so
    the result does not depend on the thread count.
    """
    cdef Py_ssize_t n_rows = y.shape[0]
    cdef int t, nt
    cdef Py_ssize_t r0, r1
    cdef const index_t* ip = &indptr[0]
    cdef const index_t* ix = &indices[0] if indices.shape[0] else NULL
    cdef const double* dp = &data[0] if data.shape[0] else NULL
    if n_rows == 0:
        return
    with nogil:
        if n_threads <= 1 or n_rows < 2:
            _cheb_rows(ip, ix, dp, &x[0], &y[0], sigma, shift, tau, 0, n_rows)
        else:
            with parallel(num_threads=n_threads):
                t = lanqr_thread_num()
                nt = lanqr_num_threads()
                r0 = _nnz_split(ip, n_rows, t, nt)
                r1 = _nnz_split(ip, n_rows, t + 1, nt)
                _cheb_rows(ip, ix, dp, &x[0], &y[0], sigma, shift, tau, r0, r1)


# ----------------------------------------------------------------------------
# CSR times a block of vectors
# ----------------------------------------------------------------------------

cdef void _csr_rows_block_c(const index_t* indptr, const index_t* indices,
                            const double* data, const double* X, double* Y,
                            Py_ssize_t k, Py_ssize_t r0, Py_ssize_t r1) noexcept nogil:
    # Row-major X: the k values a stored entry needs are one contiguous run,
    # so each gather touches one or two cache lines instead of k.  Columns go
    # in groups of four with the sums in registers (an axpy into y[i, :] would
    # wait on store-to-load forwarding at every entry); each sum still runs
    # from zero over the row's entries in storage order, as in SciPy's
    # csr_matvecs, so the results agree bitwise.
    cdef Py_ssize_t i, jj, c, p0, p1
    cdef double a, s0, s1, s2, s3
    cdef const double* xr
    cdef double* yr
    for i in range(r0, r1):
        yr = Y + i * k
        p0 = indptr[i]
        p1 = indptr[i + 1]
        c = 0
        while c + 4 <= k:
            s0 = 0.0
            s1 = 0.0
            s2 = 0.0
            s3 = 0.0
            for jj in range(p0, p1):
                a = data[jj]
                xr = X + <Py_ssize_t>indices[jj] * k + c
                s0 = s0 + a * xr[0]
                s1 = s1 + a * xr[1]
                s2 = s2 + a * xr[2]
                s3 = s3 + a * xr[3]
            yr[c] = s0
            yr[c + 1] = s1
            yr[c + 2] = s2
            yr[c + 3] = s3
            c += 4
        while c < k:
            s0 = 0.0
            for jj in range(p0, p1):
                s0 = s0 + data[jj] * X[<Py_ssize_t>indices[jj] * k + c]
            yr[c] = s0
            c += 1


cdef void _csr_rows_block_f(const index_t* indptr, const index_t* indices,
                            const double* data, const double* X, Py_ssize_t ldx,
                            double* Y, Py_ssize_t ldy,
                            Py_ssize_t k, Py_ssize_t r0, Py_ssize_t r1) noexcept nogil:
    # Column-major X: the matrix is streamed once (a row's entries stay in L1
    # while its k sums are formed), but every entry needs k separate gathers.
    cdef Py_ssize_t i, jj, c, p0, p1
    cdef double s
    cdef const double* xc
    for i in range(r0, r1):
        p0 = indptr[i]
        p1 = indptr[i + 1]
        for c in range(k):
            xc = X + c * ldx
            s = 0.0
            for jj in range(p0, p1):
                s = s + data[jj] * xc[indices[jj]]
            Y[i + c * ldy] = s


cdef void _csr_matmat(const index_t* indptr, const index_t* indices,
                      const double* data, const double* X, Py_ssize_t ldx,
                      double* Y, Py_ssize_t ldy, Py_ssize_t n_rows, Py_ssize_t k,
                      bint row_major, int n_threads) noexcept nogil:
    cdef int t, nt
    cdef Py_ssize_t r0, r1
    if n_threads <= 1 or n_rows < 2:
        if row_major:
            _csr_rows_block_c(indptr, indices, data, X, Y, k, 0, n_rows)
        else:
            _csr_rows_block_f(indptr, indices, data, X, ldx, Y, ldy, k, 0, n_rows)
        return
    with parallel(num_threads=n_threads):
        t = lanqr_thread_num()
        nt = lanqr_num_threads()
        r0 = _nnz_split(indptr, n_rows, t, nt)
        r1 = _nnz_split(indptr, n_rows, t + 1, nt)
        if row_major:
            _csr_rows_block_c(indptr, indices, data, X, Y, k, r0, r1)
        else:
            _csr_rows_block_f(indptr, indices, data, X, ldx, Y, ldy, k, r0, r1)


def csr_matmat_c(const index_t[::1] indptr, const index_t[::1] indices,
                 const double[::1] data, const double[:, ::1] X, double[:, ::1] Y,
                 int n_threads):
    """Y = A X with row-major (C-order) X and Y."""
    cdef Py_ssize_t n_rows = Y.shape[0], k = Y.shape[1]
    if n_rows == 0 or k == 0:
        return
    if X.shape[0] == 0 or data.shape[0] == 0:
        Y[:, :] = 0.0
        return
    with nogil:
        _csr_matmat(&indptr[0], &indices[0], &data[0], &X[0, 0], k,
                    &Y[0, 0], k, n_rows, k, True, n_threads)


def csr_matmat_f(const index_t[::1] indptr, const index_t[::1] indices,
                 const double[::1] data, const double[::1, :] X, double[::1, :] Y,
                 int n_threads):
    """Y = A X with column-major (Fortran-order) X and Y."""
    cdef Py_ssize_t n_rows = Y.shape[0], k = Y.shape[1]
    if n_rows == 0 or k == 0:
        return
    if X.shape[0] == 0 or data.shape[0] == 0:
        Y[:, :] = 0.0
        return
    with nogil:
        _csr_matmat(&indptr[0], &indices[0], &data[0], &X[0, 0], X.shape[0],
                    &Y[0, 0], n_rows, n_rows, k, False, n_threads)


# ----------------------------------------------------------------------------
# Symmetry of a CSR matrix
# ----------------------------------------------------------------------------

cdef inline Py_ssize_t _mirror_position(const index_t* indptr, const index_t* indices,
                                        Py_ssize_t i, Py_ssize_t j) noexcept nogil:
    # Position of entry (j, i) in row j's sorted indices (binary search), or -1.
    cdef Py_ssize_t lo = indptr[j], hi = indptr[j + 1], end = indptr[j + 1], mid
    while lo < hi:
        mid = lo + (hi - lo) // 2
        if indices[mid] < i:
            lo = mid + 1
        else:
            hi = mid
    if lo < end and indices[lo] == i:
        return lo
    return -1


cdef double _csr_asymmetry(const index_t* indptr, const index_t* indices,
                           const double* data, Py_ssize_t n_rows,
                           double inv_scale) noexcept nogil:
    # Every stored a_ij (i != j) looks up a_ji by binary search in row j's
    # sorted indices.  A pair stored on both sides is met twice, once from
    # each side; a pair stored on one side only is met once and counted
    # twice, so the sum is exactly ||A - A^T||_F^2 (of the scaled matrix).
    cdef Py_ssize_t i, jj, j, mirror
    cdef double a, d, acc = 0.0
    for i in range(n_rows):
        for jj in range(indptr[i], indptr[i + 1]):
            j = indices[jj]
            if j == i:
                continue
            a = data[jj] * inv_scale
            mirror = _mirror_position(indptr, indices, i, j)
            if mirror >= 0:
                d = a - data[mirror] * inv_scale
                acc = acc + d * d
            else:
                acc = acc + 2.0 * a * a
    return acc


cdef double _csr_asymmetry_upper(const index_t* indptr, const index_t* indices,
                                 const double* data, Py_ssize_t n_rows, double inv_scale,
                                 Py_ssize_t* matched, Py_ssize_t* lower) noexcept nogil:
    # Only the entries above the diagonal look up their mirrors (half the
    # random-access lookups of _csr_asymmetry); entries below are counted.
    # When every lower entry was some upper entry's mirror (matched ==
    # lower), the sum is exactly ||A - A^T||_F^2; otherwise the caller falls
    # back to the full scan.
    cdef Py_ssize_t i, jj, j, mirror
    cdef double a, d, acc = 0.0
    matched[0] = 0
    lower[0] = 0
    for i in range(n_rows):
        for jj in range(indptr[i], indptr[i + 1]):
            j = indices[jj]
            if j < i:
                lower[0] += 1
                continue
            if j == i:
                continue
            a = data[jj] * inv_scale
            mirror = _mirror_position(indptr, indices, i, j)
            if mirror >= 0:
                d = a - data[mirror] * inv_scale
                acc = acc + 2.0 * d * d
                matched[0] += 1
            else:
                acc = acc + 2.0 * a * a
    return acc


def csr_asymmetry(const index_t[::1] indptr, const index_t[::1] indices,
                  const double[::1] data, double scale):
    """||A - A^T||_F / scale for a square CSR matrix with sorted, unique indices."""
    cdef Py_ssize_t n_rows = indptr.shape[0] - 1
    cdef double acc = 0.0
    cdef Py_ssize_t matched = 0, lower = 0
    if n_rows <= 0 or data.shape[0] == 0:
        return 0.0
    with nogil:
        acc = _csr_asymmetry_upper(&indptr[0], &indices[0], &data[0], n_rows, 1.0 / scale,
                                   &matched, &lower)
        if matched != lower:
            acc = _csr_asymmetry(&indptr[0], &indices[0], &data[0], n_rows, 1.0 / scale)
    return sqrt(acc)


# ----------------------------------------------------------------------------
# Simon's omega recurrence (partial reorthogonalization)
# ----------------------------------------------------------------------------

def omega_advance(double[::1] new, const double[::1] cur, const double[::1] prev,
                  const double[::1] alpha, const double[::1] beta, Py_ssize_t j,
                  double beta_j, double eps1, double local):
    """Row j + 1 of the orthogonality estimates from rows j (cur) and j - 1 (prev).

    Writes new[0 .. j+1] (new[j] = local, new[j+1] = 1, the rest beyond is
    zeroed) and returns the largest |estimate| against columns 0 .. j - 1.
    Estimates are signed; the rounding term takes the sign of the rest.
    """
    cdef Py_ssize_t k, size = new.shape[0]
    cdef double t, noise, worst = 0.0, tail
    with nogil:
        tail = hypot(alpha[j], beta_j)
        for k in range(j):
            t = beta[k] * cur[k + 1] + (alpha[k] - alpha[j]) * cur[k]
            if k > 0:
                t = t + beta[k - 1] * cur[k - 1]
            t = t - beta[j - 1] * prev[k]
            noise = eps1 * (hypot(alpha[k], beta[k]) + tail)
            if t >= 0.0:
                t = t + noise
            else:
                t = t - noise
            # Signed, as in Simon's recurrence: the terms of later steps
            # partly cancel.  Absolute values here made every term add up and
            # overestimated |q_j . q_k| 10^3-10^5 times on the Heisenberg
            # rings (measured against explicit inner products), calling for
            # reorthogonalizations the basis did not need.
            t = t / beta_j
            new[k] = t
            if fabs(t) > worst:
                worst = fabs(t)
        new[j] = local
        if j + 1 < size:
            new[j + 1] = 1.0
        for k in range(j + 2, size):
            new[k] = 0.0
    return worst


# ----------------------------------------------------------------------------
# Fused recurrence update
# ----------------------------------------------------------------------------

cdef double _recurrence_rows(double* w, const double* v, const double* v_prev,
                             double alpha, double beta,
                             Py_ssize_t r0, Py_ssize_t r1) noexcept nogil:
    cdef Py_ssize_t i
    cdef double wi, acc = 0.0
    if v_prev == NULL:
        for i in range(r0, r1):
            wi = w[i] - alpha * v[i]
            w[i] = wi
            acc = acc + wi * wi
    else:
        for i in range(r0, r1):
            wi = (w[i] - alpha * v[i]) - beta * v_prev[i]
            w[i] = wi
            acc = acc + wi * wi
    return acc


cdef double _recurrence(double* w, const double* v, const double* v_prev,
                        double alpha, double beta, Py_ssize_t n,
                        int n_threads) noexcept nogil:
    # Fixed chunks as in _csr_matvec_dot: ||w||^2 independent of the threads.
    cdef double partial[REDUCE_CHUNKS]
    cdef double acc = 0.0
    cdef Py_ssize_t c, chunk = _reduce_chunk(n)
    cdef Py_ssize_t n_chunks = (n + chunk - 1) // chunk
    if n_threads <= 1:
        for c in range(n_chunks):
            partial[c] = _recurrence_rows(w, v, v_prev, alpha, beta, c * chunk,
                                          min((c + 1) * chunk, n))
    else:
        for c in prange(n_chunks, schedule="static", num_threads=n_threads):
            partial[c] = _recurrence_rows(w, v, v_prev, alpha, beta, c * chunk,
                                          min((c + 1) * chunk, n))
    for c in range(n_chunks):
        acc = acc + partial[c]
    return acc


def recurrence_update(double[::1] w, const double[::1] v, const double[::1] v_prev,
                      double alpha, double beta, int n_threads):
    """w <- w - alpha v - beta v_prev (v_prev may be None); return ||w||^2."""
    cdef Py_ssize_t n = w.shape[0]
    cdef const double* vp = NULL
    cdef double acc
    if n == 0:
        return 0.0
    if v_prev is not None:
        vp = &v_prev[0]
    with nogil:
        acc = _recurrence(&w[0], &v[0], vp, alpha, beta, n, n_threads)
    return acc


# ----------------------------------------------------------------------------
# Reorthogonalization through BLAS
# ----------------------------------------------------------------------------

cdef inline int _ld(double[:, :] V) noexcept:
    """BLAS leading dimension of a column-major view.  numpy gives arbitrary
    strides to length-one axes, so a single column gets ld = max(n, 1)."""
    cdef Py_ssize_t ld = V.strides[1] // <Py_ssize_t>sizeof(double)
    if V.shape[1] <= 1 or ld < V.shape[0]:
        ld = V.shape[0] if V.shape[0] > 1 else 1
    return <int>ld


cdef int _cgs_dgks(int n, int j, double* V, int ldv, double* w, double* coef,
                   double* work, double eta, int max_passes,
                   double* norm_in, double* norm_out) noexcept nogil:
    """Classical Gram-Schmidt of w against the j columns of V, repeated while
    the norm drops below eta times its value before the pass (DGKS).  Returns
    the number of passes; coef receives the summed projection coefficients."""
    cdef int one = 1, passes = 0, i
    cdef double d_one = 1.0, d_zero = 0.0, d_minus = -1.0
    cdef double before, after
    cdef char* trans_t = b"T"
    cdef char* trans_n = b"N"
    before = dnrm2(&n, w, &one)
    norm_in[0] = before
    for i in range(j):
        coef[i] = 0.0
    after = before
    while passes < max_passes:
        # work = V^T w ; w -= V work ; coef += work
        dgemv(trans_t, &n, &j, &d_one, V, &ldv, w, &one, &d_zero, work, &one)
        dgemv(trans_n, &n, &j, &d_minus, V, &ldv, work, &one, &d_one, w, &one)
        for i in range(j):
            coef[i] = coef[i] + work[i]
        passes += 1
        after = dnrm2(&n, w, &one)
        if after >= eta * before:
            break
        before = after
    norm_out[0] = after
    return passes


def cgs_dgks(double[:, :] V, double[::1] w, double[::1] coef, double eta,
             int max_passes):
    """Gram-Schmidt with DGKS on a column-major V (strides checked by the caller).

    Returns (norm_before, norm_after, passes).
    """
    cdef int n = <int>V.shape[0]
    cdef int j = <int>V.shape[1]
    cdef int ldv
    cdef double norm_in = 0.0, norm_out = 0.0
    cdef int passes
    cdef double* work
    cdef double* vp
    if n == 0:
        return 0.0, 0.0, 0
    if j == 0:
        norm_in = sqrt(_sum_squares(w))
        return norm_in, norm_in, 0
    ldv = _ld(V)
    vp = &V[0, 0]
    work = <double*>PyMem_RawMalloc(j * sizeof(double))
    if work == NULL:
        raise MemoryError()
    try:
        with nogil:
            passes = _cgs_dgks(n, j, vp, ldv, &w[0], &coef[0], work, eta,
                               max_passes, &norm_in, &norm_out)
    finally:
        PyMem_RawFree(work)
    return norm_in, norm_out, passes


cdef double _sum_squares(double[::1] w) noexcept nogil:
    cdef int n = <int>w.shape[0], one = 1
    cdef double r
    if n == 0:
        return 0.0
    r = dnrm2(&n, &w[0], &one)
    return r * r


def block_project(double[:, :] V, double[:, :] W, double[:, :] C):
    """C = V^T W ; W -= V C with dgemm (all column-major, strides checked by
    the caller).  One classical Gram-Schmidt pass for a block."""
    cdef int n = <int>V.shape[0], j = <int>V.shape[1], b = <int>W.shape[1]
    cdef int ldv, ldw, ldc
    cdef double d_one = 1.0, d_zero = 0.0, d_minus = -1.0
    cdef char* tt = b"T"
    cdef char* tn = b"N"
    if n == 0 or j == 0 or b == 0:
        if j > 0 and b > 0:
            C[:, :] = 0.0
        return
    ldv = _ld(V)
    ldw = _ld(W)
    ldc = _ld(C)
    with nogil:
        dgemm(tt, tn, &j, &b, &n, &d_one, &V[0, 0], &ldv, &W[0, 0], &ldw,
              &d_zero, &C[0, 0], &ldc)
        dgemm(tn, tn, &n, &b, &j, &d_minus, &V[0, 0], &ldv, &C[0, 0], &ldc,
              &d_one, &W[0, 0], &ldw)


def rotate_basis(double[:, :] V, double[:, :] Y, int chunk_rows,
                 const double[::1] probe=None, double[:, ::1] gram=None):
    """V[:, :k] <- V[:, :m] Y in place, in row chunks of ``chunk_rows``.

    Each output row depends only on the same input row, so a chunk of rows can
    be overwritten as soon as its product is formed; the scratch is one chunk
    (chunk_rows x k) instead of a second n x k array.

    With ``probe`` (length n) and ``gram`` (k + 1 x 2, zeroed by the caller):
    ``gram[c, 0] = W[:, c] . W[:, k-1]`` and ``gram[c, 1] = W[:, c] . probe``
    for the new columns ``W`` (c < k), ``gram[k] = (probe . W[:, k-1],
    probe . probe)``, summed chunk by chunk while the chunk is in cache.
    """
    cdef int n = <int>V.shape[0], m = <int>Y.shape[0], k = <int>Y.shape[1]
    cdef int ldv, ldy, rows, r0, c, one = 1
    cdef double d_one = 1.0, d_zero = 0.0
    cdef char* tn = b"N"
    cdef double* tmp
    cdef bint with_gram = probe is not None and gram is not None
    if with_gram and (probe.shape[0] != n or gram.shape[0] != k + 1 or gram.shape[1] != 2):
        raise ValueError("probe must have n entries and gram shape (k + 1, 2)")
    if n == 0 or k == 0:
        return
    ldv = _ld(V)
    ldy = _ld(Y)
    if chunk_rows > n:
        chunk_rows = n
    tmp = <double*>PyMem_RawMalloc(<size_t>chunk_rows * k * sizeof(double))
    if tmp == NULL:
        raise MemoryError()
    try:
        with nogil:
            r0 = 0
            while r0 < n:
                rows = min(chunk_rows, n - r0)
                dgemm(tn, tn, &rows, &k, &m, &d_one, &V[r0, 0], &ldv,
                      &Y[0, 0], &ldy, &d_zero, tmp, &rows)
                if with_gram:
                    for c in range(k):
                        gram[c, 0] += ddot(&rows, tmp + <size_t>c * rows, &one,
                                           tmp + <size_t>(k - 1) * rows, &one)
                        gram[c, 1] += ddot(&rows, tmp + <size_t>c * rows, &one,
                                           &probe[r0], &one)
                    gram[k, 1] += ddot(&rows, &probe[r0], &one, &probe[r0], &one)
                for c in range(k):
                    memcpy(&V[r0, c], tmp + <size_t>c * rows, rows * sizeof(double))
                r0 += rows
            if with_gram:
                gram[k, 0] = gram[k - 1, 1]
    finally:
        PyMem_RawFree(tmp)
