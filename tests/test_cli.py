"""End-to-end tests of the command line: plan (text and JSON), build, check, synth.

The checks compare against the public contract (../shared/interface.md):
exit statuses 0/1/2, the plan --json fields, the design folder files and
design.json fields, and the bit-true model recomputed from design.json alone.
"""
from __future__ import annotations

import dataclasses
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from tapwright.cli import main
from tapwright.design.plan import make_design
from tapwright.explore import explore, explore_all, products_lower_bound
from tapwright.fixed import reference
from tapwright.plan import plan
from tapwright.spec import parse_spec_text
from tapwright.verify.sheet import design_from_json

SMALL = """
name = "probe_lp"
sample_rate = 10e6
family = "fir"
[[band]]
edges = [0, 1e6]
gain = 1.0
ripple_db = 0.5
[[band]]
edges = [2.5e6, 5e6]
gain = 0.0
atten_db = 45
[input]
bits = 12
frac = 11
[target]
device = "{device}"
clock = {clock}
[target.budget]
{budget}
"""


def write_spec(tmp_path, device="xc7", clock=40e6, budget="dsp = 64", name="probe_lp", extra=""):
    p = tmp_path / f"{name}.toml"
    p.write_text(SMALL.format(device=device, clock=clock, budget=budget).replace("probe_lp", name) + extra)
    return p


