"""Spec parsing: values, defaults, precise errors (exit 2), fuzzing, example specs."""
from __future__ import annotations

import copy
import datetime as dt
import json
import math
import re
import tempfile
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tapwright.cli import main
from tapwright.spec import NAME_RE, Band, Budget, Spec, SpecError, load_spec, parse_spec_text

SPECS_DIR = Path(__file__).resolve().parents[1] / "specs"


# --------------------------------------------------------------------------------------------
# a tiny TOML writer (enough for the fuzzer and the malformed cases)

_BARE = re.compile(r"[A-Za-z0-9_-]+")


def _key(k: str) -> str:
    return k if _BARE.fullmatch(k) else _string(k)


def _string(s: str) -> str:
    # JSON string escapes (\" \\ \n \t \uXXXX) are valid TOML basic-string escapes; DEL must be escaped too
    return json.dumps(s, ensure_ascii=False).replace("\x7f", "\\u007f")


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return _string(v)
    if isinstance(v, (dt.datetime, dt.date, dt.time)):
        return v.isoformat()
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


def _is_table_array(v) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def toml_dumps(doc: dict) -> str:
    lines: list[str] = []

    def table(d: dict, path: list[str]):
        for k, v in d.items():
            if not isinstance(v, dict) and not _is_table_array(v):
                lines.append(f"{_key(k)} = {_value(v)}")
        for k, v in d.items():
            sub = path + [_key(k)]
            if isinstance(v, dict):
                lines.append(f"[{'.'.join(sub)}]")
                table(v, sub)
            elif _is_table_array(v):
                for item in v:
                    lines.append(f"[[{'.'.join(sub)}]]")
                    table(item, sub)

    table(doc, [])
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------------------------
# the contract example

CONTRACT = {
    "name": "rx_stage2",
    "sample_rate": 98.304e6,
    "decimation": 4,
    "family": "fir",
    "iir_response": "elliptic",
    "band": [
        {"edges": [0.0, 3.0e6], "gain": 1.0, "ripple_db": 0.2},
        {"edges": [5.0e6, 49.152e6], "gain": 0.0, "atten_db": 75},
    ],
    "input": {"bits": 16, "frac": 15},
    "output": {"bits": "auto", "rounding": "half_up", "overflow": "saturate"},
    "target": {"device": "ecp5", "clock": 196.608e6,
               "budget": {"dsp": 28, "lut": 24000, "ff": 24000, "latency": 64}},
}

MINIMAL = """
name = "lp"
sample_rate = 48000
[[band]]
edges = [0, 8000]
gain = 1
ripple_db = 1
[[band]]
edges = [12000, 24000]
gain = 0
atten_db = 40
[input]
bits = 12
[target]
clock = 48000
"""


def test_writer_round_trips_the_contract():
    assert tomllib.loads(toml_dumps(CONTRACT)) == CONTRACT


def test_contract_example_values():
    s = parse_spec_text(toml_dumps(CONTRACT), "c.toml")
    assert isinstance(s, Spec)
    assert s.name == "rx_stage2" and s.path == "c.toml"
    assert s.sample_rate == 98.304e6 and s.decimation == 4
    assert s.output_rate == 24.576e6 and s.nyquist == 49.152e6
    assert s.family == "fir" and s.iir_response == "elliptic"
    assert s.bands == (
        Band(0.0, 3e6, (1.0, 1.0), "pass", ripple_db=0.2),
        Band(5e6, 49.152e6, (0.0, 0.0), "stop", atten_db=75.0),
    )
    assert (s.in_bits, s.in_frac) == (16, 15)
    assert s.out_bits is None and s.out_frac is None
    assert (s.rounding, s.overflow) == ("half_up", "saturate")
    assert s.device == "ecp5" and s.clock == 196.608e6 and s.cycles_per_sample == 2
    assert s.budget == Budget(dsp=28, lut=24000, ff=24000, latency=64)
    assert s.warnings == ()
    assert s.pass_bands() == [s.bands[0]] and s.stop_bands() == [s.bands[1]]
    json.dumps(s.as_dict())  # serialisable


