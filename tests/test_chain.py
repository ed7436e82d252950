"""Multistage decimation chains: stage bands, design, quantized overall response, bit-true runs, cost.

Scenario (our own): a 3.072 MHz oversampled audio stream decimated by 64 to 48 kHz, pass band
0-20 kHz with 0.1 dB ripple, everything from 28 kHz up (all that folds into 0-20 kHz at 48 kHz)
at least 85 dB down. Multistage method after Crochiere & Rabiner (IEEE Trans. ASSP 23(5), 1975;
*Multirate Digital Signal Processing*, 1983; from memory). The checks below are written out
independently: the equivalent single-rate impulse response is rebuilt from decimated impulse
responses of the float reference run (no noble-identity code of the chain module), and its
spectrum comes from scipy.signal.freqz.
"""
import json
import math

import numpy as np
import pytest
from scipy import signal

from tapwright.design import chain
from tapwright.design.cic import cic_gain
from tapwright.design.fir import design_fir
from tapwright.design.plan import magnitude
from tapwright.fixed import reference
from tapwright.spec import parse_spec_text

AUDIO = """
name = "pdm_audio"
sample_rate = 3.072e6
decimation = 64
[[band]]
edges = [0.0, 20e3]
gain = 1.0
ripple_db = 0.1
[[band]]
edges = [28e3, 1.536e6]
gain = 0.0
atten_db = 85
[input]
bits = 16
frac = 15
[target]
clock = 98.304e6
"""

# our own second scenario: 2.4 MHz -> 48 kHz (D = 50, CIC factors 5, 10, 25: gains not powers of two)
SONAR = """
name = "sonar_dec50"
sample_rate = 2.4e6
decimation = 50
[[band]]
edges = [0.0, 12e3]
gain = 1.0
ripple_db = 0.2
[[band]]
edges = [36e3, 1.2e6]
gain = 0.0
atten_db = 70
[input]
bits = 14
frac = 13
[target]
clock = 96e6
"""


@pytest.fixture(scope="module")
def audio():
    return parse_spec_text(AUDIO)


@pytest.fixture(scope="module")
def chains(audio):
    return chain.plan_chains(audio)


def rebuilt_impulse_response(fixed, fs_len):
    """h_eq[k] from the float model: an impulse at n0 gives output m = h_eq[m D - n0]."""
    D = fixed.decimation
    n_out = fs_len // D + 3
    h = np.zeros(n_out * D)
    for n0 in range(D):
        x = np.zeros(n_out * D)
        x[n0] = 1.0
        y = reference.run_stages_float(fixed, x)
        for m, v in enumerate(y):
            k = m * D - n0
            if 0 <= k < len(h):
                h[k] = v
    return h


def independent_band_check(spec, h):
    """Pass ripple and stop attenuation of taps ``h`` on a dense freqz grid (SciPy as reference)."""
    fs = spec.sample_rate
    n = max(65536, 16 * len(h))
    w, H = signal.freqz(h, 1.0, worN=n, fs=fs)
    m = np.abs(H)
    p, s = spec.bands
    pm = m[w <= p.hi]
    ripple = 20 * math.log10(pm.max() / pm.min())
    e = max(pm.max() - 1, 1 - pm.min())
    ripple_about_1 = 20 * math.log10((1 + e) / (1 - e))
    att = -20 * math.log10(m[w >= s.lo].max())
    return ripple, ripple_about_1, att, w, m


# ---------------------------------------------------------------------------------------------
# band planning


def test_alias_bands(audio):
    al = chain.alias_bands(audio)
    assert al[0] == (28e3, 68e3)
    assert al[1] == (76e3, 116e3)
    fo = 48e3
    for lo, hi in al[:-1]:
        k = round((lo + 20e3) / fo)
        assert (lo, hi) == (k * fo - 20e3, k * fo + 20e3)
    assert al[-1][1] == 1.536e6


def test_stage_stop_bands(audio):
    stops = [(28e3, 1.536e6, 85.0)]
    # /2 at 96 kHz, the last stage: the spec's stop band up to its Nyquist
    assert chain.stage_stop_bands(stops, 96e3, 2, True) == [(28e3, 48e3, 85.0)]
    # /2 at 192 kHz, not last: only what folds below 28 kHz at 96 kHz
    assert chain.stage_stop_bands(stops, 192e3, 2, False) == [(68e3, 96e3, 85.0)]
    # /16 at 3.072 MHz (a CIC): k * 192 kHz +- 28 kHz
    st = chain.stage_stop_bands(stops, 3.072e6, 16, False)
    assert st[0] == (164e3, 220e3, 85.0)
    assert st[1] == (356e3, 412e3, 85.0)
    assert st[-1] == (1.508e6, 1.536e6, 85.0)
    assert len(st) == 8


