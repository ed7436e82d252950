"""RTL lowering, Verilog emission, testbench and check: bit-exact, cycle-exact, every structure.

Amaranth (pysim) runs every structure on small hand-made designs with the
standard stimuli (impulse, full-scale steps, worst case, random; back to back
and with gaps); Verilator runs a few design folders through the emitted
Verilog and the generated testbench, including deliberately corrupted ones.
"""
from __future__ import annotations

import json
import re
import shutil

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hst

from tapwright.build import write_design_folder
from tapwright.cli import main
from tapwright.fixed.formats import Fmt
from tapwright.fixed.stages import CicStage, FirStage, FixedDesign, Section, SosStage
from tapwright.rtl import testbench as tbm
from tapwright.rtl.emit import emit_verilog
from tapwright.rtl.lower import lower, timing_of
from tapwright.sfg.graph import input_interval
from tapwright.sfg.recipe import Recipe, realize
from tapwright.sfg.transforms.pipeline import latency
from tapwright.verify.check import check_folder, check_graph, compiled_testbench, run_verilator
from tapwright.verify.sheet import design_from_json

RNG = np.random.default_rng(20260518)


# ------------------------------------------------------------------------------------------------
# designs


def _coeffs(L, sym, lo=-300, hi=300, rng=RNG):
    h = rng.integers(lo, hi, size=L)
    if sym == 1:
        h = np.array([h[min(i, L - 1 - i)] for i in range(L)])
    elif sym == -1:
        h = np.array([h[i] if i < L - 1 - i else (-h[L - 1 - i] if i > L - 1 - i else 0) for i in range(L)])
    return tuple(int(v) for v in h)


def _halfband(L, rng=RNG):
    c = (L - 1) // 2
    h = list(_coeffs(L, 1, rng=rng))
    h = [h[i] if (i - c) % 2 else 0 for i in range(L)]
    h[c] = 512
    return tuple(h)


def fir_design(coeffs, *, dec=1, phase=0, in_fmt=Fmt(12, 11), coeff_frac=10, out=Fmt(14, 11),
               rounding="half_up", overflow="saturate"):
    st = FirStage(coeffs=tuple(coeffs), coeff_frac=coeff_frac, out=out, decimation=dec, phase=phase)
    return FixedDesign((st,), in_fmt, rounding, overflow)


def sos_design(rounding="half_up", overflow="saturate", in_fmt=Fmt(12, 11)):
    secs = (Section(b=(600, 1200, 600), a=(4096, -5000, 2000), coeff_frac=12, state=Fmt(18, 14)),
            Section(b=(2048, -1000, 2048), a=(4096, -3000, 1500), coeff_frac=12, state=Fmt(18, 14)))
    return FixedDesign((SosStage(secs, out=Fmt(14, 11)),), in_fmt, rounding, overflow)


def cic_design(order=3, R=4, M=1, phase=1, drop=(0, 1, 2, 3, 4, 5), out=Fmt(16, 6), rounding="half_even",
               overflow="saturate"):
    fin = Fmt(12, 11)
    cic = CicStage(order=order, decimation=R, diff_delay=M, drop=drop, out=out, in_fmt=fin, phase=phase)
    return FixedDesign((cic,), fin, rounding, overflow)


def chain_design():
    fin = Fmt(12, 11)
    cic = CicStage(order=2, decimation=3, diff_delay=2, drop=(0, 0, 1, 1), out=Fmt(14, 9), in_fmt=fin, phase=2)
    fir = FirStage((100, -300, 900, -300, 100), coeff_frac=10, out=Fmt(14, 6), decimation=2, phase=1)
    return FixedDesign((cic, fir), fin, "truncate", "wrap")


SYM_ODD = _coeffs(9, 1)
SYM_EVEN = _coeffs(10, 1)
ANTI_ODD = _coeffs(9, -1)
ANTI_EVEN = _coeffs(8, -1)
PLAIN = _coeffs(7, 0)
HB = _halfband(11)
SMALL = _coeffs(7, 1)

