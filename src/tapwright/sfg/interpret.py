"""Bit-true interpreter: executes any signal-flow graph on integer NumPy arrays.

Feed-forward parts run vectorised, node by node, on whole sample arrays.
Recursive parts (each strongly connected component with a loop) run sample by
sample on Python integers. Pipeline registers (``pipe``) do not change the
sample-level result and are ignored here; they are timing, which the RTL
simulation checks. Time-shared (folded) graphs run here at the sample level
(an ``acc`` sums its cone over the K schedule steps); their cycle-level
schedule, with every pipeline register, strobe and ``in_ready``, runs in
:func:`tapwright.sfg.fold.run_cycles`.
"""
from __future__ import annotations

import numpy as np

from ..fixed.formats import overflow, requantize, shift_round
from .graph import GraphError, condensed_order, loop_order, operands, output_node

_OBJ_BITS = 60


def _delayed(a: np.ndarray, z: int) -> np.ndarray:
    if z == 0:
        return a
    out = np.zeros_like(a)
    if z < len(a):
        out[z:] = a[: len(a) - z]
    return out


def _wide(g, v) -> bool:
    f = g._node[v].get("fmt")
    return f is not None and f.bits > _OBJ_BITS


def _as(a: np.ndarray, obj: bool) -> np.ndarray:
    if obj and a.dtype != object:
        return a.astype(object)
    return a


def _vec(g, v, vals):
    n = g._node[v]
    k = n["kind"]
    ops = operands(g, v)
    obj = _wide(g, v) or any(vals[u] is not None and vals[u].dtype == object for u, _ in ops)
    if k == "acc":
        (u, _), = ops
        total = None
        for step in range(int(n["steps"])):
            a = _at_step(g, u, step, vals, obj)
            total = a if total is None else total + a
        return total
    if k == "mux" or any(vals[u] is None for u, _ in ops):
        return None  # a time-shared cone: only read through an acc, step by step
    if k == "mul" and n.get("table") is not None:
        return None
    if k in ("output", "decim", "mul", "quant"):
        (u, d), = ops
        a = _as(_delayed(vals[u], d["z"]), obj)
        ufr = g._node[u]["fmt"].frac
        if k == "output":
            return a
        if k == "decim":
            return a[n["phase"]::n["factor"]].copy()
        if k == "mul":
            return a * (int(n["coeff"]) if obj else np.int64(n["coeff"]))
        return requantize(a, ufr, n["fmt"], n["rounding"], n["overflow"])
    if k == "add":
        fr = n["fmt"].frac
        acc = None
        for u, d in ops:
            a = _as(_delayed(vals[u], d["z"]), obj)
            s = d["shift"] + fr - g._node[u]["fmt"].frac
            if s:
                a = a << s
            if d["sign"] < 0:
                a = -a
            acc = a.copy() if acc is None else acc + a
        return acc
    raise GraphError(f"cannot execute node {v} of kind {k}")


def _at_step(g, v, step, vals, obj):
    """Value of a time-shared cone node at one schedule step, over all iterations."""
    n = g._node[v]
    k = n["kind"]
    fr = n["fmt"].frac
    if k == "mux":
        port = n["select"][step]
        ops = operands(g, v)
        if port == n.get("zero_port"):
            u0, d0 = ops[0]
            return _as(np.zeros(len(vals[u0]), dtype=np.int64), obj)
        u, d = next((u, d) for u, d in ops if d["port"] == port)
        a = _as(_delayed(vals[u], d["z"]), obj)
        s = fr - g._node[u]["fmt"].frac
        return a << s if s else a
    if k == "mul":
        (u, _), = operands(g, v)
        a = _at_step(g, u, step, vals, obj)
        c = int(n["table"][step])
        return a * (c if obj else np.int64(c))
    if k == "add":
        acc = None
        for u, d in operands(g, v):
            a = _at_step(g, u, step, vals, obj)
            s = d["shift"] + fr - g._node[u]["fmt"].frac
            if s:
                a = a << s
            if d["sign"] < 0:
                a = -a
            acc = a if acc is None else acc + a
        return acc
    raise GraphError(f"node {v} of kind {k} cannot sit in a time-shared cone")


