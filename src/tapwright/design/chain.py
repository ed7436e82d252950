"""Multistage decimation: plan, design, quantize and check chains of CIC / FIR / halfband stages.

Method
------
Multistage decimation after R. E. Crochiere and L. R. Rabiner ("Optimum FIR
digital filter implementations for decimation, interpolation, and narrow-band
filtering", IEEE Trans. ASSP 23(5), 1975; *Multirate Digital Signal
Processing*, Prentice-Hall 1983, ch. 5; both from memory): a decimation by
D = D1 D2 ... DK is done in K stages; every stage keeps the pass band [0, f_p]
and only has to remove what would fold, after its own rate change, onto
frequencies that the following stages cannot remove any more. Early stages
therefore get wide transition bands, which is where the saving comes from.

Stage bands (the rule used here, in its multiband form). Let S be the union of
the spec's stop bands (input-rate frequencies, each with its attenuation) and
C = [0, F_out/2] minus S the part of the stage's output band that the later
stages pass or treat as transition (for a lowpass spec: [0, f_stop)). A stage
with input rate F_in and output rate F_out = F_in / D_i must attenuate

    Stop_i = S  &  [0, F_in/2]  &  union over k >= 1 of (k F_out +- C),

i.e. exactly the stop-band frequencies that fold into C. Everything else of S
folds into S at the lower rate and is rejected by the later stages, whose
responses repeat with period F_out (noble identity). The last stage takes
Stop_K = S & [0, F_in/2]. For a lowpass spec this is the classical
[k F_out - f_stop, k F_out + f_stop] set; for D_i = 2 it is the single band
[F_out - f_stop, F_in/2]. Between those bands a stage is free, but a large
gain there would multiply the later stages' rejection, so these "don't care"
regions get a loose stop band |H| <= 10^(-LOOSE_DB/20) (< 1).

Every stage gets the full stop-band attenuation plus STOP_MARGIN_DB (the
products with the other stages' pass-band gains and the coefficient rounding
need a little room). The pass-band ripple (dB, peak to peak) is split:
halfbands need delta_p = delta_s anyway, which costs them a tiny ripple r_hb;
the rest, times RIPPLE_SAFETY, is divided equally (in dB) among the other
stages, a CIC and its compensator counting as one (Crochiere & Rabiner split
delta_p equally among the stages; equal shares in dB are the same to first
order).

Stage kinds
-----------
- CIC (first stage only, decimation R, M = 1): order N, the smallest <= N_MAX
  whose alias rejection on Stop_1 meets the attenuation (no multipliers);
  word lengths by Hogenauer's pruning (:mod:`.cic`).
- Compensator: a linear-phase FIR right after the CIC (decimation 1, 2, ...),
  designed by minimax on a dense grid, solved as a linear program
  (L. R. Rabiner, "Linear program design of finite impulse response (FIR)
  digital filters", IEEE Trans. Audio Electroacoust. 20(4), 1972; from
  memory): minimise t with |C(f) A(f) - 1| <= t delta_p on the pass band,
  C the CIC's normalized sinc^N response, A the compensator's amplitude,
  |A| <= t delta_s on its Stop_i and |A| <= t delta_loose on the don't-care
  bands; t <= 1 means met. So the pair CIC x compensator is flat over the pass
  band to its ripple share. The LP on the whole dense grid is slow at a few
  hundred taps, so it is solved by exchange (cutting planes, :func:`minimax_fir`):
  LPs on small subsets of the grid, each adding the whole-grid error peaks, until
  the whole-grid error is within 1e-7 (relative) of the subset's optimum. In the
  length search each length starts from the error peaks of the nearest length
  already solved and stops as soon as a subset optimum (a lower bound) exceeds 1. The CIC gain (RM)^N is normalised here: the
  compensator's coefficients are scaled by 1/(RM)^N before quantization (for a
  power of two: the same integers, coeff_frac + log2 G).
- Halfband (/2): Vaidyanathan & Nguyen's construction (design helper's
  :func:`~.fir.halfband_taps`) with pass edge f_h = max(f_p, F_in/2 - min Stop_i)
  so that its stop band [F_in/2 - f_h, F_in/2] covers Stop_i; allowed when
  f_h < F_in/4. Every other tap is exactly zero, the centre exactly 1/2.
- FIR (polyphase, any factor): equiripple (the design helper's remez wrapper
  :func:`~.fir.remez_taps`, band check :func:`~.fir.meets` and search
  :func:`~.fir.minimum_length`), weights 1/delta. For D_i > 2 the minimum
  length with one stop band [min Stop_i, F_in/2] is found first, then the
  multiband version (Stop_i bands, loose bands between them) is tried from that
  length downwards and kept when shorter (remez with many bands may fail to
  converge near the minimum; walking down from a known length cannot go
  astray). A /2 stage uses :func:`~.fir.design_fir`, which picks a halfband
  itself when the bands allow one. Where remez fails altogether, the linear
  program below designs the stage.

Checks
------
The overall response is that of the equivalent single-rate filter by the noble
identities, H(z) = H1(z) H2(z^D1) H3(z^(D1 D2)) ..., computed exactly as the
convolution of the stages' (zero-stuffed) quantized impulse responses
(:func:`equivalent_taps`) and evaluated on a dense grid over [0, fs/2]
(16 points per equivalent tap, at least 8192, plus every band edge). Since the
output keeps every D-th sample of that filter's output, an input frequency f
reaches the output as |H(f)| at the alias of f; so checking |H| against the
spec's bands over the whole input band is the same test a single-stage
decimator passes, aliasing included. In addition the alias bands
(:func:`alias_bands`: what folds into the final pass band) are checked
explicitly against the smallest attenuation of the stop bands they meet.

Quantization and formats
------------------------
Coefficients: the smallest word that keeps the quantized stage within its own
stage spec (design helper's :func:`~tapwright.fixed.quantize.min_fir_coeff_bits`,
and the same search on the CIC x compensator pair). Outputs: every stage
rounds (design's rounding) to frac_i = in_frac + ceil(0.5 log2(4 K c Sg_i / Sh)),
Sg_i the noise power gain (sum of squares of the equivalent taps) of the stages
after i, Sh that of the whole chain, K the number of stages, c = 2 for a
pruned CIC (Hogenauer's allocation doubles the output truncation noise) and 1
otherwise: each stage's rounding then adds at most 1/(4K) of the input's own
quantization noise at the output (6 dB under it in total). Word lengths from the
exact L1 bound (no overflow possible; CIC: its exact bound with truncation
errors). The last stage: the spec's output format, or auto (frac = in_frac +
the design helper's guard bits, bits from the L1 bound).

Cost: ``mults_per_input`` = sum over stages of (non-zero coefficients, the
halfband's centre 1/2 excluded) / D_i x (stage input rate / chain input rate):
a polyphase decimator computes only the outputs it keeps. No symmetry folding
(``mults_per_input_folded`` has that), so it compares with L/D of a
single-stage polyphase decimator of length L.
"""
from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..fixed.formats import Fmt, bits_for_range, shift_round
from ..fixed.quantize import (MAX_COEFF_BITS, fir_extremes, guard_bits, min_fir_coeff_bits, quantize_taps,
                              rounding_stats)
