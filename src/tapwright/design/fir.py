"""Linear-phase FIR design from a :class:`~tapwright.spec.Spec`, at minimum length.

Methods (``spec.fir_method``):

- ``equiripple``: Parks-McClellan (``scipy.signal.remez``) with band weights
  ``w_i = 1/delta_i``, so the weighted minimax error E <= 1 exactly when every
  band meets its own deviation (Parks & McClellan, IEEE Trans. CT-19, 1972;
  McClellan, Parks & Rabiner, IEEE Trans. AU-21, 1973).
- ``least_squares``: weighted least squares, ``w_i = 1/delta_i**2`` (the
  integral of the squared error is weighted, so the square makes each band's
  error scale with its own delta). Type I uses ``scipy.signal.firls`` (odd
  lengths only); types II-IV use this module's dense-grid least squares.
- ``kaiser``: Kaiser window (Kaiser 1974; Oppenheim & Schafer, *Discrete-Time
  Signal Processing*, sec. 7.5.3): ``scipy.signal.firwin`` for alternating
  pass/stop bands of one gain, ``firwin2`` otherwise; beta from the smallest
  relative deviation.

Linear-phase types (Oppenheim & Schafer, sec. 5.7.3): I (odd length,
symmetric), II (even, symmetric, H(fs/2) = 0), III (odd, antisymmetric, zero
at 0 and fs/2), IV (even, antisymmetric, zero at 0). A spec with one shaped
band whose gain line goes through the origin (a differentiator, other bands
stop bands) gets an antisymmetric type III/IV design (``remez`` type
``differentiator``). A length whose type forces a zero where the spec wants
gain is never tried.

Halfband: a two-band lowpass with pass gain 1 whose edges are symmetric about
fs/4 is designed with the trick of Vaidyanathan & Nguyen (IEEE Trans. CAS-34,
1987): a one-band type II prototype G of length 2K on [0, 2 f_pass] with
deviation 2*delta (delta = the smaller of the two deviations, i.e. the larger
one is tightened), then ``h = (z**-(2K-1) + G(z**2)) / 2``: length 4K-1, every
other tap exactly zero (by construction, not by rounding) and centre tap
exactly 1/2. It is used when it needs no more distinct multipliers than the
plain equiripple design.

Minimum length: seeded with Herrmann's formula (two-band specs) or Kaiser's
(multiband), then the smallest length of either parity whose response meets
every band on a dense grid (at least 8192 points plus the band edges) is
searched; the result L meets the spec and L-1 and L-2 were tried and do not.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import signal

MAX_TAPS = 4095
MIN_GRID = 8192


class FirDesignError(ValueError):
    """The FIR spec cannot be met (message says what and how far off)."""


# ---------------------------------------------------------------------------------------------
# band checking, shared by the FIR search, the IIR design and quantization


@dataclass
class BandCheck:
    """One band's requirement and what the float and quantized designs achieve.

    ``required``/``achieved_*``: pass band: ripple in dB (peak to peak, from the
    largest deviation around the band gain: 20*log10((1+e)/(1-e))); stop band:
    attenuation in dB below the reference (largest pass) gain; shaped band:
    largest absolute error. ``margin >= 0`` means met, in the same unit.
    """

    index: int
    kind: str
    edges: tuple[float, float]
    required: float
    achieved_float: float
    achieved_quant: float
    margin: float

    @property
    def met(self) -> bool:
        return self.margin >= 0

    def as_dict(self) -> dict:
        return {"index": self.index, "kind": self.kind, "edges": list(self.edges),
                "required": _finite(self.required), "achieved_float": _finite(self.achieved_float),
                "achieved_quant": _finite(self.achieved_quant), "margin": _finite(self.margin),
                "unit": "abs" if self.kind == "shaped" else "dB", "met": self.met}


def _finite(v):
    v = float(v)
    return v if math.isfinite(v) else None


def reference_gain(spec) -> float:
    """The gain stop-band attenuation is measured from: the largest pass/shaped gain."""
    g = [abs(v) for b in spec.bands if b.kind != "stop" for v in b.gain]
    return max(g) if g else 1.0


def grid_points(ntaps: int) -> int:
    """Uniform grid size over [0, fs/2]: >= 8192 and >= 16 points per tap, a power of two."""
    n = max(MIN_GRID, 16 * max(1, ntaps))
    return 1 << (n - 1).bit_length()


def check_grid(spec, ntaps: int) -> np.ndarray:
    """Frequencies (Hz): a uniform grid over [0, fs/2] inclusive plus every band edge."""
    n = grid_points(ntaps)
    f = np.linspace(0.0, spec.nyquist, n + 1)
    edges = [e for b in spec.bands for e in (b.lo, b.hi)]
    return np.concatenate([f, np.asarray(edges, float)])


def fir_mag(taps, freqs, fs) -> np.ndarray:
    """|H| of an FIR at ``freqs`` (Hz); FFT for the uniform part, direct sums for the edges."""
    taps = np.asarray(taps, float)
    freqs = np.asarray(freqs, float)
    nyq = fs / 2
    # recognise check_grid's layout: n+1 uniform points then a few edges
    n_uni = _uniform_prefix(freqs, nyq)
    out = np.empty(len(freqs))
    if n_uni:
        # freqz with include_nyquist: exactly linspace(0, fs/2, n_uni), by FFT
        out[:n_uni] = np.abs(signal.freqz(taps, 1.0, worN=n_uni, include_nyquist=True, fs=fs)[1])
    rest = freqs[n_uni:]
    if len(rest):
        out[n_uni:] = np.abs(signal.freqz(taps, 1.0, worN=rest, fs=fs)[1])
    return out


def _uniform_prefix(freqs, nyq) -> int:
    """Length of a leading ``linspace(0, nyq, n+1)`` in ``freqs`` (0 if none)."""
    if len(freqs) < 3 or freqs[0] != 0.0:
        return 0
    # find the index of nyq
    idx = np.flatnonzero(freqs == nyq)
    for i in idx:
        n = int(i)
        if n >= 2 and np.allclose(freqs[: n + 1], np.linspace(0.0, nyq, n + 1), rtol=0, atol=nyq * 1e-12):
            return n + 1
    return 0


def band_achieved(spec, freqs, mag) -> list[tuple[float, float, float]]:
    """Per band: (required, achieved, margin) from |H| on ``freqs`` (see :class:`BandCheck`)."""
    ref = reference_gain(spec)
    res = []
    for b in spec.bands:
        m = (freqs >= b.lo) & (freqs <= b.hi)
        h = mag[m]
        if b.kind == "pass":
            g = abs(b.gain[0])
            e = float(np.max(np.abs(h - g))) / g
            ach = 20 * math.log10((1 + e) / (1 - e)) if e < 1 else math.inf
            res.append((b.ripple_db, ach, b.ripple_db - ach))
        elif b.kind == "stop":
            peak = float(np.max(h))
            ach = 20 * math.log10(ref / peak) if peak > 0 else math.inf
            res.append((b.atten_db, ach, ach - b.atten_db))
        else:
            d = np.abs(b.desired(freqs[m]))
            ach = float(np.max(np.abs(h - d)))
            res.append((b.tolerance, ach, b.tolerance - ach))
    return res


def meets(spec, freqs, mag) -> bool:
    return all(m >= 0 for _, _, m in band_achieved(spec, freqs, mag))


def worst_shortfall(spec, freqs, mag) -> str:
    """Plain words for the band furthest from its requirement."""
    worst, msg = 0.0, "all bands met"
    for i, (req, ach, mar) in enumerate(band_achieved(spec, freqs, mag)):
        b = spec.bands[i]
        rel = -mar / (req if b.kind == "shaped" else 1.0)
        if mar < 0 and rel > worst:
            worst = rel
            unit = "" if b.kind == "shaped" else " dB"
            what = {"pass": "ripple", "stop": "attenuation", "shaped": "error"}[b.kind]
            if math.isinf(ach):   # a pass band whose error reaches the gain: no dB figure
                msg = (f"band {i + 1} ({b.kind}, {b.lo:g}-{b.hi:g} Hz): the response departs "
                       f"from the band's gain by the gain itself or more ({req:.4g}{unit} "
                       f"ripple required)")
            else:
                msg = (f"band {i + 1} ({b.kind}, {b.lo:g}-{b.hi:g} Hz) {what} {ach:.4g}{unit} "
                       f"against {req:.4g}{unit} required ({-mar:.3g}{unit} short)")
    return msg


# ---------------------------------------------------------------------------------------------
# order estimates


def kaiser_pm_length(dp: float, ds: float, df: float) -> int:
    """Kaiser's equiripple length estimate (Kaiser 1974; Oppenheim & Schafer eq. 7.117).

    Order M = (-10*log10(dp*ds) - 13) / (14.6*df), df the transition width over fs;
    returns the length ceil(M) + 1.
    """
    m = (-10 * math.log10(dp * ds) - 13) / (14.6 * df)
    return max(1, int(math.ceil(m)) + 1)


HERRMANN_A = (5.309e-3, 7.114e-2, -4.761e-1, -2.66e-3, -5.941e-1, -4.278e-1)


def herrmann_length(dp: float, ds: float, df: float) -> int:
    """Herrmann, Rabiner & Chan (Bell Syst. Tech. J. 52(6), 1973) length estimate, two bands.

    L = D_inf(dp, ds)/df - f(dp, ds)*df + 1 with the fitted D_inf and f of the
    paper (log10, dp >= ds; the two are swapped otherwise); returns ceil(L).
    """
    if dp < ds:
        dp, ds = ds, dp
    lp, ls = math.log10(dp), math.log10(ds)
    a1, a2, a3, a4, a5, a6 = HERRMANN_A
    dinf = (a1 * lp * lp + a2 * lp + a3) * ls + (a4 * lp * lp + a5 * lp + a6)
    f = 11.01217 + 0.51244 * (lp - ls)
    return max(1, int(math.ceil(dinf / df - f * df + 1)))


def kaiser_beta(atten_db: float) -> float:
    """Kaiser window shape parameter for stop-band attenuation A = -20*log10(delta) (O&S eq. 7.75)."""
    a = atten_db
    if a > 50:
        return 0.1102 * (a - 8.7)
    if a >= 21:
        return 0.5842 * (a - 21) ** 0.4 + 0.07886 * (a - 21)
    return 0.0


def kaiser_window_order(atten_db: float, dw: float) -> int:
    """Kaiser window order M = ceil((A - 8) / (2.285*dw)), dw the transition width in rad/sample (O&S eq. 7.76)."""
    return max(1, int(math.ceil((atten_db - 8) / (2.285 * dw))))


def _transitions(spec):
    """(df over fs, delta_left relative, delta_right relative) for every gap between bands."""
    ref = reference_gain(spec)
    out = []
    bs = spec.bands
    for b0, b1 in zip(bs, bs[1:]):
        gap = b1.lo - b0.hi
        d0, d1 = _rel_dev(b0, ref), _rel_dev(b1, ref)
        if gap <= 0:
            if _edge_gain(b0, b0.hi) != _edge_gain(b1, b1.lo):
                raise FirDesignError(f"bands at {b0.hi:g} Hz touch with different gains: "
                                     "no filter has a zero-width transition")
            continue
        out.append((gap / spec.sample_rate, d0, d1, b0, b1))
    return out


def _edge_gain(b, f):
    return float(b.desired(f))


def _rel_dev(b, ref):
    if b.kind == "pass":
        return b.deviation() / abs(b.gain[0])
    if b.kind == "stop":
        return b.deviation(1.0)
    return b.tolerance / max(max(abs(g) for g in b.gain), 1e-30)


def estimate_length(spec) -> tuple[int, str]:
    """Seed length for the search and the formula used."""
    tr = _transitions(spec)
    if not tr:
        return 8, "none (no transition band)"
    if len(tr) == 1 and {tr[0][3].kind, tr[0][4].kind} == {"pass", "stop"}:
        df, d0, d1, b0, b1 = tr[0]
        dp, ds = (d0, d1) if b0.kind == "pass" else (d1, d0)
        return herrmann_length(dp, ds, df), "herrmann"
    return max(kaiser_pm_length(d0, d1, df) for df, d0, d1, _, _ in tr), "kaiser"


# ---------------------------------------------------------------------------------------------
# design


@dataclass
class FirDesign:
    """A floating-point linear-phase FIR and how it was found."""

    taps: np.ndarray
    method: str                 # equiripple | least_squares | kaiser | halfband
    fir_type: int               # 1..4
    halfband: bool
    fs: float
    estimate: int
    estimate_formula: str
    tried: dict = field(default_factory=dict)   # length -> met
    beta: float | None = None
    notes: list = field(default_factory=list)

    @property
    def ntaps(self) -> int:
        return len(self.taps)

    @property
    def order(self) -> int:
        return len(self.taps) - 1

    @property
    def symmetric(self) -> bool:
        return self.fir_type in (1, 2)

    def multipliers(self) -> int:
        """Distinct non-trivial multiplications per output with symmetry folding.

        Halfband: the zero taps and the centre tap 1/2 (a shift) cost nothing.
        """
        t = np.asarray(self.taps)
        nz = np.flatnonzero(t != 0)
        if self.halfband:
            c = (len(t) - 1) // 2
            nz = nz[nz != c]
        half = [i for i in nz if i <= (len(t) - 1) - i]
        # a type III centre is zero; a type I centre is its own mirror
        return len(half)

    def as_dict(self) -> dict:
        d = {"method": self.method, "length": self.ntaps, "order": self.order, "fir_type": self.fir_type,
             "halfband": self.halfband, "estimate": self.estimate, "estimate_formula": self.estimate_formula,
             "multipliers": self.multipliers()}
        if self.beta is not None:
            d["kaiser_beta"] = self.beta
        return d


def _differentiator_band(spec):
    """The shaped band of a differentiator spec (gain line through the origin, others stop), else None."""
    shaped = [b for b in spec.bands if b.kind == "shaped"]
    if len(shaped) != 1 or any(b.kind == "pass" for b in spec.bands):
        return None
    b = shaped[0]
    g0, g1 = b.gain
    if g1 == g0:
        return None
    slope = (g1 - g0) / (b.hi - b.lo)
    if abs(g0 - slope * b.lo) > 0.5 * b.tolerance or abs(g1) < abs(g0):
        return None
    return b


def halfband_eligible(spec) -> bool:
    """Two bands, pass [0, fp] of gain 1 and stop [fs_b, fs/2], fp + fs_b = fs/2."""
    if len(spec.bands) != 2:
        return False
    p, s = spec.bands
    if p.kind != "pass" or s.kind != "stop" or p.gain[0] != 1.0 or p.lo != 0.0:
        return False
    nyq = spec.nyquist
    return abs(s.hi - nyq) <= 1e-12 * nyq and abs(p.hi + s.lo - nyq) <= 1e-9 * nyq


def _nyquist_gain(spec) -> float:
    """Desired gain at fs/2 (0 if no band reaches it)."""
    for b in spec.bands:
        if b.hi >= spec.nyquist * (1 - 1e-12):
            return float(abs(b.desired(b.hi)))
    return 0.0


def _allowed(L, antisym, spec) -> bool:
    """Can a length-L filter of this symmetry meet the spec's gain at 0 and fs/2 at all?"""
    if L < 1:
        return False
    odd = L % 2 == 1
    nyq_gain = _nyquist_gain(spec)
    if antisym:
        return (not odd) or nyq_gain == 0.0  # type III is zero at fs/2
    return odd or nyq_gain == 0.0            # type II is zero at fs/2


