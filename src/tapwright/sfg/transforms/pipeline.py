"""Timing transforms: cutset pipelining, Leiserson-Saxe retiming, iteration bound.

Two kinds of register live on edges:

- ``z``: algorithmic delays (the filter's state). They advance when a sample
  arrives (the strobe of their rate) and so hold across gaps in the input.
- ``pipe``: pipeline registers. They advance every clock cycle and carry a
  valid bit; a node's *stage* is the number of pipeline registers between the
  input and it, and the output's stage is the latency in cycles.

A combinational path is a path whose edges carry neither and do not end at a
``mux``: a time-shared stage's multiplexers read the captured line, registers
(``rtl/lower.py``). Every node has a
delay ``t`` (ns) from the device's delay table; the critical path is the
longest combinational path.

:func:`pipeline` inserts ``pipe`` registers on feed-forward cutsets so that no
combinational path exceeds a target period: nodes are placed, in dependency
order, at the earliest stage whose arrival time fits (as soon as possible).
Loops (biquads, CIC integrators) stay in one stage, since a pipeline register
inside a loop would change the recursion; their loop delay is the floor set by
the iteration bound.

:func:`retime` is the Leiserson-Saxe method (C. E. Leiserson and J. B. Saxe,
"Retiming synchronous circuitry", Algorithmica 6:5-35, 1991): the W and D
matrices from all-pairs shortest paths, then for a candidate period c the
difference constraints r(u) - r(v) <= w(e) on every edge and
r(u) - r(v) <= W(u,v) - 1 wherever D(u,v) > c, solved as shortest paths
(Bellman-Ford) on the constraint graph; binary search over the D values gives
the smallest feasible period.

:func:`iteration_bound` is the largest loop bound max over loops of
(loop computation time / loop delays): no retiming or pipelining reaches a
shorter clock period at one sample per cycle (K. K. Parhi, VLSI Digital Signal
Processing Systems, Wiley 1999, ch. 2).
"""
from __future__ import annotations

import math

import networkx as nx

from ..graph import condensed_order, copy_graph, edge_list, eval_order, loop_order, seal


def node_delay(g, v, delays) -> float:
    d = g._node[v]
    if "t" in d:
        return float(d["t"])
    return float(delays(g, v)) if delays else 1.0


def node_delays(g, delays) -> dict:
    """Delay of every node, kept in the graph's ``_delays`` entry for this delay function.

    A node's delay depends on its kind, formats, operands and fan-out, none of which
    pipelining changes: :func:`pipeline` hands the table of its input graph to the graph
    it returns. Only sealed graphs keep it (:func:`~tapwright.sfg.graph.seal`).
    """
    c = g.graph.get("_delays")
    if c is not None and c[0] is delays and len(c[1]) == len(g):
        return c[1]
    nd = {v: node_delay(g, v, delays) for v in g.nodes}
    if g.graph.get("_sealed"):
        g.graph["_delays"] = (delays, nd)
    return nd


def unit_delays(g, v) -> float:
    """One unit per multiply, adder, rounding or multiplexer; wiring is free."""
    d = g._node[v]
    k = d["kind"]
    if k == "mul":
        c = d.get("coeff")
        if d.get("table") is None and (c == 0 or (c is not None and abs(c) & (abs(c) - 1) == 0)):
            return 0.0
        return 2.0
    if k == "add":
        if g.in_degree(v) <= 1 and all(e["sign"] == 1 for _, _, e in g.in_edges(v, data=True)):
            return 0.0
        return 1.0
    if k in ("quant", "mux"):
        return 1.0
    if k == "acc":
        return 1.0
    return 0.0


def _reg(e) -> bool:
    return e["z"] > 0 or e["pipe"] > 0


