/* The 5-point Laplacian (grid spacing 1), doubly periodic, over the stencil row walk of
 * kernels/native.py. Exports native_laplacian_f64 and native_laplacian_f32. */
#include <stdint.h>

static inline void item_origin(int64_t m, const int64_t *counts, const int64_t *strides, const int64_t *jmul,
                               const int64_t *imul, int64_t *base, int64_t *j0, int64_t *i0)
{
    int64_t idx[4];
    idx[3] = m % counts[3]; m /= counts[3];
    idx[2] = m % counts[2]; m /= counts[2];
    idx[1] = m % counts[1]; idx[0] = m / counts[1];
    *base = *j0 = *i0 = 0;
    for (int a = 0; a < 4; a++) {
        *base += idx[a] * strides[a];
        *j0 += idx[a] * jmul[a];
        *i0 += idx[a] * imul[a];
    }
}

#define LAPLACIAN_ROWS(NAME, T)                                                                   \
void NAME(const T *restrict q, T *restrict out, const int64_t *counts, const int64_t *strides,    \
          const int64_t *jmul, const int64_t *imul, const int64_t *dy, const int64_t *dx,         \
          int64_t ny, int64_t nx, int64_t halo, int64_t edge, int64_t lo, int64_t hi)             \
{                                                                                                  \
    const int64_t *north = dy + (halo + 1) * ny, *south = dy + (halo - 1) * ny;                   \
    const int64_t *east = dx + (halo + 1) * nx, *west = dx + (halo - 1) * nx;                     \
    const int64_t n4 = counts[4], n5 = counts[5], tj = jmul[5], ti = imul[5];                      \
    for (int64_t m = lo; m < hi; m++) {                                                            \
        int64_t base, j0, i0;                                                                      \
        item_origin(m, counts, strides, jmul, imul, &base, &j0, &i0);                              \
        for (int64_t r = 0; r < n4; r++) {                                                         \
            const T *restrict p = q + base + r * strides[4];                                       \
            T *restrict o = out + base + r * strides[4];                                           \
            const int64_t j = j0 + r * jmul[4], i = i0 + r * imul[4];                              \
            if (j >= ny || i >= nx) continue; /* the unused part of a partial last tile */        \
            int64_t len = n5; /* a row in a partial last tile ends early */                      \
            if (tj > 0 && (ny - j + tj - 1) / tj < len) len = (ny - j + tj - 1) / tj;              \
            if (ti > 0 && (nx - i + ti - 1) / ti < len) len = (nx - i + ti - 1) / ti;              \
            const int64_t first = edge < len ? edge : len;                                         \
            const int64_t last = len - edge > first ? len - edge : first;                          \
            if (last > first) { /* interior: constant displacements, a plain vector loop */        \
                const int64_t jj = j + first * tj, ii = i + first * ti;                            \
                const int64_t de = east[ii], dw = west[ii], dn = north[jj], ds = south[jj];        \
                for (int64_t e = first; e < last; e++)                                             \
                    o[e] = p[e + de] + p[e + dw] + p[e + dn] + p[e + ds] - (T)4 * p[e];            \
            }                                                                                      \
            for (int64_t e = 0; e < len; e++) { /* row ends: a tile edge or the periodic seam */   \
                if (e == first) e = last;                                                          \
                if (e >= len) break;                                                               \
                const int64_t jj = j + e * tj, ii = i + e * ti;                                    \
                o[e] = p[e + east[ii]] + p[e + west[ii]] + p[e + north[jj]] + p[e + south[jj]]     \
                       - (T)4 * p[e];                                                              \
            }                                                                                      \
        }                                                                                          \
    }                                                                                              \
}

LAPLACIAN_ROWS(native_laplacian_f64, double)
LAPLACIAN_ROWS(native_laplacian_f32, float)
