"""Suites: TOML files naming the grid, kernels, layouts, thread counts and timing policy of a sweep."""

from __future__ import annotations

import difflib
import hashlib
import json
import tomllib
from dataclasses import asdict, dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from harness.roof import MAX_FOOTPRINT, MIN_FOOTPRINT
from harness.kernel_options import kernel_options
from harness.suite_errors import SuiteError, check_keys as _check_keys, expect as _expect
from harness.sampling import Timing
from kernels.grid import Extents, check_dtype
from kernels.families import TILING_ORDER, TILING_SIZES, format_tile_sizes, paddings, parse_tile_sizes, permutations, tilings
from kernels.layout import Layout
from kernels.notation import parse_layout

BUILTIN_SUITES = ("default", "smoke", "dycore")
THREADING_LAYERS = ("default", "omp", "tbb", "workqueue")


@dataclass(frozen=True)
class Threads:
    counts: tuple[int, ...] | str = (1, 2)  # explicit, or "powers-of-two"
    layer: str = "default"
    pin: bool = False


@dataclass(frozen=True)
class Suite:
    """A validated suite. ``layouts`` are the expanded specs, in suite order, duplicates removed."""

    name: str
    description: str
    seed: int
    sizes: tuple[Extents, ...]
    dtypes: tuple[str, ...]
    kernels: tuple[str, ...]
    schedules: tuple[str, ...] | str
    layouts: tuple[str, ...]
    threads: Threads
    timing: Timing
    conversions: tuple[tuple[str, str], ...] = ()
    conversions_auto: int = 0  # also time conversions among each kernel's best N layouts, per thread count
    mix: tuple[tuple[str, float], ...] = ()
    kernel_options: tuple[tuple[str, tuple[tuple[str, int], ...]], ...] = field(default=())
    #: Per kernel, strip widths to try: each becomes a schedule variant ``strip@W``, and the ranking
    #: chooses each layout's best on the choosing rounds like any schedule.
    strip_widths: tuple[tuple[str, tuple[int, ...]], ...] = field(default=())

    def as_dict(self) -> dict[str, Any]:
        """Plain-data form (JSON-serialisable), as stored in run metadata."""
        out = asdict(self)
        out["sizes"] = [str(s) for s in self.sizes]
        return out

    def digest(self) -> str:
        """Stable hash of the suite's content."""
        text = json.dumps(self.as_dict(), sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:16]

    def thread_counts(self, usable_cores: int) -> tuple[int, ...]:
        """Explicit counts, or powers of two up to the usable core count plus that count."""
        if isinstance(self.threads.counts, str):
            counts, n = [], 1
            while n <= usable_cores:
                counts.append(n)
                n *= 2
            return tuple(sorted(set(counts + [usable_cores])))
        return self.threads.counts


_TOP_KEYS = {"name", "description", "seed", "grid", "kernels", "layouts", "threads", "timing", "conversions", "mix"}
_SECTION_KEYS = {
    "grid": {"sizes", "dtypes"},
    "kernels": {"select", "schedules", "options"},
    "layouts": {"specs", "families"},
    "threads": {"counts", "layer", "pin"},
    "timing": set(Timing.__dataclass_fields__),
    "conversions": {"pairs", "auto"},
}
_FAMILY_KEYS = {"permutations": set(), "tilings": {"tiles", "order"}, "paddings": {"base", "pads", "token"}}


def _layouts(section: dict[str, Any]) -> tuple[str, ...]:
    out: list[Layout] = [parse_layout(_expect(s, str, "layouts.specs item")) for s in section.get("specs", [])]
    for i, fam in enumerate(section.get("families", [])):
        where = f"layouts.families[{i}]"
        _expect(fam, dict, where)
        kind = fam.get("family")
        if kind not in _FAMILY_KEYS:
            raise SuiteError(f"{where}.family must be one of {', '.join(_FAMILY_KEYS)}, got {kind!r}")
        _check_keys({k: v for k, v in fam.items() if k != "family"}, _FAMILY_KEYS[kind], where)
        if kind == "permutations":
            out += permutations()
        elif kind == "tilings":
            tiles = [_expect(t, str, f"{where}.tiles item") for t in _expect(fam.get("tiles", format_tile_sizes(TILING_SIZES).split(",")), list, f"{where}.tiles")]
            out += tilings(parse_tile_sizes(",".join(tiles)), _expect(fam.get("order", TILING_ORDER), str, f"{where}.order"))
        else:
            pads = [_expect(p, int, f"{where}.pads item") for p in _expect(fam.get("pads", [0, 1, 8]), list, f"{where}.pads")]
            token = fam.get("token")
            out += paddings(
                _expect(fam.get("base", "var.z.y.x"), str, f"{where}.base"), pads, None if token is None else _expect(token, str, f"{where}.token")
            )
    unique = list(dict.fromkeys(layout.spec for layout in out))
    if not unique:
        raise SuiteError("the suite names no layouts; give layouts.specs and/or layouts.families")
    return tuple(unique)