def test_defaults():
    s = parse_spec_text(MINIMAL)
    assert s.decimation == 1 and s.family == "auto" and s.iir_response == "elliptic"
    assert s.fir_method == "equiripple" and s.phase == "any" and s.coeff_bits is None
    assert (s.in_bits, s.in_frac) == (12, 11)  # frac defaults to bits - 1
    assert s.out_bits is None and s.out_frac is None
    assert (s.rounding, s.overflow) == ("half_up", "saturate")
    assert s.device == "generic" and s.clock == 48000.0 and s.cycles_per_sample == 1
    assert s.budget == Budget() and s.budget.as_dict() == {}
    assert s.bands[0].gain == (1.0, 1.0) and isinstance(s.bands[0].lo, float)


@pytest.mark.parametrize("text, hz", [
    ('"4 MHz"', 4e6), ('"4MHz"', 4e6), ('"98.304e6 Hz"', 98.304e6), ('"750 kHz"', 750e3),
    ('"98.304 MHz"', 98.304e6), ('"1.5 GHz"', 1.5e9), ('"48000"', 48000.0), ('" 12.5 khz "', 12.5e3),
    ("98.304e6", 98.304e6), ("48000", 48000.0), ('"196.608 MHz"', 196.608e6),
])
def test_frequency_units(text, hz):
    s = parse_spec_text(MINIMAL.replace("sample_rate = 48000", f"sample_rate = {text}")
                        .replace("[target]\nclock = 48000", '[target]\nclock = "2 GHz"')
                        .replace("edges = [0, 8000]", "edges = [0, 1000]")
                        .replace("edges = [12000, 24000]", "edges = [2000, 6000]"))
    assert s.sample_rate == hz
    s = parse_spec_text(MINIMAL.replace("[target]\nclock = 48000", f"[target]\nclock = {text}")
                        .replace("sample_rate = 48000", "sample_rate = 12500")
                        .replace("edges = [0, 8000]", "edges = [0, 1000]")
                        .replace("edges = [12000, 24000]", "edges = [2000, 6000]"))
    assert s.clock == hz


def test_unit_strings_in_edges_are_exact_at_nyquist():
    d = copy.deepcopy(CONTRACT)
    d["sample_rate"] = "98.304 MHz"
    d["band"][0]["edges"] = ["0 Hz", "3 MHz"]
    d["band"][1]["edges"] = ["5 MHz", "49.152 MHz"]
    d["target"]["clock"] = "196.608 MHz"
    s = parse_spec_text(toml_dumps(d))
    assert s.bands[1].hi == s.nyquist == 49.152e6
    assert s.bands[0].hi == 3e6 and s.clock == 196.608e6


def test_output_and_options():
    d = copy.deepcopy(CONTRACT)
    d.update(family="auto", fir_method="kaiser", phase="linear", coeff_bits=18)
    d["output"] = {"bits": 20, "frac": 17, "rounding": "half_even", "overflow": "wrap"}
    s = parse_spec_text(toml_dumps(d))
    assert (s.out_bits, s.out_frac, s.rounding, s.overflow) == (20, 17, "half_even", "wrap")
    assert (s.family, s.fir_method, s.phase, s.coeff_bits) == ("auto", "kaiser", "linear", 18)


def test_shaped_band():
    d = copy.deepcopy(CONTRACT)
    d["decimation"] = 1
    d["band"] = [{"edges": [0, 10e6], "gain": [0.0, 0.64], "tolerance": 0.002},
                 {"edges": [20e6, 49.152e6], "gain": 0, "atten_db": 40}]
    s = parse_spec_text(toml_dumps(d))
    b = s.bands[0]
    assert b.kind == "shaped" and b.gain == (0.0, 0.64) and b.tolerance == 0.002
    assert b.desired(5e6) == pytest.approx(0.32) and b.deviation() == 0.002
    assert s.bands[1].deviation(0.64) == pytest.approx(0.64e-2)


def test_touching_bands_allowed_when_gain_is_continuous():
    d = copy.deepcopy(CONTRACT)
    d["decimation"] = 1
    d["band"] = [{"edges": [0, 1e6], "gain": 1.0, "ripple_db": 0.5},
                 {"edges": [1e6, 2e6], "gain": [1.0, 0.5], "tolerance": 0.01},
                 {"edges": [4e6, 49.152e6], "gain": 0, "atten_db": 60}]
    assert len(parse_spec_text(toml_dumps(d)).bands) == 3


# --------------------------------------------------------------------------------------------
# malformed specs: exit 2, key named, no traceback


