"""Time-sharing (folding) of FIR products onto fewer multipliers.

Folding by a factor K (K. K. Parhi, VLSI Digital Signal Processing Systems,
Wiley 1999, ch. 6): K products of one iteration share one multiplier, one per
clock cycle. An iteration starts on the strobe of the products' rate (a new
input sample, or for a polyphase decimator the commutator's output strobe)
and takes K cycles, so the strobes must be at least K cycles apart: the
block's ``input_interval`` becomes ceil(K / rate change before the products).

The folded graph has, per multiplier group p:

- ``mux`` nodes: operand ``select[s]`` (a port) at schedule step s, from the
  sample-stable sources (the taps of the delay line, read after the strobe);
- for linear-phase designs a pre-adder of two multiplexers;
- a ``mul`` with a coefficient ``table`` (coefficient per step, 0 for padding);
- an ``acc`` node: the sum of its operand over the K steps of the iteration
  (cleared at step 0).

Folding equation. For an edge U -> V with w delays, U folded at step u and
V at step v, with U pipelined by P_U stages, the folded edge needs
D_F(U -> V) = K*w - P_U + v - u registers (Parhi eq. 6.1). Here every product
reads a tap x[n-k] of the input line at step s = its position in the group:
U is the (unfolded) input node at step 0 with P_U = 0, so D_F = K*k + s.
Rather than K*k + s registers per edge, the taps are kept in the sample-rate
delay line (enabled once per iteration) and the step is absorbed by the
multiplexer, which is the usual register minimisation of a folded FIR
(lifetime analysis, Parhi ch. 6.4): :func:`folded_delays` lists the D_F values
so a test can check them against the equation.
"""
from __future__ import annotations

import math

from ..build import adder_tree, stage_nodes
from ..graph import add_node, connect, copy_graph, operands, propagate


def _is_wire(g, v) -> bool:
    d = g._node[v]
    if d["kind"] != "add" or g.in_degree(v) != 1 or d.get("role") == "entry":
        return False
    (_, e), = operands(g, v)
    return e["sign"] == 1 and e["shift"] == 0


def resolve(g, v, z=0, memo=None):
    """Follow wires back to a stable root: returns (root, total delay).

    ``memo`` (a dict kept across calls on one graph) makes resolving every tap
    of an N-tap delay line O(N) instead of O(N^2).
    """
    path = []
    while True:
        if memo is not None and v in memo:
            root, zz = memo[v]
            break
        if not _is_wire(g, v):
            root, zz = v, 0
            break
        (u, e), = operands(g, v)
        path.append((v, e["z"]))
        v = u
    # unwind: each node on the path is its root plus the delays behind it
    for w, ze in reversed(path):
        zz += ze
        if memo is not None:
            memo[w] = (root, zz)
    return root, zz + z


def product_terms(g, s):
    """Products of FIR stage ``s``: list of dicts with coeff, operands [(root, z)], sign."""
    terms = []
    memo: dict = {}
    for m in sorted((v for v in stage_nodes(g, s) if g._node[v].get("role") == "mul"),
                    key=lambda v: g._node[v].get("tap", 0)):
        c = int(g._node[m]["coeff"])
        if c == 0:
            continue
        (u, e), = operands(g, m)
        if g._node[u].get("role") == "preadd":
            (a, ea), (b, eb) = operands(g, u)
            ra = resolve(g, a, ea["z"] + e["z"], memo)
            rb = resolve(g, b, eb["z"] + e["z"], memo)
            terms.append({"coeff": c, "ops": [ra, rb], "sign": eb["sign"], "tap": g._node[m].get("tap", 0)})
        else:
            terms.append({"coeff": c, "ops": [resolve(g, u, e["z"], memo)], "sign": 1, "tap": g._node[m].get("tap", 0)})
    return terms


