"""``tapwright plan``: design the filter, explore the structures, rank them.

The Python API a notebook user calls::

    from tapwright.spec import load_spec
    from tapwright.plan import plan
    result = plan(load_spec("specs/rx_chan_dec4.toml"))
    result.recommended.estimate.dsp
"""
from __future__ import annotations

from dataclasses import dataclass

from . import CAUTION
from .explore import Exploration, explore_all


@dataclass
class PlanResult:
    spec: object
    design: object          # tapwright.design.plan.DesignPlan
    exploration: Exploration | None
    error: str = ""
    chains: list = None

    @property
    def ok(self) -> bool:
        return not self.error and self.design is not None and self.design.ok and \
            self.exploration is not None and self.exploration.ok

    @property
    def recommended(self):
        return self.exploration.recommended if self.exploration else None

    def as_json(self) -> dict:
        ex = self.exploration
        d = {"spec": self.spec.as_dict(),
             "design": self.design.as_dict() if self.design is not None else None,
             "candidates": [c.as_json() for c in ex.candidates] if ex else [],
             "recommended": ex.recommended.label if ex and ex.recommended else None,
             "closest": ex.closest.label if ex and ex.closest else None,
             "dsp_lower_bound": ex.lower_bound if ex else None,
             "cycles_per_sample": ex.cycles_per_sample if ex else None,
             "chains": [c.as_dict() for c in (self.chains or [])],
             "ok": self.ok,
             "caution": CAUTION}
        if self.error:
            d["error"] = self.error
        return d


def plan(spec, *, design=None) -> PlanResult:
    """Design (unless ``design`` is given) and explore."""
    from .design.plan import DesignError, make_design

    from .design.chain import chain_applicable, plan_chains

    given = design
    if design is None:
        try:
            design = make_design(spec)
        except DesignError as e:
            return PlanResult(spec, None, None, error=str(e))
    chains = []
    if spec.decimation >= 4 and chain_applicable(spec)[0]:
        chains = [c for c in plan_chains(spec) if c.ok]
    ex = explore_all(spec, design.fixed, chains)
    if given is None and spec.family == "auto" and not ex.ok:
        design, ex = _other_family(spec, design, ex, chains)
    return PlanResult(spec, design, ex, chains=chains)


def _other_family(spec, design, ex, chains):
    """``family = "auto"`` picks FIR or IIR by multiplications per output, before any
    structure is costed. When no structure of that family fits the target and the budget,
    the other family is designed and explored too, and taken when one of its structures
    fits (the reason says both). Otherwise the first choice stands."""
    import dataclasses

    from .design.plan import DesignError, make_design

    other = "fir" if design.family == "iir" else "iir"
    if other == "iir" and spec.phase == "linear":
        return design, ex
    try:
        alt = make_design(dataclasses.replace(spec, family=other))
    except DesignError:
        return design, ex
    if not alt.ok:
        return design, ex
    alt_ex = explore_all(spec, alt.fixed, chains)
    if not alt_ex.ok:
        return design, ex
    c = ex.closest
    miss = f" (closest: {c.label}, {c.why})" if c is not None and c.why else ""
    first, _, reason = design.why.partition(": ")
    alt.why = (f"{other.upper()}: no {first} structure fits the target{miss} and an {other.upper()} one does; "
               f"by multiplications per output alone the {first} came first: {reason}")
    return alt, alt_ex


# ----------------------------------------------------------------------------------------------
# text rendering


def _hz(f: float) -> str:
    for unit, s in ((1e9, "GHz"), (1e6, "MHz"), (1e3, "kHz")):
        if abs(f) >= unit:
            return f"{f / unit:.6g} {s}"
    return f"{f:.6g} Hz"


def _table(rows, header, align=None):
    cols = list(zip(*([header] + rows))) if rows else [[h] for h in header]
    widths = [max(len(str(x)) for x in col) for col in cols]
    align = align or ["<"] + [">"] * (len(header) - 1)
    fmt = "  ".join(f"{{:{a}{w}}}" for a, w in zip(align, widths))
    lines = [fmt.format(*header), fmt.format(*["-" * w for w in widths])]
    lines += [fmt.format(*[str(x) for x in r]) for r in rows]
    return lines


def render_design(design, spec) -> list[str]:
    d = design.as_dict()
    out = []
    out.append(f"filter: {d.get('summary', design.family.upper())}")
    for line in str(design.why).splitlines():
        out.append(f"  why: {line}" if line is design.why.splitlines()[0] else f"       {line}")
    fx = design.fixed
    of = fx.out_fmt
    out.append(f"  word lengths: input {fx.in_fmt.bits} bits ({fx.in_fmt.q()}), coefficients "
               f"{design.coeff_bits} bits, accumulator {design.acc_bits} bits, output {of.bits} bits "
               f"({of.q()}), rounding {fx.rounding}, overflow {fx.overflow}")
    rows = []
    for b in design.band_checks:
        unit = "dB" if b.kind in ("pass", "stop") else ""
        what = {"pass": "ripple", "stop": "atten", "shaped": "error"}.get(b.kind, b.kind)
        rows.append([f"{b.kind} {b.index}", f"{_hz(b.edges[0])} - {_hz(b.edges[1])}",
                     f"{what} {b.required:.4g} {unit}".strip(), f"{b.achieved_float:.4g}",
                     f"{b.achieved_quant:.4g}", f"{b.margin:+.3g} {unit}".strip(),
                     "met" if b.margin >= 0 else "MISSED"])
    out += ["  " + ln for ln in _table(rows, ["band", "edges", "required", "float", "quantized",
                                              "margin", ""], ["<", "<", "<", ">", ">", ">", "<"])]
    nz = design.noise
    if nz:
        parts = []
        if "output_noise_lsb2" in nz:
            parts.append(f"output noise {nz['output_noise_lsb2']:.3g} LSB^2")
        if "snr_db_fullscale_sine" in nz:
            parts.append(f"SNR {nz['snr_db_fullscale_sine']:.1f} dB for a full-scale sine")
        out.append("  noise: " + ", ".join(parts))
    for n in getattr(design, "notes", []) or []:
        out.append(f"  note: {n}")
    return out


