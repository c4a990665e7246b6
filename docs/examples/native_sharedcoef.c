/* The sharedcoef column solve (one tridiagonal system per column, shared by every variable) over
 * the seven-axis view of kernels/native.py (native_shared_columns). Each column's system is
 * factorised once into scratch (modified super-diagonal, reciprocal pivots); every variable's
 * right-hand side is then substituted with it. Exports native_sharedcoef_f64 and _f32. */
#include <stdint.h>

#define SHARED_COLUMNS(NAME, T)                                                                     \
void NAME(const T *restrict a, const T *restrict b, const T *restrict c, const T *restrict d,      \
          T *restrict x, const int64_t *ext, int64_t nz, int64_t nvar, int64_t lo, int64_t hi,     \
          T *restrict ws)                                                                           \
{                                                                                                   \
    const int64_t V1 = ext[1], B1 = ext[2], Z = ext[3], B2 = ext[4], V2 = ext[5], C = ext[6];        \
    const int64_t W1 = ext[8], W2 = ext[12]; /* the coefficients' (padded) var extents */            \
    const int64_t nb = B1 * B2;                                                                     \
    T *restrict cp = ws, *restrict rp = ws + nz;                                                    \
    for (int64_t col = lo; col < hi; col++) {                                                       \
        const int64_t ia = col / (nb * C), rem = col - ia * nb * C;                                 \
        const int64_t ib = rem / C, ic = rem - ib * C;                                              \
        const int64_t ib1 = B1 > 1 ? ib : 0, ib2 = ib - ib1;                                        \
        /* the system: (A, W1, B1, Z, B2, W2, C) at var index 0; one level apart = B2 * W2 * C */    \
        const int64_t s0 = ((ia * W1 * B1 + ib1) * Z * B2 + ib2) * W2 * C + ic, sk = B2 * W2 * C;    \
        rp[0] = (T)1 / b[s0];                                                                       \
        cp[0] = c[s0] * rp[0];                                                                      \
        for (int64_t k = 1; k < nz; k++) {                                                          \
            const int64_t u = s0 + k * sk;                                                          \
            rp[k] = (T)1 / (b[u] - a[u] * cp[k - 1]);                                               \
            cp[k] = c[u] * rp[k];                                                                   \
        }                                                                                           \
        for (int64_t v = 0; v < nvar; v++) {                                                        \
            const int64_t v1 = V1 > 1 ? v : 0, v2 = v - v1;                                         \
            const int64_t step = B2 * V2 * C; /* one level apart in d and x */                      \
            int64_t u = ((((ia * V1 + v1) * B1 + ib1) * Z * B2 + ib2) * V2 + v2) * C + ic;          \
            const int64_t lev = s0; /* the system's offset at level 0 */                            \
            T y = d[u] * rp[0];                                                                     \
            x[u] = y;                                                                               \
            for (int64_t k = 1; k < nz; k++) {                                                      \
                u += step;                                                                          \
                y = (d[u] - a[lev + k * sk] * y) * rp[k];                                           \
                x[u] = y;                                                                           \
            }                                                                                       \
            for (int64_t k = nz - 2; k >= 0; k--) {                                                 \
                u -= step;                                                                          \
                y = x[u] - cp[k] * y;                                                               \
                x[u] = y;                                                                           \
            }                                                                                       \
        }                                                                                           \
    }                                                                                               \
}

SHARED_COLUMNS(native_sharedcoef_f64, double)
SHARED_COLUMNS(native_sharedcoef_f32, float)
