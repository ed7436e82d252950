"""Cycle-by-cycle interpreter (sfg/fold.py): values, output cycles and in_ready pacing.

Outside references named beside the checks:
- output values: the bit-true reference ``tapwright.fixed.reference`` (written
  from the integer coefficients, never from the graph);
- output cycles, ``in_ready`` per cycle, accepted cycles: the Amaranth
  simulation (pysim, measured here with amaranth 0.5) of ``lower(g)``, driven
  the way ``verify.check.simulate_amaranth`` drives it (reset two cycles,
  sample i offered while ``in_valid`` is 1 and held until ``in_ready``);
- latency and pacing: the contract (``interface.md`` section 4): output m is
  ``out_valid`` ``latency`` cycles after the cycle its completing input was
  taken, samples are taken at least every ``input_interval`` cycles;
- folded delays: Parhi's folding equation D_F(U->V) = K*w(e) - P_U + v - u
  (K. K. Parhi, VLSI Digital Signal Processing Systems, Wiley 1999, ch. 6;
  from memory), worked by hand for a 4-tap FIR below.
"""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as hst

from tapwright.fixed import reference
from tapwright.fixed.formats import Fmt
from tapwright.fixed.stages import CicStage, FirStage, FixedDesign, Section, SosStage
from tapwright.rtl.lower import _canon, lower, timing_of
from tapwright.sfg import interpret
from tapwright.sfg.fold import compile_cycles, run_cycles
from tapwright.sfg.graph import input_interval, output_node
from tapwright.sfg.recipe import Recipe, realize
from tapwright.sfg.transforms.pipeline import latency as graph_latency
from tapwright.sfg.transforms.timeshare import folded_delays

ROUND = ("truncate", "half_up", "half_even")
OVF = ("saturate", "wrap")


# ------------------------------------------------------------------------------------------------
# designs (random ones made as in tests/test_sfg.py)


def make_coeffs(rng, L, sym, cbits):
    hi = (1 << (cbits - 1)) - 1
    h = rng.integers(-hi, hi + 1, size=L)
    if sym == 1:
        h = np.array([h[min(i, L - 1 - i)] for i in range(L)])
    elif sym == -1:
        h = np.array([h[i] if i < L - 1 - i else (-h[L - 1 - i] if i > L - 1 - i else 0) for i in range(L)])
    return tuple(int(v) for v in h)


def fir_design(coeffs, cbits, in_bits, out_bits, dec=1, phase=0, rounding="half_up", ovf="saturate",
               out_frac=None):
    in_fmt = Fmt(in_bits, in_bits - 1)
    of = Fmt(out_bits, in_bits - 1 if out_frac is None else out_frac)
    st = FirStage(coeffs=tuple(coeffs), coeff_frac=cbits - 1, out=of, decimation=dec, phase=phase)
    return FixedDesign((st,), in_fmt, rounding, ovf)


def stimulus(rng, fmt, n):
    x = rng.integers(fmt.lo, fmt.hi + 1, size=n)
    x[:3] = [fmt.hi, fmt.lo, 0][:n]
    return x


def gaps(rng, n, p):
    return (rng.random(n) >= p).astype(np.int64)


def check_contract(tr, g):
    """Latency of every output and the in_ready pacing (interface.md section 4, lower.py docstring)."""
    lat = lower(g).latency
    assert tr.latency == lat == graph_latency(g)
    assert (tr.latencies == lat).all(), tr.latencies
    I = input_interval(g)
    assert tr.input_interval == I
    assert (np.diff(tr.taken) >= I).all()
    # in_ready is low exactly in the I-1 cycles after each accepted sample
    low = np.zeros(tr.cycles, dtype=bool)
    for t in tr.taken:
        low[t + 1:t + I] = True
    assert np.array_equal(tr.in_ready, ~low[:len(tr.in_ready)])
    # a sample is taken in every cycle where one is offered and in_ready is high
    assert np.array_equal(np.flatnonzero(tr.in_valid & tr.in_ready), tr.taken)


# ------------------------------------------------------------------------------------------------
# (1) random folded designs: bit for bit against the reference


