# Compiled implicit-shift QR/QL kernel for symmetric tridiagonal matrices.
#
# Design note
# -----------
# * Every core is a ``cdef ... noexcept nogil`` function on raw pointers; the
#   ``def`` wrappers at the bottom only allocate, copy and release the GIL.
#   Validation (lengths, finiteness, row indices) belongs to ``tridiagonal.py``;
#   the one exception is a finiteness scan, done here because it costs one pass
#   over data the kernel reads anyway (the wrapper reports, the boundary raises).
# * The matrix is split into unreduced blocks where
#   |e_i| <= eps * sqrt(|d_i| |d_{i+1}|); each block is scaled by a power of two
#   (exact) into a range where squares neither overflow nor underflow, then
#   iterated, then scaled back.
# * Per block, the bulge is chased toward the end whose diagonal entry is
#   smaller in magnitude.  Only the QL sweep (bulge chased upward, eigenvalues
#   deflating at the top) is coded; a block that wants the QR direction is
#   reversed in place first.  Reversal P T P with the flip P is an exact
#   orthogonal similarity, so reversing d, e and the matching columns of Z
#   together keeps Z T Z^T invariant and costs O(block) per block, not per sweep.
# * Shift: Wilkinson's, the eigenvalue of the leading 2x2 nearer d_l.  It enters
#   only through the first rotation of the sweep (implicit Francis step).
# * Values only: the square-root-free Pal-Walker-Kahan sweep on e_i^2.
# * Vectors: Z is column-major, so a column pair is contiguous.  Each sweep
#   stores its cosines and sines; after SWEEPS_PER_BATCH sweeps they are all
#   applied to Z one block of rows at a time (rows transform independently:
#   Z <- Z Q_1 Q_2 ...), each row carrying its running entry along the chain of
#   rotations in a register.  Every entry of Z is then loaded and stored once
#   per sweep, from cache, and Z streams from memory once per batch.  Groups of
#   16 rows take an AVX2 + FMA chain when the CPU has it (checked at import),
#   other rows the portable Cython loops.
# * Chosen rows only (rows=[-1], [0], [0, -1]): up to FEW_ROWS kept rows are
#   rotated inside the sweep itself, O(len(rows)) per rotation, and the full
#   matrix is never formed.
# * Iteration limit: ``max_sweeps`` sweeps in total (the caller passes ~30 n);
#   past it the cores return 1 and leave every converged eigenvalue isolated
#   (zero couplings on both sides), so the wrapper can count them.
from libc.math cimport sqrt, fabs, hypot, copysign, ldexp, frexp
from libc.stdlib cimport malloc, free, qsort
from libc.string cimport memcpy, memset

import numpy as np

# Floating-point constants of IEEE double precision.
cdef double EPS = 2.0 ** -52            # spacing of 1.0 (machine epsilon)
cdef double EPS2 = EPS * EPS
cdef double SAFMIN = 2.0 ** -1022       # smallest normal number
cdef double SAFMAX = 2.0 ** 1022        # 1 / SAFMIN
# Blocks are scaled so that their max-norm lies in [SSFMIN, SSFMAX]: squares of
# entries (and sums of three of them) stay finite, and products with EPS2 stay
# above the underflow threshold.
cdef double SSFMAX = sqrt(SAFMAX) / 3.0
cdef double SSFMIN = sqrt(SAFMIN) / EPS2

# Rotations of SWEEPS_PER_BATCH sweeps are stored, then applied to Z one block
# of ROW_BLOCK rows at a time: 16 rows x n columns (128 KiB at n = 1000) stay
# in L2 while all stored sweeps pass over them, so Z streams from memory once
# per batch instead of once per sweep.  Both chosen by measurement
# (bench/bench_tridiagonal.py --tune, CPU time relative to LAPACK 'stev'):
# n = 2000: 16 rows / 32 sweeps 0.24x, 16 rows / 1 sweep (no batching) 1.3x;
# 8 rows (portable loops only, no AVX2 chain) / 32 sweeps 0.49x.
cdef Py_ssize_t ROW_BLOCK = 16
cdef Py_ssize_t SWEEPS_PER_BATCH = 32
# Sweeps without a deflation after which the absolute floor joins the
# relative deflation test (see _stall_floor2); well-behaved blocks deflate an
# eigenvalue every 2-3 sweeps.
cdef int STALL_SWEEPS = 12
# A values-only block whose smallest coupling (after scaling) is below this
# takes the rotation sweep instead of the square-root-free one: its square is
# then within EPS^-2 of the underflow threshold.
cdef double WIDE_RANGE = sqrt(SAFMIN) / EPS
# Up to this many kept rows are rotated inside the sweep itself.
cdef Py_ssize_t FEW_ROWS = 4


