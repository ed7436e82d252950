"""Timing tags of a signal-flow graph: when each node's value is valid, in clock cycles.

Pure graph analysis shared by the RTL lowering (:mod:`tapwright.rtl.lower`, which
builds one strobe per tag) and the cycle-level interpreter (:mod:`tapwright.sfg.fold`).

Tags: ``("s", root, d)`` a sample strobe = root's strobe delayed d cycles;
``("c", root, d)`` a time-shared cone whose steps start 1 cycle after root's
strobe + d.
"""
from __future__ import annotations

from .graph import GraphError, eval_order, operands

_IN = ("in",)


def _mux_steps(g, v) -> int:
    n = g._node[v]
    return int(n.get("steps", len(n["select"])))


def _canon(t):
    """A tag with accumulator roots unfolded: the done pulse of a cone started by
    strobe (r, d) with K steps is that strobe K+1 cycles later, so
    ("s", ("acc", (r, K)), d) is the same pulse as ("s", r, d + K + 1)."""
    kind, root, d = t
    if kind == "s" and isinstance(root, tuple) and root and root[0] == "acc":
        r, K = root[1]
        return _canon(("s", r, d + K + 1))
    if kind == "s" and isinstance(root, tuple) and root and root[0] == "dec":
        # the decimator counts the pulses of strobe (root[1], d): unfold that one, delay included
        _, r, dd = _canon(("s", root[1], d))
        return ("s", ("dec", r, root[2], root[3]), dd)
    return t


def timing_of(g) -> dict:
    """Timing tag of every node (see the module docstring); raises GraphError when inconsistent."""
    tag: dict = {}
    order = eval_order(g)
    changed = True
    while changed:
        changed = False
        for v in order:
            if v in tag:
                continue
            n = g._node[v]
            k = n["kind"]
            if k == "input":
                tag[v] = ("s", _IN, 0)
                changed = True
                continue
            known = [(u, e) for u, e in operands(g, v) if u in tag]
            if not known:
                continue
            u, e = known[0]
            t = tag[u]
            t = (t[0], t[1], t[2] + e["pipe"])
            if k == "decim":
                if t[0] != "s":
                    raise GraphError(f"decimator {v} inside a time-shared cone")
                t = ("s", ("dec", t[1], int(n["factor"]), int(n["phase"])), t[2])
            elif k == "mux":
                if t[0] != "s":
                    raise GraphError(f"multiplexer {v} fed by a time-shared cone")
                K = _mux_steps(g, v)
                if K < 2:
                    raise GraphError(f"multiplexer {v} in a graph without a fold factor")
                t = ("c", (t[1], K), t[2])
            elif k == "acc":
                if t[0] != "c":
                    raise GraphError(f"accumulator {v} not fed by a time-shared cone")
                if int(n["steps"]) != t[1][1]:
                    raise GraphError(f"accumulator {v} has {n['steps']} steps, its multiplexers {t[1][1]}")
                t = ("s", ("acc", t[1]), t[2])
            tag[v] = t
            changed = True
    missing = [v for v in g.nodes if v not in tag]
    if missing:
        raise GraphError(f"nodes not reached from the input: {sorted(map(str, missing))[:5]}")
    # consistency: every operand agrees
    for v in order:
        k = g._node[v]["kind"]
        if k == "input":
            continue
        seen = set()
        for u, e in operands(g, v):
            t = tag[u]
            seen.add(_canon((t[0], t[1], t[2] + e["pipe"])))
            if e["z"] and t[0] != "s":
                raise GraphError(f"edge {u}->{v}: a delay on a time-shared cone value")
        if len(seen) != 1:
            raise GraphError(f"node {v}: operands arrive at different times or rates {sorted(map(str, seen))}")
        if k not in ("mux", "decim", "acc"):
            (t,) = seen
            if _canon(tag[v]) != t:
                raise GraphError(f"node {v}: inconsistent timing")
        if k != "mux" and tag[v][0] == "s" and any(tag[u][0] == "c" for u, _ in operands(g, v)) and k != "acc":
            raise GraphError(f"node {v}: sample logic fed by a time-shared cone without an accumulator")
        if k == "mux":
            for u, e in operands(g, v):
                if tag[u][0] != "s":
                    raise GraphError(f"multiplexer {v} reads a cone value")
    return tag


class NetlistWalk:
    """The decisions a clocked implementation of a graph takes, shared by every back end that
    builds one (the RTL lowering and the cycle-level interpreter), so both make the same
    registers with the same sharing.

    It plans the delay lines (``_line_len``: words per source node; ``_cone_base``: the
    first cycle of every time-shared schedule) and walks strobes and operand taps with
    memoisation: a strobe delayed by one more cycle is one more register after the
    previous strobe; a tap ``pipe`` cycles late is one more register after the tap one
    cycle earlier. A subclass says how those things are made:
    ``_root_strobe(root, d)``, ``_delay_strobe(prev, root, d)``, ``line(u)`` and
    ``_pipe_reg(prev, u, z, captured, pipe)``; it sets ``g``, ``tags`` and ``val``.
    """

    def _walk_init(self):
        self._strobe_memo: dict = {}
        self._cone_memo: dict = {}
        self._counter_memo: dict = {}
        self._line_memo: dict = {}
        self._pipe_memo: dict = {}
        g = self.g
        self._line_len: dict = {}
        self._cone_base: dict = {}
        for v, n in g.nodes(data=True):
            t = self.tags[v]
            if n["kind"] == "mux":
                self._cone_base[t[1]] = min(self._cone_base.get(t[1], t[2]), t[2])
        for u, v, e in g.edges(data=True):
            need = e["z"] + 1 if g._node[v]["kind"] == "mux" else e["z"]
            if need:
                self._line_len[u] = max(self._line_len.get(u, 0), need)

    def strobe(self, tag):
        """The 1-bit strobe of an ("s", root, d) tag.

        Roots: the input strobe; ("dec", r, F, P): strobe (r, d) where the
        modulo-F count of its pulses is P; ("acc", r): the done pulse of the
        cone started by root r, d cycles of cone delay.
        """
        kind, root, d = tag
        if kind != "s":
            raise GraphError(f"strobe of a cone tag {tag}")
        key = (root, d)
        if key in self._strobe_memo:
            return self._strobe_memo[key]
        lo = self._cone_base[root[1]] if root[0] == "acc" else 0
        if root[0] == "dec" or d == lo:
            s = self._root_strobe(root, d)
        elif d > lo:
            s = self._delay_strobe(self.strobe(("s", root, d - 1)), root, d)
        else:
            raise GraphError(f"strobe {root} read {d} cycles after its source, before it exists")
        self._strobe_memo[key] = s
        return s

    def tap(self, u, z, captured, pipe):
        """``u`` delayed by ``z`` samples (read after the strobe's edge when ``captured``)
        and ``pipe`` clock cycles."""
        key = (u, z, captured, pipe)
        if key in self._pipe_memo:
            return self._pipe_memo[key]
        if pipe == 0:
            if captured:
                s = self.line(u)[z]
            elif z == 0:
                s = self.val[u]
            else:
                s = self.line(u)[z - 1]
        else:
            s = self._pipe_reg(self.tap(u, z, captured, pipe - 1), u, z, captured, pipe)
        self._pipe_memo[key] = s
        return s

    def operand(self, v, u, e):
        cap = self.g.nodes[v]["kind"] == "mux"
        return self.tap(u, e["z"], cap, e["pipe"])