@hst.composite
def folded_case(draw):
    L = draw(hst.integers(1, 24))
    sym = draw(hst.sampled_from([0, 1, -1]))
    cbits = draw(hst.integers(4, 20))
    in_bits = draw(hst.integers(4, 20))
    rng = np.random.default_rng(draw(hst.integers(0, 2 ** 31 - 1)))
    coeffs = make_coeffs(rng, L, sym, cbits)
    out_bits = draw(hst.integers(max(2, in_bits - 4), in_bits + cbits + 4))
    out_frac = draw(hst.sampled_from([None, in_bits - 1 + cbits - 1, max(0, in_bits - 3)]))
    dec = draw(hst.sampled_from([1, 1, 2, 3, 4]))
    phase = draw(hst.integers(0, dec - 1))
    rnd = draw(hst.sampled_from(ROUND))
    ovf = draw(hst.sampled_from(OVF))
    d = fir_design(coeffs, cbits, in_bits, out_bits, dec, phase, rnd, ovf, out_frac)
    symmetric = d.stages[0].symmetry() != 0
    options = [()]
    if symmetric:
        options.append(("symmetric",))
    if dec > 1:
        options.append(("polyphase",))
        if symmetric:
            options.append(("polyphase", "symmetric"))
    tr = draw(hst.sampled_from(options))
    K = draw(hst.integers(2, 8))
    period = draw(hst.sampled_from([None, 1.0, 2.0, 3.0]))
    reg_out = draw(hst.booleans())
    recipe = Recipe("timeshared", tr, fold=K, period=period, register_output=reg_out)
    p_gap = draw(hst.sampled_from([0.0, 0.3, 0.7]))
    return d, recipe, rng, p_gap


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(folded_case())
def test_random_folded_designs_bit_exact(case):
    d, recipe, rng, p_gap = case
    try:
        g = realize(d, recipe)
    except ValueError as e:  # every product a power of two: nothing to time-share
        assert "nothing" in str(e)
        assume(False)
    x = stimulus(rng, d.in_fmt, 72)
    valid = gaps(rng, 8 * len(x), p_gap) if p_gap else None
    tr = run_cycles(g, x, valid)
    ref = reference.run(d, x)  # the bit-true model, outside the graph
    assert np.array_equal(tr.y, ref), (recipe.label, d)
    assert len(tr.y) == len(ref)
    check_contract(tr, g)


# every other kind of graph with pipeline registers runs too (not only folded ones)

def _sos():
    secs = (Section(b=(600, 1200, 600), a=(4096, -5000, 2000), coeff_frac=12, state=Fmt(18, 14)),
            Section(b=(2048, -1000, 2048), a=(4096, -3000, 1500), coeff_frac=12, state=Fmt(18, 14)))
    return FixedDesign((SosStage(secs, out=Fmt(14, 11)),), Fmt(12, 11), "half_even", "saturate")


def _cic():
    fin = Fmt(12, 11)
    cic = CicStage(order=3, decimation=4, diff_delay=1, drop=(0, 1, 2, 3, 4, 5), out=Fmt(16, 6), in_fmt=fin,
                   phase=1)
    return FixedDesign((cic,), fin, "half_even", "saturate")


def _chain():
    fin = Fmt(12, 11)
    cic = CicStage(order=2, decimation=3, diff_delay=2, drop=(0, 0, 1, 1), out=Fmt(14, 9), in_fmt=fin, phase=2)
    fir = FirStage((100, -300, 900, -300, 100), coeff_frac=10, out=Fmt(14, 6), decimation=2, phase=1)
    return FixedDesign((cic, fir), fin, "truncate", "wrap")


def _fir(coeffs, dec=1, phase=0, out=Fmt(14, 11), rounding="half_up", overflow="saturate"):
    return FixedDesign((FirStage(tuple(coeffs), 10, out, decimation=dec, phase=phase),), Fmt(12, 11),
                       rounding, overflow)


_R = np.random.default_rng(20260518)
SYM9 = make_coeffs(_R, 9, 1, 10)
ANTI9 = make_coeffs(_R, 9, -1, 10)
PLAIN7 = make_coeffs(_R, 7, 0, 10)
SYM12 = make_coeffs(_R, 12, 1, 10)
SYM15 = make_coeffs(_R, 15, 1, 10)