def arrival_times(g, delays=unit_delays, *, cut_pipes: bool = True) -> dict:
    """Arrival time of every node along combinational paths (registers reset to 0).

    With ``cut_pipes=False`` pipeline registers are ignored (the paths :func:`pipeline`
    starts from: no pipelining target at or above their longest inserts a register).
    """
    nodes = g._node
    nd = node_delays(g, delays)
    preds = {v: [] for v in nodes}
    succs = {v: [] for v in nodes}
    # a multiplexer with registers inside (``mux_regs``, set by pipeline()): its readers
    # through that many pipeline registers continue from its last segment
    split = mux_splits(g, delays) if cut_pipes else {}
    for u, v, e in edge_list(g):
        # an accumulator's output and a multiplexer's operands (the captured line, rtl/lower.py)
        # are registers
        if nodes[u]["kind"] == "acc" or nodes[v]["kind"] == "mux":
            continue
        if (e["z"] == 0 and e["pipe"] == split[u][0]) if u in split else \
                not (e["z"] > 0 or (cut_pipes and e["pipe"] > 0)):
            preds[v].append(u)
            succs[u].append(v)
    # Kahn's order over the combinational edges (a max-plus sum does not depend on it)
    indeg = {v: len(p) for v, p in preds.items()}
    ready = [v for v, k in indeg.items() if k == 0]
    arr = {}
    while ready:
        v = ready.pop()
        if v in split:
            arr[v] = max(split[v][1][:-1])
        else:
            arr[v] = max((split[u][1][-1] if u in split else arr[u] for u in preds[v]),
                         default=0.0) + nd[v]
        for w in succs[v]:
            indeg[w] -= 1
            if indeg[w] == 0:
                ready.append(w)
    if len(arr) != len(preds):
        raise ValueError("combinational loop")
    return arr


