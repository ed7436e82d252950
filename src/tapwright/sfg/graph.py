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
``mux``
    (time-shared graphs) at schedule step s passes operand ``select[s]``
    (port number; ``zero_port`` is a constant zero).
``acc``
    (time-shared graphs) the sum of its operand over the ``steps`` schedule
    steps of one iteration. A ``mul`` in a time-shared graph has a ``table``
    (one coefficient per step) instead of ``coeff``.

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

import heapq
import itertools

import networkx as nx

from ..fixed.formats import Fmt, bits_for_range

KINDS = ("input", "output", "mul", "add", "quant", "decim", "mux", "acc")


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
        port = sum(map(len, g._pred[v].values()))   # in-degree (hot path: no view)
    g.add_edge(u, v, port=port, z=int(z), pipe=int(pipe), sign=int(sign), shift=int(shift))


def operands(g, v):
    """In-edges of ``v`` as ``(u, data)`` sorted by port."""
    ops = [(u, d) for u, kd in g._pred[v].items() for d in kd.values()]  # hot path: no views
    if len(ops) > 1:
        ops.sort(key=_port)
    return ops


def _port(t):
    return t[1]["port"]


def output_node(g) -> str:
    outs = [n for n, d in g._node.items() if d["kind"] == "output"]
    if len(outs) != 1:
        raise GraphError(f"expected one output node, found {len(outs)}")
    return outs[0]


def eval_order(g) -> list:
    """Nodes in an order where every zero-delay operand comes first.

    Edges with ``z > 0`` are cut (their value comes from an earlier sample), so
    every loop must hold at least one delay; ``quant`` nodes inside loops have
    fixed formats and so also break the format recursion.
    """
    try:
        return lex_order(g._node, ((u, v) for u, v, d in edge_list(g) if d["z"] == 0))
    except nx.NetworkXUnfeasible:
        h = nx.DiGraph()
        h.add_nodes_from(g.nodes)
        h.add_edges_from((u, v) for u, v, d in g.edges(data=True) if d["z"] == 0)
        cyc = nx.find_cycle(h)
        raise GraphError(f"delay-free loop through {[e[0] for e in cyc]}") from None


def is_recursive(g) -> bool:
    return not nx.is_directed_acyclic_graph(nx.DiGraph(g))


def _range_of(g, v, ranges):
    n = g._node[v]
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
        cs = [int(n["coeff"])] if n.get("table") is None else [int(c) for c in n["table"]]
        prods = [p for c in cs for p in (lo * c, hi * c)]
        return min(prods), max(prods), fr + int(n["coeff_frac"])
    if k == "mux":
        fr = max(ranges[u][2] for u, _ in ops)
        los, his = [], []
        for u, d in ops:
            s = fr - ranges[u][2]
            los.append(ranges[u][0] << s)
            his.append(ranges[u][1] << s)
        if n.get("zero_port") is not None:
            los.append(0)
            his.append(0)
        return min(los), max(his), fr
    if k == "acc":
        (u, _), = ops
        fr = ranges[u][2]
        lo = hi = 0
        memo: dict = {}   # cone node -> its operands (a multiplexer's by port)
        for step in range(int(n["steps"])):
            a, b = _range_at_step(g, u, step, ranges, memo)
            lo, hi = lo + a, hi + b
        return lo, hi, fr
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


