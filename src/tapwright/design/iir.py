"""IIR design: classical analog prototypes, bilinear transform, second-order sections.

Responses (``spec.iir_response``): Butterworth, Chebyshev I, Chebyshev II,
elliptic. Order and natural frequencies come from ``scipy.signal``
``buttord``/``cheb1ord``/``cheb2ord``/``ellipord`` and the filter from
``iirfilter``, all with ``fs=`` so the band edges are pre-warped
(f_analog = (fs/pi) * tan(pi f / fs)) before the bilinear transform
s = 2 fs (z-1)/(z+1), which maps the analog edges exactly onto the digital
ones (Oppenheim & Schafer, *Discrete-Time Signal Processing*, sec. 7.2.2).

Only lowpass, highpass, bandpass and bandstop specs (pass and stop bands,
one pass gain) are accepted; anything else raises :class:`IirNotApplicable`.

Gain: the prototypes peak at 1 in the pass band and dip to 10**(-rp/20); the
filter is multiplied by ``c = 2 g / (1 + 10**(-rp/20))`` so the pass band is
centred on the spec's absolute gain g with the peak-to-peak ripple rp. The
stop-band attenuation asked of the prototype adds 20*log10(c/g).

Margin for quantization: the integer order leaves slack; the design tightens
the ripple (to 50 ... 97 %) and raises the attenuation (+5 ... +0.2 dB), taking
the first pair in :data:`_TIGHTEN` that the same order still allows, so the
quantized coefficients have room. When even the mildest pair needs a higher
order, the order is raised by one (a design exactly at the limit would leave
nothing for quantization).

Sections (``scipy.signal.zpk2sos``, ``pairing='nearest'``): poles are taken in
order of decreasing radius (closest to the unit circle first) and each pair is
matched with the zeros nearest to it, which keeps each section's peak gain low
(Jackson, IEEE Trans. AU-18(2), 1970).

Ordering: sections are ordered by increasing pole radius ("up": least peaked
first, the high-Q section last). The high-Q sections then see a signal the
earlier sections have already shaped, so L-infinity scale factors stay near 1
and their large noise gain is not amplified by later sections. The reverse
order ("down") is also evaluated and kept if its roundoff noise gain
(sum of the L2 norms squared from every section output to the filter output)
is lower; the choice is recorded in ``IirDesign.ordering``.

Scaling (Jackson, Bell Syst. Tech. J. 49(2), 1970): L-infinity. Each section's
b coefficients are multiplied by an exact factor so that the peak over
frequency of the transfer from the filter input to that section's output is 1
(for every section but the last, whose output is the filter's output with the
spec's own gain). With the L-infinity norm no sinusoidal input of full scale
can overflow an internal node, while the L1 norm (which would rule out overflow
for any input) costs bits on every section for signals that do not occur in
practice; the fixed-point state words are then sized from the L1 bound of the
quantized sections (see :mod:`tapwright.fixed.quantize`), so overflow is still
impossible in the bit-true design.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import signal

GRID = 8192

_ORD = {"butterworth": signal.buttord, "chebyshev1": signal.cheb1ord,
        "chebyshev2": signal.cheb2ord, "elliptic": signal.ellipord}
_FTYPE = {"butterworth": "butter", "chebyshev1": "cheby1", "chebyshev2": "cheby2", "elliptic": "ellip"}


#: (ripple factor, extra attenuation dB) tried in turn for quantization margin
_TIGHTEN = ((0.5, 5.0), (0.6, 4.0), (0.7, 3.0), (0.8, 2.0), (0.85, 1.5), (0.9, 1.0), (0.95, 0.5), (0.97, 0.2))


class IirNotApplicable(ValueError):
    """The spec is not a lowpass/highpass/bandpass/bandstop of pass and stop bands."""


@dataclass
class IirDesign:
    """A floating-point IIR as scaled, ordered second-order sections."""

    response: str
    btype: str
    order: int
    sos: np.ndarray                 # (S, 6): b0 b1 b2 1 a1 a2, L-inf scaled, ordered
    fs: float
    wp: object
    ws: object
    rp_design: float                # ripple (dB) asked of the prototype
    rs_design: float                # attenuation (dB) asked of the prototype
    gain: float                     # c: prototype peak 1 -> c
    ordering: str                   # "up" | "down"
    section_peaks: list = field(default_factory=list)   # peak |input -> section i output|
    notes: list = field(default_factory=list)

    @property
    def n_sections(self) -> int:
        return len(self.sos)

    def multipliers(self) -> int:
        """Non-trivial multiplications per input sample (5 per section minus 0 and +-1 coefficients)."""
        n = 0
        for s in self.sos:
            for v in (s[0], s[1], s[2], s[4], s[5]):
                if abs(v) > 1e-12 and abs(abs(v) - 1.0) > 1e-12:
                    n += 1
        return n

    def as_dict(self) -> dict:
        return {"response": self.response, "btype": self.btype, "order": self.order,
                "sections": self.n_sections, "ordering": self.ordering,
                "multipliers_per_input": self.multipliers(),
                "rp_design_db": self.rp_design, "rs_design_db": self.rs_design,
                "section_peaks": [float(p) for p in self.section_peaks]}


def classify(spec):
    """(btype, wp, ws, gain, ripple_db, atten_db) of an IIR-able spec, else raise IirNotApplicable."""
    kinds = [b.kind for b in spec.bands]
    if any(k == "shaped" for k in kinds):
        raise IirNotApplicable("IIR design takes pass and stop bands only; a shaped band "
                               "(gain = [g_lo, g_hi]) needs family = \"fir\"")
    gains = {b.gain[0] for b in spec.bands if b.kind == "pass"}
    if len(gains) != 1:
        raise IirNotApplicable("IIR design needs one pass-band gain; pass bands with different gains "
                               "need family = \"fir\"")
    g = abs(next(iter(gains)))
    bs = spec.bands
    pat = tuple(kinds)
    P = [b for b in bs if b.kind == "pass"]
    S = [b for b in bs if b.kind == "stop"]
    rp = min(b.ripple_db for b in P)
    A = max(b.atten_db for b in S) if S else None
    if pat == ("pass", "stop"):
        return "lowpass", P[0].hi, S[0].lo, g, rp, A
    if pat == ("stop", "pass"):
        return "highpass", P[0].lo, S[0].hi, g, rp, A
    if pat == ("stop", "pass", "stop"):
        return "bandpass", [P[0].lo, P[0].hi], [S[0].hi, S[1].lo], g, rp, A
    if pat == ("pass", "stop", "pass"):
        return "bandstop", [P[0].hi, P[1].lo], [S[0].lo, S[0].hi], g, rp, A
    raise IirNotApplicable(f"IIR design covers lowpass, highpass, bandpass and bandstop only; this spec's "
                           f"bands are {'/'.join(kinds)}")


def _order(resp, wp, ws, rp, rs, fs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return _ORD[resp](wp, ws, rp, rs, fs=fs)


def peak_gain(sos, fs, n=GRID) -> float:
    """max |H| over [0, fs/2] with a local refinement around the grid maximum."""
    w, h = signal.sosfreqz(sos, worN=np.linspace(0, fs / 2, n + 1), fs=fs)
    a = np.abs(h)
    i = int(np.argmax(a))
    lo, hi = w[max(i - 1, 0)], w[min(i + 1, len(w) - 1)]
    wf = np.linspace(lo, hi, 65)
    _, hf = signal.sosfreqz(sos, worN=wf, fs=fs)
    return float(max(a[i], np.max(np.abs(hf))))


def impulse_length(sos, tol=1e-12, cap=1 << 18) -> int:
    """Samples until the slowest pole's envelope falls below ``tol``."""
    r = max((max(abs(np.roots(s[3:]))) if np.any(s[4:] != 0) else 0.0) for s in np.atleast_2d(sos))
    if r <= 0:
        return 64
    if r >= 1:
        return cap
    n = math.log(tol) / math.log(r)
    return int(min(cap, max(64, math.ceil(n) + 64)))


