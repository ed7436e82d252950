"""IIR design: prototypes, SOS pairing/ordering, L-infinity scaling, quantized stability, bit-true run."""
import numpy as np
import pytest
from scipy import signal

from tapwright.design import fir, iir
from tapwright.design.plan import make_design
from tapwright.fixed import reference
from tapwright.fixed.quantize import quantize_iir
from tapwright.spec import parse_spec_text

FS = 48000.0


def make_spec(bands: str, extra="", inp="bits = 16\nfrac = 15", out=""):
    return parse_spec_text(f"""
name = "hydro_tap"
sample_rate = {FS}
{extra}
{bands}
[input]
{inp}
{out}
[target]
clock = 100e6
""")


def band(lo, hi, gain, **kw):
    k = "\n".join(f"{a} = {b}" for a, b in kw.items())
    return f"[[band]]\nedges = [{lo}, {hi}]\ngain = {gain}\n{k}\n"


LP = band(0, 4000, 1.0, ripple_db=0.1) + band(6000, 24000, 0.0, atten_db=70)
HP = band(0, 3000, 0.0, atten_db=60) + band(4500, 24000, 1.0, ripple_db=0.2)
BP = band(0, 3000, 0.0, atten_db=60) + band(4000, 7000, 1.0, ripple_db=0.5) + band(8500, 24000, 0.0, atten_db=60)
BS = band(0, 3000, 1.0, ripple_db=0.5) + band(4000, 6000, 0.0, atten_db=50) + band(7500, 24000, 1.0, ripple_db=0.5)


def float_meets(d, spec):
    f = fir.check_grid(spec, 1024)
    return fir.meets(spec, f, iir.sos_mag(d.sos, f, FS))


@pytest.mark.parametrize("resp", ["butterworth", "chebyshev1", "chebyshev2", "elliptic"])
@pytest.mark.parametrize("bands", [LP, HP, BP, BS], ids=["lp", "hp", "bp", "bs"])
def test_all_responses_meet_spec(resp, bands):
    spec = make_spec(bands, f'iir_response = "{resp}"')
    d = iir.design_iir(spec)
    assert float_meets(d, spec)
    assert d.response == resp


def test_matches_scipy_design_up_to_gain_and_scaling():
    spec = make_spec(LP, 'iir_response = "elliptic"')
    d = iir.design_iir(spec)
    # SciPy as reference: the same prototype request, straight to sos
    n, wn = signal.ellipord(4000, 6000, d.rp_design, d.rs_design, fs=FS)
    assert n == d.order
    ref = signal.iirfilter(n, wn, rp=d.rp_design, rs=d.rs_design, ftype="ellip", btype="lowpass", output="sos", fs=FS)
    f = np.linspace(0, FS / 2, 4001)
    _, h_ref = signal.sosfreqz(ref, worN=f, fs=FS)
    _, h = signal.sosfreqz(d.sos, worN=f, fs=FS)
    np.testing.assert_allclose(np.abs(h), d.gain * np.abs(h_ref), rtol=1e-7, atol=1e-12)
    # and the time response: sosfilt of both (SciPy as reference)
    x = np.random.default_rng(3).standard_normal(2000)
    np.testing.assert_allclose(signal.sosfilt(d.sos, x), d.gain * signal.sosfilt(ref, x), rtol=1e-8, atol=1e-10)


def test_linf_scaling_peaks():
    spec = make_spec(LP, 'iir_response = "elliptic"')
    d = iir.design_iir(spec)
    f = np.linspace(0, FS / 2, 1 << 16)
    for i in range(d.n_sections):
        _, h = signal.sosfreqz(d.sos[: i + 1], worN=f, fs=FS)   # SciPy as reference
        peak = np.max(np.abs(h))
        if i < d.n_sections - 1:
            assert peak <= 1 + 1e-6 and peak > 0.99
        else:
            # the last section output is the filter output: pass gain 1 with its ripple
            assert peak <= 1 + spec.bands[0].deviation() + 1e-9


def test_pairing_and_ordering():
    spec = make_spec(LP, 'iir_response = "elliptic"')
    d = iir.design_iir(spec, ordering="up")
    radii = [max(abs(np.roots(s[3:]))) for s in d.sos]
    assert radii == sorted(radii)
    dn = iir.design_iir(spec, ordering="down")
    assert [max(abs(np.roots(s[3:]))) for s in dn.sos] == sorted(radii, reverse=True)
    # nearest pairing (Jackson 1970): the pole closest to the unit circle is paired first, with the
    # zeros nearest to it
    i = int(np.argmax(radii))
    p = np.roots(d.sos[i, 3:])[0]
    all_z = np.concatenate([np.roots(s[:3]) for s in d.sos])
    own = np.roots(d.sos[i, :3])
    assert np.min(np.abs(own - p)) == pytest.approx(np.min(np.abs(all_z - p)), rel=1e-9)


