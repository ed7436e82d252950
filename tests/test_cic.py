"""CIC decimators: Hogenauer register growth and pruning, response, droop, the bit-true stage.

Sources:
- Method: E. B. Hogenauer, "An economical class of digital filters for decimation and
  interpolation", IEEE Trans. ASSP 29(2):155-162, 1981 (B_max, the error transfer
  functions h_j, the pruning rule; equations from memory of the paper, every number
  here is recomputed independently below).
- The N=3, R=8, M=1, B_in=12, B_out=12 example (gain 512, 21-bit registers, 9 LSBs
  truncated at the output) is stated in R. Lyons, "Computing CIC filter register pruning
  using Matlab", dsprelated.com/showcode/269.php (2012), which follows Hogenauer's notation.
- N=4, R=25, M=1, 16 -> 16 bits: from memory this is Hogenauer's own worked example
  (B_max = 34); medium confidence, the paper's per-stage table was not available to check.
- N=5, R=128, M=1, B_in=8, B_out=24: the B_j list is the one posted in a dsprelated.com
  forum thread ("CIC Filter using Prune Width Calculation", Oct 2019) as the output of
  the Lyons page's script: a third-party computation of the same formula.
"""
import math

import numpy as np
import pytest
from scipy import signal

from tapwright.design import cic
from tapwright.fixed import reference
from tapwright.fixed.formats import Fmt
from tapwright.fixed.stages import CicStage, FixedDesign


# ---------------------------------------------------------------------------------------------
# register growth


@pytest.mark.parametrize("N,R,M,B", [(1, 2, 1, 8), (3, 8, 1, 12), (4, 25, 1, 16), (5, 32, 1, 16),
                                     (2, 10, 2, 14), (6, 7, 1, 18), (3, 3, 1, 16), (5, 128, 1, 8)])
def test_bmax_formula(N, R, M, B):
    """B_max = ceil(N log2(RM) + B_in - 1), Hogenauer (1981); exact integer version agrees with floats."""
    ref = math.ceil(N * math.log2(R * M) + B - 1 - 1e-12)
    assert cic.cic_bmax(N, R, M, B) == ref
    st = CicStage(N, R, M, (0,) * (2 * N), Fmt(B + 40, 0), Fmt(B, B - 1))
    assert st.full_bits == ref + 1
    # the full-precision word holds the extreme outputs exactly: G * (-2**(B-1)) needs B_max+1 bits
    g = (R * M) ** N
    assert -(g << (B - 1)) >= -(1 << ref)
    assert (g << (B - 1)) > (1 << (ref - 1))


def test_lyons_example_3_8_1_12():
    """N=3, R=8, M=1, B_in=12 -> gain 512, 21-bit registers; B_out=12 drops 9 LSBs (Lyons 2012 page)."""
    assert cic.cic_gain(3, 8, 1) == 512
    assert cic.cic_bmax(3, 8, 1, 12) + 1 == 21
    t = cic.hogenauer_table(3, 8, 1, 12, 12)
    assert t.out_drop == 9
    assert t.widths[0] == 21


def test_hogenauer_example_4_25_1_16():
    """N=4, R=25, M=1, B_in=16: B_max = 34 (from memory: Hogenauer's example; medium confidence)."""
    assert cic.cic_bmax(4, 25, 1, 16) == 34
    assert cic.cic_gain(4, 25, 1) == 390625


# ---------------------------------------------------------------------------------------------
# pruning


PRUNING = {
    # (N, R, M, B_in, B_out): (B_1..B_2N used, B_{2N+1}, kept widths B_max+1-B_j incl. the output)
    (3, 8, 1, 12, 12): ([0, 3, 4, 5, 6, 7], 9, [21, 18, 17, 16, 15, 14, 12]),
    (4, 25, 1, 16, 16): ([1, 6, 9, 13, 14, 15, 16, 17], 19, [34, 29, 26, 22, 21, 20, 19, 18, 16]),
    (5, 32, 1, 16, 16): ([1, 6, 10, 14, 17, 19, 20, 21, 22, 22], 25, [40, 35, 31, 27, 24, 22, 21, 20, 19, 19, 16]),
}


