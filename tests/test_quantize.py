"""Word lengths: quantized FIR/IIR meet the spec, formats are overflow-free, noise estimates hold."""
import json
import math

import numpy as np
import pytest
from scipy import signal
from hypothesis import given, settings
from hypothesis import strategies as st

from tapwright.design import fir
from tapwright.design.plan import DesignError, DesignPlan, magnitude, make_design
from tapwright.fixed import quantize as qz
from tapwright.fixed import reference
from tapwright.fixed.formats import Fmt
from tapwright.spec import parse_spec_text

FS = 96000.0


def spec_text(bands, extra="", inp="bits = 16\nfrac = 15", out=""):
    return f"""
name = "sonar_front"
sample_rate = {FS}
{extra}
{bands}
[input]
{inp}
{out}
[target]
clock = 100e6
"""


def band(lo, hi, gain, **kw):
    k = "\n".join(f"{a} = {b}" for a, b in kw.items())
    return f"[[band]]\nedges = [{lo}, {hi}]\ngain = {gain}\n{k}\n"


LP = band(0, 9000, 1.0, ripple_db=0.1) + band(13000, 48000, 0.0, atten_db=72)
HB = band(0, 19000, 1.0, ripple_db=0.01) + band(29000, 48000, 0.0, atten_db=65)


def spec(bands=LP, **kw):
    return parse_spec_text(spec_text(bands, **kw))


def freqz_meets(coeffs, frac, sp):
    """Check every band with scipy.signal.freqz of the integer coefficients (SciPy as reference)."""
    h = np.asarray(coeffs, float) / 2.0 ** frac
    w, H = signal.freqz(h, 1.0, worN=16385, include_nyquist=True, fs=sp.sample_rate)
    m = np.abs(H)
    for b in sp.bands:
        sel = (w >= b.lo) & (w <= b.hi)
        if b.kind == "pass" and np.max(np.abs(m[sel] - b.gain[0])) > b.deviation():
            return False
        if b.kind == "stop" and np.max(m[sel]) > 10 ** (-b.atten_db / 20):
            return False
    return True


def test_rounding_stats_exact():
    # dropping s bits, uniform residues: variance (1 - 2**-2s)/12 (common practice, q**2/12 in the limit)
    for mode in ("half_up", "truncate"):
        st = qz.rounding_stats(4, mode)
        assert st["var"] == pytest.approx((1 - 2.0 ** -8) / 12)
    # ties to even: the tie error is +-1/2 alternately, so the mean 2**-(s+1) of half_up moves into the variance
    assert qz.rounding_stats(4, "half_even")["var"] == pytest.approx((1 - 2.0 ** -8) / 12 + 2.0 ** -10)
    assert qz.rounding_stats(4, "truncate")["mean"] == pytest.approx(-(1 - 2 ** -4) / 2)
    assert qz.rounding_stats(4, "half_up")["mean"] == pytest.approx(2.0 ** -5)
    assert qz.rounding_stats(4, "half_even")["mean"] == pytest.approx(0.0)
    assert qz.rounding_stats(0, "half_up")["var"] == 0.0


def test_guard_bits_rule():
    assert qz.guard_bits(1.0) == 1          # 2**-2 <= 1/4
    assert qz.guard_bits(0.25) == 2
    assert qz.guard_bits(0.2) == 3
    assert 2.0 ** (-2 * qz.guard_bits(0.013)) <= 0.013 / 4


def test_quantize_taps_full_range():
    h = np.array([0.01, -0.2, 0.6, -0.2, 0.01])
    c, f = qz.quantize_taps(h, 12)
    assert max(abs(v) for v in c) <= 2047 and max(abs(v) for v in c) > 1023
    assert c == tuple(int(v) for v in np.round(h * 2.0 ** f))


def test_fir_quantized_meets_every_band_and_is_minimal():
    sp = spec()
    d = fir.design_fir(sp)
    q = qz.quantize_fir(sp, d.taps)
    assert q.met and freqz_meets(q.stage.coeffs, q.stage.coeff_frac, sp)
    c1, f1 = qz.quantize_taps(d.taps, q.coeff_bits - 1)
    assert not freqz_meets(c1, f1, sp)             # one bit fewer fails
    assert q.stage.symmetry() == 1


def test_fir_acc_and_output_bits_exact_l1():
    sp = spec()
    plan = make_design(parse_spec_text(spec_text(LP, 'family = "fir"')))
    st = plan.fixed.stages[0]
    l1 = sum(abs(c) for c in st.coeffs)
    assert plan.acc_bits == 16 + math.ceil(math.log2(l1))
    # the worst-case input (signs of the reversed coefficients, full scale) reaches the bound exactly
    c = np.asarray(st.coeffs)
    x = np.where(c[::-1] >= 0, 32767, -32768)
    y = reference.run(plan.fixed, x)
    lo, hi = qz.fir_extremes(st.coeffs, plan.fixed.in_fmt)
    acc = int(np.dot(c[::-1].astype(object), x.astype(object)))
    assert acc == hi
    assert st.out.lo <= y.min() and y.max() <= st.out.hi
    assert y[-1] < st.out.hi                           # no saturation happened: the width is enough
    # and one bit less could not hold it (the width is the smallest)
    assert hi >> (st.coeff_frac - (st.out.frac - 15)) > (1 << (st.out.bits - 2)) - 1
    assert sp.bands == plan.spec.bands


