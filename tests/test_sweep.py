"""The sweep end to end: real worker processes, real timing, interruption and resume, bad input."""

from __future__ import annotations

import json
import os
import re
import shutil
import random
import signal
import subprocess
import sys
import time
import timeit
from pathlib import Path

import numba
import numpy as np
import pandas as pd
import pytest

from harness.plan import plan
from harness.store import RunStore
from harness.suite import Timing, load_suite
from harness.timing import sample_rounds
from kernels.grid import Extents
from kernels.registry import get_kernel

ROOT = Path(__file__).resolve().parent.parent

SMALL_SUITE = """
name = "small"
seed = 3
[grid]
sizes = ["var=2,z=8,y=16,x=16"]
dtypes = ["float64"]
[kernels]
select = {kernels}
[layouts]
specs = ["var.z.y.x", "y.x.z.var", "y/4.x/4.var.z.y%4.x%4"]
[threads]
counts = [1]
[timing]
warmup = 1
min_repeats = {repeats}
min_seconds = 0.0
roof = false
"""


def _suite(tmp_path: Path, kernels: str = '["levelcoef", "laplacian"]', repeats: int = 5, extra: str = "") -> Path:
    path = tmp_path / "suite.toml"
    path.write_text(SMALL_SUITE.format(kernels=kernels, repeats=repeats) + extra)
    return path


def _sweep(*args: str, env: dict[str, str] | None = None, **kw) -> subprocess.CompletedProcess[str]:
    full_env = {**os.environ, **(env or {})}
    return subprocess.run(
        [sys.executable, "-m", "harness", "sweep", "--quiet", *args], capture_output=True, text=True, cwd=ROOT, env=full_env, **kw
    )


