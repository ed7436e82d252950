"""Benchmarks of the signal-flow graph layer (pytest-benchmark; timing only with --benchmark-enable).

Goals (issue: signal-flow graphs): building and transforming a 255-tap filter
into every applicable structure under 0.2 s in all; the interpreter on 10^5
samples of a 64-tap filter within 3x of the bit-true reference.
"""
from __future__ import annotations

import time

import numpy as np

from tapwright.explore import base_transform_sets
from tapwright.fixed import reference
from tapwright.fixed.formats import Fmt
from tapwright.fixed.stages import FirStage, FixedDesign
from tapwright.sfg import interpret
from tapwright.sfg.recipe import Recipe, _realize_structure
from tapwright.sfg.transforms.timeshare import timeshare


def _design(L, dec=1, seed=0):
    # invented symmetric integer coefficients (timing only, no check value)
    rng = np.random.default_rng(seed)
    h = rng.integers(-30000, 30000, size=L)
    h = [int(h[min(i, L - 1 - i)]) for i in range(L)]
    return FixedDesign((FirStage(coeffs=tuple(h), coeff_frac=17, out=Fmt(24, 15), decimation=dec),),
                       Fmt(16, 15), "half_up", "saturate")


def _all_structures(d):
    gs = []
    for sid, tr, form in base_transform_sets(d):
        gs.append(_realize_structure(d, Recipe(sid, tr, sos_form=form), "bench"))
    gs.append(timeshare(gs[0], 4))
    return gs


def test_bench_build_all_structures_255(benchmark):
    d = _design(255, dec=2)
    gs = benchmark.pedantic(_all_structures, args=(d,), rounds=3, iterations=1)
    benchmark.extra_info["structures"] = len(gs)
    assert len(gs) >= 6


def test_bench_interpreter_64tap_1e5(benchmark):
    d = _design(64)
    g = _realize_structure(d, Recipe("direct"), "bench")
    x = np.random.default_rng(1).integers(d.in_fmt.lo, d.in_fmt.hi + 1, size=100_000)
    t0 = time.perf_counter()
    ref = reference.run(d, x)
    t_ref = time.perf_counter() - t0
    y = benchmark.pedantic(interpret.run, args=(g, x), rounds=3, iterations=1)
    assert np.array_equal(y, ref)
    t_int = benchmark.stats.stats.min if benchmark.stats else None
    benchmark.extra_info["reference_s"] = round(t_ref, 4)
    if t_int:
        benchmark.extra_info["ratio_to_reference"] = round(t_int / max(t_ref, 1e-9), 2)
