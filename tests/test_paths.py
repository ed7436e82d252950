"""The critical-path comparison tool (python -m tapwright.synth.paths)."""
import dataclasses

import pytest

from tapwright.cost.timing import delay_function
from tapwright.plan import plan
from tapwright.sfg.recipe import realize
from tapwright.sfg.transforms.pipeline import critical_path
from tapwright.spec import parse_spec_text
from tapwright.synth.paths import main, model_path, pnr_path

from test_calibrate import TINY


@pytest.fixture(scope="module")
def tiny_ecp5():
    spec = dataclasses.replace(parse_spec_text(TINY), device="ecp5")
    return spec, plan(spec)


def test_model_path_is_the_critical_path(tiny_ecp5):
    # the path ends at the slowest node, each step is a combinational edge of the graph
    # and the arrivals add up (the model's own definition in sfg/transforms/pipeline.py)
    _, res = tiny_ecp5
    f = delay_function("ecp5")
    for c in res.exploration.candidates:
        g = realize(c.fixed or res.design.fixed, c.recipe, delays=f)
        path = model_path(g, f)
        assert path and path[-1]["arrival_ns"] == pytest.approx(critical_path(g, f), abs=1e-3)
        for a, b in zip(path, path[1:]):
            assert any(e["z"] == 0 and e["pipe"] == 0 for e in g[a["node"]][b["node"]].values())
            assert b["arrival_ns"] <= a["arrival_ns"] + b["delay_ns"] + 1e-3


def test_pnr_path_picks_the_slowest_clocked_path():
    # the report layout of nextpnr 0.11's --report JSON (critical_paths: from, to, path steps)
    rep = {"critical_paths": [
        {"from": "<async>", "to": "clk", "path": [{"type": "routing", "delay": 50.0}]},
        {"from": "clk", "to": "clk", "path": [{"type": "clk-to-q", "delay": 0.5, "from": {"cell": "a"}},
                                              {"type": "logic", "delay": 2.0, "from": {"cell": "b"}}]},
        {"from": "clk", "to": "clk", "path": [{"type": "routing", "delay": 1.0, "to": {"cell": "c"}}]},
    ]}
    p = pnr_path(rep)
    assert p["total_ns"] == 2.5 and [s["type"] for s in p["steps"]] == ["clk-to-q", "logic"]
    assert pnr_path({"critical_paths": []}) is None


def test_cli_compares_with_nextpnr(tmp_path, capsys):
    spec = tmp_path / "tiny.toml"
    spec.write_text(TINY)
    assert main([str(spec), "nonsense"]) == 2
    assert "not explored for ecp5" in capsys.readouterr().err
    res = plan(dataclasses.replace(parse_spec_text(TINY), device="ecp5"))
    label = (res.exploration.recommended or res.exploration.closest).label
    assert main([str(spec), label, "--workdir", str(tmp_path / "w")]) == 0
    out = capsys.readouterr().out
    assert "model path" in out and "nextpnr path" in out and "MHz achieved" in out
