"""Side-by-side comparison of two code versions in one run on one machine.

Each version's ``kernels/`` runs in its own spawned worker per thread count (so each imports its
own code and uses its own compile cache). Both place their state buffers in one shared set of
pages (``harness.shared_pages``). The parent asks for one sample at a time: per case, the two
versions back to back, the first alternating case by case and round by round, so the two samples
of a pair see the same machine state and a drift of the machine cancels in their ratio. Only one
worker computes at any moment; the other waits for its next command.
"""

from __future__ import annotations

import io
import multiprocessing
import os
import random
import shutil
import subprocess
import sys
import tarfile
import tempfile
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from harness import machine
from harness.metrics import case_statistics
from harness.cases import Group
from harness.plan import group_bytes, plan
from harness.shared_pages import arena_file, arena_size
from harness.store import RunStore
from harness.suite import Suite
from harness.worker import worker_environment
from kernels.errors import StridewiseError

VERSIONS = ("base", "head")
#: Round ids of the versus run are offset per thread count so every (case, round) is unique.
THREAD_ROUNDS = 1_000_000


class VersusError(StridewiseError):
    """A version cannot be found, checked out or run."""


@dataclass(frozen=True)
class Version:
    """One side of the comparison: where its ``kernels/`` was put, and what it is."""

    label: str  # base or head
    spec: str  # what the user gave: a git revision, a directory, or "working tree"
    path: Path  # a directory holding kernels/ (and any extra kernel modules beside it)
    commit: str | None


def _git(repo: Path, *args: str) -> bytes:
    try:
        proc = subprocess.run(["git", "-C", str(repo), *args], capture_output=True, check=False)
    except FileNotFoundError:
        raise VersusError("git is not installed; give the versions as directories instead of revisions") from None
    if proc.returncode:
        raise VersusError(f"git {' '.join(args)} failed: {proc.stderr.decode(errors='replace').strip().splitlines()[-1:]}")
    return proc.stdout


def materialise(label: str, spec: str | None, repo: Path, scratch: Path) -> Version:
    """Put a version's kernels/ (and top-level extra modules) into ``scratch/label``.

    ``spec`` is a directory holding ``kernels/``, a git revision of ``repo``, or None for the
    kernels this stridewise runs from (the working tree in a development install).
    """
    target = scratch / label
    target.mkdir(parents=True)
    if spec is None or Path(spec).is_dir():
        source = Path(spec) if spec is not None else Path(sys.modules["kernels"].__file__).resolve().parent.parent
        if not (source / "kernels" / "__init__.py").is_file():
            raise VersusError(f"directory '{source}' holds no kernels/ package; give a directory with kernels/ or a git revision")
        shutil.copytree(source / "kernels", target / "kernels", ignore=shutil.ignore_patterns("__pycache__"))
        for extra in source.glob("*.py"):  # extra kernel modules named by STRIDEWISE_KERNEL_MODULES
            shutil.copy2(extra, target / extra.name)
        return Version(label, spec or "working tree", target, None)
    commit = _git(repo, "rev-parse", "--verify", f"{spec}^{{commit}}").decode().strip()
    archive = _git(repo, "archive", "--format=tar", commit, "kernels")
    with tarfile.open(fileobj=io.BytesIO(archive)) as tar:
        tar.extractall(target, filter="data")
    return Version(label, spec, target, commit)


def _group_data(group: Group) -> dict[str, Any]:
    return {"kernel": group.kernel, "grid": group.grid, "dtype": group.dtype, "threads": group.threads,
            "cases": [asdict(c) for c in group.cases]}


class _Side:
    """The parent's handle on one version's worker."""

    def __init__(self, version: Version, threads: int, suite: Suite, flush_bytes: int) -> None:
        self.version = version
        self.conn, child = multiprocessing.Pipe()
        data = {"timing": asdict(suite.timing), "seed": suite.seed, "pin": suite.threads.pin,
                "kernel_options": [[k, [list(p) for p in v]] for k, v in suite.kernel_options], "flush_bytes": flush_bytes}
        env = {**os.environ, **worker_environment(threads, suite.threads.layer, suite.threads.pin)}
        # Both versions' workers get the same cores: on a shared machine the cores differ in what
        # else runs on them, and that would pass for a difference between the versions.
        cpus = ",".join(map(str, machine.usable_cpu_list()[:threads]))
        self.proc = subprocess.Popen(
            [sys.executable, "-P", "-m", "harness.versus_worker", str(version.path), str(child.fileno()), str(threads), cpus],
            pass_fds=(child.fileno(),), env=env, cwd=str(version.path),
        )
        child.close()
        self.conn.send(data)
        self.info = self.ask(None, "hello")

    def ask(self, message: tuple[Any, ...] | None, expect: str) -> Any:
        if message is not None:
            self.conn.send(message)
        while not self.conn.poll(1.0):
            if self.proc.poll() is not None:
                raise VersusError(f"the {self.version.label} worker ({self.version.spec}) exited with status {self.proc.returncode}")
        kind, payload = self.conn.recv()
        if kind == "crash":
            last = payload.strip().splitlines()[-1]
            raise VersusError(f"the {self.version.label} worker ({self.version.spec}) failed: {last}")
        if kind != expect:
            raise VersusError(f"the {self.version.label} worker answered {kind!r}, expected {expect!r}")
        return payload

    def close(self) -> None:
        if self.proc.poll() is None:
            try:
                self.conn.send(("stop",))
            except (BrokenPipeError, OSError):
                pass
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()