# One optional piece of C: a 16-row rotation chain with AVX2 + FMA, compiled
# for that instruction set only (GCC/Clang ``target`` attribute) and used only
# when the CPU reports both features at run time.  It computes exactly what
# _chain8 does, two rows blocks at a time, with fused multiply-adds; every other
# machine and compiler takes the portable Cython path.
cdef extern from *:
    """
    #if (defined(__GNUC__) || defined(__clang__)) && defined(__x86_64__)
    #include <immintrin.h>
    __attribute__((target("avx2,fma")))
    static void lanqr_chain16_avx2(double *z, Py_ssize_t ldz, const double *cs,
                                   const double *sn, Py_ssize_t lo, Py_ssize_t m)
    {
        double *zi = z + m * ldz, *zi1;
        __m256d r0 = _mm256_loadu_pd(zi), r1 = _mm256_loadu_pd(zi + 4);
        __m256d r2 = _mm256_loadu_pd(zi + 8), r3 = _mm256_loadu_pd(zi + 12);
        __m256d c, s, a0, a1, a2, a3;
        Py_ssize_t i;
        for (i = m - 1; i >= lo; --i) {
            c = _mm256_broadcast_sd(cs + i);
            s = _mm256_broadcast_sd(sn + i);
            zi1 = zi;
            zi -= ldz;
            a0 = _mm256_loadu_pd(zi);
            a1 = _mm256_loadu_pd(zi + 4);
            a2 = _mm256_loadu_pd(zi + 8);
            a3 = _mm256_loadu_pd(zi + 12);
            _mm256_storeu_pd(zi1, _mm256_fmadd_pd(s, a0, _mm256_mul_pd(c, r0)));
            _mm256_storeu_pd(zi1 + 4, _mm256_fmadd_pd(s, a1, _mm256_mul_pd(c, r1)));
            _mm256_storeu_pd(zi1 + 8, _mm256_fmadd_pd(s, a2, _mm256_mul_pd(c, r2)));
            _mm256_storeu_pd(zi1 + 12, _mm256_fmadd_pd(s, a3, _mm256_mul_pd(c, r3)));
            r0 = _mm256_fmsub_pd(c, a0, _mm256_mul_pd(s, r0));
            r1 = _mm256_fmsub_pd(c, a1, _mm256_mul_pd(s, r1));
            r2 = _mm256_fmsub_pd(c, a2, _mm256_mul_pd(s, r2));
            r3 = _mm256_fmsub_pd(c, a3, _mm256_mul_pd(s, r3));
        }
        _mm256_storeu_pd(zi, r0);
        _mm256_storeu_pd(zi + 4, r1);
        _mm256_storeu_pd(zi + 8, r2);
        _mm256_storeu_pd(zi + 12, r3);
    }
    static int lanqr_cpu_has_avx2_fma(void)
    {
        __builtin_cpu_init();
        return __builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma");
    }
    #else
    static void lanqr_chain16_avx2(double *z, Py_ssize_t ldz, const double *cs,
                                   const double *sn, Py_ssize_t lo, Py_ssize_t m)
    {
        (void)z; (void)ldz; (void)cs; (void)sn; (void)lo; (void)m;
    }
    static int lanqr_cpu_has_avx2_fma(void) { return 0; }
    #endif
    """
    void lanqr_chain16_avx2(double* z, Py_ssize_t ldz, const double* cs,
                            const double* sn, Py_ssize_t lo, Py_ssize_t m) noexcept nogil
    int lanqr_cpu_has_avx2_fma() noexcept nogil

# Read once at import: a property of the machine, not mutable state.
cdef bint CPU_AVX2_FMA = lanqr_cpu_has_avx2_fma()


cdef int _scan_finite(const double* x, Py_ssize_t n) noexcept nogil:
    # x - x is exactly 0 for finite x and NaN for +-Inf and NaN, and NaN
    # persists through the sum: one branch-free pass.
    cdef Py_ssize_t i
    cdef double acc = 0.0
    for i in range(n):
        acc += x[i] - x[i]
    return acc == 0.0


cdef inline double _block_scale(double anorm) noexcept nogil:
    """Power of two that brings ``anorm`` into [SSFMIN, SSFMAX] (1 if inside)."""
    cdef int ex
    if anorm > SSFMAX:
        frexp(SSFMAX / anorm, &ex)
        return ldexp(1.0, ex - 1)
    if anorm < SSFMIN:
        frexp(SSFMIN / anorm, &ex)
        return ldexp(1.0, ex)
    return 1.0


cdef inline double _pythag1(double g) noexcept nogil:
    """sqrt(g*g + 1) without overflow for large |g|."""
    if fabs(g) < 1e150:
        return sqrt(g * g + 1.0)
    return fabs(g)


