"""The one contract every kernel meets, and validation against its reference."""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from kernels.errors import KernelError
from kernels.grid import Extents, check_dtype
from kernels.jit import Compiled
from kernels.layout import Layout
from kernels.notation import as_layout
from kernels.state import State, Toucher

BUILDS = ("parallel", "serial", "empty")


@dataclass(frozen=True)
class Schedule:
    """One compiled implementation of a kernel: how threads split the work, what the inner loop runs along."""

    name: str
    summary: str
    params: tuple[tuple[str, int], ...] = ()

    def param(self, key: str, default: int) -> int:
        return dict(self.params).get(key, default)


@dataclass(eq=False)
class Problem:
    """Inputs and output of one kernel call, in one layout, plus the logical inputs for the reference."""

    kernel: str
    layout: Layout
    extents: Extents
    dtype: np.dtype
    seed: int
    fields: dict[str, State]
    arrays: dict[str, np.ndarray]
    output: State
    logical: dict[str, np.ndarray] = field(repr=False)
    #: The reference output, computed on first validation and kept (the logical inputs never change).
    reference_output: np.ndarray | None = field(default=None, repr=False)
    #: States a kernel passes between its stages (``Kernel.workspace``), full extents, same layout.
    workspace: dict[str, State] = field(default_factory=dict, repr=False)

    def nbytes(self) -> int:
        """Resident bytes of every buffer of this problem (padding and workspace included)."""
        states = [*self.fields.values(), self.output, *self.workspace.values()]
        return sum(s.data.nbytes for s in states) + sum(a.nbytes for a in self.arrays.values())


@dataclass(frozen=True)
class Bound:
    """A kernel build with its arguments fixed: calling it runs the kernel once."""

    dispatcher: Any
    args: tuple[Any, ...]

    def __call__(self) -> Any:
        return self.dispatcher(*self.args)


@dataclass(frozen=True)
class Validation:
    """Outcome of comparing a build's output with the reference."""

    ok: bool
    max_rel_error: float
    tolerance: float
    message: str


