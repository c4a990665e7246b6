"""``step``: a whole step of a model that is explicit in the horizontal and implicit in the vertical.

Three stages on one state, back to back: an explicit hyperdiffusion step ``q - kappa del^4 q``
(the ``hyperdiffusion`` stencil's walk with its weights folded into the step), the ``varcoef``
vertical-diffusion solve with that as its right-hand side, and the ``saturation`` adjustment.
Each stage reads the previous one's output from a workspace state, so the step shows what the
stages gain (or lose) from data left in cache by the one before; the report sets its time
beside the sum of the three kernels timed alone.
"""

from __future__ import annotations

import weakref
from typing import Any

import numpy as np

from kernels.base import Kernel, Problem, Schedule, Validation
from kernels.columns.common import field_coefficient_inputs, thomas_reference
from kernels.columns.varcoef import VarCoef
from kernels.grid import Extents
from kernels.jit import Chain
from kernels.points.saturation import Saturation, reference_adjust
from kernels.registry import register
from kernels.stencils.hyperdiffusion import Hyperdiffusion
from kernels.stencils.laplacian import SPACING, laplacian_reference

#: Hyperdiffusion coefficient of one step, in grid units^4. The forward-Euler step of the squared
#: 5-point Laplacian is stable for kappa < 2/64 (its largest eigenvalue is 64 at unit spacing;
#: von Neumann analysis, from memory).
KAPPA = 0.01

ROWS = Schedule("rows", "stages as x-contiguous code runs them: stencil blocks, strip solve, point rows along the contiguous axis")
COLUMNS = Schedule("columns", "stages as column code runs them: stencil blocks, paired column solve, column physics in scratch")
#: The part kernels' schedules each step schedule runs, stage by stage.
STAGES = {
    "rows": (("hyperdiffusion", "block"), ("varcoef", "strip"), ("saturation", "run")),
    "columns": (("hyperdiffusion", "block"), ("varcoef", "pairs"), ("saturation", "column")),
}


class DiffusionStep(Hyperdiffusion):
    """The hyperdiffusion walk with weights giving ``q - kappa del^4 q`` (not registered)."""

    name = "hyperdiffusion_step"

    def constants(self, dtype: np.dtype) -> tuple[Any, ...]:
        # (w20 q - 8 axis + 2 diag + far) * scale with w20 = 20 - 1/kappa, scale = -kappa
        return dtype.type(20 - SPACING**4 / KAPPA), dtype.type(8), dtype.type(2), dtype.type(-KAPPA / SPACING**4)

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        return diffusion_step_reference(logical["q"])


def diffusion_step_reference(q: np.ndarray) -> np.ndarray:
    """``q - kappa del^4 q`` in NumPy, float64."""
    q = np.asarray(q, dtype=np.float64)
    return q - KAPPA * laplacian_reference(laplacian_reference(q, SPACING), SPACING)


DIFFUSE, SOLVE, ADJUST = DiffusionStep(), VarCoef(), Saturation()
STAGE_KERNELS = (DIFFUSE, SOLVE, ADJUST)


