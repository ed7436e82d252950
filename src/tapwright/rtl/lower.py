"""Lowering: one function from a signal-flow graph to an Amaranth component.

:func:`lower` reads nothing but the graph (node kinds, formats, ranges, edge
``z``/``pipe``/``sign``/``shift``, the fold factor): there is no generator per
structure. Every structure (direct, transposed, symmetric, halfband,
polyphase, time-shared, biquads, CIC, pipelined variants, chains) is the same
walk over the graph.

Ports (the public contract, ``interface.md`` section 4)
-------------------------------------------------------
``clk`` and ``rst`` (synchronous, active high) come from Amaranth's default
``sync`` domain; ``in_valid``/``in_ready``/``in_data`` (signed, input format
bits) and ``out_valid``/``out_data`` (signed, the output node's format bits).

Timing semantics
----------------
Cycle t is the time between rising edges t and t+1.

*Strobes.* The input strobe is ``s_in = in_valid & in_ready & ~rst``: a sample
taken in cycle t is registered at edge t+1. Every node has a stage (pipeline
registers from the input, :func:`~tapwright.sfg.transforms.pipeline.stages`)
and a strobe, the cycle in which its value is the value of one sample:

- a node's strobe is its operands' strobe delayed by the edge's ``pipe``
  count (all operands of a node must agree; loops share their entry's strobe);
- a ``decim`` node's strobe is its operand's strobe and (phase counter ==
  ``phase``); the counter counts the operand's strobes modulo ``factor`` from
  reset (one counter per (strobe, factor), one comparator per phase);
- a time-shared ``acc`` node's strobe is its own one-cycle ``done`` pulse
  (below).

*Values* are combinational functions of the operands within one stage:
``mul`` is the exact constant product, ``add`` the exact sum of
``sign * (operand << (shift + frac_node - frac_operand))``, ``quant`` rounds by
``frac_in - frac_out`` bits (``truncate``: arithmetic shift; ``half_up``: add
half an LSB then shift; ``half_even``: ties to even; a negative shift is a left
shift) and then saturates (a clamp, left out when the operand's range proves
it cannot overflow) or wraps (keeps the low bits). ``decim`` and ``output``
pass their operand. Every signal is the node's exact format width, so
truncation on assignment never loses a bit of a value that the range
analysis bounds (intermediate two's-complement wrap inside a sum is harmless
because the final sum fits).

*Edge z (algorithmic delays).* One delay line per source node, as wide as the
source's format, shifted on the source's strobe, so it holds across gaps in
the input. A tap with ``z`` read at the source's strobe is element z-1 (the
previous samples); delay lines are state and are cleared by ``rst``.

*Edge pipe.* Free-running registers after the tap (``reset_less``), one
chain per (source, z, kind of tap) shared by all readers; the valid bits are
pipelined alongside and cleared by ``rst``.

*Time-shared (folded) graphs*: multiplexers with ``steps`` K > 1 (one K per
folded stage; the cone of multiplexers, table products and accumulators that
one strobe starts shares one step counter). An iteration starts
at a strobe of the multiplexers' source domain (cycle t). At edge t+1 each
source read by a ``mux`` shifts its line, whose element z then holds the
sample z back (the "captured" line C_0..C_maxz: it is the source's delay line,
one element longer); a ``mux`` operand with delay z reads C_z, stable until
the next capture. A step counter runs steps 0..K-1 in cycles t+1..t+K (a
strobe in cycle t+K restarts it: back-to-back iterations). A ``mux`` passes
port ``select[step]`` (``zero_port`` is constant zero), a table ``mul``
multiplies by ``table[step]`` (a coefficient ROM indexed by the step), and the
step and its activity flag are pipelined alongside any ``pipe`` registers in
the shared cone. An ``acc`` loads the product at step 0 and adds it at the
other steps (at the edge ending each step); the full sum is visible from
cycle t+P+K+1 (P: pipe registers in the cone) with a one-cycle ``done``
strobe, which is the ``acc`` node's strobe, and it holds until the next
iteration's step 0 updates it, so downstream logic of that stage reads it in
the ``done`` cycle. This matches ``stages()``: acc = stage(operand) + K + 1.

*in_ready.* For unfolded graphs ``in_ready = ~rst``. For folded graphs a
down-counter holds ``in_ready`` low for ``input_interval(g) - 1`` cycles after
each accepted sample, so samples are accepted at least (and need be no more
than) ``input_interval`` cycles apart.

*Latency.* Declared latency is ``stages(g)[output]``; output m is
``out_valid`` in cycle t_m + latency where t_m is the cycle its completing
input sample was taken. ``out_valid`` is gated by ``~rst``. Latency 0 (no
pipeline register before the output) is a combinational path from
``in_data`` to ``out_data``.
"""
from __future__ import annotations

