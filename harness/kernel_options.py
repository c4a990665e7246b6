"""A suite's ``kernels.options``: schedule parameters (strip widths, fixed or tuned) and kernel settings (halo)."""

from __future__ import annotations

from typing import Any

from harness.suite_errors import SuiteError, check_keys, expect
from kernels.errors import KernelError


def kernel_options(given: dict[str, Any], names: tuple[str, ...], registry: dict[str, Any]
                   ) -> tuple[list[tuple[str, tuple[tuple[str, int], ...]]], list[tuple[str, tuple[int, ...]]]]:
    """Fixed options per kernel, and the strip widths to try per kernel (one variant each)."""
    options, tuning = [], []
    for kname, opts in given.items():
        if kname not in names:
            raise SuiteError(f"kernels.options names kernel '{kname}', which the suite does not run; run: {', '.join(names)}")
        check_keys(expect(opts, dict, f"kernels.options.{kname}"), {"strip_width", "halo"}, f"kernels.options.{kname}")
        params: list[tuple[str, int]] = []
        if "halo" in opts:
            try:
                registry[kname].with_options(halo=opts["halo"])
            except KernelError as exc:
                raise SuiteError(f"kernels.options.{kname}.halo: {exc}") from None
            params.append(("halo", opts["halo"]))
        if "strip_width" in opts or not params:
            takes = sorted(n for n in names if any("width" in dict(sch.params) for sch in registry[n].schedules))
            if "strip_width" in opts and kname not in takes:
                raise SuiteError(f"kernels.options.{kname}.strip_width: kernel '{kname}' has no schedule with a strip width; "
                                 f"kernels of this suite that take one: {', '.join(takes) or 'none'}")
            value = opts.get("strip_width", 128)
            widths = value if isinstance(value, list) else [value]
            for width in widths:
                expect(width, int, f"kernels.options.{kname}.strip_width")
                if width <= 0:
                    raise SuiteError(f"kernels.options.{kname}.strip_width must be positive, got {width}")
            if isinstance(value, list):
                if not widths or len(set(widths)) != len(widths):
                    raise SuiteError(f"kernels.options.{kname}.strip_width: give distinct widths to try, got {value}")
                tuning.append((kname, tuple(widths)))
            else:
                params.append(("width", value))
        if params:
            options.append((kname, tuple(params)))
    return options, tuning