def test_applicability(audio):
    import dataclasses
    assert chain.chain_applicable(audio)[0]
    assert chain.plan_chains(dataclasses.replace(audio, decimation=2)) == []
    assert chain.plan_chains(dataclasses.replace(audio, decimation=67)) == []      # prime


# ---------------------------------------------------------------------------------------------
# designed chains


def test_several_chains_all_families(chains):
    assert len(chains) >= 5
    names = [c.name for c in chains]
    assert len(set(names)) == len(names)
    kinds = [[d["role"] for d in c.stages_desc] for c in chains]
    assert any(k[0] == "cic" and k[1] == "compensator" for k in kinds)
    assert any("halfband" in k and "cic" not in k for k in kinds)
    assert any(all(r in ("fir", "halfband") for r in k) and len(k) >= 2 for k in kinds)
    for c in chains:
        assert c.fixed.decimation == 64 and c.fixed.decimation_phase == 0
        assert all(getattr(s, "phase", 0) == 0 for s in c.fixed.stages)
        rates = [d["in_rate"] for d in c.stages_desc]
        assert rates[0] == 3.072e6
        assert c.stages_desc[-1]["out_rate"] == 48e3
        json.dumps(c.as_dict())
        assert c.as_dict()["structure"] == "chain"
        assert all(s in ("cic", "halfband", "polyphase", "fir") for s in c.stage_structures)


def test_quantized_chains_meet_spec_with_aliasing(audio, chains):
    """Every chain's quantized overall response meets the bands; checked again independently."""
    p, s = audio.bands
    for c in chains:
        assert c.ok, (c.name, [(b.kind, b.margin) for b in c.band_checks])
        assert any(b.kind == "alias" for b in c.band_checks)
        h = rebuilt_impulse_response(c.fixed, len(chain.equivalent_taps(c.fixed)))
        h_eq = chain.equivalent_taps(c.fixed)
        assert np.allclose(h[: len(h_eq)], h_eq, rtol=0, atol=1e-12 * np.max(np.abs(h_eq)))
        assert np.all(np.abs(h[len(h_eq):]) < 1e-12)
        ripple, ripple1, att, w, m = independent_band_check(audio, h_eq)
        assert ripple1 <= p.ripple_db, c.name
        assert att >= s.atten_db, c.name
        # explicitly: everything that folds onto the 0-20 kHz output band
        for lo, hi in chain.alias_bands(audio):
            sel = (w >= lo) & (w <= hi)
            assert -20 * math.log10(m[sel].max()) >= s.atten_db
        # the chain module's response function and the plan helper's magnitude agree
        f = np.linspace(0, audio.nyquist, 4097)
        assert np.allclose(chain.chain_response(c.fixed, f, audio.sample_rate),
                           magnitude(c.fixed, f, audio.sample_rate), rtol=1e-8, atol=1e-12)


def test_chains_run_bit_true(audio, chains):
    """Each FixedDesign runs in the reference model: pass-band gain 1, aliases suppressed, ~1 LSB from float."""
    fs = audio.sample_rate
    n = 64 * 300
    t = np.arange(n)
    for c in chains:
        lsb = 2.0 ** -c.fixed.out_fmt.frac
        # pass band: 5 kHz at half scale
        x = np.round(0.5 * np.sin(2 * np.pi * 5e3 * t / fs) * 2 ** 15).astype(np.int64)
        y = reference.run(c.fixed, x) / 2.0 ** c.fixed.out_fmt.frac
        yf = reference.run_stages_float(c.fixed, x / 2.0 ** 15)
        assert len(y) == n // 64
        assert np.max(np.abs(y - yf)) <= 4 * lsb, c.name
        amp = np.max(np.abs(y[100:]))
        assert amp == pytest.approx(0.5 * 10 ** (0 / 20), rel=0.0116 + 1e-4)
        # 101 kHz folds onto 5 kHz at 48 kHz: at least 85 dB down (plus the rounding floor)
        x = np.round(0.5 * np.sin(2 * np.pi * 101e3 * t / fs) * 2 ** 15).astype(np.int64)
        y = reference.run(c.fixed, x) / 2.0 ** c.fixed.out_fmt.frac
        assert np.max(np.abs(y[100:])) <= 0.5 * 10 ** (-85 / 20) + 2 ** -15 + 4 * lsb, c.name
        # full-scale DC step: no overflow anywhere (L1-bounded formats), gain 1 within the ripple
        y = reference.run(c.fixed, np.full(n, 2 ** 15 - 1)) / 2.0 ** c.fixed.out_fmt.frac
        assert y[-1] == pytest.approx((2 ** 15 - 1) / 2 ** 15, rel=0.0116)