class MoistStep(Kernel):
    name = "step"
    family = "step"
    summary = "hyperdiffusion step, vertical-diffusion solve and saturation adjustment back to back on one state"
    schedules = (ROWS, COLUMNS)
    min_var = ADJUST.min_var
    var_rule = ADJUST.var_rule
    workspace = ("diffused", "solved")

    def __init__(self) -> None:
        self._stage_problems: weakref.WeakKeyDictionary[Problem, tuple[Problem, Problem, Problem]] = weakref.WeakKeyDictionary()

    def stages(self, schedule: Schedule | str) -> tuple[tuple[str, str], ...]:
        """(kernel, schedule) of each stage of a step schedule, for setting the step beside its parts."""
        return STAGES[self.schedule(schedule).name]

    def input_shapes(self, extents: Extents) -> dict[str, Extents | int]:
        return {"q": extents, "a": extents, "b": extents, "c": extents, "p": extents.z}

    def logical_inputs(self, extents: Extents, dtype: np.dtype, seed: int) -> dict[str, np.ndarray]:
        """The moist state and pressures of ``saturation``, the coefficients of ``varcoef``."""
        moist = ADJUST.logical_inputs(extents, dtype, seed)
        coefficients = field_coefficient_inputs(extents, dtype, seed + 7, coefficient_var=extents.var)
        return {"q": moist["q"], "a": coefficients["a"], "b": coefficients["b"], "c": coefficients["c"], "p": moist["p"]}

    padding_value = SOLVE.padding_value

    def reference(self, logical: dict[str, np.ndarray]) -> np.ndarray:
        diffused, solved = self._stage_references(logical)
        return reference_adjust(solved, logical["p"])

    @staticmethod
    def _stage_references(logical: dict[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        """The float64 outputs of the first two stages."""
        diffused = diffusion_step_reference(logical["q"])
        return diffused, thomas_reference(logical["a"], logical["b"], logical["c"], diffused)

    def _stage_problems_of(self, problem: Problem) -> tuple[Problem, Problem, Problem]:
        """Each stage's problem over the step's buffers (q -> diffused -> solved -> output), with
        logical inputs from the references of the stages before it."""
        if problem not in self._stage_problems:
            f, ws, lg = problem.fields, problem.workspace, problem.logical
            diffused, solved = self._stage_references(lg)
            common = (problem.layout, problem.extents, problem.dtype, problem.seed)
            coefficients = {k: f[k] for k in "abc"}
            self._stage_problems[problem] = (
                Problem(DIFFUSE.name, *common, {"q": f["q"]}, {}, ws["diffused"], {"q": lg["q"]}),
                Problem(SOLVE.name, *common, {**coefficients, "d": ws["diffused"]}, {}, ws["solved"],
                        {"a": lg["a"], "b": lg["b"], "c": lg["c"], "d": diffused}),
                Problem(ADJUST.name, *common, {"q": ws["solved"]}, {"p": problem.arrays["p"]}, problem.output,
                        {"q": solved, "p": lg["p"]}),
            )
        return self._stage_problems[problem]

    def stage_implementation(self, problem: Problem, schedule: Schedule, index: int) -> tuple[Any, tuple[Any, ...]]:
        kernel, stage = STAGE_KERNELS[index], self._stage_problems_of(problem)[index]
        return kernel.implementation(stage, kernel.schedule(self.stages(schedule)[index][1]))

    def validate_stage(self, problem: Problem, schedule: Schedule, index: int, build: str = "parallel") -> Validation:
        stages = self._stage_problems_of(problem)
        for before in range(index):
            STAGE_KERNELS[before].bind(stages[before], self.stages(schedule)[before][1], build)()
        return STAGE_KERNELS[index].validate(stages[index], self.stages(schedule)[index][1], build)

    def implementation(self, problem: Problem, schedule: Schedule) -> tuple[Chain, tuple[Any, ...]]:
        parts, args = zip(*(self.stage_implementation(problem, schedule, i) for i in range(len(STAGE_KERNELS))))
        return Chain(f"step_{schedule.name}", tuple(parts)), tuple(args)

    def flops(self, extents: Extents) -> int:
        # The diffusion step is hyperdiffusion's 16 per point (its weights differ, its count not).
        return DIFFUSE.flops(extents) + SOLVE.flops(extents) + ADJUST.flops(extents)

    def tolerance(self, dtype: Any) -> float:
        """The stages' errors pass through a diffusion solve (condition ~34) and the adjustment;
        measured worst cases over the contract layouts (var=3, z=7): 8.8e-16 and 3.1e-7."""
        return 2e-14 if np.dtype(dtype) == np.float64 else 1e-5

    def thread_working_set(self, extents: Extents, dtype: Any, schedule: Schedule) -> int | None:
        return SOLVE.thread_working_set(extents, dtype, SOLVE.schedule(self.stages(schedule)[1][1]))


register(MoistStep())