cdef inline double _hypot(double a, double b) noexcept nogil:
    """sqrt(a*a + b*b); fast path when the sum of squares is safely normal."""
    cdef double s = a * a + b * b
    if s > 1e-290 and s < 1e290:
        return sqrt(s)
    return hypot(a, b)


cdef inline double _stall_floor2(double block_norm) noexcept nogil:
    """Squared absolute deflation floor (eps ||T_block||)^2, used after a stall.

    The relative test |e_m|^2 <= eps^2 |d_m d_{m+1}| keeps graded matrices
    accurate, but a coupling between two entries that are both far below
    eps ||T|| can then never pass it, and when the bulge underflows on its way
    to the deflating end the sweeps stop making progress.  After STALL_SWEEPS
    sweeps without a deflation, couplings below eps ||T_block|| are dropped as
    well: a normwise backward-stable change, the criterion of the absolute
    error bound (reference: LAPACK Users' Guide section 4.7).
    """
    cdef double t = EPS * block_norm
    return t * t + SAFMIN


cdef inline double _block_max_norm(const double* d, const double* e, Py_ssize_t l,
                                   Py_ssize_t lend) noexcept nogil:
    """Largest magnitude in the block d[l..lend], e[l..lend-1] (sets its scaling)."""
    cdef double anorm = 0.0
    cdef Py_ssize_t i
    for i in range(l, lend + 1):
        if fabs(d[i]) > anorm:
            anorm = fabs(d[i])
    for i in range(l, lend):
        if fabs(e[i]) > anorm:
            anorm = fabs(e[i])
    return anorm


cdef inline Py_ssize_t _next_split(const double* d, double* e, Py_ssize_t l1,
                                   Py_ssize_t n) noexcept nogil:
    """End of the unreduced block that starts at l1; zeroes the negligible e."""
    cdef Py_ssize_t m = l1
    cdef double t
    while m < n - 1:
        t = fabs(e[m])
        if t == 0.0:
            break
        if t <= EPS * (sqrt(fabs(d[m])) * sqrt(fabs(d[m + 1]))):
            e[m] = 0.0
            break
        m += 1
    return m


cdef inline void _reverse(double* x, Py_ssize_t lo, Py_ssize_t hi) noexcept nogil:
    cdef double t
    while lo < hi:
        t = x[lo]
        x[lo] = x[hi]
        x[hi] = t
        lo += 1
        hi -= 1


cdef void _reverse_columns(double* z, Py_ssize_t ldz, Py_ssize_t nrows,
                           Py_ssize_t lo, Py_ssize_t hi) noexcept nogil:
    cdef Py_ssize_t k
    cdef double t
    cdef double* a
    cdef double* b
    while lo < hi:
        a = z + lo * ldz
        b = z + hi * ldz
        for k in range(nrows):
            t = a[k]
            a[k] = b[k]
            b[k] = t
        lo += 1
        hi -= 1


cdef struct SweepBatch:
    # Rotations of up to ``capacity`` sweeps, not yet applied to Z.  Sweep j
    # holds rotations i = hi[j]-1 down to lo[j] in cs/sn[j*n + i].
    double* cs
    double* sn
    Py_ssize_t* lo
    Py_ssize_t* hi
    Py_ssize_t count
    Py_ssize_t capacity
    Py_ssize_t n
    Py_ssize_t row_block   # rows of Z that take all stored sweeps together
    bint simd              # use the AVX2 + FMA chain for groups of 16 rows