def parse_suite(data: dict[str, Any], source: str = "<suite>") -> Suite:
    """Validate a suite's parsed TOML; raise SuiteError naming the first problem."""
    from kernels.registry import all_kernels

    _check_keys(data, _TOP_KEYS, "the suite's top level")
    for section, keys in _SECTION_KEYS.items():
        if section in data:
            _check_keys(_expect(data[section], dict, f"[{section}]"), keys, f"[{section}]")
    grid = data.get("grid", {})
    sizes_raw = grid.get("sizes", ["var=4,z=64,y=96,x=96"])
    sizes_raw = [sizes_raw] if isinstance(sizes_raw, str) else _expect(sizes_raw, list, "grid.sizes")
    sizes = tuple(Extents.parse(_expect(s, str, "grid.sizes item")) for s in sizes_raw)
    dtypes = tuple(check_dtype(_expect(d, str, "grid.dtypes item")).name for d in grid.get("dtypes", ["float64"]))
    registry = all_kernels()
    ksec = data.get("kernels", {})
    select = ksec.get("select", "all")
    if select == "all":
        names = tuple(registry)
    else:
        names = tuple(_expect(select, list, "kernels.select"))
        for name in names:
            if name not in registry:
                close = difflib.get_close_matches(str(name), list(registry), n=1)
                hint = f" (did you mean '{close[0]}'?)" if close else ""
                raise SuiteError(f"unknown kernel '{name}' in kernels.select{hint}; valid: {', '.join(registry)}")
    schedules = ksec.get("schedules", "all")
    if schedules != "all":
        schedules = tuple(_expect(schedules, list, "kernels.schedules"))
        known = {s.name for n in names for s in registry[n].schedules}
        for s in schedules:
            if s not in known:
                raise SuiteError(f"unknown schedule '{s}' in kernels.schedules; schedules of the chosen kernels: {', '.join(sorted(known))}")
    options, tuning = kernel_options(_expect(ksec.get("options", {}), dict, "kernels.options"), names, registry)
    layouts = _layouts(data.get("layouts", {"specs": ["var.z.y.x"]}))
    for layout in layouts:
        for size in sizes:
            parse_layout(layout).check(size)
    from harness.prepare import kernel_with_options

    for name in names:
        kernel = kernel_with_options(registry[name], dict(options))
        for size in sizes:
            reason = kernel.unsupported(size)
            if reason:
                raise SuiteError(f"grid '{size}': {reason}; change grid.sizes or leave the kernel out of kernels.select")
        for layout in layouts:
            reason = kernel.refuses(parse_layout(layout))
            if reason:
                raise SuiteError(f"{reason}; leave the layout out of layouts or the kernel out of kernels.select")
    tsec = data.get("threads", {})
    counts = tsec.get("counts", [1, 2])
    if isinstance(counts, str):
        if counts != "powers-of-two":
            raise SuiteError(f"threads.counts must be a list of positive integers or \"powers-of-two\", got {counts!r}")
    else:
        counts = tuple(_expect(c, int, "threads.counts item") for c in _expect(counts, list, "threads.counts"))
        if not counts or any(c <= 0 for c in counts):
            raise SuiteError(f"threads.counts must be positive integers, got {list(counts)}")
        counts = tuple(dict.fromkeys(counts))
    layer = tsec.get("layer", "default")
    if layer not in THREADING_LAYERS:
        raise SuiteError(f"threads.layer must be one of {', '.join(THREADING_LAYERS)}, got {layer!r}")
    threads = Threads(counts, layer, bool(_expect(tsec.get("pin", False), bool, "threads.pin")))
    timing = _timing(data.get("timing", {}))
    pairs = []
    for pair in data.get("conversions", {}).get("pairs", []):
        if not (isinstance(pair, list) and len(pair) == 2):
            raise SuiteError(f"conversions.pairs items are [FROM, TO] layout pairs, got {pair!r}")
        a, b = (parse_layout(_expect(p, str, "conversions.pairs item")).spec for p in pair)
        pairs.append((a, b))
    mix = []
    for kname, weight in _expect(data.get("mix", {}), dict, "[mix]").items():
        if kname not in names:
            raise SuiteError(f"[mix] weights kernel '{kname}', which the suite does not run; run: {', '.join(names)}")
        if _expect(weight, (int, float), f"mix.{kname}") < 0:
            raise SuiteError(f"mix.{kname} must be >= 0, got {weight}")
        mix.append((kname, float(weight)))
    return Suite(
        name=_suite_name(data.get("name", Path(source).stem)),
        description=_expect(data.get("description", ""), str, "description"),
        seed=_expect(data.get("seed", 0), int, "seed"),
        sizes=sizes,
        dtypes=dtypes,
        kernels=names,
        schedules=schedules,
        layouts=layouts,
        threads=threads,
        timing=timing,
        conversions=tuple(pairs),
        conversions_auto=_auto(data.get("conversions", {}).get("auto", 0)),
        mix=tuple(mix),
        kernel_options=tuple(options),
        strip_widths=tuple(tuning),
    )


