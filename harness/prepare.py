"""Getting a group ready to time, one preparer per kind of case: build, compile, validate.

Nothing here is timed. Each preparer adds its cases to a ``Prepared``: a record per case (what
``cases.csv`` will say about it), the bound call of each valid case, and input restorers.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

from harness.cases import ARROW, PROBE, VARIANT, CaseKey, CaseKind, Group, part_of, probe_schedule

#: At most this many triad probes per group (distinct footprints beyond it share the nearest).
MAX_PROBES = 3


@dataclass
class Prepared:
    """A group ready to time: a record per case, the bound calls of the valid ones, input restorers."""

    records: dict[str, dict[str, Any]] = field(default_factory=dict)
    calls: dict[str, Any] = field(default_factory=dict)
    prepare: dict[str, Any] = field(default_factory=dict)  # before every sample: the kernel overwrites its inputs
    restorers: dict[str, Any] = field(default_factory=dict)  # every kernel case's, when the context asks for them
    compiles: list[dict[str, Any]] = field(default_factory=list)

    def compile(self, dispatcher: Any, args: tuple) -> dict[str, Any]:
        """Compile (or load) one specialisation; the record fields saying how long it took."""
        from kernels.jit import ensure_compiled

        rec = ensure_compiled(dispatcher, args)
        if rec is None:
            return {}
        self.compiles.append({"name": rec.name, "signature": rec.signature, "seconds": rec.seconds, "from_cache": rec.from_cache})
        return {"compile_s": rec.seconds, "loaded_from_cache": rec.from_cache}

    def add(self, case: CaseKey, family: str, footprint: int, traffic: int, flops: int) -> dict[str, Any]:
        """A new pending record for ``case``."""
        rec = case.as_dict()
        rec.update(family=family, status="pending", message="", max_rel_error=None, tolerance=None,
                   footprint_bytes=footprint, traffic_bytes=traffic, flops=flops, overhead_ns=None, compile_s=None,
                   loaded_from_cache=None, vectorised=None, vector_bits=None,
                   vector_code=None, vector_trip=None)
        self.records[case.id] = rec
        return rec


@dataclass(frozen=True)
class Context:
    """What every preparer needs from the worker."""

    seed: int
    first_touch: bool
    kernel_options: dict[str, tuple[tuple[str, int], ...]]
    inspect_vectorisation: bool
    seen_reports: dict[str, dict[str, Any]]  # vector reports already read, by specialisation
    #: Also make a restorer for every kernel case (``Prepared.restorers``): its buffers share pages
    #: with another process's (the side-by-side gate), which decides later whether to use them.
    restore_inputs: bool = False


def prepare_kernel_cases(group: Group, ctx: Context, out: Prepared) -> None:
    """Each layout's problem made once; each case compiled, validated, its overhead measured."""
    from harness.timing import overhead_ns
    from kernels.base import Bound
    from kernels.grid import Extents
    from kernels.parallel import first_touch
    from kernels.registry import get_kernel

    extents = Extents.parse(group.grid)
    kernel = kernel_with_options(get_kernel(group.kernel), ctx.kernel_options)
    problems: dict[str, Any] = {}
    restorers: dict[str, Any] = {}
    for case in group.cases:
        stage = _stage_index(kernel, case)
        models = kernel if stage is None else get_kernel(part_of(case.kernel))  # a stage has its own kernel's models
        rec = out.add(case, kernel.family, kernel.footprint(case.layout, extents, group.dtype),
                      models.traffic_bytes(extents, group.dtype), models.flops(extents))
        try:
            if case.layout not in problems:
                problems[case.layout] = kernel.make_problem(case.layout, extents, group.dtype, ctx.seed,
                                                            first_touch if ctx.first_touch else None)
            problem = problems[case.layout]
            schedule = schedule_with_options(kernel, case.schedule, ctx.kernel_options)
            if stage is None:
                impl, args = kernel.implementation(problem, schedule)
            else:
                impl, args = kernel.stage_implementation(problem, schedule, stage)
            dispatcher = getattr(impl, case.build)
            rec.update(out.compile(dispatcher, args))
            if stage is None:
                check = kernel.validate(problem, schedule, case.build)
            else:
                check = kernel.validate_stage(problem, schedule, stage, case.build)
            rec.update(max_rel_error=check.max_rel_error, tolerance=check.tolerance)
            if not check.ok:
                rec.update(status="failed", message=check.message)
                continue
            out.compile(impl.empty, args)
            rec["overhead_ns"] = overhead_ns(lambda impl=impl, args=args: impl.empty(*args))
            if ctx.inspect_vectorisation:
                rec.update(_vector_fields(impl, args, ctx.seen_reports, kernel.vector_trip(problem, schedule), problem.dtype.itemsize))
            rec["status"] = "ok"
            out.calls[case.id] = Bound(dispatcher, args)
            if kernel.overwrites_inputs or ctx.restore_inputs:
                if case.layout not in restorers:
                    restorers[case.layout] = _restorer(problem)
                if kernel.overwrites_inputs:
                    out.prepare[case.id] = restorers[case.layout]
                if ctx.restore_inputs:
                    out.restorers[case.id] = restorers[case.layout]
        except Exception as exc:  # noqa: BLE001 - recorded as the case's error
            rec.update(status="error", message=f"{type(exc).__name__}: {exc}")


