"""family = "auto": FIR or IIR, and why.

Both are designed and compared by multiplications per OUTPUT sample:

- FIR: one multiplication per distinct non-zero coefficient after folding the
  symmetric pairs (a pre-adder adds x[n-k] and x[n-L+1+k] first): ceil(L/2)
  for a full linear-phase filter, about L/4 for a halfband (zero taps and the
  centre tap 1/2 are free). A decimating FIR computes only the outputs it keeps
  (polyphase), so that count is per output sample whatever the decimation.
- IIR: 5 multiplications per second-order section (b0 b1 b2 a1 a2) minus the
  coefficients that are 0 or +-1, per INPUT sample: the recursion needs every
  input sample even when only every D-th output is kept, so per output it is
  that count times D.

``spec.phase == "linear"`` forces FIR (only a symmetric/antisymmetric FIR has
exactly linear phase). Otherwise the IIR is chosen when it needs fewer
multiplications per output; the reason string gives both counts and the IIR's
pass-band group-delay spread, the price of its non-linear phase.
"""
from __future__ import annotations

from dataclasses import dataclass

from .fir import FirDesign, FirDesignError, design_fir
from .iir import IirDesign, IirNotApplicable, design_iir, group_delay_spread


@dataclass
class Choice:
    family: str
    why: str
    fir: FirDesign | None = None
    iir: IirDesign | None = None
    fir_mults: float | None = None
    iir_mults: float | None = None
    iir_group_delay_spread: float | None = None


def fir_mults_per_output(fd: FirDesign) -> int:
    """Multiplications per output sample (symmetry folded; per output also when decimating)."""
    return fd.multipliers()


def iir_mults_per_output(idesign: IirDesign, decimation: int = 1) -> int:
    """5 per section minus trivial coefficients, per input sample, times the decimation."""
    return idesign.multipliers() * max(1, decimation)


def choose_family(spec, fir: FirDesign | None = None, iir: IirDesign | None = None) -> Choice:
    """Decide FIR or IIR for ``spec`` (designing what is not given) and say why in plain English."""
    D = spec.decimation
    if spec.phase == "linear":
        fd = fir or design_fir(spec)
        return Choice("fir", f"FIR: linear phase was asked for (phase = \"linear\"), which only a "
                             f"symmetric FIR gives ({fd.ntaps} taps, {fir_mults_per_output(fd)} multiplications "
                             f"per output)", fd, None, fir_mults_per_output(fd))
    try:
        idesign = iir or design_iir(spec)
    except IirNotApplicable as e:
        fd = fir or design_fir(spec)
        return Choice("fir", f"FIR: {e}", fd, None, fir_mults_per_output(fd))
    try:
        fd = fir or design_fir(spec)
    except FirDesignError as e:
        gd = group_delay_spread(idesign.sos, spec)
        return Choice("iir", f"IIR ({idesign.response}, order {idesign.order}): no FIR fits ({e})",
                      None, idesign, None, iir_mults_per_output(idesign, D), gd)
    fm = fir_mults_per_output(fd)
    im = iir_mults_per_output(idesign, D)
    gd = group_delay_spread(idesign.sos, spec)
    rate = f" ({idesign.multipliers()} per input sample x decimation {D}: the recursion runs at the input rate)" \
        if D > 1 else ""
    f_txt = f"the {fd.ntaps}-tap {'halfband ' if fd.halfband else ''}linear-phase FIR"
    i_txt = f"the order-{idesign.order} {idesign.response} IIR ({idesign.n_sections} sections)"
    if im < fm:
        why = (f"IIR: {i_txt} needs {im} multiplications per output sample{rate} against {fm} for {f_txt}; "
               f"phase \"any\" allows it; its pass-band group delay varies by {gd:.3g} samples")
        return Choice("iir", why, fd, idesign, fm, im, gd)
    why = (f"FIR: {f_txt} needs {fm} multiplications per output sample against {im} for {i_txt}{rate}; "
           f"it also has exactly linear phase (the IIR's pass-band group delay would vary by {gd:.3g} samples)")
    return Choice("fir", why, fd, idesign, fm, im, gd)