def _scalar_step(g, v, ops, get):
    n = g._node[v]
    k = n["kind"]
    if k == "add":
        fr = n["fmt"].frac
        acc = 0
        for u, d in ops:
            a = get(u, d["z"])
            s = d["shift"] + fr - g._node[u]["fmt"].frac
            a = a << s
            acc += -a if d["sign"] < 0 else a
        return acc
    (u, d), = ops
    a = get(u, d["z"])
    if k == "mul":
        return a * int(n["coeff"])
    if k == "quant":
        f = n["fmt"]
        a = int(shift_round(np.array([a], dtype=object), g._node[u]["fmt"].frac - f.frac, n["rounding"])[0])
        return int(overflow(np.array([a], dtype=object), f.bits, n["overflow"])[0])
    if k == "output":
        return a
    raise GraphError(f"node {v} of kind {k} cannot sit inside a loop")


def _fast_quant(f, shift, rounding, ovf):
    lo, hi = f.lo, f.hi
    m = 1 << f.bits
    half = (1 << (shift - 1)) if shift > 0 else 0

    def q(a):
        if shift > 0:
            if rounding == "truncate":
                a >>= shift
            elif rounding == "half_up":
                a = (a + half) >> shift
            else:
                b = a >> shift
                r = a - (b << shift)
                a = b + (1 if (r > half or (r == half and (b & 1))) else 0)
        elif shift < 0:
            a <<= -shift
        if ovf == "saturate":
            return lo if a < lo else hi if a > hi else a
        return ((a - lo) % m) + lo
    return q


def _run_loop(g, comp, vals):
    """Sample-by-sample execution of one recursive component."""
    order = loop_order(g, comp)
    ext = {u for v in comp for u, _ in operands(g, v) if u not in comp}
    lengths = {len(vals[u]) for u in ext}
    if len(lengths) != 1:
        raise GraphError("a loop fed by streams of different rates")
    n_samp = lengths.pop()
    ext_lists = {u: [int(a) for a in vals[u]] for u in ext}
    hist = {v: [] for v in comp}
    plan = []
    for v in order:
        ops = operands(g, v)
        nd = g._node[v]
        if nd["kind"] == "quant":
            (u, d), = ops
            qf = _fast_quant(nd["fmt"], g._node[u]["fmt"].frac - nd["fmt"].frac, nd["rounding"], nd["overflow"])
            plan.append((v, "q", [(u, d["z"], 0, 1)], qf))
        elif nd["kind"] == "add":
            fr = nd["fmt"].frac
            terms = [(u, d["z"], d["shift"] + fr - g._node[u]["fmt"].frac, d["sign"]) for u, d in ops]
            plan.append((v, "a", terms, None))
        elif nd["kind"] == "mul":
            (u, d), = ops
            plan.append((v, "m", [(u, d["z"], 0, 1)], int(nd["coeff"])))
        else:
            raise GraphError(f"node {v} of kind {nd['kind']} cannot sit inside a loop")
    for i in range(n_samp):
        for v, op, terms, extra in plan:
            vals_t = []
            for u, z, s, sg in terms:
                j = i - z
                if j < 0:
                    a = 0
                else:
                    a = ext_lists[u][j] if u in ext_lists else hist[u][j]
                if s:
                    a = a << s
                vals_t.append(-a if sg < 0 else a)
            if op == "a":
                r = sum(vals_t)
            elif op == "m":
                r = vals_t[0] * extra
            else:
                r = extra(vals_t[0])
            hist[v].append(r)
    for v in comp:
        wide = _wide(g, v)
        arr = np.array(hist[v], dtype=object)
        vals[v] = arr if wide else arr.astype(np.int64)