# ----------------------------------------------------------------------------
# Values only: square-root-free QL (Pal-Walker-Kahan) on q_i = e_i^2.
# ----------------------------------------------------------------------------
cdef int _values_core(double* d, double* e, Py_ssize_t n,
                      Py_ssize_t max_sweeps, Py_ssize_t* sweeps_out) noexcept nogil:
    """Eigenvalues of the tridiagonal (d, e) into d (unordered); e is destroyed.

    ``e`` must have room for n entries.  Returns 0, or 1 when the sweep limit
    was reached (converged eigenvalues are then isolated in d).
    """
    cdef Py_ssize_t l1 = 0, l, lend, lstart, m, i
    cdef Py_ssize_t sweeps = 0
    cdef double anorm, scale, inv2
    cdef double p, rte, sigma, r, c, s, oldc, gamma, oldgam, pp, bb, alpha, q
    cdef double a, b, t, sm
    cdef int status = 0
    cdef int stalled = 0
    cdef double amin
    cdef Py_ssize_t extra = 0
    cdef SweepBatch empty
    cdef double floor2 = SAFMIN

    while l1 < n:
        if l1 > 0:
            e[l1 - 1] = 0.0
        m = _next_split(d, e, l1, n)
        l = l1
        lend = m
        l1 = m + 1
        if lend == l:
            continue

        anorm = _block_max_norm(d, e, l, lend)
        if anorm == 0.0:
            continue
        scale = _block_scale(anorm)
        # The square-root-free sweep works on squares: when the block holds
        # couplings whose squares (after scaling) fall near the underflow
        # threshold, it loses absolute accuracy (as LAPACK dsterf does on
        # entries spanning 1e-300 .. 1e300).  Such a block takes the rotation
        # form of the sweep instead, without vectors.
        amin = anorm
        for i in range(l, lend):
            t = fabs(e[i])
            if t < amin:
                amin = t
        if amin * scale < WIDE_RANGE:
            empty.count = 0
            empty.capacity = 0
            status = _vectors_core(d + l, e + l, lend - l + 1, NULL, 0, 0,
                                   &empty, NULL, max_sweeps - sweeps, &extra)
            sweeps += extra
            if status:
                break
            continue
        if scale != 1.0:
            for i in range(l, lend + 1):
                d[i] *= scale
            for i in range(l, lend):
                e[i] *= scale
        for i in range(l, lend):
            e[i] = e[i] * e[i]

        # Chase toward the end that is smaller in magnitude: QL deflates at the
        # top, so put the small end on top.
        if fabs(d[lend]) < fabs(d[l]):
            _reverse(d, l, lend)
            _reverse(e, l, lend - 1)
        lstart = l
        stalled = 0
        floor2 = SAFMIN

        while l <= lend:
            # Look for a negligible q_m (squared form of the split test).
            m = l
            while m < lend:
                if e[m] <= EPS2 * fabs(d[m] * d[m + 1]) + floor2:
                    break
                m += 1
            if m < lend:
                e[m] = 0.0
            if m == l:
                l += 1
                stalled = 0
                floor2 = SAFMIN
                continue
            if m == l + 1:
                # 2x2 block [[a, b], [b, c]]: eigenvalues a - t b and c + t b
                # with t the tangent of the diagonalising Jacobi rotation
                # (Rutishauser's stable form, |t| <= 1).
                a = d[l]
                b = sqrt(e[l])
                c = d[l + 1]
                sm = (c - a) / (2.0 * b)
                if fabs(sm) < 1e150:
                    t = copysign(1.0, sm) / (fabs(sm) + sqrt(sm * sm + 1.0))
                else:
                    t = 0.5 / sm
                d[l + 1] = c + t * b
                t = a - t * b
                d[l] = t
                e[l] = 0.0
                l += 2
                stalled = 0
                floor2 = SAFMIN
                continue
            if sweeps >= max_sweeps:
                status = 1
                break
            sweeps += 1
            stalled += 1
            if stalled == STALL_SWEEPS:
                floor2 = _stall_floor2(anorm * scale)

            # Wilkinson shift from the leading 2x2.
            p = d[l]
            rte = sqrt(e[l])
            sigma = (d[l + 1] - p) / (2.0 * rte)
            r = _pythag1(sigma)
            sigma = p - rte / (sigma + copysign(r, sigma))

            c = 1.0
            s = 0.0
            gamma = d[m] - sigma
            pp = gamma * gamma
            i = m - 1
            while i >= l:
                bb = e[i]
                r = pp + bb
                if i != m - 1:
                    e[i + 1] = s * r
                oldc = c
                c = pp / r
                s = bb / r
                # gamma^2 / c = gamma^2 * (r / pp): the quotient is formed
                # beside c, so the loop-carried chain has one division.  When
                # pp is tiny next to r, r / pp can overflow where the quotient
                # by c (which then underflows towards 0) is still right: take
                # the division in that rare case.
                q = r / pp
                oldgam = gamma
                alpha = d[i]
                gamma = c * (alpha - sigma) - s * oldgam
                d[i + 1] = oldgam + (alpha - gamma)
                if c == 0.0:
                    pp = oldc * bb
                elif q < 1e290:
                    pp = (gamma * gamma) * q
                else:
                    pp = (gamma * gamma) / c
                i -= 1
            e[l] = s * pp
            d[l] = sigma + gamma

        if scale != 1.0:
            inv2 = 1.0 / scale
            for i in range(lstart, lend + 1):
                d[i] *= inv2
            for i in range(lstart, lend):
                e[i] = sqrt(e[i]) * inv2
        else:
            for i in range(lstart, lend):
                e[i] = sqrt(e[i])
        if status:
            break
    sweeps_out[0] = sweeps
    return status