def test_cic_stage_keeps_its_gain(audio, chains):
    c = next(c for c in chains if c.fixed.stages[0].kind == "cic")
    st = c.fixed.stages[0]
    G = cic_gain(st.order, st.decimation, st.diff_delay)
    x = np.full(st.decimation * 40, 1 << 13, dtype=np.int64)
    from tapwright.fixed.stages import FixedDesign
    y = reference.run(FixedDesign((st,), c.fixed.in_fmt, "half_up", "saturate"), x)
    val = int(y[-1]) / 2.0 ** st.out.frac
    assert val == pytest.approx(G * (1 << 13) / 2.0 ** 15, rel=1e-4)
    # the compensator's coefficients carry 1/G: G = 2^k shows as coeff_frac, the integers are ordinary
    comp = c.fixed.stages[1]
    h = np.asarray(comp.coeffs, float) / 2.0 ** comp.coeff_frac
    assert np.sum(h) * G == pytest.approx(1.0, rel=0.02)
    assert c.stages_desc[0]["register_bits"] == list(st.widths)


def test_multistage_saving_vs_single_stage(audio, chains):
    """Best chain: at most 1/4 of the multiplications per input of a single-stage polyphase decimator
    (L/D with L the single-stage minimum length)."""
    fd = design_fir(audio)
    single = fd.ntaps / audio.decimation
    best = min(c.mults_per_input for c in chains if c.ok)
    assert chains[0].mults_per_input == best
    assert best <= single / 4, (best, single)


def test_non_power_of_two_cic_gain():
    spec = parse_spec_text(SONAR)
    res = chain.plan_chains(spec, max_chains=4)
    assert res and res[0].ok
    cics = [c for c in res if c.fixed.stages[0].kind == "cic"]
    assert cics
    for c in cics:
        assert c.ok
        st = c.fixed.stages[0]
        G = cic_gain(st.order, st.decimation, 1)
        x = np.full(50 * 200, 4000, dtype=np.int64)
        y = reference.run(c.fixed, x) / 2.0 ** c.fixed.out_fmt.frac
        assert y[-1] == pytest.approx(4000 / 2 ** 13, rel=0.024), (c.name, G)


def test_halfband_stages_exact(chains):
    """Halfband stages: every other tap exactly zero, the centre exactly 1/2 (Vaidyanathan & Nguyen 1987)."""
    seen = 0
    for c in chains:
        for st, d in zip(c.fixed.stages, c.stages_desc):
            if d["structure"] != "halfband":
                continue
            seen += 1
            k = np.asarray(st.coeffs)
            L = len(k)
            assert L % 4 == 3
            mid = (L - 1) // 2
            assert k[mid] == 2 ** (st.coeff_frac - 1)
            assert all(k[i] == 0 for i in range(1, L, 2) if i != mid)
            assert list(k) == list(k[::-1])
            assert d["mults_per_stage_input"] == (np.count_nonzero(k) - 1) / 2
    assert seen


def test_minimax_lp_matches_remez():
    """The LP minimax (Rabiner 1972 formulation, from memory) reaches remez's optimum on a plain lowpass."""
    fs, L = 1.0, 31
    bands = [(0.0, 0.1, None, 1.0, 0.01), (0.2, 0.5, None, 0.0, 0.001)]
    h, t = chain.minimax_fir(L, fs, bands, npts=4096)
    hr = signal.remez(L, [0, 0.1, 0.2, 0.5], [1, 0], weight=[100, 1000], fs=fs)
    w, H = signal.freqz(hr, worN=8192, fs=fs)
    m = np.abs(H)
    e_remez = max(np.max(np.abs(m[w <= 0.1] - 1)) / 0.01, np.max(m[w >= 0.2]) / 0.001)
    w, H = signal.freqz(h, worN=8192, fs=fs)
    m = np.abs(H)
    e_lp = max(np.max(np.abs(m[w <= 0.1] - 1)) / 0.01, np.max(m[w >= 0.2]) / 0.001)
    # both are minimax solutions on finite grids: within a few percent, the LP never clearly worse
    assert 0.95 * e_remez <= e_lp <= 1.01 * e_remez
    assert t == pytest.approx(e_lp, rel=0.02)
