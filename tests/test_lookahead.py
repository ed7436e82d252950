"""Scattered look-ahead biquads: exact polynomials, pole set, bit-true graph, timing, RTL.

Outside references named beside the checks:
- the method: K. K. Parhi and D. G. Messerschmitt, "Pipeline interleaving and
  parallelism in recursive digital filters, Part I", IEEE Trans. ASSP 37(7), 1989, and
  K. K. Parhi, VLSI Digital Signal Processing Systems, Wiley 1999, ch. 10
  (both from memory);
- same transfer function: scipy.signal.freqz of (B', D') against (B, D) (SciPy
  as reference library);
- pole set: numpy.roots of D' against hand math (z^M = p^M: radius r^M, angle
  M*theta; D' = 1 - 2 r^M cos(M theta) z^-M + r^2M z^-2M for a complex pair);
- stability triangle of a second-order polynomial |c2| < 1, |c1| < 1 + c2
  (common practice) for drawing random stable sections;
- iteration bound = max over loops of loop time / loop delays (Parhi, VLSI DSP
  Systems, 1999, ch. 2; from memory), expected values worked out by hand below;
- bit-true: the interpreter on the look-ahead graph against the independent
  difference-equation reference ``lookahead.reference_run``; the Amaranth
  simulation of the lowered graph against the interpreter.

The sections are scenarios of our own invention.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy import signal

from tapwright.fixed import reference
from tapwright.fixed.formats import Fmt
from tapwright.fixed.stages import FirStage, FixedDesign, Section, SosStage
from tapwright.rtl.lower import lower
from tapwright.rtl.testbench import Stimulus
from tapwright.sfg import build, interpret
from tapwright.sfg.graph import check
from tapwright.sfg.metrics import is_free_coeff
from tapwright.sfg.transforms import lookahead as LA
from tapwright.sfg.transforms import pipeline as P
from tapwright.verify.check import judge, simulate_amaranth

ROUND = ("truncate", "half_up", "half_even")
OVF = ("saturate", "wrap")


def pole_section(r, theta, b=(1000, 2000, 1000), F=14, state=Fmt(20, 16)):
    """A section with a complex pole pair r e^{+-j theta}, quantized to F bits (our own scenario)."""
    a1 = round(-2 * r * math.cos(theta) * 2 ** F)
    a2 = round(r * r * 2 ** F)
    return Section(b=tuple(b), a=(1 << F, a1, a2), coeff_frac=F, state=state)


SECTIONS = [
    pole_section(0.70, 0.9),
    pole_section(0.95, 0.2, b=(300, -200, 300)),
    pole_section(0.98, 2.5, b=(2048, -4096, 2048)),
    pole_section(0.60, 1.6, b=(5000, 0, -5000), F=12),
    # two real poles 0.9 and -0.5: D = 1 - 0.4 z^-1 - 0.45 z^-2
    Section(b=(4000, 1000, -700), a=(1 << 13, round(-0.4 * 2 ** 13), round(-0.45 * 2 ** 13)), coeff_frac=13,
            state=Fmt(18, 14)),
]


def _match(found, expected, tol):
    """Every expected root has its own found root within tol (greedy nearest)."""
    left = list(found)
    assert len(left) == len(expected)
    for p in expected:
        i = int(np.argmin([abs(q - p) for q in left]))
        assert abs(left[i] - p) < tol, (p, left[i])
        left.pop(i)


# ------------------------------------------------------------------------------------------------
# (1) same transfer function with exact coefficients


@pytest.mark.parametrize("M", [2, 3, 4, 5])
@pytest.mark.parametrize("k", range(len(SECTIONS)))
def test_exact_lookahead_same_frequency_response(k, M):
    sec = SECTIONS[k]
    la = LA.lookahead_section(sec, M)
    assert la.exact and len(la.b) == 2 * M + 1
    F = sec.coeff_frac
    b = np.array(sec.b, float) / 2 ** F
    a = np.array(sec.a, float) / 2 ** F
    bp, ap = la.float_ba()
    w, H = signal.freqz(b, a, worN=4096)  # SciPy as reference
    _, Hp = signal.freqz(bp, ap, worN=4096)
    peak = np.max(np.abs(H))
    assert np.max(np.abs(Hp - H)) <= 1e-12 * peak
    rep = LA.analyze(la)
    assert rep.response_deviation <= 1e-12 and rep.pole_zero_mismatch < 1e-9


# ------------------------------------------------------------------------------------------------
# (2) pole set: original poles times the M-th roots of unity


@pytest.mark.parametrize("M", [2, 3, 4, 5])
@pytest.mark.parametrize("k", range(len(SECTIONS)))
def test_lookahead_poles_are_rotated_copies(k, M):
    sec = SECTIONS[k]
    la = LA.lookahead_section(sec, M)
    F = sec.coeff_frac
    p = np.roots(np.array(sec.a, float) / 2 ** F)
    w = np.exp(2j * np.pi / M)
    expected = [pi * w ** j for pi in p for j in range(M)]
    _, ap = la.float_ba()
    _match(np.roots(ap), expected, 1e-9)
    # hand math: every pole of D' has radius r and M times its angle is M theta (mod 2 pi)
    if abs(p[0].imag) > 0:
        r, theta = abs(p[0]), abs(np.angle(p[0]))
        assert la.a[1] / 2 ** la.coeff_frac == pytest.approx(-2 * r ** M * math.cos(M * theta), rel=1e-12, abs=1e-15)
        assert la.a[2] / 2 ** la.coeff_frac == pytest.approx(r ** (2 * M), rel=1e-12)
    else:  # real poles: D' = 1 - (p1^M + p2^M) z^-M + (p1 p2)^M z^-2M
        p1, p2 = p.real
        assert la.a[1] / 2 ** la.coeff_frac == pytest.approx(-(p1 ** M + p2 ** M), rel=1e-12)
        assert la.a[2] / 2 ** la.coeff_frac == pytest.approx((p1 * p2) ** M, rel=1e-12)
    # N is the product of D with its poles rotated by 2 pi k / M, k = 1..M-1 (the definition),
    # and its zeros, the rotated poles, are zeros of B'
    n, _ = LA.lookahead_polys(sec.a[1], sec.a[2], F, M)
    prod = np.array([1.0 + 0j])
    for j in range(1, M):
        prod = np.convolve(prod, np.array(sec.a, float) / 2 ** F * np.array([1, w ** j, w ** (2 * j)]))
    assert np.allclose(prod.imag, 0, atol=1e-12)
    assert np.allclose(np.array(n, float) / 2.0 ** ((M - 1) * F), prod.real, rtol=1e-12, atol=1e-12)
    rep = LA.analyze(la)
    assert rep.max_pole_radius == pytest.approx(float(np.max(np.abs(p))), rel=1e-9)
    zeros = list(rep.zeros)
    for q in rep.rotated:
        assert min(abs(z - q) for z in zeros) < 1e-7


# ------------------------------------------------------------------------------------------------
# (3) D' is a polynomial in z^-M, exactly D * N; B' exactly B * N


def _conv(p, q):
    out = [0] * (len(p) + len(q) - 1)
    for i, x in enumerate(p):
        for j, y in enumerate(q):
            out[i + j] += int(x) * int(y)
    return out


@pytest.mark.parametrize("M", [2, 3, 4, 5, 8])
@pytest.mark.parametrize("k", range(len(SECTIONS)))
def test_denominator_zero_off_multiples_of_M(k, M):
    sec = SECTIONS[k]
    F = sec.coeff_frac
    n, dp = LA.lookahead_polys(sec.a[1], sec.a[2], F, M)
    assert all(dp[i] == 0 for i in range(len(dp)) if i % M)
    assert _conv(sec.a, n) == dp  # exact integers at M*F fractional bits
    la = LA.lookahead_section(sec, M)
    sh = M * F - la.coeff_frac
    assert sh >= 0
    assert [v << sh for v in la.den] == dp
    assert [v << sh for v in la.b] == _conv(sec.b, n)
    assert all(la.den[i] == 0 for i in range(2 * M + 1) if i % M)


def test_requantized_coefficients_fit_and_report_mismatch():
    sec = SECTIONS[1]
    la = LA.lookahead_section(sec, 3)
    devs = {}
    for W in (12, 16, 20, 24):
        q = LA.requantize(la, coeff_bits=W)
        mults = list(q.b) + [q.a[1], q.a[2]]
        assert all(-(1 << (W - 1)) <= v < (1 << (W - 1)) for v in mults)
        # the largest fraction that fits: one more bit would not
        q1 = LA.requantize(la, coeff_frac=q.coeff_frac + 1)
        assert not all(-(1 << (W - 1)) <= v < (1 << (W - 1)) for v in list(q1.b) + [q1.a[1], q1.a[2]])
        # rounding to nearest: within half an LSB of the exact coefficient
        sh = la.coeff_frac - q.coeff_frac
        for e, v in zip(list(la.b) + list(la.a), list(q.b) + list(q.a)):
            assert abs((v << sh) - e) <= 1 << (sh - 1)
        assert all(q.den[i] == 0 for i in range(len(q.den)) if i % q.M)
        rep = LA.analyze(q)
        assert not q.exact and rep.stable
        assert rep.pole_zero_mismatch > 1e-9 and rep.response_deviation > 1e-12
        devs[W] = rep.response_deviation
    assert devs[24] < devs[12]
    assert LA.requantize(la, coeff_frac=la.coeff_frac + 3) is la


# ------------------------------------------------------------------------------------------------
# (4) interpreter on the look-ahead graph == independent reference, bit for bit


@st.composite
def _random_case(draw):
    F = draw(st.integers(6, 16))
    one = 1 << F
    nsec = draw(st.integers(1, 2))
    in_bits = draw(st.integers(6, 16))
    secs = []
    for _ in range(nsec):
        # stability triangle: |a2| < 2^F, |a1| < 2^F + a2
        a2 = draw(st.integers(-one + 1, one - 1))
        a1 = draw(st.integers(-(one + a2) + 1, one + a2 - 1))
        hb = 1 << F
        b = tuple(draw(st.integers(-hb, hb)) for _ in range(3))
        sb = draw(st.integers(8, 24))
        sf = draw(st.integers(max(0, sb - 5), sb - 1))
        secs.append(Section(b=b, a=(one, a1, a2), coeff_frac=F, state=Fmt(sb, sf)))
    ob = draw(st.integers(6, 20))
    of = draw(st.integers(max(0, secs[-1].state.frac - 4), secs[-1].state.frac + 2))
    design = FixedDesign((SosStage(tuple(secs), out=Fmt(ob, of)),), Fmt(in_bits, in_bits - 1),
                         draw(st.sampled_from(ROUND)), draw(st.sampled_from(OVF)))
    M = draw(st.integers(2, 5))
    mode = draw(st.sampled_from(["exact", "bits", "frac"]))
    quant = {"exact": {}, "bits": {"coeff_bits": draw(st.sampled_from([10, 14, 18, 24]))},
             "frac": {"coeff_frac": draw(st.integers(2, 10))}}[mode]
    seed = draw(st.integers(0, 2 ** 31 - 1))
    return design, M, quant, seed


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_random_case())
def test_interpreter_equals_reference(case):
    design, M, quant, seed = case
    try:
        secs = LA.design_sections(design, M, **quant)
    except ValueError:
        assume(False)  # the coefficients need integer bits beyond the word: nothing to build
    g = LA.lookahead_design(design, M, **quant)
    check(g)
    assert g.graph["lookahead"] == secs
    rng = np.random.default_rng(seed)
    f = design.in_fmt
    x = rng.integers(f.lo, f.hi + 1, size=90)
    x[:3] = [f.hi, f.lo, 0]
    x[40:55] = f.hi  # a full-scale step: drives states and output to their limits
    y = interpret.run(g, x)
    ref = LA.reference_run(design, x, secs)
    assert np.array_equal(y, ref), (M, quant)


def test_chain_and_df2t_source_graph():
    """A FIR stage before the biquads is left alone; a df2t graph is rebuilt the same way."""
    sec = SECTIONS[0]
    fir = FirStage((300, 600, 300), coeff_frac=10, out=Fmt(16, 15))
    d = FixedDesign((fir, SosStage((sec, SECTIONS[1]), out=Fmt(18, 15))), Fmt(16, 15), "half_up", "saturate")
    rng = np.random.default_rng(4)
    x = rng.integers(-2 ** 15, 2 ** 15, size=200)
    secs = LA.design_sections(d, 3)
    g = LA.lookahead_design(d, 3)
    y = interpret.run(g, x)
    assert np.array_equal(y, LA.reference_run(d, x, secs))
    g2 = LA.lookahead(build.build(d, sos_form="df2t"), 3)
    assert np.array_equal(interpret.run(g2, x), y)
    # the bits differ from the df1 sections (the loops round different sums)
    assert not np.array_equal(y, reference.run(d, x))
    with pytest.raises(ValueError):
        LA.lookahead(P.pipeline(build.build(d), 2), 3)


@pytest.mark.parametrize("M", [2, 3, 5])
def test_output_within_rounding_bound_of_ideal(M):
    """The look-ahead output stays within the worst-case rounding bound of the ideal response.

    Worst case (L1 norm, common practice): each loop rounding error (at most 1/2
    state LSB, rounding to nearest) reaches the output through 1/D'_i(z) and the
    later sections' B_j/D_j (= B'_j/D'_j), plus 1/2 output LSB for the final
    conversion; the ideal is a float run of the same integer coefficients
    (exact look-ahead: same transfer function). No state saturates here.
    """
    secs = (SECTIONS[0], SECTIONS[1])
    d = FixedDesign((SosStage(secs, out=Fmt(20, 15)),), Fmt(16, 15), "half_up", "saturate")
    las = LA.design_sections(d, M)
    rng = np.random.default_rng(M)
    x = rng.integers(-2 ** 14, 2 ** 14, size=600)
    y = LA.reference_run(d, x, las).astype(float)
    ideal = reference.run_stages_float(d, x / 2.0 ** 15) * 2.0 ** 15
    n = 4000
    imp = np.zeros(n)
    imp[0] = 1.0
    bound = 0.5
    for i, la in enumerate(las[0]):
        _, dp = la.float_ba()
        h = signal.lfilter([1.0], dp, imp)
        for s in secs[i + 1:]:
            h = signal.lfilter(np.array(s.b, float), np.array(s.a, float), h)
        bound += 0.5 * np.sum(np.abs(h)) * 2.0 ** (15 - la.state.frac)
    err = np.max(np.abs(y - ideal))
    assert 0 < err <= bound


# ------------------------------------------------------------------------------------------------
# (5) iteration bound divided by M


@pytest.mark.parametrize("M", [2, 3, 4, 5])
def test_iteration_bound_divided_by_M(M):
    """Unit delays (pipeline.unit_delays): multiply 2, adder 1, rounding 1.

    df1: loop y -> a1 (z^-1) -> acc -> round -> y: (2 + 1 + 1) / 1 = 4; via a2: 4/2.
    Look-ahead: the same multiply, loop adder and rounding, closed by z^-M:
    (2 + 1 + 1) / M = 4/M; via the z^-2M coefficient 4/(2M). The FIR part is
    outside the loops. Expected bound 4/M (both loop coefficients are real
    multipliers, checked first).
    """
    sec = SECTIONS[0]
    d = FixedDesign((SosStage((sec, sec), out=Fmt(18, 15)),), Fmt(16, 15), "half_up", "saturate")
    g0 = build.build(d)
    assert P.iteration_bound(g0) == pytest.approx(4.0)
    la = LA.lookahead_section(sec, M)
    assert not is_free_coeff(la.a[1]) and not is_free_coeff(la.a[2])
    g = LA.lookahead_design(d, M)
    assert P.iteration_bound(g) == pytest.approx(4.0 / M)
    assert P.iteration_bound(g) == pytest.approx(P.iteration_bound(g0) / M)


def test_retiming_reaches_the_lower_bound():
    """After cutset pipelining of the FIR part, retiming moves the loop's M delays into it.

    Unit delays: a multiply (2) cannot be split, so no period below 2. df1's loop
    (4 units over 1 delay) keeps period 4; with M = 2 the loop (4 over 2) reaches 2.
    """
    sec = SECTIONS[0]
    d = FixedDesign((SosStage((sec, sec), out=Fmt(18, 15)),), Fmt(16, 15), "half_up", "saturate")
    _, p0, _ = P.retime(P.pipeline(build.build(d), 2))
    assert p0 == pytest.approx(4.0)
    for M in (2, 3, 4):
        g = P.pipeline(LA.lookahead_design(d, M), 2)
        h, p, _ = P.retime(g)
        assert p == pytest.approx(2.0)
        assert P.latency(h) == P.latency(g)


# ------------------------------------------------------------------------------------------------
# (6) RTL lowering simulated with Amaranth == interpreter


def _rtl_design():
    secs = (Section(b=(600, 1200, 600), a=(4096, -5000, 2000), coeff_frac=12, state=Fmt(18, 14)),
            Section(b=(2048, -1000, 2048), a=(4096, -3000, 1500), coeff_frac=12, state=Fmt(18, 14)))
    return FixedDesign((SosStage(secs, out=Fmt(14, 11)),), Fmt(12, 11), "half_even", "wrap")


@pytest.mark.parametrize("M,variant", [(2, "plain"), (3, "pipelined"), (2, "retimed"), (4, "retimed"),
                                       (3, "requantized")])
def test_rtl_matches_interpreter(M, variant):
    d = _rtl_design()
    cbits = 18 if variant == "requantized" else None
    g = LA.lookahead_design(d, M, coeff_bits=cbits)
    if variant in ("pipelined", "retimed", "requantized"):
        g = P.pipeline(g, 2)
    else:
        g = P.pipeline(g, float("inf"), register_output=True)
    if variant == "retimed":
        # z registers now sit inside the loop (multiply -> loop adder): the lowering's
        # delay lines on a product's strobe
        lat = P.latency(g)
        g, _, _ = P.retime(g)
        assert P.latency(g) == lat
        assert any(e["z"] and g.nodes[v]["kind"] == "add" and g.nodes[u]["kind"] == "mul"
                   for u, v, e in g.edges(data=True))
    rng = np.random.default_rng(100 + M)
    x = rng.integers(d.in_fmt.lo, d.in_fmt.hi + 1, size=40)
    x[:2] = [d.in_fmt.hi, d.in_fmt.lo]
    exp = interpret.run(g, x)
    assert np.array_equal(exp, LA.reference_run(d, x, g.graph["lookahead"]))
    comp = lower(g)
    stims = [Stimulus("random", x), Stimulus("random_gaps", x, (rng.random(200) >= 0.3).astype(np.int64))]
    traces = simulate_amaranth(comp, stims, latency=comp.latency, interval=comp.input_interval)
    for s, tr in zip(stims, traces):
        r = judge(s.name, tr, exp, latency=comp.latency, decimation=1, phase=0, n_in=len(x))
        assert r.ok, r.message


@pytest.mark.parametrize("M", [1, 2, 3, 4])
@pytest.mark.parametrize("target", [2.0, 3.0, 4.0, float("inf")])
def test_retiming_keeps_samples_and_latency(M, target):
    # Leiserson & Saxe retiming must not change what a graph computes (their Lemma 1:
    # the register count of every path and cycle is kept). With two register kinds
    # (sample delays z and pipeline registers) each kind is kept on every input-output
    # path, so the sample-level output and the latency are unchanged.
    sec = SECTIONS[0]
    d = FixedDesign((SosStage((sec, sec), out=Fmt(18, 15)),), Fmt(16, 15), "half_up", "saturate")
    g0 = build.build(d) if M == 1 else LA.lookahead_design(d, M)
    g = P.pipeline(g0, target)
    h, _, _ = P.retime(g)
    rng = np.random.default_rng(7 + M)
    x = rng.integers(d.in_fmt.lo, d.in_fmt.hi + 1, size=300)
    assert np.array_equal(interpret.run(h, x), interpret.run(g, x))
    assert P.latency(h) == P.latency(g)
    assert all(e["z"] >= 0 and e["pipe"] >= 0 for _, _, e in h.edges(data=True))