# ----------------------------------------------------------------------------
# Vectors: QL with Givens rotations, accumulated into the kept rows of Z.
# ----------------------------------------------------------------------------
cdef inline void _chain8(double* z, Py_ssize_t ldz, const double* cs,
                         const double* sn, Py_ssize_t lo, Py_ssize_t m) noexcept nogil:
    """One sweep's rotations applied to 8 consecutive rows starting at z.

    The eight running entries live in registers (the compiler pairs them into
    vector registers), so each entry of Z costs one load and one store.
    """
    cdef double c, s, a0, a1, a2, a3, a4, a5, a6, a7
    cdef double* zi = z + m * ldz
    cdef double* zi1
    cdef double r0 = zi[0], r1 = zi[1], r2 = zi[2], r3 = zi[3]
    cdef double r4 = zi[4], r5 = zi[5], r6 = zi[6], r7 = zi[7]
    cdef Py_ssize_t i = m - 1
    while i >= lo:
        c = cs[i]
        s = sn[i]
        zi1 = zi
        zi = zi - ldz
        a0 = zi[0]
        a1 = zi[1]
        a2 = zi[2]
        a3 = zi[3]
        a4 = zi[4]
        a5 = zi[5]
        a6 = zi[6]
        a7 = zi[7]
        zi1[0] = s * a0 + c * r0
        zi1[1] = s * a1 + c * r1
        zi1[2] = s * a2 + c * r2
        zi1[3] = s * a3 + c * r3
        zi1[4] = s * a4 + c * r4
        zi1[5] = s * a5 + c * r5
        zi1[6] = s * a6 + c * r6
        zi1[7] = s * a7 + c * r7
        r0 = c * a0 - s * r0
        r1 = c * a1 - s * r1
        r2 = c * a2 - s * r2
        r3 = c * a3 - s * r3
        r4 = c * a4 - s * r4
        r5 = c * a5 - s * r5
        r6 = c * a6 - s * r6
        r7 = c * a7 - s * r7
        i -= 1
    zi[0] = r0
    zi[1] = r1
    zi[2] = r2
    zi[3] = r3
    zi[4] = r4
    zi[5] = r5
    zi[6] = r6
    zi[7] = r7


cdef void _flush_batch(SweepBatch* batch, double* z, Py_ssize_t ldz,
                       Py_ssize_t nrows, double* carry) noexcept nogil:
    """Apply every stored sweep, in order, to Z; one block of rows at a time.

    Rotation i maps columns (z_i, z_{i+1}) to (c z_i - s z_{i+1}, s z_i + c z_{i+1}).
    Rows of Z transform independently (Z <- Z Q_1 Q_2 ...), so a block of rows
    can take all stored sweeps while it sits in cache: memory traffic drops by
    the number of sweeps in the batch.  Within a sweep each row carries its
    running column-(i+1) entry along the chain, so each entry is loaded and
    stored once, and the loop over the rows of the block vectorises.
    """
    cdef Py_ssize_t r0, rb, k, k8, rem, i, j, lo, m
    cdef Py_ssize_t n = batch.n
    cdef double c, s, a
    cdef const double* cs
    cdef const double* sn
    cdef double* zi
    cdef double* zi1
    r0 = 0
    while r0 < nrows:
        rb = nrows - r0
        if rb > batch.row_block:
            rb = batch.row_block
        for j in range(batch.count):
            lo = batch.lo[j]
            m = batch.hi[j]
            cs = batch.cs + j * n
            sn = batch.sn + j * n
            k = 0
            if batch.simd:
                while k + 16 <= rb:
                    lanqr_chain16_avx2(z + r0 + k, ldz, cs, sn, lo, m)
                    k += 16
            while k + 8 <= rb:
                _chain8(z + r0 + k, ldz, cs, sn, lo, m)
                k += 8
            if k == rb:
                continue
            # Leftover rows (fewer than 8) through the generic carry loop.
            k8 = k
            rem = rb - k8
            zi1 = z + m * ldz + r0 + k8
            for k in range(rem):
                carry[k] = zi1[k]
            i = m - 1
            while i >= lo:
                c = cs[i]
                s = sn[i]
                zi = z + i * ldz + r0 + k8
                zi1 = zi + ldz
                for k in range(rem):
                    a = zi[k]
                    zi1[k] = s * a + c * carry[k]
                    carry[k] = c * a - s * carry[k]
                i -= 1
            zi = z + lo * ldz + r0 + k8
            for k in range(rem):
                zi[k] = carry[k]
        r0 += rb
    batch.count = 0


cdef inline void _rotate_pair(double* z, Py_ssize_t ldz, Py_ssize_t nrows,
                              Py_ssize_t i, double c, double s) noexcept nogil:
    """Columns (z_i, z_{i+1}) <- (c z_i - s z_{i+1}, s z_i + c z_{i+1})."""
    cdef Py_ssize_t k
    cdef double a, b
    cdef double* zi = z + i * ldz
    cdef double* zi1 = zi + ldz
    for k in range(nrows):
        a = zi[k]
        b = zi1[k]
        zi[k] = c * a - s * b
        zi1[k] = s * a + c * b


