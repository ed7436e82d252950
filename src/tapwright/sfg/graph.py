"""The signal-flow graph: typed operation nodes, edges with delays and formats.

One ``networkx.MultiDiGraph`` per structure. A multigraph (not a plain DiGraph)
because one node may feed the same adder twice, for example a pre-adder of a
tap with itself or a shift-add term ``x + (x << 2)``.

Node kinds (attribute ``kind``):

``input``
    the filter input; ``fmt`` is the input format.
``output``
    the filter output; one operand.
``mul``
    constant multiply by the integer ``coeff``; the product's fractional bits
    are the operand's plus ``coeff_frac``.
``add``
    sum of its operands; each in-edge carries ``sign`` (+1/-1) and ``shift``
    (the operand is multiplied by ``2**shift`` before the sum). Operands are
    aligned to the finest fraction among them. ``role`` tells the cost model
    what the adder is (``tree``, ``chain``, ``preadd``, ``mcm``, ``wire``).
    A one-operand add with sign +1 and shift 0 is a wire (a tap point).
``quant``
    round to ``fmt.frac`` with ``rounding``, then ``overflow`` into ``fmt.bits``.
``decim``
    keeps the samples whose index (counted at its input rate from the first
    sample) is ``phase`` mod ``factor``: a rate change by ``factor``.

Recursive parts (biquads, CIC integrators) are loops of ``add`` and ``quant``
nodes closed by an edge with ``z >= 1``; the ``quant`` in the loop has a fixed
format, which is where format propagation starts.

Edge attributes: ``port`` (operand order), ``z`` (algorithmic delays, in
samples of the source's rate; realised as registers that advance when a sample
arrives), ``pipe`` (pipeline registers, in clock cycles; they advance every
cycle and carry a valid bit), ``sign`` and ``shift`` (for ``add`` operands).

Graph attributes: ``name``, ``structure`` (structure id), ``in_fmt``,
``rounding``, ``overflow``, ``decimation``, ``phase``.

:func:`propagate` gives every node its exact integer range ``(lo, hi)`` and
format ``fmt`` by one pass in dependency order: the range of a sum of
independent samples is exact (as for every FIR), which is the L1-norm bound.
"""
from __future__ import annotations

import itertools

import networkx as nx

from ..fixed.formats import Fmt, bits_for_range

KINDS = ("input", "output", "mul", "add", "quant", "decim")


class GraphError(ValueError):
    """A signal-flow graph that breaks the rules above."""


_counter = itertools.count()


def new_graph(name: str, in_fmt: Fmt, rounding: str, overflow: str, **attrs) -> nx.MultiDiGraph:
    g = nx.MultiDiGraph(name=name, in_fmt=in_fmt, rounding=rounding, overflow=overflow, **attrs)
    g.add_node("in", kind="input", fmt=in_fmt)
    return g


def add_node(g: nx.MultiDiGraph, kind: str, name: str | None = None, **attrs) -> str:
    if kind not in KINDS:
        raise GraphError(f"unknown node kind {kind!r}")
    if name is None:
        name = f"{kind}{len(g)}"
        while name in g:
            name = f"{kind}{len(g)}_{next(_counter)}"
    if name in g:
        raise GraphError(f"node {name!r} exists")
    g.add_node(name, kind=kind, **attrs)
    return name


def connect(g, u, v, *, port: int | None = None, z: int = 0, pipe: int = 0, sign: int = 1, shift: int = 0):
    if port is None:
        port = g.in_degree(v)
    g.add_edge(u, v, port=port, z=int(z), pipe=int(pipe), sign=int(sign), shift=int(shift))


def operands(g, v):
    """In-edges of ``v`` as ``(u, data)`` sorted by port."""
    return sorted(((u, d) for u, _, d in g.in_edges(v, data=True)), key=lambda t: t[1]["port"])


def output_node(g) -> str:
    outs = [n for n, k in g.nodes(data="kind") if k == "output"]
    if len(outs) != 1:
        raise GraphError(f"expected one output node, found {len(outs)}")
    return outs[0]


def eval_order(g) -> list:
    """Nodes in an order where every zero-delay operand comes first.

    Edges with ``z > 0`` are cut (their value comes from an earlier sample), so
    every loop must hold at least one delay; ``quant`` nodes inside loops have
    fixed formats and so also break the format recursion.
    """
    h = nx.DiGraph()
    h.add_nodes_from(g.nodes)
    h.add_edges_from((u, v) for u, v, d in g.edges(data=True) if d["z"] == 0)
    try:
        return list(nx.lexicographical_topological_sort(h, key=str))
    except nx.NetworkXUnfeasible:
        cyc = nx.find_cycle(h)
        raise GraphError(f"delay-free loop through {[e[0] for e in cyc]}") from None


