"""A run directory: samples and cases as tidy CSV, metadata as JSON, a markdown summary.

Rows are appended and flushed as each group of cases finishes, so an interrupted sweep loses
nothing finished and ``--resume`` can carry on.
"""

from __future__ import annotations

import csv
import errno
import io
import json
import os
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from harness.sampling import Timing
from kernels.errors import StridewiseError

SAMPLES = "samples.csv"
CASES = "cases.csv"
METADATA = "metadata.json"
SUITE = "suite.toml"
SUMMARY = "summary.md"

SAMPLE_COLUMNS = ["case_id", "kernel", "schedule", "build", "layout", "dtype", "grid", "threads", "round", "position", "phase", "ns"]
CASE_COLUMNS = [
    "case_id", "kernel", "family", "schedule", "build", "layout", "dtype", "grid", "threads", "status", "message",
    "max_rel_error", "tolerance", "footprint_bytes", "traffic_bytes", "flops", "samples", "median_ns", "iqr_ns",
    "gbps", "roof_gbps", "pct_roof", "gflops", "overhead_ns", "overhead_bound", "harness_overhead_ns",
    "compile_s", "loaded_from_cache", "vectorised", "vector_bits", "order_seed",
]
#: Columns added after the first format; a reader fills them in when an older run lacks them.
OPTIONAL_COLUMNS = {"repetition": 0, "version": "", "group_overhead_ns": None, "vector_code": None, "vector_trip": None,
                    "oversubscribed": None, "machine_id": ""}
#: Columns holding True, False or nothing; read back as Python booleans or None (CSV holds text).
BOOLEAN_COLUMNS = ("overhead_bound", "loaded_from_cache", "vectorised", "vector_code", "oversubscribed")


@dataclass(frozen=True)
class RunMetadata:
    """A run's ``metadata.json``, read once, with typed access to what readers use."""

    raw: dict[str, Any]

    @property
    def fingerprint(self) -> dict[str, Any]:
        return self.raw.get("fingerprint") or {}

    @property
    def machine_id(self) -> str | None:
        return self.fingerprint.get("machine_id")

    def for_machine(self, machine_id: str) -> RunMetadata:
        """The metadata one machine of a merged run saw (its fingerprint, workers and roofs)."""
        own = (self.raw.get("machines") or {}).get(machine_id)
        return self if own is None else RunMetadata({**self.raw, **own})

    @property
    def suite(self) -> dict[str, Any]:
        return self.raw.get("suite") or {}

    @property
    def suite_name(self) -> str:
        return str(self.suite.get("name", "?"))

    @property
    def status(self) -> str:
        return str(self.raw.get("status", "?"))

    @property
    def workers(self) -> dict[str, dict[str, Any]]:
        """Per thread count (text), what the worker reported: threading layer, roof, placement."""
        return self.raw.get("workers") or {}

    @property
    def compile_totals(self) -> dict[str, Any]:
        return self.raw.get("compile") or {}

    @property
    def mix(self) -> list[tuple[str, float]]:
        return [tuple(pair) for pair in self.suite.get("mix") or []]  # type: ignore[misc]

    @property
    def versions(self) -> dict[str, Any]:
        return self.raw.get("versions") or {}

    @property
    def has_raw_samples(self) -> bool:
        """False for a run imported from summary figures only (no per-round samples)."""
        return (self.raw.get("imported") or {}).get("raw_samples") is not False

    def timing(self) -> Timing:
        """The sampling policy the run used (defaults for fields an older run did not record)."""
        recorded = self.suite.get("timing") or {}
        return Timing(**{k: v for k, v in recorded.items() if k in Timing.__dataclass_fields__})


@dataclass(frozen=True)
class RunData:
    """Everything a reader needs from one run directory, typed."""

    path: Path
    metadata: RunMetadata
    cases: Any  # pandas DataFrame, one row per case (and repetition)
    samples: Any  # pandas DataFrame, one row per sample


class DiskFull(StridewiseError):
    """The run directory's filesystem is full: the run stopped whole and can be resumed."""


def _write_error(path: Path, exc: OSError) -> StridewiseError:
    if exc.errno in (errno.ENOSPC, errno.EDQUOT):
        return DiskFull(f"disk full while writing {path}")
    return RunStoreError(f"cannot write to {path}: {exc.strerror or exc}")


class RunStoreError(StridewiseError):
    """A run directory cannot be created, written or read."""