def test_fir_bit_true_vs_float_lfilter_within_noise():
    plan = make_design(parse_spec_text(spec_text(LP, 'family = "fir"')))
    st = plan.fixed.stages[0]
    x = np.random.default_rng(5).integers(-32768, 32768, 20000)
    y = reference.run(plan.fixed, x).astype(float)
    h = np.asarray(st.coeffs, float) / 2.0 ** st.coeff_frac
    yf = signal.lfilter(h, [1.0], x / 2.0 ** 15) * 2.0 ** st.out.frac    # SciPy as reference
    e = y - yf
    assert np.max(np.abs(e)) <= 0.5 + 1e-9                      # half_up: at most half an LSB
    assert np.var(e) == pytest.approx(plan.noise["output_noise_lsb2"], rel=0.1)


def test_truncation_noise_mean():
    plan = make_design(parse_spec_text(spec_text(LP, 'family = "fir"',
                                                 out='[output]\nrounding = "truncate"')))
    st = plan.fixed.stages[0]
    x = np.random.default_rng(6).integers(-32768, 32768, 20000)
    y = reference.run(plan.fixed, x).astype(float)
    yf = signal.lfilter(np.asarray(st.coeffs, float) / 2.0 ** st.coeff_frac, [1.0], x / 2.0 ** 15) * 2.0 ** st.out.frac
    e = y - yf
    assert np.mean(e) == pytest.approx(plan.noise["output_noise_mean_lsb"], abs=0.02)
    assert plan.noise["output_noise_mean_lsb"] == pytest.approx(-0.5, abs=0.01)
    assert np.all(e <= 1e-9) and np.all(e > -1)


def test_halfband_after_quantization():
    plan = make_design(parse_spec_text(spec_text(HB, 'family = "fir"')))
    assert plan.float_design.halfband and plan.as_dict()["halfband"]
    st = plan.fixed.stages[0]
    L = st.ntaps
    c = (L - 1) // 2
    assert st.coeffs[c] == 2 ** (st.coeff_frac - 1)
    assert all(st.coeffs[i] == 0 for i in range(L) if (i - c) % 2 == 0 and i != c)
    assert plan.ok and freqz_meets(st.coeffs, st.coeff_frac, plan.spec)


def test_given_coeff_bits_reports_margins():
    sp = spec(extra="coeff_bits = 8")
    plan = make_design(parse_spec_text(spec_text(LP, 'family = "fir"\ncoeff_bits = 8')))
    assert plan.coeff_bits == 8 and not plan.ok
    stop = plan.band_checks[1]
    assert stop.margin < 0 and stop.achieved_quant < stop.achieved_float
    assert any("coeff_bits = 8" in n for n in plan.notes)
    assert sp.coeff_bits == 8


def test_fixed_output_bits_clip_report():
    text = spec_text(LP, 'family = "fir"', out="[output]\nbits = 16\nfrac = 15")
    plan = make_design(parse_spec_text(text))
    assert plan.fixed.out_fmt == Fmt(16, 15)
    n = plan.noise
    assert n["worst_case_over_fullscale_db"] > 0     # the L1 worst case exceeds the gain-1 output range
    # with frac left auto the output is sized for a full-scale sine at the peak gain
    auto = make_design(parse_spec_text(spec_text(LP, 'family = "fir"', out="[output]\nbits = 16")))
    assert auto.fixed.out_fmt.frac == 14
    assert 0.0 <= n["clip_fraction_random_fullscale"] < 0.01
    assert any("exceeds full scale" in s for s in plan.notes)


def test_iir_noise_bound_guarantee_truncate():
    text = spec_text(LP, 'family = "iir"', out='[output]\nrounding = "truncate"')
    plan = make_design(parse_spec_text(text))
    st = plan.fixed.stages[0]
    assert st.noise_bound_lsb > 0.9                 # truncation: up to 1 LSB per rounding point
    x = np.random.default_rng(2).integers(-32768, 32768, 3000)
    y = reference.run(plan.fixed, x).astype(float)
    yf = reference.run_stages_float(plan.fixed, x / 2.0 ** 15) * 2.0 ** st.out.frac
    assert np.max(np.abs(y - yf)) <= st.noise_bound_lsb


