"""Word lengths: coefficients, accumulators, states and outputs, with the noise they cost.

FIR
---
- Coefficients: ``c = round(h * 2**coeff_frac)`` (nearest; exact halves to
  even, which keeps symmetry, exact zeros and a halfband's centre 1/2 =
  ``2**(coeff_frac-1)``). ``coeff_frac`` is the largest that keeps every
  integer inside the signed ``coeff_bits`` range, so the largest coefficient
  uses the full range. The word length is the smallest whose quantized
  response meets every band on the dense grid, searched down and up from a
  rule of thumb (about 6 dB of stop-band floor per bit, less 10*log10(L) for
  the L independent rounding errors; common practice). A given
  ``spec.coeff_bits`` is used as is and the margins are reported.
- Accumulator: ``in_bits + ceil(log2(sum |c|))`` (the L1 bound of the integer
  coefficients: no input can overflow it).
- Output (auto): ``frac = in_frac + G`` guard bits with G the smallest that puts
  the output rounding noise (q_out**2/12) at least 6 dB below the input's own
  quantization noise after filtering (q_in**2/12 * sum h**2):
  ``2**(-2G) <= sum(h**2)/4``, clamped to 0..8 and to full precision; so the
  output SNR is within 1 dB of what the input word allows. ``bits`` from the
  exact extremes of the accumulator (the L1 bound), so overflow is impossible.
  A fixed ``output.bits`` (and ``frac``) is used as is; ``frac`` then defaults
  to what a full-scale sine at the peak gain fits (L-infinity), and the report
  says how far the worst case (L1) goes over full scale and what fraction of a
  full-scale random input's samples clip in the bit-true model.

IIR (SOS, form ``df1``, arithmetic of :class:`~tapwright.fixed.stages.Section`)
---------------------------------------------------------------------------
- Coefficients per section: one ``coeff_frac`` for b and a (largest that fits
  ``coeff_bits``; ``a[0] = 2**coeff_frac``), word length the smallest that
  meets the spec with every quantized pole inside radius
  ``1 - 2**-(coeff_frac-2)``: the poles keep at least 4 LSBs of a2 (r**2 <= 1
  - 8 LSB) from the unit circle, so the recursive noise gain stays bounded
  (about <= 2**(coeff_frac-2)) and a slightly different rounding of the
  coefficients could never make the section unstable.
- States: all sections share ``frac = F``; F is the output ``frac`` plus the
  bits that bring the worst-case sum of the internal rounding errors (each
  at most e LSB of the state, e = 1/2 when rounding to nearest, 1 when
  truncating, times the L1 norm of the impulse response from that rounding
  point to the output) to at most 1/2 output LSB. State ``bits`` from the L1
  bound of the quantized impulse response from the input to that section's
  output plus the accumulated rounding-error bound: the states cannot
  saturate.
- ``noise_bound_lsb`` = sum over rounding points of e * (L1 norm from that point
  to the output, in output LSB) + the final conversion's e: the guaranteed
  largest difference between the bit-true output and a floating-point run of
  the same integer coefficients (there is no saturation by construction).

Noise figures use the standard model of uniformly distributed dropped LSBs:
variance q**2/12 per rounding (exactly (1 - 2**-2s)/12 for s dropped bits) and,
for truncation, a mean of about -q/2.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import signal

from .formats import Fmt, bits_for_range, shift_round
from .reference import fir_acc_bits, run
from .stages import FirStage, FixedDesign, Section, SosStage

MAX_COEFF_BITS = 32
MIN_COEFF_BITS = 4
MAX_GUARD = 8


class QuantizeError(ValueError):
    """No coefficient word length up to 32 bits meets the spec."""


# ---------------------------------------------------------------------------------------------
# rounding statistics


def rounding_stats(shift: int, rounding: str) -> dict:
    """Error of dropping ``shift`` LSBs, in units of the new LSB: mean, variance, max |error|.

    Model: the dropped bits are uniformly distributed (exact enumeration up to
    16 dropped bits, the continuous limit beyond).
    """
    if shift <= 0:
        return {"mean": 0.0, "var": 0.0, "max": 0.0}
    if shift <= 16:
        # two periods of the dropped bits so the kept LSB takes both parities (half_even ties)
        r = np.arange(1 << (shift + 1), dtype=np.int64)
        e = (shift_round(r, shift, rounding) * (1 << shift) - r) / float(1 << shift)
        return {"mean": float(np.mean(e)), "var": float(np.var(e)), "max": float(np.max(np.abs(e)))}
    if rounding == "truncate":
        return {"mean": -0.5, "var": 1 / 12, "max": 1.0}
    return {"mean": 0.0, "var": 1 / 12, "max": 0.5}


def max_rounding_error(rounding: str) -> float:
    """Bound on |error| of one rounding in LSBs: 1/2 to nearest, < 1 truncating."""
    return 1.0 if rounding == "truncate" else 0.5


def guard_bits(sum_h2: float) -> int:
    """Smallest G with 2**(-2G) <= sum(h**2)/4 (output rounding 6 dB under the filtered input noise)."""
    if sum_h2 <= 0:
        return 0
    g = math.ceil(1 - 0.5 * math.log2(sum_h2) - 1e-12)
    return int(min(MAX_GUARD, max(0, g)))


# ---------------------------------------------------------------------------------------------
# coefficients


def coeff_frac_for(values, bits: int) -> int:
    """Largest frac such that every round(v * 2**frac) fits ``bits`` signed bits."""
    v = np.asarray(values, float)
    m = float(np.max(np.abs(v))) if len(v) else 0.0
    if m == 0:
        return bits - 1
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1

    def fits(f):
        q = np.round(v * 2.0 ** f)
        return q.min() >= lo and q.max() <= hi

    f = bits - 1 - int(math.ceil(math.log2(m)))
    while not fits(f):
        f -= 1
    while fits(f + 1):
        f += 1
    return f


def quantize_taps(taps, bits: int) -> tuple[tuple[int, ...], int]:
    """Integer coefficients (rounded to nearest) and their fractional bits for a ``bits``-bit word."""
    f = coeff_frac_for(taps, bits)
    q = np.round(np.asarray(taps, float) * 2.0 ** f)
    return tuple(int(v) for v in q), f


def _fir_rule_bits(spec, ntaps: int) -> int:
    from ..design.fir import _rel_dev, reference_gain
    dmin = min(_rel_dev(b, reference_gain(spec)) for b in spec.bands)
    a = -20 * math.log10(dmin)
    return int(min(MAX_COEFF_BITS, max(MIN_COEFF_BITS, math.ceil((a + 10 * math.log10(ntaps)) / 6.02))))


# ---------------------------------------------------------------------------------------------
# FIR


@dataclass
class FirQuant:
    stage: FirStage
    coeff_bits: int
    acc_bits: int
    achieved: list             # quantized (required, achieved, margin) per band
    noise: dict
    notes: list = field(default_factory=list)
    bits_tried: dict = field(default_factory=dict)

    @property
    def met(self) -> bool:
        return all(m >= 0 for _, _, m in self.achieved)


def fir_quant_achieved(spec, coeffs, coeff_frac, grid=None):
    from ..design.fir import band_achieved, check_grid, fir_mag
    h = np.asarray(coeffs, float) / 2.0 ** coeff_frac
    f = check_grid(spec, len(h)) if grid is None else grid
    return band_achieved(spec, f, fir_mag(h, f, spec.sample_rate))


def min_fir_coeff_bits(spec, taps, start: int | None = None):
    """Smallest coefficient word length whose quantized FIR meets every band, or None.

    Searched down from ``start`` while it still meets, or up until it meets
    (at most 32 bits). Returns (bits or None, {bits: met}).
    """
    from ..design.fir import check_grid
    grid = check_grid(spec, len(taps))
    tried: dict[int, bool] = {}

    def ok(b):
        if b not in tried:
            c, f = quantize_taps(taps, b)
            tried[b] = all(m >= 0 for _, _, m in fir_quant_achieved(spec, c, f, grid))
        return tried[b]

    b = start if start is not None else _fir_rule_bits(spec, len(taps))
    b = min(max(b, MIN_COEFF_BITS), MAX_COEFF_BITS)
    if ok(b):
        while b - 1 >= MIN_COEFF_BITS and ok(b - 1):
            b -= 1
        return b, tried
    while b < MAX_COEFF_BITS:
        b += 1
        if ok(b):
            return b, tried
    return None, tried


def fir_extremes(coeffs, in_fmt: Fmt) -> tuple[int, int]:
    """Exact smallest and largest accumulator values over all inputs (L1 bound, signs split)."""
    P = sum(int(c) for c in coeffs if c > 0)
    N = -sum(int(c) for c in coeffs if c < 0)
    xl, xh = in_fmt.lo, in_fmt.hi
    return xl * P - xh * N, xh * P - xl * N


def quantize_fir(spec, taps, *, decimation: int = 1, pass_gain: float | None = None) -> FirQuant:
    """Quantize a float FIR for ``spec``: coefficients, accumulator, output format, noise."""
    in_fmt = Fmt(spec.in_bits, spec.in_frac)
    notes: list[str] = []
    if spec.coeff_bits is not None:
        bits, tried = spec.coeff_bits, {}
    else:
        bits, tried = min_fir_coeff_bits(spec, taps)
        if bits is None:
            raise QuantizeError("no coefficient word length up to 32 bits keeps the FIR within the spec")
    coeffs, cf = quantize_taps(taps, bits)
    achieved = fir_quant_achieved(spec, coeffs, cf)
    if spec.coeff_bits is not None and not all(m >= 0 for _, _, m in achieved):
        notes.append(f"coeff_bits = {bits} (given) does not keep every band within the spec")
    h = np.asarray(coeffs, float) / 2.0 ** cf
    full = in_fmt.frac + cf
    lo_acc, hi_acc = fir_extremes(coeffs, in_fmt)
    out_fmt, fmt_notes, clip = _output_format(spec, in_fmt, full, float(np.sum(h * h)), lo_acc, hi_acc,
                                              lambda of: _fir_mag_peak(h, spec), coeffs, cf, decimation)
    notes += fmt_notes
    stage = FirStage(coeffs=coeffs, coeff_frac=cf, out=out_fmt, decimation=decimation, phase=0)
    acc = fir_acc_bits(coeffs, in_fmt)
    st = rounding_stats(full - out_fmt.frac, spec.rounding)
    noise = _noise_dict(spec, in_fmt, out_fmt, st["var"], st["mean"], st["max"], float(np.sum(h * h)),
                        pass_gain if pass_gain is not None else _pass_gain(spec))
    if clip:
        noise.update(clip)
    return FirQuant(stage, bits, acc, achieved, noise, notes, tried)


def _pass_gain(spec) -> float:
    from ..design.fir import reference_gain
    return reference_gain(spec)


def _fir_mag_peak(h, spec) -> float:
    from ..design.fir import check_grid, fir_mag
    f = check_grid(spec, len(h))
    return float(np.max(fir_mag(h, f, spec.sample_rate)))


def _output_format(spec, in_fmt, full_frac, sum_h2, lo_acc, hi_acc, peak_fn, coeffs, cf, decimation):
    """Output Fmt (auto or given), notes, and a clipping report when the bits are given."""
    notes: list[str] = []
    if spec.out_bits is None:
        g = guard_bits(sum_h2)
        of = min(in_fmt.frac + g, full_frac)
        lo = int(shift_round(np.array([lo_acc], dtype=object), full_frac - of, spec.rounding)[0])
        hi = int(shift_round(np.array([hi_acc], dtype=object), full_frac - of, spec.rounding)[0])
        ob = bits_for_range(lo, hi)
        notes.append(f"output Q: frac = input frac {in_fmt.frac} + {of - in_fmt.frac} guard bits "
                     f"(rounding noise >= 6 dB under the filtered input noise), {ob} bits from the L1 bound "
                     "(no overflow possible)")
        return Fmt(ob, of), notes, None
    ob = spec.out_bits
    if spec.out_frac is not None:
        of = spec.out_frac
    else:
        peak = peak_fn(None) * (-in_fmt.lo) / 2.0 ** in_fmt.frac      # full-scale sine at the peak gain
        of = int(math.floor(math.log2(((1 << (ob - 1)) - 1) / peak))) if peak > 0 else ob - 1
        of = min(of, full_frac)
        notes.append(f"output frac {of} chosen so a full-scale sine at the peak gain fits {ob} bits")
    fmt = Fmt(ob, of)
    lo = int(shift_round(np.array([lo_acc], dtype=object), full_frac - of, spec.rounding)[0])
    hi = int(shift_round(np.array([hi_acc], dtype=object), full_frac - of, spec.rounding)[0])
    worst = max(-lo, hi)
    over_db = 20 * math.log10(worst / float(1 << (ob - 1))) if worst > 0 else -math.inf
    clip = {"worst_case_over_fullscale_db": over_db}
    if coeffs is not None:
        clip["clip_fraction_random_fullscale"] = _fir_clip_fraction(spec, in_fmt, coeffs, cf, fmt, lo, hi,
                                                                    decimation)
    if over_db > 0:
        notes.append(f"output {ob} bits: the worst-case input (L1 bound) exceeds full scale by {over_db:.2f} dB "
                     f"and would {spec.overflow}; a full-scale random input clips in "
                     f"{100 * clip.get('clip_fraction_random_fullscale', 0.0):.3g} % of the samples")
    return fmt, notes, clip


def _fir_clip_fraction(spec, in_fmt, coeffs, cf, fmt, lo, hi, decimation, n=20000, seed=1):
    rng = np.random.default_rng(seed)
    x = rng.integers(in_fmt.lo, in_fmt.hi + 1, n)
    wide = Fmt(bits_for_range(lo, hi), fmt.frac)
    d = FixedDesign((FirStage(tuple(coeffs), cf, wide, decimation, 0),), in_fmt, spec.rounding, "saturate")
    y = np.asarray(run(d, x), dtype=object)
    return float(np.mean([(v > fmt.hi) or (v < fmt.lo) for v in y]))


def _noise_dict(spec, in_fmt, out_fmt, var, mean, emax, sum_h2, gain) -> dict:
    """Noise summary in output LSBs, SNR of a full-scale sine through the pass band."""
    amp = gain * (-in_fmt.lo) * 2.0 ** (out_fmt.frac - in_fmt.frac)     # output LSBs
    p_sig = amp * amp / 2
    p_err = var + mean * mean
    in_noise = sum_h2 * (2.0 ** (out_fmt.frac - in_fmt.frac)) ** 2 / 12
    return {
        "output_noise_lsb2": var,
        "output_noise_mean_lsb": mean,
        "output_error_max_lsb": emax,
        "input_noise_at_output_lsb2": in_noise,
        "snr_db_fullscale_sine": 10 * math.log10(p_sig / p_err) if p_err > 0 else math.inf,
        "snr_db_fullscale_sine_with_input": 10 * math.log10(p_sig / (p_err + in_noise)),
    }


# ---------------------------------------------------------------------------------------------
# IIR


@dataclass
class IirQuant:
    stage: SosStage
    coeff_bits: int
    acc_bits: int
    achieved: list
    noise: dict
    sos_q: np.ndarray            # the integer coefficients as floats (b/2**f, a/2**f)
    radius_limits: list          # per section: allowed pole radius
    pole_radii: list             # per section: largest quantized pole radius
    notes: list = field(default_factory=list)
    bits_tried: dict = field(default_factory=dict)

    @property
    def met(self) -> bool:
        return all(m >= 0 for _, _, m in self.achieved)


def quantize_sections(sos, bits: int):
    """Per section: (b ints, a ints with a0 = 2**f, f) for a ``bits``-bit coefficient word."""
    out = []
    for s in np.atleast_2d(sos):
        vals = [s[0], s[1], s[2], s[4], s[5]]
        f = coeff_frac_for(vals, bits)
        q = [int(v) for v in np.round(np.asarray(vals) * 2.0 ** f)]
        out.append(((q[0], q[1], q[2]), (1 << f, q[3], q[4]), f))
    return out


def sections_to_sos(secs) -> np.ndarray:
    rows = []
    for b, a, f in secs:
        s = 2.0 ** f
        rows.append([b[0] / s, b[1] / s, b[2] / s, 1.0, a[1] / s, a[2] / s])
    return np.asarray(rows, float)


def stability_radius(coeff_frac: int) -> float:
    """Allowed largest pole radius: 1 - 2**-(coeff_frac-2)."""
    return 1.0 - 2.0 ** -(coeff_frac - 2)


def pole_radius(a) -> float:
    a = np.asarray(a, float)
    if a[2] == 0:
        return abs(a[1] / a[0]) if a[1] != 0 else 0.0
    return float(np.max(np.abs(np.roots(a))))


def iir_grid(spec):
    from ..design.fir import check_grid
    return check_grid(spec, 1024)       # 16384 + 1 points plus the band edges


def iir_quant_check(spec, secs, grid=None):
    """(achieved per band, radii, limits, stable_with_margin) of quantized sections."""
    from ..design.fir import band_achieved
    from ..design.iir import sos_mag
    sos_q = sections_to_sos(secs)
    radii = [pole_radius(a) for _, a, _ in secs]
    limits = [stability_radius(f) for _, _, f in secs]
    f = iir_grid(spec) if grid is None else grid
    ach = band_achieved(spec, f, sos_mag(sos_q, f, spec.sample_rate))
    return ach, radii, limits, all(r <= lim for r, lim in zip(radii, limits))


def min_iir_coeff_bits(spec, sos, start: int = 14):
    """Smallest coefficient word that meets the spec with poles inside the stated radius."""
    grid = iir_grid(spec)
    tried: dict[int, bool] = {}

    def ok(b):
        if b not in tried:
            ach, _, _, stable = iir_quant_check(spec, quantize_sections(sos, b), grid)
            tried[b] = stable and all(m >= 0 for _, _, m in ach)
        return tried[b]

    b = start
    if ok(b):
        while b - 1 >= MIN_COEFF_BITS + 2 and ok(b - 1):
            b -= 1
        return b, tried
    while b < MAX_COEFF_BITS:
        b += 1
        if ok(b):
            return b, tried
    return None, tried


def _impulse_l1_matrix(sos_q):
    """M[j][i] = L1 of the impulse response from section j's rounding to section i's output (i >= j),
    and l1_in[i] = L1 from the filter input to section i's output; also L2^2 and DC gains to the output."""
    from ..design.iir import impulse_length
    S = len(sos_q)
    n = impulse_length(sos_q)
    delta = np.zeros(n)
    delta[0] = 1.0
    M = np.zeros((S, S))
    l2_out = np.zeros(S)
    dc_out = np.zeros(S)
    for j in range(S):
        v = signal.lfilter([1.0], sos_q[j, 3:], delta)
        M[j, j] = np.sum(np.abs(v))
        for i in range(j + 1, S):
            v = signal.lfilter(sos_q[i, :3], sos_q[i, 3:], v)
            M[j, i] = np.sum(np.abs(v))
        l2_out[j] = np.sum(v * v)
        dc_out[j] = np.sum(v)
    l1_in = np.zeros(S)
    v = delta
    for i in range(S):
        v = signal.lfilter(sos_q[i, :3], sos_q[i, 3:], v)
        l1_in[i] = np.sum(np.abs(v))
    return M, l1_in, l2_out, dc_out, v