def _remez_setup(spec, diff_band):
    ref = reference_gain(spec)
    edges, desired, weight = [], [], []
    for b in spec.bands:
        edges += [b.lo, b.hi]
        if b is diff_band:
            slope = (b.gain[1] - b.gain[0]) / (b.hi - b.lo)
            desired.append(abs(slope) * spec.sample_rate)     # remez: |H(f)| = D * f / fs
            weight.append((b.hi / spec.sample_rate) / b.tolerance)  # remez divides by f/fs
        elif b.kind == "stop":
            desired.append(0.0)
            weight.append(1.0 / b.deviation(ref))
        elif b.kind == "pass":
            desired.append(abs(b.gain[0]))
            weight.append(1.0 / b.deviation())
        else:
            raise FirDesignError("equiripple (remez) takes constant-gain bands only")
    return edges, desired, weight


def remez_taps(spec, L, *, diff_band=None, maxiter=40):
    """One Parks-McClellan run at length L with weights 1/delta (None if remez fails)."""
    edges, desired, weight = _remez_setup(spec, diff_band)
    kind = "differentiator" if diff_band is not None else "bandpass"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            h = signal.remez(L, edges, desired, weight=weight, type=kind, fs=spec.sample_rate,
                             maxiter=maxiter)
        except Exception:  # noqa: BLE001 - remez signals non-convergence in several ways
            return None
    if not np.all(np.isfinite(h)):
        return None
    return np.asarray(h, float)