from ..fixed.stages import CicStage, FirStage, FixedDesign
from ..spec import Band
from .cic import (cic_bmax, cic_droop_db, cic_error_stats, cic_gain, cic_min_order, cic_response, cic_taps,
                  make_cic_stage)
from .fir import (BandCheck, FirDesignError, band_achieved, check_grid, design_fir, fir_mag, halfband_taps,
                  herrmann_length, kaiser_pm_length, meets, minimum_length, reference_gain, remez_taps)

__all__ = ["ChainDesign", "plan_chains", "chain_applicable", "chain_response", "equivalent_taps",
           "alias_bands", "alias_detail", "chain_candidates", "stage_stop_bands", "design_chain", "enumerate_chains", "minimax_fir"]

#: highest CIC order tried
N_MAX = 6
#: extra attenuation every stage is designed for (dB)
STOP_MARGIN_DB = 1.0
#: fraction of the pass-band ripple budget the stages may use
RIPPLE_SAFETY = 0.95
#: loose stop band in the don't-care regions: |H| <= 10**(-LOOSE_DB/20)
LOOSE_DB = 0.5
#: largest CIC pass-band droop the compensator is asked to undo (dB)
MAX_DROOP_DB = 12.0
#: at most this many stages per chain
MAX_STAGES = 5
#: longest FIR stage
MAX_STAGE_TAPS = 1024


@dataclass
class ChainDesign:
    """One multistage decimator: its stages, quantized design, checks and cost."""

    name: str
    stages_desc: list
    fixed: FixedDesign
    band_checks: list
    ok: bool
    mults_per_input: float
    mults_per_input_folded: float = 0.0
    estimate: float = 0.0
    noise: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    float_taps: list = field(default_factory=list)     # per stage, float (real gain), for plots
    alias_detail: list = field(default_factory=list)   # per alias band (see :func:`alias_detail`)

    @property
    def structure(self) -> str:
        return "chain"

    @property
    def stage_structures(self) -> list:
        return [d["structure"] for d in self.stages_desc]

    def as_dict(self) -> dict:
        return {"name": self.name, "structure": "chain", "stages": self.stage_structures,
                "stages_desc": [dict(d) for d in self.stages_desc], "ok": self.ok,
                "mults_per_input": self.mults_per_input, "mults_per_input_folded": self.mults_per_input_folded,
                "estimate_mults_per_input": self.estimate,
                "decimation": self.fixed.decimation, "decimation_phase": self.fixed.decimation_phase,
                "input": self.fixed.in_fmt.as_dict(), "output": self.fixed.out_fmt.as_dict(),
                "rounding": self.fixed.rounding, "overflow": self.fixed.overflow,
                "fixed_stages": [s.as_dict() for s in self.fixed.stages],
                "band_checks": [c.as_dict() for c in self.band_checks],
                "alias_bands": [{k: _num(v) for k, v in d.items()} for d in self.alias_detail],
                "noise": {k: _num(v) if not isinstance(v, list) else [_num(x) for x in v]
                          for k, v in self.noise.items()},
                "notes": list(self.notes)}


def _num(v):
    if isinstance(v, (float, np.floating)):
        v = float(v)
        return v if math.isfinite(v) else None
    return v


# ---------------------------------------------------------------------------------------------
# intervals


def _merge(iv):
    iv = sorted((float(a), float(b)) for a, b in iv if b > a)
    out = []
    for a, b in iv:
        if out and a <= out[-1][1]:
            out[-1] = (out[-1][0], max(out[-1][1], b))
        else:
            out.append((a, b))
    return out


def _complement(iv, lo, hi):
    out, cur = [], lo
    for a, b in _merge(iv):
        if b <= lo or a >= hi:
            continue
        if a > cur:
            out.append((cur, a))
        cur = max(cur, b)
    if cur < hi:
        out.append((cur, hi))
    return out


def _spec_stops(spec):
    return [(b.lo, b.hi, float(b.atten_db)) for b in spec.stop_bands()]


def alias_bands(spec) -> list[tuple[float, float]]:
    """Input-rate intervals that fold into the output pass band(s) after decimation by spec.decimation.

    For a pass band [a, b] and the output rate fo: k fo - [b, a] and k fo + [a, b], k >= 1, within
    [0, fs/2], merged.
    """
    fs, D = spec.sample_rate, spec.decimation
    fo = fs / D
    out = []
    for b in spec.bands:
        if b.kind == "stop":
            continue
        k = 1
        while k * fo - b.hi <= fs / 2:
            for lo, hi in ((k * fo - b.hi, k * fo - b.lo), (k * fo + b.lo, k * fo + b.hi)):
                lo, hi = max(lo, 0.0), min(hi, fs / 2)
                if hi > lo:
                    out.append((lo, hi))
            k += 1
    return _merge(out)


def stage_stop_bands(stops, F_in: float, D: int, last: bool):
    """Stop_i (see the module docstring) as a list of (lo, hi, atten_db), input-rate Hz.

    ``stops``: the spec's stop bands (lo, hi, atten_db).
    """
    nyq = F_in / 2.0
    F_out = F_in / D
    inside = [(lo, min(hi, nyq), a) for lo, hi, a in stops if lo < nyq and min(hi, nyq) > lo]
    if last:
        return inside
    C = _complement([(lo, hi) for lo, hi, _ in stops], 0.0, F_out / 2.0)
    images = []
    kmax = int(math.ceil(nyq / F_out)) + 1
    for k in range(1, kmax + 1):
        for c0, c1 in C:
            images += [(k * F_out - c1, k * F_out - c0), (k * F_out + c0, k * F_out + c1)]
    images = _merge(images)
    out = []
    for lo, hi, a in inside:
        for i0, i1 in images:
            s0, s1 = max(lo, i0), min(hi, i1)
            if s1 > s0:
                out.append((s0, s1, a))
    out.sort()
    # merge touching pieces of the same attenuation
    merged = []
    for lo, hi, a in out:
        if merged and lo <= merged[-1][1] and a == merged[-1][2]:
            merged[-1] = (merged[-1][0], max(hi, merged[-1][1]), a)
        else:
            merged.append((lo, hi, a))
    return merged


def _loose_bands(stop_i, F_in, gap_frac=0.001):
    """Don't-care regions between Stop_i bands (and above the last one), with a small gap each side."""
    nyq = F_in / 2
    if not stop_i:
        return []
    out = []
    edges = [(lo, hi) for lo, hi, _ in stop_i]
    start = edges[0][0]
    for lo, hi in _complement(edges, start, nyq):
        g = gap_frac * F_in
        a, b = lo + (g if lo > start else 0.0), hi - (g if hi < nyq else 0.0)
        if b - a > 4 * g:
            out.append((a, b))
    return out


# ---------------------------------------------------------------------------------------------
# applicability, ripple shares, derived specs