def _range_at_step(g, v, step, ranges, memo=None):
    """Range of a time-shared cone node at one schedule step (operands fixed by the step).
    ``memo`` keeps each node's operands across the steps of one accumulator."""
    n = g._node[v]
    k = n["kind"]
    fr = ranges[v][2]
    if memo is None:
        memo = {}
    ops = memo.get(v)
    if ops is None:
        ops = memo[v] = ({d["port"]: u for u, d in operands(g, v)} if k == "mux"
                         else operands(g, v))
    if k == "mux":
        port = n["select"][step]
        if port == n.get("zero_port"):
            return 0, 0
        u = ops[port]
        s = fr - ranges[u][2]
        return ranges[u][0] << s, ranges[u][1] << s
    if k == "mul" and n.get("table") is not None:
        (u, _), = ops
        lo, hi = _range_at_step(g, u, step, ranges, memo)
        c = int(n["table"][step])
        return min(lo * c, hi * c), max(lo * c, hi * c)
    if k == "add":
        lo = hi = 0
        for u, d in ops:
            ulo, uhi = _range_at_step(g, u, step, ranges, memo)
            s = d["shift"] + fr - ranges[u][2]
            a, b = (ulo << s) * d["sign"], (uhi << s) * d["sign"]
            lo, hi = lo + min(a, b), hi + max(a, b)
        return lo, hi
    return ranges[v][0], ranges[v][1]


def propagate(g) -> nx.MultiDiGraph:
    """Give every node ``range`` (lo, hi) and ``fmt`` (exact signed width); returns ``g``."""
    comps = condensed_order(g)
    loops = {v for comp in comps if len(comp) > 1 for v in comp}
    loops |= {v for comp in comps if len(comp) == 1 for v in comp if g.has_edge(v, v)}
    for v, n in g._node.items():
        if n["kind"] == "quant":
            n["in_loop"] = v in loops
    ranges: dict = {}
    fixed = {v for v in loops if g._node[v]["kind"] == "quant"}
    if not loops:
        order = [comp[0] for comp in comps]
    else:
        # loops hold a fixed-format quant: cut the edges leaving those, then the
        # rest is a DAG whose order gives every operand's range before its user
        try:
            order = lex_order(g._node, ((u, v) for u, nbrs in g._succ.items() if u not in fixed
                                        for v in nbrs))
        except nx.NetworkXUnfeasible:
            raise GraphError("a loop without a fixed-format quant node: its word length would grow "
                             "without bound") from None
    for v in fixed:
        ranges[v] = _range_of(g, v, ranges)
    for v in order:
        if v in ranges:
            continue
        ranges[v] = _range_of(g, v, ranges)
    for v, (lo, hi, fr) in ranges.items():
        n = g._node[v]
        n["range"] = (int(lo), int(hi))
        if n["kind"] in ("quant", "input"):
            continue
        n["fmt"] = Fmt(bits_for_range(lo, hi), fr)
        if n["kind"] == "output" and g.graph.get("stages"):
            # the port carries the design's output format (design.json "output"),
            # at least as wide as the proven range
            last = g.graph["stages"][-1].out
            if last.frac == fr and last.bits > n["fmt"].bits:
                n["fmt"] = Fmt(last.bits, fr)
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
        if k in ("output", "mul", "quant", "decim", "acc") and n_in != 1:
            raise GraphError(f"node {v} ({k}) needs exactly one operand, has {n_in}")
        if k in ("add", "mux") and n_in < 1:
            raise GraphError(f"adder {v} has no operands")
    eval_order(g)


def kept(g, key: str, compute):
    """``compute(g)``, kept in the graph's ``key`` entry when ``g`` is sealed (:func:`seal`)
    and taken from there while the node count matches."""
    c = g.graph.get(key)
    if c is not None and c[0] == len(g._node):
        return c[1]
    val = compute(g)
    if g.graph.get("_sealed"):
        g.graph[key] = (len(g._node), val)
    return val


def edge_list(g) -> list:
    """Every edge as ``(u, v, data)``, in networkx's order; a sealed graph keeps the list."""
    return kept(g, "_edges", _edge_list)


def _edge_list(g) -> list:
    return [(u, v, e) for u, nbrs in g._succ.items() for v, kd in nbrs.items() for e in kd.values()]


def seal(g) -> nx.MultiDiGraph:
    """Mark ``g`` as finished: nothing changes it any more, so figures of its topology
    (node delays, evaluation order, zero low bits) may be kept in its ``_`` entries.

    The structural graphs cached by :mod:`tapwright.sfg.recipe` and the graphs
    :func:`~tapwright.sfg.transforms.pipeline.pipeline` returns are sealed; transforms
    work on :func:`copy_graph` copies, which are not.
    """
    g.graph["_sealed"] = True
    return g


