"""The dynamical-core kernels (coupled, vertical_advection, saturation) checked against sources
outside the project: LAPACK through NumPy, textbook closed forms and conservation laws, a table
value. Every test names its source (tests/test_source_labels.py)."""

from __future__ import annotations

import numpy as np
import pytest

from harness.suite import SuiteError, parse_suite
from kernels.grid import Extents
from kernels.points.saturation import MAGNUS_A, MAGNUS_B, MAGNUS_E0, reference_adjust
from kernels.registry import get_kernel

LAYOUTS = ("var.z.y.x", "y.x.z.var", "var.y.x.z", "z.var.y.x", "y/2.x/4.var.z.y%2.x%4", "var.z.y+1.x+8")


def _dense(logical: dict[str, np.ndarray], m: int, j: int, i: int) -> tuple[np.ndarray, np.ndarray]:
    """Pair m's system at column (j, i) as a dense (2 nz)^2 matrix, unknown 2k+r = variable 2m+r at level k."""
    nz = logical["d"].shape[1]
    mat = np.zeros((2 * nz, 2 * nz))
    for k in range(nz):
        for r in (0, 1):
            for name, shift in (("a", -1), ("b", 0), ("c", 1)):
                if 0 <= k + shift < nz:
                    for n in (0, 1):
                        mat[2 * k + r, 2 * (k + shift) + n] = logical[f"{name}{n}"][2 * m + r, k, j, i]
    rhs = np.array([logical["d"][2 * m + r, k, j, i] for k in range(nz) for r in (0, 1)])
    return mat, rhs


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_coupled_matches_a_dense_lapack_solve(dtype: str) -> None:
    """Every schedule in every layout equals numpy.linalg.solve on the assembled dense matrix.

    Source: numpy.linalg.solve calls LAPACK ?gesv (LU with partial pivoting), an algorithm
    independent of the block Thomas recurrence and of the banded reference. The matrices are
    checked to be strictly diagonally dominant by rows, the condition under which elimination
    without pivoting is stable (Golub & Van Loan, Matrix Computations, section 4.1 - from memory).
    """
    kernel = get_kernel("coupled")
    ext = Extents(var=4, z=6, y=3, x=5)
    logical = {k: v.astype(np.float64) for k, v in kernel.logical_inputs(ext, np.dtype(dtype), 2).items()}
    expected = np.empty(ext.shape)
    for m in range(ext.var // 2):
        for j in range(ext.y):
            for i in range(ext.x):
                mat, rhs = _dense(logical, m, j, i)
                off = np.abs(mat).sum(axis=1) - np.abs(np.diag(mat))
                assert np.all(np.abs(np.diag(mat)) > off + 0.5)
                sol = np.linalg.solve(mat, rhs).reshape(ext.z, 2)
                expected[2 * m, :, j, i], expected[2 * m + 1, :, j, i] = sol[:, 0], sol[:, 1]
    assert np.abs(kernel.reference(logical) - expected).max() <= 1e-13 * np.abs(expected).max()
    for spec in LAYOUTS if dtype == "float64" else LAYOUTS[:2]:  # float32 compiles cost CI time; the contract covers the rest
        problem = kernel.problem_from(spec, logical, dtype)
        for schedule in kernel.schedules:
            problem.output.data[...] = np.nan
            kernel.bind(problem, schedule)()
            err = np.abs(problem.output.to_logical() - expected).max() / np.abs(expected).max()
            assert err <= kernel.tolerance(dtype), f"{spec} {schedule.name}: {err:.3g}"


def test_coupled_without_coupling_is_two_scalar_solves() -> None:
    """With the off-diagonal entries of every block zeroed, each variable's column is its own
    tridiagonal system.

    Source: scipy.linalg.solve_banded with bandwidths (1, 1) on each variable alone (LAPACK ?gtsv).
    """
    from scipy.linalg import solve_banded

    kernel = get_kernel("coupled")
    ext = Extents(var=2, z=7, y=2, x=3)
    logical = kernel.logical_inputs(ext, np.dtype("float64"), 4)
    row = np.arange(ext.var).reshape(-1, 1, 1, 1) % 2
    for name in "abc":
        logical[f"{name}0"] = np.where(row == 0, logical[f"{name}0"], 0.0)
        logical[f"{name}1"] = np.where(row == 1, logical[f"{name}1"], 0.0)
    problem = kernel.problem_from("var.y.x.z", logical, "float64")
    kernel.bind(problem, "strip")()
    got = problem.output.to_logical()
    for v in range(ext.var):
        diag = logical[f"a{v}"], logical[f"b{v}"], logical[f"c{v}"]
        for j in range(ext.y):
            for i in range(ext.x):
                ab = np.zeros((3, ext.z))
                ab[0, 1:] = diag[2][v, :-1, j, i]
                ab[1] = diag[1][v, :, j, i]
                ab[2, :-1] = diag[0][v, 1:, j, i]
                expected = solve_banded((1, 1), ab, logical["d"][v, :, j, i])
                assert np.allclose(got[v, :, j, i], expected, rtol=1e-13, atol=1e-13)


@pytest.mark.parametrize("spec", ["var.y.x.z", "var.z.y.x", "y.x.z.var"])
def test_upwind_transport_of_a_linear_profile_in_closed_form(spec: str) -> None:
    """q = q0 + s k, constant w > 0, equal levels with r = dt/dz = c: interior levels lose c w s,
    the bottom level loses c w q[0] (its outflow), the top gains c w q[nz-2] (its inflow).

    Source: first-order upwind differencing of dq/dt + d(wq)/dz = 0 (any numerical-methods
    textbook, e.g. LeVeque, Finite Volume Methods for Hyperbolic Problems, ch. 4 - from memory).
    """
    kernel = get_kernel("vertical_advection")
    ext = Extents(var=2, z=9, y=3, x=4)
    c, w0, s = 0.3, 1.5, 0.25
    q = np.broadcast_to((2.0 + s * np.arange(ext.z)).reshape(1, -1, 1, 1), ext.shape).copy()
    w = np.full((1, ext.z, ext.y, ext.x), w0)
    problem = kernel.problem_from(spec, {"q": q, "w": w, "r": np.full(ext.z, c)}, "float64")
    expected = q - c * w0 * s
    expected[:, 0] = q[:, 0] - c * w0 * q[:, 0]
    expected[:, -1] = q[:, -1] + c * w0 * q[:, -2]
    for schedule in kernel.schedules:
        kernel.bind(problem, schedule)()
        np.testing.assert_allclose(problem.output.to_logical(), expected, rtol=1e-14)


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_vertical_advection_conserves_mass_in_a_closed_column(dtype: str) -> None:
    """With zero flux through top and bottom, sum_k dz_k q_k is unchanged by a step.

    Source: the telescoping sum of a flux-form (finite-volume) update with closed boundaries
    (LeVeque, ch. 4 - from memory).
    """
    kernel = get_kernel("vertical_advection")
    ext = Extents(var=3, z=11, y=4, x=5)
    problem = kernel.make_problem("y/2.x/4.var.z.y%2.x%4", ext, dtype, seed=6)
    dz = 20.0 / problem.logical["r"].astype(np.float64)
    for schedule in kernel.schedules:
        kernel.bind(problem, schedule)()
        before = (problem.logical["q"].astype(np.float64) * dz.reshape(1, -1, 1, 1)).sum(axis=1)
        after = (problem.output.to_logical().astype(np.float64) * dz.reshape(1, -1, 1, 1)).sum(axis=1)
        assert np.abs(after - before).max() <= 50 * np.finfo(dtype).eps * np.abs(before).max()


def test_saturation_vapour_pressure_matches_the_table() -> None:
    """es(20 °C) from the Magnus constants the kernel uses.

    From memory: saturation vapour pressure over water 2.339 kPa at 20 °C and 12.35 kPa at 50 °C
    (CRC Handbook of Chemistry and Physics, vapour pressure of water table).
    """
    for tc, table in ((20.0, 2339.0), (50.0, 12350.0)):
        es = MAGNUS_E0 * np.exp(MAGNUS_A * tc / (tc + MAGNUS_B))
        assert abs(es / table - 1) < 0.01, (tc, es)


@pytest.mark.parametrize("spec", ["var.z.y.x", "y.x.z.var", "var.y.x.z"])
def test_saturation_adjustment_conserves_water_and_energy(spec: str) -> None:
    """Every schedule conserves total water qv + qc and the liquid-water static energy
    cpm T - L qc (cpm of the state before the step), never leaves negative cloud water, and its
    one Newton step removes most of each point's departure from saturation.

    Source: saturation adjustment conserves total water and moist static energy at constant
    pressure (e.g. Rogers & Yau, A Short Course in Cloud Physics, ch. 2 - from memory); Newton's
    method converges quadratically, so one step from within 10 % of saturation leaves a small
    fraction of the departure (common practice; the step's derivative leaves out the small
    pressure term, so it is a near-Newton step: at most a tenth is allowed).
    """
    kernel = get_kernel("saturation")
    ext = Extents(var=5, z=12, y=4, x=6)
    problem = kernel.make_problem(spec, ext, "float64", seed=8)
    q, p = problem.logical["q"], problem.logical["p"]
    load = q[3:].sum(axis=0)
    cpm = 1004.0 * (1 + 0.00087 * q[1]) + 4.186 * (q[2] + load)

    def departure(state: np.ndarray) -> np.ndarray:
        es = MAGNUS_E0 * np.exp(MAGNUS_A * state[0] / (state[0] + MAGNUS_B))
        return state[1] - 622.0 * es / (p.reshape(-1, 1, 1) - 0.378 * es)

    for schedule in kernel.schedules:
        kernel.bind(problem, schedule)()
        out = problem.output.to_logical()
        np.testing.assert_allclose(out[1] + out[2], q[1] + q[2], rtol=1e-14)
        np.testing.assert_allclose(cpm * out[0] - 2500.0 * out[2], cpm * q[0] - 2500.0 * q[2], rtol=1e-13, atol=1e-9)
        np.testing.assert_array_equal(out[3:], q[3:])
        assert out[2].min() >= 0
        wet = out[2] > 0  # points left with cloud: adjusted to saturation, not limited by qc
        ratio = np.abs(departure(out))[wet] / np.abs(departure(q))[wet]
        assert wet.sum() > 10 and ratio.max() < 0.1, ratio.max()
        np.testing.assert_allclose(out, reference_adjust(q, p), rtol=0, atol=1e-12)


def test_a_suite_refuses_a_grid_a_kernel_cannot_take() -> None:
    """One line naming the kernel, its rule and the valid var extents (no outside source)."""
    with pytest.raises(SuiteError) as err:
        parse_suite({"grid": {"sizes": ["var=3,z=8,y=8,x=8"]}, "kernels": {"select": ["coupled"]}})
    message = str(err.value)
    assert "\n" not in message and "coupled" in message and "couples variables in pairs" in message and "2, 4, 6" in message
    with pytest.raises(SuiteError, match="saturation"):
        parse_suite({"grid": {"sizes": ["var=2,z=8,y=8,x=8"]}, "kernels": {"select": ["saturation"]}})
    parse_suite({"grid": {"sizes": ["var=4,z=8,y=8,x=8"]}, "kernels": {"select": ["coupled", "saturation"]}})


@pytest.mark.parametrize("spec", ["var.z.y.x", "y.x.z.var", "y/4.x/8.var.z.y%4.x%8", "var.y.x.z"])
def test_limited_area_stencils_are_exact_on_polynomials_that_do_not_wrap(spec: str) -> None:
    """On q = j^2 + 3 i^2 the 5-point Laplacian is 2 + 6 = 8, and on q = j^4 the squared one is
    24, at every interior point: the halo is read, never wrapped (a periodic seam would break both).

    Source: second differences are exact on quadratics, and (delta^2)^2 j^4 = 24 (difference
    calculus, any numerical-analysis text - from memory; the second case is checked by hand:
    (j+1)^4 + (j-1)^4 - 2 j^4 = 12 j^2 + 2, whose second difference is 24).
    """
    ext = Extents(var=2, z=3, y=13, x=17)
    j = np.arange(ext.y, dtype=float).reshape(1, 1, -1, 1)
    i = np.arange(ext.x, dtype=float).reshape(1, 1, 1, -1)
    for name, field, value, halo in (("lam_laplacian", j**2 + 3 * i**2, 8.0, 1), ("lam_hyperdiffusion", j**4 + 0 * i, 24.0, 3)):
        kernel = get_kernel(name).with_options(halo=halo)
        problem = kernel.problem_from(spec, {"q": np.broadcast_to(field, ext.shape)}, "float64")
        mask = np.broadcast_to(kernel.defined_output(ext), ext.shape)
        assert mask.sum() == ext.var * ext.z * (ext.y - 2 * halo) * (ext.x - 2 * halo)
        for schedule in kernel.schedules:
            problem.output.data[...] = -1.0
            kernel.bind(problem, schedule)()
            got = problem.output.to_logical()
            np.testing.assert_array_equal(got[mask], value, err_msg=f"{name} {spec} {schedule.name}")
            assert (got[~mask] == -1.0).all()  # the halo of the output is left alone


def test_a_halo_option_configures_the_kernel_and_its_models() -> None:
    """Interior written, everything read: the STREAM counting rule on a limited-area subdomain.

    From memory: McCalpin's STREAM benchmark counts each array once per pass (its published rules).
    """
    base = get_kernel("lam_hyperdiffusion")
    ext = Extents(var=2, z=4, y=20, x=30)
    wide = base.with_options(halo=3)
    assert base.halo == 2 and wide.halo == 3 and wide.name == base.name
    assert wide.traffic_bytes(ext, "float64") == (ext.points + 2 * 4 * 14 * 24) * 8
    assert wide.flops(ext) == 16 * 2 * 4 * 14 * 24 and base.flops(ext) == 16 * 2 * 4 * 16 * 26
    with pytest.raises(Exception, match="at least the stencil's radius 2"):
        base.with_options(halo=1)
    assert "needs y and x of at least 7" in wide.unsupported(Extents(var=1, z=1, y=6, x=30))
