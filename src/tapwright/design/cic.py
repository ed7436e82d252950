"""CIC decimators: register growth, Hogenauer pruning, response, droop, and the stage.

Method: E. B. Hogenauer, "An economical class of digital filters for decimation
and interpolation", IEEE Trans. ASSP 29(2):155-162, April 1981. The formulas
below are written from the paper's method as it is commonly restated (the
equations are quoted from memory of the paper; the numbers are checked in
``tests/test_cic.py`` by brute force, not against the paper's tables).

Notation: N integrator + N comb stages, rate change R, differential delay M,
B_in input bits, B_out output bits. Stages are numbered j = 1..N (integrators,
input rate) and j = N+1..2N (combs, output rate); j = 2N+1 is the output
truncation.

- Transfer function at the input rate: H(z) = [(1 - z^-RM) / (1 - z^-1)]^N,
  DC gain G = (RM)^N.
- Register growth: B_max = ceil(N log2(RM) + B_in - 1), the MSB index of the
  full-precision result, so every register is B_max + 1 bits wide. Computed
  here exactly with integers: ceil(log2 G) = (G-1).bit_length().
- Pruning ("distributed truncation"). A rounding error injected at the input of
  stage j reaches the output through h_j, the impulse response of the rest of
  the filter referred to the input rate (the combs moved in front of the rate
  change by the noble identity):
    integrators: H_j(z) = (1 - z^-RM)^N / (1 - z^-1)^(N-j+1),
      h_j(k) = sum_{l=0}^{floor(k/RM)} (-1)^l C(N, l) C(N - j + k - RM l, k - RM l),
      k = 0 .. (RM-1)N + j - 1;
    combs (output rate): H_j(z) = (1 - z^-M)^(2N+1-j),
      h_j(k M) = (-1)^k C(2N+1-j, k).
  F_j^2 = sum_k h_j(k)^2 is the variance gain (white errors; the rate change
  keeps the variance). The output truncation drops B_{2N+1} = B_max - B_out + 1
  bits, variance sigma_T^2 = 2^(2 B_{2N+1}) / 12. Hogenauer's criterion: the
  2N internal truncations together add no more than the output truncation,
  in equal shares: 2^(2 B_j)/12 * F_j^2 <= sigma_T^2 / (2N), i.e.
      B_j = floor(-log2 F_j + log2 sigma_T + 0.5 log2(6 / N)).
  B_j < 0 (small RM, or B_out > B_in + growth) is clamped to 0 (full precision).
- Monotonicity: the formula gives non-decreasing B_j wherever F_j decreases
  with j. Going from stage j to j+1 among the integrators trades a boxcar
  factor (1 + ... + z^-(RM-1)) for a comb factor (1 - z^-RM); the combs' F_j^2
  = C(2(2N+1-j), 2N+1-j) always decrease. Computed for N <= 7: F_j increases
  somewhere only for RM = 2 (inside the integrators and at the boundary) and
  RM = 3 (from the last integrator to the first comb), so the formula can step
  down there. The running maximum is then taken, and that changes nothing in
  the numbers: every stage adds or subtracts, so a word whose B_{j-1} LSBs
  were dropped stays a multiple of 2^(B_{j-1}), and dropping fewer bits at
  stage j than already are zero is exact. The running maximum only narrows the
  register. :func:`hogenauer_table` says when it happened.

Output format and gain. ``make_cic_stage`` keeps Hogenauer's output: the top
B_out bits of the B_max+1-bit result, i.e. frac = in_frac - B_{2N+1}. The gain
G = (RM)^N stays real (the reference model and design.json keep it, as the
contract says): a full-scale input gives an output near full scale of the
B_out-bit word, whose value is G times the input. It is normalised by the next
stage: when G = 2^k (R M a power of two) the compensator's integer
coefficients are the same and its ``coeff_frac`` grows by k (no arithmetic at
all: the gain is absorbed by the format); otherwise the compensator's
coefficients are scaled by 1/G before they are quantized (an arbitrary
constant is free in coefficients that are arbitrary anyway). A CIC alone keeps
its gain G.

Because all internal truncations are floors (they only move the value down),
the most negative result can fall a little below -2^B_max when G is a power of
two; ``make_cic_stage`` adds one output bit when the exact bound says the
B_out-bit word could overflow (``guard=True``), so neither saturation nor wrap
ever acts.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from math import comb

import numpy as np

from ..fixed.formats import Fmt, bits_for_range
from ..fixed.quantize import rounding_stats
from ..fixed.stages import CicStage

__all__ = ["cic_gain", "cic_bmax", "cic_impulse", "cic_variance_gains", "hogenauer_drop", "hogenauer_table",
           "HogenauerTable", "cic_error_stats", "cic_error_bound", "cic_response", "cic_droop_db",
           "cic_min_order", "make_cic_stage", "cic_taps", "cic_output_range"]


def cic_gain(N: int, R: int, M: int = 1) -> int:
    """DC gain (RM)^N (an exact integer)."""
    return (R * M) ** N


def cic_bmax(N: int, R: int, M: int, B_in: int) -> int:
    """Hogenauer's B_max = ceil(N log2(RM) + B_in - 1), computed exactly: the full register is B_max+1 bits."""
    _check(N, R, M)
    g = cic_gain(N, R, M)
    return (g - 1).bit_length() + B_in - 1