def is_recursive(g) -> bool:
    return not nx.is_directed_acyclic_graph(nx.DiGraph(g))


def _range_of(g, v, ranges):
    n = g.nodes[v]
    k = n["kind"]
    if k == "input":
        f = n["fmt"]
        return f.lo, f.hi, f.frac
    ops = operands(g, v)
    if k == "output" or k == "decim":
        (u, _), = ops
        return ranges[u]
    if k == "mul":
        (u, _), = ops
        lo, hi, fr = ranges[u]
        c = int(n["coeff"])
        a, b = lo * c, hi * c
        return min(a, b), max(a, b), fr + int(n["coeff_frac"])
    if k == "quant":
        f = n["fmt"]
        if n.get("in_loop") or any(u not in ranges for u, _ in ops):
            return f.lo, f.hi, f.frac
        (u, _), = ops
        lo, hi, fr = ranges[u]
        from ..fixed.formats import round_scalar
        lo2 = round_scalar(lo, fr - f.frac, n["rounding"])
        hi2 = round_scalar(hi, fr - f.frac, n["rounding"])
        if n["overflow"] == "wrap" and (lo2 < f.lo or hi2 > f.hi):
            return f.lo, f.hi, f.frac
        return max(lo2, f.lo), min(hi2, f.hi), f.frac
    if k == "add":
        if not ops:
            raise GraphError(f"adder {v} has no operands")
        fr = max(ranges[u][2] for u, _ in ops)
        lo = hi = 0
        for u, d in ops:
            ulo, uhi, ufr = ranges[u]
            s = d["shift"] + fr - ufr
            a, b = (ulo << s) * d["sign"], (uhi << s) * d["sign"]
            lo += min(a, b)
            hi += max(a, b)
        return lo, hi, fr
    raise GraphError(f"unknown kind {k}")


def propagate(g) -> nx.MultiDiGraph:
    """Give every node ``range`` (lo, hi) and ``fmt`` (exact signed width); returns ``g``."""
    loops = set()
    for comp in nx.strongly_connected_components(nx.DiGraph(g)):
        if len(comp) > 1:
            loops |= comp
    for v in g.nodes:
        if g.nodes[v]["kind"] == "quant":
            g.nodes[v]["in_loop"] = v in loops
    ranges: dict = {}
    # loops hold a fixed-format quant: cut the edges leaving those, then the
    # rest is a DAG whose order gives every operand's range before its user
    h = nx.DiGraph()
    h.add_nodes_from(g.nodes)
    fixed = {v for v in loops if g.nodes[v]["kind"] == "quant"}
    h.add_edges_from((u, v) for u, v in g.edges() if u not in fixed)
    try:
        order = list(nx.lexicographical_topological_sort(h, key=str))
    except nx.NetworkXUnfeasible:
        raise GraphError("a loop without a fixed-format quant node: its word length would grow without bound") from None
    for v in fixed:
        ranges[v] = _range_of(g, v, ranges)
    for v in order:
        if v in ranges:
            continue
        ranges[v] = _range_of(g, v, ranges)
    for v, (lo, hi, fr) in ranges.items():
        n = g.nodes[v]
        n["range"] = (int(lo), int(hi))
        if n["kind"] in ("quant", "input"):
            continue
        n["fmt"] = Fmt(bits_for_range(lo, hi), fr)
    return g


def check(g) -> None:
    """Raise :class:`GraphError` when the graph breaks the structural rules."""
    output_node(g)
    for v, d in g.nodes(data=True):
        k = d.get("kind")
        if k not in KINDS:
            raise GraphError(f"node {v}: unknown kind {k!r}")
        n_in = g.in_degree(v)
        if k == "input" and n_in:
            raise GraphError("input node has operands")
        if k in ("output", "mul", "quant", "decim") and n_in != 1:
            raise GraphError(f"node {v} ({k}) needs exactly one operand, has {n_in}")
        if k == "add" and n_in < 1:
            raise GraphError(f"adder {v} has no operands")
    eval_order(g)


def copy_graph(g) -> nx.MultiDiGraph:
    h = g.copy()
    h.graph = dict(g.graph)
    return h