R_DIRECT = Recipe("direct")
R_COMB = Recipe("direct", register_output=False)
R_TRANS = Recipe("transposed", ("transposed",))
R_SYM = Recipe("symmetric", ("symmetric",))
R_SYM_P = Recipe("symmetric", ("symmetric",), period=2)
R_TSYM = Recipe("transposed", ("transposed", "symmetric"), period=3)
R_POLY = Recipe("polyphase", ("polyphase", "symmetric"), period=2)
R_POLY0 = Recipe("polyphase", ("polyphase",))
R_HB = Recipe("halfband", ("polyphase", "halfband", "symmetric"))
R_HB1 = Recipe("halfband", ("halfband", "symmetric"), period=1)
R_TS = Recipe("timeshared", ("symmetric",), fold=4)
R_TS_P = Recipe("timeshared", ("symmetric",), fold=3, period=1)
R_TSPOLY = Recipe("timeshared", ("polyphase", "symmetric"), fold=4, period=3)
R_SA = Recipe("shiftadd", ("symmetric", "shiftadd"), period=2)

CASES = {
    "direct_sym_odd": (fir_design(SYM_ODD), R_DIRECT),
    "direct_comb_latency0": (fir_design(PLAIN), R_COMB),
    "direct_pipelined": (fir_design(PLAIN), Recipe("direct", period=1)),
    "transposed": (fir_design(PLAIN), R_TRANS),
    "transposed_sym_pipelined": (fir_design(SYM_EVEN), R_TSYM),
    "symmetric_odd": (fir_design(SYM_ODD), R_SYM),
    "symmetric_even": (fir_design(SYM_EVEN), R_SYM),
    "antisymmetric_odd": (fir_design(ANTI_ODD), R_SYM),
    "antisymmetric_even": (fir_design(ANTI_EVEN), R_SYM_P),
    "halfband_dec2": (fir_design(HB, dec=2, phase=1), R_HB),
    "halfband_single_rate": (fir_design(HB), R_HB1),
    "timeshared_sym": (fir_design(SYM_ODD), R_TS),
    "timeshared_anti_pipelined": (fir_design(ANTI_ODD), R_TS_P),
    "timeshared_plain_k2": (fir_design(PLAIN), Recipe("timeshared", (), fold=2)),
    "timeshared_polyphase_dec2": (fir_design(SYM_EVEN, dec=2, phase=1), R_TSPOLY),
    "timeshared_polyphase_dec3": (fir_design(SYM_ODD, dec=3, phase=2), R_TSPOLY),
    "timeshared_polyphase_k8_dec2": (fir_design(_coeffs(15, 1), dec=2, phase=0),
                                     Recipe("timeshared", ("polyphase", "symmetric"), fold=8)),
    "shiftadd": (fir_design(SYM_ODD), R_SA),
    "sos_df1": (sos_design(), Recipe("sos_df1")),
    "sos_df2t": (sos_design("half_even"), Recipe("sos_df2t", sos_form="df2t")),
    "sos_df1_pipelined": (sos_design("truncate"), Recipe("sos_df1", period=2)),
    "cic": (cic_design(), Recipe("cic")),
    "cic_m2_pipelined": (cic_design(order=2, R=3, M=2, phase=2, drop=(0, 0, 1, 1), out=Fmt(14, 9),
                                    rounding="truncate", overflow="wrap"), Recipe("cic", period=1)),
    "chain_cic_fir": (chain_design(), Recipe("chain", ("polyphase", "symmetric"), period=2)),
    "chain_cic_fir_folded": (chain_design(), Recipe("chain", ("symmetric",), fold=3)),
    "chain_per_stage_folds": (chain_design(), Recipe("chain", stage_transforms=((), ("polyphase", "symmetric")),
                                                     stage_folds=(1, 3), period=2)),
    "chain_two_firs_two_folds": (FixedDesign((
        FirStage(SYM_ODD, 10, Fmt(14, 11), decimation=2, phase=1),
        FirStage(_coeffs(12, 1), 10, Fmt(16, 11))), Fmt(12, 11), "half_even", "saturate"),
        Recipe("chain", stage_transforms=(("polyphase", "symmetric"), ("symmetric",)), stage_folds=(2, 3))),
}


