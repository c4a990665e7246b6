"""The kernel registry: every kernel module registers one instance at import."""

from __future__ import annotations

import difflib
import importlib
import os
import pkgutil
import re
from typing import TYPE_CHECKING

from kernels.errors import KernelError

if TYPE_CHECKING:
    from kernels.base import Kernel

_REGISTRY: dict[str, Kernel] = {}
_FAMILY_PACKAGES = ("kernels.columns", "kernels.stencils", "kernels.points", "kernels.steps")
#: Names the harness gives its own kinds of case: layout conversions and STREAM-triad roof probes.
CONVERSION_NAME = "convert"
PROBE_NAME = "triad"
RESERVED_NAMES = (CONVERSION_NAME, PROBE_NAME)
_VALID_NAME = re.compile(r"[a-z][a-z0-9_]*\Z")


def register(kernel: Kernel) -> Kernel:
    """Add a kernel; its name must be new, not reserved, and lower-case letters, digits and '_'."""
    if not isinstance(getattr(kernel, "name", None), str) or not _VALID_NAME.match(kernel.name):
        raise KernelError(f"kernel name {getattr(kernel, 'name', None)!r} is not valid; use lower-case letters, "
                          "digits and '_', starting with a letter")
    if kernel.name in RESERVED_NAMES:
        raise KernelError(f"kernel name '{kernel.name}' is reserved (the harness's own cases: {', '.join(RESERVED_NAMES)}); "
                          "choose another name")
    if kernel.name in _REGISTRY and type(_REGISTRY[kernel.name]) is not type(kernel):
        raise KernelError(f"kernel name '{kernel.name}' is registered twice")
    _REGISTRY[kernel.name] = kernel
    return kernel


#: Environment variable naming extra kernel modules (comma separated) to import and register.
EXTRA_MODULES_ENV = "STRIDEWISE_KERNEL_MODULES"


def _load_all() -> None:
    for module in filter(None, (m.strip() for m in os.environ.get(EXTRA_MODULES_ENV, "").split(","))):
        try:
            importlib.import_module(module)
        except ImportError as exc:
            raise KernelError(f"{EXTRA_MODULES_ENV} names module '{module}', which cannot be imported: {exc}") from None
    for package_name in _FAMILY_PACKAGES:
        package = importlib.import_module(package_name)
        for info in pkgutil.iter_modules(package.__path__):
            if info.name != "common":
                importlib.import_module(f"{package_name}.{info.name}")


def all_kernels() -> dict[str, Kernel]:
    """Every registered kernel by name, in registration order."""
    _load_all()
    return dict(_REGISTRY)


def get_kernel(name: str) -> Kernel:
    """The kernel called ``name``; a KernelError suggests close matches otherwise."""
    kernels = all_kernels()
    if name in kernels:
        return kernels[name]
    close = difflib.get_close_matches(name, list(kernels), n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    raise KernelError(f"unknown kernel '{name}'{hint}; valid kernels: {', '.join(kernels)}")
