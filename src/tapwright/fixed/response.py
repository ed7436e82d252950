"""Frequency response of a quantized design (any chain of stages).

A chain of decimating stages has the single-rate equivalent
H(z) = H1(z) H2(z^D1) H3(z^(D1 D2)) ... by the noble identities (Crochiere &
Rabiner, Multirate Digital Signal Processing, 1983, ch. 3), so its magnitude
at input-rate frequency f is the product of each stage's response at
f * (decimation before that stage). Aliasing is not part of H: it shows where
H is not small in the bands that fold onto the output pass band.
"""
from __future__ import annotations

import numpy as np
from scipy import signal


def stage_response(st, f, fs):
    """Complex response of one stage at frequencies ``f`` (Hz, at the stage's input rate ``fs``)."""
    w = 2 * np.pi * np.asarray(f, float) / fs
    if st.kind == "fir":
        h = np.asarray(st.coeffs, float) / 2.0 ** st.coeff_frac
        _, H = signal.freqz(h, [1.0], worN=w)
        return H
    if st.kind == "cic":
        RM = st.decimation * st.diff_delay
        num = np.ones(RM)
        _, H = signal.freqz(num, [1.0], worN=w)
        return H ** st.order
    if st.kind == "sos":
        sos = np.array([[*(np.asarray(s.b, float) / 2.0 ** s.coeff_frac),
                         *(np.asarray(s.a, float) / 2.0 ** s.coeff_frac)] for s in st.sections])
        _, H = signal.sosfreqz(sos, worN=w)
        return H
    raise ValueError(st.kind)


def design_response(fixed, f, fs):
    """Complex single-rate-equivalent response of the whole design at input-rate frequencies."""
    f = np.asarray(f, float)
    H = np.ones_like(f, dtype=complex)
    rate = 1
    for st in fixed.stages:
        H *= stage_response(st, f * rate, fs)
        rate *= getattr(st, "decimation", 1)
    return H


def impulse_response(fixed, n: int):
    """Single-rate-equivalent impulse response (real gain), first ``n`` samples."""
    h = np.zeros(1)
    h[0] = 1.0
    rate = 1
    for st in fixed.stages:
        if st.kind == "fir":
            g = np.asarray(st.coeffs, float) / 2.0 ** st.coeff_frac
        elif st.kind == "cic":
            g = np.ones(st.decimation * st.diff_delay)
            for _ in range(st.order - 1):
                g = np.convolve(g, np.ones(st.decimation * st.diff_delay))
        else:
            imp = np.zeros(n)
            imp[0] = 1.0
            sos = np.array([[*(np.asarray(s.b, float) / 2.0 ** s.coeff_frac),
                             *(np.asarray(s.a, float) / 2.0 ** s.coeff_frac)] for s in st.sections])
            g = signal.sosfilt(sos, imp)
        up = np.zeros((len(g) - 1) * rate + 1)
        up[::rate] = g
        h = np.convolve(h, up)[:n]
        rate *= getattr(st, "decimation", 1)
    out = np.zeros(n)
    out[: len(h)] = h[:n]
    return out
