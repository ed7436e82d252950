"""Bit-true reference: the arithmetic of design.json's ``stages``, in NumPy.

Written directly from the integer coefficients, independent of the signal-flow
graph: the interpreter, the Amaranth simulation and the Verilog simulation must
all agree with it bit for bit.

- ``fir``: exact integer convolution (``int64`` when the L1 bound proves the
  accumulator fits in 62 bits, exact Python integers otherwise), one rounding
  to the stage output, then overflow; decimation keeps ``phase + m*D``.
- ``cic``: integrators and combs on unbounded integers with Hogenauer's
  truncation (floor) at each stage's input; the registers of the hardware are
  wide enough that its wrap-around never reaches the output, so unbounded
  integers give the same result.
- ``sos``: per section, the exact sum of feed-forward and feedback products,
  one rounding to the section's state format and saturation (see
  :class:`~tapwright.fixed.stages.Section`); the last state is converted to the
  stage output with the design's rounding and overflow.
"""
from __future__ import annotations

import numpy as np

from .formats import INT64_SAFE_BITS, Fmt, overflow, requantize, shift_round
from .stages import CicStage, FirStage, FixedDesign, SosStage


def fir_acc_bits(coeffs, in_fmt: Fmt) -> int:
    """Accumulator width from the L1 bound: in_bits + ceil(log2(sum |c|))."""
    l1 = sum(abs(int(c)) for c in coeffs)
    if l1 == 0:
        return in_fmt.bits
    return in_fmt.bits + max(0, (l1 - 1).bit_length())


def _conv_exact(x, c):
    """Full-length-of-x causal convolution with Python integers (exact, slow)."""
    n = len(x)
    out = np.zeros(n, dtype=object)
    xo = np.asarray(x, dtype=object)
    for k, ck in enumerate(c):
        ck = int(ck)
        if ck == 0 or k >= n:
            continue
        out[k:] = out[k:] + xo[: n - k] * ck
    return out


def fir_stage(stage: FirStage, x, in_fmt: Fmt, rounding: str, overflow_mode: str):
    """Run one FIR stage on integer input ``x`` (format ``in_fmt``)."""
    x = np.asarray(x)
    n = len(x)
    c = np.asarray([int(v) for v in stage.coeffs], dtype=object)
    keep = np.arange(stage.phase, n, stage.decimation)
    acc_bits = fir_acc_bits(stage.coeffs, in_fmt)
    if acc_bits <= 52 and x.dtype != object:
        # every product and partial sum is an integer below 2**52: float64
        # arithmetic is exact here, and NumPy's float convolution is the fast path
        full = np.convolve(x.astype(np.float64), c.astype(np.float64))[:n]
        acc = full[keep].astype(np.int64) if stage.decimation > 1 else full.astype(np.int64)
    elif acc_bits <= INT64_SAFE_BITS and x.dtype != object:
        xi = x.astype(np.int64)
        ci = c.astype(np.int64)
        if stage.decimation == 1:
            acc = np.convolve(xi, ci)[:n]
        else:
            # only the kept outputs: acc[i] = sum_k c[k] x[i-k]
            acc = np.zeros(len(keep), dtype=np.int64)
            for k, ck in enumerate(ci):
                if ck == 0:
                    continue
                idx = keep - k
                ok = idx >= 0
                acc[ok] += ck * xi[idx[ok]]
    else:
        acc = _conv_exact(x, c)[keep] if stage.decimation > 1 else _conv_exact(x, c)
    y = requantize(acc, in_fmt.frac + stage.coeff_frac, stage.out, rounding, overflow_mode)
    return y


def cic_stage(stage: CicStage, x, in_fmt: Fmt, rounding: str, overflow_mode: str):
    """Run one CIC decimator with pruning ``drop`` on integer input ``x``."""
    v = np.asarray([int(a) for a in np.asarray(x)], dtype=object)
    N, R, M = stage.order, stage.decimation, stage.diff_delay
    drop = stage.drop
    prev = 0
    for j in range(N):  # integrators at the input rate
        v = shift_round(v, drop[j] - prev, "truncate")
        prev = drop[j]
        v = np.cumsum(v, dtype=object) if len(v) else v
    v = v[stage.phase::R]
    for j in range(N, 2 * N):  # combs at the output rate
        v = shift_round(v, drop[j] - prev, "truncate")
        prev = drop[j]
        d = np.concatenate([np.zeros(M, dtype=object), v])[: len(v)]
        v = v - d
    y = requantize(v, in_fmt.frac - prev, stage.out, rounding, overflow_mode)
    return y


