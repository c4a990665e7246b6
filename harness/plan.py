"""Planning a sweep: the cases of a suite, grouped so the cases ranked together are timed together."""

from __future__ import annotations

import math

from harness.cases import ARROW, CONVERT, VARIANT, CaseKey, CaseKind, Group, stage_name
from harness.suite import Suite
from kernels.grid import Extents
from kernels.registry import all_kernels

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
                widths = dict(suite.strip_widths).get(name)
                if widths and "strip" in schedules:  # one variant per width to try
                    at = schedules.index("strip")
                    schedules[at:at + 1] = [f"strip{VARIANT}{w}" for w in widths]
                cases = tuple(
                    CaseKey(name, s, b, layout, dtype, grid, threads)
                    for layout in suite.layouts
                    for s in schedules
                    for b in builds
                ) + tuple(  # each stage alone, threaded build, in the same rounds as the whole
                    CaseKey(stage_name(name, part), s, "parallel", layout, dtype, grid, threads)
                    for layout in suite.layouts
                    for s in schedules
                    for part, _ in kernel.stages(s)
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


def working_set_warnings(groups: list[Group], suite: Suite, l2_bytes: int | None) -> list[str]:
    """One line per (kernel, schedule, grid, dtype) whose per-thread working set exceeds L2."""
    from harness.prepare import kernel_with_options, schedule_with_options
    from kernels.registry import get_kernel

    if not l2_bytes:
        return []
    options, seen, lines = dict(suite.kernel_options), set(), []
    for group in groups:
        for case in group.cases:
            key = (case.kernel, case.schedule, case.grid, case.dtype)
            if case.kind != CaseKind.KERNEL or key in seen:
                continue
            seen.add(key)
            kernel = kernel_with_options(get_kernel(case.kernel), options)
            schedule = schedule_with_options(kernel, case.schedule, options)
            need = kernel.thread_working_set(Extents.parse(case.grid), case.dtype, schedule)
            if need and need > l2_bytes:
                lines.append(f"{case.kernel}/{case.schedule} at {case.grid} {case.dtype}: a thread's working set is about "
                             f"{need / 1024:.0f} KiB, above this machine's {l2_bytes / 1024:.0f} KiB L2; its timing includes L2 misses"
                             + (" (a smaller strip_width in kernels.options fits)" if dict(schedule.params).get("width") else ""))
    return lines


#: The smallest attainable Holm p of a group's first tier step must sit this many times under
#: alpha: a contrary round of the smallest rank doubles the exact one-sided signed-rank p, so a
#: floor near alpha lets a single such round undo every separation. 32 leaves room for five.
POWER_MARGIN = 32


def power_warnings(groups: list[Group], suite: Suite, alpha: float = 0.05) -> list[str]:
    """One line per kernel group whose rounds cannot separate its layouts with a margin: with n
    reporting rounds (half the measured ones, over every repetition) and m = layouts - 1
    comparisons, the smallest Holm p is m x 2**-n (exact Wilcoxon, every round one way)."""
    timing = suite.timing
    level = alpha / timing.max_looks()
    n = timing.min_repeats * max(timing.repetitions, 1) // 2
    lines, seen = [], set()
    for group in groups:
        layouts = {c.layout for c in group.cases}
        m = len(layouts) - 1
        key = (group.kernel, m)
        if group.kind != CaseKind.KERNEL or m < 1 or key in seen:
            continue
        seen.add(key)
        floor = m * 2.0**-n
        if floor > level / POWER_MARGIN:
            needed = -(-2 * math.ceil(math.log2(m * POWER_MARGIN / level)) // max(timing.repetitions, 1))
            lines.append(f"{group.kernel}: {n} reporting rounds for {m + 1} layouts can reach a Holm p of {floor:.2g} at best, "
                         f"not well under alpha {level:.3g} (a single contrary round could undo a separation); set "
                         f"timing.min_repeats to at least {needed}")
    return lines
