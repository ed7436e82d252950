"""The model's critical path beside the one nextpnr timed, for improving the delay model.

``python -m tapwright.synth.paths SPEC CANDIDATE [--device ecp5] [--workdir W]`` plans
the spec for the device, builds the candidate (a label of the plan's candidate table),
places and routes it behind the registered serial shell (as ``tapwright synth --pnr``
does) and prints two paths:

- the model's: each node from the start register to the slowest end, with its kind,
  role, word width, own delay and arrival time (ns; the estimate adds the path
  overhead of the device's delay table);
- nextpnr's slowest clock-to-clock path from its ``--report`` file: every logic and
  routing step with its delay and cell, the cells carrying the netlist names of the
  graph's nodes (``z_s0_t8_T`` is a delay register behind node ``s0_t8_T``).

Reading the two side by side is how the fan-out, multiplexer-capture and saturation
rules of ``cost/timing.py`` were found (DEVELOPERS.md). Estimates are for sizing before
layout, not sign-off.
"""
from __future__ import annotations

import argparse
import dataclasses
import json
import sys
from pathlib import Path


def model_path(g, delays) -> list[dict]:
    """The longest combinational path of ``g`` under ``delays``, start to end."""
    from ..sfg.transforms.pipeline import arrival_times, mux_splits, node_delays

    arr = arrival_times(g, delays)
    nd = node_delays(g, delays)
    if not arr:
        return []
    nodes = g._node
    # a multiplexer with registers inside: its readers start from its last select level
    split = mux_splits(g, delays)
    v = max(arr, key=lambda n: (arr[n], str(n)))
    out = []
    tail = False
    while True:
        n = nodes[v]
        fmt = n.get("fmt")
        t = split[v][1][-1] if tail else (arr[v] if v in split else nd[v])
        out.append({"node": v, "kind": n["kind"],
                    "role": (n.get("role") or "") + (" (last level)" if tail else
                                                     " (first levels)" if v in split else "")
                    if v in split else n.get("role"),
                    "bits": fmt.bits if fmt is not None else None,
                    "delay_ns": round(t, 3), "arrival_ns": round(t if tail else arr[v], 3)})
        if n["kind"] == "mux":
            break      # its operands are registers (the captured line)

        def comb(u, kd):
            r = split[u][0] if u in split else 0
            return any(e["z"] == 0 and e["pipe"] == r for e in kd.values())
        preds = [u for u, kd in g._pred[v].items() if nodes[u]["kind"] != "acc" and comb(u, kd)]
        if not preds:
            break

        def arrival(u):
            return split[u][1][-1] if u in split else arr[u]
        v = max(preds, key=lambda u: (arrival(u), str(u)))
        tail = v in split
    out.reverse()
    return out


def pnr_path(report: dict) -> dict | None:
    """The slowest clock-to-clock path of a nextpnr ``--report`` dict: total and steps."""
    best = None
    for p in report.get("critical_paths") or []:
        if "<async>" in (p.get("from", ""), p.get("to", "")):
            continue
        steps = p.get("path") or []
        tot = sum(float(s.get("delay", 0.0)) for s in steps)
        if best is None or tot > best[0]:
            best = (tot, steps)
    if best is None:
        return None
    tot, steps = best
    rows = [{"type": s.get("type"), "delay_ns": round(float(s.get("delay", 0.0)), 3),
             "from": (s.get("from") or {}).get("cell", ""), "to": (s.get("to") or {}).get("cell", ""),
             "net": s.get("net", "")} for s in steps]
    return {"total_ns": round(tot, 3), "steps": rows}


def render(model: list[dict], overhead_ns: float, pnr: dict | None, fmax: float | None) -> str:
    lines = ["model path (ns; the estimate adds %.2f ns of register and routing overhead):" % overhead_ns]
    for r in model:
        lines.append(f"  {r['arrival_ns']:7.2f}  +{r['delay_ns']:5.2f}  {r['kind']:6} {str(r['role'] or ''):10} "
                     f"{'' if r['bits'] is None else r['bits']:>3}  {r['node']}")
    if model:
        t = model[-1]["arrival_ns"] + overhead_ns
        lines.append(f"  total {t:.2f} ns -> {1000 / t:.1f} MHz" if t > 0 else "  total 0 ns")
    if pnr is None:
        lines.append("nextpnr: no clock-to-clock path in the report")
        return "\n".join(lines)
    lines.append(f"nextpnr path: {pnr['total_ns']:.2f} ns"
                 + (f" ({fmax:.1f} MHz achieved)" if fmax else "") + "; steps above 0.05 ns:")
    for s in pnr["steps"]:
        if s["delay_ns"] > 0.05:
            cell = s["to"] if s["type"] == "routing" else s["from"]
            if len(cell) > 72:   # Yosys appends the carry-chain cells to the register's name
                cell = cell[:72] + "..."
            lines.append(f"  {s['type']:8} {s['delay_ns']:6.3f}  {cell}")
    return "\n".join(lines)


def main(argv=None) -> int:
    from ..build import build_design
    from ..cli import UserError
    from ..cost.timing import delay_function, path_overhead
    from ..plan import plan
    from ..sfg.recipe import realize
    from ..spec import SpecError, load_spec
    from .pnr import PNR_TARGETS, synth_and_pnr

    ap = argparse.ArgumentParser(prog="python -m tapwright.synth.paths",
                                 description="the model's critical path beside nextpnr's")
    ap.add_argument("spec")
    ap.add_argument("candidate", help="a candidate label from the plan's table (e.g. transposed+symmetric/p7.5)")
    ap.add_argument("--device", default="ecp5", choices=sorted(PNR_TARGETS))
    ap.add_argument("--workdir", default=None, help="folder for the design and the runs (default: temporary)")
    a = ap.parse_args(argv)
    try:
        spec = dataclasses.replace(load_spec(a.spec), device=a.device)
    except SpecError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    res = plan(spec)
    cands = res.exploration.by_label() if res.exploration else {}
    if a.candidate not in cands:
        print(f"error: {a.spec}: candidate {a.candidate!r} is not explored for {a.device} "
              f"(allowed: {', '.join(sorted(cands))})", file=sys.stderr)
        return 2
    c = cands[a.candidate]
    import tempfile
    with tempfile.TemporaryDirectory(prefix="tw_paths_") as tmp:
        wd = Path(a.workdir or tmp)
        try:
            build_design(res, structure=c.label, out=wd / "design", force=True)
        except UserError as exc:
            print(f"error: {exc}", file=sys.stderr)
            return 2
        sheet = json.loads((wd / "design" / "design.json").read_text())
        f = delay_function(a.device)
        g = realize(c.fixed or res.design.fixed, c.recipe, name=sheet["top"], delays=f)
        model = model_path(g, f)
        r = synth_and_pnr(str(wd / "design" / sheet["verilog"]), sheet["top"], a.device,
                          workdir=wd / "run", clock_mhz=spec.clock / 1e6, io="serial")
        report = r["pnr"].get("report")
        pnr = pnr_path(json.loads(Path(report).read_text())) if report else None
        print(render(model, path_overhead(a.device), pnr, r["pnr"].get("fmax_mhz")))
    return 0


if __name__ == "__main__":
    sys.exit(main())