@pytest.mark.parametrize("key", list(PRUNING))
def test_pruning_tables(key):
    """The three tables; each value is re-derived below from brute-force F_j (test_pruning_from_brute_force)."""
    drop, out, widths = PRUNING[key]
    t = cic.hogenauer_table(*key)
    assert t.drop == drop
    assert t.out_drop == out
    assert t.widths == widths
    assert cic.hogenauer_drop(*key) == drop


def test_pruning_third_party_5_128_1_8_24():
    """Formula B_j (before clamping) as posted from the Lyons script (dsprelated forum, 2019)."""
    t = cic.hogenauer_table(5, 128, 1, 8, 24)
    assert t.B_max == 42
    assert t.raw == [-14, -7, -1, 5, 10, 13, 14, 15, 16, 16, 19]
    assert t.drop == [0, 0, 0, 5, 10, 13, 14, 15, 16, 16]   # negative values clamped to 0


def _brute_impulse(N, R, M, j):
    """h_j by polynomial multiplication (noble identity: combs at the high rate with delay RM)."""
    RM = R * M
    if j <= N:
        h = np.array([1], dtype=object)
        for _ in range(N - j + 1):
            h = np.convolve(h, np.ones(RM, dtype=object))
        comb = np.zeros(RM + 1, dtype=object)
        comb[0], comb[RM] = 1, -1
        for _ in range(j - 1):
            h = np.convolve(h, comb)
        return h
    h = np.array([1], dtype=object)
    c = np.zeros(M + 1, dtype=object)
    c[0], c[M] = 1, -1
    for _ in range(2 * N + 1 - j):
        h = np.convolve(h, c)
    return h