def timeshare(g, K):
    """Fold FIR stages' products (see module docstring).

    ``K`` is one factor for every FIR stage, or a dict ``{stage index: factor}``
    (stages absent or with a factor below 2 stay unfolded).
    """
    Ks = K if isinstance(K, dict) else None
    if Ks is None and K < 2:
        raise ValueError("a folding factor is at least 2")
    h = copy_graph(g)
    folded_any = False
    for s in sorted({d["stage"] for _, d in h.nodes(data=True) if d.get("role") == "mul"}):
        st = h.graph["stages"][s]
        if st.kind != "fir":
            continue
        K = Ks.get(s, 1) if Ks is not None else K
        if K < 2:
            continue
        rnd = next(v for v in stage_nodes(h, s) if h.nodes[v].get("role") == "round")
        if h.nodes[rnd].get("transposed"):
            raise ValueError("time-sharing reads the delay line of a direct form, not a transposed form")
        terms = product_terms(h, s)
        if not terms:
            continue
        # remove the old products, pre-adders and sum
        for v in list(stage_nodes(h, s)):
            if h.nodes[v].get("role") in ("mul", "preadd", "tree", "chain"):
                h.remove_node(v)
        for v in stage_nodes(h, s):
            h.nodes[v].pop("exit", None)
        # products by a power of two are wiring: they stay out of the multipliers, summed
        # at the strobe and carried K+1 cycles by pipeline registers to meet the accumulators
        free = [t for t in terms if _free(t["coeff"])]
        terms = [t for t in terms if not _free(t["coeff"])]
        free_sum = _free_sum(h, s, free, st.coeff_frac) if free else None
        if not terms:
            if free_sum is None:
                continue
            h.nodes[free_sum]["exit"] = True
            connect(h, free_sum, rnd)
            _prune_dead(h, s)
            continue
        P = math.ceil(len(terms) / K)
        accs = []
        two = any(len(t["ops"]) == 2 for t in terms)
        sym = next((t["sign"] for t in terms if len(t["ops"]) == 2), 1)
        for p in range(P):
            group = terms[p * K:(p + 1) * K]
            table = [t["coeff"] for t in group] + [0] * (K - len(group))
            ma = add_node(h, "mux", name=f"s{s}_f{p}_xa", role="fold_mux", stage=s, group=p, steps=K)
            sel_a = _mux_ports(h, ma, [t["ops"][0] for t in group], K)
            h.nodes[ma]["select"] = tuple(sel_a)
            src = ma
            if two and any(len(t["ops"]) == 2 for t in group):
                mb = add_node(h, "mux", name=f"s{s}_f{p}_xb", role="fold_mux", stage=s, group=p, steps=K)
                # an odd-length centre product has one operand: its mirror is the zero port
                ops_b = [t["ops"][1] if len(t["ops"]) == 2 else None for t in group]
                sel_b = _mux_ports(h, mb, ops_b, K)
                h.nodes[mb]["select"] = tuple(sel_b)
                pa = add_node(h, "add", name=f"s{s}_f{p}_pre", role="preadd", stage=s, group=p)
                connect(h, ma, pa)
                connect(h, mb, pa, sign=sym)
                src = pa
            m = add_node(h, "mul", name=f"s{s}_f{p}_mul", coeff=None, table=tuple(table),
                         coeff_frac=st.coeff_frac, role="mul", stage=s, group=p)
            connect(h, src, m)
            a = add_node(h, "acc", name=f"s{s}_f{p}_acc", steps=K, role="acc", stage=s, group=p)
            connect(h, m, a)
            accs.append((a, 1))
        if free_sum is not None:
            # align the free sum with the accumulators' stage
            w = add_node(h, "add", name=f"s{s}_free_late", role="wire", stage=s)
            connect(h, free_sum, w, pipe=K + 1)
            accs.append((w, 1))
        root = adder_tree(h, accs, stage=s)
        h.nodes[root]["exit"] = True
        connect(h, root, rnd)
        h.nodes[rnd]["folded_by"] = K
        _prune_dead(h, s)
        folded_any = True
    if not folded_any:
        raise ValueError("nothing to time-share")
    h = propagate(h)
    h.graph["fold"] = max(Ks.values()) if Ks else K
    h.graph["stage_folds"] = dict(Ks) if Ks else None
    h.graph["transforms"] = tuple(h.graph.get("transforms", ())) + ("timeshared",)
    h.graph["structure"] = "timeshared"
    return h


def _free(c) -> bool:
    c = abs(int(c))
    return c != 0 and (c & (c - 1)) == 0


def _free_sum(h, s, free, coeff_frac):
    """Sum of the power-of-two products, read from the plain delay lines at the strobe."""
    prods = []
    for i, t in enumerate(free):
        if len(t["ops"]) == 2:
            (ra, za), (rb, zb) = t["ops"]
            src = add_node(h, "add", name=f"s{s}_fz{i}_pre", role="preadd", stage=s)
            h.add_edge(ra, src, port=0, z=int(za), pipe=0, sign=1, shift=0)
            h.add_edge(rb, src, port=1, z=int(zb), pipe=0, sign=t["sign"], shift=0)
            zin = 0
        else:
            (src, zin), = t["ops"]
        m = add_node(h, "mul", name=f"s{s}_fz{i}", coeff=int(t["coeff"]), coeff_frac=coeff_frac,
                     role="mul_free", stage=s)
        h.add_edge(src, m, port=0, z=int(zin), pipe=0, sign=1, shift=0)
        prods.append((m, 1))
    return adder_tree(h, prods, stage=s, role="tree")


def _mux_ports(h, mux, ops, K):
    """Connect the distinct (root, z) operands to ``mux``; returns the port per step.

    A ``None`` operand (the missing mirror of an odd-length centre tap) selects
    the constant-zero port ``zero_port`` (one past the connected ports).
    Padding steps after the last product select port 0; their table entry is 0.
    """
    ports = {}
    for o in ops:
        if o is not None and o not in ports:
            ports[o] = len(ports)
    zero_port = len(ports) if any(o is None for o in ops) else None
    sel = [ports[o] if o is not None else zero_port for o in ops] + [0] * (K - len(ops))
    for (root, z), port in sorted(ports.items(), key=lambda kv: kv[1]):
        h.add_edge(root, mux, port=port, z=int(z), pipe=0, sign=1, shift=0)
    h.nodes[mux]["zero_port"] = zero_port
    h.nodes[mux]["ports"] = len(ports) + (1 if zero_port is not None else 0)
    return sel


def _prune_dead(h, s):
    """Remove delay-line taps of stage ``s`` that nothing reads any more (worklist)."""
    def dead(v):
        d = h.nodes[v]
        return d.get("stage") == s and d.get("role") in ("tap", "subtap") and h.out_degree(v) == 0
    work = [v for v in stage_nodes(h, s) if dead(v)]
    while work:
        v = work.pop()
        if v not in h or not dead(v):
            continue
        preds = set(h.predecessors(v))
        h.remove_node(v)
        work.extend(u for u in preds if dead(u))


def folded_delays(K: int, taps, steps):
    """Parhi's D_F = K*w - P_U + v - u for products reading tap k at step s (U: input, u=0, P_U=0)."""
    return [K * k + s for k, s in zip(taps, steps)]
