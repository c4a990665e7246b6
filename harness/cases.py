"""What is timed: case keys, groups of cases timed together, and the three kinds of case.

A case is a *kernel* case (a registered kernel in one layout, schedule and build), a
*stage* (one stage of a kernel that runs several back to back, alone on that kernel's buffers,
timed in its rounds), a *conversion* (copying the state from one layout to another) or a *probe*
(a STREAM triad sized like the group's buffers, the roof the group's figures are measured
against). The kind follows from the ``kernel`` column: the registry reserves two special values,
and a stage is ``KERNEL.PART`` (registered names never hold a dot).
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import Enum
from typing import Any

from kernels.errors import StridewiseError

try:
    from kernels.registry import CONVERSION_NAME, PROBE_NAME
except ImportError:  # the kernels of an older version, run by the side-by-side gate, predate these names
    CONVERSION_NAME, PROBE_NAME = "convert", "triad"

CONVERT = CONVERSION_NAME  # the kernel column of a conversion
PROBE = PROBE_NAME  # the kernel column of a roof probe
ARROW = "->"  # joins the two layouts of a conversion: "FROM->TO"
#: Joins a schedule to a tunable's value in a case's schedule name: ``strip@64`` is the strip
#: schedule with width 64 (a suite's list of ``strip_width`` values).
VARIANT = "@"
#: Joins a kernel to the kernel one of its stages runs: ``step.varcoef`` (a stage case's kernel).
STAGE = "."


def stage_name(kernel: str, part: str) -> str:
    """The kernel column of a stage case: the whole kernel's name, a dot, the stage's kernel."""
    return f"{kernel}{STAGE}{part}"


def part_of(kernel: str) -> str:
    """The registered kernel whose byte and flop models a case has: itself, or a stage's kernel."""
    return kernel.split(STAGE, 1)[-1]


def whole_of(kernel: str) -> str:
    """The kernel whose buffers a case works on: itself, or for a stage the kernel it belongs to."""
    return kernel.split(STAGE, 1)[0]


class CaseKind(str, Enum):
    KERNEL = "kernel"
    STAGE = "stage"
    CONVERSION = "conversion"
    PROBE = "probe"

    @classmethod
    def of(cls, kernel: str) -> CaseKind:
        """The kind of a case from its kernel name."""
        if kernel == CONVERT:
            return cls.CONVERSION
        if kernel == PROBE:
            return cls.PROBE
        return cls.STAGE if STAGE in kernel else cls.KERNEL


def is_plain(layout: str) -> bool:
    """Whether a layout spec has no tiling, padding or offset (a conversion's "A->B" is not plain);
    rankings prefer plain layouts on a tie."""
    from kernels.notation import parse_layout

    try:
        return parse_layout(layout).is_plain
    except StridewiseError:
        return False


def of_kind(frame: Any, *kinds: CaseKind) -> Any:
    """Boolean mask of the rows of a cases or samples frame whose kind is one of ``kinds``."""
    return frame["kernel"].map(CaseKind.of).isin(kinds)


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

    @property
    def kind(self) -> CaseKind:
        return CaseKind.of(self.kernel)

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
    def kind(self) -> CaseKind:
        return CaseKind.of(self.kernel)

    @property
    def label(self) -> str:
        rep = f" rep{self.repetition + 1}" if self.repetition else ""
        return f"{self.kernel}{self.tag} {self.grid} {self.dtype} {self.threads}t{rep}"


def probe_schedule(kernel: str, tag: str = "") -> str:
    """The schedule field of a group's roof probes: it names the group, so probe ids never clash."""
    return f"probe-{kernel}{tag}"