def _simulated_energy(N, R, M, j):
    """sum over injection phases and outputs of y^2 for a unit impulse injected at stage j's input,
    run through the actual multirate structure (integrators, keep every R-th, combs with delay M)."""
    total = 0
    n = (R * M) * (N + 2) + R
    for p in range(R if j <= N else 1):
        if j <= N:
            v = np.zeros(n, dtype=object)
            v[p] = 1
            for _ in range(N - j + 1):
                v = np.cumsum(v, dtype=object)
            v = v[0::R]
            ncomb = N
        else:
            v = np.zeros(n // R, dtype=object)
            v[0] = 1
            ncomb = 2 * N + 1 - j
        for _ in range(ncomb):
            v = v - np.concatenate([np.zeros(M, dtype=object), v])[: len(v)]
        total += int(sum(int(a) * int(a) for a in v))
    return total


@pytest.mark.parametrize("N,R,M", [(3, 8, 1), (4, 5, 1), (2, 3, 2), (5, 4, 1)])
def test_impulse_closed_forms_brute_force(N, R, M):
    for j in range(1, 2 * N + 1):
        h = cic.cic_impulse(N, R, M, j)
        b = _brute_impulse(N, R, M, j)
        n = max(len(h), len(b))
        hh = np.concatenate([h, np.zeros(n - len(h), dtype=object)])
        bb = np.concatenate([b, np.zeros(n - len(b), dtype=object)])
        assert list(hh) == list(bb), f"h_{j}"
        assert cic.cic_variance_gains(N, R, M)[j - 1] == _simulated_energy(N, R, M, j)
    # combs: F_j^2 = C(2(2N+1-j), 2N+1-j), the sequence 2, 6, 20, 70, ...
    for j in range(N + 1, 2 * N + 1):
        m = 2 * N + 1 - j
        assert cic.cic_variance_gains(N, R, M)[j - 1] == math.comb(2 * m, m)


@pytest.mark.parametrize("key", list(PRUNING) + [(3, 5, 1, 14, 12), (6, 16, 1, 16, 20)])
def test_pruning_from_brute_force(key):
    """B_j from brute-force F_j with the rule written out: 2^(2B)/12 F_j^2 <= sigma_T^2/(2N), largest B."""
    N, R, M, Bin, Bout = key
    bmax = cic.cic_bmax(N, R, M, Bin)
    bT = bmax - Bout + 1
    sig2 = 4.0 ** bT / 12
    expect, cur = [], 0
    for j in range(1, 2 * N + 1):
        F2 = _simulated_energy(N, R, M, j)
        B = -1
        while 4.0 ** (B + 1) / 12 * F2 <= sig2 / (2 * N):
            B += 1
        cur = max(cur, B, 0)
        expect.append(cur)
    assert cic.hogenauer_drop(*key) == expect
    # Hogenauer's budget: internal truncation noise (his model) <= the output truncation's
    st = cic.cic_error_stats(N, R, M, expect, bT)
    assert st["hogenauer_var_internal"] <= st["sigma_T2"] * (1 + 1e-12)


def test_running_max_is_exact():
    """Where the formula steps down (RM = 2), the running maximum gives bit-identical results."""
    t = cic.hogenauer_table(3, 2, 1, 16, 8)
    assert t.raw[:6] == [7, 8, 7, 7, 8, 9]
    assert t.drop == [7, 8, 8, 8, 8, 9]
    assert t.notes
    rng = np.random.default_rng(5)
    x = rng.integers(-2 ** 15, 2 ** 15, 4000)
    in_fmt = Fmt(16, 15)
    out = Fmt(12, 15 - t.out_drop)
    # the raw (non-monotone, clamped) drops run through the reference arithmetic directly
    raw = tuple(max(0, b) for b in t.raw[:6])
    a = reference.cic_stage(CicStage(3, 2, 1, raw, out, in_fmt), x, in_fmt, "half_up", "wrap")
    b = reference.cic_stage(CicStage(3, 2, 1, tuple(t.drop), out, in_fmt), x, in_fmt, "half_up", "wrap")
    assert list(a) == list(b)


# ---------------------------------------------------------------------------------------------
# response and droop


@pytest.mark.parametrize("N,R,M", [(3, 8, 1), (5, 16, 1), (2, 10, 2), (4, 25, 1)])
def test_response_matches_freqz(N, R, M):
    """Closed form |sin(pi f RM/fs) / (RM sin(pi f/fs))|^N against scipy.signal.freqz of the expanded taps."""
    fs = 1.0e6
    h = np.ones(R * M)
    taps = np.array([1.0])
    for _ in range(N):
        taps = np.convolve(taps, h)
    f = np.linspace(0, fs / 2, 2001)
    _, H = signal.freqz(taps, 1.0, worN=f, fs=fs)
    ref = np.abs(H)
    got = cic.cic_response(N, R, M, f, fs, normalized=False)
    assert np.allclose(got, ref, rtol=1e-9, atol=1e-9 * (R * M) ** N)
    assert np.allclose(cic.cic_response(N, R, M, f, fs), ref / (R * M) ** N, rtol=1e-9, atol=1e-12)
    assert np.array_equal(cic.cic_taps(N, R, M).astype(float), taps)
    # nulls at multiples of fs/(RM)
    assert np.all(cic.cic_response(N, R, M, np.arange(1, 3) * fs / (R * M), fs) < 1e-12)


def test_droop_large_R():
    """Droop at the output Nyquist edge f = fs/(2R), M = 1: [sin(pi/2) / (R sin(pi/(2R)))]^N -> (2/pi)^N,
    i.e. N * 20 log10(2/pi) = -3.92 dB per stage as R grows (R sin(pi/(2R)) -> pi/2)."""
    per_stage = 20 * math.log10(2 / math.pi)
    assert per_stage == pytest.approx(-3.922, abs=1e-3)
    fs = 1.0
    for N in (1, 3, 5):
        d = float(cic.cic_droop_db(N, 1024, 1, fs / 2048, fs))
        assert d == pytest.approx(N * per_stage, abs=1e-4 * N)
    # smaller R droops less (R sin(pi/(2R)) < pi/2 grows toward it)
    assert float(cic.cic_droop_db(1, 4, 1, fs / 8, fs)) > per_stage


def test_min_order():
    fs, R = 3.072e6, 16
    fo = fs / R
    bands = [(k * fo - 28e3, k * fo + 28e3) for k in range(1, 9)]
    N = cic.cic_min_order(R, 1, fs, bands, 86.0, 8)
    assert N == 6
    f = np.linspace(fo - 28e3, fo + 28e3, 501)
    assert np.max(cic.cic_response(N, R, 1, f, fs)) <= 10 ** (-86 / 20)
    assert np.max(cic.cic_response(N - 1, R, 1, f, fs)) > 10 ** (-86 / 20)


# ---------------------------------------------------------------------------------------------
# the bit-true stage


def _design(st):
    return FixedDesign((st,), st.in_fmt, "half_up", "saturate")


@pytest.mark.parametrize("N,R,M,out_bits", [(4, 8, 1, 18), (3, 25, 1, 16), (5, 16, 1, 20), (2, 6, 2, 16)])
def test_step_gain_and_error_bound(N, R, M, out_bits):
    """Full-scale steps: the output numbers carry the gain (RM)^N; the pruned result stays within
    cic_error_bound of the full-precision one (drop all zeros, output at the input's frac)."""
    in_fmt = Fmt(16, 15)
    G = (R * M) ** N
    pruned = cic.make_cic_stage(N, R, M, in_fmt, out_bits)
    bmax = cic.cic_bmax(N, R, M, 16)
    full = cic.make_cic_stage(N, R, M, in_fmt, bmax + 1, prune=False)
    assert full.out.frac == in_fmt.frac and full.drop == (0,) * (2 * N)
    out_drop = in_fmt.frac - pruned.out.frac
    assert out_drop == bmax - out_bits + 1
    bound = cic.cic_error_bound(N, R, M, pruned.drop, out_drop, "half_up")
    n = R * (N * M + 40)
    for level in (in_fmt.hi, in_fmt.lo, 12345):
        x = np.full(n, level, dtype=np.int64)
        yf = reference.run(_design(full), x)
        yp = reference.run(_design(pruned), x)
        # full precision, steady state: exactly G * x (the real gain shows in the numbers)
        assert all(int(v) == G * level for v in yf[N * M + 2:])
        # pruned: within the bound, in input LSBs
        err = np.abs(np.asarray(yp, dtype=object) * (1 << out_drop) - np.asarray(yf, dtype=object))
        assert max(int(e) for e in err) <= bound
        # no saturation: the guard bit keeps even the most negative step inside the word
        assert int(np.min(yp)) > pruned.out.lo or level != in_fmt.lo or G & (G - 1)
    # the real DC gain: output value over input value
    y = reference.run(_design(pruned), np.full(n, 1 << 14, dtype=np.int64))
    gain = (int(y[-1]) / 2.0 ** pruned.out.frac) / ((1 << 14) / 2.0 ** in_fmt.frac)
    assert gain == pytest.approx(G, rel=bound / (G * (1 << 14)) + 1e-12)


def test_random_input_error_statistics():
    """Random full-scale input: pruned - full precision has the predicted variance and stays in the bound."""
    N, R, M = 4, 25, 1
    in_fmt = Fmt(16, 15)
    pruned = cic.make_cic_stage(N, R, M, in_fmt, 16)
    full = cic.make_cic_stage(N, R, M, in_fmt, cic.cic_bmax(N, R, M, 16) + 1, prune=False)
    rng = np.random.default_rng(11)
    x = rng.integers(in_fmt.lo, in_fmt.hi + 1, R * 3000)
    yf = np.asarray(reference.run(_design(full), x), dtype=object)
    yp = np.asarray(reference.run(_design(pruned), x), dtype=object)
    out_drop = in_fmt.frac - pruned.out.frac
    e = np.array([float(a) for a in (yp * (1 << out_drop) - yf)[10:]])
    st = cic.cic_error_stats(N, R, M, pruned.drop, out_drop, "half_up")
    assert np.max(np.abs(e)) <= cic.cic_error_bound(N, R, M, pruned.drop, out_drop, "half_up")
    assert np.var(e) == pytest.approx(st["var_total"], rel=0.25)
    assert np.mean(e) == pytest.approx(st["mean_total"], abs=3 * math.sqrt(st["var_total"] / len(e)) + 1)
    # Hogenauer's budget: total (his model) about twice the output truncation alone
    assert st["hogenauer_var_total"] <= 2 * st["sigma_T2"] * (1 + 1e-12)


def test_guard_bit_only_when_needed():
    in_fmt = Fmt(16, 15)
    # G = 2^12 (power of two): floor truncations can go below -2^B_max -> one bit added
    st = cic.make_cic_stage(4, 8, 1, in_fmt, 16)
    assert st.out.bits == 17
    lo, hi = cic.cic_output_range(st)
    assert st.out.lo <= lo and hi <= st.out.hi
    # G = 25^3 = 15625 < 2^14: room to spare, no extra bit
    st = cic.make_cic_stage(3, 25, 1, in_fmt, 16)
    assert st.out.bits == 16
    # full precision: never an extra bit
    st = cic.make_cic_stage(4, 8, 1, in_fmt, cic.cic_bmax(4, 8, 1, 16) + 1, prune=False)
    assert st.out.bits == cic.cic_bmax(4, 8, 1, 16) + 1