#: a linear form with more (leaf, delay) terms than this is evaluated as arrays
_FORM_MAX = 8192


class _Values(dict):
    """Node values; a node kept as a linear form is evaluated on first read.

    Feed-forward multiply/add nodes are not executed one by one: each carries its
    value as an exact linear form ``{leaf node: {delay: integer weight}}`` over the
    nodes before it that are not multiplies or adds (input, delay-line readers
    inside loops, quantizers, decimators, accumulators...). A form is turned into
    an array only when something else reads it, by one convolution per leaf,
    done in float64 when every partial sum is an integer below 2**53 (so exactly),
    else in int64 or Python integers. The sums of a filter's adder tree therefore
    cost one convolution instead of one array operation per node.
    """

    def __init__(self):
        super().__init__()
        self.forms = {}

    def __missing__(self, v):
        if v not in self.forms:
            raise KeyError(v)
        arr = _evaluate(self.forms.pop(v), self)
        self[v] = arr
        return arr


def _evaluate(form, vals):
    total = None
    for leaf, taps in form.items():
        a = vals[leaf]
        n = len(a)
        taps = {z: c for z, c in taps.items() if c and z < n}
        if not taps:
            part = np.zeros(n, dtype=a.dtype)
        else:
            obj = a.dtype == object
            amax = int(np.max(np.abs(a))) if n and not obj else None
            l1 = sum(abs(c) for c in taps.values())
            if not obj and amax * l1 < 2 ** 53:
                h = np.zeros(max(taps) + 1)
                for z, c in taps.items():
                    h[z] = c
                part = np.rint(np.convolve(a.astype(np.float64), h)[:n]).astype(np.int64)
            else:
                big = obj or amax * l1 >= 2 ** 62
                src = a.astype(object) if big and not obj else a
                part = None
                for z, c in taps.items():
                    t = _delayed(src, z) * (int(c) if big else np.int64(c))
                    part = t if part is None else part + t
        if total is not None and (total.dtype == object) != (part.dtype == object):
            total, part = total.astype(object), part.astype(object)
        total = part if total is None else total + part
    return total


def _form_of(g, v, vals, loops):
    """The linear form of a plain multiply or add node, or None when it must run as arrays."""
    n = g._node[v]
    k = n["kind"]
    if v in loops or k not in ("add", "mul") or (k == "mul" and n.get("table") is not None):
        return None
    if _wide(g, v):
        return None
    ops = operands(g, v)
    if not ops:
        return None
    out: dict = {}
    fr = n["fmt"].frac
    for u, d in ops:
        if u in vals.forms:
            src = vals.forms[u]
        elif u in vals:
            if vals[u] is None:
                return None
            src = {u: {0: 1}}
        else:
            return None
        if k == "mul":
            w = int(n["coeff"])
        else:
            s = d["shift"] + fr - g._node[u]["fmt"].frac
            if s < 0:
                return None
            w = d["sign"] * (1 << s)
        z0 = d["z"]
        for leaf, taps in src.items():
            dst = out.setdefault(leaf, {})
            for z, c in taps.items():
                dst[z + z0] = dst.get(z + z0, 0) + c * w
    if sum(len(t) for t in out.values()) > _FORM_MAX:
        return None
    return out


def run(g, x) -> np.ndarray:
    """Output samples of graph ``g`` for integer input ``x``."""
    x = np.asarray(x)
    vals = _Values()
    comps = condensed_order(g)
    loops = {v for members in comps for v in members
             if len(members) > 1 or v in g._succ[v]}
    for members in comps:
        comp = set(members)
        if members[0] in loops:
            _run_loop(g, comp, vals)
            continue
        (v,) = comp
        if g._node[v]["kind"] == "input":
            vals[v] = x.astype(object) if x.dtype == object else x.astype(np.int64)
            continue
        form = _form_of(g, v, vals, loops)
        if form is not None:
            vals.forms[v] = form
            continue
        vals[v] = _vec(g, v, vals)
    out = vals[output_node(g)]
    return out