def noise_gains(sos):
    """Per section i: (L1, L2^2) of the impulse response from section i's output rounding to the filter output.

    A rounding at section i's output enters its own feedback, so the transfer
    is (1/A_i) * H_{i+1} * ... * H_S.
    """
    sos = np.atleast_2d(np.asarray(sos, float))
    n = impulse_length(sos)
    out = []
    for i in range(len(sos)):
        x = np.zeros(n)
        x[0] = 1.0
        v = signal.lfilter([1.0], sos[i, 3:], x)
        if i + 1 < len(sos):
            v = signal.sosfilt(sos[i + 1:], v)
        out.append((float(np.sum(np.abs(v))), float(np.sum(v * v))))
    return out


def linf_scale(sos, fs):
    """Exact L-infinity scaling: peak |input -> section i output| = 1 for i < S; last keeps the total gain."""
    sos = np.array(sos, float)
    peaks = []
    total = 1.0
    for i in range(len(sos)):
        if i < len(sos) - 1:
            p = peak_gain(sos[: i + 1], fs)
            s = 1.0 / p
            sos[i, :3] *= s
            total *= s
        else:
            sos[i, :3] /= total
        peaks.append(peak_gain(sos[: i + 1], fs))
    return sos, peaks


def _pole_radius(sec) -> float:
    a = sec[3:]
    if a[2] == 0 and a[1] == 0:
        return 0.0
    return float(max(abs(np.roots(a if a[2] != 0 else a[:2]))))


