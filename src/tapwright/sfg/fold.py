"""Cycle-by-cycle interpreter: the clocked behaviour of a graph, as the RTL lowering builds it.

:func:`tapwright.sfg.interpret.run` computes the output *samples* of any graph
and ignores pipeline registers. This module runs the *clock*: it executes, one
cycle at a time, exactly the registers, strobes and counters that
:func:`tapwright.rtl.lower.lower` instantiates for a graph (see that module's
docstring for the semantics), so it gives, besides the values, the cycle of
every ``out_valid`` and the ``in_ready`` pattern. It is written for
time-shared (folded) graphs, where the values depend on the schedule, and
runs every graph the lowering accepts (pipelined, polyphase, recursive,
chains).

What is modelled, register for register (cycle t: between rising edges t
and t+1; the state is that of the first cycle after reset, everything zero):

- ``in_ready``: high after reset; for folded graphs a down-counter holds it
  low for ``input_interval(g) - 1`` cycles after each accepted sample; the
  input strobe is ``in_valid & in_ready``.
- strobes: one per timing tag of :func:`~tapwright.sfg.timing_tags.timing_of`, a
  strobe delayed by d cycles is a chain of d registers; a ``decim`` strobe is
  its source's strobe and (modulo-``factor`` count of the source's strobes ==
  ``phase``); an accumulator's strobe is its one-cycle ``done`` pulse.
- ``z`` (algorithmic delays): one delay line per source node, shifted on the
  source's strobe (so once per accepted sample, or per decimated sample, or
  per iteration of a folded stage), one element longer when a multiplexer
  reads it (the captured line C_0..C_maxz, stable for the whole iteration).
- ``pipe``: free-running registers after the tap, one per clock.
- time-shared cones: the step counter (and its activity flag) starts one
  cycle after the cone's strobe and runs steps 0..K-1 (a new strobe
  restarts it), copied one register further per pipeline register in the
  cone; a ``mux`` passes port ``select[step]``, a ``mul`` with a ``table``
  multiplies by ``table[step]``, an ``acc`` loads its operand at step 0 and
  adds it at the other steps.
- every value is truncated to its node's word length on assignment, as the
  Amaranth signals are (a no-op whenever the range analysis is right); a
  ``quant`` clamps only where the lowering emits the clamp.

Implementation: the graph is translated once (:class:`CycleModel`) into a
straight-line Python function whose locals are the registers and the node
values; its loop body is one clock cycle (combinational values in
dependency order, then the register updates, ordered so that every register
is read before it is written). Python integers are exact at any word length.
Per-node NumPy calls would cost more than they save here: the values of one
cycle are a few dozen scalars (measured here: a NumPy add of two 30-element
arrays takes about 0.27 us, a Python multiply-add of two integers 0.03 us).
Measured here with ``python -m tapwright.sfg.fold`` (CPython 3.11, two cores
shared with other jobs, so the spread): 32-tap FIRs of 12-bit data, symmetric
folded by 4: 4.8e5 to 7.7e5 cycles/s; plain folded by 4: 4.9e5 to 5.8e5;
plain folded by 8 and pipelined: 7.2e5 to 9.0e5; direct pipelined (unfolded,
every node every cycle): 1.9e5 to 3.5e5. ``tests/test_bench_fold.py``
records the first in ``extra_info``.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import networkx as nx
import numpy as np

from ..fixed.formats import round_scalar
from .graph import GraphError, eval_order, input_interval, operands, output_node
from .timing_tags import _IN, NetlistWalk, timing_of
from .transforms.pipeline import stages as _stages

__all__ = ["CycleTrace", "CycleModel", "compile_cycles", "run_cycles"]


@dataclass
class CycleTrace:
    """What the block does, cycle by cycle, for one input sequence (cycle 0: the first after reset).

    ``y``: the output samples in order (``int64``, or ``object`` beyond 63
    bits); ``out_cycles``: the cycle in which each was ``out_valid``;
    ``taken``: the cycle in which each input sample was taken (``in_valid``
    and ``in_ready``); ``in_ready`` and ``in_valid``: one bool per simulated
    cycle; ``probes``: node name -> its value in every cycle (as asked).
    """

    y: np.ndarray
    out_cycles: np.ndarray
    taken: np.ndarray
    in_ready: np.ndarray
    in_valid: np.ndarray
    cycles: int
    latency: int
    input_interval: int
    decimation: int = 1
    phase: int = 0
    probes: dict = field(default_factory=dict)

    @property
    def latencies(self) -> np.ndarray:
        """Cycles from the input sample that completes output m to output m (the contract's latency)."""
        k = np.arange(len(self.out_cycles)) * self.decimation + self.phase
        ok = k < len(self.taken)
        out = np.full(len(self.out_cycles), -1, dtype=np.int64)
        out[ok] = self.out_cycles[ok] - self.taken[k[ok]]
        return out


def _ident(s) -> str:
    return re.sub(r"[^A-Za-z0-9_]", "_", str(s))


def _width_range(bits):
    return -(1 << (bits - 1)), (1 << (bits - 1)) - 1


def _wrap(expr: str, bits: int, lo: int, hi: int) -> str:
    """``expr`` assigned to a signed ``bits``-wide signal: low bits kept (left out when it cannot matter)."""
    wl, wh = _width_range(bits)
    if wl <= lo and hi <= wh:
        return expr
    h = 1 << (bits - 1)
    return f"((({expr}) + {h}) & {(1 << bits) - 1}) - {h}"


class _Unit:
    """A group of registers updated together (one clock edge): ``lines()`` gives the update code."""

    def __init__(self, kind, regs, reads, lines, bits=0):
        self.kind = kind
        self.regs = list(regs)   # variable names it writes
        self.reads = set(reads)  # variable names its next value reads (registers or combinational)
        self.lines = lines       # function() -> list of code lines
        self.bits = bits


class _Net(NetlistWalk):
    """The lowering's netlist, mirrored: same memoisation (so the same sharing) as ``rtl.lower._Lowering``."""

    def __init__(self, g):
        self.g = g
        self.tags = timing_of(g)
        self.out = output_node(g)
        self.latency = int(_stages(g)[self.out])
        self.interval = int(input_interval(g))
        self.order = eval_order(g)
        self.val = {v: f"v{i}_{_ident(v)}"[:48] for i, v in enumerate(self.order)}
        self.width = {}             # variable -> signed width (bits) of every data signal
        self.consts: dict = {}
        self.comb_strobes: list = []  # code lines, in creation (dependency) order
        self.comb_nodes: list = []
        self.units: list[_Unit] = []
        self._reg_unit: dict = {}
        self._n = 0
        for v in self.order:
            self.width[self.val[v]] = g._node[v]["fmt"].bits
        self._walk_init()
        for v in self.order:
            self._node(v)
        self.out_valid = self.strobe(self.tags[self.out])

    # ---------------------------------------------------------------- helpers
    def _fresh(self, prefix):
        self._n += 1
        return f"{prefix}{self._n}"

    def _unit(self, kind, regs, reads, lines, bits=0):
        u = _Unit(kind, regs, reads, lines, bits)
        self.units.append(u)
        for r in regs:
            self._reg_unit[r] = u
        return u

    def _const(self, prefix, value):
        name = self._fresh(prefix)
        self.consts[name] = value
        return name

    def _wrange(self, var):
        return _width_range(self.width[var])

    # ---------------------------------------------------------------- strobes (as lower.strobe)
    def _delay_strobe(self, prev, root, d):
        s = self._fresh("sb")
        self._unit("strobe", [s], [prev], lambda s=s, p=prev: [f"{s} = {p}"], 1)
        return s

    def _root_strobe(self, root, d):
        if root == _IN:
            return "s_in"
        if root[0] == "dec":
            r, F, P = root[1], root[2], root[3]
            src = self.strobe(("s", r, d))
            ck = (r, d, F)
            if ck not in self._counter_memo:
                cnt = self._fresh("ph")
                self._unit("counter", [cnt], [src],
                           lambda c=cnt, s=src, F=F: [f"if {s}:",
                                                          f"    {c} = 0 if {c} == {F - 1} else {c} + 1"],
                           max(1, (F - 1).bit_length()))
                self._counter_memo[ck] = cnt
            cnt = self._counter_memo[ck]
            s = self._fresh("sd")
            self.comb_strobes.append(f"{s} = {src} and {cnt} == {P}")
            return s
        if root[0] == "acc":
            active, step = self.cone(root[1], d)
            K = root[1][1]
            s = self._fresh("sa")
            self._unit("strobe", [s], [active, step],
                       lambda s=s, a=active, st=step, K=K: [f"{s} = {a} and {st} == {K - 1}"], 1)
            return s
        raise GraphError(f"unknown strobe root {root}")

    def cone(self, root, d):
        """(active, step) registers of the schedule at cone delay d (as lower.cone)."""
        key = (root, d)
        if key in self._cone_memo:
            return self._cone_memo[key]
        base = self._cone_base[root]
        r, K = root
        active, step = self._fresh("act"), self._fresh("step")
        if d == base:
            src = self.strobe(("s", r, d))

            def lines(a=active, st=step, s=src, K=K):
                return [f"if {s}:",
                        f"    {a} = 1; {st} = 0",
                        f"elif {a}:",
                        f"    if {st} == {K - 1}:",
                        f"        {a} = 0; {st} = 0",
                        "    else:",
                        f"        {st} += 1"]
            self._unit("cone", [active, step], [src], lines, 1 + max(1, (K - 1).bit_length()))
        elif d > base:
            pa, ps = self.cone(root, d - 1)
            self._unit("cone", [active, step], [pa, ps],
                       lambda a=active, st=step, pa=pa, ps=ps: [f"{a}, {st} = {pa}, {ps}"],
                       1 + max(1, (K - 1).bit_length()))
        else:
            raise GraphError("cone read before its multiplexers")
        self._cone_memo[key] = (active, step)
        return active, step

    # ---------------------------------------------------------------- delay lines and taps
    def line(self, u):
        """Delay-line registers of ``u`` (element 0: the most recent sample)."""
        if u in self._line_memo:
            return self._line_memo[u]
        L = self._line_len[u]
        w = self.g.nodes[u]["fmt"].bits
        base = self._fresh("z")
        regs = [f"{base}_{k}" for k in range(L)]
        for r in regs:
            self.width[r] = w
        stb = self.strobe(self.tags[u])
        src = self.val[u]

        def lines(regs=regs, stb=stb, src=src):
            # one simultaneous assignment: element k takes element k-1, element 0 the source
            lhs = ", ".join(reversed(regs))
            rhs = ", ".join(list(reversed(regs[:-1])) + [src])
            return [f"if {stb}:", f"    {lhs} = {rhs}"]
        self._unit("line", regs, [stb, src], lines, w * L)
        self._line_memo[u] = regs
        return regs

    def _pipe_reg(self, prev, u, z, captured, pipe):
        s = self._fresh("p")
        self.width[s] = self.width[prev]
        self._unit("pipe", [s], [prev], lambda s=s, p=prev: [f"{s} = {p}"], self.width[s])
        return s

    # ---------------------------------------------------------------- nodes (as lower._node)
    def _node(self, v):
        g = self.g
        n = g._node[v]
        k = n["kind"]
        out = self.val[v]
        bits = n["fmt"].bits
        emit = self.comb_nodes.append
        if k == "input":
            emit(f"{out} = xin")
            return
        ops = operands(g, v)
        if k in ("output", "decim"):
            (u, e), = ops
            a = self.operand(v, u, e)
            emit(f"{out} = " + _wrap(a, bits, *self._wrange(a)))
            return
        if k == "mul":
            (u, e), = ops
            a = self.operand(v, u, e)
            alo, ahi = self._wrange(a)
            if n.get("table") is not None:
                table = tuple(int(c) for c in n["table"])
                _, step = self.cone(self.tags[v][1], self.tags[v][2])
                tab = self._const("TAB", table)
                prods = [alo * c for c in table] + [ahi * c for c in table]
                emit(f"{out} = " + _wrap(f"{a} * {tab}[{step}]", bits, min(prods), max(prods)))
            else:
                c = int(n["coeff"])
                if c == 0:
                    emit(f"{out} = 0")
                else:
                    emit(f"{out} = " + _wrap(f"{a} * {c}", bits, min(alo * c, ahi * c), max(alo * c, ahi * c)))
            return
        if k == "add":
            fr = n["fmt"].frac
            terms, lo, hi = [], 0, 0
            for u, e in ops:
                a = self.operand(v, u, e)
                s = e["shift"] + fr - g._node[u]["fmt"].frac
                if s < 0:
                    raise GraphError(f"adder {v}: operand {u} would need a right shift ({s})")
                alo, ahi = self._wrange(a)
                alo, ahi = alo << s, ahi << s
                if e["sign"] < 0:
                    alo, ahi = -ahi, -alo
                lo, hi = lo + alo, hi + ahi
                terms.append((f"({a} << {s})" if s else a, e["sign"]))
            expr = "".join((" + " if sg > 0 else " - ") + t for t, sg in terms)
            expr = expr[3:] if terms[0][1] > 0 else "-" + expr[3:]
            emit(f"{out} = " + _wrap(expr, bits, lo, hi))
            return
        if k == "quant":
            (u, e), = ops
            a = self.operand(v, u, e)
            self._quant(v, u, a, out)
            return
        if k == "mux":
            fr = n["fmt"].frac
            _, step = self.cone(self.tags[v][1], self.tags[v][2])
            byport = {e["port"]: (u, e) for u, e in ops}
            zero = n.get("zero_port")
            used = []
            for p in n["select"]:
                if p not in used:
                    used.append(p)
            srcs, lo, hi = {}, 0, 0
            for p in used:
                if p == zero:
                    srcs[p] = "0"
                elif p in byport:
                    u, e = byport[p]
                    a = self.operand(v, u, e)
                    s = fr - g._node[u]["fmt"].frac
                    alo, ahi = self._wrange(a)
                    lo, hi = min(lo, alo << s), max(hi, ahi << s)
                    srcs[p] = f"({a} << {s})" if s else a
                else:
                    raise GraphError(f"multiplexer {v} selects unconnected port {p}")
            if len(used) == 1:
                expr = srcs[used[0]]
            else:
                idx = tuple(used.index(p) for p in n["select"])
                sel = f"[{step}]" if idx == tuple(range(len(idx))) else f"[{self._const('SEL', idx)}[{step}]]"
                expr = "(" + ", ".join(srcs[p] for p in used) + ")" + sel
            emit(f"{out} = " + _wrap(expr, bits, lo, hi))
            return
        if k == "acc":
            (u, e), = ops
            a = self.operand(v, u, e)
            t = self.tags[u]
            active, step = self.cone(t[1], t[2] + e["pipe"])
            alo, ahi = self._wrange(a)
            wlo, whi = _width_range(bits)

            def lines(out=out, a=a, act=active, st=step, bits=bits, alo=alo, ahi=ahi):
                load = _wrap(a, bits, alo, ahi)
                add = _wrap(f"{out} + {a}", bits, wlo + alo, whi + ahi)
                return [f"if {act}:",
                        f"    {out} = {load} if {st} == 0 else {add}"]
            self._unit("acc", [out], [a, active, step], lines, bits)
            return
        raise GraphError(f"cannot run node {v} of kind {k}")

    def _quant(self, v, u, a, out):
        g = self.g
        n = g._node[v]
        f = n["fmt"]
        shift = g._node[u]["fmt"].frac - f.frac
        rnd = n["rounding"]
        emit = self.comb_nodes.append
        alo, ahi = self._wrange(a)
        if shift > 0:
            half = 1 << (shift - 1)
            if rnd == "truncate":
                expr = f"{a} >> {shift}"
            elif rnd == "half_up":
                expr = f"({a} + {half}) >> {shift}"
            elif rnd == "half_even":
                q = self._fresh("q")
                lw = self._fresh("lo")
                emit(f"{q} = {a} >> {shift}; {lw} = {a} & {(1 << shift) - 1}")
                expr = f"{q} + (1 if ({lw} > {half} or ({lw} == {half} and {q} & 1)) else 0)"
            else:
                raise GraphError(f"unknown rounding {rnd!r}")
            rlo, rhi = round_scalar(alo, shift, rnd), round_scalar(ahi, shift, rnd)
        elif shift < 0:
            expr = f"{a} << {-shift}"
            rlo, rhi = alo << -shift, ahi << -shift
        else:
            expr = a
            rlo, rhi = alo, ahi
        if n["overflow"] == "saturate":
            lo_u, hi_u = g._node[u]["range"]
            rl, rh = round_scalar(lo_u, shift, rnd), round_scalar(hi_u, shift, rnd)
            if rl < f.lo or rh > f.hi:
                r = self._fresh("r")
                emit(f"{r} = {expr}")
                expr = f"{f.hi} if {r} > {f.hi} else ({f.lo} if {r} < {f.lo} else {r})"
                rlo, rhi = f.lo, f.hi
        elif n["overflow"] != "wrap":
            raise GraphError(f"unknown overflow {n['overflow']!r}")
        emit(f"{out} = " + _wrap(expr, f.bits, min(rlo, rhi), max(rlo, rhi)))

    # ---------------------------------------------------------------- register update order
    def update_lines(self) -> list:
        """Code of one clock edge: every register group after all groups that read its registers.

        A group reads only the current values of others (a register, its own
        previous value within one statement), so updating the readers first
        is the simultaneous update of a clock edge. The lowering never makes
        two groups read each other (a time-shared cone value carries no
        delay line), which would need temporaries.
        """
        dep = nx.DiGraph()
        idx = {id(u): i for i, u in enumerate(self.units)}
        dep.add_nodes_from(range(len(self.units)))
        for i, u in enumerate(self.units):
            for r in u.reads:
                w = self._reg_unit.get(r)
                if w is not None and w is not u:
                    dep.add_edge(i, idx[id(w)])  # u reads w: u is updated first
        try:
            order = list(nx.lexicographical_topological_sort(dep))
        except nx.NetworkXUnfeasible:
            cyc = nx.find_cycle(dep)
            raise GraphError(f"registers that read each other: {[self.units[a].regs for a, _ in cyc]}") from None
        return [line for i in order for line in self.units[i].lines()]

    def registers(self) -> list:
        """(kind, register names, bits) of every register group."""
        return [(u.kind, tuple(u.regs), u.bits) for u in self.units]


_TEMPLATE = '''\
def _cycles(X, PAT, STOP_AFTER, MAX_CYCLES):
{consts}
    n = len(X)
    npat = len(PAT)
    xin = 0
{init}
    i = 0
    c = 0
    done_at = -1
    TAKEN = []
    OUT_C = []
    OUT_V = []
    READY = []
    VALID = []
{probe_init}
    while True:
        want = i < n and (PAT[c] if c < npat else True)
        if want:
            xin = X[i]
        rdy = {ready}
        s_in = want and rdy
{comb}
        READY.append(rdy)
        VALID.append(want)
{probe_rec}
        if {out_valid}:
            OUT_C.append(c)
            OUT_V.append({out_val})
        if s_in:
            TAKEN.append(c)
            i += 1
        if done_at < 0 and i >= n:
            done_at = c
        if (done_at >= 0 and c >= done_at + STOP_AFTER) or c >= MAX_CYCLES:
            break
{update}
        c += 1
    return TAKEN, OUT_C, OUT_V, READY, VALID, c + 1, {{{probe_ret}}}
'''


class CycleModel:
    """A graph translated once into a cycle-by-cycle simulation (see the module docstring).

    ``latency`` and ``input_interval`` are the values the lowering declares;
    :meth:`registers` lists the register groups (kind, names, bits) the model
    clocks, which are the ones :func:`tapwright.rtl.lower.lower` instantiates.
    """

    def __init__(self, g):
        self.g = g
        self._net = net = _Net(g)
        self.latency = net.latency
        self.input_interval = net.interval
        self.decimation = int(g.graph.get("decimation", 1))
        self.phase = int(g.graph.get("phase", 0))
        self.in_fmt = g.graph["in_fmt"]
        self.out_bits = g._node[net.out]["fmt"].bits
        self._fns: dict = {}
        self.source = self._source(())

    def registers(self) -> list:
        """(kind, register names, bits) of every register group, the ``in_ready`` counter included."""
        I = self.input_interval
        ready = [("ready", ("wait",), max(1, (I - 1).bit_length()))] if I > 1 else []
        return ready + self._net.registers()

    def line_lengths(self) -> dict:
        """Node -> length of its delay line (the sample registers behind its ``z`` and capture taps)."""
        return {u: len(r) for u, r in self._net._line_memo.items()}

    def _source(self, probe) -> str:
        net = self._net
        ind = " " * 8
        regs = [r for u in net.units for r in u.regs]
        if net.interval > 1:
            I = net.interval
            ready = "wait == 0"
            init = ["wait = 0"]
            wait_lines = ["if s_in:", f"    wait = {I - 1}", "elif wait:", "    wait -= 1"]
        else:
            ready, init, wait_lines = "True", [], []
        init += [f"{r} = 0" for r in regs]
        # acc values are registers, initialised above; every other node value is combinational
        pvars = [net.val[p] for p in probe]
        return _TEMPLATE.format(
            consts="\n".join(f"    {k} = _C[{k!r}]" for k in net.consts) or "    pass",
            init="\n".join("    " + s for s in init) or "    pass",
            probe_init="\n".join(f"    PR{j} = []" for j in range(len(probe))) or "    pass",
            ready=ready,
            comb="\n".join(ind + s for s in net.comb_strobes + net.comb_nodes) or ind + "pass",
            probe_rec="\n".join(f"{ind}PR{j}.append({v})" for j, v in enumerate(pvars)) or ind + "pass",
            out_valid=net.out_valid,
            out_val=net.val[net.out],
            update="\n".join(ind + s for s in wait_lines + net.update_lines()) or ind + "pass",
            probe_ret=", ".join(f"{p!r}: PR{j}" for j, p in enumerate(probe)),
        )

    def _fn(self, probe):
        probe = tuple(probe)
        fn = self._fns.get(probe)
        if fn is None:
            for p in probe:
                if p not in self._net.val:
                    raise KeyError(f"no node {p!r} to probe")
            src = self.source if not probe else self._source(probe)
            ns = {"_C": dict(self._net.consts)}
            exec(compile(src, f"<tapwright.sfg.fold {self.g.graph.get('name', 'filter')}>", "exec"), ns)
            fn = self._fns[probe] = ns["_cycles"]
        return fn

    def run(self, x, valid=None, *, tail: int = 2, max_cycles: int | None = None, probe=()) -> CycleTrace:
        """Simulate from reset: offer ``x`` in order, sample i held until taken.

        ``valid``: ``in_valid`` per cycle (1: offer the next sample in that
        cycle; past its end: 1), as the testbench drives it. The run stops
        ``latency + tail`` cycles after the cycle that took the last sample
        (or after ``max_cycles``). ``probe``: node names whose value is
        recorded every cycle.
        """
        xs = [int(a) for a in np.asarray(x).ravel()]
        f = self.in_fmt
        if xs and (min(xs) < f.lo or max(xs) > f.hi):
            raise ValueError(f"input samples exceed {f.bits} signed bits")
        pat = [] if valid is None else [bool(int(a)) for a in np.asarray(valid).ravel()]
        if max_cycles is None:
            max_cycles = len(pat) + (len(xs) + 1) * max(1, self.input_interval) + self.latency + tail + 8
        taken, oc, ov, rdy, vld, ncyc, probes = self._fn(probe)(xs, pat, self.latency + tail, max_cycles)
        y = np.array(ov, dtype=np.int64) if self.out_bits <= 63 else np.array(ov, dtype=object)
        return CycleTrace(
            y=y, out_cycles=np.array(oc, dtype=np.int64), taken=np.array(taken, dtype=np.int64),
            in_ready=np.array(rdy, dtype=bool), in_valid=np.array(vld, dtype=bool), cycles=ncyc,
            latency=self.latency, input_interval=self.input_interval, decimation=self.decimation,
            phase=self.phase, probes={k: np.array(v, dtype=object) for k, v in probes.items()})


def compile_cycles(g) -> CycleModel:
    """The cycle model of a propagated graph (reuse it to run several inputs)."""
    return CycleModel(g)


def run_cycles(g, x, valid=None, **kw) -> CycleTrace:
    """Cycle-by-cycle run of graph ``g`` on input ``x`` (see :meth:`CycleModel.run`)."""
    return CycleModel(g).run(x, valid, **kw)


def _bench(n_samples: int = 20000):  # pragma: no cover - manual measurement
    """Cycles per second on 32-tap FIRs (``python -m tapwright.sfg.fold``)."""
    import time

    from ..fixed.formats import Fmt
    from ..fixed.stages import FirStage, FixedDesign
    from .recipe import Recipe, realize

    rng = np.random.default_rng(0)
    h = rng.integers(-2000, 2000, size=16)
    sym = tuple(int(v) for v in np.concatenate([h, h[::-1]]))
    plain = tuple(int(v) for v in rng.integers(-2000, 2000, size=32))
    x = rng.integers(-2048, 2048, size=n_samples)
    cases = (("32-tap symmetric, folded by 4", sym, Recipe("timeshared", ("symmetric",), fold=4)),
             ("32-tap plain, folded by 4", plain, Recipe("timeshared", (), fold=4)),
             ("32-tap plain, folded by 8, pipelined", plain, Recipe("timeshared", (), fold=8, period=1)),
             ("32-tap direct, pipelined (unfolded)", plain, Recipe("direct", period=1)))
    for label, c, r in cases:
        d = FixedDesign((FirStage(c, 12, Fmt(16, 11)),), Fmt(12, 11), "half_even", "saturate")
        m = compile_cycles(realize(d, r))
        m.run(x[:100])
        t0 = time.perf_counter()
        tr = m.run(x)
        dt = time.perf_counter() - t0
        print(f"{label}: {tr.cycles} cycles in {dt:.3f} s = {tr.cycles / dt:,.0f} cycles/s")


if __name__ == "__main__":  # pragma: no cover
    _bench()