@pytest.mark.slow
def test_smoke_sweep_writes_a_complete_run(tmp_path: Path) -> None:
    out = tmp_path / "run"
    proc = _sweep("--smoke", "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    store = RunStore(out)
    cases, samples, meta = store.cases(), store.samples(), store.metadata()
    assert meta["status"] == "complete"
    assert meta["fingerprint"]["machine_id"] and meta["fingerprint"]["kernels_source_hash"]
    assert meta["workers"]["1"]["threading_layer"] and "roof" in meta["workers"]["1"]
    expected = {c.id for g in plan(load_suite("smoke"), (1,)) for c in g.cases}
    assert expected == {c for c in cases["case_id"] if not c.startswith("triad|")}
    assert cases["case_id"].is_unique
    assert (cases["status"] == "ok").all()
    measured = samples[samples["phase"] == "measure"].groupby("case_id").size()
    assert (measured >= 5).all()
    # Interleaving: within a round every case appears once, and the order changes between rounds.
    one_group = samples[(samples["kernel"] == "laplacian") & (samples["phase"] == "measure")]
    per_round = one_group.groupby("round")["case_id"].apply(list)
    assert all(len(set(r)) == len(r) for r in per_round)
    assert len({tuple(r) for r in per_round}) > 1
    assert (out / "summary.md").read_text().startswith("# Sweep `smoke`: complete")


@pytest.mark.slow
def test_wrong_schedule_is_recorded_failed_and_never_timed(tmp_path: Path) -> None:
    out = tmp_path / "run"
    proc = _sweep(str(_suite(tmp_path, '["broken"]')), "--out", str(out), env={"STRIDEWISE_KERNEL_MODULES": "tests.broken_kernel"})
    store = RunStore(out)
    cases, samples = store.cases(), store.samples()
    wrong = cases[cases["schedule"] == "wrong"]
    assert len(wrong) == 6 and (wrong["status"] == "failed").all()
    assert wrong["message"].str.contains("exceeds tolerance").all()
    assert not samples["schedule"].eq("wrong").any()
    assert samples["schedule"].eq("block").any()
    assert proc.returncode == 10 + 6  # 10 + number of failed cases
    assert "Failed cases" in (out / "summary.md").read_text()


@pytest.mark.slow
def test_interrupt_then_resume_completes_the_same_case_set(tmp_path: Path) -> None:
    # Three kernels: enough groups to stop between them, and the
    # resumed sweep compiles only their specialisations (the CI run starts from a cold cache).
    suite = _suite(tmp_path, '["levelcoef", "laplacian", "advection"]', repeats=40)
    out = tmp_path / "run"
    proc = subprocess.Popen(
        [sys.executable, "-m", "harness", "sweep", "--quiet", str(suite), "--out", str(out)],
        cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    cases_csv = out / "cases.csv"
    deadline = time.time() + 120
    while time.time() < deadline:  # wait for the first finished group
        if cases_csv.exists() and len(cases_csv.read_text().splitlines()) > 1:
            break
        time.sleep(0.05)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    store = RunStore(out)
    assert store.metadata()["status"] == "interrupted"
    before_cases = store.cases()
    before_samples = store.samples()
    assert 0 < len(before_cases)
    expected = {c.id for g in plan(load_suite(str(suite)), (1,)) for c in g.cases}
    finished = {c for c in before_cases["case_id"] if not c.startswith("triad|")}
    assert finished < expected  # stopped half-way
    resumed = _sweep("--resume", str(out))
    assert resumed.returncode == 0, resumed.stderr
    after_cases, after_samples = store.cases(), store.samples()
    assert {c for c in after_cases["case_id"] if not c.startswith("triad|")} == expected
    assert after_cases["case_id"].is_unique
    # Nothing finished before the interrupt was lost or rewritten.
    kept = after_samples[after_samples["case_id"].isin(before_cases["case_id"])]
    pd.testing.assert_frame_equal(kept.reset_index(drop=True), before_samples.reset_index(drop=True))
    assert store.metadata()["status"] == "complete"


def test_harness_median_agrees_with_timeit() -> None:
    """External reference for the timer: the standard library's timeit, same call, same process.

    Source: Python's timeit module (the standard library), default timer perf_counter.

    One case, so every sample sees the same warm cache in both methods; medians of 41 samples of
    a ~0.5 ms call on a noisy shared 2-core machine differ by a few percent run to run, so 25 %
    either way separates a broken timer (wrong unit, missing call, timing the wrong thing: errors
    of 2x or more) from noise without flaking.
    """
    numba.set_num_threads(1)
    kernel = get_kernel("laplacian")
    problem = kernel.make_problem("var.z.y.x", Extents(4, 16, 64, 64))
    call = kernel.bind(problem, "block")
    call()
    once = Timing(warmup=0, min_repeats=1, min_seconds=0.0)
    ours, theirs = [], []
    for _ in range(41):  # interleaved, so both timers see the same machine state
        ours.append(sample_rounds({"c": call}, once, random.Random(0), lambda: False).rows[0][4])
        theirs.append(timeit.repeat(call, number=1, repeat=1)[0] * 1e9)
    assert 0.75 < np.median(ours) / np.median(theirs) < 1 / 0.75, (np.median(ours), np.median(theirs))


@pytest.mark.parametrize(
    "text, message",
    [
        ("name = 'x'\n[grid\nsizes = 1", "line 2"),
        ("[timing]\nmin_repeat = 3\n", "did you mean 'min_repeats'"),
        ("[kernels]\nselect = ['laplace']\n", "did you mean 'laplacian'"),
        ("[threads]\ncounts = [0, 2]\n", "threads.counts must be positive"),
        ("[threads]\ncounts = [-1]\n", "threads.counts must be positive"),
        ("[layouts]\nspecs = ['y/32.x/4.var.z.y%32.x%4']\n[grid]\nsizes=['var=1,z=2,y=16,x=16']\n", "tile size 32 exceeds"),
        ("[layouts]\nspecs = ['var.z.q.x']\n", "'q'"),
        ("[layouts]\nfamilies = [{family = 'paddings', pads = ['a']}]\n", "pads item must be int"),
        ("[layouts]\nfamilies = [{family = 'tilings', tiles = [48]}]\n", "tiles item must be str"),
        ("[layouts]\nfamilies = [{family = 'spirals'}]\n", "family must be one of"),
        ("[conversions]\nauto = -1\n", "conversions.auto must be >= 0"),
        ("[timing]\nwarmup = 'two'\n", "timing.warmup must be int"),
        ("[kernels]\nselect = ['laplacian']\nschedules = ['diagonal']\n", "unknown schedule 'diagonal'"),
        ("[grid]\nsizes = ['var=4000,z=4000,y=4000,x=4000']\n[layouts]\nspecs=['var.z.y.x']\n", "GiB"),
        ("[kernels]\nselect = ['laplacian', 'varcoef']\noptions = {laplacian = {strip_width = 64}}\n",
         "kernel 'laplacian' has no schedule with a strip width; kernels of this suite that take one: varcoef"),
    ],
)
def test_bad_suites_are_one_line_errors_exit_2(tmp_path: Path, text: str, message: str,
                                              capsys: pytest.CaptureFixture[str]) -> None:
    """In process (the command line's main), since every one of these fails before a worker starts."""
    from harness.commands import main

    path = tmp_path / "bad.toml"
    path.write_text(text)
    out = tmp_path / "run"
    status = main(["sweep", "--quiet", str(path), "--out", str(out)])
    err = capsys.readouterr().err
    assert status == 2, err
    assert message in err and err.count("\n") == 1 and "Traceback" not in err
    assert not out.exists()  # nothing written half-way


def test_unwritable_results_directory(tmp_path: Path) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("not a directory")
    proc = _sweep("--smoke", "--out", str(blocker / "run"))
    assert proc.returncode == 2 and "not writable" in proc.stderr and "Traceback" not in proc.stderr


@pytest.mark.slow
def test_resume_refuses_a_changed_suite(tmp_path: Path) -> None:
    out = tmp_path / "run"
    (tmp_path / "first").mkdir()
    first = _suite(tmp_path / "first", '["laplacian"]', repeats=2)  # the smallest real run
    assert _sweep(str(first), "--out", str(out)).returncode == 0
    other = _suite(tmp_path)
    proc = _sweep(str(other), "--resume", str(out))
    assert proc.returncode == 2 and "not the given" in proc.stderr
    proc = _sweep(str(first), "--out", str(out))
    assert proc.returncode == 2 and "already holds a run" in proc.stderr


def test_prepare_hook_runs_outside_the_timed_region_before_each_sample() -> None:
    calls: list[str] = []
    slow_prepare = {"a": lambda: (calls.append("prep"), time.sleep(0.01))}
    policy = Timing(warmup=0, min_repeats=3, min_seconds=0.0)
    out = sample_rounds({"a": lambda: calls.append("run"), "b": lambda: None}, policy, random.Random(0), lambda: False,
                        prepare=slow_prepare)
    assert calls == ["prep", "run"] * 3
    assert max(r[4] for r in out.rows if r[0] == "a") < 5_000_000  # the 10 ms restore was not timed


@pytest.mark.slow
def test_more_threads_than_cores_warns_then_runs(tmp_path: Path) -> None:
    from harness.machine import usable_cores

    too_many = usable_cores() + 1
    path = _suite(tmp_path, '["laplacian"]', repeats=3, extra="")
    path.write_text(path.read_text().replace("counts = [1]", f"counts = [{too_many}]"))
    out = tmp_path / "run"
    proc = _sweep(str(path), "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    assert f"{too_many} threads exceed" in proc.stderr
    assert RunStore(out).metadata()["workers"][str(too_many)]["numba_num_threads"] == too_many
    # Not only a warning: every case of the group is flagged, in cases.csv and the summary.
    cases = RunStore(out).cases()
    assert cases["oversubscribed"].eq(True).all()
    assert "oversubscribed" in (out / "summary.md").read_text()


@pytest.mark.slow
def test_automatic_conversions_price_layout_switching(tmp_path: Path) -> None:
    extra = "[conversions]\nauto = 1\n[mix]\nlevelcoef = 1\nlaplacian = 1\n"
    out = tmp_path / "run"
    proc = _sweep(str(_suite(tmp_path, extra=extra)), "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    cases = RunStore(out).cases()
    conversions = cases[cases["kernel"] == "convert"]
    assert (conversions["status"] == "ok").all()
    assert (conversions["message"].fillna("") == "").all()  # states this small are not planned (kernels.conversion_plan)
    assert cases["case_id"].is_unique
    summary = (out / "summary.md").read_text()
    assert "## Kernel mix" in summary
    assert "switching costs" in summary  # every hop between per-kernel winners was measured
    winners = re.search(r"Best layout per kernel: levelcoef: `(\S+)`, laplacian: `(\S+)`", summary)
    assert winners, summary
    if winners[1] != winners[2]:  # on a tiny grid both kernels may well pick the same layout
        assert {f"{winners[1]}->{winners[2]}", f"{winners[2]}->{winners[1]}"} <= set(conversions["layout"])


@pytest.mark.slow
def test_repeat_runs_every_group_again_and_reports_agreement(tmp_path: Path) -> None:
    out = tmp_path / "run"
    proc = _sweep(str(_suite(tmp_path, '["laplacian"]', repeats=6)), "--repeat", "2", "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    store = RunStore(out)
    cases, samples = store.cases(), store.samples()
    kernels = cases[cases["kernel"] != "triad"]
    assert sorted(kernels["repetition"].unique()) == [0, 1]
    assert kernels.groupby("case_id").size().eq(2).all()  # one row per case and repetition
    rounds = samples.groupby("repetition")["round"].agg(["min", "max"])
    assert rounds.loc[0, "max"] < rounds.loc[1, "min"]  # disjoint round ids: pairs never cross runs
    summary = (out / "summary.md").read_text()
    assert "## Run-to-run agreement" in summary and "| laplacian" in summary.split("## Run-to-run agreement")[1]
    assert RunStore(out).metadata()["suite"]["timing"]["repetitions"] == 2
    # Several run directories of one machine pool as blocks too: 2 repetitions + 1 run = 3 blocks.
    second = tmp_path / "second"
    proc = _sweep(str(_suite(tmp_path, '["laplacian"]', repeats=6)), "--out", str(second))
    assert proc.returncode == 0, proc.stderr
    rank = lambda *runs: subprocess.run([sys.executable, "-m", "harness", "rank", *map(str, runs)],  # noqa: E731
                                        capture_output=True, text=True, cwd=ROOT)
    proc = rank(out, second)
    assert proc.returncode == 0, proc.stderr
    assert "| 3 " in proc.stdout.split("## Run-to-run agreement")[1]
    # The same run twice, or a copy of it, would count its samples twice: one line, exit 2.
    copy = tmp_path / "copy"
    shutil.copytree(second, copy)
    for runs in ((second, second), (second, copy)):
        proc = rank(*runs)
        assert proc.returncode == 2 and "twice" in proc.stderr and "Traceback" not in proc.stderr, proc.stderr
    # Two machines: the copy relabelled as another machine (test-only edit of its metadata).
    meta = json.loads((copy / "metadata.json").read_text())
    meta["fingerprint"]["machine_id"] = "othermachine"
    (copy / "metadata.json").write_text(json.dumps(meta))
    proc = rank(second, copy)
    assert proc.returncode == 0, proc.stderr
    assert "machine othermachine" in proc.stdout and "Traceback" not in proc.stderr


@pytest.mark.parametrize("args, message", [(["--repeat", "0"], "--repeat must be a positive"),
                                           (["--repeat", "2", "--resume", "somewhere"], "cannot change a run being resumed")])
def test_bad_repeat_is_a_one_line_error(args: list[str], message: str) -> None:
    proc = _sweep(*args)
    assert proc.returncode == 2 and message in proc.stderr and proc.stderr.count("\n") == 1


@pytest.mark.parametrize("argv, message", [
    (["layouts", "--grid", "var=2,z=8,y=16,x=1000000000000000000000000000000"], "above the largest supported extent"),
    (["layouts", "--grid", "var=200000,z=80000,y=16000,x=1000000"], "more than 281474976710656 points"),
    (["roof", "--max-bytes", "1KiB"], "--max-bytes must be between 16KiB"),
    (["sweep", "SUITE:\xff\xfename = 'x'\n"], "is not UTF-8 text"),
    (["sweep", "SUITE:name = 'a/b'\n"], "cannot name a run directory"),
    (["sweep", 'SUITE:name = "a\\u0000b"\n'], "cannot name a run directory"),  # a NUL, by TOML's escape
    (["sweep", "SUITE:[timing]\nroof_max_bytes = 0\n"], "timing.roof_max_bytes must be between"),
])
def test_hostile_input_is_a_one_line_error(tmp_path: Path, argv: list[str], message: str,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    """Inputs that once ended in a traceback (or a hang) give one line and exit 2."""
    from harness.commands import main

    if argv[-1].startswith("SUITE:"):
        suite = tmp_path / "hostile.toml"
        suite.write_bytes(argv[-1][len("SUITE:"):].encode("latin-1"))
        argv = argv[:-1] + [str(suite), "--out", str(tmp_path / "run")]
    status = main(argv)
    err = capsys.readouterr().err
    assert status == 2 and message in err and err.count("\n") == 1 and "Traceback" not in err, err


def test_resume_of_a_run_that_cannot_be_written_changes_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                                 capsys: pytest.CaptureFixture[str]) -> None:
    """A read-only run directory (simulated at the write call: root ignores permission bits)."""
    from harness.commands import main

    run = tmp_path / "run"
    run.mkdir()
    (run / "metadata.json").write_text("{}")
    original = Path.write_text

    def refuse(self: Path, *args: object, **kwargs: object) -> int:
        if self.parent == run:
            raise OSError(30, "Read-only file system")
        return original(self, *args, **kwargs)  # type: ignore[arg-type]

    monkeypatch.setattr(Path, "write_text", refuse)
    assert main(["sweep", "--quiet", "--resume", str(run)]) == 2
    err = capsys.readouterr().err
    assert "is not writable (Read-only file system); nothing was changed" in err and err.count("\n") == 1
    assert sorted(p.name for p in run.iterdir()) == ["metadata.json"]


def test_a_roof_curve_larger_than_memory_is_refused(monkeypatch: pytest.MonkeyPatch) -> None:
    from harness import machine
    from harness.suite import SuiteError, parse_suite
    from harness.sweep import check_memory

    monkeypatch.setattr(machine, "available_memory_bytes", lambda: 4 << 30)
    suite = parse_suite({"kernels": {"select": ["laplacian"]}, "timing": {"roof_max_bytes": 8 << 30}})
    with pytest.raises(SuiteError, match="roof_max_bytes asks for a 8.0 GiB triad.*of the 4.0 GiB available"):
        check_memory([], suite)
    check_memory([], parse_suite({"kernels": {"select": ["laplacian"]}, "timing": {"roof_max_bytes": 1 << 30}}))
    check_memory([], parse_suite({"kernels": {"select": ["laplacian"]}, "timing": {"roof_max_bytes": 8 << 30, "roof": False}}))


def test_a_strip_wider_than_l2_is_warned_about_and_a_narrower_one_is_not() -> None:
    """Closed form: varcoef's strip of 128 columns at 137 levels keeps a, b, c, d, x and c' live,
    6 x 137 x 128 x 8 B = 822 KiB, above a 512 KiB L2; a strip of 32 (206 KiB) and one column fit."""
    import tomllib

    from harness.plan import plan, working_set_warnings
    from harness.suite import parse_suite

    text = "[grid]\nsizes = ['var=2,z=137,y=8,x=8']\n[kernels]\nselect = ['varcoef', 'laplacian']\n[threads]\ncounts = [1]\n"
    suite = parse_suite(tomllib.loads(text), "l2")
    lines = working_set_warnings(plan(suite, [1]), suite, 512 * 1024)
    assert len(lines) == 1 and lines[0].startswith("varcoef/strip") and "822 KiB" in lines[0]
    narrow = parse_suite(tomllib.loads(text + "[kernels.options]\nvarcoef = { strip_width = 32 }\n"), "l2")
    assert working_set_warnings(plan(narrow, [1]), narrow, 512 * 1024) == []
    assert working_set_warnings(plan(suite, [1]), suite, None) == []


@pytest.mark.slow
def test_a_full_disk_stops_the_sweep_whole_and_resume_completes_it(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                                   capsys: pytest.CaptureFixture[str]) -> None:
    """A filesystem-full error injected at the store's write (the third fsync: the second group's
    samples): the sweep stops with one line and exit 75, the first group is recorded whole, no
    torn line or orphan sample stays behind, and --resume finishes the run."""
    import errno

    from harness.commands import main

    suite = _suite(tmp_path, '["levelcoef", "laplacian"]', repeats=3)
    out = tmp_path / "run"
    real_fsync, calls = os.fsync, []

    def full_disk(fd: int) -> None:
        calls.append(fd)
        if len(calls) == 3:
            raise OSError(errno.ENOSPC, "No space left on device")
        real_fsync(fd)

    monkeypatch.setattr(os, "fsync", full_disk)
    code = main(["sweep", str(suite), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 75 and "disk full" in err and "--resume" in err and "Traceback" not in err, err
    store = RunStore(out)
    cases, samples = store.cases(), store.samples()
    assert set(cases["kernel"]) - {"triad"} == {"levelcoef"}  # the first group, whole
    assert set(samples["case_id"]) <= set(cases["case_id"])  # no sample of an unrecorded case
    assert (out / "samples.csv").read_text().endswith("\n") and (out / "cases.csv").read_text().endswith("\n")
    assert store.metadata()["status"] == "stopped: disk full"
    monkeypatch.setattr(os, "fsync", real_fsync)
    assert main(["sweep", "--resume", str(out), "--quiet"]) == 0
    done = RunStore(out).cases()
    assert set(done["kernel"]) - {"triad"} == {"levelcoef", "laplacian"} and done["case_id"].is_unique
    assert RunStore(out).samples().groupby("case_id").size().max() == 4  # 1 warm-up + 3 measured, none twice


def _session_members(sid: int) -> list[str]:
    out = subprocess.run(["ps", "-eo", "pid=,sid=,args="], capture_output=True, text=True).stdout
    return [line.strip() for line in out.splitlines() if line.split()[1] == str(sid)]


@pytest.mark.slow
@pytest.mark.parametrize("sig, status", [(signal.SIGINT, 130), (signal.SIGTERM, 143), (signal.SIGKILL, -9)])
def test_no_process_outlives_a_stopped_sweep(tmp_path: Path, sig: signal.Signals, status: int) -> None:
    """The sweep runs in a session of its own; once its worker is up, the signal goes to the
    whole process group (SIGINT, SIGTERM: as a terminal's Ctrl-C would) or to the parent alone
    (SIGKILL: the worker must notice its parent is gone). Then no process of the session remains."""
    out = tmp_path / "run"
    proc = subprocess.Popen([sys.executable, "-m", "harness", "sweep", "--quiet", str(_suite(tmp_path, '["laplacian"]', 40)),
                             "--out", str(out)], cwd=ROOT, stderr=subprocess.PIPE, text=True, start_new_session=True)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and '"workers": {}' in ((out / "metadata.json").read_text() if (out / "metadata.json").exists() else '"workers": {}'):
        time.sleep(0.2)  # until the worker has reported itself
    if sig == signal.SIGKILL:
        os.kill(proc.pid, sig)
    else:
        os.killpg(proc.pid, sig)
    assert proc.wait(120) == status
    err = proc.stderr.read()
    assert "Traceback" not in err, err
    deadline = time.monotonic() + 10
    while _session_members(proc.pid) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert _session_members(proc.pid) == []


@pytest.mark.slow
def test_strip_widths_to_try_are_schedule_variants_chosen_per_layout(tmp_path: Path) -> None:
    """A list of strip widths becomes one schedule variant per width (strip@W); each runs with its
    width, is validated and timed like any schedule, and the ranking picks each layout's best."""
    from harness.prepare import schedule_with_options

    extra = "[kernels.options.levelcoef]\nstrip_width = [4, 64]\n"
    path = _suite(tmp_path, '["levelcoef"]', repeats=6, extra=extra)
    suite = load_suite(str(path))
    (group,) = plan(suite, (1,))
    assert {c.schedule for c in group.cases} == {"column", "pairs", "quads", "strip@4", "strip@64"}
    kernel = get_kernel("levelcoef")
    assert dict(schedule_with_options(kernel, "strip@4", dict(suite.kernel_options)).params)["width"] == 4
    assert schedule_with_options(kernel, "strip@4", {}).name == "strip"  # the kernel sees its own schedule
    out = tmp_path / "run"
    proc = _sweep(str(path), "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    cases = RunStore(out).cases()
    variants = cases[cases["schedule"].str.startswith("strip@")]
    assert len(variants) == 2 * 3 * 2 and (variants["status"] == "ok").all()  # 2 widths x 3 layouts x 2 builds
    # On var.z.y.x the strip sweeps y.x = 256 columns: width 4 and 64 run different trip counts.
    trips = variants[(variants["layout"] == "var.z.y.x") & (variants["build"] == "parallel")].set_index("schedule")["vector_trip"]
    assert trips.to_dict() == {"strip@4": 4, "strip@64": 64}


@pytest.mark.parametrize("widths, message", [("[]", "distinct widths"), ("[8, 8]", "distinct widths"),
                                             ("[8, 0]", "must be positive"), ('[8, "wide"]', "must be int")])
def test_bad_strip_width_lists_are_one_line_errors(tmp_path: Path, widths: str, message: str) -> None:
    from harness.suite import SuiteError

    path = _suite(tmp_path, '["levelcoef"]', extra=f"[kernels.options.levelcoef]\nstrip_width = {widths}\n")
    with pytest.raises(SuiteError, match=message):
        load_suite(str(path))


def test_a_whole_step_is_timed_with_its_stages_and_set_beside_them(tmp_path: Path) -> None:
    """A kernel with stages: each stage is a case of its group (validated, timed in the same rounds),
    left out of the ranking, and the report sets the whole beside the sum of its stages."""
    path = tmp_path / "suite.toml"
    text = SMALL_SUITE.format(kernels='["step"]', repeats=6).replace("var=2,", "var=3,")
    path.write_text(text.replace('select = ["step"]', 'select = ["step"]\nschedules = ["rows"]'))
    out = tmp_path / "run"
    proc = _sweep(str(path), "--out", str(out))
    assert proc.returncode == 0, proc.stderr
    cases = RunStore(out).cases()
    stages = cases[cases["kernel"].str.startswith("step.")]
    assert len(stages) == 3 * 3 and (stages["status"] == "ok").all()  # 3 stages x 3 layouts
    assert set(stages["kernel"]) == {"step.hyperdiffusion", "step.varcoef", "step.saturation"}
    assert (stages["max_rel_error"] <= stages["tolerance"]).all()
    rank = subprocess.run([sys.executable, "-m", "harness", "rank", str(out)], capture_output=True, text=True, cwd=ROOT)
    assert rank.returncode == 0, rank.stderr
    ranked = rank.stdout.split("## Whole steps beside their stages")
    assert len(ranked) == 2 and "step." not in ranked[0]  # stages are never ranked as layouts
    assert ranked[1].count("| step ") == 3  # one row per layout


def test_conversion_cases_are_planned_and_say_what_was_chosen() -> None:
    """A conversion between states of at least PLAN_MIN_BYTES is planned before it is timed; the
    record names the choice, sums the candidates' compile times and passes the bit-exact check."""
    from harness.cases import ARROW, CONVERT, CaseKey, Group
    from harness.prepare import Context, Prepared, prepare_conversions
    from kernels.conversion_plan import PLAN_MIN_BYTES

    grid = "var=2,z=16,y=128,x=128"  # 4 MiB per state in float64
    assert 2 * 16 * 128 * 128 * 8 >= PLAN_MIN_BYTES
    cases = tuple(CaseKey(CONVERT, "rows", "parallel", f"{a}{ARROW}{b}", "float64", grid, 1)
                  for a, b in [("var.z.y.x", "var.y.x.z"), ("var.z.y.x", "y/8.x/16.var.z.y%8.x%16")])
    out = Prepared()
    prepare_conversions(Group(CONVERT, grid, "float64", 1, cases), Context(0, False, {}, False, {}), out)
    for case in cases:
        rec = out.records[case.id]
        assert rec["status"] == "ok", rec["message"]
        assert re.match(r"(block width (8|16|32|64)|whole source run|numpy strided copy|row copy) \(planning runs, "
                        r"time relative to it: ", rec["message"]), rec["message"]
        assert rec["compile_s"] is None or rec["compile_s"] >= 0
        assert case.id in out.calls
    assert "numpy" in out.records[cases[0].id]["message"] and "numpy" not in out.records[cases[1].id]["message"]