cdef int _vectors_core(double* d, double* e, Py_ssize_t n,
                       double* z, Py_ssize_t ldz, Py_ssize_t nrows,
                       SweepBatch* batch, double* carry,
                       Py_ssize_t max_sweeps, Py_ssize_t* sweeps_out) noexcept nogil:
    """Eigenvalues into d (unordered) and Z <- Z Q (Q the eigenvector matrix).

    Z has ``nrows`` rows stored column-major with leading dimension ``ldz``;
    ``e`` needs n entries, ``carry`` max(batch.row_block, FEW_ROWS) entries; the
    batch is unused when nrows <= FEW_ROWS.
    Returns 0, or 1 when the sweep limit was reached.
    """
    cdef Py_ssize_t l1 = 0, l, lend, lstart, m, i, k, lowest
    cdef Py_ssize_t sweeps = 0
    cdef bint few_rows = nrows <= FEW_ROWS
    cdef double* cs = NULL
    cdef double* sn = NULL
    cdef double anorm, scale, inv
    cdef double p, g, r, c, s, f, b, t, a, cc, theta, tj, cj, sj
    cdef int status = 0
    cdef int stalled = 0
    cdef double floor2 = SAFMIN

    while l1 < n:
        if l1 > 0:
            e[l1 - 1] = 0.0
        m = _next_split(d, e, l1, n)
        l = l1
        lend = m
        l1 = m + 1
        if lend == l:
            continue

        anorm = _block_max_norm(d, e, l, lend)
        if anorm == 0.0:
            continue
        scale = _block_scale(anorm)
        if scale != 1.0:
            for i in range(l, lend + 1):
                d[i] *= scale
            for i in range(l, lend):
                e[i] *= scale

        if fabs(d[lend]) < fabs(d[l]):
            _reverse(d, l, lend)
            _reverse(e, l, lend - 1)
            if not few_rows and batch.count > 0:
                _flush_batch(batch, z, ldz, nrows, carry)
            _reverse_columns(z, ldz, nrows, l, lend)
        lstart = l
        stalled = 0
        floor2 = SAFMIN

        while l <= lend:
            m = l
            while m < lend:
                t = e[m]
                if t * t <= EPS2 * fabs(d[m] * d[m + 1]) + floor2:
                    break
                m += 1
            if m < lend:
                e[m] = 0.0
            if m == l:
                l += 1
                stalled = 0
                floor2 = SAFMIN
                continue
            if m == l + 1:
                # 2x2 block [[a, b], [b, cc]]: one Jacobi rotation diagonalises
                # it (Rutishauser's formulas: t = tan of the rotation angle,
                # chosen of modulus <= 1, so the updates are stable).
                a = d[l]
                b = e[l]
                cc = d[l + 1]
                theta = (cc - a) / (2.0 * b)
                if fabs(theta) < 1e150:
                    tj = copysign(1.0, theta) / (fabs(theta) + sqrt(theta * theta + 1.0))
                else:
                    tj = 0.5 / theta
                cj = 1.0 / sqrt(tj * tj + 1.0)
                sj = tj * cj
                d[l] = a - tj * b
                d[l + 1] = cc + tj * b
                e[l] = 0.0
                if few_rows:
                    _rotate_pair(z, ldz, nrows, l, cj, sj)
                else:
                    batch.cs[batch.count * n + l] = cj
                    batch.sn[batch.count * n + l] = sj
                    batch.lo[batch.count] = l
                    batch.hi[batch.count] = l + 1
                    batch.count += 1
                    if batch.count == batch.capacity:
                        _flush_batch(batch, z, ldz, nrows, carry)
                l += 2
                stalled = 0
                floor2 = SAFMIN
                continue
            if sweeps >= max_sweeps:
                status = 1
                break
            sweeps += 1
            stalled += 1
            if stalled == STALL_SWEEPS:
                floor2 = _stall_floor2(anorm * scale)

            # Wilkinson shift from the leading 2x2; it enters the sweep only
            # through g = d_m - shift, the start of the first rotation.
            g = (d[l + 1] - d[l]) / (2.0 * e[l])
            r = _pythag1(g)
            g = d[m] - d[l] + e[l] / (g + copysign(r, g))
            s = 1.0
            c = 1.0
            p = 0.0
            lowest = l
            if few_rows:
                for k in range(nrows):
                    carry[k] = z[m * ldz + k]
            else:
                cs = batch.cs + batch.count * n
                sn = batch.sn + batch.count * n
            i = m - 1
            while i >= l:
                f = s * e[i]
                b = c * e[i]
                r = _hypot(f, g)
                e[i + 1] = r
                if r == 0.0:
                    # Both entries underflowed: the bulge vanished, which
                    # splits the block; undo the running shift and rescan.
                    d[i + 1] -= p
                    e[m] = 0.0
                    lowest = i + 1
                    break
                if r > 4.0 * SAFMIN:
                    inv = 1.0 / r
                    s = f * inv
                    c = g * inv
                else:
                    # 1 / r would overflow for subnormal r: divide instead
                    s = f / r
                    c = g / r
                g = d[i + 1] - p
                r = (d[i] - g) * s + 2.0 * c * b
                p = s * r
                d[i + 1] = g + p
                g = c * r - b
                if few_rows:
                    # A few kept rows: rotate them here, off the sweep's
                    # critical path, instead of storing the rotations.
                    for k in range(nrows):
                        a = z[i * ldz + k]
                        z[(i + 1) * ldz + k] = s * a + c * carry[k]
                        carry[k] = c * a - s * carry[k]
                else:
                    cs[i] = c
                    sn[i] = s
                i -= 1
            if few_rows:
                for k in range(nrows):
                    z[lowest * ldz + k] = carry[k]
            elif lowest < m:
                batch.lo[batch.count] = lowest
                batch.hi[batch.count] = m
                batch.count += 1
                if batch.count == batch.capacity:
                    _flush_batch(batch, z, ldz, nrows, carry)
            if lowest == l:
                d[l] -= p
                e[l] = g
                e[m] = 0.0

        if scale != 1.0:
            inv = 1.0 / scale
            for i in range(lstart, lend + 1):
                d[i] *= inv
            for i in range(lstart, lend):
                e[i] *= inv
        if status:
            break
    if not few_rows and batch.count > 0:
        _flush_batch(batch, z, ldz, nrows, carry)
    sweeps_out[0] = sweeps
    return status


