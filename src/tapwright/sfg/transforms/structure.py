"""Structure transforms: pure functions graph -> new graph.

Each takes a propagated graph and returns a new propagated graph that
computes the same integers sample for sample (the tests prove it against the
bit-true reference). They act on every FIR stage of the graph they apply to
and leave other stages alone.

- :func:`transpose` -- graph transposition of each FIR stage's linear part:
  every edge reversed, adders and fan-out points swapped, input and output
  exchanged. For a single-input single-output linear time-invariant graph the
  transfer function is unchanged (the transposition theorem; Crochiere and
  Oppenheim, Proc. IEEE 63(4), 1975). Applied to the direct form with an adder
  chain it yields the classic transposed form.
- :func:`symmetric` -- linear-phase folding: in a direct form, pre-adders join
  the mirrored taps ``k`` and ``L-1-k`` (sum for symmetric, difference for
  antisymmetric coefficients) so ``ceil(L/2)`` products remain (``floor(L/2)``
  for antisymmetric, whose odd-length centre is zero); in a transposed form the
  mirrored products of the one input are shared.
- :func:`drop_zeros` -- products by zero and the adders they fed disappear
  (with :func:`symmetric`, the ``halfband`` structure).
- :func:`polyphase` -- the rate change of a decimating direct form moves in
  front of the products: M branches, branch r the input delayed by r samples
  and decimated, each a sub-filter of the coefficients r, r+M, r+2M, ... at the
  output rate (Crochiere and Rabiner, Multirate Digital Signal Processing,
  1983, ch. 3).
"""
from __future__ import annotations

import networkx as nx

from ..build import adder_tree, stage_nodes
from ..graph import add_node, connect, copy_graph, operands, propagate


def _fir_stages(g, stages=None):
    """FIR stages of the graph (restricted to ``stages`` when given)."""
    found = sorted({d["stage"] for _, d in g.nodes(data=True)
                    if d.get("role") == "mul" and "tap" in d and d.get("section") is None})
    return [s for s in found if stages is None or s in stages]


def _stage_kind(g, s):
    st = g.graph["stages"][s]
    return st.kind


def _is_direct(g, s):
    return any(g._node[v].get("role") == "tap" for v in stage_nodes(g, s)) or \
        (_stage_taps(g, s) == 1)


def _stage_taps(g, s):
    return g.graph["stages"][s].ntaps


def _remove_linear_part(g, s, keep=()):
    """Delete the stage's products and adders (not entry/round/decim/taps in ``keep``)."""
    for v in list(stage_nodes(g, s)):
        role = g._node[v].get("role")
        if role in ("tree", "chain", "mul", "preadd", "fanout", "tsum") and v not in keep:
            g.remove_node(v)


def _products_to_tree(g, s, prods, rnd):
    """Sum ``prods`` [(node, sign)] into the stage's round node."""
    if not prods:
        # all coefficients zero: a constant zero is a product by zero of the entry
        entry = next(v for v in stage_nodes(g, s) if g._node[v].get("role") == "entry")
        m = add_node(g, "mul", coeff=0, coeff_frac=g.graph["stages"][s].coeff_frac, role="mul", tap=0, stage=s)
        connect(g, entry, m)
        prods = [(m, 1)]
    root = adder_tree(g, prods, stage=s)
    for u in list(g.predecessors(rnd)):
        g.remove_edges_from([(u, rnd, k) for k in list(g[u][rnd])])
    g._node[root]["exit"] = True
    connect(g, root, rnd)
    return root


def _clear_exit(g, s):
    for v in stage_nodes(g, s):
        g._node[v].pop("exit", None)


def _round_node(g, s):
    return next(v for v in stage_nodes(g, s) if g._node[v].get("role") == "round")


def _finalize(g, structure):
    h = propagate(g)
    prev = h.graph.get("transforms", ())
    h.graph["transforms"] = tuple(prev) + (structure,)
    h.graph["structure"] = structure
    return h


# ---------------------------------------------------------------------------------------------