def quantize_iir(spec, sos, *, pass_gain: float | None = None) -> IirQuant:
    """Quantize scaled float sections: coefficient word, state and output formats, noise bound."""
    in_fmt = Fmt(spec.in_bits, spec.in_frac)
    notes: list[str] = []
    if spec.coeff_bits is not None:
        bits, tried = spec.coeff_bits, {}
    else:
        bits, tried = min_iir_coeff_bits(spec, sos)
        if bits is None:
            raise QuantizeError("no coefficient word length up to 32 bits keeps the IIR within the spec "
                                "with its poles inside the stability margin")
    secs = quantize_sections(sos, bits)
    achieved, radii, limits, stable = iir_quant_check(spec, secs)
    if max(radii) >= 1:
        raise QuantizeError(f"with {bits}-bit coefficients a quantized pole lies at radius {max(radii):.6f} "
                            "(unstable)")
    if not stable:
        notes.append(f"a quantized pole (radius {max(radii):.6f}) is outside the margin radius "
                     f"{min(limits):.6f}")
    if spec.coeff_bits is not None and not all(m >= 0 for _, _, m in achieved):
        notes.append(f"coeff_bits = {bits} (given) does not keep every band within the spec")
    sos_q = sections_to_sos(secs)
    M, l1_in, l2_out, dc_out, h_total = _impulse_l1_matrix(sos_q)
    S = len(secs)
    e = max_rounding_error(spec.rounding)
    X = float(-in_fmt.lo)                                   # largest |input| in input LSBs
    sum_h2 = float(np.sum(h_total * h_total))
    gain = pass_gain if pass_gain is not None else _pass_gain(spec)

    # output format
    def peak_fn(_):
        from ..design.iir import peak_gain
        return peak_gain(sos_q, spec.sample_rate)

    if spec.out_bits is None:
        of = in_fmt.frac + guard_bits(sum_h2)
    elif spec.out_frac is not None:
        of = spec.out_frac
    else:
        peak = peak_fn(None) * X / 2.0 ** in_fmt.frac
        of = int(math.floor(math.log2(((1 << (spec.out_bits - 1)) - 1) / peak)))
        notes.append(f"output frac {of} chosen so a full-scale sine at the peak gain fits {spec.out_bits} bits")
    n1_out = M[:, S - 1]
    F = of + max(0, int(math.ceil(math.log2(max(2 * e * float(np.sum(n1_out)), 1e-300)))))
    # state bounds (state LSBs): signal through the quantized sections + rounding errors so far
    state_fmts = []
    for i in range(S):
        sig = l1_in[i] * X * 2.0 ** (F - in_fmt.frac)
        err = e * float(np.sum(M[: i + 1, i]))
        bound = int(math.ceil((sig + err) * (1 + 1e-9))) + 2
        state_fmts.append(Fmt(bits_for_range(-bound, bound), F))
    final_e = e if F > of else 0.0
    noise_bound = e * 2.0 ** (of - F) * float(np.sum(n1_out)) + final_e
    y_bound = l1_in[S - 1] * X * 2.0 ** (of - in_fmt.frac) + noise_bound
    if spec.out_bits is None:
        yb = int(math.ceil(y_bound * (1 + 1e-9))) + 1
        out_fmt = Fmt(bits_for_range(-yb, yb), of)
        notes.append(f"IIR output Q: frac = input frac {in_fmt.frac} + {of - in_fmt.frac} guard bits, "
                     f"{out_fmt.bits} bits from the L1 bound; states {state_fmts[0].bits} bits with frac {F} "
                     f"({F - of} bits below the output so the internal roundings add <= 1/2 LSB)")
        clip = None
    else:
        out_fmt = Fmt(spec.out_bits, of)
        full = float(1 << (out_fmt.bits - 1))
        clip = {"worst_case_over_fullscale_db": 20 * math.log10(y_bound / full)}
        if clip["worst_case_over_fullscale_db"] > 0:
            notes.append(f"output {out_fmt.bits} bits: the worst-case input (L1 bound) exceeds full scale by "
                         f"{clip['worst_case_over_fullscale_db']:.2f} dB and would {spec.overflow}")
    sections = tuple(Section(b=b, a=a, coeff_frac=f, state=sf) for (b, a, f), sf in zip(secs, state_fmts))
    stage = SosStage(sections=sections, out=out_fmt, form="df1", noise_bound_lsb=float(noise_bound))
    if clip is not None:
        clip["clip_fraction_random_fullscale"] = _sos_clip_fraction(spec, in_fmt, stage, y_bound)
    # statistics: every section output rounding (F) and the final conversion (F -> of)
    st_int = rounding_stats(max(in_fmt.frac, F) + max(f for _, _, f in secs) - F, spec.rounding)
    st_out = rounding_stats(F - of, spec.rounding)
    k = 2.0 ** (of - F)
    var = float(np.sum(l2_out)) * st_int["var"] * k * k + st_out["var"]
    mean = float(np.sum(dc_out)) * st_int["mean"] * k + st_out["mean"]
    noise = _noise_dict(spec, in_fmt, out_fmt, var, mean, noise_bound, sum_h2, gain)
    noise["noise_bound_lsb"] = float(noise_bound)
    if clip:
        noise.update(clip)
    acc = _sos_acc_bits(sections, in_fmt)
    return IirQuant(stage, bits, acc, achieved, noise, sos_q, limits, radii, notes, tried)