cdef void _permute_columns(double* z, Py_ssize_t ldz, Py_ssize_t nrows,
                           const Py_ssize_t* order, Py_ssize_t n,
                           char* seen, double* tmp) noexcept nogil:
    """In place: new column j = old column order[j] (cycle following)."""
    cdef Py_ssize_t j, k, nxt
    cdef size_t nbytes = nrows * sizeof(double)
    memset(seen, 0, n)
    for j in range(n):
        if seen[j] or order[j] == j:
            continue
        memcpy(tmp, z + j * ldz, nbytes)
        k = j
        while True:
            seen[k] = 1
            nxt = order[k]
            if nxt == j:
                memcpy(z + k * ldz, tmp, nbytes)
                break
            memcpy(z + k * ldz, z + nxt * ldz, nbytes)
            k = nxt


cdef struct ValueIndex:
    double value
    Py_ssize_t index


cdef int _cmp_value_index(const void* pa, const void* pb) noexcept nogil:
    cdef const ValueIndex* a = <const ValueIndex*> pa
    cdef const ValueIndex* b = <const ValueIndex*> pb
    if a.value < b.value:
        return -1
    if a.value > b.value:
        return 1
    # ties keep their order, so the result does not depend on qsort's choices
    return (a.index > b.index) - (a.index < b.index)


cdef int _cmp_double(const void* pa, const void* pb) noexcept nogil:
    cdef double a = (<const double*> pa)[0]
    cdef double b = (<const double*> pb)[0]
    return (a > b) - (a < b)


cdef inline bint _ascending(const double* w, Py_ssize_t n) noexcept nogil:
    cdef Py_ssize_t i
    for i in range(n - 1):
        if w[i] > w[i + 1]:
            return False
    return True


cdef int _sort_pairs(double* w, double* z, Py_ssize_t ldz, Py_ssize_t nrows,
                     Py_ssize_t n) noexcept nogil:
    """Sort w ascending and permute the columns of Z to match; -3 if no memory."""
    cdef Py_ssize_t j
    cdef ValueIndex* pairs
    cdef Py_ssize_t* order
    cdef char* seen
    cdef double* tmp
    if _ascending(w, n):
        return 0
    pairs = <ValueIndex*> malloc(n * sizeof(ValueIndex))
    order = <Py_ssize_t*> malloc(n * sizeof(Py_ssize_t))
    seen = <char*> malloc(n)
    tmp = <double*> malloc((nrows + 1) * sizeof(double))
    if pairs == NULL or order == NULL or seen == NULL or tmp == NULL:
        free(pairs)
        free(order)
        free(seen)
        free(tmp)
        return -3
    for j in range(n):
        pairs[j].value = w[j]
        pairs[j].index = j
    qsort(pairs, n, sizeof(ValueIndex), _cmp_value_index)
    for j in range(n):
        w[j] = pairs[j].value
        order[j] = pairs[j].index
    if nrows > 0:
        _permute_columns(z, ldz, nrows, order, n, seen, tmp)
    free(pairs)
    free(order)
    free(seen)
    free(tmp)
    return 0