def _stage_index(kernel: Any, case: CaseKey) -> int | None:
    """Which stage of its kernel a stage case runs (None for a whole kernel case)."""
    if case.kind is not CaseKind.STAGE:
        return None
    names = [name for name, _ in kernel.stages(case.schedule.split(VARIANT)[0])]
    return names.index(part_of(case.kernel))


def prepare_conversions(group: Group, ctx: Context, out: Prepared) -> None:
    """Each conversion built between two states of the same seeded values and checked bit-exact."""
    import numpy as np

    from harness.timing import overhead_ns
    from kernels.base import Bound
    from kernels.conversion_plan import choose, is_compiled, planned_candidates
    from kernels.grid import Extents
    from kernels.parallel import first_touch
    from kernels.state import State

    extents = Extents.parse(group.grid)
    toucher = first_touch if ctx.first_touch else None
    itemsize = np.dtype(group.dtype).itemsize
    logical = np.random.default_rng(ctx.seed).standard_normal(extents.shape).astype(group.dtype)
    for case in group.cases:
        rec = out.add(case, "conversion", 0, 2 * extents.points * itemsize, 0)
        try:
            src_spec, dst_spec = case.layout.split(ARROW)
            src = State.zeros(src_spec, extents, group.dtype, toucher)
            src.assign_logical(logical)
            dst = State.zeros(dst_spec, extents, group.dtype, toucher)
            rec["footprint_bytes"] = src.data.nbytes + dst.data.nbytes
            found = planned_candidates(src, dst)
            for impl, args in {id(c[1]): c[1:] for c in found if is_compiled(c[1])}.values():
                _add_compile(rec, out.compile(getattr(impl, case.build), args))
            plan = choose(found, case.build)  # each candidate run untimed; the fastest kept
            impl, args, rec["message"] = plan.impl, plan.args, plan.describe()
            dispatcher = getattr(impl, case.build)
            dst.data[...] = 0  # the chosen conversion alone must fill it
            dispatcher(*args)
            if not np.array_equal(dst.to_logical(), logical):
                rec.update(status="failed", message="conversion is not bit-exact")
                continue
            rec.update(status="ok", max_rel_error=0.0, tolerance=0.0)
            if is_compiled(impl):
                out.compile(impl.empty, args)
            rec["overhead_ns"] = overhead_ns(lambda: impl.empty(*args))
            out.calls[case.id] = Bound(dispatcher, args)
        except Exception as exc:  # noqa: BLE001 - recorded as the case's error
            rec.update(status="error", message=f"{type(exc).__name__}: {exc}")


def _add_compile(rec: dict[str, Any], info: dict[str, Any]) -> None:
    """Sum the compile records of a case built from several specialisations."""
    if info:
        rec["compile_s"] = (rec["compile_s"] or 0.0) + info["compile_s"]
        cached = rec["loaded_from_cache"]
        rec["loaded_from_cache"] = info["loaded_from_cache"] if cached is None else cached and info["loaded_from_cache"]


