"""Errors of suite files and the checks that raise them, shared by the suite's parsing modules."""

from __future__ import annotations

import difflib
from typing import Any

from kernels.errors import StridewiseError


class SuiteError(StridewiseError):
    """A suite file or suite value is invalid."""


def unknown(key: str, valid: set[str], where: str) -> SuiteError:
    close = difflib.get_close_matches(key, sorted(valid), n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    return SuiteError(f"unknown key '{key}' in {where}{hint}; valid keys: {', '.join(sorted(valid))}")


def check_keys(table: dict[str, Any], valid: set[str], where: str) -> None:
    for key in table:
        if key not in valid:
            raise unknown(key, valid, where)


def expect(value: Any, kind: type | tuple[type, ...], where: str) -> Any:
    if isinstance(value, bool) and kind in (int, float, (int, float)):
        raise SuiteError(f"{where} must be a number, got {value!r}")
    if not isinstance(value, kind):
        names = kind.__name__ if isinstance(kind, type) else " or ".join(k.__name__ for k in kind)
        raise SuiteError(f"{where} must be {names}, got {value!r}")
    return value
