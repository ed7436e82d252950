"""Fixed-point formats, rounding and overflow on integer arrays.

A value is an integer ``v`` with a format ``Fmt(bits, frac)``: it stands for the
real number ``v / 2**frac`` and fits the signed two's-complement range
``[-2**(bits-1), 2**(bits-1) - 1]``.

Arrays are NumPy ``int64`` when every intermediate provably fits in 62 bits and
``object`` arrays of Python integers otherwise (exact, slower). The functions
here accept both and keep the kind they were given.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

ROUNDING_MODES = ("truncate", "half_up", "half_even")
OVERFLOW_MODES = ("saturate", "wrap")

#: widest word that int64 arithmetic may carry with headroom for one add
INT64_SAFE_BITS = 62


@dataclass(frozen=True, order=True)
class Fmt:
    """Signed fixed-point format: ``bits`` total (sign included), ``frac`` fractional."""

    bits: int
    frac: int

    def __post_init__(self):
        if self.bits < 1:
            raise ValueError(f"Fmt.bits must be >= 1, got {self.bits}")

    @property
    def lo(self) -> int:
        return -(1 << (self.bits - 1))

    @property
    def hi(self) -> int:
        return (1 << (self.bits - 1)) - 1

    @property
    def lsb(self) -> float:
        return 2.0 ** (-self.frac)

    def q(self) -> str:
        """Q notation ``Qm.n`` with m integer bits including the sign."""
        return f"Q{self.bits - self.frac}.{self.frac}"

    def as_dict(self) -> dict:
        return {"bits": self.bits, "frac": self.frac}


def bits_for_range(lo: int, hi: int) -> int:
    """Smallest signed width holding every integer in ``[lo, hi]`` (at least 1)."""
    lo, hi = int(lo), int(hi)
    if lo > hi:
        raise ValueError("empty range")
    # b bits hold [-2**(b-1), 2**(b-1) - 1]: hi needs b - 1 >= hi.bit_length(), lo < 0 needs
    # 2**(b-1) >= -lo, that is b - 1 >= (-lo - 1).bit_length() = (~lo).bit_length()
    return 1 + max(hi.bit_length() if hi > 0 else 0, (~lo).bit_length() if lo < 0 else 0)


def _is_object(x) -> bool:
    return isinstance(x, np.ndarray) and x.dtype == object


def as_int_array(x, *, exact: bool = False) -> np.ndarray:
    """Integer array, ``object`` dtype when ``exact`` is asked or values are huge."""
    a = np.asarray(x)
    if exact or a.dtype == object:
        return np.array([int(v) for v in a.ravel()], dtype=object).reshape(a.shape)
    return a.astype(np.int64)


def shift_round(v, shift: int, rounding: str):
    """Divide integers by ``2**shift`` with the given rounding (shift may be <= 0).

    - ``truncate``: floor (drop LSBs of the two's-complement word);
    - ``half_up``: add half an LSB then floor, ties go toward +infinity;
    - ``half_even``: ties go to the even neighbour (IEEE 754 roundTiesToEven).
    """
    if rounding not in ROUNDING_MODES:
        raise ValueError(f"rounding must be one of {ROUNDING_MODES}, got {rounding!r}")
    v = np.asarray(v)
    if shift <= 0:
        if _is_object(v):
            return np.array([int(a) << (-shift) for a in v.ravel()], dtype=object).reshape(v.shape)
        return v.astype(np.int64) << (-shift) if shift < 0 else v.copy()
    if rounding == "truncate":
        return v >> shift
    half = 1 << (shift - 1)
    if rounding == "half_up":
        return (v + half) >> shift
    # half_even
    q = v >> shift
    r = v - (q << shift)
    up = (r > half) | ((r == half) & ((q & 1) == 1))
    if _is_object(v):
        return q + np.array([1 if u else 0 for u in np.ravel(up)], dtype=object).reshape(v.shape)
    return q + up.astype(np.int64)


def overflow(v, bits: int, mode: str):
    """Bring integers into ``bits`` signed bits by saturation or two's-complement wrap."""
    if mode not in OVERFLOW_MODES:
        raise ValueError(f"overflow must be one of {OVERFLOW_MODES}, got {mode!r}")
    v = np.asarray(v)
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    if mode == "saturate":
        if _is_object(v):
            return np.array([min(max(int(a), lo), hi) for a in v.ravel()], dtype=object).reshape(v.shape)
        return np.clip(v, lo, hi)
    m = 1 << bits
    return ((v - lo) % m) + lo


def requantize(v, frac_in: int, fmt: Fmt, rounding: str, overflow_mode: str):
    """Convert integers of ``frac_in`` fractional bits to ``fmt``: round, then overflow."""
    return overflow(shift_round(v, frac_in - fmt.frac, rounding), fmt.bits, overflow_mode)


def round_scalar(v: int, shift: int, rounding: str) -> int:
    """Scalar version of :func:`shift_round` on Python integers."""
    return int(shift_round(np.array([int(v)], dtype=object), shift, rounding)[0])


def overflow_scalar(v: int, bits: int, mode: str) -> int:
    return int(overflow(np.array([int(v)], dtype=object), bits, mode)[0])
