/* The varcoef column solve (Thomas algorithm, every column its own system) over the column
 * family's (outer, z, inner) view of kernels/native.py. Two columns at a time when the range
 * allows: their recurrences interleaved, so the core overlaps the two division chains.
 * Exports native_varcoef_f64 and native_varcoef_f32. */
#include <stdint.h>

#define THOMAS_COLUMNS(NAME, T)                                                                    \
void NAME(const T *restrict a, const T *restrict b, const T *restrict c, const T *restrict d,     \
          T *restrict x, int64_t outer, int64_t zext, int64_t inner, int64_t nz, int64_t lo,      \
          int64_t hi, T *restrict cp)                                                              \
{                                                                                                  \
    (void)outer;                                                                                   \
    const int64_t s = inner; /* distance between levels of one column */                          \
    T *restrict cq = cp + nz; /* the second column's modified super-diagonal */                  \
    for (int64_t col = lo; col < hi; col += 2) {                                                   \
        const int64_t o = col / inner, i = col - o * inner;                                        \
        const int64_t other = col + 1 < hi ? col + 1 : col; /* an odd range: one column twice */  \
        const int64_t p = other / inner, q = other - p * inner;                                    \
        int64_t u = o * zext * inner + i, v = p * zext * inner + q;                                \
        T r0 = (T)1 / b[u], r1 = (T)1 / b[v];                                                      \
        T c0 = c[u] * r0, c1 = c[v] * r1, x0 = d[u] * r0, x1 = d[v] * r1;                         \
        cp[0] = c0; cq[0] = c1; x[u] = x0; x[v] = x1;                                              \
        for (int64_t k = 1; k < nz; k++) {                                                         \
            u += s; v += s;                                                                        \
            r0 = (T)1 / (b[u] - a[u] * c0); r1 = (T)1 / (b[v] - a[v] * c1);                        \
            x0 = (d[u] - a[u] * x0) * r0; x1 = (d[v] - a[v] * x1) * r1;                            \
            c0 = c[u] * r0; c1 = c[v] * r1;                                                        \
            cp[k] = c0; cq[k] = c1; x[u] = x0; x[v] = x1;                                          \
        }                                                                                          \
        for (int64_t k = nz - 2; k >= 0; k--) {                                                    \
            u -= s; v -= s;                                                                        \
            x0 = x[u] - cp[k] * x0; x1 = x[v] - cq[k] * x1;                                        \
            x[u] = x0; x[v] = x1;                                                                  \
        }                                                                                          \
    }                                                                                              \
}

THOMAS_COLUMNS(native_varcoef_f64, double)
THOMAS_COLUMNS(native_varcoef_f32, float)