def chain_applicable(spec) -> tuple[bool, str]:
    """A lowpass decimation spec with a composite D >= 4: one pass band from 0, stop bands above it."""
    D = spec.decimation
    if D < 4:
        return False, f"decimation {D} < 4: no multistage saving"
    if all(D % p for p in range(2, int(math.isqrt(D)) + 1)):
        return False, f"decimation {D} is prime: it cannot be split into stages"
    passes = [b for b in spec.bands if b.kind == "pass"]
    if any(b.kind == "shaped" for b in spec.bands) or len(passes) != 1 or passes[0].lo != 0.0:
        return False, "multistage chains take a lowpass spec: one pass band from 0 Hz and stop bands"
    if not spec.stop_bands():
        return False, "no stop band"
    p = passes[0]
    if any(b.lo < p.hi for b in spec.stop_bands()):
        return False, "a stop band lies below the pass band"
    if p.hi >= spec.output_rate / 2:
        return False, "the pass band reaches the output Nyquist frequency"
    return True, "lowpass decimator"


def _dev_from_ripple(r_db):
    r = 10 ** (r_db / 20.0)
    return (r - 1) / (r + 1)


def _ripple_from_dev(d):
    return 20 * math.log10((1 + d) / (1 - d))


def _stage_spec(spec, F_in, D, fp, gain, ripple_db, stops, loose, tag):
    bands = [Band(0.0, fp, (gain, gain), "pass", ripple_db=ripple_db)]
    items = [(lo, hi, a) for lo, hi, a in stops] + [(lo, hi, LOOSE_DB) for lo, hi in loose]
    for lo, hi, a in sorted(items):
        bands.append(Band(lo, hi, (0.0, 0.0), "stop", atten_db=a))
    return dataclasses.replace(spec, name=f"{spec.name}_{tag}", sample_rate=F_in, decimation=D,
                               bands=tuple(bands), out_bits=None, out_frac=None, family="fir",
                               fir_method="equiripple", clock=max(spec.clock, F_in), warnings=())


# ---------------------------------------------------------------------------------------------
# enumeration


@dataclass
class _Plan:
    family: str                 # cic | halfband | polyphase
    stages: list                # ("cic", R, N) | ("comp", D) | ("hb",) | ("fir", D)
    estimate: float = math.inf
    why: str = ""

    @property
    def name(self) -> str:
        parts = []
        for s in self.stages:
            if s[0] == "cic":
                parts.append(f"cic{s[2] or '?'}x{s[1]}")
            elif s[0] == "comp":
                parts.append("comp" if s[1] == 1 else f"comp{s[1]}")
            elif s[0] == "hb":
                parts.append("hb")
            else:
                parts.append(f"fir{s[1]}")
        return "+".join(parts)


def _divisors(n):
    return [d for d in range(1, n + 1) if n % d == 0]


def _v2(n):
    k = 0
    while n % 2 == 0:
        n //= 2
        k += 1
    return k


