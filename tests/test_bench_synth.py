"""Benchmark: estimating every candidate against one synthesis run (pytest-benchmark).

Goal (issue: synthesis in the loop): `plan` estimates all candidates at least
100 times faster than Yosys synthesizes one of them. The ratio lands in
extra_info (`python -m pytest tests/test_bench_synth.py --benchmark-enable
--benchmark-json out.json`).
"""
from __future__ import annotations

import dataclasses
import math
import time
from pathlib import Path

from tapwright.build import build_design
from tapwright.cost.estimate import estimate
from tapwright.explore import explore
from tapwright.plan import plan
from tapwright.sfg.recipe import realize
from tapwright.spec import load_spec
from tapwright.synth.run import synth_folder

SPEC = Path(__file__).parent.parent / "specs" / "sensor_lowpass.toml"


import pytest


@pytest.mark.parametrize("device", ["ecp5", "xc7"])
def test_bench_estimate_all_vs_one_synthesis(benchmark, tmp_path, device):
    spec = dataclasses.replace(load_spec(SPEC), device=device)
    res = plan(spec)
    ex = benchmark.pedantic(explore, args=(res.design.fixed, spec), rounds=1, iterations=1)
    t_est = math.inf
    for i in range(3):   # best of three, each with a fresh structural cache key
        t0 = time.perf_counter()
        explore(res.design.fixed, dataclasses.replace(spec, name=f"again{i}"))
        t_est = min(t_est, time.perf_counter() - t0)
    best = ex.recommended or ex.closest
    build_design(res, structure=best.label, out=tmp_path / "d", force=True)
    t0 = time.perf_counter()
    out = synth_folder(tmp_path / "d", device=device)
    t_syn = time.perf_counter() - t0
    assert out["synth"]["dsp"] == out["estimate"]["dsp"]
    benchmark.extra_info.update({"candidates": len(ex.candidates), "estimate_all_s": round(t_est, 3),
                                 "one_synthesis_s": round(t_syn, 2),
                                 "ratio": round(t_syn / max(t_est, 1e-6), 1)})


SPECS = sorted(p.stem for p in (Path(__file__).parent.parent / "specs").glob("*.toml"))


@pytest.mark.parametrize("name", SPECS)
def test_bench_every_example_on_ecp5(benchmark, tmp_path, name):
    """The same ratio for every example spec on ECP5, chains included (what `plan`
    explores): the small filters are the hard case for the goal, the long multistage ones
    the hard case in absolute time. Timing only: skipped without --benchmark-enable
    (each synthesizes a design; the largest take about half a minute)."""
    from tapwright.explore import explore_all

    if benchmark.disabled:
        pytest.skip("timing only (--benchmark-enable)")
    spec = dataclasses.replace(load_spec(Path(__file__).parent.parent / "specs" / f"{name}.toml"),
                               device="ecp5")
    res = plan(spec)
    ex = benchmark.pedantic(explore_all, args=(spec, res.design.fixed, res.chains or []),
                            kwargs={"name": "bench"}, rounds=1, iterations=1)
    t_est = math.inf
    for i in range(3):   # best of three, each with fresh structural cache keys
        t0 = time.perf_counter()
        explore_all(spec, res.design.fixed, res.chains or [], name=f"again{i}")
        t_est = min(t_est, time.perf_counter() - t0)
    best = ex.recommended or ex.closest
    # the same design alone: its graph built from the coefficients (no cached structure),
    # pipelined and estimated, against its own synthesis below
    t_one = math.inf
    for i in range(3):
        t0 = time.perf_counter()
        estimate(realize(best.fixed, best.recipe, name=f"one{i}"), "ecp5")
        t_one = min(t_one, time.perf_counter() - t0)
    nodes = sum(realize(c.fixed, c.recipe, name="size").number_of_nodes() for c in ex.candidates)
    build_design(res, structure=best.label, out=tmp_path / "d", force=True)
    t0 = time.perf_counter()
    out = synth_folder(tmp_path / "d", device="ecp5")
    t_syn = time.perf_counter() - t0
    assert out["synth"]["dsp"] == out["estimate"]["dsp"]
    benchmark.extra_info.update({"spec": name, "candidates": len(ex.candidates),
                                 "structure": best.label, "estimate_all_s": round(t_est, 3),
                                 "one_synthesis_s": round(t_syn, 2),
                                 "ratio": round(t_syn / max(t_est, 1e-6), 1),
                                 "estimate_one_s": round(t_one, 4),
                                 "ratio_same_design": round(t_syn / max(t_one, 1e-6), 1),
                                 # the size of the work: graph nodes over all candidates, and
                                 # the time per node the goal allows (synthesis / 100 / nodes)
                                 "graph_nodes": nodes,
                                 "goal_us_per_node": round(t_syn / 100 / max(nodes, 1) * 1e6, 2)})