def _assert_pass(results, label=""):
    bad = [r for r in results if not r.ok]
    assert not bad, f"{label}: {bad[0].name}: {bad[0].message}"
    assert len(results) == 10
    return results


@pytest.mark.parametrize("case", sorted(CASES))
def test_structure_bit_exact_and_cycle_exact(case):
    design, recipe = CASES[case]
    g = realize(design, recipe)
    res = check_graph(design, g, samples=48)
    _assert_pass(res, case)
    # the stimuli really produced outputs of both signs and gaps were exercised
    assert all(r.n_out > 0 for r in res)


@pytest.mark.parametrize("dec,phase", [(d, p) for d in (2, 3, 4, 8) for p in range(d)])
def test_polyphase_every_phase(dec, phase):
    design = fir_design(SMALL, dec=dec, phase=phase)
    for recipe in (R_POLY, R_POLY0):
        g = realize(design, recipe)
        _assert_pass(check_graph(design, g, samples=8 * dec + 8), f"{recipe.label} D={dec} p={phase}")


@pytest.mark.parametrize("bits", [12, 16, 20, 24])
@pytest.mark.parametrize("rounding", ["truncate", "half_up", "half_even"])
@pytest.mark.parametrize("overflow", ["saturate", "wrap"])
def test_word_lengths_rounding_overflow(bits, rounding, overflow):
    # a narrow output (gain > 1 at full scale) so that saturation and wrap happen
    rng = np.random.default_rng(bits)
    c = _coeffs(6, 0, -2000, 2000, rng)
    fin = Fmt(bits, bits - 1)
    out = Fmt(bits - 2, bits - 1)
    design = fir_design(c, in_fmt=fin, out=out, coeff_frac=11, rounding=rounding, overflow=overflow)
    g = realize(design, Recipe("transposed", ("transposed",), period=2))
    res = _assert_pass(check_graph(design, g, samples=32), f"{bits} {rounding} {overflow}")
    from tapwright.fixed import reference
    y = reference.run(design, tbm.worst_case(design, 64))
    assert y.max() == out.hi or overflow == "wrap"  # the worst case did reach the rails


def test_folded_back_to_back_and_pacing():
    design = fir_design(SYM_ODD)
    g = realize(design, R_TS)
    assert input_interval(g) == 4
    comp = lower(g)
    assert comp.input_interval == 4 and comp.latency == latency(g)
    res = check_graph(design, g, samples=30)
    _assert_pass(res)
    # a wrong declared interval or latency is caught
    assert not all(r.ok for r in check_graph(design, g, samples=12, interval=3))
    assert not all(r.ok for r in check_graph(design, g, samples=12, latency=latency(g) + 1))


def test_timing_tags_are_consistent():
    for case, (design, recipe) in CASES.items():
        g = realize(design, recipe)
        tags = timing_of(g)
        assert tags["in"] == ("s", ("in",), 0)


# ------------------------------------------------------------------------------------------------
# random designs x structures


@hst.composite
def _random_case(draw):
    L = draw(hst.integers(2, 12))
    sym = draw(hst.sampled_from([0, 1, -1]))
    seed = draw(hst.integers(0, 2 ** 31))
    c = list(_coeffs(L, sym, -500, 500, np.random.default_rng(seed)))
    if not any(c):
        c[0] = 1
        if sym:
            c[-1] = sym
    in_bits = draw(hst.integers(8, 20))
    cf = draw(hst.integers(4, 12))
    out_bits = draw(hst.integers(6, 22))
    out_frac = draw(hst.integers(max(0, in_bits - 6), in_bits + 4))
    dec = draw(hst.sampled_from([1, 1, 2, 3, 4]))
    phase = draw(hst.integers(0, dec - 1))
    rnd = draw(hst.sampled_from(["truncate", "half_up", "half_even"]))
    ovf = draw(hst.sampled_from(["saturate", "wrap"]))
    design = fir_design(c, dec=dec, phase=phase, in_fmt=Fmt(in_bits, in_bits - 1), coeff_frac=cf,
                        out=Fmt(out_bits, out_frac), rounding=rnd, overflow=ovf)
    symmetric = FirStage(tuple(c), cf, Fmt(out_bits, out_frac)).symmetry() != 0
    options = [R_DIRECT, R_COMB, R_TRANS, Recipe("direct", period=1), Recipe("timeshared", (), fold=2),
               Recipe("timeshared", (), fold=3, period=2)]
    if symmetric:
        options += [R_SYM, R_SYM_P, R_TSYM, R_TS, R_SA]
    if dec > 1:
        options += [R_POLY0, Recipe("timeshared", ("polyphase",), fold=3, period=1)]
        if symmetric:
            options += [R_POLY]
    recipe = draw(hst.sampled_from(options))
    return design, recipe


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_random_case())
def test_random_designs_and_structures(case):
    design, recipe = case
    try:
        g = realize(design, recipe)
    except ValueError:
        return  # a transform that does not apply (nothing to fold, ...)
    res = check_graph(design, g, samples=20)
    bad = [r for r in res if not r.ok]
    assert not bad, f"{recipe.label} {design}: {bad[0].name}: {bad[0].message}"