def _isolated_mask(double[::1] e_work, Py_ssize_t n):
    mask = np.zeros(n, dtype=bool)
    cdef Py_ssize_t i
    for i in range(n):
        if (i == 0 or e_work[i - 1] == 0.0) and (i == n - 1 or e_work[i] == 0.0):
            mask[i] = True
    return mask


# ----------------------------------------------------------------------------
# Thin typed wrappers (called by tridiagonal.py only).
# ----------------------------------------------------------------------------
def values(const double[::1] d, const double[::1] e, Py_ssize_t max_sweeps):
    """Return (status, w, e_work, sweeps).

    status 0: w holds the eigenvalues ascending.  -1 / -2: d / e is not finite.
    1: sweep limit reached; w unsorted, e_work marks the converged entries.
    """
    cdef Py_ssize_t n = d.shape[0]
    cdef Py_ssize_t sweeps = 0
    cdef int status
    w = np.empty(n)
    ework = np.empty(n)
    cdef double[::1] wv = w
    cdef double[::1] ev = ework
    with nogil:
        if not _scan_finite(&d[0], n):
            status = -1
        elif n > 1 and not _scan_finite(&e[0], n - 1):
            status = -2
        else:
            memcpy(&wv[0], &d[0], n * sizeof(double))
            if n > 1:
                memcpy(&ev[0], &e[0], (n - 1) * sizeof(double))
            ev[n - 1] = 0.0
            status = _values_core(&wv[0], &ev[0], n, max_sweeps, &sweeps)
            if status == 0 and not _ascending(&wv[0], n):
                qsort(&wv[0], n, sizeof(double), _cmp_double)
    return status, w, ework, sweeps


def eigen(const double[::1] d, const double[::1] e, const Py_ssize_t[::1] rows,
          Py_ssize_t max_sweeps, Py_ssize_t row_block=ROW_BLOCK,
          Py_ssize_t sweeps_per_batch=SWEEPS_PER_BATCH, bint simd=True):
    """Return (status, w, z, e_work, sweeps); z is len(rows) x n (all rows if rows is None).

    Row indices must already be normalised to 0..n-1.  Status as in ``values``.
    ``row_block``, ``sweeps_per_batch`` and ``simd=False`` (force the portable
    rotation loops) exist for tuning and testing.
    """
    cdef Py_ssize_t n = d.shape[0]
    cdef Py_ssize_t nrows = n if rows is None else rows.shape[0]
    cdef Py_ssize_t k
    cdef Py_ssize_t sweeps = 0
    cdef int status
    cdef bint full = rows is None
    w = np.empty(n)
    ework = np.empty(n)
    z = np.zeros((nrows, n), order="F")
    cdef double[::1] wv = w
    cdef double[::1] ev = ework
    cdef double[::1, :] zv = z
    cdef double* work = NULL
    cdef Py_ssize_t* ends = NULL
    cdef SweepBatch batch
    cdef Py_ssize_t cap
    cdef double* zp = &zv[0, 0] if nrows > 0 else NULL
    with nogil:
        if not _scan_finite(&d[0], n):
            status = -1
        elif n > 1 and not _scan_finite(&e[0], n - 1):
            status = -2
        else:
            memcpy(&wv[0], &d[0], n * sizeof(double))
            if n > 1:
                memcpy(&ev[0], &e[0], (n - 1) * sizeof(double))
            ev[n - 1] = 0.0
            for k in range(nrows):
                zp[(rows[k] if not full else k) * nrows + k] = 1.0
            cap = sweeps_per_batch if nrows > FEW_ROWS else 0
            batch.row_block = row_block
            batch.simd = simd and CPU_AVX2_FMA
            batch.n = n
            batch.capacity = cap
            batch.count = 0
            work = <double*> malloc((2 * cap * n + row_block + FEW_ROWS) * sizeof(double))
            ends = <Py_ssize_t*> malloc((2 * cap + 1) * sizeof(Py_ssize_t))
            if work == NULL or ends == NULL:
                status = -3
            else:
                batch.cs = work
                batch.sn = work + cap * n
                batch.lo = ends
                batch.hi = ends + cap
                status = _vectors_core(&wv[0], &ev[0], n, zp, nrows, nrows,
                                       &batch, work + 2 * cap * n, max_sweeps,
                                       &sweeps)
            free(work)
            free(ends)
            if status == 0:
                status = _sort_pairs(&wv[0], zp, nrows, nrows, n)
    if status == -3:
        raise MemoryError("tridiagonal kernel: out of memory for work arrays")
    return status, w, z, ework, sweeps


def simd_available():
    """True when the AVX2 + FMA rotation chain is compiled in and the CPU has it."""
    return bool(CPU_AVX2_FMA)