def _sos_acc_bits(sections, in_fmt) -> int:
    """Widest exact section sum (aligned as in the Section docstring) over all sections."""
    best = 0
    f_in, b_in = in_fmt.frac, in_fmt.bits
    for s in sections:
        cf, fy = s.coeff_frac, s.state.frac
        F = max(f_in, fy) + cf
        sx, sy = F - f_in - cf, F - fy - cf
        xm, ym = 1 << (b_in - 1), 1 << (s.state.bits - 1)
        bound = (sum(abs(v) for v in s.b) * xm << sx) + ((abs(s.a[1]) + abs(s.a[2])) * ym << sy)
        best = max(best, bits_for_range(-bound, bound))
        f_in, b_in = fy, s.state.bits
    return best


def _sos_clip_fraction(spec, in_fmt, stage, y_bound, n=4000, seed=1):
    rng = np.random.default_rng(seed)
    x = rng.integers(in_fmt.lo, in_fmt.hi + 1, n)
    yb = int(math.ceil(y_bound)) + 1
    wide = SosStage(stage.sections, Fmt(bits_for_range(-yb, yb), stage.out.frac), stage.form, stage.noise_bound_lsb)
    y = np.asarray(run(FixedDesign((wide,), in_fmt, spec.rounding, "saturate"), x), dtype=object)
    return float(np.mean([(v > stage.out.hi) or (v < stage.out.lo) for v in y]))