# ------------------------------------------------------------------------------------------------
# Verilog: ports, determinism


def test_emitted_ports_and_determinism():
    design = fir_design(SYM_ODD, dec=2, phase=1)
    a = emit_verilog(realize(design, R_TSPOLY), "tsp_top")
    b = emit_verilog(realize(design, R_TSPOLY), "tsp_top")
    assert a == b
    m = re.search(r"module tsp_top\(([^)]*)\);", a)
    assert sorted(p.strip() for p in m.group(1).split(",")) == sorted(
        ["clk", "rst", "in_valid", "in_ready", "in_data", "out_valid", "out_data"])
    assert "input [11:0] in_data;" in a
    assert "/work" not in a and "src =" not in a


def _folder(tmp_path, key, name, **kw):
    design, recipe = CASES[key]
    return write_design_folder(tmp_path / name, name=name, fixed=design, recipe=recipe,
                               spec_dict={"sample_rate": 48000.0, "target": {"clock": 4.8e6}},
                               estimate={"device": "generic"}, extra=None, **kw)


def test_design_folder_contents_and_rebuild_identical(tmp_path):
    p = _folder(tmp_path, "timeshared_polyphase_dec2", "tsp")
    sheet = json.loads((p / "design.json").read_text())
    for k in ("top", "verilog", "structure", "sample_rate", "clock", "input", "output", "rounding", "overflow",
              "decimation", "decimation_phase", "input_interval", "latency", "stages", "estimate", "recipe"):
        assert k in sheet, k
    assert sheet["top"] == "tsp" and sheet["verilog"] == "tsp.v" and sheet["decimation"] == 2
    assert sheet["input_interval"] == 2 and sheet["clock"] == 4.8e6
    d = design_from_json(sheet)
    assert d == CASES["timeshared_polyphase_dec2"][0]
    files1 = {f.relative_to(p): f.read_bytes() for f in p.rglob("*") if f.is_file()}
    q = _folder(tmp_path / "again", "timeshared_polyphase_dec2", "tsp")
    files2 = {f.relative_to(q): f.read_bytes() for f in q.rglob("*") if f.is_file()}
    assert files1 == files2
    # existing folder: refused without force, replaced with it; no temporary left behind
    from tapwright.cli import UserError
    with pytest.raises(UserError):
        _folder(tmp_path, "timeshared_polyphase_dec2", "tsp")
    _folder(tmp_path, "sos_df1", "tsp", force=True)
    assert json.loads((p / "design.json").read_text())["structure"] == "sos_df1"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["again", "tsp"]


def test_design_sheet_roundtrip_all_kinds():
    for key in ("sos_df2t", "cic", "chain_cic_fir"):
        design, recipe = CASES[key]
        d = {"input": design.in_fmt.as_dict(), "rounding": design.rounding, "overflow": design.overflow,
             "stages": [s.as_dict() for s in design.stages]}
        assert design_from_json(d) == design


