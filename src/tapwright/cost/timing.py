"""Node delays (ns) per device, for critical paths, pipelining and the reachable clock.

The figures come from the device profile's :class:`~tapwright.cost.devices.Delays`
table (calibrated with nextpnr on probes for ECP5 and iCE40; datasheet-based
and marked unverified for xc7). ``generic`` has no device: it uses nominal
unit delays (one per adder, two per multiplier) and reports no clock.

The estimate of the reachable clock is 1 / (longest register-to-register path),
an estimate for sizing before layout, not a timing sign-off.
"""
from __future__ import annotations

import math
import weakref
from functools import lru_cache

from ..sfg.metrics import is_free_coeff, product_coeff, product_coeff_bits
from ..sfg.transforms.pipeline import split_levels, unit_delays
from .devices import get_profile, mult_blocks


def _mul_free(n) -> bool:
    return n.get("table") is None and is_free_coeff(n["coeff"])


def _wire_add(g, v) -> bool:
    """An add node of one operand, not negated: a wire."""
    return g.in_degree(v) <= 1 and all(e["sign"] == 1 for _, _, e in g.in_edges(v, data=True))


def _quant_work(g, v) -> tuple:
    """``(rounds, saturates, compare_bits)`` of a quant node: a rounding adder, a clamp to
    the output range (comparators on the rounded word, then the select)."""
    n = g._node[v]
    ops = g._pred[v]
    u = next(iter(ops)) if ops else None
    shift = (g._node[u]["fmt"].frac - n["fmt"].frac) if u is not None else 0
    wide = u is not None and g._node[u]["fmt"].bits - shift > n["fmt"].bits
    rounds = shift > 0 and n["rounding"] != "truncate"
    saturates = wide and n["overflow"] == "saturate"
    cmp_bits = g._node[u]["fmt"].bits - max(shift, 0) + 1 if u is not None else 0
    return rounds, saturates, cmp_bits


@lru_cache(maxsize=None)
def delay_function(device: str):
    """A ``delays(g, v) -> ns`` function for ``device`` (unit delays for generic)."""
    prof = get_profile(device)
    d = prof.delays
    if d is None:
        return unit_delays

    def adder(w):
        return d.adder_fixed_ns + d.carry_ns_per_bit * w

    def lut_levels(inputs):
        if inputs <= 1:
            return 0
        k = max(2, prof.lut_inputs)
        # a LUTk multiplexes k-2 data inputs at best (LUT6: 4:1); count levels; a family
        # with wide-mux cells in the slice (ECP5 PFUMX/L6MUX21) does more per level
        per = max(2, k - 2, getattr(prof, "mux_inputs_per_level", 0))
        return max(1, math.ceil(math.log(inputs, per)))

    def fanout(g, v):
        # a net driving many loads is slower than the probes' single-load nets (where the
        # loads are spread out: the profile names the kinds of node that pay it)
        if not d.fanout_ns_per_doubling:
            return 0.0
        if d.fanout_load_kinds is not None and g._node[v]["kind"] not in d.fanout_load_kinds:
            return 0.0
        worst = max((len(g._succ[u]) for u in g._pred[v]), default=1)
        return d.fanout_ns_per_doubling * math.log2(worst) if worst > 1 else 0.0

    spread_cache = weakref.WeakKeyDictionary()

    def blocks_in(g) -> int:
        # hard multiplier blocks of the whole graph (cached per graph object and node count:
        # the transforms build new graphs, pipelining only adds registers to edges)
        key = len(g._node)
        hit = spread_cache.get(g)
        if hit is not None and hit[0] == key:
            return hit[1]
        total = 0
        for v, n in g._node.items():
            if n["kind"] != "mul" or _mul_free(n) or not g._pred[v]:
                continue
            u = next(iter(g._pred[v]))
            total += mult_blocks(prof, g._node[u]["fmt"].bits, product_coeff_bits(n))
        spread_cache[g] = (key, total)
        return total

    def spread(g, v):
        if not d.dsp_spread_ns or g._node[v]["kind"] != "mul" or _mul_free(g._node[v]):
            return 0.0
        return d.dsp_spread_ns * max(0.0, math.sqrt(blocks_in(g)) - 1.0)

    def f(g, v):
        t = f0(g, v)
        return t + max(fanout(g, v), spread(g, v)) if t > 0 else t

    def f0(g, v):
        n = g._node[v]
        k = n["kind"]
        if k == "mul":
            if _mul_free(n):
                return 0.0
            # a hard product: its register-to-register time less the path overhead; a product
            # tiled over several blocks adds the fabric adders that sum its partial products
            t = max(0.5, d.mult_reg_ns - d.adder_fixed_ns)
            if prof.mult is not None and getattr(prof, "tile_sums_in_fabric", True) \
                    and not (prof.regs is not None and prof.regs.cascade):
                from ..sfg.graph import operands
                from .devices import product_soft_slices
                (u, _), = operands(g, v)
                a = g._node[u]["fmt"].bits
                b = product_coeff_bits(n)
                blocks = mult_blocks(prof, a, b)
                if blocks > 1:
                    t += math.ceil(math.log2(blocks)) * (adder(a + b) - d.adder_fixed_ns + d.route_ns)
                elif blocks == 1 and prof.soft_slice_cells and product_soft_slices(
                        prof, a, b, product_coeff(n)):
                    # a one-bit slice left in LUTs: the block's output is summed with it in
                    # the fabric (profile soft_slice_cells)
                    t += adder(a + b - prof.mult.a_partial + 2) - d.adder_fixed_ns + d.route_ns
            return t
        if k == "add":
            if _wire_add(g, v):
                return 0.0
            return adder(n["fmt"].bits) - d.adder_fixed_ns + d.route_ns
        if k == "acc":
            return adder(n["fmt"].bits) - d.adder_fixed_ns + d.route_ns
        if k == "quant":
            rounds, saturates, cmp_bits = _quant_work(g, v)
            t = 0.0
            if rounds:
                t += adder(n["fmt"].bits) - d.adder_fixed_ns + d.route_ns   # rounding adder
            if saturates:
                # rtl/lower.py clamps with Mux(r > hi, hi, Mux(r < lo, lo, r)): comparators on
                # the rounded word (carry chains), then the select. Placed and routed ECP5
                # netlists time a CCU2C chain and a LUT4 here (calibration run of 2026-12-03:
                # sensor_lowpass shift-add, the output path is critical; 27 ECP5 designs, 25
                # within 25 % with the comparator, 24 with the select alone)
                t += d.carry_ns_per_bit * cmp_bits + d.route_ns                # r > hi, r < lo
                t += d.lut_ns + d.route_ns                                   # select the limit
            # truncation and wrapping drop bits: wiring (CIC pruning, integrator registers)
            return t
        if k == "mux":
            # the lowering selects with a case on the step counter: each input's select is
            # decoded (step == s) in front of the multiplexer tree, one LUT level per k
            # counter bits (Yosys builds $pmux from $eq cells; the synthesized time-shared
            # designs hold these decoders, and ECP5 place and route of the calibration run
            # times them on the critical path)
            steps = int(n.get("steps", len(n.get("select") or ())))
            step_bits = max(0, steps - 1).bit_length()
            k_in = max(2, prof.lut_inputs)
            decode = math.ceil(math.log(step_bits, k_in)) if step_bits > 1 else 0
            return (lut_levels(int(n.get("ports", 2))) + decode) * (d.lut_ns + d.route_ns)
        return 0.0

    def mux_segments(g, v, regs: int) -> list:
        """Delays of the ``regs + 1`` segments of multiplexer ``v`` when ``regs`` pipeline
        registers sit inside it (:func:`split_levels`: each segment a case on its share of
        the step counter's bits, the lowering's ``mux_regs``)."""
        n = g._node[v]
        k_in = max(2, prof.lut_inputs)
        return [(lut_levels(ports) + (math.ceil(math.log(b, k_in)) if b > 1 else 0))
                * (d.lut_ns + d.route_ns)
                for b, ports, _ in split_levels(int(n.get("steps", len(n.get("select") or ()))), regs)]

    f.fixed_ns = d.adder_fixed_ns  # clock-to-out + setup + routing overhead per path
    f.device = device
    f.mux_segments = mux_segments
    return f