def _set(path, value):
    def f(d):
        *head, last = path
        for p in head:
            d = d[p]
        d[last] = value
    return f


def _del(path):
    def f(d):
        *head, last = path
        for p in head:
            d = d[p]
        del d[last]
    return f


def _then(*fs):
    def f(d):
        for g in fs:
            g(d)
    return f


BAD = [
    # (id, raw text/bytes or mutation of CONTRACT, key that the message must name ("" = the file))
    ("empty_file", "", ""),
    ("blank_file", "  \n\t\n", ""),
    ("not_toml", "name = = 3\n[[band]\n", ""),
    ("not_utf8", b"name = \"\xff\xfe\"\n", ""),
    ("huge_int_literal", "name = 'a'\nsample_rate = " + "9" * 5000 + "\n", ""),
    ("deep_nesting", "x = " + "[" * 5000 + "]" * 5000 + "\n", ""),
    ("unknown_top_key", _set(("colour",), "red"), "colour"),
    ("unknown_band_key", _set(("band", 0, "ripple"), 0.1), "band[1].ripple"),
    ("unknown_band_subtable", _set(("band", 1, "extra"), {"x": 1}), "band[2].extra"),
    ("unknown_input_key", _set(("input", "signed"), True), "input.signed"),
    ("unknown_output_key", _set(("output", "round"), "half_up"), "output.round"),
    ("unknown_target_key", _set(("target", "fpga"), "ecp5"), "target.fpga"),
    ("unknown_budget_key", _set(("target", "budget", "bram"), 4), "target.budget.bram"),
    ("missing_name", _del(("name",)), "name"),
    ("missing_sample_rate", _del(("sample_rate",)), "sample_rate"),
    ("missing_band", _del(("band",)), "band"),
    ("missing_input", _del(("input",)), "input"),
    ("missing_target", _del(("target",)), "target"),
    ("missing_clock", _del(("target", "clock")), "target.clock"),
    ("missing_input_bits", _del(("input", "bits")), "input.bits"),
    ("missing_edges", _del(("band", 1, "edges")), "band[2].edges"),
    ("missing_gain", _del(("band", 0, "gain")), "band[1].gain"),
    ("missing_ripple", _del(("band", 0, "ripple_db")), "band[1].ripple_db"),
    ("missing_atten", _del(("band", 1, "atten_db")), "band[2].atten_db"),
    ("sample_rate_word", _set(("sample_rate",), "fast"), "sample_rate"),
    ("sample_rate_bad_unit", _set(("sample_rate",), "98 parsecs"), "sample_rate"),
    ("sample_rate_negative", _set(("sample_rate",), -1e6), "sample_rate"),
    ("sample_rate_zero", _set(("sample_rate",), 0), "sample_rate"),
    ("sample_rate_bool", _set(("sample_rate",), True), "sample_rate"),
    ("sample_rate_datetime", _set(("sample_rate",), dt.datetime(2024, 5, 1, 12, 0)), "sample_rate"),
    ("sample_rate_nan", _set(("sample_rate",), math.nan), "sample_rate"),
    ("sample_rate_inf", _set(("sample_rate",), math.inf), "sample_rate"),
    ("sample_rate_huge_int", _set(("sample_rate",), 10**400), "sample_rate"),
    ("sample_rate_array", _set(("sample_rate",), [98.304e6]), "sample_rate"),
    ("edge_above_nyquist", _set(("band", 1, "edges"), [5e6, 60e6]), "band[2].edges"),
    ("edge_negative", _set(("band", 0, "edges"), [-1.0, 3e6]), "band[1].edges"),
    ("edges_descending", _set(("band", 0, "edges"), [3e6, 0.0]), "band[1].edges"),
    ("edges_three", _set(("band", 0, "edges"), [0.0, 1e6, 3e6]), "band[1].edges"),
    ("edges_not_list", _set(("band", 0, "edges"), "0-3 MHz"), "band[1].edges"),
    ("edge_bad_string", _set(("band", 0, "edges"), [0, "3 furlongs"]), "band[1].edges"),
    ("bands_overlap", _set(("band", 1, "edges"), [2e6, 49.152e6]), "band[2].edges"),
    ("bands_out_of_order", _set(("band",), [CONTRACT["band"][1], CONTRACT["band"][0]]), "band[2].edges"),
    ("bands_touch_with_jump", _set(("band", 1, "edges"), [3e6, 49.152e6]), "band[2].edges"),
    ("ripple_negative", _set(("band", 0, "ripple_db"), -0.2), "band[1].ripple_db"),
    ("ripple_zero", _set(("band", 0, "ripple_db"), 0), "band[1].ripple_db"),
    ("atten_zero", _set(("band", 1, "atten_db"), 0), "band[2].atten_db"),
    ("atten_negative", _set(("band", 1, "atten_db"), -75), "band[2].atten_db"),
    ("atten_string", _set(("band", 1, "atten_db"), "75 dB"), "band[2].atten_db"),
    ("gain_string", _set(("band", 0, "gain"), "unity"), "band[1].gain"),
    ("gain_nan", _set(("band", 0, "gain"), math.nan), "band[1].gain"),
    ("ripple_on_stop", _set(("band", 1, "ripple_db"), 0.1), "band[2].ripple_db"),
    ("atten_on_pass", _set(("band", 0, "atten_db"), 60), "band[1].atten_db"),
    ("tolerance_on_pass", _set(("band", 0, "tolerance"), 0.01), "band[1].tolerance"),
    ("shaped_without_tolerance", _then(_set(("band", 0, "gain"), [0.0, 1.0]), _del(("band", 0, "ripple_db"))),
     "band[1].tolerance"),
    ("shaped_three_gains", _set(("band", 0, "gain"), [0.0, 0.5, 1.0]), "band[1].gain"),
    ("only_stop_bands", _set(("band",), [CONTRACT["band"][1]]), "band"),
    ("band_is_a_table", _set(("band",), {"edges": [0, 3e6], "gain": 1.0, "ripple_db": 0.2}), "band"),
    ("band_is_numbers", _set(("band",), [1, 2]), "band[1]"),
    ("band_empty", _set(("band",), []), "band"),
    ("input_table_array", _set(("input",), [{"bits": 16}]), "input"),
    ("input_bits_1", _set(("input", "bits"), 1), "input.bits"),
    ("input_bits_33", _set(("input", "bits"), 33), "input.bits"),
    ("input_bits_string", _set(("input", "bits"), "16"), "input.bits"),
    ("input_bits_fraction", _set(("input", "bits"), 16.5), "input.bits"),
    ("frac_above_bits", _set(("input", "frac"), 17), "input.frac"),
    ("frac_negative", _set(("input", "frac"), -1), "input.frac"),
    ("clock_below_sample_rate", _set(("target", "clock"), 50e6), "target.clock"),
    ("clock_bad_unit", _set(("target", "clock"), "fast"), "target.clock"),
    ("bad_device", _set(("target", "device"), "spartan3"), "target.device"),
    ("device_number", _set(("target", "device"), 7), "target.device"),
    ("target_is_string", _set(("target",), "ecp5"), "target"),
    ("budget_is_string", _set(("target", "budget"), "small"), "target.budget"),
    ("budget_negative", _set(("target", "budget", "dsp"), -1), "target.budget.dsp"),
    ("budget_fraction", _set(("target", "budget", "dsp"), 2.5), "target.budget.dsp"),
    ("decimation_zero", _set(("decimation",), 0), "decimation"),
    ("decimation_fraction", _set(("decimation",), 2.5), "decimation"),
    ("decimation_negative", _set(("decimation",), -4), "decimation"),
    ("decimation_string", _set(("decimation",), "4"), "decimation"),
    ("name_uppercase", _set(("name",), "RxStage"), "name"),
    ("name_digit_first", _set(("name",), "2rx"), "name"),
    ("name_dash", _set(("name",), "rx-stage"), "name"),
    ("name_trailing_newline", _set(("name",), "rx\n"), "name"),
    ("name_keyword", _set(("name",), "module"), "name"),
    ("name_number", _set(("name",), 42), "name"),
    ("name_empty", _set(("name",), ""), "name"),
    ("family_unknown", _set(("family",), "fpga"), "family"),
    ("iir_response_unknown", _set(("iir_response",), "bessel"), "iir_response"),
    ("rounding_unknown", _set(("output", "rounding"), "nearest"), "output.rounding"),
    ("overflow_unknown", _set(("output", "overflow"), "clip"), "output.overflow"),
    ("output_bits_1", _set(("output", "bits"), 1), "output.bits"),
    ("output_frac_without_bits", _set(("output", "frac"), 15), "output.frac"),
    ("output_is_array", _set(("output",), [1, 2]), "output"),
    ("coeff_bits_3", _set(("coeff_bits",), 3), "coeff_bits"),
]


