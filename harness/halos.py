"""Halo exchange per layout under MPI: pack, exchange and unpack of four faces, timed apart.

Every rank of a periodic 2-D process grid holds a subdomain (its interior plus a halo) in each
layout in turn. Before timing, one exchange per layout is checked: every halo face must equal
the neighbour's interior, computed from a closed-form global field at the global indices. Then
rounds run the layouts in a seeded shuffled order (the same on every rank); each part starts
after a barrier, and a round's figure for a part is the slowest rank's (the exchange is done
when the last rank is). Intervals are percentile bootstraps over rounds, paired within a round.
"""

from __future__ import annotations

import random
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from kernels.grid import Extents

PARTS = ("pack", "exchange", "unpack")
TOTAL = "total"


@dataclass(frozen=True)
class HaloOptions:
    interior: Extents  # per rank, halo excluded
    halo: int
    layouts: tuple[str, ...]
    dtype: str = "float64"
    rounds: int = 24
    warmup: int = 2
    seed: int = 0


def global_values(v: np.ndarray, k: np.ndarray, gj: np.ndarray, gi: np.ndarray) -> np.ndarray:
    """A closed-form field of global indices: distinct per cell, computed by any rank for any cell."""
    return v + 0.01 * k + np.sin(0.37 * gj + 0.11 * v) * np.cos(0.23 * gi - 0.07 * k) + 1e-3 * ((gj * 131 + gi * 71) % 97)


def local_expected(options: HaloOptions, dims: tuple[int, int], coords: tuple[int, int]) -> np.ndarray:
    """A rank's logical array after the exchange: interior and faces from ``global_values`` at the
    (periodically wrapped) global indices, corners NaN (faces only are exchanged)."""
    e, h = options.interior, options.halo
    gy, gx = dims[0] * e.y, dims[1] * e.x
    rows = (coords[0] * e.y + np.arange(-h, e.y + h)) % gy
    cols = (coords[1] * e.x + np.arange(-h, e.x + h)) % gx
    v, k, gj, gi = np.meshgrid(np.arange(e.var), np.arange(e.z), rows, cols, indexing="ij")
    out = global_values(v, k, gj, gi)
    out[:, :, :h, :h] = out[:, :, :h, -h:] = out[:, :, -h:, :h] = out[:, :, -h:, -h:] = np.nan
    return out


class RankExchange:
    """One layout on one rank: the state, its plan, buffers and the three timed calls."""

    def __init__(self, cart: Any, layout: str, options: HaloOptions, dims: tuple[int, int], coords: tuple[int, int]) -> None:
        from kernels.halo import COPY_RUNS, OPPOSITE, SIDES, STEP, halo_plan
        from kernels.state import State

        e, h = options.interior, options.halo
        # the field as the state's dtype holds it: an exact copy must reproduce it bit for bit
        self.expected = local_expected(options, dims, coords).astype(options.dtype).astype(np.float64)
        values = self.expected.copy()  # the halo starts as NaN, so a cell the exchange misses shows
        values[:, :, :h], values[:, :, -h:], values[:, :, :, :h], values[:, :, :, -h:] = np.nan, np.nan, np.nan, np.nan
        self.state = State.zeros(layout, Extents(e.var, e.z, e.y + 2 * h, e.x + 2 * h), options.dtype)
        self.state.assign_logical(values)
        self.plan = halo_plan(layout, self.state.extents, options.dtype, h)
        self.send = np.zeros(self.plan.buffer_size, options.dtype)
        self.recv = np.zeros(self.plan.buffer_size, options.dtype)
        flat = self.state.data.reshape(-1)
        self._pack = (COPY_RUNS.parallel, self.plan.pack.args(flat, self.send))
        self._unpack = (COPY_RUNS.parallel, self.plan.unpack.args(self.recv, flat))
        self.cart = cart
        self.messages = []
        for tag, side in enumerate(SIDES):
            dy, dx = STEP[side]
            to = cart.Get_cart_rank([(coords[0] + dy) % dims[0], (coords[1] + dx) % dims[1]])
            oy, ox = STEP[OPPOSITE[side]]
            source = cart.Get_cart_rank([(coords[0] + oy) % dims[0], (coords[1] + ox) % dims[1]])
            a, n = self.plan.face_start[side], self.plan.face_size[side]
            self.messages.append((self.send[a:a + n], to, self.recv[a:a + n], source, tag))

    def pack(self) -> None:
        fn, args = self._pack
        fn(*args)

    def exchange(self) -> None:
        from mpi4py import MPI

        requests = [self.cart.Irecv(buf, source=src, tag=tag) for _, _, buf, src, tag in self.messages]
        requests += [self.cart.Isend(buf, dest=to, tag=tag) for buf, to, _, _, tag in self.messages]
        MPI.Request.Waitall(requests)

    def unpack(self) -> None:
        fn, args = self._unpack
        fn(*args)

    def check(self) -> float:
        """Largest difference of the state after one exchange from the expected array (inf on a miss)."""
        self.pack()
        self.exchange()
        self.unpack()
        got = self.state.to_logical()
        known = ~np.isnan(self.expected)
        if np.isnan(got[known]).any():
            return float("inf")
        return float(np.abs(got[known] - self.expected[known]).max())


def measure(comm: Any, options: HaloOptions) -> dict[str, Any] | None:
    """Run on every rank. Returns, on rank 0, the samples of every rank and what was checked."""
    import numba
    from mpi4py import MPI

    numba.set_num_threads(1)  # the ranks take the cores
    dims = tuple(MPI.Compute_dims(comm.Get_size(), 2))
    cart = comm.Create_cart(list(dims), periods=[True, True], reorder=False)
    coords = tuple(cart.Get_coords(cart.Get_rank()))
    exchanges, errors = {}, {}
    for layout in options.layouts:
        ex = RankExchange(cart, layout, options, dims, coords)
        err = cart.allreduce(ex.check(), op=MPI.MAX)
        errors[layout] = err
        if err == 0.0:  # a copy: exact or wrong
            exchanges[layout] = ex
    samples = []
    order = list(exchanges)
    shuffle = random.Random(f"{options.seed}:halos")
    for rnd in range(options.warmup + options.rounds):
        shuffle.shuffle(order)
        for layout in order:
            ex = exchanges[layout]
            for part in PARTS:
                cart.Barrier()
                start = time.perf_counter_ns()
                getattr(ex, part)()
                samples.append((rnd - options.warmup, layout, part, time.perf_counter_ns() - start))
    every = cart.gather([(cart.Get_rank(), *s) for s in samples if s[0] >= 0], root=0)
    hosts = cart.gather(MPI.Get_processor_name(), root=0)
    runs = {layout: (ex.plan.pack.count, ex.plan.unpack.count, ex.plan.buffer_size) for layout, ex in exchanges.items()}
    if cart.Get_rank() != 0:
        return None
    from harness.machine import usable_cores

    return {"dims": dims, "ranks": comm.Get_size(), "cores": usable_cores(), "nodes": len(set(hosts)), "errors": errors, "runs": runs,
            "samples": [row for rank_rows in every for row in rank_rows], "library": MPI.Get_library_version().splitlines()[0].strip()}