import re

from amaranth.hdl import Const, Module, Mux, ResetSignal, Signal, signed
from amaranth.lib import wiring
from amaranth.lib.wiring import In, Out

from ..fixed.formats import bits_for_range, round_scalar
from ..sfg.graph import GraphError, eval_order, input_interval, operands, output_node
from ..sfg.transforms.pipeline import split_bits
from ..sfg.transforms.pipeline import stages as _stages

__all__ = ["lower", "FilterBlock", "timing_of"]

from ..sfg.timing_tags import _IN, NetlistWalk, _canon, _mux_steps, timing_of  # noqa: F401 (re-exported)


def _sname(s: str) -> str:
    return re.sub(r"[^A-Za-z0-9_]", "_", str(s))


# ------------------------------------------------------------------------------------------------
# timing tags (sfg/timing_tags.py): ("s", root, d) a sample strobe = root's strobe delayed d
# cycles; ("c", root, d) a time-shared cone whose steps start 1 cycle after root's strobe + d.
# ------------------------------------------------------------------------------------------------


class FilterBlock(wiring.Component):
    """The lowered filter: ports as in the contract; ``latency`` and ``input_interval`` attributes."""

    def __init__(self, g, name: str = "filter"):
        self.g = g
        self.top_name = name
        self.out_node = output_node(g)
        self.in_fmt = g.graph["in_fmt"]
        self.out_fmt = g.nodes[self.out_node]["fmt"]
        self.stage = _stages(g)
        self.latency = int(self.stage[self.out_node])
        self.input_interval = int(input_interval(g))
        self.fold = int(g.graph.get("fold", 1))
        self.tags = timing_of(g)
        # a block may be made only to read its latency and widths: no unused-elaboratable warning
        self._MustUse__silence = True
        super().__init__({
            "in_valid": In(1),
            "in_ready": Out(1),
            "in_data": In(signed(self.in_fmt.bits)),
            "out_valid": Out(1),
            "out_data": Out(signed(self.out_fmt.bits)),
        })

    def elaborate(self, platform):
        low = _Lowering(self)
        self.signals = low.val  # node name -> value signal (for debugging and tests)
        return low.m


