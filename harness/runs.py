"""Run directories read for ranking: cases and measured samples of one or more runs, by machine.

Round ids are made unique across runs and each sample gets a ``block`` (one per run and
repetition), so repeated runs pool as blocks of rounds. A merged run directory (``stridewise
merge``) carries a ``machine_id`` per case and sample and each machine's metadata.
"""

from __future__ import annotations

import sys
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from harness.store import RunMetadata, RunStore, RunStoreError
from kernels.errors import StridewiseError

#: Round ids of the n-th run directory are offset by n times this (an even number, so the
#: parity that splits choosing from reporting rounds is kept); blocks likewise.
RUN_ROUND_OFFSET = 10_000_000
RUN_BLOCK_OFFSET = 10_000


@dataclass
class Runs:
    """Cases and measured samples of one or more run directories, labelled by machine."""

    cases: pd.DataFrame
    samples: pd.DataFrame
    metadata: dict[str, RunMetadata]  # machine id -> metadata (the first run seen)
    run_metadata: dict[str, list[RunMetadata]] = field(default_factory=dict)  # machine id -> every run's

    def looks(self, machine: str) -> int:
        """The most adaptive looks any run of ``machine`` may have taken (the ranking's alpha divides by it)."""
        return max(md.timing().max_looks() for md in self.run_metadata.get(machine) or [self.metadata[machine]])

    def mix(self, machine: str) -> dict[str, float]:
        """Kernel weights of ``machine``'s runs, from their own suites; runs that disagree are an error."""
        found: dict[tuple[tuple[str, float], ...], tuple[str, dict[str, float]]] = {}
        for md in self.run_metadata.get(machine) or [self.metadata[machine]]:
            weights = {k: float(v) for k, v in md.mix}  # in the suite's order
            found.setdefault(tuple(sorted(weights.items())), (md.suite_name, weights))
        if len(found) > 1:
            described = "; ".join(f"suite {name!r}: " + (", ".join(f"{k}={v:g}" for k, v in w.items()) or "none")
                                  for name, w in found.values())
            raise StridewiseError(f"the runs of machine {machine} weight the kernel mix differently ({described}); "
                                  "give one with --mix, e.g. --mix varcoef=1,advection=2")
        return next(iter(found.values()))[1] if found else {}


def load_runs(paths: list[str]) -> Runs:
    """Read run directories. Round ids are made unique across runs and each sample gets a
    ``block`` (one per run and repetition), so repeated runs pool as blocks of rounds."""
    seen: dict[Path, str] = {}
    for path in paths:
        real = Path(path).resolve()
        if real in seen:
            raise StridewiseError(f"run directory {path} is given twice (as {seen[real]} too): pooling a run with "
                                  "itself would count its samples twice")
        seen[real] = path
    cases_list, samples_list, meta = [], [], {}
    every: dict[str, list[RunMetadata]] = {}
    started: dict[tuple[str, str], str] = {}
    for index, path in enumerate(paths):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            run = RunStore(Path(path)).read()
        md, cases, samples = run.metadata, run.cases, run.samples
        machine = md.machine_id or Path(path).name
        for w in caught:
            print(f"stridewise: warning: {w.message}", file=sys.stderr)
        if cases.empty:
            raise RunStoreError(f"{path} holds no cases")
        identity = (machine, str(md.raw.get("started", "")))
        if identity[1] and identity in started:
            raise StridewiseError(f"{path} and {started[identity]} are copies of one run (same machine, started "
                                  f"{identity[1]}): pooling them would count its samples twice")
        started[identity] = path
        # Repetitions of a group write one row per case each; the first describes the case.
        cases = cases.assign(machine=machine_ids(cases, machine), run=str(path)).drop_duplicates(["machine", "case_id"])
        repetition = samples["repetition"] if "repetition" in samples else 0
        samples = samples.assign(machine=machine_ids(samples, machine), run=str(path),
                                 round=samples["round"] + index * RUN_ROUND_OFFSET, block=index * RUN_BLOCK_OFFSET + repetition)
        cases_list.append(cases)
        samples_list.append(samples[samples["phase"] == "measure"])
        for m in dict.fromkeys(cases["machine"]):
            seen_by = md.for_machine(m)
            meta.setdefault(m, seen_by)
            every.setdefault(m, []).append(seen_by)
    return Runs(pd.concat(cases_list, ignore_index=True), pd.concat(samples_list, ignore_index=True), meta, every)


def machine_ids(frame: pd.DataFrame, default: str) -> pd.Series:
    """Each row's machine: its ``machine_id`` (a merged run) or the run's own."""
    if "machine_id" not in frame:
        return pd.Series(default, index=frame.index)
    ids = frame["machine_id"].astype("string").fillna("").astype(str)
    return ids.where(ids != "", default)