@lru_cache(maxsize=None)
def map_delay_function(device: str):
    """A ``delays(g, v) -> ns`` function in the view of logic synthesis (the profile's
    :class:`~tapwright.cost.devices.MapDelays`: cell delays from the Yosys cell library and
    a wire delay per connection, no placement), or None where the profile has none. Hard
    products are path ends and take 0 here; the caller cuts the paths there."""
    prof = get_profile(device)
    md = prof.map_delays
    if md is None:
        return None

    def joined_sum(g, v) -> bool:
        # an operand that is a sum computed without a register in between: the carry chains
        # run side by side, so this one adds its entry and exit, not a second ripple
        for u, kd in g._pred[v].items():
            n = g._node[u]
            if n["kind"] == "quant" or (n["kind"] == "add" and len(g._pred[u]) >= 2):
                if all(e["z"] == 0 and e["pipe"] == 0 for e in kd.values()):
                    return True
        return False

    def chain(g, v, w):
        return md.adder_ns(w, chained=joined_sum(g, v))

    def f(g, v):
        n = g._node[v]
        k = n["kind"]
        if k == "mul":
            if _mul_free(n) or not g._pred[v]:
                return 0.0
            u = next(iter(g._pred[v]))
            a, b = g._node[u]["fmt"].bits, product_coeff_bits(n)
            # a fabric product is a tree of shifted partial products: about one chain
            return 0.0 if mult_blocks(prof, a, b) else chain(g, v, a + b)
        if k == "add":
            return 0.0 if _wire_add(g, v) else chain(g, v, n["fmt"].bits)
        if k == "acc":
            return chain(g, v, n["fmt"].bits)
        if k == "quant":
            rounds, saturates, _ = _quant_work(g, v)
            t = 0.0
            if rounds:
                t += chain(g, v, n["fmt"].bits)
            if saturates:
                t += md.adder_ns(0, chained=True) + md.wire_ns + md.lut_ns   # comparators, then the select
            return t
        if k == "mux":
            ports = int(n.get("ports", 2))
            return max(1, math.ceil(math.log(ports, 4))) * (md.lut_ns + md.wire_ns)
        return 0.0

    f.device = device
    return f


def path_overhead(device: str) -> float:
    prof = get_profile(device)
    return prof.delays.adder_fixed_ns if prof.delays else 0.0


def fmax_mhz(critical_ns: float, device: str) -> float | None:
    """Reachable clock estimate (MHz) from the longest combinational path in ns."""
    prof = get_profile(device)
    if prof.delays is None:
        return None
    total = critical_ns + prof.delays.adder_fixed_ns
    if prof.mult is not None:
        total = max(total, prof.delays.mult_reg_ns)
    return 1000.0 / total if total > 0 else None


def target_period(device: str, clock_hz: float) -> float:
    """Combinational budget (ns) for pipelining to ``clock_hz`` on ``device``."""
    prof = get_profile(device)
    if prof.delays is None:
        return 4.0  # generic: four unit delays per stage
    return max(1e-3, 1e9 / clock_hz - prof.delays.adder_fixed_ns)