class _Lowering(NetlistWalk):
    def __init__(self, top: FilterBlock):
        self.top = top
        self.g = g = top.g
        self.m = m = Module()
        self.tags = top.tags
        self.rst = ResetSignal("sync")
        self.val: dict = {}
        self._split_out: dict = {}   # multiplexer with registers inside -> its last level
        # sums of adder trees kept as carry chains of their own (profile keep_tree_sums)
        self.kept = {v for v in g if _is_tree_sum(g, v)} if _keeps_tree_sums(g) else set()
        for v in eval_order(g):
            f = g.nodes[v]["fmt"]
            self.val[v] = Signal(signed(f.bits), name=f"v_{_sname(v)}",
                                 attrs={"keep": 1} if v in self.kept else None)
        self._ports()
        self._walk_init()
        for v in eval_order(g):
            self._node(v)
        out = top.out_node
        m.d.comb += [
            top.out_data.eq(self.val[out]),
            top.out_valid.eq(self.strobe(self.tags[out]) & ~self.rst),
        ]

    # -------------------------------------------------------------------------------- ports
    def _ports(self):
        top, m = self.top, self.m
        I = top.input_interval
        self.s_in = Signal(name="s_in")
        if I <= 1:
            m.d.comb += top.in_ready.eq(~self.rst)
        else:
            wait = Signal(range(I), name="in_wait")
            m.d.comb += top.in_ready.eq((wait == 0) & ~self.rst)
            with m.If(self.s_in):
                m.d.sync += wait.eq(I - 1)
            with m.Elif(wait != 0):
                m.d.sync += wait.eq(wait - 1)
        m.d.comb += self.s_in.eq(top.in_valid & top.in_ready & ~self.rst)

    # -------------------------------------------------------------------------------- strobes
    def _delay_strobe(self, prev, root, d):
        s = Signal(name=f"stb_{self._root_name(root)}_d{d}")
        self.m.d.sync += s.eq(prev)
        return s

    def _root_name(self, root):
        if root == _IN:
            return "in"
        if root[0] == "dec":
            r, F, P = root[1], root[2], root[3]
            return f"{self._root_name(r)}_dec{F}p{P}"
        if root[0] == "acc":
            (r, K) = root[1]
            return f"{self._root_name(r)}_k{K}_acc"
        return "x"

    def _root_strobe(self, root, d):
        m = self.m
        if root == _IN:
            return self.s_in
        nm = self._root_name(root)
        if root[0] == "dec":
            r, F, P = root[1], root[2], root[3]
            src = self.strobe(("s", r, d))
            ck = (r, d, F)
            if ck not in self._counter_memo:
                cnt = Signal(range(F), name=f"ph_{self._root_name(r)}_d{d}_m{F}")
                with m.If(src):
                    m.d.sync += cnt.eq(Mux(cnt == F - 1, 0, cnt + 1))
                self._counter_memo[ck] = cnt
            cnt = self._counter_memo[ck]
            s = Signal(name=f"stb_{nm}_d{d}")
            m.d.comb += s.eq(src & (cnt == P))
            return s
        if root[0] == "acc":
            active, step = self.cone(root[1], d)
            s = Signal(name=f"stb_{nm}_d{d}")
            m.d.sync += s.eq(active & (step == root[1][1] - 1))
            return s
        raise GraphError(f"unknown strobe root {root}")

    def cone(self, root, d):
        """(active, step) signals of the time-shared schedule at cone delay d."""
        key = (root, d)
        if key in self._cone_memo:
            return self._cone_memo[key]
        base = self._cone_base[root]
        r, K = root
        m = self.m
        nm = f"{self._root_name(r)}_k{K}"
        if d == base:
            src = self.strobe(("s", r, d))
            active = Signal(name=f"act_{nm}_d{d}")
            step = Signal(range(K), name=f"step_{nm}_d{d}")
            with m.If(src):
                m.d.sync += [active.eq(1), step.eq(0)]
            with m.Elif(active):
                with m.If(step == K - 1):
                    m.d.sync += [active.eq(0), step.eq(0)]
                with m.Else():
                    m.d.sync += step.eq(step + 1)
        elif d > base:
            pa, ps = self.cone(root, d - 1)
            active = Signal(name=f"act_{nm}_d{d}")
            step = Signal(range(K), name=f"step_{nm}_d{d}", reset_less=True)
            m.d.sync += [active.eq(pa), step.eq(ps)]
        else:
            raise GraphError("cone read before its multiplexers")
        self._cone_memo[key] = (active, step)
        return active, step

    # -------------------------------------------------------------------------------- delay lines
    def line(self, u):
        """Delay line of ``u`` (element 0 = the most recent sample, after the strobe's edge)."""
        if u in self._line_memo:
            return self._line_memo[u]
        L = self._line_len[u]
        w = self.g.nodes[u]["fmt"].bits
        regs = [Signal(signed(w), name=f"z_{_sname(u)}_{k}") for k in range(L)]
        stb = self.strobe(self.tags[u])
        with self.m.If(stb):
            self.m.d.sync += regs[0].eq(self.val[u])
            for k in range(1, L):
                self.m.d.sync += regs[k].eq(regs[k - 1])
        self._line_memo[u] = regs
        return regs

    def tap(self, u, z, captured, pipe):
        # a multiplexer with registers inside (mux_regs r, set by the pipeliner): its value
        # r cycles late is the output of its last select level (_split_mux)
        r = self.g.nodes[u].get("mux_regs", 0)
        if r and not captured and z == 0 and pipe <= r:
            if pipe < r:
                raise GraphError(f"multiplexer {u} is read {pipe} cycles late, inside its "
                                 f"{r} registers")
            return self._split_out[u]
        return super().tap(u, z, captured, pipe)

    def _split_mux(self, v, words):
        """``words[step]`` with ``mux_regs`` registers between select levels: level l is a
        case on its share of the step bits (sfg.transforms.pipeline.split_bits) at cone
        delay d + l, so the last level's output equals the plain multiplexer delayed r
        cycles (the captured words hold still through an iteration)."""
        m, n = self.m, self.g.nodes[v]
        r = int(n["mux_regs"])
        K = len(words)
        root, d = self.tags[v][1], self.tags[v][2]
        steps = [self.cone(root, d + lv)[1] for lv in range(r + 1)]   # made before any case
        bits = split_bits(K, r)
        w = n["fmt"].bits
        level, lo = list(words), 0
        for lv, b in enumerate(bits):
            last = lv == len(bits) - 1
            sel = steps[lv][lo:lo + b]
            nxt = []
            for j in range(0, len(level), 1 << b):
                o = Signal(signed(w), name=f"mx_{_sname(v)}_l{lv}_{j >> b}", reset_less=True)
                dom = m.d.comb if last else m.d.sync
                with m.Switch(sel):
                    for i, word in enumerate(level[j:j + (1 << b)]):
                        with m.Case(i):
                            dom += o.eq(word)
                nxt.append(o)
            level, lo = nxt, lo + b
        self._split_out[v] = level[0]

    def _pipe_reg(self, prev, u, z, captured, pipe):
        s = Signal(signed(len(prev)), name=f"p_{_sname(u)}_z{z}{'c' if captured else ''}_{pipe}",
                   reset_less=True)
        self.m.d.sync += s.eq(prev)
        return s

    # -------------------------------------------------------------------------------- nodes
    def _node(self, v):
        g, m = self.g, self.m
        n = g.nodes[v]
        k = n["kind"]
        out = self.val[v]
        if k == "input":
            m.d.comb += out.eq(self.top.in_data)
            return
        ops = operands(g, v)
        if k in ("output", "decim"):
            (u, e), = ops
            m.d.comb += out.eq(self.operand(v, u, e))
            return
        if k == "mul":
            (u, e), = ops
            a = self.operand(v, u, e)
            if n.get("table") is not None:
                table = [int(c) for c in n["table"]]
                _, step = self.cone(self.tags[v][1], self.tags[v][2])
                cw = bits_for_range(min(table + [0]), max(table + [0]))
                coef = Signal(signed(max(cw, 2)), name=f"coef_{_sname(v)}")
                groups: dict = {}
                for s, c in enumerate(table):
                    groups.setdefault(c, []).append(s)
                with m.Switch(step):
                    for c, ss in sorted(groups.items(), key=lambda kv: kv[1][0]):
                        with m.Case(*ss):
                            m.d.comb += coef.eq(c)
                m.d.comb += out.eq(a * coef)
            else:
                c = int(n["coeff"])
                m.d.comb += out.eq(a * c if c else 0)
            return
        if k == "add":
            fr = n["fmt"].frac
            terms = []
            for u, e in ops:
                a = self.operand(v, u, e)
                s = e["shift"] + fr - g.nodes[u]["fmt"].frac
                if s < 0:
                    raise GraphError(f"adder {v}: operand {u} would need a right shift ({s})")
                if s:
                    a = a.shift_left(s)
                terms.append((a, e["sign"]))
            if v in self.kept and len(terms) > 2:
                m.d.comb += out.eq(_sum(terms, keep=f"k_{_sname(v)}", m=m))
            else:
                m.d.comb += out.eq(_sum(terms))
            return
        if k == "quant":
            (u, e), = ops
            a = self.operand(v, u, e)
            m.d.comb += out.eq(self._quant(v, u, a))
            return
        if k == "mux":
            fr = n["fmt"].frac
            _, step = self.cone(self.tags[v][1], self.tags[v][2])
            byport = {e["port"]: (u, e) for u, e in ops}
            zero = n.get("zero_port")
            groups: dict = {}
            for s, p in enumerate(n["select"]):
                groups.setdefault(p, []).append(s)
            # every register and strobe is made before the Switch: a lazily made
            # one would land inside the case
            srcs = {}
            for p in groups:
                if p == zero:
                    srcs[p] = Const(0)
                elif p in byport:
                    u, e = byport[p]
                    a = self.operand(v, u, e)
                    s = fr - g.nodes[u]["fmt"].frac
                    srcs[p] = a.shift_left(s) if s else a
                else:
                    raise GraphError(f"multiplexer {v} selects unconnected port {p}")
            if n.get("mux_regs"):
                self._split_mux(v, [srcs[p] for p in n["select"][:self.tags[v][1][1]]])
                return
            with m.Switch(step):
                for p, ss in sorted(groups.items(), key=lambda kv: kv[1][0]):
                    with m.Case(*ss):
                        m.d.comb += out.eq(srcs[p])
            return
        if k == "acc":
            (u, e), = ops
            a = self.operand(v, u, e)
            t = self.tags[u]
            active, step = self.cone(t[1], t[2] + e["pipe"])
            with m.If(active):
                with m.If(step == 0):
                    m.d.sync += out.eq(a)
                with m.Else():
                    m.d.sync += out.eq(out + a)
            return
        raise GraphError(f"cannot lower node {v} of kind {k}")

    def _quant(self, v, u, a):
        g = self.g
        n = g.nodes[v]
        f = n["fmt"]
        shift = g.nodes[u]["fmt"].frac - f.frac
        rnd = n["rounding"]
        if shift > 0:
            if len(a) < shift + 2:
                ext = Signal(signed(shift + 2), name=f"qx_{_sname(v)}")
                self.m.d.comb += ext.eq(a)
                a = ext
            if rnd == "truncate":
                r = a.shift_right(shift)
            elif rnd == "half_up":
                r = (a + (1 << (shift - 1))).shift_right(shift)
            elif rnd == "half_even":
                q = a.shift_right(shift)
                low = a[:shift]
                half = 1 << (shift - 1)
                up = (low > half) | ((low == half) & q[0])
                r = q + up
            else:
                raise GraphError(f"unknown rounding {rnd!r}")
        elif shift < 0:
            r = a.shift_left(-shift)
        else:
            r = a
        if n["overflow"] == "saturate":
            lo_u, hi_u = g.nodes[u]["range"]
            rl, rh = round_scalar(lo_u, shift, rnd), round_scalar(hi_u, shift, rnd)
            if rl < f.lo or rh > f.hi:
                r = Mux(r > f.hi, Const(f.hi, signed(f.bits)), Mux(r < f.lo, Const(f.lo, signed(f.bits)), r))
        elif n["overflow"] != "wrap":
            raise GraphError(f"unknown overflow {n['overflow']!r}")
        return r  # assignment to the fmt-wide signal keeps the low bits: exact or the wrap