def split_bits(steps: int, regs: int) -> list:
    """The step counter's bits, low first, shared out among ``regs + 1`` segments of a
    multiplexer of ``steps`` words (as evenly as they go; a segment has one bit at least)."""
    B = max(1, (steps - 1).bit_length())
    parts = min(regs + 1, B)
    return [B // parts + (1 if i < B % parts else 0) for i in range(parts)]


def split_levels(steps: int, regs: int, words: int | None = None) -> list:
    """The select levels of a multiplexer of ``steps`` steps split by ``regs`` registers,
    first level first, as ``(step bits, inputs per multiplexer, multiplexers)``; ``words``
    (default ``steps``) is how many distinct words enter the first level. The multiplexers
    of a level but the last each end in a register."""
    out, n = [], steps if words is None else words
    for b in split_bits(steps, regs):
        groups = -(-n // (1 << b))
        out.append((b, min(n, 1 << b), groups))
        n = groups
    return out


def mux_splits(g, delays) -> dict:
    """``{mux: (registers inside it, [segment delays])}`` of the multiplexers that
    :func:`pipeline` split (node attribute ``mux_regs``)."""
    seg = getattr(delays, "mux_segments", None)
    out = {}
    for v, n in g._node.items():
        r = n.get("mux_regs", 0)
        if r:
            segs = seg(g, v, r) if seg else [node_delay(g, v, delays)] * (r + 1)
            out[v] = (r, segs)
    return out


def _split_choice(g, v, t, period, delays):
    """(registers, segment delays) that bring multiplexer ``v`` (delay ``t``) within
    ``period``, or the split with the shortest longest segment when none does; None when
    splitting does not help (or the delay model cannot time segments)."""
    seg = getattr(delays, "mux_segments", None)
    if seg is None or t <= period:
        return None
    n = g._node[v]
    steps = int(n.get("steps", len(n.get("select") or ())))
    best = None
    for r in range(1, max(1, (steps - 1).bit_length())):
        segs = seg(g, v, r)
        if best is None or max(segs) < max(best[1]) - 1e-12:
            best = (r, segs)
        if max(segs) <= period:
            break
    if best is None or max(best[1]) >= t - 1e-12:
        return None
    return best


def critical_path(g, delays=unit_delays) -> float:
    arr = arrival_times(g, delays)
    return max(arr.values(), default=0.0)


def stages(g) -> dict:
    """Pipeline stage of every node (pipe registers from the input)."""
    st = {}
    pred, nodes = g._pred, g._node
    for v in _topo_all(g):
        preds = pred[v]
        if not preds:
            st[v] = 0
            continue
        st[v] = max((st[u] + e["pipe"] for u, kd in preds.items() if u in st for e in kd.values()),
                    default=0)
        if nodes[v]["kind"] == "acc":
            # a time-shared accumulator: steps 0..K-1 run in the K cycles after
            # the strobe's capture edge; the full sum is visible K+1 cycles on
            st[v] += int(g._node[v]["steps"]) + 1
    return st


def _topo_all(g):
    """Order for stage propagation: loops condensed (they hold one stage)."""
    out = []
    for members in condensed_order(g):
        if len(members) > 1:
            out.extend(loop_order(g, members))
        else:
            out.extend(members)
    return out


def latency(g) -> int:
    from ..graph import output_node
    return stages(g)[output_node(g)]


def pipeline(g, period: float, delays=unit_delays, *, register_output: bool = True):
    """Cutset pipelining to ``period`` (as soon as possible); returns a new graph.

    With ``register_output`` the output gets a register of its own (one more
    cycle of latency, and a clean registered ``out_data``).
    """
    nd = node_delays(g, delays)
    order = condensed_order(g)
    h = copy_graph(g)
    nodes, pred = h._node, h._pred
    edges = edge_list(h)
    for _, _, e in edges:
        e["pipe"] = 0
    for n in nodes.values():
        n.pop("mux_regs", None)
    stage, arr = {}, {}
    # multiplexers longer than the period get registers inside them (the lowering puts
    # them between the levels of its select tree): {mux: (registers, last segment's delay)};
    # every reader then sits that many stages later and starts from the last segment
    split = {}
    # no register cuts through another node: the slowest of those bounds the clock anyway,
    # so a multiplexer is split only as far as that bound (or the period, if longer)
    floor = max((t for v, t in nd.items() if nodes[v]["kind"] != "mux"), default=0.0)
    mux_period = max(period, floor)

    def ready_at(u):
        return stage[u] + (split[u][0] if u in split else 0)

    def out_arr(u):
        return split[u][1] if u in split else arr[u]

    for members in order:
        if len(members) == 1 and members[0] not in pred[members[0]]:
            v = members[0]
            ext = [(u, e) for u, kd in pred[v].items() for e in kd.values()]
            s0 = max((ready_at(u) for u, _ in ext), default=0)
            t = nd[v]
            a_in = max((out_arr(u) for u, e in ext if ready_at(u) == s0 and e["z"] == 0), default=0.0)
            kind = nodes[v]["kind"]
            if kind == "mux":
                a_in = 0.0   # its operands are the captured line's registers
                cut = _split_choice(h, v, t, mux_period, delays)
                if cut is not None:
                    r, segs = cut
                    nodes[v]["mux_regs"] = r
                    split[v] = (r, segs[-1])
                    stage[v], arr[v] = s0, max(segs[:-1])
                    continue
            if kind == "acc":
                # the product's path ends in the accumulator's adder: a register in front
                # of it when the two do not fit together (the lowering delays the
                # accumulator's steps by that register)
                if a_in + t > period and t > 0 and a_in > 0:
                    s0 += 1
                s0 += int(nodes[v]["steps"]) + 1
                stage[v], arr[v] = s0, 0.0
                continue
            if a_in + t > period and t > 0 and a_in > 0 and kind != "output":
                s0 += 1
                a_in = 0.0
            if kind == "output" and register_output:
                s0 += 1
                a_in, t = 0.0, 0.0
            stage[v], arr[v] = s0, a_in + t
        else:
            # a loop: one stage; arrival inside along its zero-delay edges
            inside = set(members)
            ext = [(u, v, e) for v in members for u, _, e in h.in_edges(v, data=True) if u not in inside]
            s0 = max((ready_at(u) for u, _, _ in ext), default=0)
            ain = {}
            for v in loop_order(h, inside):
                a = max((out_arr(u) for u, _, e in h.in_edges(v, data=True)
                         if u not in inside and ready_at(u) == s0 and e["z"] == 0), default=0.0)
                a = max([a] + [ain[u] for u, kd in pred[v].items() if u in inside
                               and any(e["z"] == 0 for e in kd.values())])
                ain[v] = a + nd[v]
            if max(ain.values()) > period and any(
                    ready_at(u) == s0 and out_arr(u) > 0 for u, _, e in ext if e["z"] == 0):
                s0 += 1
                ain = {v: a - max((out_arr(u) for u, _, e in ext if e["z"] == 0 and ready_at(u) == s0 - 1),
                                  default=0.0) for v, a in ain.items()}
            for v in members:
                stage[v], arr[v] = s0, ain[v]
    for u, v, e in edges:
        base = stage[u]
        if nodes[v]["kind"] == "acc":
            base += int(nodes[v]["steps"]) + 1
        if stage[v] < base:
            raise ValueError(f"stage order broken on {u}->{v}")
        e["pipe"] = stage[v] - base
    # same nodes, operands, formats and fan-out: the same delays, order and zero low bits
    seal(h)
    n = len(h._node)
    h.graph.update(_delays=(delays, nd), _order=(n, order), _edges=(n, edges))
    if "_tz" in g.graph:
        h.graph["_tz"] = g.graph["_tz"]
    h.graph["pipeline_period"] = period
    return h


# ------------------------------------------------------------------------------------------------
# Leiserson-Saxe


def _wd_matrices(g, delays):
    """W(u,v): fewest registers on a path; D(u,v): longest delay among those paths."""
    nodes = list(g.nodes)
    t = {v: node_delay(g, v, delays) for v in nodes}
    big = max(t.values(), default=1.0) * (len(nodes) + 1) + 1.0
    h = nx.DiGraph()
    h.add_nodes_from(nodes)
    for u, v, e in g.edges(data=True):
        w = e["z"] + e["pipe"]
        wt = w * big - t[u]
        if not h.has_edge(u, v) or h[u][v]["weight"] > wt:
            h.add_edge(u, v, weight=wt)
    dist = dict(nx.all_pairs_bellman_ford_path_length(h, weight="weight"))
    W, D = {}, {}
    for u, row in dist.items():
        for v, dv in row.items():
            # dv = W*big - S with 0 <= S < big (S: delays along the path except v's)
            Wuv = math.ceil(dv / big - 1e-12)
            W[u, v] = Wuv
            D[u, v] = Wuv * big - dv + t[v]
    return W, D


def retime(g, period: float | None = None, delays=unit_delays):
    """Leiserson-Saxe retiming; returns (new graph, achieved period, r).

    Registers of both kinds count as registers for paths; the retiming moves
    the ``z`` registers (all advance on the same strobe in a single-rate
    graph, and every node maps zero inputs to zero, so zero-initialised
    behaviour is kept). The input and output are tied to a host node so the
    input-output timing is unchanged. With ``period`` None, the smallest
    feasible period is found by binary search over the D values.
    """
    from ..graph import output_node
    h = copy_graph(g)
    nodes = list(h.nodes)
    out = output_node(h)
    W, D = _wd_matrices(h, delays)
    cands = sorted({round(d, 9) for d in D.values()})
    tmax = max(node_delay(h, v, delays) for v in nodes)
    cands = [c for c in cands if c >= tmax - 1e-9]

    def feasible(c):
        cg = nx.DiGraph()
        cg.add_nodes_from(nodes)
        cg.add_node("_src")

        def lim(u, v, b):
            # r(u) - r(v) <= b  ->  edge v -> u with weight b
            if cg.has_edge(v, u):
                cg[v][u]["weight"] = min(cg[v][u]["weight"], b)
            else:
                cg.add_edge(v, u, weight=b)
        for u, v, e in h.edges(data=True):
            lim(u, v, e["z"] + e["pipe"])
        for (u, v), d in D.items():
            if d > c + 1e-9 and u != v:
                lim(u, v, W[u, v] - 1)
        # host: input and output keep their relative timing
        lim("in", out, 0)
        lim(out, "in", 0)
        for v in nodes:
            cg.add_edge("_src", v, weight=0)
        try:
            dist = nx.single_source_bellman_ford_path_length(cg, "_src")
        except nx.NetworkXUnbounded:
            return None
        base = dist["in"]
        r = {v: int(dist[v] - base) for v in nodes}
        return r if _split(h, r, out) is not None else None

    if period is not None:
        r = feasible(period)
        if r is None:
            raise ValueError(f"no retiming reaches period {period}")
    else:
        lo, hi = 0, len(cands) - 1
        r = feasible(cands[hi]) if cands else {v: 0 for v in nodes}
        best = cands[hi] if cands else 0.0
        while lo <= hi and cands:
            mid = (lo + hi) // 2
            rr = feasible(cands[mid])
            if rr is not None:
                r, best, hi = rr, cands[mid], mid - 1
            else:
                lo = mid + 1
        period = best
    a = _split(h, r, out)
    for u, v, e in h.edges(data=True):
        z_new = e["z"] + a[v] - a[u]
        p_new = e["pipe"] + (r[v] - a[v]) - (r[u] - a[u])
        if z_new < 0 or p_new < 0:
            raise ValueError("illegal retiming")
        e["z"], e["pipe"] = z_new, p_new
    h.graph["retimed_period"] = critical_path(h, delays)
    return h, h.graph["retimed_period"], r


def _split(h, r, out):
    """Split the retiming r = a + b into a move of the sample delays (a) and one of the
    pipeline registers (b), each edge keeping z >= 0 and pipe >= 0.

    A sample delay ``z`` and a pipeline register are the same flip-flop at one
    clock per sample, but not the same thing to the sample-level function nor
    to the latency: moving both kinds separately, with a and b zero at the input
    and the output, keeps every input-output path's count of each kind, so the
    retimed graph computes the same samples with the same latency. Difference
    constraints solved by Bellman-Ford; None when no split exists.
    """
    cg = nx.DiGraph()

    def lim(x, y, bnd):  # a(x) - a(y) <= bnd
        if cg.has_edge(y, x):
            cg[y][x]["weight"] = min(cg[y][x]["weight"], bnd)
        else:
            cg.add_edge(y, x, weight=bnd)
    for u, v, e in h.edges(data=True):
        lim(u, v, e["z"])                              # z' = z + a(v) - a(u) >= 0
        lim(v, u, e["pipe"] + r[v] - r[u])             # pipe' = pipe + b(v) - b(u) >= 0
    lim("in", out, 0)
    lim(out, "in", 0)
    for v in h.nodes:
        cg.add_edge("_src", v, weight=0)
    try:
        dist = nx.single_source_bellman_ford_path_length(cg, "_src")
    except nx.NetworkXUnbounded:
        return None
    base = dist["in"]
    a = {v: int(dist[v] - base) for v in h.nodes}
    # b = r - a must also vanish at the ports (r does, by the host constraint)
    if a[out] != 0 or r["in"] != 0 or r[out] != 0:
        return None
    return a


def iteration_bound(g, delays=unit_delays) -> float:
    """max over loops of (sum of node delays) / (registers in the loop); 0 for feed-forward graphs."""
    dg = nx.DiGraph()
    for u, v, e in g.edges(data=True):
        w = e["z"] + e["pipe"]
        if dg.has_edge(u, v):
            dg[u][v]["w"] = min(dg[u][v]["w"], w)
        else:
            dg.add_edge(u, v, w=w)
    best = 0.0
    for cyc in nx.simple_cycles(dg):
        t = sum(node_delay(g, v, delays) for v in cyc)
        w = sum(dg[cyc[i]][cyc[(i + 1) % len(cyc)]]["w"] for i in range(len(cyc)))
        if w == 0:
            return math.inf
        best = max(best, t / w)
    return best


__all__ = ["pipeline", "retime", "iteration_bound", "critical_path", "latency", "stages",
           "unit_delays", "arrival_times", "eval_order", "mux_splits", "split_bits", "split_levels"]
