"""Kernels checked against sources outside the project: SciPy/LAPACK and textbook closed forms.

Every test names its source on a ``Source:``, ``From memory:`` or ``Common practice:`` line
(tests/test_source_labels.py enforces it).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import solve_banded
from scipy.ndimage import correlate

from kernels.grid import Extents
from kernels.families import permutations
from kernels.registry import get_kernel

COLUMN_KERNELS = ("varcoef", "levelcoef", "sharedcoef")
LAYOUTS = [p.spec for p in permutations()] + ["y/2.x/3.var.z.y%2.x%3", "var.z.y+1.x+8", "y%2.x%3.var.z.y/2.x/3"]
GRID = Extents(var=2, z=7, y=4, x=6)


def _full(v: np.ndarray, like: np.ndarray) -> np.ndarray:
    """Coefficients as full (var, z, y, x) arrays whatever their stored shape."""
    return np.broadcast_to(v.reshape(1, -1, 1, 1) if v.ndim == 1 else v, like.shape)


@pytest.mark.slow
@pytest.mark.parametrize("name", COLUMN_KERNELS)
@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_columns_agree_with_lapack_solve_banded(name: str, dtype: str) -> None:
    """Reference: scipy.linalg.solve_banded, column by column.

    Source: for a (1, 1) band SciPy 1.17 calls LAPACK's tridiagonal driver ?gtsv (Gaussian
    elimination with partial pivoting), not the general band driver ?gbsv: read in the installed
    scipy/linalg/_basic.py, function _solve_banded. An independent algorithm from our Thomas solve.
    """
    kernel = get_kernel(name)
    tol = kernel.tolerance(dtype)
    for spec in LAYOUTS:
        problem = kernel.make_problem(spec, GRID, dtype, seed=5)
        lg = {k: v.astype(np.float64) for k, v in problem.logical.items()}
        d = lg["d"]
        a, b, c = (_full(lg[k], d) for k in "abc")
        expected = np.empty_like(d)
        for v in range(GRID.var):
            for j in range(GRID.y):
                for i in range(GRID.x):
                    ab = np.zeros((3, GRID.z))
                    ab[0, 1:] = c[v, :-1, j, i]  # super-diagonal
                    ab[1] = b[v, :, j, i]
                    ab[2, :-1] = a[v, 1:, j, i]  # sub-diagonal
                    expected[v, :, j, i] = solve_banded((1, 1), ab, d[v, :, j, i])
        scale = np.abs(expected).max()
        for schedule in kernel.schedules:
            problem.output.data[...] = np.nan
            kernel.bind(problem, schedule)()
            got = problem.output.to_logical()
            assert np.abs(got - expected).max() / scale <= tol, f"{spec} {schedule.name}"


@pytest.mark.parametrize("name", COLUMN_KERNELS)
def test_toeplitz_eigenvectors_solve_in_closed_form(name: str) -> None:
    """The symmetric tridiagonal Toeplitz matrix with diagonal b and off-diagonals a has eigenpairs
    lambda_k = b + 2a cos(k pi/(n+1)), v_k(j) = sin(j k pi/(n+1)), j = 1..n. Textbook result, e.g.
    G. D. Smith, Numerical Solution of Partial Differential Equations (Oxford), chapter on stability
    by the matrix method. So T x = v_k has x = v_k / lambda_k exactly.

    From memory: G. D. Smith (Oxford), the eigenvalues of a tridiagonal Toeplitz matrix.
    """
    kernel = get_kernel(name)
    n, diag, off = 16, 2.5, -1.0
    ext = Extents(var=3, z=n, y=2, x=5)
    like = kernel.logical_inputs(ext, np.dtype("float64"), 0)
    jj = np.arange(1, n + 1)
    d = np.empty(ext.shape)
    expected = np.empty(ext.shape)
    modes = np.arange(ext.var * ext.y * ext.x).reshape(ext.var, ext.y, ext.x) % n + 1
    for (v, j, i), k in np.ndenumerate(modes):
        vec = np.sin(jj * k * np.pi / (n + 1))
        d[v, :, j, i] = vec
        expected[v, :, j, i] = vec / (diag + 2 * off * np.cos(k * np.pi / (n + 1)))
    logical = {"d": d}
    for key, value in (("a", off), ("b", diag), ("c", off)):
        logical[key] = np.full(like[key].shape, value)
    for spec in ("var.z.y.x", "y.x.z.var", "y/1.x/5.z.var.y%1.x%5"):
        problem = kernel.problem_from(spec, logical, "float64")
        for schedule in kernel.schedules:
            kernel.bind(problem, schedule)()
            np.testing.assert_allclose(problem.output.to_logical(), expected, rtol=0, atol=1e-13)


def _mode(ext: Extents, m: int, l: int, h: float) -> tuple[np.ndarray, float, float]:
    """sin(k x) cos(l y) on the periodic grid x = i h, y = j h with k, l whole wavenumbers of the domain."""
    k = 2 * np.pi * m / (ext.x * h)
    w = 2 * np.pi * l / (ext.y * h)
    x = np.arange(ext.x) * h
    y = np.arange(ext.y) * h
    field = np.sin(k * x)[None, :] * np.cos(w * y)[:, None]
    return np.broadcast_to(field, ext.shape).copy(), k, w


@pytest.mark.parametrize("spec", ["var.z.y.x", "y.x.z.var", "z.x.var.y", "y/4.x/4.var.z.y%4.x%4"])
@pytest.mark.parametrize("m, l", [(1, 0), (3, 2), (8, 4)])
def test_laplacian_and_hyperdiffusion_fourier_symbols(spec: str, m: int, l: int) -> None:
    """The 5-point Laplacian multiplies sin(kx)cos(ly) by -(4/h^2)(sin^2(kh/2) + sin^2(lh/2)) (its
    standard Fourier symbol); the squared operator by that symbol squared.

    From memory: R. J. LeVeque, Finite Difference Methods for Ordinary and Partial Differential
    Equations (SIAM 2007), the symbol of the 5-point Laplacian.
    """
    from kernels.stencils.laplacian import SPACING

    ext = Extents(var=2, z=3, y=8, x=16)
    q, k, w = _mode(ext, m, l, SPACING)
    symbol = -(4 / SPACING**2) * (np.sin(k * SPACING / 2) ** 2 + np.sin(w * SPACING / 2) ** 2)
    for name, factor in (("laplacian", symbol), ("hyperdiffusion", symbol**2)):
        kernel = get_kernel(name)
        problem = kernel.problem_from(spec, {"q": q}, "float64")
        kernel.bind(problem, "block")()
        np.testing.assert_allclose(problem.output.to_logical(), factor * q, rtol=0, atol=1e-12)


@pytest.mark.parametrize("spec", ["var.z.y.x", "x.var.z.y", "y/2.x/3.var.z.y%2.x%3", "yx/7.var.z.yx%7"])
def test_stencils_match_scipy_correlate_with_wrap(spec: str) -> None:
    """Reference: scipy.ndimage.correlate(..., mode='wrap') with the stencil weights, plane by plane.

    Source: scipy.ndimage.correlate (SciPy 1.17) for the periodic sums.
    Common practice: the weights, 5-point [1, -4] and its square, the 13-point 20/-8/2/1 stencil.
    """
    lap = np.array([[0, 1, 0], [1, -4, 1], [0, 1, 0]], dtype=float)
    hyper = np.array(
        [[0, 0, 1, 0, 0], [0, 2, -8, 2, 0], [1, -8, 20, -8, 1], [0, 2, -8, 2, 0], [0, 0, 1, 0, 0]], dtype=float
    )
    for name, weights in (("laplacian", lap), ("hyperdiffusion", hyper)):
        kernel = get_kernel(name)
        problem = kernel.make_problem(spec, Extents(var=2, z=3, y=6, x=9), "float64", seed=2)
        q = problem.logical["q"]
        expected = np.stack([np.stack([correlate(plane, weights, mode="wrap") for plane in level]) for level in q])
        for schedule in kernel.schedules:
            kernel.bind(problem, schedule)()
            np.testing.assert_allclose(problem.output.to_logical(), expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize("spec", ["var.z.y.x", "y.x.z.var", "y/2.x/3.var.z.y%2.x%3", "z.x+1.var.y"])
@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_advection_conserves_each_variable(spec: str, dtype: str) -> None:
    """Flux form on a periodic domain: the tendency of each variable sums to zero (to rounding).

    Common practice: a flux-form scheme telescopes, so it conserves the domain total.
    """
    kernel = get_kernel("advection")
    problem = kernel.make_problem(spec, Extents(var=3, z=4, y=6, x=9), dtype, seed=4)
    for schedule in kernel.schedules:
        kernel.bind(problem, schedule)()
        tend = problem.output.to_logical().astype(np.float64)
        totals = tend.sum(axis=(2, 3))
        scale = np.abs(tend).sum(axis=(2, 3))
        assert np.all(np.abs(totals) <= 64 * np.finfo(dtype).eps * scale)


def test_advection_leaves_a_constant_field_constant() -> None:
    """A constant field in a uniform wind has exactly zero tendency: every face flux is equal.

    Common practice: consistency of a flux-form scheme (free-stream preservation).
    """
    kernel = get_kernel("advection")
    ext = Extents(var=2, z=3, y=4, x=8)
    logical = {"q": np.full(ext.shape, 3.25), "u": np.full((1, 3, 4, 8), 7.5), "v": np.full((1, 3, 4, 8), -2.0)}
    for spec in ("var.z.y.x", "y.x.z.var", "y/2.x/4.var.z.y%2.x%4"):
        problem = kernel.problem_from(spec, logical, "float64")
        for schedule in kernel.schedules:
            kernel.bind(problem, schedule)()
            assert np.all(problem.output.to_logical() == 0.0)


@pytest.mark.parametrize("spec", ["var.z.y.x", "y.x.z.var", "var.y.x.z", "y/4.x/8.var.z.y%4.x%8", "z.x+1.var.y"])
@pytest.mark.parametrize("m, l", [(1, 1), (3, 2), (5, 7)])
def test_advection_of_a_fourier_mode_in_closed_form(spec: str, m: int, l: int) -> None:
    """Uniform wind (u, v) and q = sin(kx) cos(ly) on a periodic grid of spacing h.

    Derivation: with uniform u the x part of the centred flux form is
    -(u / 2h) (q[i+1] - q[i-1]) and sin(k(x+h)) - sin(k(x-h)) = 2 cos(kx) sin(kh); the y part is
    -(v / 2h) (q[j+1] - q[j-1]) and cos(l(y+h)) - cos(l(y-h)) = -2 sin(ly) sin(lh). So the
    tendency is exactly  -u sin(kh)/h cos(kx) cos(ly) + v sin(lh)/h sin(kx) sin(ly).

    Common practice: the centred difference of a Fourier mode (the modified wavenumber
    sin(kh)/h); derived above from two trigonometric identities, no outside number used.
    """
    from kernels.stencils.advection import SPACING as h

    kernel = get_kernel("advection")
    ext = Extents(var=2, z=3, y=16, x=24)
    q, k, w = _mode(ext, m, l, h)
    u, v = 1.75, -0.625
    x = np.arange(ext.x) * h
    y = np.arange(ext.y) * h
    expected = (-u * np.sin(k * h) / h * np.cos(k * x)[None, :] * np.cos(w * y)[:, None]
                + v * np.sin(w * h) / h * np.sin(k * x)[None, :] * np.sin(w * y)[:, None])
    wind = (1, ext.z, ext.y, ext.x)
    problem = kernel.problem_from(spec, {"q": q, "u": np.full(wind, u), "v": np.full(wind, v)}, "float64")
    for schedule in kernel.schedules:
        problem.output.data[...] = np.nan
        kernel.bind(problem, schedule)()
        error = np.abs(problem.output.to_logical() - np.broadcast_to(expected, ext.shape)).max()
        assert error <= 1e-13, f"{spec} {schedule.name}: max error {error:.3g}"