def _check(N, R, M):
    if N < 1 or R < 1 or M < 1:
        raise ValueError(f"CIC needs N, R, M >= 1 (got N={N}, R={R}, M={M})")


def cic_impulse(N: int, R: int, M: int, j: int) -> np.ndarray:
    """h_j: impulse response from the input of stage j (1..2N) to the CIC output (closed forms above).

    Integrators at the input rate; combs at the output rate (taps at multiples of M).
    Exact integers in an ``object`` array.
    """
    _check(N, R, M)
    if not 1 <= j <= 2 * N:
        raise ValueError(f"stage j must be 1..{2 * N}, got {j}")
    RM = R * M
    if j <= N:
        n = (RM - 1) * N + j
        h = []
        for k in range(n):
            s = 0
            for l in range(k // RM + 1):
                kk = k - RM * l
                s += (-1) ** l * comb(N, l) * comb(N - j + kk, kk)
            h.append(s)
        return np.array(h, dtype=object)
    m = 2 * N + 1 - j
    h = np.zeros(m * M + 1, dtype=object)
    for k in range(m + 1):
        h[k * M] = (-1) ** k * comb(m, k)
    return h


def cic_variance_gains(N: int, R: int, M: int) -> list[int]:
    """F_j^2 = sum_k h_j(k)^2 for j = 1..2N (exact integers)."""
    return [int(sum(int(v) * int(v) for v in cic_impulse(N, R, M, j))) for j in range(1, 2 * N + 1)]


@dataclass
class HogenauerTable:
    """Pruning of one CIC: B_max, F_j, the formula's B_j (raw), the drops used and the register widths."""

    N: int
    R: int
    M: int
    B_in: int
    B_out: int
    B_max: int
    F: list              # F_j, j = 1..2N
    raw: list            # formula B_j, j = 1..2N+1 (before clamping)
    drop: list           # B_j used, j = 1..2N (clamped at 0, running max)
    out_drop: int        # B_{2N+1} used (>= 0)
    notes: list = field(default_factory=list)

    @property
    def widths(self) -> list:
        """Kept register widths per stage (B_max + 1 - B_j), then the output width."""
        return [self.B_max + 1 - b for b in self.drop] + [self.B_max + 1 - self.out_drop]

    def as_dict(self) -> dict:
        return {"N": self.N, "R": self.R, "M": self.M, "B_in": self.B_in, "B_out": self.B_out,
                "B_max": self.B_max, "F": [float(f) for f in self.F], "raw": list(self.raw),
                "drop": list(self.drop), "out_drop": self.out_drop, "widths": self.widths,
                "notes": list(self.notes)}


def hogenauer_table(N: int, R: int, M: int, B_in: int, B_out: int) -> HogenauerTable:
    """Hogenauer's distributed truncation for given word lengths (see the module docstring)."""
    bmax = cic_bmax(N, R, M, B_in)
    b_last = bmax - B_out + 1
    F = [math.sqrt(v) for v in cic_variance_gains(N, R, M)]
    # log2 sigma_T = B_{2N+1} - 0.5 log2(12)
    log_sig = b_last - 0.5 * math.log2(12.0)
    raw = [int(math.floor(-math.log2(f) + log_sig + 0.5 * math.log2(6.0 / N) + 1e-12)) for f in F]
    raw.append(b_last)
    notes = []
    drop, cur = [], 0
    for j, b in enumerate(raw[:-1], start=1):
        b = max(0, b)
        if b < cur:
            notes.append(f"B_{j} = {raw[j - 1]} from the formula is below B_{j - 1} = {cur}: running maximum "
                         f"taken (exact: those LSBs are already zero)")
        cur = max(cur, b)
        drop.append(cur)
    out_drop = max(b_last, cur) if b_last >= 0 else 0
    if b_last < 0:
        notes.append(f"B_out = {B_out} exceeds the full width {bmax + 1}: no output truncation, no pruning")
        drop = [0] * (2 * N)
        out_drop = 0
    if any(r < 0 for r in raw[:-1]) and b_last >= 0:
        notes.append("negative B_j (small RM or B_out close to the full width) clamped to 0")
    return HogenauerTable(N, R, M, B_in, B_out, bmax, F, raw, drop, out_drop, notes)


def hogenauer_drop(N: int, R: int, M: int, B_in: int, B_out: int) -> list[int]:
    """B_j for j = 1..2N (integrators then combs): clamped at 0, non-decreasing (running max)."""
    return list(hogenauer_table(N, R, M, B_in, B_out).drop)


def cic_error_stats(N: int, R: int, M: int, drop, out_drop: int, rounding: str = "truncate") -> dict:
    """Mean and variance of the output error, in input LSBs (and LSB^2), of a pruned CIC.

    Per stage j the floor truncation drops the bits between B_{j-1} and B_j of a
    word that is already a multiple of 2^B_{j-1}: with the dropped bits
    uniformly distributed (the standard model) the error has mean
    -(2^B_j - 2^B_{j-1})/2 and variance (4^B_j - 4^B_{j-1})/12. It reaches the
    output with variance gain F_j^2 and mean gain sum_k h_j(k) (= G for j = 1,
    0 for every other stage: the combs' zeros at DC). The output conversion
    (B_{2N} -> B_{2N+1}) uses ``rounding``. Hogenauer's own model uses
    2^(2 B_j)/12 for every stage; ``hogenauer_var`` gives that figure.
    """
    drop = list(drop)
    F2 = cic_variance_gains(N, R, M)
    var = mean = 0.0
    hog = 0.0
    per = []
    prev = 0
    for j, b in enumerate(drop, start=1):
        v = (4.0 ** b - 4.0 ** prev) / 12.0
        m = -(2.0 ** b - 2.0 ** prev) / 2.0
        dc = float(cic_gain(N, R, M)) if j == 1 else 0.0
        per.append({"stage": j, "drop": b, "var_at_output": v * F2[j - 1], "mean_at_output": m * dc})
        var += v * F2[j - 1]
        mean += m * dc
        hog += (4.0 ** b / 12.0) * F2[j - 1] if b > 0 else 0.0
        prev = b
    st = rounding_stats(out_drop - prev, rounding)
    scale = 2.0 ** out_drop
    v_out = st["var"] * scale * scale
    m_out = st["mean"] * scale
    sigma_t2 = 4.0 ** out_drop / 12.0
    return {"per_stage": per, "var_internal": var, "var_output_rounding": v_out, "var_total": var + v_out,
            "mean_total": mean + m_out, "sigma_T2": sigma_t2, "hogenauer_var_internal": hog,
            "hogenauer_var_total": hog + sigma_t2}


def cic_error_bound(N: int, R: int, M: int, drop, out_drop: int, rounding: str = "truncate") -> float:
    """Largest |pruned output - exact (RM)^N-gain output|, in input LSBs.

    sum_j (2^B_j - 2^B_{j-1}) * ||h_j||_1 (each floor errs by less than that, of
    one sign, and reaches the output through h_j), plus the output conversion's
    largest error (half an output LSB to nearest, one LSB truncating).
    """
    e, prev = 0.0, 0
    for j, b in enumerate(drop, start=1):
        if b > prev:
            l1 = sum(abs(int(v)) for v in cic_impulse(N, R, M, j))
            e += (2.0 ** b - 2.0 ** prev) * l1
        prev = b
    if out_drop > prev:
        e += (1.0 if rounding == "truncate" else 0.5) * 2.0 ** out_drop
    return e


def cic_response(N: int, R: int, M: int, f, fs: float, normalized: bool = True) -> np.ndarray:
    """|H(f)| = |sin(pi f R M / fs) / (R M sin(pi f / fs))|^N at input frequencies ``f`` (Hz), input rate fs.

    ``normalized`` (default): DC gain 1; otherwise the real gain (RM)^N is included.
    Periodic in fs; the 0/0 points at multiples of fs take their limit 1.
    """
    x = np.asarray(f, float) / fs
    x = (x + 0.5) % 1.0 - 0.5          # |H| has period 1 in f/fs
    RM = R * M
    # sin(pi RM x) / (RM sin(pi x)) = sinc(RM x) / sinc(x), with np.sinc(t) = sin(pi t)/(pi t); sinc(x) > 0 here
    h = np.abs(np.sinc(RM * x) / np.sinc(x)) ** N
    if not normalized:
        h = h * float(cic_gain(N, R, M))
    return h


def cic_droop_db(N: int, R: int, M: int, f, fs: float) -> np.ndarray:
    """Pass-band droop 20 log10 |H(f)/H(0)| in dB (negative)."""
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(cic_response(N, R, M, f, fs))


def cic_taps(N: int, R: int, M: int = 1) -> np.ndarray:
    """The CIC's impulse response at the input rate (integers, real gain (RM)^N): boxcar of RM, N times."""
    h = np.ones(R * M, dtype=np.int64)
    out = np.array([1], dtype=np.int64)
    for _ in range(N):
        out = np.convolve(out, h)
    return out


def cic_min_order(R: int, M: int, fs: float, stop_intervals, atten_db: float, n_max: int = 6,
                  pass_edge: float | None = None, max_droop_db: float | None = None) -> int | None:
    """Smallest N <= n_max whose normalized response is <= -atten_db on every (lo, hi) interval (Hz).

    Optionally the droop at ``pass_edge`` must stay within ``max_droop_db``. None if no order works.
    """
    pts = []
    for lo, hi in stop_intervals:
        if hi > lo:
            pts.append(np.linspace(lo, hi, 257))
    if not pts:
        return 1
    f = np.concatenate(pts)
    base = float(np.max(cic_response(1, R, M, f, fs)))
    lim = 10 ** (-atten_db / 20.0)
    for N in range(1, n_max + 1):
        if base ** N <= lim:
            if pass_edge is not None and max_droop_db is not None:
                if -float(cic_droop_db(N, R, M, pass_edge, fs)) > max_droop_db:
                    return None
            return N
    return None


def cic_output_range(stage_or_params, in_fmt: Fmt | None = None, rounding: str = "half_up") -> tuple[int, int]:
    """Exact bounds (in output LSBs) of a CIC stage's output over all inputs, truncation errors included."""
    st = stage_or_params
    N, R, M = st.order, st.decimation, st.diff_delay
    f_in = st.in_fmt if in_fmt is None else in_fmt
    g = cic_gain(N, R, M)
    out_drop = f_in.frac - st.out.frac
    e = cic_error_bound(N, R, M, st.drop, max(out_drop, st.drop[-1]), rounding)
    lo = (g * f_in.lo - e) / 2.0 ** out_drop
    hi = (g * f_in.hi + e) / 2.0 ** out_drop
    return int(math.floor(lo)), int(math.ceil(hi))


def make_cic_stage(N: int, R: int, M: int, in_fmt: Fmt, out_bits: int, *, prune: bool = True,
                   guard: bool = True, rounding: str = "half_up", phase: int = 0) -> CicStage:
    """A :class:`CicStage` with Hogenauer's output word and (``prune``) his distributed truncation.

    Output format: the top ``out_bits`` of the B_max+1-bit result, frac =
    in_frac - (B_max - out_bits + 1); the real gain (RM)^N is kept (see the
    module docstring for who normalises it). ``out_bits`` larger than B_max+1
    keeps full precision (frac = in_frac). With ``guard`` one bit is added when
    the exact bound (G times the input range plus the truncation errors) does
    not fit ``out_bits`` (possible only with pruning or a power-of-two G).
    """
    _check(N, R, M)
    bmax = cic_bmax(N, R, M, in_fmt.bits)
    out_drop = max(0, bmax - out_bits + 1)
    if prune:
        tab = hogenauer_table(N, R, M, in_fmt.bits, out_bits)
        drop = tuple(tab.drop)
    else:
        drop = (0,) * (2 * N)
    bits = max(out_bits, 2)
    st = CicStage(order=N, decimation=R, diff_delay=M, drop=drop, out=Fmt(bits, in_fmt.frac - out_drop),
                  in_fmt=in_fmt, phase=phase)
    if guard:
        lo, hi = cic_output_range(st, rounding=rounding)
        need = bits_for_range(lo, hi)
        if need > bits:
            st = CicStage(order=N, decimation=R, diff_delay=M, drop=drop, out=Fmt(need, st.out.frac),
                          in_fmt=in_fmt, phase=phase)
    return st