def transpose(g, stages=None):
    """Transposed form of every FIR stage (see module docstring)."""
    h = copy_graph(g)
    for s in _fir_stages(h, stages):
        if h.nodes[_round_node(h, s)].get("transposed"):
            continue
        nodes = [v for v in stage_nodes(h, s) if h.nodes[v].get("role") in
                 ("entry", "tap", "mul", "tree", "chain", "preadd", "fanout")]
        region = set(nodes)
        entry = next(v for v in nodes if h.nodes[v]["role"] == "entry")
        exit_ = next(v for v in nodes if h.nodes[v].get("exit"))
        rnd = _round_node(h, s)
        (src, _), = operands(h, entry)
        internal = [(u, v, d) for u, v, d in h.edges(data=True) if u in region and v in region]
        h.remove_nodes_from(region)
        # new nodes: mul stays a mul; every other node becomes an adder of its
        # former fan-out (a wire when it had one consumer)
        rename = {v: f"{v}_T" for v in region}
        for v in region:
            d = g._node[v]
            if d["kind"] == "mul":
                h.add_node(rename[v], kind="mul", coeff=d["coeff"], coeff_frac=d["coeff_frac"], role="mul",
                           tap=d.get("tap"), stage=s)
            else:
                h.add_node(rename[v], kind="add", role="tsum", stage=s, tap=d.get("tap"))
        for u, v, d in sorted(internal, key=lambda e: (str(e[1]), e[2]["port"], str(e[0]))):
            nu, nv = rename[v], rename[u]
            if h.nodes[nv]["kind"] == "mul" and (d["sign"] != 1 or d["shift"] != 0):
                w = add_node(h, "add", role="tsum", stage=s)
                connect(h, nu, w, sign=d["sign"], shift=d["shift"])
                connect(h, w, nv, z=d["z"])
            else:
                connect(h, nu, nv, z=d["z"], sign=d["sign"], shift=d["shift"])
        new_entry, new_exit = rename[exit_], rename[entry]
        h.nodes[new_entry]["role"] = "entry"
        connect(h, src, new_entry)
        h.nodes[new_exit]["exit"] = True
        connect(h, new_exit, rnd)
        h.nodes[rnd]["transposed"] = True
        _collapse_wires(h, s)
    return _finalize(h, "transposed")


def _collapse_wires(h, s):
    """Remove one-operand, sign +1, shift 0 adders that are not the entry or exit."""
    changed = True
    while changed:
        changed = False
        for v in list(stage_nodes(h, s)):
            d = h.nodes[v]
            if d["kind"] != "add" or d.get("role") == "entry" or d.get("exit") or h.in_degree(v) != 1:
                continue
            (u, e), = operands(h, v)
            if e["sign"] != 1 or e["shift"] != 0:
                continue
            outs = list(h.out_edges(v, data=True))
            if e["z"] and any(h.nodes[w]["kind"] not in ("add", "mul", "quant") for _, w, _ in outs):
                continue
            for _, w, f in outs:
                connect(h, u, w, port=f["port"], z=f["z"] + e["z"], sign=f["sign"], shift=f["shift"])
            h.remove_node(v)
            changed = True


