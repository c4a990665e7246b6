/* The levelcoef column solve (one tridiagonal matrix per level, shared by every column) over
 * the column family's (outer, z, inner) view of kernels/native.py, with a, b, c the nz values
 * of that matrix. Each call factorises the matrix once into its scratch (modified
 * super-diagonal and reciprocal pivots), then substitutes every column of its range, two at a
 * time so the core overlaps their chains. Exports native_levelcoef_f64 and native_levelcoef_f32. */
#include <stdint.h>

#define LEVEL_COLUMNS(NAME, T)                                                                     \
void NAME(const T *restrict a, const T *restrict b, const T *restrict c, const T *restrict d,     \
          T *restrict x, int64_t outer, int64_t zext, int64_t inner, int64_t nz, int64_t lo,      \
          int64_t hi, T *restrict ws)                                                              \
{                                                                                                  \
    (void)outer;                                                                                   \
    T *restrict cp = ws, *restrict rp = ws + nz; /* modified super-diagonal, 1 / pivot */          \
    rp[0] = (T)1 / b[0];                                                                           \
    cp[0] = c[0] * rp[0];                                                                          \
    for (int64_t k = 1; k < nz; k++) {                                                             \
        rp[k] = (T)1 / (b[k] - a[k] * cp[k - 1]);                                                  \
        cp[k] = c[k] * rp[k];                                                                      \
    }                                                                                              \
    const int64_t s = inner;                                                                       \
    for (int64_t col = lo; col < hi; col += 2) {                                                   \
        const int64_t o = col / inner, i = col - o * inner;                                        \
        const int64_t other = col + 1 < hi ? col + 1 : col;                                        \
        const int64_t p = other / inner, q = other - p * inner;                                    \
        int64_t u = o * zext * inner + i, v = p * zext * inner + q;                                \
        T x0 = d[u] * rp[0], x1 = d[v] * rp[0];                                                    \
        x[u] = x0; x[v] = x1;                                                                      \
        for (int64_t k = 1; k < nz; k++) {                                                         \
            u += s; v += s;                                                                        \
            x0 = (d[u] - a[k] * x0) * rp[k]; x1 = (d[v] - a[k] * x1) * rp[k];                      \
            x[u] = x0; x[v] = x1;                                                                  \
        }                                                                                          \
        for (int64_t k = nz - 2; k >= 0; k--) {                                                    \
            u -= s; v -= s;                                                                        \
            x0 = x[u] - cp[k] * x0; x1 = x[v] - cp[k] * x1;                                        \
            x[u] = x0; x[v] = x1;                                                                  \
        }                                                                                          \
    }                                                                                              \
}

LEVEL_COLUMNS(native_levelcoef_f64, double)
LEVEL_COLUMNS(native_levelcoef_f32, float)