def _suite_name(value: Any) -> str:
    """The suite's name, which becomes part of a run directory's name: no separators, no NUL."""
    name = _expect(value, str, "name")
    bad = [c for c in ("/", "\\", "\0") if c in name]
    if bad or name in ("", ".", "..") or not name.isprintable():
        raise SuiteError(f"suite name {name!r} cannot name a run directory; use letters, digits, '-', '_' and '.' "
                         "(no '/', '\\', control characters, and not '.' or '..')")
    return name


def _auto(value: Any) -> int:
    _expect(value, int, "conversions.auto")
    if value < 0:
        raise SuiteError(f"conversions.auto must be >= 0 (layouts per kernel), got {value}")
    return int(value)


def _timing(section: dict[str, Any]) -> Timing:
    defaults = Timing()
    values: dict[str, Any] = {}
    for key, default in asdict(defaults).items():
        value = section.get(key, default)
        kind: Any = bool if isinstance(default, bool) else (int, float) if isinstance(default, float) else int
        _expect(value, kind, f"timing.{key}")
        if not isinstance(value, bool) and value < 0:
            raise SuiteError(f"timing.{key} must be >= 0, got {value}")
        values[key] = value
    if values["min_repeats"] < 1:
        raise SuiteError("timing.min_repeats must be >= 1")
    if values["repetitions"] < 1:
        raise SuiteError("timing.repetitions must be >= 1")
    if values["roof"] and not MIN_FOOTPRINT <= values["roof_max_bytes"] <= MAX_FOOTPRINT:
        raise SuiteError(f"timing.roof_max_bytes must be between {MIN_FOOTPRINT} (the smallest triad footprint) and "
                         f"{MAX_FOOTPRINT} bytes, got {values['roof_max_bytes']}")
    return Timing(**values)


def read_suite_text(path_or_name: str | None) -> str:
    """The TOML text of a suite file, or of a built-in suite by name (None: the default suite)."""
    name = path_or_name or "default"
    if name in BUILTIN_SUITES and not Path(name).exists():
        return resources.files("harness").joinpath(f"suites/{name}.toml").read_text()
    path = Path(name)
    if not path.is_file():
        raise SuiteError(f"suite file '{name}' not found; give a TOML file or one of: {', '.join(BUILTIN_SUITES)}")
    try:
        return path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise SuiteError(f"suite file '{name}' is not UTF-8 text (byte {exc.start}: {exc.reason}); a suite is a TOML file") from None


def load_suite(path_or_name: str | None) -> Suite:
    """Load a suite file, or a built-in suite by name (None: the default suite)."""
    name = path_or_name or "default"
    text = read_suite_text(name)
    source = f"built-in suite '{name}'" if name in BUILTIN_SUITES and not Path(name).exists() else name
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SuiteError(f"{source} is not valid TOML: {exc}") from None
    return parse_suite(data, source)
