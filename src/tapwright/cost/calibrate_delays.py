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
    """Registered ``s = a + b`` of ``width`` bits (inputs and sum registered).

    The register-to-register path through the adder is what the delay fit measures.
    """

    def __init__(self, width=16, *, registered=True):
        self.width, self.registered = width, registered
        super().__init__({"a": In(signed(width)), "b": In(signed(width)),
                          "s": Out(signed(width + 1))})

    def elaborate(self, platform):
        m = Module()
        a, b = self.a, self.b
        if self.registered:
            ra = Signal.like(a, name="a_r", reset_less=True)
            rb = Signal.like(b, name="b_r", reset_less=True)
            rs = Signal(self.s.shape(), name="s_r", reset_less=True)
            m.d.sync += [ra.eq(a), rb.eq(b), rs.eq(ra + rb)]
            m.d.comb += self.s.eq(rs)
        else:
            m.d.comb += self.s.eq(a + b)
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


def _fmax_ns(design, device: str, wd: Path, tag: str, seeds=(1, 2)) -> float:
    """Best-of-seeds critical path (ns) for one probe after place and route."""
    from ..synth.pnr import place_and_route
    from ..synth.yosys import synthesize

    d = wd / tag
    syn = synthesize(to_verilog(design), "top", device, workdir=d, netlist_out="net.json")
    best = None
    for seed in seeds:
        r = place_and_route(syn["netlist"], device, workdir=d, clock_mhz=500.0, seed=seed)
        if r.get("fmax_mhz"):
            ns = 1000.0 / r["fmax_mhz"]
            best = ns if best is None else min(best, ns)
    if best is None:
        raise RuntimeError(f"no Fmax for probe {tag} on {device}")
    return best


def calibrate(device: str, workdir=None, widths=(8, 16, 24, 32, 48), verbose=True) -> dict:
    """Measure the delay figures for ``device`` ("ecp5" or "ice40") with nextpnr."""
    from .devices import get_profile

    prof = get_profile(device)
    wd = Path(workdir or tempfile.mkdtemp(prefix=f"cal_{device}_"))
    log = (lambda *a: print(*a, file=sys.stderr)) if verbose else (lambda *a: None)
    add_ns = {}
    for w in widths:
        add_ns[w] = _fmax_ns(AdderProbe(w), device, wd, f"add{w}")
        log(f"{device} add{w}: {add_ns[w]:.3f} ns")
    a, b = fit_line(list(add_ns), list(add_ns.values()))
    mb = prof.mult.a_max if prof.mult else 18
    nb = prof.mult.b_max if prof.mult else 18
    mul_reg = _fmax_ns(MulProbe(mb, nb, in_reg=1, out_reg=1), device, wd, "mul_reg")
    log(f"{device} mul{mb}x{nb} reg->reg: {mul_reg:.3f} ns")
    acc = mb + nb + 4
    mul_add = _fmax_ns(MulAddProbe(mb, nb, acc), device, wd, "mul_add")
    log(f"{device} mul{mb}x{nb}+add{acc}: {mul_add:.3f} ns")
    return {
        "device": device,
        "adder_ns": {str(k): round(v, 3) for k, v in add_ns.items()},
        "adder_fixed_ns": round(a, 3),
        "carry_ns_per_bit": round(b, 4),
        "mult_reg_ns": round(mul_reg, 3),
        "mult_bits": [mb, nb],
        "mult_add_ns": round(mul_add, 3),
        "mult_add_acc_bits": acc,
        "method": "nextpnr best of seeds 1,2; registered probes from calibrate_delays.py",
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--device", action="append", choices=["ecp5", "ice40"])
    ap.add_argument("--out", help="write the table as JSON here")
    ap.add_argument("--workdir")
    args = ap.parse_args(argv)
    table = {}
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