def design_iir(spec, *, extra_order: int = 0, ordering: str = "auto") -> IirDesign:
    """Scaled, ordered SOS design of ``spec`` (see the module docstring for the rules)."""
    btype, wp, ws, g, rp, A = classify(spec)
    resp = spec.iir_response
    fs = spec.sample_rate
    A = A if A is not None else 40.0
    rs_base = A + 20 * math.log10(2 / (1 + 10 ** (-rp / 20)))
    n0, _ = _order(resp, wp, ws, rp, rs_base, fs)
    target = int(n0) + extra_order
    chosen = None
    while chosen is None:
        for t_rp, rs_extra in _TIGHTEN:
            rp_t, rs_t = rp * t_rp, rs_base + rs_extra
            n_t, wn_t = _order(resp, wp, ws, rp_t, rs_t, fs)
            if n_t <= target:
                chosen = (rp_t, rs_t, wn_t)
                break
        if chosen is None:
            # the minimum order meets the spec only with equality: one more order buys the margin
            target += 1
    rp_d, rs_d, wn = chosen
    kw = {}
    if resp in ("chebyshev1", "elliptic"):
        kw["rp"] = rp_d
    if resp in ("chebyshev2", "elliptic"):
        kw["rs"] = rs_d
    z, p, k = signal.iirfilter(target, wn, btype=btype, ftype=_FTYPE[resp], output="zpk", fs=fs, **kw)
    # every prototype peaks at 1 and dips to (at most) 10**(-rp/20) in the pass band: centre on g
    c = 2 * g / (1 + 10 ** (-rp_d / 20))
    sos = signal.zpk2sos(z, p, k * c, pairing="nearest")
    radii = [_pole_radius(s) for s in sos]
    up = sos[np.argsort(radii, kind="stable")]
    cands = {"up": up, "down": up[::-1].copy()}
    if ordering != "auto":
        cands = {ordering: cands[ordering]}
    best = None
    for name, s in cands.items():
        scaled, peaks = linf_scale(s, fs)
        ng = sum(l2 for _, l2 in noise_gains(scaled))
        if best is None or ng < best[0] * (1 - 1e-9):
            best = (ng, name, scaled, peaks)
    _, name, scaled, peaks = best
    notes = [f"{resp} {btype} order {target} ({len(scaled)} sections, ordering '{name}'); "
             f"prototype ripple {rp_d:.4g} dB, attenuation {rs_d:.4g} dB"]
    return IirDesign(resp, btype, target, scaled, fs, wp, ws, rp_d, rs_d, c, name, peaks, notes)


def group_delay_spread(sos, spec, n=2048) -> float:
    """max - min group delay (samples) over the pass bands."""
    sos = np.atleast_2d(sos)
    spreads = []
    for b in spec.pass_bands():
        f = np.linspace(b.lo, b.hi, n)
        gd = np.zeros(n)
        for s in sos:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                _, g = signal.group_delay((s[:3], s[3:]), w=f, fs=spec.sample_rate)
            gd += g
        spreads.append(float(np.max(gd) - np.min(gd)))
    return max(spreads) if spreads else 0.0


def sos_mag(sos, freqs, fs) -> np.ndarray:
    """|H| of an SOS cascade at ``freqs`` (Hz)."""
    _, h = signal.sosfreqz(np.atleast_2d(sos), worN=np.asarray(freqs, float), fs=fs)
    return np.abs(h)