def test_iir_states_cannot_saturate():
    plan = make_design(parse_spec_text(spec_text(LP, 'family = "iir"')))
    st = plan.fixed.stages[0]
    # worst-case input for the output: sign of the reversed impulse response, full scale
    sos = qz.sections_to_sos([(s.b, s.a, s.coeff_frac) for s in st.sections])
    imp = np.zeros(400)
    imp[0] = 1
    h = signal.sosfilt(sos, imp)
    x = np.where(h[::-1] >= 0, 32767, -32768)
    y = reference.run(plan.fixed, x)
    assert abs(int(y[-1])) < (1 << (st.out.bits - 1)) - 1
    assert plan.acc_bits > max(s.state.bits for s in st.sections)


def test_iir_given_coeff_bits_too_few():
    text = spec_text(LP, 'family = "iir"\ncoeff_bits = 6')
    try:
        plan = make_design(parse_spec_text(text))
    except DesignError as e:
        assert "coefficient" in str(e) or "unstable" in str(e)
    else:
        assert not plan.ok and plan.coeff_bits == 6


def test_make_design_as_dict_json():
    for fam in ("fir", "iir", "auto"):
        plan = make_design(parse_spec_text(spec_text(LP, f'family = "{fam}"')))
        assert isinstance(plan, DesignPlan) and plan.ok
        d = plan.as_dict()
        s = json.dumps(d, allow_nan=False)
        assert d["family"] in ("fir", "iir") and "why" in d and d["stages"]
        assert ("length" in d and "fir_type" in d) or ("sections" in d)
        assert "output_noise_lsb2" in d["noise"] and "snr_db_fullscale_sine" in d["noise"]
        assert len(s) > 100


def test_linear_phase_forces_fir():
    plan = make_design(parse_spec_text(spec_text(LP, 'family = "auto"\nphase = "linear"')))
    assert plan.family == "fir" and "linear" in plan.why


def test_auto_prefers_iir_for_sharp_any_phase_and_says_why():
    plan = make_design(parse_spec_text(spec_text(LP, 'family = "auto"')))
    assert plan.family == "iir"
    assert "multiplications per output" in plan.why and "group delay" in plan.why


def test_impossible_spec_raises():
    bands = band(0, 9000, 1.0, ripple_db=0.001) + band(9010, 48000, 0.0, atten_db=120)
    with pytest.raises(DesignError, match="length"):
        make_design(parse_spec_text(spec_text(bands, 'family = "fir"')))


def test_magnitude_helper_float_vs_quantized():
    plan = make_design(parse_spec_text(spec_text(LP, 'family = "fir"')))
    f = np.linspace(0, FS / 2, 2001)
    mf = magnitude(plan.float_design, f, FS)
    mq = magnitude(plan.fixed, f, FS)
    assert np.max(np.abs(mf - mq)) < 1e-3
    st = plan.fixed.stages[0]
    _, h = signal.freqz(np.asarray(st.coeffs) / 2.0 ** st.coeff_frac, 1.0, worN=f, fs=FS)
    np.testing.assert_allclose(mq, np.abs(h), atol=1e-12)   # SciPy as reference
    pi = make_design(parse_spec_text(spec_text(LP, 'family = "iir"')))
    assert np.max(np.abs(magnitude(pi.float_design, f, FS) - magnitude(pi, f, FS))) < 2e-3


def test_decimating_fir_stage():
    bands = band(0, 9000, 1.0, ripple_db=0.1) + band(15000, 48000, 0.0, atten_db=60)
    plan = make_design(parse_spec_text(spec_text(bands, 'family = "fir"\ndecimation = 3')))
    st = plan.fixed.stages[0]
    assert st.decimation == 3 and st.phase == 0 and plan.fixed.decimation == 3
    assert Fmt(16, 15) == plan.fixed.in_fmt


def test_iir_family_with_shaped_band_is_a_design_error():
    bands = band(0, 20000, "[0.0, 1.0]", tolerance=0.01) + band(26000, 48000, 0.0, atten_db=40)
    with pytest.raises(DesignError, match="shaped"):
        make_design(parse_spec_text(spec_text(bands, 'family = "iir"')))
    # auto falls back to FIR and says why
    plan = make_design(parse_spec_text(spec_text(bands, 'family = "auto"')))
    assert plan.family == "fir" and "shaped" in plan.why


@settings(max_examples=400, deadline=None)
@given(st.integers(-(1 << 80), 1 << 80), st.integers(0, 1 << 80))
def test_bits_for_range_is_the_smallest_twos_complement_width(lo, span):
    """The closed form against the definition (common practice: b signed bits hold
    -2**(b-1) .. 2**(b-1) - 1), by search from one bit up."""
    from tapwright.fixed.formats import bits_for_range
    hi = lo + span
    b = 1
    while -(1 << (b - 1)) > lo or (1 << (b - 1)) - 1 < hi:
        b += 1
    assert bits_for_range(lo, hi) == b