CASES = {
    "direct_pipelined": (_fir(PLAIN7), Recipe("direct", period=1)),
    "direct_latency0": (_fir(PLAIN7), Recipe("direct", register_output=False)),
    "transposed_sym_pipelined": (_fir(SYM12), Recipe("transposed", ("transposed", "symmetric"), period=3)),
    "polyphase_dec3": (_fir(SYM9, dec=3, phase=2), Recipe("polyphase", ("polyphase", "symmetric"), period=2)),
    "sos_df1_pipelined": (_sos(), Recipe("sos_df1", period=2)),
    "sos_df2t": (_sos(), Recipe("sos_df2t", sos_form="df2t")),
    "cic_pipelined": (_cic(), Recipe("cic", period=1)),
    "chain_cic_fir": (_chain(), Recipe("chain", ("polyphase", "symmetric"), period=2)),
    "timeshared_sym_k4": (_fir(SYM9), Recipe("timeshared", ("symmetric",), fold=4)),
    "timeshared_anti_k3_pipelined": (_fir(ANTI9), Recipe("timeshared", ("symmetric",), fold=3, period=1)),
    "timeshared_plain_k2": (_fir(PLAIN7, rounding="truncate", overflow="wrap"),
                            Recipe("timeshared", (), fold=2)),
    "timeshared_polyphase_dec3_k4": (_fir(SYM9, dec=3, phase=2),
                                     Recipe("timeshared", ("polyphase", "symmetric"), fold=4, period=3)),
    "timeshared_polyphase_dec2_k8": (_fir(SYM15, dec=2), Recipe("timeshared", ("polyphase", "symmetric"), fold=8)),
    "chain_cic_then_folded": (_chain(), Recipe("chain", ("symmetric",), fold=3)),
    "chain_two_folds": (FixedDesign((FirStage(SYM9, 10, Fmt(14, 11), decimation=2, phase=1),
                                     FirStage(SYM12, 10, Fmt(16, 11))), Fmt(12, 11), "half_even", "saturate"),
                        Recipe("chain", stage_transforms=(("polyphase", "symmetric"), ("symmetric",)),
                               stage_folds=(2, 3))),
    # a folded stage, then a polyphase decimator: the decimator counts the accumulator's done pulses
    "chain_folded_then_polyphase": (FixedDesign((FirStage(SYM9, 10, Fmt(14, 11)),
                                                 FirStage(SYM12, 10, Fmt(16, 11), decimation=2, phase=1)),
                                                Fmt(12, 11), "half_even", "saturate"),
                                    Recipe("chain", stage_transforms=(("symmetric",), ("polyphase", "symmetric")),
                                           stage_folds=(3, 2), period=2)),
    # device delays: the pipeliner puts registers inside the multiplexers (mux_regs 2 here)
    # and in front of the accumulators
    "timeshared_split_ice40": (_fir(SYM15, dec=2), Recipe("timeshared", ("polyphase", "symmetric"), fold=8,
                                                          period=6.0, delay_model="ice40")),
    "chain_split_ice40": (FixedDesign((FirStage(SYM15, 10, Fmt(14, 11), decimation=2, phase=1),
                                       FirStage(SYM12, 10, Fmt(16, 11))), Fmt(12, 11), "half_even", "saturate"),
                          Recipe("chain", stage_transforms=(("polyphase", "symmetric"), ("symmetric",)),
                                 stage_folds=(4, 6), period=4.0, delay_model="ice40")),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_every_structure_bit_exact_with_gaps(case):
    d, recipe = CASES[case]
    g = realize(d, recipe)
    rng = np.random.default_rng(3)
    m = compile_cycles(g)
    for p in (0.0, 0.3, 0.8):
        x = stimulus(rng, d.in_fmt, 90)
        tr = m.run(x, gaps(rng, 10 * len(x), p))
        assert np.array_equal(tr.y, reference.run(d, x)), (case, p)  # bit-true reference
        assert np.array_equal(tr.y, interpret.run(g, x))  # and the sample-level interpreter
        check_contract(tr, g)


def test_wide_words_beyond_int64():
    """Python integers are exact at any width: a 110-bit full-precision output."""
    rng = np.random.default_rng(8)
    c = make_coeffs(rng, 10, 1, 40)
    d = fir_design(c, 40, 64, 110, out_frac=63 + 39)
    g = realize(d, Recipe("timeshared", ("symmetric",), fold=3, period=2))
    x = stimulus(rng, d.in_fmt, 40)
    tr = run_cycles(g, x, gaps(rng, 300, 0.4))
    ref = reference.run(d, x)
    assert ref.dtype == object and tr.y.dtype == object
    assert [int(a) for a in tr.y] == [int(a) for a in ref]


# ------------------------------------------------------------------------------------------------
# (2) the same cycles as the Amaranth simulation of the lowered RTL


def amaranth_trace(g, x, valid, tail=2):
    """pysim of ``lower(g)``, driven as ``verify.check.simulate_amaranth`` drives it, every cycle recorded."""
    from amaranth.hdl import ClockDomain, Module
    from amaranth.sim import Simulator

    dut = lower(g)
    top = Module()
    cd = ClockDomain("sync")
    top.domains.sync = cd
    top.submodules.dut = dut
    sim = Simulator(top)
    sim.add_clock(1e-8, domain="sync")
    x = [int(v) for v in x]
    pat = [int(v) for v in valid]
    res = {}

    async def tb(ctx):
        ctx.set(dut.in_valid, 0)
        ctx.set(cd.rst, 1)
        for _ in range(2):
            await ctx.tick()
        ctx.set(cd.rst, 0)
        taken, outs, ready = [], [], []
        i = c = 0
        done = None
        while True:
            want = i < len(x) and (pat[c] if c < len(pat) else 1)
            ctx.set(dut.in_valid, 1 if want else 0)
            if want:
                ctx.set(dut.in_data, x[i])
            r = bool(ctx.get(dut.in_ready))
            ready.append(r)
            if want and r:
                taken.append(c)
                i += 1
            if ctx.get(dut.out_valid):
                outs.append((c, int(ctx.get(dut.out_data))))
            if i >= len(x) and done is None:
                done = c
            if done is not None and c >= done + dut.latency + tail:
                break
            await ctx.tick()
            c += 1
        res.update(taken=taken, outs=outs, ready=ready)

    sim.add_testbench(tb)
    sim.run()
    return res


AMARANTH_CASES = ["timeshared_sym_k4", "timeshared_anti_k3_pipelined", "timeshared_plain_k2",
                  "timeshared_polyphase_dec3_k4", "timeshared_polyphase_dec2_k8", "chain_two_folds",
                  "chain_folded_then_polyphase", "chain_cic_then_folded", "sos_df1_pipelined", "cic_pipelined",
                  "direct_latency0", "timeshared_split_ice40", "chain_split_ice40"]


@pytest.mark.parametrize("case", AMARANTH_CASES)
def test_cycles_equal_amaranth_simulation(case):
    d, recipe = CASES[case]
    g = realize(d, recipe)
    m = compile_cycles(g)
    rng = np.random.default_rng(17)
    for p in (0.0, 0.35, 0.75):
        x = stimulus(rng, d.in_fmt, 36)
        valid = gaps(rng, 12 * len(x), p)
        a = amaranth_trace(g, x, valid)  # Amaranth pysim of lower(g)
        tr = m.run(x, valid)
        assert tr.taken.tolist() == a["taken"], (case, p)
        assert list(zip(tr.out_cycles.tolist(), [int(v) for v in tr.y])) == a["outs"], (case, p)
        assert tr.in_ready.tolist() == a["ready"], (case, p)


def test_pipeline_registers_inside_a_cone():
    """Registers after the multiplexers and before the accumulators (the transforms put none there):
    the step counter is pipelined alongside, as the lowering does."""
    from tapwright.sfg.graph import copy_graph

    d, _ = CASES["timeshared_sym_k4"]
    g = copy_graph(realize(d, Recipe("timeshared", ("symmetric",), fold=4, register_output=False)))
    n = 0
    for u, v, e in g.edges(data=True):
        if (g.nodes[u]["kind"], g.nodes[v]["kind"]) in (("mul", "acc"), ("mux", "add"), ("mux", "mul")):
            e["pipe"] = 1
            n += 1
    assert n >= 3
    rng = np.random.default_rng(6)
    x = stimulus(rng, d.in_fmt, 30)
    valid = gaps(rng, 300, 0.4)
    tr = run_cycles(g, x, valid)
    a = amaranth_trace(g, x, valid)  # Amaranth pysim of lower(g)
    assert list(zip(tr.out_cycles.tolist(), [int(v) for v in tr.y])) == a["outs"]
    assert tr.in_ready.tolist() == a["ready"]
    assert np.array_equal(tr.y, reference.run(d, x))  # bit-true reference
    check_contract(tr, g)
    assert tr.latency == 4 + 1 + 2  # K + 1, and two registers in the cone


# ------------------------------------------------------------------------------------------------
# (3) latency of the first output


def _tag_delay(tag):
    """Cycles from the input strobe to the strobe of a timing tag (an accumulator's done pulse comes
    K+1 cycles after its cone's strobe, lower.py docstring)."""
    kind, root, d = tag
    if root[0] == "acc":
        r, K = root[1]
        return _tag_delay(("s", r, d + K + 1))
    if root[0] == "dec":
        return _tag_delay(("s", root[1], d))
    return d


@pytest.mark.parametrize("case", sorted(CASES))
def test_first_output_latency_equals_timing_of(case):
    d, recipe = CASES[case]
    g = realize(d, recipe)
    tag = timing_of(g)[output_node(g)]
    tr = run_cycles(g, stimulus(np.random.default_rng(4), d.in_fmt, 24))
    first = tr.out_cycles[0] - tr.taken[d.decimation_phase]
    assert first == _tag_delay(tag) == lower(g).latency
    assert _canon(tag)[2] == first  # the lowering's own consistency view of the same tag


# ------------------------------------------------------------------------------------------------
# (4) Parhi's folding equation, by hand, for a 4-tap FIR

# y(n) = h0 x(n) + h1 x(n-1) + h2 x(n-2) + h3 x(n-3), no product a power of two, folded by K
# (timeshare.py: the products in tap order fill the groups, tap k of group p at step s = k - p*K).
# The edge from the input U to the multiplexer V that reads tap k carries w = k delays; U is the
# input node: u = 0 (the cycle t in which the sample is taken), P_U = 0 (no pipeline stage). The
# lowering runs step s of the iteration started at cycle t in cycle t + 1 + s (the capture edge
# first), so v = s + 1, and
#     D_F(U -> V) = K*w - P_U + v - u = K*k + s + 1 clock cycles
# between taking x(n-k) and reading it. timeshare.folded_delays counts the step itself (v = s):
# one less, the capture register C_0.
#   K = 4, one multiplier, (k, s) = (0,0) (1,1) (2,2) (3,3):
#       D_F = 0+0+1 = 1, 4+1+1 = 6, 8+2+1 = 11, 12+3+1 = 16;  folded_delays: 0, 5, 10, 15.
#   K = 2, two multipliers, (k, s) = (0,0) (1,1) | (2,0) (3,1):
#       D_F = 0+0+1 = 1, 2+1+1 = 4, 4+0+1 = 5, 6+1+1 = 8;     folded_delays: 0, 3, 4, 7.
# Registers (lifetime analysis, Parhi ch. 6, from memory): a sample is captured at the edge after
# it is taken and last read D_F,max cycles after it (16 for K = 4, 8 for K = 2); a new sample
# comes every K cycles, so 16/4 = 8/2 = 4 samples are live at once: 4 registers, the captured
# line C_0..C_3 shifted once per iteration, instead of a D_F,max-long chain clocked every cycle.
HAND = {4: {0: (0, 1), 1: (1, 6), 2: (2, 11), 3: (3, 16)},   # tap k: (step s, D_F)
        2: {0: (0, 1), 1: (1, 4), 2: (0, 5), 3: (1, 8)}}


@pytest.mark.parametrize("K", [2, 4])
def test_parhi_folded_delays_by_hand(K):
    d = FixedDesign((FirStage((3, -5, 7, 11), 5, Fmt(14, 7)),), Fmt(8, 7), "truncate", "saturate")
    g = realize(d, Recipe("timeshared", (), fold=K, register_output=False))
    m = compile_cycles(g)
    muxes = sorted(v for v, n in g.nodes(data=True) if n["kind"] == "mux")
    assert len(muxes) == 4 // K  # one multiplier per group of K products
    # the registers the model clocks: the 4-element captured line, no pipeline registers
    assert m.line_lengths() == {"s0_entry": 4}
    assert not [r for r in m.registers() if r[0] == "pipe"]
    hand = HAND[K]
    taps = sorted(hand)
    assert folded_delays(K, taps, [hand[k][0] for k in taps]) == [hand[k][1] - 1 for k in taps]
    # x(n) = n + 1 identifies the sample a multiplexer passes (0: before the first sample)
    x = np.arange(1, 25)
    for valid in (None, gaps(np.random.default_rng(1), 400, 0.5)):
        tr = m.run(x, valid, probe=muxes)
        seen = {}
        for n in range(3, len(x)):
            for p, mux in enumerate(muxes):
                for s in range(K):
                    c = tr.taken[n] + 1 + s
                    j = int(tr.probes[mux][c]) - 1
                    k = n - j
                    # the right sample for the step, whatever the gaps (z are sample delays)
                    assert hand[k][0] == s and k // K == p, (K, n, mux, s, k)
                    seen.setdefault(k, set()).add(int(c - tr.taken[j]))
        if valid is None:  # back to back, one iteration every K cycles: Parhi's schedule
            assert tr.taken.tolist() == [K * n for n in range(len(x))]
            assert seen == {k: {hand[k][1]} for k in taps}
        else:  # with gaps, samples wait in the line: at least the folded delay
            assert all(min(seen[k]) >= hand[k][1] for k in taps)
        assert np.array_equal(tr.y, reference.run(d, x))
        # the sum is complete K + 1 cycles after the sample is taken (acc = stage + K + 1)
        assert (tr.latencies == K + 1).all()


# ------------------------------------------------------------------------------------------------
# (5) registers inside a multiplexer (mux_regs) and in front of an accumulator


@pytest.mark.parametrize("L,K,r,sym", [(24, 12, 1, 1), (24, 12, 2, 1), (40, 20, 3, 1), (13, 7, 2, 0),
                                       (18, 9, 1, -1)])
def test_registers_inside_a_multiplexer(L, K, r, sym):
    """A multiplexer with ``r`` registers between its select levels equals the plain one
    followed by ``r`` pipeline registers: the cycle interpreter (which reads the graph
    that way), the Amaranth simulation of the lowering (which builds the split tree) and
    the bit-true reference agree, cycle by cycle."""
    from tapwright.sfg.graph import copy_graph

    rng = np.random.default_rng(L * 100 + K * 10 + r)
    d = fir_design(make_coeffs(rng, L, sym, 12), 12, 10, 14)
    tr = ("symmetric",) if sym else ()
    g = copy_graph(realize(d, Recipe("timeshared", tr, fold=K, register_output=False)))
    muxes = [v for v, n in g.nodes(data=True) if n["kind"] == "mux"]
    assert muxes
    for v in muxes:
        g.nodes[v]["mux_regs"] = r
        for _, _, e in g.out_edges(v, data=True):
            e["pipe"] = r
    x = stimulus(rng, d.in_fmt, 24)
    valid = gaps(rng, 30 * len(x), 0.3)
    t = run_cycles(g, x, valid)
    a = amaranth_trace(g, x, valid)  # Amaranth pysim of lower(g): the split select tree
    assert list(zip(t.out_cycles.tolist(), [int(v) for v in t.y])) == a["outs"]
    assert t.in_ready.tolist() == a["ready"]
    assert np.array_equal(t.y, reference.run(d, x))  # bit-true reference
    check_contract(t, g)


def test_pipeliner_splits_long_multiplexers_and_registers_accumulators():
    """On iCE40 delays a 20:1 operand multiplexer is longer than a 14 ns period: the
    pipeliner puts registers inside it (every reader at least that many stages later) and
    one in front of each accumulator whose product path does not fit with it; the longest
    path is then set by the slowest node no register can cut (the model's own rule,
    sfg/transforms/pipeline.py), and the result is bit-exact against the reference."""
    from tapwright.cost.timing import delay_function
    from tapwright.sfg.transforms.pipeline import critical_path, node_delays

    f = delay_function("ice40")
    rng = np.random.default_rng(3)
    d = fir_design(make_coeffs(rng, 40, 1, 16), 16, 14, 18)
    g = realize(d, Recipe("timeshared", ("symmetric",), fold=20, period=14.0, delay_model="ice40"))
    split = {v: n["mux_regs"] for v, n in g.nodes(data=True) if n.get("mux_regs")}
    assert split
    for v, r in split.items():
        assert all(e["pipe"] >= r for _, _, e in g.out_edges(v, data=True))
    assert any(e["pipe"] >= 1 for u, w, e in g.edges(data=True)
               if g.nodes[u]["kind"] == "mul" and g.nodes[w]["kind"] == "acc")
    nd = node_delays(g, f)
    floor = max(t for v, t in nd.items() if g.nodes[v]["kind"] != "mux")
    unsplit = realize(d, Recipe("timeshared", ("symmetric",), fold=20, delay_model="ice40"))
    assert critical_path(g, f) <= max(14.0, floor) + 1e-9 < critical_path(unsplit, f)
    x = stimulus(rng, d.in_fmt, 30)
    t = run_cycles(g, x, gaps(rng, 900, 0.3))
    assert np.array_equal(t.y, reference.run(d, x))
    check_contract(t, g)


@pytest.mark.parametrize("case", ["timeshared_split_ice40", "chain_split_ice40"])
def test_split_cases_still_split(case):
    # the two cases above exist to run split multiplexers through the Amaranth comparison
    d, recipe = CASES[case]
    g = realize(d, recipe)
    assert any(n.get("mux_regs") for n in g._node.values())