_HW_ATTRS = ("kind", "fmt", "coeff", "coeff_frac", "table", "select", "zero_port", "steps", "mux_regs",
             "rounding", "overflow")


def fingerprint(g, rounds: int = 4) -> int:
    """A hash of the hardware ``g`` describes, free of node names (colour refinement:
    each node's label is its operator attributes, then ``rounds`` times its label with
    the labels of its operands and readers and their edges' delays, registers, signs,
    shifts and ports). Equal graphs give equal values; unequal ones almost surely
    differ (within one Python process: string hashes are salted per process)."""
    lab = {v: hash(tuple(repr(n.get(k)) for k in _HW_ATTRS)) for v, n in g._node.items()}

    def edge(e):
        return e["z"], e["pipe"], e["sign"], e["shift"], e["port"]
    for _ in range(rounds):
        lab = {v: hash((lab[v],
                        tuple(sorted((lab[u],) + edge(e) for u, kd in g._pred[v].items() for e in kd.values())),
                        tuple(sorted((lab[w],) + edge(e) for w, kd in g._succ[v].items() for e in kd.values()))))
               for v in lab}
    return hash(tuple(sorted(lab.values())))


def copy_graph(g) -> nx.MultiDiGraph:
    """An independent copy (node and edge attribute dicts copied, graph dict shallow
    without the ``_`` entries, which cache figures of this graph's topology).

    Built directly on networkx's adjacency dicts (the MultiDiGraph layout:
    ``_succ[u][v]`` and ``_pred[v][u]`` are the same key dict), about five times
    faster than ``MultiDiGraph.copy`` on a 1000-node graph; tests/test_sfg.py
    checks that it equals ``copy()``.
    """
    h = g.__class__()
    h.graph.update((k, v) for k, v in g.graph.items() if not k.startswith("_"))  # "_": caches
    h._node.update((n, d.copy()) for n, d in g._node.items())
    succ = {u: {v: {k: d.copy() for k, d in kd.items()} for v, kd in nbrs.items()}
            for u, nbrs in g._succ.items()}
    h._succ.update(succ)
    h._pred.update((v, {u: succ[u][v] for u in preds}) for v, preds in g._pred.items())
    return h


def condensed_order(g) -> list:
    """Strongly connected components in topological order (members in name order).

    Feed-forward graphs take Kahn's algorithm on the adjacency dicts; only a
    graph with loops pays for networkx's condensation. A sealed graph keeps it in its
    ``_order`` entry (see :func:`seal`; the callers hold the list read-only).
    """
    return kept(g, "_order", _condensed_order)


def _condensed_order(g) -> list:
    succ, pred = g._succ, g._pred
    indeg = {v: len(p) - (1 if v in p else 0) for v, p in pred.items()}
    ready = [v for v, d in indeg.items() if d == 0]
    order = []
    while ready:
        v = ready.pop()
        order.append(v)
        for w in succ[v]:
            if w == v:
                continue
            indeg[w] -= 1
            if indeg[w] == 0:
                ready.append(w)
    if len(order) == len(indeg) and not any(v in succ[v] for v in succ):
        return [[v] for v in order]
    comps = [sorted(c, key=str) for c in strong_components(succ)]
    where = {v: i for i, c in enumerate(comps) for v in c}
    edges = ((where[u], where[v]) for u, nbrs in succ.items() for v in nbrs if where[u] != where[v])
    first = [str(c[0]) for c in comps]
    return [comps[i] for i in lex_order(range(len(comps)), edges, key=first.__getitem__)]