def prepare_probes(group: Group, ctx: Context, out: Prepared) -> None:
    """STREAM-triad cases sized like the group's footprints, timed in the group's own rounds.

    Timed interleaved with the kernels, a probe sees the same cache and machine state they do,
    so a case's percent of roof compares like with like.
    """
    import numpy as np

    from kernels.parallel import thread_count
    from kernels.triad import TRIAD, triad_arrays, triad_bytes

    sizes = sorted({r["footprint_bytes"] for r in out.records.values() if r["status"] == "ok" and r["footprint_bytes"]})
    if len(sizes) > MAX_PROBES:
        sizes = [sizes[round(i * (len(sizes) - 1) / (MAX_PROBES - 1))] for i in range(MAX_PROBES)]
    for size in sizes:
        a, b, c = triad_arrays(size, group.dtype)
        key = CaseKey(PROBE, probe_schedule(group.kernel, group.tag), "parallel", f"{a.nbytes * 3}B", group.dtype,
                      group.grid, group.threads)
        rec = out.add(key, "roof", 3 * a.nbytes, triad_bytes(a.shape[0], a.itemsize), 2 * a.shape[0])
        rec.update(status="ok", message="roof probe")
        nchunks, scalar = thread_count(), np.dtype(group.dtype).type(3)
        out.calls[key.id] = lambda a=a, b=b, c=c: TRIAD.parallel(a, b, c, scalar, nchunks)


Preparer = Callable[[Group, Context, Prepared], None]
#: The preparer of each kind of group; probes are added to any group that asks for them.
PREPARERS: dict[CaseKind, Preparer] = {CaseKind.KERNEL: prepare_kernel_cases, CaseKind.CONVERSION: prepare_conversions}


def prepare_group(group: Group, ctx: Context, probes: bool = True) -> Prepared:
    """Build, compile and validate every case of a group (never timed); add roof probes if asked."""
    out = Prepared()
    for preparer in (PREPARERS[group.kind],) + ((prepare_probes,) if probes else ()):
        preparer(group, ctx, out)
    return out


#: ``kernels.options`` keys that configure the kernel itself rather than a schedule's parameters.
KERNEL_OPTION_KEYS = ("halo",)


def kernel_with_options(kernel: Any, options: dict[str, tuple[tuple[str, int], ...]]) -> Any:
    """The kernel configured by the suite's options for it (e.g. a limited-area halo width)."""
    given = {k: v for k, v in options.get(kernel.name, ()) if k in KERNEL_OPTION_KEYS}
    return kernel.with_options(**given) if given else kernel


def schedule_with_options(kernel: Any, name: str, options: dict[str, tuple[tuple[str, int], ...]]) -> Any:
    """A kernel's schedule ``name`` with the suite's ``kernels.options`` applied to its parameters;
    a variant name ``strip@W`` is the strip schedule with width W."""
    from harness.cases import VARIANT
    from kernels.base import Schedule

    base, _, value = name.partition(VARIANT)
    schedule = kernel.schedule(base)
    given = dict(options.get(kernel.name, ()))
    if value:
        given["width"] = int(value)
    if given and schedule.params:
        schedule = Schedule(schedule.name, schedule.summary, tuple((k, given.get(k, v)) for k, v in schedule.params))
    return schedule


def _vector_fields(impl: Any, args: tuple, seen: dict[str, dict[str, Any]], trip: int | None, itemsize: int) -> dict[str, Any]:
    import numba

    from harness.metrics import vector_path
    from kernels.jit import vector_report

    key = impl.name + str(tuple(numba.typeof(a) for a in args))
    if key not in seen:
        seen[key] = vector_report(impl, args, parallel=False)
    return vector_path(seen[key]["vectorised"], seen[key]["vector_bits"], trip, itemsize)


def _restorer(problem: Any) -> Any:
    """Copies of a problem's input buffers and a function that writes them back with the same
    per-thread block partition as first touch (so restores neither move pages nor warm one core)."""
    import numpy as np

    from kernels.parallel import parallel_copy

    saved = [(st.data, st.data.copy()) for st in problem.fields.values()]
    saved += [(arr, arr.copy()) for arr in problem.arrays.values()]

    def restore() -> None:
        for live, pristine in saved:
            parallel_copy(np.asarray(live), pristine)

    return restore
