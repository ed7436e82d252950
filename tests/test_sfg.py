"""Signal-flow graphs: builders x transforms are bit-exact against the reference.

Outside references named beside the checks:
- transposition theorem (Crochiere & Oppenheim, Proc. IEEE 63(4), 1975): a
  transposed graph has the same transfer function; checked with
  scipy.signal.freqz on the coefficients extracted from the graph's impulse
  response (SciPy as reference library);
- multiplier counts: ceil(L/2) after symmetric folding (common practice); a
  halfband of length 4K-1 needs K multipliers plus the 1/2 centre shift
  (Vaidyanathan & Nguyen, IEEE TCAS 34(1), 1987); a polyphase decimator by M of
  length L does L/M products per input sample (Crochiere & Rabiner,
  Multirate Digital Signal Processing, 1983, ch. 3);
- iteration bound of a biquad from its loops (Parhi, VLSI DSP Systems, 1999, ch. 2).
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import signal

from tapwright.fixed import reference
from tapwright.fixed.formats import Fmt
from tapwright.fixed.stages import CicStage, FirStage, FixedDesign, Section, SosStage
from tapwright.sfg import build, interpret
from tapwright.sfg.graph import check, input_interval
from tapwright.sfg.metrics import measure
from tapwright.sfg.recipe import Recipe, realize
from tapwright.sfg.transforms import pipeline as P
from tapwright.sfg.transforms import structure as T
from tapwright.sfg.transforms.timeshare import folded_delays, timeshare

ROUND = ("truncate", "half_up", "half_even")
OVF = ("saturate", "wrap")


def make_coeffs(rng, L, sym, cbits, halfband=False):
    hi = (1 << (cbits - 1)) - 1
    h = rng.integers(-hi, hi + 1, size=L)
    if sym == 1:
        h = np.array([h[min(i, L - 1 - i)] for i in range(L)])
    elif sym == -1:
        h = np.array([h[i] if i < L - 1 - i else (-h[L - 1 - i] if i > L - 1 - i else 0) for i in range(L)])
    if halfband:
        c = (L - 1) // 2
        h = np.array([h[i] if (i - c) % 2 else 0 for i in range(L)])
        h[c] = 1 << (cbits - 2)
    return tuple(int(v) for v in h)


def fir_design(coeffs, cbits, in_bits, out_bits, dec=1, phase=0, rounding="half_up", ovf="saturate", out_frac=None):
    in_fmt = Fmt(in_bits, in_bits - 1)
    of = Fmt(out_bits, in_bits - 1 if out_frac is None else out_frac)
    st_ = FirStage(coeffs=coeffs, coeff_frac=cbits - 1, out=of, decimation=dec, phase=phase)
    return FixedDesign((st_,), in_fmt, rounding, ovf)


def stimulus(rng, fmt, n):
    x = rng.integers(fmt.lo, fmt.hi + 1, size=n)
    x[:3] = [fmt.hi, fmt.lo, 0]
    return x


FIR_RECIPES = [
    Recipe("direct"),
    Recipe("transposed", ("transposed",)),
    Recipe("symmetric", ("symmetric",)),
    Recipe("transposed", ("transposed", "symmetric")),
    Recipe("polyphase", ("polyphase",)),
    Recipe("polyphase", ("polyphase", "symmetric")),
    Recipe("direct", (), period=2.0),
    Recipe("symmetric", ("symmetric",), period=3.0),
    Recipe("timeshared", ("symmetric",), fold=3),
    Recipe("timeshared", ("polyphase", "symmetric"), fold=4, period=3.0),
    Recipe("timeshared", (), fold=5),
]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(L=st.integers(1, 24), sym=st.sampled_from([0, 1, -1]), dec=st.integers(1, 8), data=st.data(),
       cbits=st.integers(4, 24), in_bits=st.integers(4, 24), rounding=st.sampled_from(ROUND),
       ovf=st.sampled_from(OVF), seed=st.integers(0, 2**31 - 1))
def test_every_structure_bit_exact(L, sym, dec, data, cbits, in_bits, rounding, ovf, seed):
    """For all random quantized designs and all structures the interpreter equals the reference."""
    rng = np.random.default_rng(seed)
    phase = data.draw(st.integers(0, dec - 1))
    coeffs = make_coeffs(rng, L, sym, cbits)
    out_bits = data.draw(st.integers(max(2, in_bits - 4), in_bits + cbits + 4))
    d = fir_design(coeffs, cbits, in_bits, out_bits, dec, phase, rounding, ovf)
    x = stimulus(rng, d.in_fmt, 120)
    ref = reference.run(d, x)
    for r in FIR_RECIPES:
        if "polyphase" in r.transforms and dec == 1:
            continue
        try:
            g = realize(d, r)
        except ValueError as e:  # nothing to time-share (all products free)
            assert "nothing" in str(e)
            continue
        check(g)
        y = interpret.run(g, x)
        assert np.array_equal(y, ref), (r.label, L, sym, dec, phase)


def test_halfband_structures_bit_exact():
    rng = np.random.default_rng(7)
    for L in (7, 11, 15, 19, 23):
        coeffs = make_coeffs(rng, L, 1, 16, halfband=True)
        for dec, phase in ((1, 0), (2, 0), (2, 1)):
            d = fir_design(coeffs, 16, 16, 20, dec, phase)
            x = stimulus(rng, d.in_fmt, 200)
            ref = reference.run(d, x)
            trs = [("halfband", "symmetric")] + ([("polyphase", "halfband", "symmetric")] if dec > 1 else [])
            for tr in trs:
                g = realize(d, Recipe("halfband", tr))
                assert np.array_equal(interpret.run(g, x), ref)


def _nonfree_mults(g):
    return measure(g).n_mults


def test_multiplier_counts_match_textbook():
    rng = np.random.default_rng(3)
    for L in (15, 16, 31, 32):
        d = fir_design(make_coeffs(rng, L, 1, 16), 16, 16, 24)
        g = realize(d, Recipe("symmetric", ("symmetric",)))
        # symmetric folding: ceil(L/2) multipliers (common practice)
        assert _nonfree_mults(g) == math.ceil(L / 2)
    for K in (2, 3, 4, 6):
        L = 4 * K - 1
        coeffs = list(make_coeffs(rng, L, 1, 16, halfband=True))
        # make sure no tap is a power of two by chance
        coeffs = [c if c == 0 or c == 1 << 14 or (abs(c) & (abs(c) - 1)) else c + 3 for c in coeffs]
        coeffs = tuple(coeffs[i] if i <= (L - 1) // 2 else coeffs[L - 1 - i] for i in range(L))
        d = fir_design(coeffs, 16, 16, 24, 2, 0)
        g = realize(d, Recipe("halfband", ("polyphase", "halfband", "symmetric")))
        # halfband of length 4K-1: K multipliers, the centre 1/2 is a shift (Vaidyanathan & Nguyen 1987)
        assert _nonfree_mults(g) == K
    for M in (2, 3, 4, 8):
        L = 8 * M
        d = fir_design(make_coeffs(rng, L, 0, 16), 16, 16, 24, M, 0)
        g = realize(d, Recipe("polyphase", ("polyphase",)))
        # polyphase: L products per output sample = L/M per input sample (Crochiere & Rabiner 1983)
        assert _nonfree_mults(g) == L
        assert sum(1 for _, n in g.nodes(data=True) if n["kind"] == "decim") == M


def _impulse_coeffs(g, n):
    x = np.zeros(n, dtype=np.int64)
    x[0] = 1 << 10
    return interpret.run(g, x)


def test_transposition_theorem_same_transfer_function():
    rng = np.random.default_rng(11)
    coeffs = make_coeffs(rng, 21, 0, 14)
    d = fir_design(coeffs, 14, 16, 40, out_frac=15 + 13)  # full precision out: no rounding
    gd = realize(d, Recipe("direct", register_output=False))
    gt = realize(d, Recipe("transposed", ("transposed",), register_output=False))
    hd = _impulse_coeffs(gd, 30)
    ht = _impulse_coeffs(gt, 30)
    w, Hd = signal.freqz(hd.astype(float), worN=512)  # SciPy as reference
    _, Ht = signal.freqz(ht.astype(float), worN=512)
    _, Hc = signal.freqz(np.array(coeffs, float) * (1 << 10), worN=512)
    assert np.allclose(Hd, Ht) and np.allclose(Hd, Hc)
    # and the transposed graph really is transposed: its products read the input itself
    mul_srcs = {u for v, n in gt.nodes(data=True) if n["kind"] == "mul" for u in gt.predecessors(v)}
    assert len(mul_srcs) == 1


def biquad_design(form_bits=20):
    sec = Section(b=(1000, 2000, 1000), a=(1 << 14, -20000, 8000), coeff_frac=14, state=Fmt(form_bits, 16))
    return FixedDesign((SosStage(sections=(sec, sec), out=Fmt(18, 15)),), Fmt(16, 15), "half_up", "saturate")


@pytest.mark.parametrize("form", ["df1", "df2t"])
def test_sos_forms_bit_exact(form):
    rng = np.random.default_rng(5)
    d = biquad_design()
    x = stimulus(rng, d.in_fmt, 400)
    g = realize(d, Recipe("sos_" + form, sos_form=form))
    assert np.array_equal(interpret.run(g, x), reference.run(d, x))


def test_iteration_bound_of_biquads_by_hand():
    """Parhi ch. 2: T_inf = max over loops of (loop time / loop delays).

    Unit delays: multiply 2, add 1, rounding 1. DF1 loops y -> a1 (z^-1) -> acc -> round:
    (2 + 1 + 1)/1 = 4; via a2 over z^-2: 4/2. DF2T: y -> a1 -> s1 -z^-1-> acc -> round:
    (2 + 1 + 1 + 1)/1 = 5 (s1 and acc are two adders); the a2 loop has 6/2 = 3.
    """
    d = biquad_design()
    g1 = realize(d, Recipe("sos_df1", sos_form="df1", register_output=False))
    g2 = realize(d, Recipe("sos_df2t", sos_form="df2t", register_output=False))
    assert P.iteration_bound(g1) == pytest.approx(4.0)
    assert P.iteration_bound(g2) == pytest.approx(5.0)
    assert P.iteration_bound(realize(fir_design((1, 2, 3), 4, 8, 12), Recipe("direct"))) == 0.0


def test_cic_bit_exact_and_pipelined():
    rng = np.random.default_rng(9)
    cs = CicStage(order=3, decimation=8, diff_delay=1, drop=(0, 3, 4, 5, 6, 7), out=Fmt(12, 2), in_fmt=Fmt(12, 11))
    d = FixedDesign((cs,), Fmt(12, 11), "truncate", "saturate")
    x = stimulus(rng, d.in_fmt, 800)
    for r in (Recipe("cic"), Recipe("cic", period=2.0)):
        assert np.array_equal(interpret.run(realize(d, r), x), reference.run(d, x))


def test_pipelining_meets_target_and_counts_latency():
    rng = np.random.default_rng(1)
    d = fir_design(make_coeffs(rng, 16, 0, 12), 12, 16, 24)
    g = realize(d, Recipe("direct", register_output=False))
    assert P.critical_path(g) == 2 + 4 + 1  # product, 4 adder levels, rounding
    assert P.latency(g) == 0
    for period in (4, 3, 2):
        h = P.pipeline(g, period)
        assert P.critical_path(h) <= period
        x = stimulus(rng, d.in_fmt, 100)
        assert np.array_equal(interpret.run(h, x), reference.run(d, x))
    assert P.latency(P.pipeline(g, 2)) > P.latency(P.pipeline(g, 4))


def _correlator():
    """The correlator of Leiserson & Saxe (Algorithmica 6, 1991, Fig. 1; from memory).

    Host vh (delay 0), comparators v1..v4 (delay 3), adders v5..v7 (delay 7);
    registers: one on each of vh->v1, v1->v2, v2->v3, v3->v4, none elsewhere.
    Its clock period is 24 (v4 v5 v6 v7 vh) and the paper's optimal retiming
    reaches 13.
    """
    from tapwright.sfg.graph import add_node, connect, new_graph

    g = new_graph("corr", Fmt(8, 0), "truncate", "wrap")
    g.nodes["in"]["t"] = 0.0
    v = {i: add_node(g, "add", name=f"v{i}", t=3.0 if i <= 4 else 7.0) for i in range(1, 8)}
    add_node(g, "output", name="out", t=0.0)
    connect(g, "in", v[1], z=1)
    connect(g, v[1], v[2], z=1)
    connect(g, v[2], v[3], z=1)
    connect(g, v[3], v[4], z=1)
    for a, b in ((1, 7), (2, 6), (3, 5), (4, 5), (5, 6), (6, 7)):
        connect(g, v[a], v[b])
    connect(g, v[7], "out")
    connect(g, "out", "in")  # the host closes the ring
    return g


def test_leiserson_saxe_correlator_example():
    import networkx as nx

    g = _correlator()
    assert P.critical_path(g) == pytest.approx(24.0)
    h, period, r = P.retime(g)
    assert period == pytest.approx(13.0)
    assert P.critical_path(h) == pytest.approx(13.0)
    # retiming keeps the register count of every cycle (Leiserson & Saxe, Lemma 1)
    dg = nx.DiGraph(g)

    def regs(G, cyc):
        return sum(min(d["z"] + d["pipe"] for d in G[cyc[i]][cyc[(i + 1) % len(cyc)]].values())
                   for i in range(len(cyc)))
    for cyc in nx.simple_cycles(dg):
        assert regs(g, cyc) == regs(h, cyc)


def test_folding_equation_and_interval():
    """Parhi eq. 6.1: D_F(U->V) = K*w(e) - P_U + v - u; tap k read at step s -> K*k + s."""
    assert folded_delays(4, [0, 1, 2, 3], [0, 1, 2, 3]) == [0, 5, 10, 15]
    rng = np.random.default_rng(2)
    d = fir_design(make_coeffs(rng, 16, 1, 12), 12, 16, 24)
    base = realize(d, Recipe("symmetric", ("symmetric",), register_output=False))
    f = timeshare(base, 4)
    assert measure(f).n_mults == 2  # 8 products / 4 steps
    assert input_interval(f) == 4
    dd = fir_design(make_coeffs(rng, 16, 1, 12), 12, 16, 24, dec=4)
    fp = timeshare(realize(dd, Recipe("polyphase", ("polyphase", "symmetric"), register_output=False)), 8)
    assert measure(fp).n_mults == 1 and input_interval(fp) == 2


def test_fast_copy_and_topological_order_agree_with_networkx():
    # networkx itself is the reference: copy_graph must equal MultiDiGraph.copy()
    # (same nodes, edges, keys and attributes, fully independent), and
    # condensed_order must be a topological order of networkx's condensation.
    import networkx as nx

    from tapwright.sfg.graph import condensed_order, copy_graph
    h = FirStage(coeffs=(3, -5, 7, 9, 7, -5, 3), coeff_frac=4, out=Fmt(20, 4))
    d = FixedDesign((h,), Fmt(12, 0), "half_up", "saturate")
    for r in (Recipe("symmetric", transforms=("symmetric",)), Recipe("timeshared", fold=2)):
        g = realize(d, r)
        c = copy_graph(g)
        ref = g.copy()
        assert list(c.nodes(data=True)) == list(ref.nodes(data=True))
        assert sorted(c.edges(keys=True, data=True), key=str) == sorted(ref.edges(keys=True, data=True), key=str)
        assert [list(c.predecessors(v)) for v in c] == [list(ref.predecessors(v)) for v in ref]
        u, v, k = next(iter(c.edges(keys=True)))
        c.edges[u, v, k]["z"] += 5
        c.nodes[u]["touched"] = True
        assert g.edges[u, v, k]["z"] == ref.edges[u, v, k]["z"] and "touched" not in g.nodes[u]
        pos = {x: i for i, comp in enumerate(condensed_order(g)) for x in comp}
        assert all(pos[a] < pos[b] for a, b in g.edges())
    # a recursive graph: loops come out as one component each, in topological order
    g = realize(biquad_design(), Recipe("sos_df1", sos_form="df1"))
    comps = condensed_order(g)
    ref = nx.condensation(nx.DiGraph(g))
    assert sorted(len(c) for c in comps) == sorted(len(m) for _, m in ref.nodes(data="members"))
    pos = {x: i for i, comp in enumerate(comps) for x in comp}
    assert all(pos[a] <= pos[b] for a, b in g.edges())


def test_transforms_are_pure_functions():
    # the structural caches in sfg/recipe.py hand one built graph to every transform:
    # each transform must leave its input exactly as it was (common practice for caching)
    from tapwright.sfg.recipe import _TRANSFORM
    h = FirStage(coeffs=(3, 0, 7, 16, 7, 0, 3), coeff_frac=4, out=Fmt(20, 4))
    d = FixedDesign((h,), Fmt(12, 0), "half_up", "saturate")

    def snap(g):
        # "_" entries of the graph dict cache figures of the graph (node delays): not part of it
        graph = {k: v for k, v in g.graph.items() if not k.startswith("_")}
        return (list(g.nodes(data=True)), sorted(map(str, g.edges(keys=True, data=True))), graph)

    for t, fn in _TRANSFORM.items():
        g = build.build(d)
        before = repr(snap(g))
        fn(g)
        assert repr(snap(g)) == before, t
    g = build.build(d)
    before = repr(snap(g))
    timeshare(g, 2)
    P.pipeline(g, 2.0)
    assert repr(snap(g)) == before
    # the cached node delays of a pipelined graph equal the ones computed afresh
    from tapwright.cost.timing import delay_function
    f = delay_function("ecp5")
    g = P.pipeline(timeshare(build.build(d), 2), 3.0, f)
    assert g.graph["_delays"][1] == {v: P.node_delay(g, v, f) for v in g.nodes}


def test_metrics_share_identical_products_and_find_zero_low_bits():
    # identical constant products of one operand are one multiplier after synthesis
    # (Yosys opt_merge; probe test_identical_constant_products_are_shared): the
    # df2t biquad with b = (1000, 2000, 1000) multiplies its input by 1000 twice
    from tapwright.sfg.metrics import zero_lsbs
    m1 = measure(realize(biquad_design(), Recipe("sos_df1", sos_form="df1")))
    m2 = measure(realize(biquad_design(), Recipe("sos_df2t", sos_form="df2t")))
    assert len(m1.mults) == 2 * 5 and not m1.shared_mults   # df1: x[n], x[n-2] are different words
    assert len(m2.mults) == 2 * 4 and len(m2.shared_mults) == 2
    # a product by 8 = 2**3 ends in three zero bits, a product by 12 = 3 * 2**2 in two
    # (hand arithmetic), and a sum keeps the fewer
    st = FirStage(coeffs=(12, 8), coeff_frac=4, out=Fmt(20, 4))
    g = build.build(FixedDesign((st,), Fmt(12, 0), "half_up", "saturate"))
    tz = zero_lsbs(g)
    prods = {g.nodes[v]["coeff"]: tz[v] for v, n in g.nodes(data=True) if n["kind"] == "mul"}
    assert prods == {12: 2, 8: 3}
    tree = [v for v, n in g.nodes(data=True) if n["kind"] == "add" and n.get("role") == "tree"]
    assert tree and all(tz[v] == 2 for v in tree)


@pytest.mark.parametrize("cbits,in_bits", [(12, 12), (26, 30), (40, 40)])
def test_interpreter_linear_forms_exact_at_every_width(cbits, in_bits):
    # the interpreter sums adder trees as linear forms (float64 convolution below 2**53,
    # int64 or Python integers above); the bit-true reference is the outside model
    rng = np.random.default_rng(cbits)
    c = [int(v) for v in rng.integers(-(1 << (cbits - 1)), 1 << (cbits - 1), size=9)]
    st = FirStage(coeffs=tuple(c), coeff_frac=cbits - 1, out=Fmt(in_bits + 4, in_bits - 1))
    d = FixedDesign((st,), Fmt(in_bits, in_bits - 1), "half_even", "saturate")
    x = stimulus(rng, d.in_fmt, 300)
    x[:3] = [d.in_fmt.hi, d.in_fmt.lo, d.in_fmt.hi]
    for r in (Recipe("direct"), Recipe("transposed", transforms=("transposed",))):
        assert np.array_equal(interpret.run(realize(d, r), x), reference.run(d, x))


def test_fingerprint_ignores_names_and_sees_hardware():
    """sfg.graph.fingerprint: the same graph under other node names hashes the same (the
    explorer lists such candidates once); a changed coefficient or one more pipeline
    register changes it (networkx.relabel_nodes builds the renamed copy)."""
    import networkx as nx

    from tapwright.sfg.graph import copy_graph, fingerprint

    d = fir_design((3, -5, 7, 9, 7, -5, 3), 8, 10, 16)
    g = realize(d, Recipe("timeshared", ("symmetric",), fold=2, period=3.0))
    renamed = nx.relabel_nodes(g, {v: f"n_{i}" for i, v in enumerate(reversed(list(g)))})
    assert fingerprint(renamed) == fingerprint(g)
    other = realize(fir_design((3, -5, 7, 11, 7, -5, 3), 8, 10, 16),
                    Recipe("timeshared", ("symmetric",), fold=2, period=3.0))
    assert fingerprint(other) != fingerprint(g)
    piped = copy_graph(g)
    u, v, k = next(iter(piped.edges(keys=True)))
    piped.edges[u, v, k]["pipe"] += 1
    assert fingerprint(piped) != fingerprint(g)


# --- graph orders on plain dicts, against networkx as the reference library ---

@settings(max_examples=60, deadline=None)
@given(st.integers(2, 14).flatmap(lambda n: st.tuples(
    st.just(n), st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=3 * n))))
def test_orders_and_components_match_networkx(case):
    """lex_order, strong_components and condensed_order (on graphs with loops) give
    what networkx's lexicographical_topological_sort, strongly_connected_components
    and condensation give on the same graph (the functions were rewritten on the adjacency dicts for
    speed; networkx is the reference)."""
    import networkx as nx

    from tapwright.sfg.graph import condensed_order, lex_order, strong_components

    n, pairs = case
    names = [f"n{(i * 7) % n}_{i}" for i in range(n)]   # insertion order differs from name order
    g = nx.MultiDiGraph()
    g.add_nodes_from(names)
    g.add_edges_from((names[u], names[v]) for u, v in pairs)
    dg = nx.DiGraph(g)
    ours = {frozenset(c) for c in strong_components(g._succ)}
    assert ours == {frozenset(c) for c in nx.strongly_connected_components(dg)}
    cond = nx.condensation(dg)
    comps = {}
    for v, c in cond.graph["mapping"].items():
        comps.setdefault(c, []).append(v)
    want = [sorted(comps[c], key=str) for c in
            nx.lexicographical_topological_sort(cond, key=lambda c: min(map(str, comps[c])))]
    if nx.is_directed_acyclic_graph(g):
        # feed-forward graphs take Kahn's order (any topological order will do)
        got = [c[0] for c in condensed_order(g)]
        assert sorted(got) == sorted(names)
        assert all(got.index(u) < got.index(v) for u, v in dg.edges())
    else:
        assert condensed_order(g) == want
    dag = [(u, v) for u, v in dg.edges() if names.index(u) < names.index(v)]
    h = nx.DiGraph()
    h.add_nodes_from(names)
    h.add_edges_from(dag)
    assert lex_order(names, dag) == list(nx.lexicographical_topological_sort(h, key=str))
    if not nx.is_directed_acyclic_graph(dg):
        with pytest.raises(nx.NetworkXUnfeasible):
            lex_order(names, dg.edges())