def run_versus(base: str, head: str | None, suite: Suite, suite_text: str, out: Path, rounds: int,
               repo: Path, quiet: bool = False) -> RunStore:
    """Measure both versions side by side; write a run directory with a ``version`` per row."""
    store = RunStore(out)
    if (out / "cases.csv").exists():
        raise VersusError(f"'{out}' already holds a run; give another --out")
    fingerprint = machine.fingerprint()
    usable = machine.usable_cores()
    counts = suite.thread_counts(usable)
    flush_bytes = suite.timing.flush_bytes or 2 * (machine.last_level_cache_bytes() or 64 << 20)
    with tempfile.TemporaryDirectory(prefix="stridewise-versus-") as tmp:
        versions = [materialise("base", base, repo, Path(tmp)), materialise("head", head, repo, Path(tmp))]
        groups = [g for g in plan(suite, counts) if g.repetition == 0]
        metadata: dict[str, Any] = {
            "mode": "side-by-side", "suite": suite.as_dict(), "suite_hash": suite.digest(), "fingerprint": fingerprint,
            "status": "running", "rounds": rounds, "order": "per case, the two versions back to back; the first alternates case by case and round by round",
            "versions": {v.label: {"spec": v.spec, "commit": v.commit} for v in versions}, "workers": {}, "groups": {},
        }
        store.create(suite_text, metadata)
        total = len(groups) * (suite.timing.warmup + rounds)
        done = 0
        for threads in counts:
            sides = []
            try:
                for v in versions:
                    sides.append(_Side(v, threads, suite, flush_bytes))
                    metadata["versions"][v.label]["kernels_source_hash"] = sides[-1].info["kernels_source_hash"]
                    metadata["workers"][f"{v.label}-{threads}"] = sides[-1].info
                for group in (g for g in groups if g.threads == threads):
                    _run_pair(group, sides, suite, rounds, store, metadata, threads)
                    done += suite.timing.warmup + rounds
                    if not quiet:
                        print(f"stridewise: versus {group.label}: {done}/{total} rounds", file=sys.stderr)
            finally:
                for side in sides:
                    side.close()
        metadata["status"] = "complete"
        store.write_metadata(metadata)
    return store


def _run_pair(group: Group, sides: list[_Side], suite: Suite, rounds: int, store: RunStore,
              metadata: dict[str, Any], threads: int) -> None:
    with arena_file(arena_size(group_bytes(group), len(group.cases)), "versus") as arena:
        _run_pair_in(group, sides, suite, rounds, store, metadata, threads, arena)


def _run_pair_in(group: Group, sides: list[_Side], suite: Suite, rounds: int, store: RunStore,
                 metadata: dict[str, Any], threads: int, arena: str) -> None:
    records: dict[str, list[dict[str, Any]]] = {}
    shared, digests = [], []
    for side in sides:  # one at a time: compiling one version never overlaps timing the other
        answer = side.ask(("prepare", _group_data(group), arena), "prepared")
        records[side.version.label] = answer["records"]
        shared.append(bool(answer.get("shared_pages")))
        digests.append(answer.get("arena_digest"))
    # Same buffers at the same places holding the same values after each version prepared them:
    # either version's samples leave the other's inputs as they were, so nothing is written back.
    restore = not (all(shared) and digests[0] == digests[1])
    ids = [c.id for c in group.cases]
    rng = random.Random(f"{suite.seed}:versus:{group.label}")
    samples: list[dict[str, Any]] = []
    by_id = {c.id: c for c in group.cases}
    for k in range(suite.timing.warmup + rounds):
        order = ids[:]
        rng.shuffle(order)
        phase = "warmup" if k < suite.timing.warmup else "measure"
        for position, case_id in enumerate(order):
            # The two versions' samples of a case are taken back to back, milliseconds apart, so
            # they see the same machine; which goes first alternates case by case and round by round.
            pair = sides if (k + position) % 2 == 0 else sides[::-1]
            for slot, side in enumerate(pair):
                for cid, rnd, _, ns in side.ask(("sample", threads * THREAD_ROUNDS + k, case_id, restore), "samples"):
                    samples.append({**by_id[cid].as_dict(), "round": rnd, "position": 2 * position + slot,
                                    "phase": phase, "ns": ns, "version": side.version.label})
    measured: dict[tuple[str, str], list[int]] = {}
    for s in samples:
        if s["phase"] == "measure":
            measured.setdefault((s["case_id"], s["version"]), []).append(s["ns"])
    cases = []
    for label, recs in records.items():
        for rec in recs:
            row = case_statistics(rec, measured.get((rec["case_id"], label), []), None, 0.0)
            row["version"] = label
            cases.append(row)
    store.append(cases, samples)
    metadata["groups"][group.label] = {"rounds": rounds, "warmup": suite.timing.warmup, "shared_pages": all(shared),
                                        "inputs_restored": restore}
    store.write_metadata(metadata)