@pytest.mark.parametrize("case, expect_key", [(c[1], c[2]) for c in BAD], ids=[c[0] for c in BAD])
def test_bad_spec_exits_2(tmp_path, capsys, case, expect_key):
    path = tmp_path / "bad.toml"
    if isinstance(case, bytes):
        path.write_bytes(case)
    elif isinstance(case, str):
        path.write_text(case, encoding="utf-8")
    else:
        d = copy.deepcopy(CONTRACT)
        case(d)
        path.write_text(toml_dumps(d), encoding="utf-8")
    rc = main(["plan", str(path)])
    out, err = capsys.readouterr()
    assert rc == 2
    assert "Traceback" not in err and "Traceback" not in out
    assert err.startswith("error: ") and str(path) in err
    assert "allowed:" in err
    if expect_key:
        assert f"key '{expect_key}'" in err, err
    # the same problem through the API is a SpecError with that key
    with pytest.raises(SpecError) as ei:
        load_spec(path)
    assert ei.value.key == expect_key and ei.value.file == str(path) and ei.value.allowed


def test_enough_bad_cases():
    assert len(BAD) >= 15


def test_error_messages_list_allowed_values(tmp_path, capsys):
    d = copy.deepcopy(CONTRACT)
    d["target"]["device"] = "spartan3"
    p = tmp_path / "dev.toml"
    p.write_text(toml_dumps(d))
    assert main(["plan", str(p)]) == 2
    err = capsys.readouterr().err
    for dev in ("generic", "xc7", "ecp5", "ice40"):
        assert f'"{dev}"' in err
    d = copy.deepcopy(CONTRACT)
    d["target"]["budget"]["bram"] = 1
    p.write_text(toml_dumps(d))
    assert main(["plan", str(p)]) == 2
    err = capsys.readouterr().err
    assert "bram" in err and all(k in err for k in ("dsp", "lut", "ff", "latency"))