def _keeps_tree_sums(g) -> bool:
    """Whether the graph's target family keeps every adder of a product tree as its own
    carry chain (profile field ``keep_tree_sums``; the device is the recipe's delay model)."""
    dev = getattr(g.graph.get("recipe"), "delay_model", None)
    if not dev:
        return False
    from ..cost.devices import DEVICES, get_profile
    return dev in DEVICES and get_profile(dev).keep_tree_sums


def _is_tree_sum(g, v) -> bool:
    n = g.nodes[v]
    return n["kind"] == "add" and n.get("role") == "tree" and g.in_degree(v) >= 2


def _sum(terms, keep: str | None = None, m=None):
    """Balanced tree of signed terms [(value, sign)]. With ``keep`` (a name prefix) every
    pairwise sum is a signal of its own with the ``keep`` attribute, in module ``m``: Yosys
    then maps each to one carry chain instead of merging them into a compressor."""
    level = [(a, s) for a, s in terms]
    if not level:
        return Const(0)
    k = 0
    while len(level) > 1:
        nxt = []
        for i in range(0, len(level) - 1, 2):
            (a, sa), (b, sb) = level[i], level[i + 1]
            if sa > 0 and sb > 0:
                nxt.append((a + b, 1))
            elif sa > 0:
                nxt.append((a - b, 1))
            elif sb > 0:
                nxt.append((b - a, 1))
            else:
                nxt.append((a + b, -1))
            if keep is not None and len(level) > 2:
                e, sg = nxt[-1]
                w = Signal(signed(len(e)), name=f"{keep}_{k}", attrs={"keep": 1})
                k += 1
                m.d.comb += w.eq(e)
                nxt[-1] = (w, sg)
        if len(level) % 2:
            nxt.append(level[-1])
        level = nxt
    a, s = level[0]
    return a if s > 0 else -a


def lower(g, *, name: str = "filter") -> FilterBlock:
    """Lower a propagated signal-flow graph to an Amaranth :class:`FilterBlock` (see module docstring)."""
    return FilterBlock(g, name=name)
