"""Benchmark: cycle-by-cycle run (sfg/fold.py) of a 32-tap FIR folded by 4 (goal: at least 1e4 cycles/s).

With ``--benchmark-disable`` (the default in pyproject) it runs once as a plain
test; the figures go to ``benchmark.extra_info`` either way.
"""
from __future__ import annotations

import time

import numpy as np

from tapwright.fixed import reference
from tapwright.fixed.formats import Fmt
from tapwright.fixed.stages import FirStage, FixedDesign
from tapwright.sfg.fold import compile_cycles
from tapwright.sfg.recipe import Recipe, realize

N = 20_000


def test_bench_folded_32tap(benchmark):
    rng = np.random.default_rng(0)
    h = rng.integers(-2000, 2000, size=16)
    c = tuple(int(v) for v in np.concatenate([h, h[::-1]]))
    d = FixedDesign((FirStage(c, 12, Fmt(16, 11)),), Fmt(12, 11), "half_even", "saturate")
    m = compile_cycles(realize(d, Recipe("timeshared", ("symmetric",), fold=4)))
    x = rng.integers(-2048, 2048, size=N)
    t0 = time.perf_counter()
    tr = benchmark.pedantic(m.run, args=(x,), rounds=3, iterations=1)
    per_round = (time.perf_counter() - t0) / 3
    benchmark.extra_info.update({"cycles": tr.cycles, "cycles_per_s": round(tr.cycles / per_round)})
    assert np.array_equal(tr.y, reference.run(d, x))  # bit-true reference
    # one sample every 4 cycles; the run ends latency + 2 cycles after the last one was taken
    assert tr.cycles == 4 * (N - 1) + tr.latency + 2 + 1
