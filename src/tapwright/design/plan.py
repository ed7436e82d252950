"""The design API: spec -> float design -> quantized :class:`FixedDesign`, with its checks.

``make_design(spec)`` picks the family (``spec.family``, or :mod:`.choose` for
"auto"), designs the float filter at minimum length/order, quantizes it
(:mod:`tapwright.fixed.quantize`) and checks every band on the dense grid for
both. A minimum-length FIR often has almost no margin left for coefficient
rounding, so up to 4 longer designs are also quantized and the one with the
smallest (multipliers x coefficient bits), a proxy for multiplier area, is
kept. When the quantized design cannot meet the spec at any coefficient word
up to 32 bits, the FIR is lengthened (up to 8 taps more) or the IIR order
raised (up to 3 more) for margin before giving up with :class:`DesignError`.

Stages:
- FIR: one ``FirStage`` (decimation = ``spec.decimation``, phase 0).
- IIR: one ``SosStage`` (form "df1"); with decimation D > 1 it is followed by a
  trivial ``FirStage`` with coefficients (1,), coeff_frac 0 and decimation D
  that only keeps every D-th sample (the recursion itself has to run at the
  input rate).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..fixed.formats import Fmt
from ..fixed.quantize import (QuantizeError, quantize_fir, quantize_iir, sections_to_sos)
from ..fixed.stages import FirStage, FixedDesign, SosStage
from .choose import choose_family
from .fir import BandCheck, FirDesign, FirDesignError, band_achieved, check_grid, design_fir, fir_mag
from .iir import IirDesign, IirNotApplicable, design_iir, group_delay_spread, sos_mag

__all__ = ["BandCheck", "DesignPlan", "DesignError", "make_design", "magnitude"]

MAX_EXTRA_TAPS = 8
MAX_EXTRA_ORDER = 3
#: longer FIRs tried for a cheaper multipliers x coefficient-bits product
TRADE_TAPS = 4


class DesignError(Exception):
    """The spec cannot be met; the message says what and how far off."""


@dataclass
class DesignPlan:
    spec: object
    family: str                      # "fir" | "iir"
    why: str
    float_design: FirDesign | IirDesign
    fixed: FixedDesign
    coeff_bits: int
    acc_bits: int
    band_checks: list
    noise: dict
    notes: list = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return all(c.margin >= 0 for c in self.band_checks)

    def as_dict(self) -> dict:
        fd = self.float_design
        d = {
            "name": self.spec.name,
            "family": self.family,
            "why": self.why,
            "ok": self.ok,
            "method": fd.method if self.family == "fir" else fd.response,
            "halfband": bool(getattr(fd, "halfband", False)),
            "coeff_bits": self.coeff_bits,
            "acc_bits": self.acc_bits,
            "input": self.fixed.in_fmt.as_dict(),
            "output": self.fixed.out_fmt.as_dict(),
            "rounding": self.fixed.rounding,
            "overflow": self.fixed.overflow,
            "decimation": self.fixed.decimation,
            "decimation_phase": self.fixed.decimation_phase,
            "float_design": fd.as_dict(),
            "stages": [s.as_dict() for s in self.fixed.stages],
            "band_checks": [c.as_dict() for c in self.band_checks],
            "noise": {k: _jsonable(v) for k, v in self.noise.items()},
            "notes": list(self.notes),
        }
        if self.family == "fir":
            d.update(length=fd.ntaps, order=fd.order, fir_type=fd.fir_type)
        else:
            d.update(order=fd.order, sections=fd.n_sections, ordering=fd.ordering)
        return d


def _jsonable(v):
    if isinstance(v, (np.floating, float)):
        v = float(v)
        return v if math.isfinite(v) else None
    if isinstance(v, np.integer):
        return int(v)
    return v


def _checks(spec, float_ach, quant_ach) -> list[BandCheck]:
    out = []
    for i, (b, (req, af, _), (_, aq, mq)) in enumerate(zip(spec.bands, float_ach, quant_ach)):
        out.append(BandCheck(i + 1, b.kind, (b.lo, b.hi), float(req), float(af), float(aq), float(mq)))
    return out


def _family(spec):
    if spec.family == "fir":
        return "fir", "FIR: family = \"fir\" in the spec", None, None
    if spec.family == "iir":
        if spec.phase == "linear":
            raise DesignError("family = \"iir\" cannot give phase = \"linear\" (only an FIR has exactly "
                              "linear phase)")
        return "iir", "IIR: family = \"iir\" in the spec", None, None
    try:
        ch = choose_family(spec)
    except FirDesignError as e:
        raise DesignError(str(e)) from None
    return ch.family, ch.why, ch.fir, ch.iir


def make_design(spec) -> DesignPlan:
    """Design, quantize and check ``spec``; raise :class:`DesignError` when it cannot be met."""
    family, why, fd, idesign = _family(spec)
    if family == "fir":
        return _make_fir(spec, why, fd)
    return _make_iir(spec, why, idesign)


def _make_fir(spec, why, fd) -> DesignPlan:
    in_fmt = Fmt(spec.in_bits, spec.in_frac)
    notes: list[str] = []
    try:
        fd = fd or design_fir(spec)
    except FirDesignError as e:
        raise DesignError(str(e)) from None
    first = fd
    q = None
    for _ in range(MAX_EXTRA_TAPS + 1):
        try:
            q = quantize_fir(spec, fd.taps, decimation=spec.decimation)
        except QuantizeError:
            q = None
        if q is not None and (q.met or spec.coeff_bits is None):
            break
        try:
            fd = design_fir(spec, min_length=fd.ntaps + 1)
        except FirDesignError:
            break
    if q is None:
        raise DesignError(f"the {first.ntaps}-tap FIR (and up to {MAX_EXTRA_TAPS} taps more) cannot be "
                          "quantized within the spec with coefficient words up to 32 bits")
    if not q.met:
        # keep the minimum-length design and report its shortfall
        fd = first
        q = quantize_fir(spec, fd.taps, decimation=spec.decimation)
    if spec.coeff_bits is None and q.met:
        # a few taps more can save coefficient bits: keep the cheapest by multipliers x coefficient bits
        best = (fd.multipliers() * q.coeff_bits, fd, q)
        cand = fd
        for _ in range(TRADE_TAPS):
            try:
                cand = design_fir(spec, min_length=cand.ntaps + 1)
                qc = quantize_fir(spec, cand.taps, decimation=spec.decimation)
            except (FirDesignError, QuantizeError):
                continue
            cost = cand.multipliers() * qc.coeff_bits
            if qc.met and cost < best[0]:
                best = (cost, cand, qc)
        _, fd, q = best
    if fd is not first:
        notes.append(f"length raised from the minimum {first.ntaps} to {fd.ntaps} taps: the margin it leaves "
                     f"lets {q.coeff_bits}-bit coefficients meet the spec (cheaper multipliers x bits)")
    f = check_grid(spec, fd.ntaps)
    fl = band_achieved(spec, f, fir_mag(fd.taps, f, spec.sample_rate))
    checks = _checks(spec, fl, q.achieved)
    fixed = FixedDesign(stages=(q.stage,), in_fmt=in_fmt, rounding=spec.rounding, overflow=spec.overflow)
    notes = list(fd.notes) + notes + list(q.notes)
    notes.append(f"{fd.method} FIR type {fd.fir_type}, {fd.ntaps} taps (estimate {fd.estimate} by "
                 f"{fd.estimate_formula}), {q.coeff_bits}-bit coefficients (frac {q.stage.coeff_frac}), "
                 f"{q.acc_bits}-bit accumulator")
    return DesignPlan(spec, "fir", why, fd, fixed, q.coeff_bits, q.acc_bits, checks, q.noise, notes)


def _make_iir(spec, why, idesign) -> DesignPlan:
    in_fmt = Fmt(spec.in_bits, spec.in_frac)
    notes: list[str] = []
    q = None
    err = None
    for extra in range(MAX_EXTRA_ORDER + 1):
        try:
            if idesign is None or extra > 0:
                idesign = design_iir(spec, extra_order=extra)
        except IirNotApplicable as e:
            raise DesignError(str(e)) from None
        try:
            q = quantize_iir(spec, idesign.sos)
        except QuantizeError as e:
            q, err = None, e
            continue
        if q.met or spec.coeff_bits is None:
            break
    if q is None:
        raise DesignError(f"IIR: {err} (tried orders up to +{MAX_EXTRA_ORDER})")
    if not q.met and spec.coeff_bits is not None:
        notes.append(f"coeff_bits = {spec.coeff_bits} does not meet the spec even with {MAX_EXTRA_ORDER} "
                     "more orders")
    f = check_grid(spec, 1024)
    fl = band_achieved(spec, f, sos_mag(idesign.sos, f, spec.sample_rate))
    checks = _checks(spec, fl, q.achieved)
    stages = [q.stage]
    if spec.decimation > 1:
        stages.append(FirStage(coeffs=(1,), coeff_frac=0, out=q.stage.out, decimation=spec.decimation, phase=0))
        notes.append(f"decimation by {spec.decimation}: a trivial FIR stage (coefficient 1) keeps every "
                     f"{spec.decimation}-th sample of the IIR output")
    fixed = FixedDesign(stages=tuple(stages), in_fmt=in_fmt, rounding=spec.rounding, overflow=spec.overflow)
    notes = list(idesign.notes) + notes + list(q.notes)
    notes.append(f"{q.coeff_bits}-bit coefficients; quantized pole radii "
                 + ", ".join(f"{r:.5f} (<= {lim:.5f})" for r, lim in zip(q.pole_radii, q.radius_limits)))
    noise = dict(q.noise)
    noise["group_delay_spread_samples"] = group_delay_spread(idesign.sos, spec)
    return DesignPlan(spec, "iir", why, idesign, fixed, q.coeff_bits, q.acc_bits, checks, noise, notes)


def magnitude(fixed_or_float, freqs_hz, fs) -> np.ndarray:
    """|H| at ``freqs_hz`` (Hz) of a float design (FirDesign, IirDesign, taps array) or a quantized one
    (FixedDesign, FirStage, SosStage, DesignPlan -> its fixed design); ``fs`` is the input rate.

    A chain's stages after a decimation by D run at fs/D; by the noble identity
    their response at the input rate is H_k(f) evaluated at rate fs/D.
    Gain is absolute (output value over input value by their ``frac``).
    """
    obj = fixed_or_float
    f = np.asarray(freqs_hz, float)
    if isinstance(obj, DesignPlan):
        obj = obj.fixed
    if isinstance(obj, FirDesign):
        return fir_mag(obj.taps, f, fs)
    if isinstance(obj, IirDesign):
        return sos_mag(obj.sos, f, fs)
    if isinstance(obj, FirStage):
        return fir_mag(np.asarray(obj.coeffs, float) / 2.0 ** obj.coeff_frac, f, fs)
    if isinstance(obj, SosStage):
        secs = [(s.b, s.a, s.coeff_frac) for s in obj.sections]
        return sos_mag(sections_to_sos(secs), f, fs)
    if isinstance(obj, FixedDesign):
        out = np.ones(len(f))
        rate = fs
        for st in obj.stages:
            if st.kind == "cic":
                N, R, M = st.order, st.decimation, st.diff_delay
                h = np.ones(R * M)
                for _ in range(N - 1):
                    h = np.convolve(h, np.ones(R * M))
                out *= fir_mag(h, f, rate)      # the CIC keeps its real gain (R*M)**N
            else:
                out *= magnitude(st, f, rate)
            rate = rate / getattr(st, "decimation", 1)
        return out
    return fir_mag(np.asarray(obj, float), f, fs)