def test_weird_key_is_named_printably():
    d = copy.deepcopy(CONTRACT)
    d["input"]["bits\nx"] = 1
    with pytest.raises(SpecError) as ei:
        parse_spec_text(toml_dumps(d), "w.toml")
    assert ei.value.key == 'input."bits\\nx"' and "\n" not in str(ei.value)


def test_missing_file_exits_2(tmp_path, capsys):
    p = tmp_path / "nope.toml"
    assert main(["plan", str(p)]) == 2
    err = capsys.readouterr().err
    assert str(p) in err and "not found" in err and "Traceback" not in err


def test_directory_exits_2(tmp_path, capsys):
    assert main(["plan", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert str(tmp_path) in err and "directory" in err and "Traceback" not in err


# --------------------------------------------------------------------------------------------
# aliasing warnings for decimators


def _dec4(stop_edges):
    d = copy.deepcopy(CONTRACT)
    d["band"][1]["edges"] = stop_edges
    return parse_spec_text(toml_dumps(d), "dec.toml")


def test_aliasing_warning_for_under_specified_decimator():
    s = _dec4([5e6, 20e6])  # images of 0..3 MHz around 24.576 and 49.152 MHz are not stopped
    assert len(s.warnings) == 1
    assert "aliases" in s.warnings[0] and "decimation by 4" in s.warnings[0] and "dec.toml" in s.warnings[0]


def test_aliasing_warning_for_gap_in_stop_bands():
    d = copy.deepcopy(CONTRACT)
    d["band"] = [d["band"][0], {"edges": [5e6, 22e6], "gain": 0, "atten_db": 75},
                 {"edges": [28e6, 49.152e6], "gain": 0, "atten_db": 75}]
    s = parse_spec_text(toml_dumps(d))
    assert any("aliases" in w for w in s.warnings)


def test_no_aliasing_warning_for_good_decimator():
    assert _dec4([5e6, 49.152e6]).warnings == ()
    # the minimum that still protects the pass band: stop from fo - fp
    assert _dec4([21.576e6, 49.152e6]).warnings == ()


def test_no_aliasing_warning_without_decimation():
    d = copy.deepcopy(CONTRACT)
    d["decimation"] = 1
    d["band"][1]["edges"] = [5e6, 20e6]
    assert parse_spec_text(toml_dumps(d)).warnings == ()


def test_warning_when_pass_band_exceeds_output_nyquist():
    d = copy.deepcopy(CONTRACT)
    d["decimation"] = 16  # output Nyquist 3.072 MHz
    d["band"][0]["edges"] = [0, 4e6]
    d["band"][1]["edges"] = [5e6, 49.152e6]
    s = parse_spec_text(toml_dumps(d))
    assert any("above the output Nyquist" in w for w in s.warnings)


def test_halfband_decimator_does_not_warn():
    s = load_spec(SPECS_DIR / "adc_halfband.toml")
    assert s.decimation == 2 and s.warnings == ()
    p, st_ = s.bands
    assert p.hi + st_.lo == pytest.approx(s.nyquist)  # symmetric about fs/4
    assert p.deviation() == pytest.approx(st_.deviation(), rel=1e-9)  # equal linear deviation


# --------------------------------------------------------------------------------------------
# fuzzing: only SpecError (or a valid Spec) may come out

KNOWN_KEYS = ["name", "sample_rate", "decimation", "family", "iir_response", "fir_method", "phase",
              "coeff_bits", "band", "input", "output", "target", "edges", "gain", "ripple_db", "atten_db",
              "tolerance", "bits", "frac", "rounding", "overflow", "device", "clock", "budget", "dsp", "lut",
              "ff", "latency"]
keys = st.one_of(st.sampled_from(KNOWN_KEYS), st.text(min_size=1, max_size=8))

freq_strings = st.builds(lambda x, u: f"{x}{u}", st.floats(allow_nan=True, allow_infinity=True) | st.integers(),
                         st.sampled_from(["", " Hz", " kHz", "MHz", " GHz", " mhz", " parsecs"]))
scalars = st.one_of(
    st.booleans(),
    st.integers(),
    st.integers(min_value=-2**70, max_value=2**70),
    st.sampled_from([0, 1, 2, 4, 15, 16, 32, 33, -1, 10**30]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, 0.2, 1.0, 75.0, 3e6, 49.152e6, 98.304e6, 196.608e6, -0.0]),
    st.text(max_size=12),
    st.sampled_from(["auto", "fir", "iir", "ecp5", "xc7", "ice40", "generic", "rx", "half_up", "saturate"]),
    freq_strings,
    st.datetimes(),
    st.datetimes(timezones=st.just(dt.timezone.utc)),
    st.dates(),
    st.times(),
)
values = st.recursive(
    scalars,
    lambda kids: st.lists(kids, max_size=4) | st.dictionaries(keys, kids, max_size=4),
    max_leaves=16,
)
documents = st.dictionaries(keys, values, max_size=10)


def _check_result(s: Spec):
    assert NAME_RE.match(s.name)
    assert 1 <= s.decimation and 2 <= s.in_bits <= 32 and 0 <= s.in_frac <= s.in_bits
    assert s.clock >= s.sample_rate * (1 - 1e-12) > 0
    prev_hi = -1.0
    for b in s.bands:
        assert 0 <= b.lo < b.hi <= s.nyquist and b.lo >= prev_hi
        prev_hi = b.hi
        assert all(math.isfinite(g) for g in b.gain)
    for w in s.warnings:
        assert isinstance(w, str)


def _parse(text):
    try:
        s = parse_spec_text(text, "fuzz.toml")
    except SpecError as e:
        assert e.file == "fuzz.toml" and isinstance(e.key, str) and e.allowed
        str(e)
        return None
    _check_result(s)
    return s


FUZZ = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FUZZ
@given(documents)
def test_fuzz_random_documents(doc):
    text = toml_dumps(doc)
    tomllib.loads(text)  # the writer makes valid TOML, so the spec checks are what gets exercised
    _parse(text)


def _paths(d, prefix=()):
    """Every (container, key) path into a nested document."""
    if isinstance(d, dict):
        for k, v in d.items():
            yield prefix + (k,)
            yield from _paths(v, prefix + (k,))
    elif isinstance(d, list):
        for i, v in enumerate(d):
            yield prefix + (i,)
            yield from _paths(v, prefix + (i,))


@FUZZ
@given(st.data())
def test_fuzz_mutated_valid_spec(data):
    doc = copy.deepcopy(CONTRACT)
    for _ in range(data.draw(st.integers(1, 4))):
        paths = list(_paths(doc))
        if not paths:
            break
        path = data.draw(st.sampled_from(paths))
        op = data.draw(st.sampled_from(["set", "del", "add"]))
        node = doc
        for p in path[:-1]:
            node = node[p]
        if op == "set":
            node[path[-1]] = data.draw(values)
        elif op == "del":
            del node[path[-1]]
        else:
            target = node[path[-1]]
            if isinstance(target, dict):
                target[data.draw(keys)] = data.draw(values)
            elif isinstance(target, list):
                target.append(data.draw(values))
    text = toml_dumps(doc)
    tomllib.loads(text)
    _parse(text)


toml_fragments = st.sampled_from([
    "[[band]]", "[band]", "[input]", "[target]", "[target.budget]", "[output]", "\n", " = ", "=", '"', "'",
    "name", "sample_rate", "edges", "gain", "[", "]", "{", "}", ",", "1e6", "nan", "inf", "-", "0", "16",
    '"4 MHz"', "1979-05-27T07:32:00Z", "true", "#", "\\", "\"\"\"", "bits", "clock", "decimation",
])


@FUZZ
@given(st.one_of(st.text(max_size=200), st.lists(toml_fragments, max_size=40).map("".join)))
def test_fuzz_raw_text(text):
    _parse(text)


@settings(max_examples=100, deadline=None)
@given(st.binary(max_size=200))
def test_fuzz_raw_file_bytes(raw):
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "f.toml"
        p.write_bytes(raw)
        try:
            load_spec(p)
        except SpecError:
            pass


@settings(max_examples=200, deadline=None)
@given(st.sampled_from(["sample_rate", "clock", "edge"]), freq_strings)
def test_fuzz_frequency_strings(where, value):
    d = copy.deepcopy(CONTRACT)
    if where == "sample_rate":
        d["sample_rate"] = value
    elif where == "clock":
        d["target"]["clock"] = value
    else:
        d["band"][0]["edges"] = [0, value]
    _parse(toml_dumps(d))


# --------------------------------------------------------------------------------------------
# the example specs

EXAMPLES = sorted(SPECS_DIR.glob("*.toml"))


def test_required_examples_exist():
    names = {p.stem for p in EXAMPLES}
    assert {"rx_chan_dec4", "sensor_lowpass", "adc_halfband", "vib_bandpass_iir", "servo_diff",
            "audio_dec64"} <= names


@pytest.mark.parametrize("path", EXAMPLES, ids=[p.stem for p in EXAMPLES])
def test_example_spec_parses(path):
    text = path.read_text()
    assert text.lstrip().startswith("#"), "each example starts with a comment header"
    s = load_spec(path)
    assert s.name == path.stem
    assert s.warnings == ()
    _check_result(s)


def test_example_values():
    rx = load_spec(SPECS_DIR / "rx_chan_dec4.toml")
    assert (rx.sample_rate, rx.decimation, rx.device, rx.clock, rx.budget.dsp) == (98.304e6, 4, "ecp5", 196.608e6, 28)
    assert (rx.bands[0].hi, rx.bands[0].ripple_db, rx.bands[1].lo, rx.bands[1].atten_db) == (3e6, 0.2, 5e6, 75)
    assert rx.in_bits == 16
    sl = load_spec(SPECS_DIR / "sensor_lowpass.toml")
    assert sl.device == "ice40" and sl.clock == 4 * sl.sample_rate and sl.budget.dsp == 8 and sl.decimation == 1
    vb = load_spec(SPECS_DIR / "vib_bandpass_iir.toml")
    assert vb.family == "auto" and vb.device == "generic" and [b.kind for b in vb.bands] == ["stop", "pass", "stop"]
    sd = load_spec(SPECS_DIR / "servo_diff.toml")
    assert sd.device == "xc7" and sd.bands[0].kind == "shaped" and sd.bands[0].gain[0] == 0
    assert sd.bands[0].gain[1] == pytest.approx(2 * math.pi * sd.bands[0].hi / sd.sample_rate)
    a64 = load_spec(SPECS_DIR / "audio_dec64.toml")
    assert a64.decimation == 64 and a64.device == "ecp5" and a64.output_rate == 48e3
