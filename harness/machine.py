"""The machine fingerprint: what a run's numbers depend on, and a stable id to match runs by."""

from __future__ import annotations

import glob
import hashlib
import math
import os
import platform
import subprocess
import sys
from pathlib import Path
from typing import Any

#: Test-only environment variable: the machine id to record instead of the measured one.
FORCED_MACHINE_ID_ENV = "STRIDEWISE_TEST_MACHINE_ID"
THREADING_ENV_PREFIXES = ("OMP_", "NUMBA_", "KMP_", "OPENBLAS_", "MKL_", "GOMP_")


def _read(path: str) -> str | None:
    try:
        return Path(path).read_text().strip()
    except OSError:
        return None


def _size_bytes(text: str | None) -> int | None:
    if not text:
        return None
    units = {"K": 1 << 10, "M": 1 << 20, "G": 1 << 30}
    if text[-1] in units:
        return int(text[:-1]) * units[text[-1]]
    return int(text)


def cpu_model() -> str:
    for line in (_read("/proc/cpuinfo") or "").splitlines():
        if line.startswith("model name"):
            return line.split(":", 1)[1].strip()
    return platform.processor() or platform.machine()


def usable_cpu_list() -> list[int]:
    """The CPUs this process may run on (its affinity), lowest first; [] where that is unknown."""
    try:
        return sorted(os.sched_getaffinity(0))
    except AttributeError:  # not Linux
        return []


