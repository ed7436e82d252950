"""Benchmarks (pytest-benchmark; with --benchmark-disable they run once as plain tests)."""
import time

import numpy as np
from scipy import signal

from tapwright.design import fir
from tapwright.fixed import reference
from tapwright.fixed.formats import Fmt
from tapwright.fixed.quantize import quantize_fir
from tapwright.fixed.stages import FirStage, FixedDesign
from tapwright.spec import parse_spec_text

LONG = parse_spec_text("""
name = "radar_chan"
sample_rate = 1.0
[[band]]
edges = [0.0, 0.2]
gain = 1.0
ripple_db = 0.01
[[band]]
edges = [0.22, 0.5]
gain = 0.0
atten_db = 90
[input]
bits = 16
[target]
clock = 1.0
""")


def test_bench_minimum_order_search(benchmark):
    d = benchmark(fir.design_fir, LONG)
    assert d.ntaps >= 200
    assert d.tried[d.ntaps] and not d.tried[d.ntaps - 1] and not d.tried[d.ntaps - 2]
    benchmark.extra_info.update(length=d.ntaps, estimate=d.estimate, lengths_tried=len(d.tried))


def _design64():
    h = signal.remez(64, [0, 0.1, 0.15, 0.5], [1, 0], weight=[1, 30], fs=1.0)
    c = tuple(int(v) for v in np.round(h * 2 ** 17))
    st = FirStage(c, 17, Fmt(18, 15))
    return FixedDesign((st,), Fmt(16, 15), "half_up", "saturate"), np.asarray(c, float) / 2 ** 17


X = np.random.default_rng(0).integers(-32768, 32768, 100_000)


def test_bench_reference_fir_throughput(benchmark):
    design, _ = _design64()
    y = benchmark(reference.run, design, X)
    assert len(y) == len(X)
    t0 = time.perf_counter()
    reference.run(design, X)
    t_ref = time.perf_counter() - t0
    h = np.asarray(design.stages[0].coeffs, float)
    t0 = time.perf_counter()
    signal.lfilter(h, [1.0], X.astype(float))
    t_lf = time.perf_counter() - t0
    benchmark.extra_info.update(samples=len(X), taps=64, ref_s=t_ref, lfilter_s=t_lf, ratio=t_ref / t_lf)
    print(f"reference.run {t_ref * 1e3:.1f} ms, lfilter {t_lf * 1e3:.1f} ms, ratio {t_ref / t_lf:.1f}")


def test_bench_scipy_lfilter_same_data(benchmark):
    design, h = _design64()
    y = benchmark(signal.lfilter, h, [1.0], X / 2.0 ** 15)
    # the bit-true output equals the float one within half an output LSB (SciPy as reference)
    yr = reference.run(design, X).astype(float)
    assert np.max(np.abs(yr - y * 2.0 ** 15)) <= 0.5 + 1e-9


def test_bench_fir_quantization(benchmark):
    d = fir.design_fir(LONG)
    q = benchmark(quantize_fir, LONG, d.taps)
    benchmark.extra_info.update(coeff_bits=q.coeff_bits, acc_bits=q.acc_bits)
    assert q.coeff_bits <= 24
