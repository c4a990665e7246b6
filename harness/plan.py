"""Planning a sweep: the cases of a suite, grouped so the cases ranked together are timed together."""

from __future__ import annotations

from dataclasses import dataclass

from harness.suite import Suite
from kernels.grid import Extents
from kernels.registry import all_kernels

CONVERT = "convert"  # the pseudo-kernel name of layout conversions
ARROW = "->"


@dataclass(frozen=True, order=True)
class CaseKey:
    """One timed case: every key that identifies it."""

    kernel: str
    schedule: str
    build: str  # "parallel" or "serial" (the parallel=False build, timed at 1 thread)
    layout: str  # a layout spec, or "FROM->TO" for a conversion
    dtype: str
    grid: str
    threads: int

    @property
    def id(self) -> str:
        return "|".join((self.kernel, self.schedule, self.build, self.layout, self.dtype, self.grid, str(self.threads)))

    def as_dict(self) -> dict[str, object]:
        return {
            "case_id": self.id,
            "kernel": self.kernel,
            "schedule": self.schedule,
            "build": self.build,
            "layout": self.layout,
            "dtype": self.dtype,
            "grid": self.grid,
            "threads": self.threads,
        }


@dataclass(frozen=True)
class Group:
    """Cases timed interleaved in one set of rounds: same kernel, grid, dtype and thread count."""

    kernel: str
    grid: str
    dtype: str
    threads: int
    cases: tuple[CaseKey, ...]
    tag: str = ""  # distinguishes a second group of the same kernel (automatic conversions)
    repetition: int = 0  # which run of the group (suite timing.repetitions)

    @property
    def label(self) -> str:
        rep = f" rep{self.repetition + 1}" if self.repetition else ""
        return f"{self.kernel}{self.tag} {self.grid} {self.dtype} {self.threads}t{rep}"


def plan(suite: Suite, thread_counts: tuple[int, ...]) -> list[Group]:
    """Every group of the suite, thread count outermost (one worker process per thread count);
    with repetitions, each thread count runs all its groups once, then all again, and so on."""
    from dataclasses import replace

    groups: list[Group] = []
    for threads in thread_counts:
        once = _groups_at(suite, threads)
        for rep in range(suite.timing.repetitions):
            groups += [replace(g, repetition=rep) for g in once]
    return groups


def _groups_at(suite: Suite, threads: int) -> list[Group]:
    registry = all_kernels()
    groups: list[Group] = []
    builds = ("parallel", "serial") if (threads == 1 and suite.timing.serial_baseline) else ("parallel",)
    for size in suite.sizes:
        grid = str(size)
        for dtype in suite.dtypes:
            for name in suite.kernels:
                kernel = registry[name]
                schedules = [s.name for s in kernel.schedules if suite.schedules == "all" or s.name in suite.schedules]
                cases = tuple(
                    CaseKey(name, s, b, layout, dtype, grid, threads)
                    for layout in suite.layouts
                    for s in schedules
                    for b in builds
                )
                if cases:
                    groups.append(Group(name, grid, dtype, threads, cases))
            if suite.conversions:
                cases = tuple(
                    CaseKey(CONVERT, "rows", b, f"{a}{ARROW}{z}", dtype, grid, threads)
                    for a, z in suite.conversions
                    for b in builds
                )
                groups.append(Group(CONVERT, grid, dtype, threads, cases))
    return groups


def group_bytes(group: Group) -> int:
    """Resident bytes while the group runs: every case's buffers at once, plus the logical inputs
    and float64 reference output kept for validation."""
    registry = all_kernels()
    extents = Extents.parse(group.grid)
    if group.kernel == CONVERT:
        from kernels.notation import parse_layout

        total = 0
        for case in group.cases:
            a, z = case.layout.split(ARROW)
            total += parse_layout(a).nbytes(extents, group.dtype) + parse_layout(z).nbytes(extents, group.dtype)
        return total + 8 * extents.points
    kernel = registry[group.kernel]
    layouts = sorted({c.layout for c in group.cases})
    sizes = [kernel.footprint(layout, extents, group.dtype) for layout in layouts]
    logical = kernel.footprint("var.z.y.x", extents, "float64")
    return sum(sizes) + 2 * logical + 3 * max(sizes)  # + up to three triad probes
