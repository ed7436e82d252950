"""Benchmarks of the explorer (pytest-benchmark; timing only with --benchmark-enable).

Goal (issue: cost model and explorer): `plan` under 1 s for filters up to 255
taps, and cost growing about linearly with the number of taps up to 1023.
The ratios of the 63/255/1023-tap exploration times land in extra_info.
"""
from __future__ import annotations

import time

import numpy as np
import pytest

from tapwright.explore import explore
from tapwright.fixed.formats import Fmt
from tapwright.fixed.stages import FirStage, FixedDesign
from tapwright.spec import parse_spec_text

SPEC = parse_spec_text("""
name = "bench_lp"
sample_rate = 10e6
family = "fir"
[[band]]
edges = [0, 1e6]
gain = 1.0
ripple_db = 0.5
[[band]]
edges = [2e6, 5e6]
gain = 0.0
atten_db = 60
[input]
bits = 16
frac = 15
[target]
device = "xc7"
clock = 40e6
[target.budget]
dsp = 64
""", "bench.toml")


def _design(L, seed=0):
    # invented symmetric integer coefficients (timing only, no check value)
    rng = np.random.default_rng(seed)
    h = rng.integers(-30000, 30000, size=L)
    h = [int(h[min(i, L - 1 - i)]) for i in range(L)]
    return FixedDesign((FirStage(coeffs=tuple(h), coeff_frac=17, out=Fmt(24, 15)),), Fmt(16, 15), "half_up", "saturate")


_times = {}


@pytest.mark.parametrize("L", [63, 255, 1023])
def test_bench_explore(benchmark, L):
    d = _design(L)
    t0 = time.perf_counter()
    ex = benchmark.pedantic(explore, args=(d, SPEC), rounds=1, iterations=1)
    _times[L] = time.perf_counter() - t0
    assert ex.candidates
    benchmark.extra_info["taps"] = L
    benchmark.extra_info["candidates"] = len(ex.candidates)
    if 63 in _times and L != 63:
        benchmark.extra_info["time_ratio_vs_63"] = round(_times[L] / _times[63], 2)
        benchmark.extra_info["taps_ratio_vs_63"] = round(L / 63, 2)


def test_bench_plan_example(benchmark):
    from tapwright.plan import plan
    from tapwright.spec import load_spec
    from pathlib import Path

    spec = load_spec(Path(__file__).parent.parent / "specs" / "sensor_lowpass.toml")
    r = benchmark.pedantic(plan, args=(spec,), rounds=1, iterations=1)
    assert r.exploration.candidates
