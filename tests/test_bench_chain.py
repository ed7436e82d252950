"""Benchmark: the multistage decimation planner on a decimation-by-64 audio spec.

pytest-benchmark; with --benchmark-disable (the default in pyproject) each benchmark runs once as a
plain test. extra_info: multiplications per input of the best chain against a single-stage polyphase
decimator (L/D, L the minimum single-stage length).
"""
import pathlib

import pytest

from tapwright.design import chain
from tapwright.design.fir import design_fir, estimate_length
from tapwright.spec import load_spec, parse_spec_text

SPECS = pathlib.Path(__file__).resolve().parent.parent / "specs"

# our own scenario (as in test_chain): 3.072 MHz -> 48 kHz, 0-20 kHz 0.1 dB, 85 dB from 28 kHz
DEC64 = parse_spec_text("""
name = "pdm_audio"
sample_rate = 3.072e6
decimation = 64
[[band]]
edges = [0.0, 20e3]
gain = 1.0
ripple_db = 0.1
[[band]]
edges = [28e3, 1.536e6]
gain = 0.0
atten_db = 85
[input]
bits = 16
frac = 15
[target]
clock = 98.304e6
""")


def _info(benchmark, chains, D, single_len, single_kind):
    best = chains[0]
    benchmark.extra_info.update(
        best_chain=best.name, best_mults_per_input=best.mults_per_input,
        single_stage_length=single_len, single_stage_length_from=single_kind,
        single_stage_mults_per_input=single_len / D,
        saving=(single_len / D) / best.mults_per_input,
        chains={c.name: [round(c.mults_per_input, 5), c.ok] for c in chains})


def test_bench_plan_chains_dec64(benchmark):
    chains = benchmark.pedantic(chain.plan_chains, args=(DEC64,), rounds=1, iterations=1)
    assert chains and chains[0].ok
    L = design_fir(DEC64).ntaps
    _info(benchmark, chains, DEC64.decimation, L, "design_fir")
    assert chains[0].mults_per_input <= L / DEC64.decimation / 4


def test_bench_plan_chains_audio_dec64(benchmark):
    """specs/audio_dec64.toml (90 dB from 24 kHz): the planner must stay interactive (was ~2 minutes).

    The single-stage minimum length (2874 taps by design_fir, ~7 s) is replaced by Herrmann's
    estimate here to keep the test short.
    """
    spec = load_spec(SPECS / "audio_dec64.toml")
    chains = benchmark.pedantic(chain.plan_chains, args=(spec,), rounds=1, iterations=1)
    assert chains and all(c.ok for c in chains)
    L, _ = estimate_length(spec)
    _info(benchmark, chains, spec.decimation, L, "herrmann estimate")
    assert chains[0].mults_per_input <= 3.0       # cic6x16+comp4: 185 taps / 64 = 2.89
    assert chains[0].mults_per_input <= L / spec.decimation / 10