def _ls_weights(spec):
    ref = reference_gain(spec)
    w = []
    for b in spec.bands:
        d = b.deviation(ref) if b.kind == "stop" else b.deviation()
        w.append(1.0 / d ** 2)
    return w


def firls_taps(spec, L):
    """Weighted least squares at odd length L via ``scipy.signal.firls`` (type I)."""
    edges, desired = [], []
    for b in spec.bands:
        edges += [b.lo, b.hi]
        desired += [abs(b.gain[0]), abs(b.gain[1])]
    return signal.firls(L, edges, desired, weight=_ls_weights(spec), fs=spec.sample_rate)


def ls_taps_grid(spec, L, antisym: bool, npts: int | None = None):
    """Dense-grid weighted least squares for any linear-phase type (own code).

    The amplitude A(w) of a length-L linear-phase filter is a sum of cosines
    (symmetric) or sines (antisymmetric) in k*w or (k-1/2)*w; the basis
    coefficients solve min sum_j W_j (A(w_j) - D_j)^2 over a grid inside the
    bands (weights 1/delta**2 per band, times the grid spacing).
    """
    fs = spec.sample_rate
    npts = npts or max(4096, 16 * L)
    fgrid, dgrid, wgrid = [], [], []
    w = _ls_weights(spec)
    for b, wi in zip(spec.bands, w):
        n = max(16, int(npts * (b.hi - b.lo) / spec.nyquist))
        f = np.linspace(b.lo, b.hi, n)
        fgrid.append(f)
        dgrid.append(np.abs(b.desired(f)))
        wgrid.append(np.full(n, wi * (b.hi - b.lo) / n))
    f = np.concatenate(fgrid)
    d = np.concatenate(dgrid)
    wt = np.sqrt(np.concatenate(wgrid))
    om = 2 * np.pi * f / fs
    M = (L - 1) / 2.0
    if antisym:
        ks = np.arange(1, L // 2 + 1)   # h[n] = -h[L-1-n]; A = sum 2 h[M-k'] sin(k' w) with k' = M - n
        kk = M - (ks - 1)               # distances from the centre: M, M-1, ... > 0
        basis = 2 * np.sin(np.outer(om, kk))
    else:
        n_half = (L + 1) // 2
        kk = M - np.arange(n_half)      # M, M-1, ..., >= 0
        basis = 2 * np.cos(np.outer(om, kk))
        if L % 2 == 1:
            basis[:, -1] = 1.0          # centre tap
    A = basis * wt[:, None]
    # normal equations: the cosine/sine basis on a dense grid is close to orthogonal (well conditioned)
    sol = np.linalg.solve(A.T @ A, A.T @ (d * wt))
    h = np.zeros(L)
    if antisym:
        h[: L // 2] = sol
        h[L - 1 - np.arange(L // 2)] = -sol
    else:
        n_half = (L + 1) // 2
        h[:n_half] = sol
        h[L - 1 - np.arange(n_half)] = sol
    return h


def kaiser_taps(spec, L, beta, antisym=False):
    """Kaiser-window design at length L: firwin for alternating pass/stop of one gain, firwin2 otherwise."""
    fs = spec.sample_rate
    bs = spec.bands
    kinds = [b.kind for b in bs]
    pass_gains = {b.gain[0] for b in bs if b.kind == "pass"}
    alternating = (not antisym and all(k in ("pass", "stop") for k in kinds)
                   and all(a != c for a, c in zip(kinds, kinds[1:])) and len(pass_gains) == 1)
    if alternating:
        cut = [(b0.hi + b1.lo) / 2 for b0, b1 in zip(bs, bs[1:])]
        pass_zero = kinds[0] == "pass"
        h = signal.firwin(L, cut, window=("kaiser", beta), pass_zero=pass_zero, scale=True, fs=fs)
        return h * abs(next(iter(pass_gains)))
    # piecewise-linear desired through the transitions, extended to 0 and fs/2
    freq, gain = [], []
    for b in bs:
        freq += [b.lo, b.hi]
        gain += [abs(b.desired(b.lo)), abs(b.desired(b.hi))]
    if freq[0] > 0:
        freq.insert(0, 0.0)
        gain.insert(0, 0.0 if antisym else gain[0])
    if freq[-1] < spec.nyquist:
        freq.append(spec.nyquist)
        gain.append(gain[-1] if (L % 2 == 1 and not antisym) else 0.0)
    if antisym:
        gain[0] = 0.0
        if L % 2 == 1:
            gain[-1] = 0.0
    elif L % 2 == 0:
        gain[-1] = 0.0
    freq = np.asarray(freq)
    # firwin2 needs strictly increasing inner points: nudge touching edges
    for i in range(1, len(freq)):
        if freq[i] <= freq[i - 1]:
            freq[i] = freq[i - 1] + 1e-9 * spec.nyquist
    freq[-1] = spec.nyquist
    nfreqs = 1 + (1 << max(9, (L - 1).bit_length() + 2))
    return signal.firwin2(L, freq, gain, nfreqs=nfreqs, window=("kaiser", beta), fs=fs,
                          antisymmetric=antisym)


#: scipy's remez grid has about 16 points per extremal over [0, fs/2]: a one-band prototype on
#: [0, 2 f_pass] gets fewer grid points than extremals when f_pass / fs < 1/64 (NaN taps, or worse)
_HB_REMEZ_MIN_FRAC = 1.0 / 64


def _halfband_prototype_lp(K, band_hi, fs):
    """Type II prototype of length 2K minimising max |G - 1| on [0, band_hi] (dense-grid LP), or None.

    Own fallback for :func:`halfband_taps` where the one-band remez fails: the amplitude is
    G(w) = sum_k 2 g_k cos((k - 1/2) w), k = 1..K, and min t s.t. |G(w_j) - 1| <= t on the grid;
    a least-squares fit (SVD) when the LP fails.
    """
    from scipy.optimize import linprog

    n = max(64, 32 * K)
    w = 2 * np.pi * np.linspace(0.0, band_hi, n) / fs
    B = 2 * np.cos(np.outer(w, np.arange(K, 0, -1) - 0.5))    # columns: taps 0..K-1 (distance K-1/2 .. 1/2)
    ones = np.ones(n)
    A = np.vstack([np.hstack([B, -ones[:, None]]), np.hstack([-B, -ones[:, None]])])
    cost = np.zeros(K + 1)
    cost[-1] = 1.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            res = linprog(cost, A_ub=A, b_ub=np.concatenate([ones, -ones]),
                          bounds=[(None, None)] * K + [(0, None)], method="highs")
            x = res.x[:K] if res.success else None
        except Exception:  # noqa: BLE001
            x = None
    if x is None or not np.all(np.isfinite(x)):
        x = np.linalg.lstsq(B, ones, rcond=None)[0]
    if not np.all(np.isfinite(x)):
        return None
    return np.concatenate([x, x[::-1]])


def halfband_taps(spec, K):
    """Vaidyanathan-Nguyen halfband of length 4K-1 from a length-2K type II prototype.

    The prototype is remez's one-band design; for very wide transitions (f_pass / fs < 1/64, where
    remez's grid is too coarse for the band) or when remez fails or returns non-finite taps, the
    same minimax problem is solved by a small linear program instead
    (:func:`_halfband_prototype_lp`). Every other tap is exactly zero and the centre exactly 1/2
    either way.
    """
    p = spec.bands[0]
    fs = spec.sample_rate
    g = None
    if p.hi / fs >= _HB_REMEZ_MIN_FRAC:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                g = signal.remez(2 * K, [0.0, 2 * p.hi], [1.0], weight=[1.0], fs=fs, maxiter=40)
            except Exception:  # noqa: BLE001
                g = None
    if g is None or not np.all(np.isfinite(g)):
        g = _halfband_prototype_lp(K, 2 * p.hi, fs)
        if g is None:
            return None
    h = np.zeros(4 * K - 1)
    h[0::2] = g / 2.0
    h[2 * K - 1] = 0.5
    return h


def minimum_length(meets_fn, start: int, max_len: int = MAX_TAPS):
    """Smallest L in [1, max_len] with ``meets_fn(L)``, searched from ``start``.

    Lengths of both parities are tried: a step finds a bracket (stepping up with
    growing strides), a bisection narrows it, and a final descent moves down
    while L-1 or L-2 still meets, so the answer L has L-1 and L-2 failing.
    Returns (L or None, {L: met}).
    """
    cache: dict[int, bool] = {}

    def m(L):
        if L < 1 or L > max_len:
            return False
        if L not in cache:
            cache[L] = bool(meets_fn(L))
        return cache[L]

    def pair(L):
        return m(L) or m(L + 1)

    L = min(max(start, 1), max_len)
    if pair(L):
        best = L if m(L) else L + 1
    else:
        lo, step, hi = L, 2, None
        cur = L + step
        while True:
            cur = min(cur, max_len)
            if pair(cur):
                hi = cur
                break
            lo = cur
            if cur >= max_len:
                return None, cache
            step = int(math.ceil(step * 1.5))
            cur += step
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if pair(mid):
                hi = mid
            else:
                lo = mid
        best = hi if m(hi) else hi + 1
    while True:
        c = [x for x in (best - 1, best - 2) if m(x)]
        if not c:
            break
        best = min(c)
    return best, cache


def design_fir(spec, *, min_length: int = 1, max_length: int = MAX_TAPS) -> FirDesign:
    """Minimum-length linear-phase FIR meeting every band of ``spec`` (float coefficients).

    ``min_length`` lets a caller ask for a longer filter (more margin for
    coefficient quantization). Raises :class:`FirDesignError` when no length up
    to ``max_length`` (4095) works, saying how far the longest try was off.
    """
    fs = spec.sample_rate
    method = spec.fir_method
    notes: list[str] = []
    est, formula = estimate_length(spec)
    diff_band = _differentiator_band(spec)
    antisym = diff_band is not None
    has_shaped = any(b.kind == "shaped" for b in spec.bands)
    if method == "equiripple" and has_shaped and not antisym:
        notes.append("equiripple (remez) takes constant-gain bands only; the shaped band was designed "
                     "by weighted least squares")
        method = "least_squares"

    taps_at: dict[int, np.ndarray] = {}
    beta = None
    if method == "kaiser":
        dmin = min(_rel_dev(b, reference_gain(spec)) for b in spec.bands)
        A = -20 * math.log10(dmin)
        beta = kaiser_beta(A)
        tr = _transitions(spec)
        if tr:
            dfmin = min(t[0] for t in tr)
            est = kaiser_window_order(A, 2 * math.pi * dfmin) + 1
            formula = "kaiser_window"

    def build(L):
        if method == "equiripple":
            return remez_taps(spec, L, diff_band=diff_band)
        if method == "least_squares":
            if not antisym and L % 2 == 1:
                return firls_taps(spec, L)
            return ls_taps_grid(spec, L, antisym)
        try:
            return kaiser_taps(spec, L, beta, antisym)
        except ValueError:
            return None

    def ok(L):
        if L < min_length or not _allowed(L, antisym, spec):
            return False
        if method == "least_squares" and not antisym and L % 2 == 0 and L > 1024:
            return False  # dense least squares for long type II: use odd lengths
        h = build(L)
        if h is None:
            return False
        taps_at[L] = h
        f = check_grid(spec, L)
        return meets(spec, f, fir_mag(h, f, fs))

    # halfband candidate
    hb = None
    if method == "equiripple" and halfband_eligible(spec):
        hb_taps: dict[int, np.ndarray] = {}

        def ok_hb(K):
            L = 4 * K - 1
            if L < min_length:
                return False
            h = halfband_taps(spec, K)
            if h is None:
                return False
            hb_taps[K] = h
            f = check_grid(spec, L)
            return meets(spec, f, fir_mag(h, f, fs))

        p, s = spec.bands
        d = min(p.deviation(), s.deviation(1.0))
        k0 = max(1, int(round((kaiser_pm_length(d, d, (s.lo - p.hi) / fs) + 1) / 4)))
        K, tried = minimum_length(ok_hb, k0, (max_length + 1) // 4)
        if K is not None:
            hb = FirDesign(hb_taps[K], "halfband", 1, True, fs, 4 * k0 - 1, "kaiser (halfband, equal deltas)",
                           {4 * k: v for k, v in tried.items()},
                           notes=[f"halfband: deltas made equal ({d:.3g}); every other tap is exactly zero, "
                                  "centre tap 1/2"])

    start = max(est, min_length)
    L, tried = minimum_length(ok, start, max_length)
    if L is None:
        if hb is not None:
            return hb
        longest = max((k for k in taps_at), default=None)
        if longest is None:
            raise FirDesignError(f"no FIR design could be computed for lengths up to {max_length} "
                                 f"(method {method})")
        f = check_grid(spec, longest)
        raise FirDesignError(f"no FIR of length <= {max_length} meets the spec (method {method}); at length "
                             f"{longest}: {worst_shortfall(spec, f, fir_mag(taps_at[longest], f, fs))}")
    h = taps_at[L]
    ftype = (3 if L % 2 else 4) if antisym else (1 if L % 2 else 2)
    fd = FirDesign(h, method, ftype, False, fs, est, formula, tried, beta, notes)
    if hb is not None and hb.multipliers() <= fd.multipliers():
        hb.notes.append(f"halfband length {hb.ntaps} ({hb.multipliers()} multipliers) chosen over the plain "
                        f"equiripple length {L} ({fd.multipliers()} multipliers)")
        return hb
    return fd