def usable_cores() -> int:
    """Cores this process may use: its CPU affinity, capped by a cgroup CPU quota if one is set."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not Linux
        cores = os.cpu_count() or 1
    quota = _read("/sys/fs/cgroup/cpu.max")  # cgroup v2: "max 100000" or "200000 100000"
    if quota and not quota.startswith("max"):
        q, period = quota.split()
        cores = min(cores, max(1, math.ceil(int(q) / int(period))))
    else:
        q1, p1 = _read("/sys/fs/cgroup/cpu/cpu.cfs_quota_us"), _read("/sys/fs/cgroup/cpu/cpu.cfs_period_us")
        if q1 and p1 and int(q1) > 0:
            cores = min(cores, max(1, math.ceil(int(q1) / int(p1))))
    return cores


def smt_siblings() -> list[str]:
    """Groups of logical CPUs sharing one physical core, e.g. ['0,4', '1,5']."""
    groups = {
        _read(p) or "" for p in glob.glob("/sys/devices/system/cpu/cpu[0-9]*/topology/thread_siblings_list")
    }
    return sorted(g for g in groups if g)


def _cpu_set(text: str) -> set[int]:
    """CPUs of a kernel list such as '0,4' or '0-3'."""
    out: set[int] = set()
    for part in text.split(","):
        lo, _, hi = part.strip().partition("-")
        if lo.isdigit():
            out.update(range(int(lo), int(hi if hi.isdigit() else lo) + 1))
    return out


def usable_physical_cores() -> int:
    """Physical cores this process may use: SMT sibling groups meeting its affinity, capped by
    ``usable_cores`` (threads beyond this share a core's pipes and caches)."""
    cpus = set(usable_cpu_list())
    groups = [_cpu_set(g) for g in smt_siblings()]
    if not cpus or not groups:
        return usable_cores()
    return max(1, min(usable_cores(), sum(1 for g in groups if g & cpus)))


def caches() -> list[dict[str, Any]]:
    """Caches of CPU 0 as the OS reports them (on a virtual machine these may be the host's)."""
    out = []
    for index in sorted(glob.glob("/sys/devices/system/cpu/cpu0/cache/index*")):
        out.append(
            {
                "level": int(_read(f"{index}/level") or 0),
                "type": _read(f"{index}/type"),
                "bytes": _size_bytes(_read(f"{index}/size")),
                "shared_with": _read(f"{index}/shared_cpu_list"),
            }
        )
    return out


def private_cache_bytes(level: int = 2) -> int | None:
    """Size of CPU 0's unified or data cache of ``level`` (None if the OS does not say)."""
    sizes = [c["bytes"] for c in caches() if c["level"] == level and c["bytes"] and c["type"] in ("Unified", "Data")]
    return min(sizes) if sizes else None


def last_level_cache_bytes() -> int | None:
    sizes = [c["bytes"] for c in caches() if c["bytes"] and c["type"] in ("Unified", "Data")]
    return max(sizes) if sizes else None


def memory() -> dict[str, int]:
    out = {}
    for line in (_read("/proc/meminfo") or "").splitlines():
        key, _, rest = line.partition(":")
        if key in ("MemTotal", "MemAvailable"):
            out[key] = int(rest.split()[0]) * 1024
    return out


def available_memory_bytes() -> int | None:
    """Memory a new allocation can count on: the kernel's MemAvailable, capped by this process's
    address-space limit (``ulimit -v``) where one is set."""
    available = memory().get("MemAvailable")
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    except (ImportError, OSError, ValueError):
        return available
    if soft == resource.RLIM_INFINITY or soft <= 0:
        return available
    return min(available, soft) if available else soft


def governor() -> dict[str, Any]:
    base = "/sys/devices/system/cpu/cpu0/cpufreq"
    cur = _read(f"{base}/scaling_cur_freq")
    return {
        "governor": _read(f"{base}/scaling_governor"),
        "cur_khz": int(cur) if cur else None,
        "max_khz": int(_read(f"{base}/cpuinfo_max_freq") or 0) or None,
    }


def numa_note(fingerprint: dict[str, Any]) -> str | None:
    """The first-touch limitation, on a machine with several NUMA nodes (None on one node)."""
    nodes = fingerprint.get("numa_nodes") or []
    if len(nodes) < 2:
        return None
    return (f"This machine has {len(nodes)} NUMA nodes. Buffers are first-touched in equal contiguous blocks of "
            "their bytes, one per thread, not in each kernel's own work split (cyclic rows, strips across "
            "z-planes): a thread may find part of its work on another node's memory, so multi-threaded "
            "times include remote accesses that a code first-touching with its own schedule would not pay.")


def nominal_clock_hz() -> float | None:
    """The clock the OS reports for CPU 0: cpufreq's maximum, else /proc/cpuinfo's "cpu MHz"."""
    max_khz = governor()["max_khz"]
    if max_khz:
        return max_khz * 1e3
    for line in (_read("/proc/cpuinfo") or "").splitlines():
        if line.startswith("cpu MHz"):
            try:
                return float(line.split(":", 1)[1]) * 1e6
            except ValueError:
                return None
    return None


def governor_warning(info: dict[str, Any]) -> str | None:
    """A warning when the frequency governor lets the clock float during timing."""
    gov = info.get("governor")
    if gov and gov != "performance":
        return f"CPU frequency governor is '{gov}': the clock may change during timing; 'performance' pins it"
    return None


def git_commit(path: Path) -> str | None:
    try:
        out = subprocess.run(["git", "-C", str(path), "rev-parse", "HEAD"], capture_output=True, text=True, timeout=5)
        dirty = subprocess.run(["git", "-C", str(path), "status", "--porcelain"], capture_output=True, text=True, timeout=5)
    except (OSError, subprocess.TimeoutExpired):
        return None
    if out.returncode != 0:
        return None
    return out.stdout.strip() + ("+dirty" if dirty.stdout.strip() else "")


def numba_target() -> dict[str, Any]:
    import llvmlite.binding as llvm

    features = llvm.get_host_cpu_features().flatten().split(",")
    return {
        "cpu_name": llvm.get_host_cpu_name(),
        "features": sorted(f[1:] for f in features if f.startswith("+")),
    }


def threading_env() -> dict[str, str]:
    return {k: v for k, v in sorted(os.environ.items()) if k.startswith(THREADING_ENV_PREFIXES)}


def fingerprint() -> dict[str, Any]:
    """Everything about this machine and software that a run's numbers depend on."""
    import llvmlite
    import numba
    import numpy

    from harness import __version__
    from kernels.jit import SOURCE_HASH

    mem = memory()
    numa = sorted(os.path.basename(p) for p in glob.glob("/sys/devices/system/node/node[0-9]*"))
    info: dict[str, Any] = {
        "cpu_model": cpu_model(),
        "logical_cpus": os.cpu_count(),
        "physical_cores": len(smt_siblings()) or None,
        "smt_siblings": smt_siblings(),
        "usable_cores": usable_cores(),
        "usable_physical_cores": usable_physical_cores(),
        "affinity": sorted(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else None,
        "caches": caches(),
        "numa_nodes": numa,
        "memory_bytes": mem.get("MemTotal"),
        "os": platform.platform(),
        "python": sys.version.split()[0],
        "numpy": numpy.__version__,
        "numba": numba.__version__,
        "llvmlite": llvmlite.__version__,
        "numba_target": numba_target(),
        "transparent_hugepages": _read("/sys/kernel/mm/transparent_hugepage/enabled"),
        "cpufreq": governor(),
        "threading_env": threading_env(),
        "stridewise": __version__,
        "commit": git_commit(Path(__file__).resolve().parent.parent),
        "kernels_source_hash": SOURCE_HASH,
    }
    # Test-only: a forced machine id, to try several-machine reports with runs of one machine.
    info["machine_id"] = os.environ.get(FORCED_MACHINE_ID_ENV) or machine_id(info)
    return info


def machine_id(info: dict[str, Any]) -> str:
    """Stable id from hardware facts only (never the hostname), 12 hex digits."""
    facts = {
        "cpu": info["cpu_model"],
        "logical": info["logical_cpus"],
        "physical": info["physical_cores"],
        "caches": [(c["level"], c["type"], c["bytes"]) for c in info["caches"]],
        "numa": len(info["numa_nodes"]),
        "memory_gib": round((info["memory_bytes"] or 0) / 2**30),
        "isa": info["numba_target"]["cpu_name"],
    }
    return hashlib.sha256(repr(sorted(facts.items())).encode()).hexdigest()[:12]
