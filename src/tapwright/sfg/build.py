"""Builders: signal-flow graphs from quantized stages.

Every builder appends one stage to a graph, from a source node, and returns the
node that carries the stage's output. Nodes are tagged with ``stage`` (the
stage's index in the design) and ``role`` so transforms can find their region:

- ``entry``: the wire where the stage starts;
- ``tap``: a point of the input delay line (``tap`` attribute = its delay);
- ``mul``: coefficient products (``tap`` attribute = coefficient index);
- ``tree`` / ``chain``: adders of the sum;
- ``exit``: the last node of the linear part, before rounding.
"""
from __future__ import annotations

import networkx as nx

from ..fixed.formats import Fmt
from ..fixed.stages import CicStage, FirStage, FixedDesign, SosStage
from .graph import add_node, connect, new_graph, propagate


def adder_tree(g, terms, *, stage: int, role: str = "tree"):
    """Balanced binary tree summing ``terms`` (list of ``(node, sign)``); returns the root."""
    if not terms:
        raise ValueError("adder tree of nothing")
    level = list(terms)
    depth = 0
    if len(level) == 1:
        (n, s), = level
        if s == 1:
            return n
        a = add_node(g, "add", role=role, stage=stage, level=1)
        connect(g, n, a, sign=-1)
        return a
    while len(level) > 1:
        depth += 1
        nxt = []
        for i in range(0, len(level) - 1, 2):
            (a, sa), (b, sb) = level[i], level[i + 1]
            if sa == -1 and sb == 1:
                (a, sa), (b, sb) = (b, sb), (a, sa)
            sign_out = 1
            if sa == -1 and sb == -1:  # -a - b = -(a + b): keep one adder, carry the sign
                sa = sb = 1
                sign_out = -1
            v = add_node(g, "add", role=role, stage=stage, level=depth)
            connect(g, a, v, sign=sa)
            connect(g, b, v, sign=sb)
            nxt.append((v, sign_out))
        if len(level) % 2:
            nxt.append(level[-1])
        level = nxt
    root, s = level[0]
    if s == -1:
        a = add_node(g, "add", role=role, stage=stage, level=depth + 1)
        connect(g, root, a, sign=-1)
        root = a
    return root


def _entry(g, src, stage: int):
    e = add_node(g, "add", name=f"s{stage}_entry", role="entry", stage=stage)
    connect(g, src, e)
    return e


def _finish(g, lin, st, *, stage: int, rounding: str, overflow: str, decim: bool = True):
    q = add_node(g, "quant", name=f"s{stage}_round", fmt=st.out, rounding=rounding, overflow=overflow,
                 stage=stage, role="round")
    connect(g, lin, q)
    end = q
    dec = getattr(st, "decimation", 1)
    if decim and dec > 1:
        d = add_node(g, "decim", name=f"s{stage}_decim", factor=dec, phase=st.phase, stage=stage, role="decim")
        connect(g, q, d)
        end = d
    return end


def fir_direct(g, src, st: FirStage, *, stage: int, rounding: str, overflow: str, adder: str = "tree"):
    """Direct form: a delay line of taps, one product per coefficient, an adder tree (or chain)."""
    e = _entry(g, src, stage)
    taps = [e]
    g._node[e]["tap"] = 0
    for k in range(1, st.ntaps):
        t = add_node(g, "add", name=f"s{stage}_t{k}", role="tap", tap=k, stage=stage)
        connect(g, taps[-1], t, z=1)
        taps.append(t)
    prods = []
    for k, c in enumerate(st.coeffs):
        m = add_node(g, "mul", name=f"s{stage}_m{k}", coeff=int(c), coeff_frac=st.coeff_frac,
                     role="mul", tap=k, stage=stage)
        connect(g, taps[k], m)
        prods.append((m, 1))
    if adder == "chain":
        acc = prods[0][0]
        for i, (m, _) in enumerate(prods[1:], 1):
            a = add_node(g, "add", name=f"s{stage}_c{i}", role="chain", stage=stage, level=i)
            connect(g, acc, a)
            connect(g, m, a)
            acc = a
        root = acc
    else:
        root = adder_tree(g, prods, stage=stage)
    g._node[root]["exit"] = True
    return _finish(g, root, st, stage=stage, rounding=rounding, overflow=overflow)


def cic(g, src, st: CicStage, in_fmt: Fmt, *, stage: int, rounding: str, overflow: str):
    """Hogenauer CIC: N integrator loops with wrap, rate change, N combs; pruning by ``drop``."""
    widths = st.widths
    cur, prev = _entry(g, src, stage), 0
    for j in range(st.order):
        q = add_node(g, "quant", name=f"s{stage}_i{j}_prune",
                     fmt=Fmt(widths[j], in_fmt.frac - st.drop[j]), rounding="truncate", overflow="wrap",
                     stage=stage, role="prune")
        connect(g, cur, q)
        a = add_node(g, "add", name=f"s{stage}_i{j}_sum", role="integ", stage=stage)
        w = add_node(g, "quant", name=f"s{stage}_i{j}", fmt=Fmt(widths[j], in_fmt.frac - st.drop[j]),
                     rounding="truncate", overflow="wrap", stage=stage, role="integ_reg")
        connect(g, q, a)
        connect(g, w, a, z=1)
        connect(g, a, w)
        cur = w
    d = add_node(g, "decim", name=f"s{stage}_decim", factor=st.decimation, phase=st.phase, stage=stage,
                 role="decim")
    connect(g, cur, d)
    cur = d
    for j in range(st.order, 2 * st.order):
        f = Fmt(widths[j], in_fmt.frac - st.drop[j])
        q = add_node(g, "quant", name=f"s{stage}_c{j}_prune", fmt=f, rounding="truncate", overflow="wrap",
                     stage=stage, role="prune")
        connect(g, cur, q)
        a = add_node(g, "add", name=f"s{stage}_c{j}_sum", role="comb", stage=stage)
        connect(g, q, a)
        connect(g, q, a, z=st.diff_delay, sign=-1)
        w = add_node(g, "quant", name=f"s{stage}_c{j}", fmt=f, rounding="truncate", overflow="wrap",
                     stage=stage, role="comb_out")
        connect(g, a, w)
        cur = w
    g._node[cur]["exit"] = True
    return _finish(g, cur, st, stage=stage, rounding=rounding, overflow=overflow, decim=False)