def test_not_applicable_specs():
    shaped = band(0, 10000, "[0.0, 1.0]", tolerance=0.01) + band(12000, 24000, 0.0, atten_db=40)
    with pytest.raises(iir.IirNotApplicable, match="shaped"):
        iir.design_iir(make_spec(shaped))
    three_pass = band(0, 1000, 1.0, ripple_db=1) + band(2000, 3000, 0.0, atten_db=40) + \
        band(4000, 5000, 1.0, ripple_db=1) + band(6000, 7000, 0.0, atten_db=40)
    with pytest.raises(iir.IirNotApplicable, match="lowpass, highpass, bandpass and bandstop"):
        iir.design_iir(make_spec(three_pass))


@pytest.mark.parametrize("fp,fsb,rp,att", [(4000, 4800, 0.1, 80), (1000, 1200, 0.05, 70)])
def test_elliptic_order_much_lower_than_fir_length(fp, fsb, rp, att):
    spec = make_spec(band(0, fp, 1.0, ripple_db=rp) + band(fsb, 24000, 0.0, atten_db=att))
    e = iir.design_iir(spec)
    f = fir.design_fir(spec)
    # common practice: for selective specs an elliptic order is an order of magnitude below the FIR length
    assert e.order * 10 < f.ntaps, (e.order, f.ntaps)


def test_quantized_poles_inside_margin():
    spec = make_spec(band(0, 600, 1.0, ripple_db=0.1) + band(800, 24000, 0.0, atten_db=60))
    d = iir.design_iir(spec)
    q = quantize_iir(spec, d.sos)
    assert q.met
    for s, lim in zip(q.stage.sections, q.radius_limits):
        assert s.a[0] == 2 ** s.coeff_frac
        assert lim == 1 - 2.0 ** -(s.coeff_frac - 2)
        r = max(abs(np.roots(np.asarray(s.a, float))))
        assert r <= lim
    # fewer bits must fail (the search found the smallest)
    assert q.bits_tried.get(q.coeff_bits - 1) is False


def test_bit_true_within_noise_bound():
    spec = make_spec(LP, 'iir_response = "elliptic"')
    plan = make_design(parse_spec_text(make_spec_text(LP, 'family = "iir"')))
    st = plan.fixed.stages[0]
    rng = np.random.default_rng(7)
    x = rng.integers(-(1 << 15), 1 << 15, 3000)
    y = reference.run(plan.fixed, x).astype(float)
    yf = reference.run_stages_float(plan.fixed, x / 2.0 ** 15) * 2.0 ** plan.fixed.out_fmt.frac
    err = np.abs(y - yf)
    assert np.max(err) <= st.noise_bound_lsb + 1e-6
    # the statistical estimate is the right size: measured error power within a factor 3 of it
    p_est = plan.noise["output_noise_lsb2"] + plan.noise["output_noise_mean_lsb"] ** 2
    p_meas = np.mean((y - yf) ** 2)
    assert p_est / 3 < p_meas < 3 * p_est
    assert spec.bands == plan.spec.bands


def make_spec_text(bands, extra=""):
    return f"""
name = "hydro_tap"
sample_rate = {FS}
{extra}
{bands}
[input]
bits = 16
frac = 15
[target]
clock = 100e6
"""


def test_decimating_iir_adds_trivial_stage():
    spec = parse_spec_text(make_spec_text(LP, 'family = "iir"\ndecimation = 3'))
    plan = make_design(spec)
    assert [s.kind for s in plan.fixed.stages] == ["sos", "fir"]
    tail = plan.fixed.stages[1]
    assert tail.coeffs == (1,) and tail.coeff_frac == 0 and tail.decimation == 3
    x = np.random.default_rng(1).integers(-(1 << 15), 1 << 15, 600)
    full = reference.run_stage(plan.fixed.stages[0], x, plan.fixed.in_fmt, spec.rounding, spec.overflow)
    np.testing.assert_array_equal(reference.run(plan.fixed, x), np.asarray(full[::3], dtype=np.int64))


def test_group_delay_spread_positive():
    spec = make_spec(LP)
    d = iir.design_iir(spec)
    assert iir.group_delay_spread(d.sos, spec) > 1.0