class RunStore:
    """Append-only writer and reader of one run directory."""

    def __init__(self, path: Path) -> None:
        self.path = Path(path)

    # -- writing --------------------------------------------------------------------------
    def create(self, suite_text: str, metadata: dict[str, Any]) -> None:
        """Make the directory and write the suite, metadata and the CSV headers (the current format,
        optional columns included)."""
        try:
            self.path.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise RunStoreError(f"results directory '{self.path}' is not writable: {exc.strerror}") from None
        self.check_writable()
        (self.path / SUITE).write_text(suite_text)
        self.write_metadata(metadata)
        for name, columns in ((SAMPLES, SAMPLE_COLUMNS), (CASES, CASE_COLUMNS)):
            target = self.path / name
            if not target.exists():
                with target.open("w", newline="") as fh:
                    csv.writer(fh).writerow(columns + list(OPTIONAL_COLUMNS))

    def check_writable(self) -> None:
        """Refuse, before anything is written, a run directory that cannot take new files."""
        probe = self.path / ".write-test"
        try:
            probe.write_text("")
            probe.unlink()
        except OSError as exc:
            raise RunStoreError(f"run directory '{self.path}' is not writable ({exc.strerror}); nothing was changed") from None

    def write_metadata(self, metadata: dict[str, Any]) -> None:
        tmp = self.path / (METADATA + ".tmp")
        try:
            tmp.write_text(json.dumps(metadata, indent=2, default=str))
            os.replace(tmp, self.path / METADATA)  # atomic: a reader never sees half a file
        except OSError as exc:
            tmp.unlink(missing_ok=True)  # the previous metadata.json stays whole
            raise _write_error(self.path, exc) from None

    def append(self, cases: list[dict[str, Any]], samples: list[dict[str, Any]]) -> None:
        """Append one finished group: samples first, then the case rows that mark it finished.
        All or nothing: on a write error (a full disk) both files are cut back to their sizes
        before the call, so no torn line and no sample of an unrecorded case stays behind."""
        sizes = {name: (self.path / name).stat().st_size for name in (SAMPLES, CASES)}
        try:
            for name, columns, rows in ((SAMPLES, SAMPLE_COLUMNS, samples), (CASES, CASE_COLUMNS, cases)):
                with (self.path / name).open("a", newline="") as fh:
                    writer = csv.DictWriter(fh, fieldnames=self._header(name, columns), extrasaction="ignore")
                    writer.writerows(rows)
                    fh.flush()
                    os.fsync(fh.fileno())
        except OSError as exc:
            for name, size in sizes.items():
                try:
                    os.truncate(self.path / name, size)
                except OSError:
                    pass
            raise _write_error(self.path, exc) from None

    def _header(self, name: str, columns: list[str]) -> list[str]:
        """The columns this run's file was created with (a resumed older run keeps its format)."""
        with (self.path / name).open(newline="") as fh:
            header = next(csv.reader(fh), None)
        return header or columns

    def write_summary(self, text: str) -> None:
        (self.path / SUMMARY).write_text(text)

    # -- reading --------------------------------------------------------------------------
    def metadata(self) -> dict[str, Any]:
        try:
            return json.loads((self.path / METADATA).read_text())
        except FileNotFoundError:
            raise RunStoreError(f"'{self.path}' is not a run directory: no {METADATA}") from None
        except json.JSONDecodeError as exc:
            raise RunStoreError(f"{self.path / METADATA} is not valid JSON: {exc}") from None

    def suite_text(self) -> str:
        try:
            return (self.path / SUITE).read_text()
        except FileNotFoundError:
            raise RunStoreError(f"'{self.path}' has no {SUITE}; it was not written by a sweep") from None

    def read_table(self, name: str, columns: list[str]) -> "Any":
        """Read a CSV of the run as a DataFrame, tolerating a truncated last line (with a warning)."""
        import pandas as pd

        target = self.path / name
        if not target.exists():
            raise RunStoreError(f"'{self.path}' has no {name}; it is not a run directory")
        text = target.read_text()
        if not text.strip():
            raise RunStoreError(f"{target} is empty; expected a header with columns {', '.join(columns[:4])}, ...")
        lines = text.splitlines(keepends=True)
        header = next(csv.reader([lines[0]]))
        missing = [c for c in columns if c not in header]
        if missing:
            more = f" and {len(missing) - 3} more" if len(missing) > 3 else ""
            raise RunStoreError(f"{target} is not a stridewise {name}: missing columns {', '.join(missing[:3])}{more}")
        if not text.endswith("\n") and len(lines) > 1:
            warnings.warn(f"{target}: last line is incomplete (interrupted write); it was ignored", stacklevel=2)
            lines = lines[:-1]
        frame = pd.read_csv(io.StringIO("".join(lines)), keep_default_na=False, na_values=[""])
        for column, default in OPTIONAL_COLUMNS.items():
            if column not in frame:
                frame[column] = default
        for column in BOOLEAN_COLUMNS:
            if column in frame:
                frame[column] = frame[column].map(_boolean).astype(object)
        return frame

    def read(self) -> RunData:
        """The run's metadata, cases and samples, read and typed once."""
        return RunData(self.path, RunMetadata(self.metadata()), self.cases(), self.samples())

    def cases(self) -> "Any":
        return self.read_table(CASES, CASE_COLUMNS)

    def samples(self) -> "Any":
        return self.read_table(SAMPLES, SAMPLE_COLUMNS)

    def finished_case_ids(self) -> set[str]:
        if not (self.path / CASES).exists():
            return set()
        return set(self.cases()["case_id"].astype(str))

    def finished_keys(self) -> set[tuple[str, int]]:
        """(case id, repetition) of every recorded case."""
        if not (self.path / CASES).exists():
            return set()
        cases = self.cases()
        return set(zip(cases["case_id"].astype(str), cases["repetition"].astype(int)))


def recorded_false(value: Any) -> bool:
    """True only for a recorded False, not for a missing value (a boolean cell of a frame)."""
    return value is not None and value == value and not value


def vector_flag(row: Any) -> str | None:
    """``scalar`` when the compiled code has no packed arithmetic; ``short-trip`` when it has, but
    the inner loop that ran was shorter than one vector; None when vectorised or not recorded."""
    code = row.get("vector_code")
    if recorded_false(code) or (not (code is not None and code == code) and recorded_false(row.get("vectorised"))):
        return "scalar"
    if recorded_false(row.get("vectorised")):
        return "short-trip"
    return None


def _boolean(value: Any) -> bool | None:
    """A boolean cell as written (True/False, or their text) or None when empty."""
    if value is True or value is False:
        return value
    text = str(value)
    return True if text == "True" else False if text == "False" else None