def test_plan_json_contract_fields(tmp_path, capsys):
    p = write_spec(tmp_path)
    assert main(["plan", str(p), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert set(d) >= {"spec", "candidates"}
    assert d["candidates"], "at least one candidate"
    for c in d["candidates"]:
        assert {"structure", "feasible", "estimate", "why"} <= set(c)
        assert isinstance(c["feasible"], bool)
        e = c["estimate"]
        assert {"device", "dsp", "lut", "ff", "carry", "fmax_mhz"} <= set(e)
        if not c["feasible"]:
            assert c["why"]
    ids = {c["structure"] for c in d["candidates"]}
    assert {"direct", "transposed", "symmetric", "timeshared"} <= ids


def test_plan_text_names_recommendation(tmp_path, capsys):
    p = write_spec(tmp_path)
    assert main(["plan", str(p)]) == 0
    out = capsys.readouterr().out
    assert "recommended:" in out and "not sign-off" in out


def test_impossible_budget_exits_1_with_closest(tmp_path, capsys):
    p = write_spec(tmp_path, budget="dsp = 0\nlut = 10\nff = 10")
    assert main(["plan", str(p)]) == 1
    out = capsys.readouterr().out
    assert "no candidate fits" in out and "closest:" in out and "over by" in out


def test_designs_larger_than_the_family_are_not_recommended(tmp_path):
    # Outside reference: the iCE40UP5K, the biggest iCE40 UltraPlus part, has 5280 logic
    # cells (LUT4 + FF each) and 8 DSP blocks (nextpnr-ice40 --up5k utilization report;
    # FPGA-DS-02008 Table 1.1). A 146-tap decimating FIR with no budget beyond its DSP
    # blocks: the shift-add forms need more cells than that, so they must not be
    # recommended whatever their cost, and the reason says why.
    p = write_spec(tmp_path, device="ice40", clock=48e6, budget="dsp = 8", name="strain_dec8")
    text = p.read_text().replace("sample_rate = 10e6", 'sample_rate = 1e6\ndecimation = 8')
    text = text.replace("edges = [0, 1e6]", "edges = [0, 40e3]").replace("ripple_db = 0.5", "ripple_db = 0.1")
    text = text.replace("edges = [2.5e6, 5e6]", "edges = [62.5e3, 500e3]").replace("atten_db = 45", "atten_db = 70")
    text = text.replace("bits = 12\nfrac = 11", "bits = 16\nfrac = 15")
    p.write_text(text)
    res = plan(parse_spec_text(text))
    # an iCE40 logic cell holds a LUT4, its carry and a flip-flop: carry cells take no cell
    big = [c for c in res.exploration.candidates
           if c.estimate.lut > 5280 or c.estimate.ff > 5280 or c.estimate.dsp > 8]
    assert big, "the example should have candidates larger than the part"
    for c in big:
        assert not c.feasible and "larger than iCE40UP5K" in c.why, (c.label, c.why)
    assert res.design.fixed.stages[0].ntaps > 100 and res.exploration.recommended not in big


def test_bad_device_exits_2(tmp_path, capsys):
    p = write_spec(tmp_path, device="xc9000")
    assert main(["plan", str(p)]) == 2
    err = capsys.readouterr().err
    assert "target.device" in err and "xc7" in err and "Traceback" not in err


@pytest.mark.parametrize("spec_kw", [
    # (device, clock, budget): the multiplier lower bound ceil(T / (M*C)), T products after
    # symmetry and power-of-two savings, C = clock/sample_rate cycles per sample
    dict(device="generic", clock=10e6, budget="dsp = 1000"),
    dict(device="generic", clock=20e6, budget="dsp = 1000"),
    dict(device="generic", clock=40e6, budget="dsp = 1000"),
    dict(device="xc7", clock=80e6, budget="dsp = 1000"),
])
def test_dsp_lower_bound_reached(tmp_path, spec_kw):
    """With a budget that asks for it, the best candidate's multipliers equal the lower bound."""
    p = write_spec(tmp_path, **spec_kw)
    spec = parse_spec_text(p.read_text(), str(p))
    r = plan(spec)
    C = spec.cycles_per_sample
    lb = products_lower_bound(r.design.fixed, C)
    T = lb  # recompute independently from the coefficients
    c = r.design.fixed.stages[0].coeffs
    L = len(c)
    half = c[: (L + 1) // 2] if r.design.fixed.stages[0].symmetry() else c
    T = sum(1 for v in half if v != 0 and (abs(v) & (abs(v) - 1)) != 0)
    # a transposed form multiplies one input by every coefficient: equal coefficients are one
    # product after synthesis (identical constant products merged, tests/test_probes.py)
    T = min(T, len({v for v in c if v != 0 and (abs(v) & (abs(v) - 1)) != 0}))
    assert lb == math.ceil(T / C)
    # tighten the budget to the bound: the explorer must still find a candidate at it
    from tapwright.spec import Budget
    tight = dataclasses.replace(spec, budget=Budget(dsp=lb))
    ex = explore(r.design.fixed, tight)
    # structures with multipliers (shift-add has none and is not bound by this)
    within = [x for x in ex.candidates if x.structure != "shiftadd" and "dsp" not in x.excess
              and "input_interval" not in x.excess]
    assert within and min(x.estimate.dsp for x in within) == lb


def test_lower_bound_decimating_specs(tmp_path):
    """Decimation by M divides the bound (products at the output rate; Crochiere & Rabiner 1983)."""
    for M in (2, 4):
        txt = SMALL.format(device="generic", clock=10e6, budget="dsp = 1000").replace(
            'family = "fir"', f'family = "fir"\ndecimation = {M}').replace("[2.5e6, 5e6]", "[1.25e6, 5e6]" if M == 4 else "[2.5e6, 5e6]")
        spec = parse_spec_text(txt, f"dec{M}.toml")
        r = plan(spec)
        lb = r.exploration.lower_bound
        ts = [c for c in r.exploration.candidates if c.structure == "timeshared" and "polyphase" in c.recipe.transforms]
        assert ts and min(c.estimate.dsp for c in ts) == lb


def test_build_check_roundtrip_and_determinism(tmp_path, capsys):
    p = write_spec(tmp_path, budget="dsp = 8")
    out1, out2 = tmp_path / "a", tmp_path / "b"
    assert main(["build", str(p), "--out", str(out1)]) == 0
    assert main(["build", str(p), "--out", str(out2)]) == 0
    files1 = sorted(f.relative_to(out1) for f in out1.rglob("*") if f.is_file())
    files2 = sorted(f.relative_to(out2) for f in out2.rglob("*") if f.is_file())
    assert files1 == files2
    for f in files1:
        assert (out1 / f).read_bytes() == (out2 / f).read_bytes(), f
    sheet = json.loads((out1 / "design.json").read_text())
    for k in ("top", "verilog", "structure", "sample_rate", "clock", "input", "output", "rounding",
              "overflow", "decimation", "decimation_phase", "input_interval", "latency", "stages", "estimate"):
        assert k in sheet
    assert (out1 / sheet["verilog"]).is_file() and (out1 / "report.md").is_file()
    assert "module probe_lp" in (out1 / "probe_lp.v").read_text()
    # an outside checker recomputes the output from design.json alone
    d = design_from_json(sheet)
    x = np.random.default_rng(0).integers(-2048, 2048, size=200)
    c = sheet["stages"][0]
    acc = np.convolve(x, np.array(c["coeffs"], dtype=np.int64))[:200]
    shift = sheet["input"]["frac"] + c["coeff_frac"] - c["output"]["frac"]
    mine = (acc + (1 << (shift - 1))) >> shift if sheet["rounding"] == "half_up" else None
    if mine is not None:
        lo, hi = -(1 << (c["output"]["bits"] - 1)), (1 << (c["output"]["bits"] - 1)) - 1
        assert np.array_equal(np.clip(mine, lo, hi), reference.run(d, x))
    # an existing folder is not replaced without --force
    capsys.readouterr()
    assert main(["build", str(p), "--out", str(out1)]) == 2
    assert main(["build", str(p), "--out", str(out1), "--force"]) == 0
    assert main(["check", str(out1)]) == 0
    assert "PASS" in capsys.readouterr().out


def test_check_missing_folder_exits_2(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nothing")]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_console_script_runs():
    r = subprocess.run([sys.executable, "-m", "tapwright", "--help"], capture_output=True, text=True)
    assert r.returncode == 0 and "plan" in r.stdout


@pytest.mark.parametrize("spec", sorted(str(p) for p in Path(__file__).parent.parent.glob("specs/*.toml")
                                        if "audio_dec64" not in p.name))
def test_example_specs_plan(spec, capsys):
    """Every bundled example plans (exit 0 when something fits, 1 with a closest candidate)."""
    code = main(["plan", spec, "--json"])
    d = json.loads(capsys.readouterr().out)
    assert code in (0, 1)
    assert d["candidates"]
    assert (code == 0) == (d["recommended"] is not None)


CHAIN_SPEC = """
name = "probe_dec8"
sample_rate = 8e6
decimation = 8
family = "fir"
[[band]]
edges = [0, 300e3]
gain = 1.0
ripple_db = 0.5
[[band]]
edges = [500e3, 4e6]
gain = 0.0
atten_db = 50
[input]
bits = 12
frac = 11
[target]
device = "generic"
clock = 32e6
"""


def test_chain_candidate_builds_its_own_stages(tmp_path, capsys):
    """A chain candidate's folder carries every stage (contract: stages in order, decimation the
    product, decimation_phase from the stages' phases) and checks bit-exact."""
    p = tmp_path / "probe_dec8.toml"
    p.write_text(CHAIN_SPEC)
    assert main(["plan", str(p), "--json"]) in (0, 1)
    d = json.loads(capsys.readouterr().out)
    chains = [c for c in d["candidates"] if c["structure"] == "chain"]
    assert chains and all(isinstance(c["stages"], list) and len(c["stages"]) >= 2 for c in chains)
    out = tmp_path / "f"
    assert main(["build", str(p), "--structure", "chain", "--out", str(out)]) == 0
    sheet = json.loads((out / "design.json").read_text())
    assert sheet["structure"] == "chain" and len(sheet["stages"]) >= 2
    prod = 1
    for s in sheet["stages"]:
        prod *= s.get("decimation", 1)
    assert prod == sheet["decimation"] == 8
    capsys.readouterr()
    assert main(["check", str(out)]) == 0


def test_plan_does_not_depend_on_the_hash_seed(tmp_path):
    # same spec, same bytes (common practice for generators): the plan must not follow
    # Python's per-process string hashing (PYTHONHASHSEED), here two different seeds
    import os
    spec = Path(__file__).parent.parent / "specs" / "adc_halfband.toml"
    outs = []
    for seed in ("1", "4"):
        env = dict(os.environ, PYTHONHASHSEED=seed)
        r = subprocess.run([sys.executable, "-m", "tapwright", "plan", str(spec), "--json"],
                           capture_output=True, text=True, env=env, timeout=300)
        assert r.returncode == 0, r.stderr
        outs.append(r.stdout)
    assert outs[0] == outs[1]


def test_recipes_giving_the_same_graph_are_listed_once(tmp_path, capsys):
    """A halfband folded with and without the halfband transform is the same hardware (the
    fold drops the zero taps either way): one row, under the name that says more, and the
    other name still builds it. Sameness is checked here by networkx's exact graph
    isomorphism (VF2) on the realized graphs, not by the explorer's own fingerprint."""
    import networkx as nx

    from tapwright.build import build_design
    from tapwright.sfg.recipe import realize

    spec = Path(__file__).parent.parent / "specs" / "adc_halfband.toml"
    res = plan(parse_spec_text(spec.read_text(), path=spec))
    ex = res.exploration
    labels = [c.label for c in ex.candidates]
    assert len(labels) == len(set(labels))
    twin = next(c for c in ex.candidates if c.same_as)
    assert "halfband" in twin.label and all("halfband" not in a for a in twin.same_as)
    alias = twin.same_as[0]
    assert alias not in labels and ex.by_label()[alias] is twin

    attrs = ("kind", "fmt", "coeff", "table", "select", "zero_port", "steps", "rounding", "overflow")
    nm = lambda a, b: all(a.get(k) == b.get(k) for k in attrs)                       # noqa: E731
    em = lambda a, b: sorted((e["z"], e["pipe"], e["sign"], e["shift"], e["port"]) for e in a.values()) \
        == sorted((e["z"], e["pipe"], e["sign"], e["shift"], e["port"]) for e in b.values())  # noqa: E731
    from tapwright.sfg.recipe import Recipe
    other = Recipe.from_dict(dict(twin.recipe.as_dict(), transforms=[
        t for t in twin.recipe.transforms if t != "halfband"]))
    assert other.label == alias
    g1 = realize(res.design.fixed, twin.recipe, name="a")
    g2 = realize(res.design.fixed, other, name="a")
    assert nx.is_isomorphic(g1, g2, node_match=nm, edge_match=em)

    v1 = build_design(res, structure=twin.label, out=tmp_path / "a")
    v2 = build_design(res, structure=alias, out=tmp_path / "b")
    assert (v1 / "adc_halfband.v").read_text() == (v2 / "adc_halfband.v").read_text()
    assert main(["plan", str(spec)]) == 0
    out = capsys.readouterr().out
    assert f"{alias} = {twin.label}" in out


def test_sheet_and_report_say_where_the_pipeline_registers_are(tmp_path):
    """design.json "pipeline" and the report line: a folded ECP5 design at 100 MHz has
    registers inside its operand multiplexers and one product registered in front of its
    accumulator; an unpipelined one has no period (strict JSON: no Infinity)."""
    from tapwright.build import build_design

    root = Path(__file__).parent.parent
    spec = dataclasses.replace(parse_spec_text((root / "specs" / "servo_diff.toml").read_text()),
                               device="ecp5")
    res = plan(spec)
    piped = next(c for c in res.exploration.candidates
                 if c.structure == "timeshared" and c.recipe.period is not None and c.estimate.dsp <= 2)
    unpiped = next(c for c in res.exploration.candidates
                   if c.structure == "timeshared" and c.recipe.period is None)

    def strict(p):
        return json.loads(p.read_text(), parse_constant=lambda c: pytest.fail(f"non-JSON {c}"))
    d = build_design(res, structure=piped.label, out=tmp_path / "a")
    pl = strict(d / "design.json")["pipeline"]
    assert pl["split_multiplexers"] and pl["registered_products"] >= 1 and pl["period_ns"] > 0
    assert "registers inside 2 operand multiplexers" in (d / "report.md").read_text()
    d = build_design(res, structure=unpiped.label, out=tmp_path / "b")
    assert strict(d / "design.json")["pipeline"]["period_ns"] is None
    assert "pipelined for" not in (d / "report.md").read_text()


def test_estimate_does_not_follow_node_order():
    """Identical constant products merge in the estimate (one kept, the others its
    twins); the registers the hard block absorbs must not depend on which one is kept,
    i.e. on the graph's node order (which follows set iteration, PYTHONHASHSEED, in the
    transforms). Found on a strain-gauge decimator of our own on iCE40: transposed/p15.8
    estimated 7420 or 7442 flip-flops depending on the hash seed. Reference: the same
    graph with its nodes inserted in reverse order (networkx keeps insertion order)."""
    import networkx as nx

    from tapwright.cost.estimate import estimate
    from tapwright.cost.timing import delay_function
    from tapwright.sfg.recipe import realize

    spec = parse_spec_text(STRAIN)
    res = plan(spec)
    c = res.exploration.by_label()["transposed/p15.8"]
    g = realize(res.design.fixed, c.recipe, delays=delay_function("ice40"))
    rev = nx.MultiDiGraph()
    rev.graph.update((k, v) for k, v in g.graph.items() if not k.startswith("_"))
    rev.add_nodes_from(reversed(list(g.nodes(data=True))))
    rev.add_edges_from(reversed(list(g.edges(keys=True, data=True))))
    a, b = estimate(g, "ice40"), estimate(rev, "ice40")
    assert (a.dsp, a.lut, a.carry, a.ff, a.fmax_mhz) == (b.dsp, b.lut, b.carry, b.ff, b.fmax_mhz)


STRAIN = """
# strain-gauge bridge decimator (a demo scenario of our own)
name = "strain_dec8"
sample_rate = "1 MHz"
decimation = 8
family = "fir"
[[band]]
edges = [0, "40 kHz"]
gain = 1.0
ripple_db = 0.1
[[band]]
edges = ["62.5 kHz", "500 kHz"]
gain = 0.0
atten_db = 80
[input]
bits = 18
frac = 17
[target]
device = "ice40"
clock = "48 MHz"
[target.budget]
dsp = 8
"""


AUTO_LP = """
name = "mains_lp"
sample_rate = 48e3
family = "auto"
[[band]]
edges = [0, 400]
gain = 1.0
ripple_db = 0.5
[[band]]
edges = [1000, 24000]
gain = 0.0
atten_db = 70
[input]
bits = 16
frac = 15
[target]
device = "xc7"
clock = 50e6
[target.budget]
dsp = {dsp}
"""


def test_auto_family_takes_the_other_family_when_none_of_the_first_fits():
    """family = "auto" chooses by multiplications per output before any structure is
    costed. An order-5 elliptic low-pass (scipy.signal.ellipord, the reference for the
    order: 5 for 0.5 dB / 70 dB between 400 Hz and 1 kHz at 48 kHz) needs 13 products per
    sample against over a hundred for the FIR, but its sections are not time-shared: with
    two DSP blocks and 1041 cycles per sample no IIR structure fits, a folded FIR does."""
    assert signal.ellipord(400, 1000, 0.5, 70, fs=48e3)[0] == 5   # SciPy as reference
    tight = parse_spec_text(AUTO_LP.format(dsp=2))
    first = make_design(tight)
    assert first.family == "iir" and first.float_design.order == 5
    assert not explore_all(tight, first.fixed, []).ok        # nothing of the first family fits
    res = plan(tight)
    assert res.ok and res.design.family == "fir"
    assert res.recommended.feasible and res.recommended.estimate.dsp <= 2
    why = res.design.why
    assert why.startswith("FIR: no IIR structure fits the target") and "dsp" in why and "13 multiplications" in why
    # with room for the sections the first choice stands
    roomy = parse_spec_text(AUTO_LP.format(dsp=40))
    res2 = plan(roomy)
    assert res2.ok and res2.design.family == "iir" and res2.design.why == first.why
    # a family set in the spec is never changed
    fixed_iir = dataclasses.replace(tight, family="iir")
    res3 = plan(fixed_iir)
    assert res3.design.family == "iir" and not res3.ok