def _factorizations(n, parts, lo=2):
    """Non-increasing factor lists of n with exactly ``parts`` factors >= lo."""
    if parts == 1:
        return [[n]] if n >= lo else []
    out = []
    for d in range(lo, n + 1):
        if n % d == 0:
            for rest in _factorizations(n // d, parts - 1, lo):
                if rest[0] <= d:
                    out.append([d] + rest)
    return out


def enumerate_chains(spec) -> list[_Plan]:
    """Candidate stage lists for spec.decimation (structure only; see :func:`plan_chains`)."""
    D = spec.decimation
    plans = []
    # CIC by R, a compensator by Dc, then h halfbands
    for R in _divisors(D):
        if R < 4:
            continue
        rest = D // R
        for h in range(0, _v2(rest) + 1):
            Dc = rest // (2 ** h)
            st = [("cic", R, 0), ("comp", Dc)] + [("hb",)] * h
            if len(st) <= MAX_STAGES:
                plans.append(_Plan("cic", st))
    # halfbands first then a final FIR; a FIR first then halfbands; only halfbands
    v = _v2(D)
    for h in range(1, v + 1):
        rest = D // 2 ** h
        if rest >= 2 and h + 1 <= MAX_STAGES:
            plans.append(_Plan("halfband", [("hb",)] * h + [("fir", rest)]))
            plans.append(_Plan("halfband", [("fir", rest)] + [("hb",)] * h))
        elif rest == 1 and h <= MAX_STAGES:
            plans.append(_Plan("halfband", [("hb",)] * h))
    # two or three polyphase FIR stages, larger factors first (Crochiere & Rabiner)
    for parts in (2, 3):
        for fac in _factorizations(D, parts):
            plans.append(_Plan("polyphase", [("fir", d) for d in fac]))
    return plans


def _rates(spec, stages):
    F = spec.sample_rate
    out = []
    for s in stages:
        d = s[1] if s[0] in ("cic", "comp", "fir") else 2
        out.append((F, d))
        F = F / d
    return out


def _shares(spec, stages):
    """(ripple_db for each non-halfband unit, delta for halfbands, atten design dB)."""
    p = spec.pass_bands()[0]
    A = min(a for _, _, a in _spec_stops(spec)) + STOP_MARGIN_DB
    ds = 10 ** (-A / 20)
    total = p.ripple_db * RIPPLE_SAFETY
    n_hb = sum(1 for s in stages if s[0] == "hb")
    units = sum(1 for s in stages if s[0] in ("comp", "fir"))
    r_hb = min(_ripple_from_dev(ds), total / max(1, len(stages)))
    d_hb = min(ds, _dev_from_ripple(r_hb))
    r_unit = (total - n_hb * _ripple_from_dev(d_hb)) / units if units else 0.0
    return r_unit, d_hb, A


def _stage_requirements(spec, plan):
    """Per stage: dict(kind, F_in, D, stops, loose, ripple, fp_h...) or raise ValueError when infeasible."""
    stops = _spec_stops(spec)
    fp = spec.pass_bands()[0].hi
    r_unit, d_hb, A = _shares(spec, plan.stages)
    reqs = []
    rates = _rates(spec, plan.stages)
    n = len(plan.stages)
    gain = spec.pass_bands()[0].gain[0]
    gain_at = next((i for i, s in enumerate(plan.stages) if s[0] in ("comp", "fir")), None)
    if gain != 1.0 and gain_at is None:
        raise ValueError("pass gain != 1 needs a FIR stage (halfbands have gain 1)")
    for i, (s, (F_in, D)) in enumerate(zip(plan.stages, rates)):
        last = i == n - 1
        st_i = stage_stop_bands(stops, F_in, D, last)
        st_i = [(lo, hi, a + STOP_MARGIN_DB) for lo, hi, a in st_i]
        req = {"kind": s[0], "F_in": F_in, "D": D, "stops": st_i, "gain": gain if i == gain_at else 1.0}
        if s[0] == "hb":
            if not st_i:
                raise ValueError("halfband with nothing to reject")
            fh = max(fp, F_in / 2 - min(lo for lo, _, _ in st_i))
            if not fh < F_in / 4 * (1 - 1e-9):
                raise ValueError(f"no halfband at {F_in:g} Hz: its pass edge would be {fh:g} Hz >= F/4")
            req.update(fp_h=fh, delta=d_hb)
        elif s[0] == "cic":
            R = s[1]
            N = cic_min_order(R, 1, F_in, [(lo, hi) for lo, hi, _ in st_i], max(a for _, _, a in st_i),
                              N_MAX, fp, MAX_DROOP_DB) if st_i else 1
            if N is None:
                raise ValueError(f"no CIC of order <= {N_MAX} decimating by {R} rejects its alias bands")
            req.update(N=N)
            plan.stages[i] = ("cic", R, N)      # the order is part of the chain's name
        else:
            if not st_i and D > 1:
                raise ValueError("decimating stage with nothing to reject")
            req.update(loose=_loose_bands(st_i, F_in), ripple=r_unit)
            if st_i and min(lo for lo, _, _ in st_i) <= fp:
                raise ValueError("stage stop band reaches into the pass band")
        reqs.append(req)
    return reqs


def _start_length(ripple_db, stops, fp, F_in) -> int:
    """Herrmann's length for the main transition [fp, first stop edge] (the loose bands do not count)."""
    if not stops:
        return 5
    dp = _dev_from_ripple(ripple_db)
    ds = min(10 ** (-a / 20) for _, _, a in stops)
    lo = min(l for l, _, _ in stops)
    return herrmann_length(dp, ds, (lo - fp) / F_in)


def _estimate(spec, plan, reqs) -> float:
    """Estimated multiplications per chain input sample (order formulas, before design)."""
    fs = spec.sample_rate
    fp = spec.pass_bands()[0].hi
    cost = 0.0
    for r in reqs:
        F_in, D = r["F_in"], r["D"]
        if r["kind"] == "cic":
            continue
        if r["kind"] == "hb":
            d = r["delta"]
            K = max(1, round((kaiser_pm_length(d, d, (F_in / 2 - 2 * r["fp_h"]) / F_in) + 1) / 4))
            cost += (2 * K) / 2 * F_in / fs
            continue
        L = _start_length(r["ripple"], r["stops"], fp, F_in)
        cost += L / D * F_in / fs
    return cost


# ---------------------------------------------------------------------------------------------
# minimax (linear program) for the compensator


def _amp_basis(L, freqs, fs):
    M = (L - 1) / 2.0
    nh = (L + 1) // 2
    d = M - np.arange(nh)
    om = 2 * np.pi * np.asarray(freqs, float) / fs
    B = 2 * np.cos(np.outer(om, d))
    if L % 2 == 1:
        B[:, -1] = 1.0
    return B


def _taps_from_half(x, L):
    nh = (L + 1) // 2
    h = np.zeros(L)
    h[:nh] = x
    h[L - 1 - np.arange(nh)] = x
    return h


def _lp_solve(Sw, bw, nh):
    """min t s.t. Sw x - t <= bw (one row per signed grid point): (x, t) or None."""
    from scipy.optimize import linprog

    A = np.empty((len(bw), nh + 1))
    A[:, :nh] = Sw
    A[:, nh] = -1.0
    cost = np.zeros(nh + 1)
    cost[-1] = 1.0
    bounds = [(None, None)] * nh + [(0, None)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = linprog(cost, A_ub=A, b_ub=bw, bounds=bounds, method="highs")
    if not res.success:
        return None
    return res.x[:nh], float(res.x[-1])


def _lp_rows(Bw, dw, up, dn, nh):
    """The LP on the signed rows: +(B x - d) <= t where ``up``, -(B x - d) <= t where ``dn``."""
    iu, idn = np.flatnonzero(up), np.flatnonzero(dn)
    return _lp_solve(np.vstack([Bw[iu], -Bw[idn]]), np.concatenate([dw[iu], -dw[idn]]), nh)


#: relative slack of the exchange LP's stopping test (whole-grid error <= (1 + tol) x subset optimum)
LP_EXCHANGE_TOL = 1e-7
#: at most this many exchange rounds before the LP on the whole grid is solved instead
LP_EXCHANGE_ROUNDS = 40
#: in the first rounds the rows whose error is far from the current optimum are dropped again
LP_EXCHANGE_DROP_ROUNDS = 12
#: ... i.e. the rows whose signed error is below this fraction of the optimum
LP_EXCHANGE_KEEP = 0.9


def _local_peaks(e, viol):
    """Indices of the local maxima of |e| (within one band) that exceed ``viol``."""
    a = np.abs(e)
    if len(a) < 3:
        return np.flatnonzero(a > viol)
    left = np.concatenate([[True], a[1:] >= a[:-1]])
    right = np.concatenate([a[:-1] >= a[1:], [True]])
    return np.flatnonzero(left & right & (a > viol))


def _minimax_core(L, fs, bands, npts=None, stop_above=None, hint=None):
    """:func:`minimax_fir` by exchange; also returns the frequencies of the error peaks.

    ``stop_above``: give up as soon as a subset optimum (a lower bound of the whole-grid optimum)
    exceeds it; the returned t is then that lower bound (> stop_above). ``hint``: frequencies
    (e.g. the error peaks of a neighbouring length) added to the first subset.
    Returns (taps, t, peak_freqs) or (None, inf, None).
    """
    nyq = fs / 2
    npts = npts or max(1024, 24 * L)
    nh = (L + 1) // 2
    Bs, ds, segs, fr = [], [], [], []
    pos = 0
    for lo, hi, c_fn, des, dl in bands:
        n = max(16, int(math.ceil(npts * (hi - lo) / nyq)))
        f = np.linspace(lo, hi, n)
        c = np.ones(n) if c_fn is None else np.asarray(c_fn(f), float)
        Bs.append(_amp_basis(L, f, fs) * (c / dl)[:, None])
        ds.append(np.full(n, des / dl))
        segs.append((pos, pos + n))
        fr.append(f)
        pos += n
    Bw = np.vstack(Bs)
    dw = np.concatenate(ds)
    fgrid = np.concatenate(fr)
    ntot = len(dw)
    mask = np.zeros(ntot, bool)
    # first subset: about three points per coefficient (one per two with a hint), spread over the
    # bands by width, every band edge included
    if hint is not None and len(hint) < (nh + 1) // 2:
        hint = None             # too few peaks to stand for an equiripple error
    m0 = (nh + 1) // 2 if hint is not None else 3 * (nh + 1)
    if m0 >= ntot // 2:
        mask[:] = True
    else:
        width = sum(max(hi - lo, 0.0) for lo, hi, *_ in bands) or 1.0
        for (lo, hi, *_), (s0, s1) in zip(bands, segs):
            k = max(4, int(math.ceil(m0 * (hi - lo) / width)))
            mask[np.round(np.linspace(s0, s1 - 1, min(k, s1 - s0))).astype(int)] = True
        if hint is not None:
            for (s0, s1), f in zip(segs, fr):
                hb = np.asarray([x for x in hint if f[0] <= x <= f[-1]], float)
                if len(hb):
                    mask[s0 + np.clip(np.searchsorted(f, hb), 0, s1 - s0 - 1)] = True
    up, dn = mask.copy(), mask.copy()
    x = None
    for rnd in range(LP_EXCHANGE_ROUNDS):
        r = _lp_rows(Bw, dw, up, dn, nh)
        if r is None:
            x = None
            break
        x, ts = r
        e = Bw @ x - dw
        t_all = float(np.max(np.abs(e)))
        if stop_above is not None and ts > stop_above:
            peaks = np.concatenate([s0 + _local_peaks(e[s0:s1], 0.5 * ts) for s0, s1 in segs])
            return _taps_from_half(x, L), ts, fgrid[peaks]
        viol = ts * (1 + LP_EXCHANGE_TOL) + 1e-12
        if t_all <= viol or (up.all() and dn.all()):
            break
        new = np.concatenate([s0 + _local_peaks(e[s0:s1], viol) for s0, s1 in segs])
        if not len(new):
            new = np.flatnonzero(np.abs(e) > viol)
        pos = new[e[new] > 0]
        neg = new[e[new] < 0]
        if up[pos].all() and dn[neg].all():
            # no new peak although the grid is violated: every violated row instead
            pos, neg = np.flatnonzero(e > viol), np.flatnonzero(e < -viol)
            if up[pos].all() and dn[neg].all():
                break           # numerically stuck: keep this solution (t is its whole-grid error)
        if rnd < LP_EXCHANGE_DROP_ROUNDS:
            # keep the subset small: drop the rows far from active (any subset still gives a lower bound)
            up &= e > LP_EXCHANGE_KEEP * ts
            dn &= e < -LP_EXCHANGE_KEEP * ts
        up[pos] = True
        dn[neg] = True
    else:
        x = None
    if x is None:
        # fall back: the LP on the whole grid
        everywhere = np.ones(ntot, bool)
        r = _lp_rows(Bw, dw, everywhere, everywhere, nh)
        if r is None:
            return None, math.inf, None
        x, ts = r
        e = Bw @ x - dw
        t_all = float(np.max(np.abs(e)))
    peaks = np.concatenate([s0 + _local_peaks(e[s0:s1], 0.5 * ts) for s0, s1 in segs])
    return _taps_from_half(x, L), t_all, fgrid[peaks]


def minimax_fir(L, fs, bands, npts=None):
    """Symmetric length-L FIR minimising max_i W_i |C_i A(f_i) - D_i| by linear programming.

    ``bands``: list of (lo, hi, c_fn, desired, delta): on [lo, hi] require
    |c(f) A(f) - desired| <= delta (c_fn None means c = 1). Returns (taps, t)
    with t <= 1 when every band is met on the grid, or (None, inf).

    The grid is ``npts`` points over [0, fs/2] (default max(1024, 24 L)), spread over the bands in
    proportion to their widths. The LP on the whole grid (a dense 2n x (L/2 + 1) system) is slow at
    long lengths, so it is solved by exchange (cutting planes): first on a subset of the grid
    (about three points per coefficient, band edges included), then the local maxima of the
    error on the whole grid that exceed the subset's optimum t_s are added, until the whole-grid
    error is within (1 + LP_EXCHANGE_TOL) t_s. A subset's optimum is a lower bound of the
    whole-grid optimum, so the result is the whole-grid minimax to that tolerance; the returned t
    is the largest weighted error over the whole grid.
    """
    h, t, _ = _minimax_core(L, fs, bands, npts)
    return h, t


# ---------------------------------------------------------------------------------------------
# stage designs


@dataclass
class _StageResult:
    kind: str                  # cic | fir
    role: str                  # cic | compensator | halfband | fir
    structure: str             # cic | halfband | polyphase | fir
    F_in: float
    D: int
    float_taps: np.ndarray | None = None   # real gain
    coeffs: tuple | None = None
    coeff_frac: int = 0
    coeff_bits: int = 0
    N: int = 0
    stage_spec: object = None
    notes: list = field(default_factory=list)


def _min_remez(sspec, start):
    """Smallest remez length meeting ``sspec`` (design helper's remez_taps, meets, minimum_length)."""
    taps = {}
    F = sspec.sample_rate

    def ok(L):
        if L < 3:
            return False
        h = remez_taps(sspec, L)
        if h is None:
            return False
        f = check_grid(sspec, L)
        if meets(sspec, f, fir_mag(h, f, F)):
            taps[L] = h
            return True
        return False

    L, _ = minimum_length(ok, start, MAX_STAGE_TAPS)
    return (L, taps[L]) if L is not None else (None, None)


def _walk_down(sspec, top, fails=6):
    """Smallest L <= top meeting ``sspec`` by remez, walking down until ``fails`` lengths in a row fail."""
    F = sspec.sample_rate
    best, miss, L = (None, None), 0, top
    while L >= 3 and miss < fails:
        h = remez_taps(sspec, L)
        f = check_grid(sspec, L)
        if h is not None and meets(sspec, f, fir_mag(h, f, F)):
            best, miss = (L, h), 0
        else:
            miss += 1
        L -= 1
    return best


def _min_lp(sspec, start):
    """Same search with the linear-programming minimax (robust where remez does not converge)."""
    taps = {}
    F = sspec.sample_rate
    bands = [(b.lo, b.hi, None, abs(b.gain[0]), b.deviation() if b.kind == "pass" else b.deviation(1.0))
             for b in sspec.bands]

    def ok(L):
        if L < 3 or L > 400:
            return False
        h, t = minimax_fir(L, F, bands)
        if h is None or t > 1.0:
            return False
        f = check_grid(sspec, L)
        if meets(sspec, f, fir_mag(h, f, F)):
            taps[L] = h
            return True
        return False

    L, _ = minimum_length(ok, start, 400)
    return (L, taps[L]) if L is not None else (None, None)


def _fir_stage(spec, req, fp, tag) -> _StageResult:
    F_in, D = req["F_in"], req["D"]
    notes = []
    start = _start_length(req["ripple"], req["stops"], fp, F_in)
    sspec = _stage_spec(spec, F_in, D, fp, req["gain"], req["ripple"], req["stops"], req["loose"], tag)
    halfband = False
    if D == 2:
        # no don't-care bands at /2: the design helper's minimum-length search (it picks a halfband
        # itself when the bands allow one and it needs fewer multipliers)
        try:
            fd = design_fir(sspec, max_length=MAX_STAGE_TAPS)
            L, h, halfband = fd.ntaps, np.asarray(fd.taps, float), fd.halfband
            notes += list(fd.notes)
        except FirDesignError:
            L, h = None, None
    else:
        L, h = None, None
    if D > 2 or L is None:
        # first the classical single stop band [first Stop_i edge, F_in/2] (minimum-length search), then
        # the multiband version (don't-care regions between the Stop_i bands) from that length downwards:
        # remez with many bands may not converge near the minimum, so a search of its own could end far
        # too long; walking down from a known length cannot.
        lo = min(l for l, _, _ in req["stops"])
        a = max(x for _, _, x in req["stops"])
        s1 = _stage_spec(spec, F_in, D, fp, req["gain"], req["ripple"], [(lo, F_in / 2, a)], [], tag)
        L1, h1 = _min_remez(s1, start)
        if L1 is None:
            L1, h1 = _min_lp(s1, start)
            if L1 is not None:
                notes.append("remez did not converge: minimax by linear programming used")
        if L1 is not None and L is None:
            sspec, L, h = s1, L1, h1
            if D > 2 and len(req["stops"]) > 1:
                mb = _stage_spec(spec, F_in, D, fp, req["gain"], req["ripple"], req["stops"], req["loose"], tag)
                Lm, hm = _walk_down(mb, L1 - 1)
                if Lm is not None:
                    notes.append(f"multiband stop bands (don't-care regions between them): {Lm} taps "
                                 f"(one stop band: {L1})")
                    sspec, L, h = mb, Lm, hm
    if L is None:
        raise ValueError(f"stage {tag}: no FIR up to {MAX_STAGE_TAPS} taps meets its stage spec")
    bits = spec.coeff_bits
    for extra in range(9):
        if spec.coeff_bits is None:
            bits, _ = min_fir_coeff_bits(sspec, h)
        if bits is not None or halfband:
            break
        L2, h2 = _min_remez(sspec, L + 1)
        if L2 is None:
            break
        L, h = L2, h2
    if bits is None:
        raise ValueError(f"stage {tag}: no coefficient word up to {MAX_COEFF_BITS} bits meets its spec")
    c, cf = quantize_taps(h, bits)
    structure = "halfband" if halfband else ("polyphase" if D > 1 else "fir")
    role = "halfband" if halfband else "fir"
    return _StageResult("fir", role, structure, F_in, D, h, c, cf, bits, stage_spec=sspec, notes=notes)


def _halfband_lp(F, fh, K, delta):
    """Vaidyanathan-Nguyen halfband with the length-2K prototype by LP minimax (|G - 1| <= 2 delta on [0, 2 fh])."""
    g, t = minimax_fir(2 * K, F, [(0.0, 2 * fh, None, 1.0, 2 * delta)])
    if g is None:
        return None
    h = np.zeros(4 * K - 1)
    h[0::2] = g / 2.0
    h[2 * K - 1] = 0.5
    return h


def _hb_stage(spec, req, tag) -> _StageResult:
    F_in = req["F_in"]
    fh, d = req["fp_h"], req["delta"]
    A = -20 * math.log10(d)
    sspec = _stage_spec(spec, F_in, 2, fh, 1.0, _ripple_from_dev(d) * 1.0000001, [(F_in / 2 - fh, F_in / 2, A)],
                        [], tag)
    taps = {}

    def ok(K):
        h = halfband_taps(sspec, K)
        if h is None or not np.all(np.isfinite(h)):
            # remez's one-band prototype fails for very wide transitions (NaN): LP prototype instead
            h = _halfband_lp(F_in, fh, K, d)
        if h is None:
            return False
        taps[K] = h
        f = check_grid(sspec, 4 * K - 1)
        return all(m >= 0 for _, _, m in band_achieved(sspec, f, fir_mag(h, f, F_in)))

    k0 = max(1, round((kaiser_pm_length(d, d, (F_in / 2 - 2 * fh) / F_in) + 1) / 4))
    K, _ = minimum_length(ok, k0, (MAX_STAGE_TAPS + 1) // 4)
    if K is None:
        raise ValueError(f"stage {tag}: no halfband up to {MAX_STAGE_TAPS} taps")
    bits = spec.coeff_bits
    while True:
        if spec.coeff_bits is None:
            bits, _ = min_fir_coeff_bits(sspec, taps[K])
        if bits is not None or 4 * K + 3 > MAX_STAGE_TAPS:
            break
        K += 1
        ok(K)
    if bits is None:
        raise ValueError(f"stage {tag}: halfband coefficients do not quantize")
    c, cf = quantize_taps(taps[K], bits)
    return _StageResult("fir", "halfband", "halfband", F_in, 2, taps[K], c, cf, bits, stage_spec=sspec,
                        notes=[f"halfband pass edge {fh:g} Hz (stop from {F_in / 2 - fh:g} Hz), delta {d:.3g}"])


def _comp_check(sspec, taps_norm, C_fn, grid=None):
    """(met, per-band margins) of a normalized compensator: pass |C A - 1| <= delta, stops |A| <= delta."""
    f = check_grid(sspec, len(taps_norm)) if grid is None else grid
    mag = fir_mag(taps_norm, f, sspec.sample_rate)
    margins = []
    for i, b in enumerate(sspec.bands):
        m = (f >= b.lo) & (f <= b.hi)
        if i == 0:
            e = float(np.max(np.abs(C_fn(f[m]) * mag[m] - 1.0)))
            margins.append(b.deviation() / abs(b.gain[0]) - e)
        else:
            margins.append(b.deviation(1.0) - float(np.max(mag[m])))
    return all(x >= 0 for x in margins), margins


def _comp_stage(spec, req, fp, cic_N, cic_R, F_cic_in, tag) -> _StageResult:
    F_in, D = req["F_in"], req["D"]
    g = req["gain"]
    sspec = _stage_spec(spec, F_in, D, fp, 1.0, req["ripple"], req["stops"], req["loose"], tag)
    G = cic_gain(cic_N, cic_R, 1)

    def C_fn(f):      # the CIC's normalized response at the compensator's input-rate frequency f
        return cic_response(cic_N, cic_R, 1, f, F_cic_in)

    dp = sspec.bands[0].deviation()
    bands = [(0.0, fp, C_fn, 1.0, dp)] + [(b.lo, b.hi, None, 0.0, b.deviation(1.0)) for b in sspec.bands[1:]]
    designs = {}
    peaks = {}

    def ok(L):
        # minimax by exchange LP (see minimax_fir); seeded with the error peaks of the nearest length
        # already solved, and stopped as soon as a lower bound of the optimum shows t > 1
        if L < 3:
            return False
        near = min(peaks, key=lambda k: abs(k - L), default=None)
        h, t, pk = _minimax_core(L, F_in, bands, stop_above=1.0, hint=peaks.get(near))
        if pk is not None:
            peaks[L] = pk
        if h is None or t > 1.0:
            return False
        designs[L] = h
        return _comp_check(sspec, h, C_fn)[0]

    start = _start_length(req["ripple"], req["stops"], fp, F_in)
    L, _ = minimum_length(ok, max(3, start - 2), MAX_STAGE_TAPS)
    if L is None:
        raise ValueError(f"stage {tag}: no compensator up to {MAX_STAGE_TAPS} taps")
    notes = [f"compensator: minimax (LP) against 1/sinc^{cic_N} over [0, {fp:g}] Hz; CIC gain {G} "
             + (f"= 2^{G.bit_length() - 1} absorbed by coeff_frac" if G & (G - 1) == 0
                else "normalised by scaling the coefficients by 1/G")]
    for extra in range(9):
        h = designs[L]
        grid = check_grid(sspec, L)
        bits = spec.coeff_bits
        if bits is None:
            # the first word from 8 bits up that meets; below 8, walk down while it still meets
            for b in range(8, MAX_COEFF_BITS + 1):
                c, cf = quantize_taps(h * g / G, b)
                hq = np.asarray(c, float) / 2.0 ** cf * G / g
                if _comp_check(sspec, hq, C_fn, grid)[0]:
                    bits = b
                    break
            if bits == 8:
                while bits - 1 >= 4:
                    c, cf = quantize_taps(h * g / G, bits - 1)
                    if not _comp_check(sspec, np.asarray(c, float) / 2.0 ** cf * G / g, C_fn, grid)[0]:
                        break
                    bits -= 1
        if bits is not None:
            break
        L2, _ = minimum_length(ok, L + 1, MAX_STAGE_TAPS)
        if L2 is None:
            break
        L = L2
    if bits is None:
        raise ValueError(f"stage {tag}: compensator coefficients do not quantize")
    c, cf = quantize_taps(designs[L] * g / G, bits)
    return _StageResult("fir", "compensator", "polyphase" if D > 1 else "fir", F_in, D, designs[L] * g / G, c, cf,
                        bits, stage_spec=sspec, notes=notes)


# ---------------------------------------------------------------------------------------------
# equivalent single-rate filter


def _stage_float_taps(st) -> np.ndarray:
    if st.kind == "cic":
        return cic_taps(st.order, st.decimation, st.diff_delay).astype(float)
    if st.kind == "fir":
        return np.asarray(st.coeffs, float) / 2.0 ** st.coeff_frac
    raise ValueError("chains hold cic and fir stages only")


def _cascade(taps_list, decims):
    h = np.array([1.0])
    D = 1
    for t, d in zip(taps_list, decims):
        t = np.asarray(t, float)
        up = np.zeros((len(t) - 1) * D + 1)
        up[::D] = t
        h = np.convolve(h, up)
        D *= d
    return h


def equivalent_taps(fixed: FixedDesign, start: int = 0) -> np.ndarray:
    """Impulse response of stages[start:] as one filter at stage ``start``'s input rate (noble identities).

    H(z) = H1(z) H2(z^D1) H3(z^(D1 D2)) ...; real gain (CIC gain included).
    """
    sts = fixed.stages[start:]
    return _cascade([_stage_float_taps(s) for s in sts], [getattr(s, "decimation", 1) for s in sts])


def chain_response(fixed: FixedDesign, f, fs: float) -> np.ndarray:
    """|H| of the chain's equivalent single-rate filter at input frequencies ``f`` (Hz), input rate ``fs``."""
    return fir_mag(equivalent_taps(fixed), np.asarray(f, float), fs)


# ---------------------------------------------------------------------------------------------
# checks


def alias_detail(spec, f, mag_q, mag_f=None) -> list[dict]:
    """Per alias band: edges, required attenuation (the smallest of the stop bands it meets, or of all
    stop bands when none covers it) and the attenuation achieved by |H| sampled on ``f``."""
    stops = _spec_stops(spec)
    ref = reference_gain(spec)
    mag_f = mag_q if mag_f is None else mag_f
    out = []
    for lo, hi in alias_bands(spec):
        over = [a for s0, s1, a in stops if min(s1, hi) > max(s0, lo)]
        req = min(over) if over else min(a for _, _, a in stops)
        m = (f >= lo) & (f <= hi)
        if not np.any(m):
            continue
        pq, pf = float(np.max(mag_q[m])), float(np.max(mag_f[m]))
        aq = 20 * math.log10(ref / pq) if pq > 0 else math.inf
        af = 20 * math.log10(ref / pf) if pf > 0 else math.inf
        out.append({"edges": [lo, hi], "required_db": req, "achieved_float_db": af, "achieved_quant_db": aq,
                    "margin_db": aq - req, "covered_by_stop_band": bool(over)})
    return out


def _alias_check(detail, index):
    """One summary :class:`BandCheck` (kind "alias") for the worst alias band."""
    if not detail:
        return []
    w = min(detail, key=lambda d: d["margin_db"])
    return [BandCheck(index, "alias", (detail[0]["edges"][0], detail[-1]["edges"][1]), w["required_db"],
                      min(d["achieved_float_db"] - d["required_db"] for d in detail) + w["required_db"],
                      w["achieved_quant_db"], w["margin_db"])]


def _checks(spec, h_q, h_f):
    """Spec bands on |H| of the equivalent filter, plus one summary alias check; and the alias detail."""
    f = check_grid(spec, max(len(h_q), len(h_f)))
    al = alias_bands(spec)
    f = np.concatenate([f, np.asarray([e for iv in al for e in iv], float)])
    mq = fir_mag(h_q, f, spec.sample_rate)
    mf = fir_mag(h_f, f, spec.sample_rate)
    aq = band_achieved(spec, f, mq)
    af = band_achieved(spec, f, mf)
    checks = []
    for i, (b, (req, a_f, _), (_, a_q, mar)) in enumerate(zip(spec.bands, af, aq)):
        checks.append(BandCheck(i + 1, b.kind, (b.lo, b.hi), float(req), float(a_f), float(a_q), float(mar)))
    detail = alias_detail(spec, f, mq, mf)
    checks += _alias_check(detail, len(spec.bands) + 1)
    return checks, detail


# ---------------------------------------------------------------------------------------------
# formats


def _fir_out_fmt(coeffs, cf, in_fmt, frac, rounding):
    full = in_fmt.frac + cf
    frac = min(frac, full)
    lo, hi = fir_extremes(coeffs, in_fmt)
    lo = int(shift_round(np.array([lo], dtype=object), full - frac, rounding)[0])
    hi = int(shift_round(np.array([hi], dtype=object), full - frac, rounding)[0])
    return Fmt(bits_for_range(lo, hi), frac)


def _assemble(spec, results):
    """FixedDesign from designed stages: output formats per stage (module docstring), phases 0."""
    in_fmt = Fmt(spec.in_bits, spec.in_frac)
    K = len(results)
    # coefficient-only stages (formats do not change the coefficients) for the noise gains
    proto = []
    for r in results:
        if r.kind == "cic":
            proto.append(CicStage(r.N, r.D, 1, (0,) * (2 * r.N), Fmt(2, 0), in_fmt))
        else:
            proto.append(FirStage(tuple(r.coeffs), r.coeff_frac, Fmt(2, 0), r.D, 0))
    tmp = FixedDesign(tuple(proto), in_fmt, spec.rounding, spec.overflow)
    h_eq = equivalent_taps(tmp)
    Sh = float(np.sum(h_eq ** 2))
    stages = []
    fmt = in_fmt
    notes = []
    noise_terms = []
    for i, r in enumerate(results):
        last = i == K - 1
        if not last:
            g = equivalent_taps(tmp, i + 1)
            Sg = float(np.sum(g ** 2))
            c = 2.0 if r.kind == "cic" else 1.0
            frac = spec.in_frac + int(math.ceil(0.5 * math.log2(4 * K * c * Sg / Sh) - 1e-12))
        else:
            Sg = 1.0
            frac = None
            if r.kind == "cic":
                raise ValueError("a chain ends with a FIR stage (a CIC is followed by its compensator)")
        if r.kind == "cic":
            bmax = cic_bmax(r.N, r.D, 1, fmt.bits)
            out_drop = min(max(0, fmt.frac - frac), bmax - 1)
            st = make_cic_stage(r.N, r.D, 1, fmt, bmax + 1 - out_drop, rounding=spec.rounding)
            es = cic_error_stats(r.N, r.D, 1, st.drop, fmt.frac - st.out.frac, spec.rounding)
            q_in = 2.0 ** -fmt.frac
            noise_terms.append(es["var_total"] * q_in * q_in * Sg)
        else:
            full = fmt.frac + r.coeff_frac
            if last:
                if spec.out_bits is None:
                    frac = min(spec.in_frac + guard_bits(Sh), full)
                    ofmt = _fir_out_fmt(r.coeffs, r.coeff_frac, fmt, frac, spec.rounding)
                else:
                    ob = spec.out_bits
                    if spec.out_frac is not None:
                        frac = spec.out_frac
                    else:
                        f = check_grid(spec, len(h_eq))
                        peak = float(np.max(fir_mag(h_eq, f, spec.sample_rate))) * (-in_fmt.lo) / 2.0 ** in_fmt.frac
                        frac = min(int(math.floor(math.log2(((1 << (ob - 1)) - 1) / peak))), full)
                    ofmt = Fmt(ob, frac)
            else:
                ofmt = _fir_out_fmt(r.coeffs, r.coeff_frac, fmt, frac, spec.rounding)
            st = FirStage(tuple(r.coeffs), r.coeff_frac, ofmt, r.D, 0)
            sh = full - ofmt.frac
            stt = rounding_stats(sh, spec.rounding)
            q = 2.0 ** -ofmt.frac
            noise_terms.append((stt["var"] + stt["mean"] ** 2) * q * q * Sg)
        stages.append(st)
        fmt = st.out
    fixed = FixedDesign(tuple(stages), in_fmt, spec.rounding, spec.overflow)
    q_in = 2.0 ** -spec.in_frac
    v_in = Sh * q_in * q_in / 12
    amp = reference_gain(spec) * (-in_fmt.lo) * q_in
    noise = {"input_noise_at_output": v_in, "rounding_noise_at_output": float(sum(noise_terms)),
             "per_stage_rounding_noise": [float(x) for x in noise_terms],
             "snr_db_fullscale_sine": 10 * math.log10(amp * amp / 2 / (v_in + sum(noise_terms)))}
    return fixed, noise, notes


# ---------------------------------------------------------------------------------------------
# chains


def _mults(fixed, fs, results):
    m = mf = 0.0
    for st, r in zip(fixed.stages, results):
        if st.kind == "cic":
            continue
        c = np.asarray(st.coeffs)
        nz = int(np.count_nonzero(c))
        if r.structure == "halfband":
            nz -= 1                    # the centre 1/2 is a shift
        nzf = int(np.count_nonzero(c[: (len(c) + 1) // 2]))
        if r.structure == "halfband":
            nzf -= 1
        m += nz / st.decimation * r.F_in / fs
        mf += nzf / st.decimation * r.F_in / fs
    return m, mf


def design_chain(spec, plan: _Plan) -> ChainDesign:
    """Design, quantize and check one planned chain (raises ValueError when a stage cannot be made)."""
    reqs = _stage_requirements(spec, plan)
    fp = spec.pass_bands()[0].hi
    results = []
    cic = None
    for i, (s, r) in enumerate(zip(plan.stages, reqs)):
        tag = f"s{i + 1}"
        if s[0] == "cic":
            res = _StageResult("cic", "cic", "cic", r["F_in"], r["D"], cic_taps(r["N"], r["D"]).astype(float),
                               N=r["N"])
            cic = (r["N"], r["D"], r["F_in"])
        elif s[0] == "comp":
            res = _comp_stage(spec, r, fp, cic[0], cic[1], cic[2], tag)
        elif s[0] == "hb":
            res = _hb_stage(spec, r, tag)
        else:
            res = _fir_stage(spec, r, fp, tag)
        results.append(res)
    fixed, noise, notes = _assemble(spec, results)
    h_q = equivalent_taps(fixed)
    h_f = _cascade([r.float_taps for r in results], [r.D for r in results])
    checks, detail = _checks(spec, h_q, h_f)
    m, mf = _mults(fixed, spec.sample_rate, results)
    descs = []
    for st, r, q in zip(fixed.stages, results, reqs):
        d = {"kind": st.kind, "role": r.role, "structure": r.structure, "decimation": r.D,
             "in_rate": r.F_in, "out_rate": r.F_in / r.D,
             "stop_bands": [[lo, hi, a] for lo, hi, a in q["stops"]],
             "output": st.out.as_dict()}
        if st.kind == "cic":
            d.update(order=st.order, diff_delay=st.diff_delay, drop=list(st.drop), register_bits=list(st.widths),
                     B_max=st.full_bits - 1, gain=st.gain,
                     droop_db_at_pass_edge=float(cic_droop_db(st.order, st.decimation, 1, fp, r.F_in)),
                     mults_per_input=0.0)
        else:
            c = np.asarray(st.coeffs)
            nz = int(np.count_nonzero(c)) - (1 if r.structure == "halfband" else 0)
            d.update(taps=len(c), nonzero=int(np.count_nonzero(c)), coeff_bits=r.coeff_bits,
                     coeff_frac=st.coeff_frac, mults_per_stage_input=nz / r.D,
                     mults_per_input=nz / r.D * r.F_in / spec.sample_rate)
            if r.role != "halfband" and "ripple" in q:
                d["ripple_db_share"] = q["ripple"]
            if r.role == "halfband" and "fp_h" in q:
                d["pass_edge"] = q["fp_h"]
        descs.append(d)
    notes = notes + [n for r in results for n in r.notes]
    ok = all(c.margin >= 0 for c in checks)
    return ChainDesign(plan.name, descs, fixed, checks, ok, m, mf, plan.estimate, noise, notes,
                       [r.float_taps for r in results], detail)


def chain_candidates(spec) -> list[dict]:
    """Every enumerated chain with its estimated multiplications per input, or why it cannot be built."""
    ok, why = chain_applicable(spec)
    if not ok:
        return []
    out = []
    for p in enumerate_chains(spec):
        try:
            reqs = _stage_requirements(spec, p)
            out.append({"name": p.name, "family": p.family, "estimate": _estimate(spec, p, reqs), "why": ""})
        except ValueError as e:
            out.append({"name": p.name, "family": p.family, "estimate": None, "why": str(e)})
    return out


def plan_chains(spec, *, max_chains: int = 8) -> list[ChainDesign]:
    """Designed multistage decimators for ``spec``, best first (met, then fewest multiplications per input).

    The candidates of :func:`enumerate_chains` that can be built (CIC order
    <= N_MAX, halfbands where their symmetric bands fit) are ranked by the
    order-formula estimate; the best of each family (cic, halfband, polyphase)
    and then the next best overall, up to ``max_chains``, are designed.
    Returns [] when the spec is not a lowpass decimation by a composite D >= 4
    (see :func:`chain_applicable`).
    """
    ok, _ = chain_applicable(spec)
    if not ok:
        return []
    cands = []
    for p in enumerate_chains(spec):
        try:
            reqs = _stage_requirements(spec, p)
        except ValueError as e:
            p.why = str(e)
            continue
        p.estimate = _estimate(spec, p, reqs)
        if math.isfinite(p.estimate):
            cands.append(p)
    cands.sort(key=lambda p: (p.estimate, len(p.stages)))
    chosen = []
    for fam in ("cic", "halfband", "polyphase"):
        best = next((p for p in cands if p.family == fam), None)
        if best is not None:
            chosen.append(best)
    for p in cands:
        if len(chosen) >= max_chains:
            break
        if p not in chosen:
            chosen.append(p)
    chosen = chosen[:max_chains]
    out = []
    for p in chosen:
        try:
            out.append(design_chain(spec, p))
        except (ValueError, FirDesignError):
            continue
    out.sort(key=lambda c: (not c.ok, c.mults_per_input))
    return out