class Kernel(ABC):
    """A computation over a state: reference, schedules, flop count and compulsory-traffic model."""

    name: str
    family: str
    summary: str
    schedules: tuple[Schedule, ...]
    #: Value of padding elements per input field (default 0), e.g. 1 on a main diagonal so
    #: padded columns stay solvable.
    padding_value: dict[str, float] = {}
    #: Smallest var extent the kernel accepts, and the step between accepted var extents (e.g. 2
    #: for a kernel that couples variables in pairs).
    min_var: int = 1
    var_step: int = 1
    #: Smallest y and x extent the kernel accepts (a limited-area stencil needs its halo on both
    #: sides of an interior).
    min_horizontal: int = 1
    #: Names of full-size states the kernel writes and reads between its stages (neither inputs
    #: nor output, so outside the traffic model); allocated with each problem.
    workspace: tuple[str, ...] = ()

    def unsupported(self, extents: Extents) -> str | None:
        """Why this kernel cannot run on a grid of these extents, in one phrase (None: it can)."""
        v = extents.var
        if v < self.min_var or (v - self.min_var) % self.var_step:
            valid = ", ".join(str(self.min_var + i * self.var_step) for i in range(3))
            return f"kernel '{self.name}' {self.var_rule}: var must be one of {valid}, ...; got var={v}"
        if min(extents.y, extents.x) < self.min_horizontal:
            return (f"kernel '{self.name}' needs y and x of at least {self.min_horizontal} (its halo on both sides of an "
                    f"interior); got y={extents.y}, x={extents.x}")
        return None

    def refuses(self, layout: Layout) -> str | None:
        """Why this kernel cannot run in ``layout``, in one phrase (None: it can)."""
        return None

    #: Why the var rule exists, for error messages (e.g. "couples variables in pairs").
    var_rule: str = "takes any var extent"

    def with_options(self, **options: Any) -> Kernel:
        """This kernel configured by a suite's ``kernels.options`` beyond schedule parameters
        (e.g. a limited-area stencil's ``halo``); the default takes none."""
        if options:
            raise KernelError(f"kernel '{self.name}' takes no options {sorted(options)}")
        return self

    def fitted(self, extents: Extents) -> Extents:
        """The smallest grid at or above ``extents`` (var, then y and x) that this kernel accepts."""
        v = max(extents.var, self.min_var)
        v += -(v - self.min_var) % self.var_step
        return extents.replace(var=v, y=max(extents.y, self.min_horizontal), x=max(extents.x, self.min_horizontal))

    # -- inputs ---------------------------------------------------------------------------
    @abstractmethod
    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        """Deterministic logical inputs: 4-D ``(var, z, y, x)`` fields (var=1 for shared fields) or 1-D arrays."""

    def make_problem(
        self, layout: Layout | str, extents: Extents, dtype: Any = "float64", seed: int = 0, toucher: Toucher | None = None
    ) -> Problem:
        """Allocate and fill the inputs and output of one call in ``layout``, from seeded inputs.

        ``toucher`` zeroes each fresh buffer (first touch) before values are written.
        """
        dt = check_dtype(dtype)
        return self.problem_from(layout, self.logical_inputs(extents, dt, seed), dt, seed, toucher)

    def problem_from(
        self, layout: Layout | str, logical: dict[str, np.ndarray], dtype: Any, seed: int = -1, toucher: Toucher | None = None
    ) -> Problem:
        """A problem with given logical inputs (same keys and shapes as ``logical_inputs`` makes)."""
        layout, dt = as_layout(layout), check_dtype(dtype)
        logical = {k: np.asarray(v, dtype=dt) for k, v in logical.items()}
        full = [v for v in logical.values() if v.ndim == 4 and v.shape[0] > 1] or [v for v in logical.values() if v.ndim == 4]
        extents = Extents(*full[0].shape)
        fields, arrays = {}, {}
        for key, values in logical.items():
            if values.ndim == 4:
                fields[key] = State.zeros(layout, Extents(*values.shape), dt, toucher)
                fields[key].data[...] = self.padding_value.get(key, 0)
                fields[key].assign_logical(values)
            else:
                arrays[key] = np.ascontiguousarray(values)
        output = State.zeros(layout, extents, dt, toucher)
        workspace = {name: State.zeros(layout, extents, dt, toucher) for name in self.workspace}
        return Problem(self.name, layout, extents, dt, seed, fields, arrays, output, logical, workspace=workspace)

    def footprint(self, layout: Layout | str, extents: Extents, dtype: Any) -> int:
        """Resident bytes of one problem (inputs and output, padding included), without allocating it."""
        layout, dt = as_layout(layout), check_dtype(dtype)
        total = layout.nbytes(extents, dt) * (1 + len(self.workspace))  # the output and workspace
        for shape in self.input_shapes(extents).values():
            total += layout.nbytes(shape, dt) if isinstance(shape, Extents) else shape * dt.itemsize
        return total

    @abstractmethod
    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        """Extents of each 4-D input field (var=1 for shared fields) or length of each 1-D input."""

    #: True if a call overwrites an input; the harness then restores inputs before each sample.
    overwrites_inputs: bool = False

    # -- computation ----------------------------------------------------------------------
    @abstractmethod
    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        """The oracle: the logical ``(var, z, y, x)`` output computed with NumPy/SciPy."""

    @abstractmethod
    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Compiled, tuple[Any, ...]]:
        """The compiled implementation serving ``schedule`` for this problem, and its arguments."""

    def bind(self, problem: Problem, schedule: Schedule | str, build: str = "parallel") -> Bound:
        """Fix the arguments of one build; per-thread workspaces are sized for the current thread count."""
        if build not in BUILDS:
            raise ValueError(f"unknown build '{build}'; valid: {', '.join(BUILDS)}")
        self.check_problem(problem)
        impl, args = self.implementation(problem, self.schedule(schedule))
        return Bound(getattr(impl, build), args)

    def check_problem(self, problem: Problem) -> None:
        """Refuse inputs of the wrong layout, extents or dtype before any compiled code sees them."""
        out = problem.output
        for key, st in problem.fields.items():
            expected = out.extents.replace(var=st.extents.var) if st.extents.var == 1 else out.extents
            if st.layout.tokens != out.layout.tokens or st.extents != expected or st.dtype != out.dtype:
                raise KernelError(
                    f"{self.name}: input '{key}' is {st.layout.spec} {st.extents} {st.dtype.name}, expected "
                    f"{out.layout.spec} {expected} {out.dtype.name} like the output"
                )
        for key, arr in problem.arrays.items():
            if arr.dtype != out.dtype or arr.shape != (out.extents.z,):
                raise KernelError(
                    f"{self.name}: input '{key}' has shape {arr.shape} {arr.dtype}, expected ({out.extents.z},) {out.dtype.name}"
                )

    # -- stages (kernels that run other kernels back to back) ------------------------------
    def stages(self, schedule: Schedule | str) -> tuple[tuple[str, str], ...]:
        """(kernel, schedule) of each stage ``schedule`` runs back to back; () for one stage.
        The harness times each stage alone in the same rounds as the whole."""
        return ()

    def stage_implementation(self, problem: Problem, schedule: Schedule, index: int) -> tuple[Compiled, tuple[Any, ...]]:
        """Stage ``index`` of ``schedule`` alone, on the whole problem's buffers."""
        raise NotImplementedError(f"kernel '{self.name}' has no stages")

    def validate_stage(self, problem: Problem, schedule: Schedule, index: int, build: str = "parallel") -> Validation:
        """Run the stages before ``index``, then check stage ``index`` against its own reference."""
        raise NotImplementedError(f"kernel '{self.name}' has no stages")

    def schedule(self, schedule: Schedule | str) -> Schedule:
        if isinstance(schedule, Schedule):
            return schedule
        for s in self.schedules:
            if s.name == schedule:
                return s
        names = ", ".join(s.name for s in self.schedules)
        raise KernelError(f"kernel '{self.name}' has no schedule '{schedule}'; its schedules: {names}")

    # -- models ---------------------------------------------------------------------------
    @abstractmethod
    def flops(self, extents: Extents) -> int:
        """Floating-point operations of one call, as executed (a division counts as one)."""

    def traffic_bytes(self, extents: Extents, dtype: Any) -> int:
        """Compulsory memory traffic of one call: each array read or written counted once,
        logical elements only, no write-allocate (the STREAM counting convention). The default
        counts every declared input and the output; override it for a kernel that reads less."""
        mask = self.defined_output(extents)
        written = extents.points if mask is None else int(np.broadcast_to(mask, extents.shape).sum())
        elements = written + sum(s.points if isinstance(s, Extents) else s for s in self.input_shapes(extents).values())
        return elements * check_dtype(dtype).itemsize

    def defined_output(self, extents: Extents) -> np.ndarray | None:
        """Boolean mask, broadcastable to (var, z, y, x), of the output elements the kernel writes
        (None: all). A limited-area stencil writes its interior only; validation and the traffic
        model follow the mask."""
        return None

    def thread_working_set(self, extents: Extents, dtype: Any, schedule: Schedule) -> int | None:
        """Bytes one thread keeps live while it works on one item of ``schedule`` (None: no model)."""
        return None

    def vector_trip(self, problem: Problem, schedule: Schedule) -> int | None:
        """Trip count, for this problem's extents, of the innermost loop the compiler may pack into
        vector registers (None: no model). A packed loop shorter than one vector runs scalar."""
        return None

    @abstractmethod
    def tolerance(self, dtype: Any) -> float:
        """Largest accepted ``max|out - ref| / max|ref|``."""

    # -- validation -----------------------------------------------------------------------
    def validate(self, problem: Problem, schedule: Schedule | str, build: str = "parallel") -> Validation:
        """Run one build and compare its output with the reference; never raises on a wrong answer."""
        out = problem.output
        sched = self.schedule(schedule)
        case = f"{self.name}/{sched.name} ({build}) in {problem.layout.spec} {problem.dtype.name}"
        out.data[...] = np.nan  # anything the kernel fails to write shows up as NaN
        self.bind(problem, sched, build)()
        got = out.to_logical()
        if problem.reference_output is None:
            problem.reference_output = self.reference(problem.logical)
        ref = problem.reference_output
        mask = self.defined_output(problem.extents)
        if mask is not None:  # compare the elements the kernel writes, and only those
            mask = np.broadcast_to(mask, got.shape)
            got, ref = got[mask], ref[mask]
        tol = self.tolerance(problem.dtype)
        if not np.all(np.isfinite(got)):
            bad = int(np.count_nonzero(~np.isfinite(got)))
            return Validation(
                False, float("inf"), tol, f"{case}: {bad} of {got.size} outputs are not finite (singular or non-finite inputs?)"
            )
        scale = float(np.max(np.abs(ref))) or 1.0
        err = float(np.max(np.abs(got.astype(np.float64) - ref.astype(np.float64)))) / scale
        if err <= tol:
            return Validation(True, err, tol, "ok")
        return Validation(False, err, tol, f"{case}: max relative error {err:.3g} exceeds tolerance {tol:.3g}")