def sos_stage(stage: SosStage, x, in_fmt: Fmt, rounding: str, overflow_mode: str):
    """Run a cascade of second-order sections sample by sample (Python integers)."""
    cur = [int(a) for a in np.asarray(x)]
    f_in = in_fmt.frac
    for s in stage.sections:
        cf = s.coeff_frac
        fy = s.state.frac
        F = max(f_in, fy) + cf
        sx, sy = F - f_in - cf, F - fy - cf
        b0, b1, b2 = (int(v) for v in s.b)
        _, a1, a2 = (int(v) for v in s.a)
        shift = F - fy
        lo, hi = s.state.lo, s.state.hi
        half = (1 << (shift - 1)) if shift > 0 else 0
        x1 = x2 = y1 = y2 = 0
        out = []
        for xn in cur:
            acc = ((b0 * xn + b1 * x1 + b2 * x2) << sx) - ((a1 * y1 + a2 * y2) << sy)
            y = _round_int(acc, shift, half, rounding)
            y = lo if y < lo else hi if y > hi else y
            out.append(y)
            x2, x1 = x1, xn
            y2, y1 = y1, y
        cur = out
        f_in = fy
    arr = np.array(cur, dtype=object)
    y = requantize(arr, f_in, stage.out, rounding, overflow_mode)
    return y


def _round_int(v: int, shift: int, half: int, rounding: str) -> int:
    if shift <= 0:
        return v << (-shift)
    if rounding == "truncate":
        return v >> shift
    if rounding == "half_up":
        return (v + half) >> shift
    q = v >> shift
    r = v - (q << shift)
    if r > half or (r == half and (q & 1)):
        q += 1
    return q


_RUNNERS = {"fir": fir_stage, "cic": cic_stage, "sos": sos_stage}


def run_stage(stage, x, in_fmt: Fmt, rounding: str, overflow_mode: str):
    return _RUNNERS[stage.kind](stage, x, in_fmt, rounding, overflow_mode)


def run(design: FixedDesign, x) -> np.ndarray:
    """Exact output of ``design`` for integer input samples ``x``.

    Returns ``int64`` when the output format fits, else ``object`` integers.
    """
    x = np.asarray(x)
    if len(x) and (np.min(x) < design.in_fmt.lo or np.max(x) > design.in_fmt.hi):
        raise ValueError(f"input samples exceed {design.in_fmt.bits} signed bits")
    f = design.in_fmt
    v = x
    for st in design.stages:
        v = run_stage(st, v, f, design.rounding, design.overflow)
        f = st.out
    v = np.asarray(v)
    if design.out_fmt.bits <= 63:
        return np.array([int(a) for a in v], dtype=np.int64) if v.dtype == object else v.astype(np.int64)
    return v


def run_stages_float(design: FixedDesign, x_real) -> np.ndarray:
    """Floating-point run of the same integer coefficients (no rounding anywhere)."""
    from scipy import signal

    v = np.asarray(x_real, dtype=float)
    for st in design.stages:
        if st.kind == "fir":
            h = np.asarray(st.coeffs, float) / 2.0 ** st.coeff_frac
            v = signal.lfilter(h, [1.0], v)[st.phase::st.decimation]
        elif st.kind == "cic":
            N, R, M = st.order, st.decimation, st.diff_delay
            h = np.ones(R * M)
            for _ in range(N - 1):
                h = np.convolve(h, np.ones(R * M))
            v = signal.lfilter(h, [1.0], v)[st.phase::R]
        else:
            for s in st.sections:
                cf = 2.0 ** s.coeff_frac
                v = signal.lfilter(np.asarray(s.b, float) / cf, np.asarray(s.a, float) / cf, v)
    return v