def test_check_folder_amaranth_and_cli(tmp_path, capsys):
    p = _folder(tmp_path, "cic", "cic_top")
    res = check_folder(p, sim="amaranth", samples=40)
    assert res.ok, res.summary()
    assert main(["check", str(p), "--samples", "24"]) == 0
    assert "PASS cic_top" in capsys.readouterr().out
    assert main(["check", str(tmp_path / "nope")]) == 2
    (tmp_path / "bad").mkdir()
    (tmp_path / "bad" / "design.json").write_text("{not json")
    assert main(["check", str(tmp_path / "bad")]) == 2
    assert "design.json" in capsys.readouterr().err
    # a sheet that disagrees with the hardware: exit 1 (the rebuilt Verilog differs, or the latency)
    sheet = json.loads((p / "design.json").read_text())
    sheet["stages"][0]["drop"] = [0, 1, 2, 3, 4, 6]
    (p / "design.json").write_text(json.dumps(sheet))
    assert main(["check", str(p), "--samples", "24"]) == 1
    assert "not the Verilog" in capsys.readouterr().err
    (p / "cic_top.v").unlink()
    assert main(["check", str(p), "--samples", "24"]) == 0  # no Verilog to compare: the sheet's own arithmetic
    sheet["latency"] += 1
    (p / "design.json").write_text(json.dumps(sheet))
    assert main(["check", str(p), "--samples", "24"]) == 1


# ------------------------------------------------------------------------------------------------
# Verilator




@pytest.fixture(scope="module")
def vfolders(tmp_path_factory):
    base = tmp_path_factory.mktemp("vl")
    out = {}
    for key, name in [("timeshared_polyphase_dec3", "v_tsp"), ("sos_df1_pipelined", "v_sos"),
                      ("direct_comb_latency0", "v_comb")]:
        out[key] = _folder(base, key, name)
    return out


@pytest.mark.slow
@pytest.mark.parametrize("key", ["timeshared_polyphase_dec3", "sos_df1_pipelined", "direct_comb_latency0"])
def test_verilator_check_and_testbench(vfolders, key, tmp_path):
    p = vfolders[key]
    res = check_folder(p, sim="verilator", samples=3000)
    assert res.ok, res.summary()
    # the folder's own testbench with its default stimulus prints PASS
    top = json.loads((p / "design.json").read_text())["top"]
    exe = compiled_testbench(p, top)  # the one check_folder compiled
    line = run_verilator(exe, [], cwd=p)
    assert line.startswith(f"PASS {top} ") and line.endswith(" outputs"), line


@pytest.mark.slow
def test_verilator_detects_corruption(vfolders, tmp_path):
    p = vfolders["timeshared_polyphase_dec3"]
    top = "v_tsp"
    bad = tmp_path / "bad"
    shutil.copytree(p, bad)
    v = (bad / f"{top}.v").read_text()
    # change one coefficient of the ROM: the first decimal constant assigned to a coefficient signal
    ms = [m for m in re.finditer(r"(coef_\w+\s*=\s*)(\d+)'h([0-9a-f]+);", v) if int(m.group(3), 16)]
    assert ms, "no coefficient constant found"
    m = ms[0]
    w, val = int(m.group(2)), int(m.group(3), 16)
    new = f"{m.group(1)}{w}'h{(val ^ 1):0{len(m.group(3))}x};"
    (bad / f"{top}.v").write_text(v[:m.start()] + new + v[m.end():])
    res = check_folder(bad, sim="verilator", samples=500)
    assert not res.ok and res.first_failure.index is not None
    assert main(["check", str(bad), "--sim", "verilator", "--samples", "300"]) == 1
    exe = compiled_testbench(bad, top)
    assert run_verilator(exe, [], cwd=bad).startswith(f"FAIL {top} index ")
    # the unmodified design against a corrupted expected vector: the testbench fails too
    good = tmp_path / "good"
    shutil.copytree(p, good)
    sheet = json.loads((good / "design.json").read_text())
    e = sheet["vectors"][0]
    lines = (good / "vectors" / e["expect"]).read_text().splitlines()
    k = len(lines) // 2
    lines[k] = format(int(lines[k], 16) ^ 1, f"0{len(lines[k])}x")
    (good / "vectors" / e["expect"]).write_text("\n".join(lines) + "\n")
    exe = compiled_testbench(good, top)
    line = run_verilator(exe, [], cwd=good)
    assert line.startswith(f"FAIL {top} index {k} expected"), line