def sos(g, src, st: SosStage, in_fmt: Fmt, *, stage: int, rounding: str, overflow: str, form: str = "df1"):
    """Cascade of biquads in direct form I (``df1``) or transposed direct form II (``df2t``).

    Both realise the same arithmetic (fixed/stages.Section): the sum is exact
    and the only rounding is the section output, saturated to the state
    format. In df2t the two state registers hold exact partial sums.
    """
    cur, f_in = _entry(g, src, stage), in_fmt
    for i, s in enumerate(st.sections):
        tag = f"s{stage}_b{i}"
        y = add_node(g, "quant", name=f"{tag}_y", fmt=s.state, rounding=rounding, overflow="saturate",
                     stage=stage, role="sos_y", section=i)
        b = [add_node(g, "mul", name=f"{tag}_b{k}", coeff=int(s.b[k]), coeff_frac=s.coeff_frac, role="mul",
                      stage=stage, section=i) for k in range(3)]
        a = [add_node(g, "mul", name=f"{tag}_a{k}", coeff=int(s.a[k]), coeff_frac=s.coeff_frac, role="mul",
                      stage=stage, section=i) for k in (1, 2)]
        if form == "df1":
            # delay lines on x and y (narrow words), products of delayed samples
            for k, m in enumerate(b):
                connect(g, cur, m, z=k)
            connect(g, y, a[0], z=1)
            connect(g, y, a[1], z=2)
            acc = add_node(g, "add", name=f"{tag}_acc", role="tree", stage=stage, section=i)
            for m in b:
                connect(g, m, acc)
            connect(g, a[0], acc, sign=-1)
            connect(g, a[1], acc, sign=-1)
            connect(g, acc, y)
        elif form == "df2t":
            for m in b:
                connect(g, cur, m)
            for m in a:
                connect(g, y, m)
            s2 = add_node(g, "add", name=f"{tag}_s2", role="chain", stage=stage, section=i)
            connect(g, b[2], s2)
            connect(g, a[1], s2, sign=-1)
            s1 = add_node(g, "add", name=f"{tag}_s1", role="chain", stage=stage, section=i)
            connect(g, b[1], s1)
            connect(g, a[0], s1, sign=-1)
            connect(g, s2, s1, z=1)
            acc = add_node(g, "add", name=f"{tag}_acc", role="chain", stage=stage, section=i)
            connect(g, b[0], acc)
            connect(g, s1, acc, z=1)
            connect(g, acc, y)
        else:
            raise ValueError(f"unknown biquad form {form!r}")
        cur, f_in = y, s.state
    g._node[cur]["exit"] = True
    return _finish(g, cur, st, stage=stage, rounding=rounding, overflow=overflow)


def build(design: FixedDesign, *, name: str = "filter", fir_adder: str = "tree", sos_form: str = "df1"):
    """The direct-form graph of a whole design (stages in order); formats propagated."""
    g = new_graph(name, design.in_fmt, design.rounding, design.overflow, structure="direct",
                  decimation=design.decimation, phase=design.decimation_phase)
    cur, f = "in", design.in_fmt
    for i, st in enumerate(design.stages):
        if st.kind == "fir":
            cur = fir_direct(g, cur, st, stage=i, rounding=design.rounding, overflow=design.overflow, adder=fir_adder)
        elif st.kind == "cic":
            cur = cic(g, cur, st, f, stage=i, rounding=design.rounding, overflow=design.overflow)
        elif st.kind == "sos":
            cur = sos(g, cur, st, f, stage=i, rounding=design.rounding, overflow=design.overflow, form=sos_form)
        else:
            raise ValueError(f"unknown stage kind {st.kind}")
        f = st.out
    add_node(g, "output", name="out")
    connect(g, cur, "out")
    g.graph["stages"] = tuple(design.stages)
    return propagate(g)


def stage_nodes(g, stage: int):
    return [v for v, d in g._node.items() if d.get("stage") == stage]   # hot path: no view


def stage_region(g, stage: int):
    """(entry node, exit node, round node) of one stage."""
    nodes = stage_nodes(g, stage)
    entry = next(v for v in nodes if g._node[v].get("role") == "entry")
    exit_ = next(v for v in nodes if g._node[v].get("exit"))
    rnd = next(v for v in nodes if g._node[v].get("role") == "round")
    return entry, exit_, rnd


__all__ = ["build", "fir_direct", "cic", "sos", "adder_tree", "stage_nodes", "stage_region", "nx"]