def symmetric(g, stages=None):
    """Fold mirrored coefficients (pre-adders in direct form, shared products in transposed form)."""
    h = copy_graph(g)
    for s in _fir_stages(h, stages):
        st = h.graph["stages"][s]
        sym = st.symmetry()
        if sym == 0:
            continue
        rnd = _round_node(h, s)
        muls = {h.nodes[v]["tap"]: v for v in stage_nodes(h, s) if h.nodes[v].get("role") == "mul"}
        L = st.ntaps
        if h.nodes[rnd].get("transposed"):
            _share_products(h, s, muls, L, sym)
            continue
        if h.nodes[rnd].get("polyphase"):
            src_of = {k: operands(h, v)[0][0] for k, v in muls.items()}
        else:
            taps = {h.nodes[v].get("tap"): v for v in stage_nodes(h, s)
                    if h.nodes[v].get("role") in ("tap", "entry")}
            src_of = {k: taps[k] for k in muls}
        coeff = {k: h.nodes[v]["coeff"] for k, v in muls.items()}
        cf = st.coeff_frac
        _remove_linear_part(h, s, keep=set(src_of.values()))
        prods = []
        for k in range(L // 2):
            c = coeff.get(k, 0)
            if k not in muls or L - 1 - k not in muls:
                continue
            p = add_node(h, "add", name=f"s{s}_p{k}", role="preadd", stage=s, tap=k)
            connect(h, src_of[k], p)
            connect(h, src_of[L - 1 - k], p, sign=sym)
            m = add_node(h, "mul", name=f"s{s}_m{k}", coeff=c, coeff_frac=cf, role="mul", tap=k, stage=s)
            connect(h, p, m)
            prods.append((m, 1))
        if L % 2 and (L - 1) // 2 in muls:
            k = (L - 1) // 2
            m = add_node(h, "mul", name=f"s{s}_m{k}", coeff=coeff[k], coeff_frac=cf, role="mul", tap=k, stage=s)
            connect(h, src_of[k], m)
            prods.append((m, 1))
        _clear_exit(h, s)
        _products_to_tree(h, s, prods, rnd)
        h.nodes[rnd]["folded"] = True
    return _finalize(h, "symmetric")


def _share_products(h, s, muls, L, sym):
    for k in range(L // 2):
        a, b = muls.get(k), muls.get(L - 1 - k)
        if a is None or b is None:
            continue
        for _, w, d in list(h.out_edges(b, data=True)):
            connect(h, a, w, port=d["port"], z=d["z"], sign=d["sign"] * sym, shift=d["shift"])
        h.remove_node(b)
    h.nodes[_round_node(h, s)]["folded"] = True


def drop_zeros(g, stages=None):
    """Remove products by zero and collapse what they fed."""
    h = copy_graph(g)
    for s in _fir_stages(h, stages):
        zeros = [v for v in stage_nodes(h, s) if h.nodes[v].get("role") == "mul" and h.nodes[v]["coeff"] == 0]
        live = [v for v in stage_nodes(h, s) if h.nodes[v].get("role") == "mul" and h.nodes[v]["coeff"] != 0]
        if not zeros or not live:
            continue
        rnd = _round_node(h, s)
        if h.nodes[rnd].get("transposed"):
            for v in zeros:
                h.remove_node(v)
            _prune_dead_adders(h, s)
            continue
        src_of = {v: operands(h, v)[0] for v in live}
        attrs = {v: dict(h.nodes[v]) for v in live}
        # pre-adders feeding live products survive as they are
        keep = set()
        for v, (u, _) in src_of.items():
            keep.add(u)
            if h.nodes[u].get("role") == "preadd":
                keep.add(u)
        _remove_linear_part(h, s, keep={u for u in keep})
        prods = []
        for v in live:
            u, d = src_of[v]
            m = add_node(h, "mul", name=v, **{k: a for k, a in attrs[v].items() if k not in ("range", "fmt", "kind")})
            connect(h, u, m, z=d["z"])
            prods.append((m, 1))
        _clear_exit(h, s)
        _products_to_tree(h, s, prods, rnd)
        # taps no longer used at the end of the delay line
        _prune_dead_taps(h, s)
    return _finalize(h, "halfband")


def remove_sourceless_adders(h, s):
    """Delete the stage's adders left without operands, until none is left."""
    changed = True
    while changed:
        changed = False
        for v in list(stage_nodes(h, s)):
            d = h.nodes[v]
            if d["kind"] == "add" and h.in_degree(v) == 0:
                h.remove_node(v)
                changed = True


def _prune_dead_adders(h, s):
    remove_sourceless_adders(h, s)
    _collapse_wires(h, s)


def _prune_dead_taps(h, s):
    changed = True
    while changed:
        changed = False
        for v in list(stage_nodes(h, s)):
            if h.nodes[v].get("role") == "tap" and h.out_degree(v) == 0:
                h.remove_node(v)
                changed = True


def polyphase(g, stages=None):
    """Move each decimating FIR stage's rate change in front of its products."""
    h = copy_graph(g)
    for s in _fir_stages(h, stages):
        st = h.graph["stages"][s]
        M = st.decimation
        if M == 1 or h.nodes[_round_node(h, s)].get("transposed"):
            continue
        rnd = _round_node(h, s)
        muls = {h.nodes[v]["tap"]: v for v in stage_nodes(h, s) if h.nodes[v].get("role") == "mul"}
        coeff = {k: h.nodes[v]["coeff"] for k, v in muls.items()}
        entry = next(v for v in stage_nodes(h, s) if h.nodes[v].get("role") == "entry")
        decim = next(v for v in stage_nodes(h, s) if h.nodes[v].get("role") == "decim")
        _remove_linear_part(h, s)
        for v in list(stage_nodes(h, s)):
            if h.nodes[v].get("role") == "tap":
                h.remove_node(v)
        # the decimator moves from behind the rounding to the branches
        (q, _), = operands(h, decim)
        outs = list(h.out_edges(decim, data=True))
        h.remove_node(decim)
        for _, w, d in outs:
            connect(h, rnd, w, port=d["port"], z=d["z"])
        L = st.ntaps
        prods = []
        hi = entry
        for r in range(min(M, L)):
            if r:
                t = add_node(h, "add", name=f"s{s}_h{r}", role="tap", tap=r, stage=s)
                connect(h, hi, t, z=1)
                hi = t
            dn = add_node(h, "decim", name=f"s{s}_d{r}", factor=M, phase=st.phase, stage=s, role="commutator",
                          branch=r)
            connect(h, hi, dn)
            lo = dn
            for qd, k in enumerate(range(r, L, M)):
                if qd:
                    u = add_node(h, "add", name=f"s{s}_u{r}_{qd}", role="subtap", tap=k, stage=s, branch=r)
                    connect(h, lo, u, z=1)
                    lo = u
                if k in muls:
                    m = add_node(h, "mul", name=f"s{s}_m{k}", coeff=coeff[k], coeff_frac=st.coeff_frac,
                                 role="mul", tap=k, stage=s, branch=r)
                    connect(h, lo, m)
                    prods.append((m, 1))
        _clear_exit(h, s)
        _products_to_tree(h, s, prods, rnd)
        h.nodes[rnd]["polyphase"] = True
    return _finalize(h, "polyphase")


STRUCTURE_TRANSFORMS = {
    "direct": (),
    "transposed": (transpose,),
    "symmetric": (symmetric,),
    "halfband": (drop_zeros, symmetric),
    "polyphase": (polyphase,),
}


__all__ = ["transpose", "symmetric", "drop_zeros", "polyphase", "STRUCTURE_TRANSFORMS", "nx"]