def lex_order(nodes, edges, key=str) -> list:
    """Topological order of ``nodes`` under ``edges`` ((u, v) pairs, repeats allowed),
    smallest ``key`` first among the ready nodes, ties in the order of ``nodes``: the
    order ``networkx.lexicographical_topological_sort`` gives on the same DiGraph,
    written on plain dicts because building that DiGraph cost more than the sort
    (a CIC chain's graphs are sorted a dozen times per candidate). Raises
    ``networkx.NetworkXUnfeasible`` on a cycle."""
    nodes = list(nodes)
    succ = {v: {} for v in nodes}
    for u, v in edges:
        succ[u][v] = None
    indeg = dict.fromkeys(nodes, 0)
    for nbrs in succ.values():
        for v in nbrs:
            indeg[v] += 1
    rank = {v: i for i, v in enumerate(nodes)}
    ready = [(key(v), rank[v], v) for v in nodes if indeg[v] == 0]
    heapq.heapify(ready)
    out = []
    while ready:
        v = heapq.heappop(ready)[2]
        out.append(v)
        for w in succ[v]:
            indeg[w] -= 1
            if indeg[w] == 0:
                heapq.heappush(ready, (key(w), rank[w], w))
    if len(out) != len(nodes):
        raise nx.NetworkXUnfeasible("graph contains a cycle")
    return out


def strong_components(succ) -> list:
    """Strongly connected components of the graph with adjacency ``succ`` (node ->
    successors), as sets: Tarjan's algorithm (R. Tarjan, "Depth-first search and linear
    graph algorithms", SIAM J. Computing 1(2), 1972), iterative, on the adjacency dicts
    (``networkx.strongly_connected_components`` needs a DiGraph built first)."""
    index: dict = {}
    low: dict = {}
    on_stack: set = set()
    stack: list = []
    comps = []
    counter = 0
    for root in succ:
        if root in index:
            continue
        index[root] = low[root] = counter
        counter += 1
        stack.append(root)
        on_stack.add(root)
        work = [(root, iter(succ[root]))]
        while work:
            v, it = work[-1]
            for w in it:
                if w not in index:
                    index[w] = low[w] = counter
                    counter += 1
                    stack.append(w)
                    on_stack.add(w)
                    work.append((w, iter(succ[w])))
                    break
                if w in on_stack and index[w] < low[v]:
                    low[v] = index[w]
            else:
                work.pop()
                if work:
                    u = work[-1][0]
                    if low[v] < low[u]:
                        low[u] = low[v]
                if low[v] == index[v]:
                    comp = set()
                    while True:
                        w = stack.pop()
                        on_stack.discard(w)
                        comp.add(w)
                        if w == v:
                            break
                    comps.append(comp)
    return comps


def loop_order(g, members) -> list:
    """Evaluation order inside one loop (a strongly connected component): its members
    along the zero-delay edges between them, smallest name first."""
    members = set(members)
    return lex_order(sorted(members, key=str),
                     ((u, v) for v in members for u, kd in g._pred[v].items() if u in members
                      for e in kd.values() if e["z"] == 0))


def rate_divisors(g) -> dict:
    """Rate of every node as a divisor of the input rate (product of decimators before it)."""
    rd = {}
    for v in eval_order_all(g):
        n = g._node[v]
        ins = [rd[u] for u, _ in operands(g, v) if u in rd]
        r = max(ins) if ins else 1
        if n["kind"] == "decim":
            r *= int(n["factor"])
        rd[v] = r
    return rd


def eval_order_all(g) -> list:
    """Topological order with every loop condensed (members in name order)."""
    return [v for comp in condensed_order(g) for v in comp]


def input_interval(g) -> int:
    """Clock cycles between accepted input samples that the structure needs."""
    if not any(n["kind"] == "mux" for n in g._node.values()):
        return 1
    rd = rate_divisors(g)
    worst = 1
    for v, n in g.nodes(data=True):
        if n["kind"] == "mux":
            K = int(n.get("steps", g.graph.get("fold", 1)))
            for u, _ in operands(g, v):
                worst = max(worst, -(-K // rd[u]))
    return worst