def render_plan(result: PlanResult) -> str:
    spec = result.spec
    lines = []
    head = f"{spec.name}: {_hz(spec.sample_rate)} in"
    if spec.decimation > 1:
        head += f", decimation {spec.decimation} -> {_hz(spec.output_rate)} out"
    head += (f"; clock {_hz(spec.clock)} ({spec.cycles_per_sample} cycle"
             f"{'s' if spec.cycles_per_sample > 1 else ''} per input sample); device {spec.device}")
    lines.append(head)
    lines.append("")
    if result.error:
        lines.append(f"the filter cannot be designed: {result.error}")
        return "\n".join(lines)
    lines += render_design(result.design, spec)
    ex = result.exploration
    lines.append("")
    b = spec.budget.as_dict()
    btxt = ", ".join(f"{k} {v}" for k, v in b.items()) if b else "none given"
    lines.append(f"structures: {len(ex.candidates)} candidates, ranked (budget: {btxt})")
    rows = []
    for i, c in enumerate(ex.candidates, 1):
        e = c.estimate
        mark = "*" if ex.recommended is c else ("P" if c.pareto else "")
        rows.append([f"{i}{mark}", c.label, e.dsp, e.lut, e.carry, e.ff, e.latency, e.input_interval,
                     "-" if e.fmax_mhz is None else f"{e.fmax_mhz:.0f}",
                     "yes" if c.feasible else "no", c.why])
    hdr = ["rank", "candidate", "dsp", "lut", "carry", "ff", "lat", "ii", "fmax", "fits", "why not"]
    if spec.device == "generic":
        hdr[2] = "mult"
    lines += ["  " + ln for ln in _table(rows, hdr, ["<", "<", ">", ">", ">", ">", ">", ">", ">", "<", "<"])]
    lines.append("  (* recommended, P on the Pareto front of dsp / lut+carry / ff / latency; "
                 "ii = clock cycles per input sample; fmax in MHz, estimated)")
    twins = [(c.label, a) for c in ex.candidates for a in c.same_as]
    if twins:
        lines.append("  the same hardware under another name (not listed twice):")
        lines += [f"    {a} = {lab}" for lab, a in twins]
    lines.append("")
    lines.append(f"hard-multiplier lower bound at {ex.cycles_per_sample} cycle(s) per sample: {ex.lower_bound}")
    if ex.recommended is not None:
        c = ex.recommended
        n = c.estimate.dsp
        unit = ("multiplier" if spec.device == "generic" else "DSP block") + ("" if n == 1 else "s")
        lines.append(f"recommended: {c.label} - {n} {unit}, "
                     f"{c.estimate.lut} LUT, {c.estimate.carry} carry, {c.estimate.ff} FF, latency "
                     f"{c.estimate.latency} cycle{'' if c.estimate.latency == 1 else 's'}")
        fit = part_fit(spec.device, c.estimate)
        if fit:
            lines.append(fit)
        from .cost.accuracy import clock_error, clock_margin_note
        note = clock_margin_note(spec.device, spec.clock, c.estimate.fmax_mhz, c.label)
        if note:
            lines.append(note)
            err = clock_error(spec.device)
            safer = next((x for x in ex.candidates if x.feasible and x.estimate.fmax_mhz
                          and x.estimate.fmax_mhz >= spec.clock / 1e6 * (1 + err)), None)
            if safer is not None:
                rank = ex.candidates.index(safer) + 1
                lines.append(f"  with more margin: {safer.label} (rank {rank}, "
                             f"{safer.estimate.fmax_mhz:.0f} MHz estimated)")
        lines.append(f"build it:    tapwright build {spec.path} --structure {c.label}")
    else:
        c = ex.closest
        lines.append("no candidate fits.")
        if c is not None:
            over = ", ".join(f"{k} over by {v}" for k, v in c.excess.items())
            lines.append(f"closest: {c.label} ({over})")
    if not result.design.ok:
        lines.append("the quantized filter misses the spec in at least one band (see the table above)")
    lines.append("")
    lines.append(CAUTION)
    from .cost.accuracy import accuracy_line
    acc = accuracy_line(spec.device)
    if acc:
        lines.append(acc)
    return "\n".join(lines)


def part_fit(device: str, est) -> str:
    """'fits in part X at N percent' for the smallest listed part of the family that holds ``est``."""
    from .cost.devices import get_profile, part_use

    prof = get_profile(device)
    for part in prof.parts:
        use = part_use(prof, part, est)
        if max(use.values()) <= 1.0:
            return (f"fits in {part.name} at {use['dsp']:.0%} of its DSP blocks, {use['lut']:.0%} of its "
                    f"LUTs, {use['ff']:.0%} of its flip-flops (estimate; part sizes: {part.source})")
    if prof.parts:
        return f"larger than the biggest listed {device} part ({prof.parts[-1].name})"
    return ""
