"""Quantized (integer) stages: the arithmetic that design.json's ``stages`` describe.

A :class:`FixedDesign` is a chain of stages with integer coefficients and exact
formats. It is what every back end (reference, signal-flow graph, RTL) starts
from, and what ``design.json`` records.
"""
from __future__ import annotations

from dataclasses import dataclass, field

from .formats import Fmt


@dataclass(frozen=True)
class FirStage:
    """``acc[n] = sum_k coeffs[k] * x[n-k]``, rounded to ``out``; keep n = phase + m*decimation."""

    coeffs: tuple[int, ...]
    coeff_frac: int
    out: Fmt
    decimation: int = 1
    phase: int = 0
    kind: str = field(default="fir", init=False)

    @property
    def ntaps(self) -> int:
        return len(self.coeffs)

    def symmetry(self) -> int:
        """+1 symmetric, -1 antisymmetric, 0 neither (all-zero counts as symmetric)."""
        c = self.coeffs
        if all(a == b for a, b in zip(c, reversed(c))):
            return 1
        if all(a == -b for a, b in zip(c, reversed(c))):
            return -1
        return 0

    def as_dict(self) -> dict:
        return {"kind": "fir", "coeffs": [int(c) for c in self.coeffs], "coeff_frac": self.coeff_frac,
                "decimation": self.decimation, "phase": self.phase, "output": self.out.as_dict()}


@dataclass(frozen=True)
class CicStage:
    """Hogenauer CIC decimator: ``order`` integrators, rate change, ``order`` combs.

    ``drop`` has 2*order entries: the LSBs of the full-precision word each stage
    no longer keeps at its input (integrators first, then combs), non-decreasing.
    ``widths`` are the register widths the hardware keeps per stage (full width
    minus drop, plus the guard bits that keep the output free of wrap-around).
    """

    order: int
    decimation: int
    diff_delay: int
    drop: tuple[int, ...]
    out: Fmt
    in_fmt: Fmt
    phase: int = 0
    kind: str = field(default="cic", init=False)

    @property
    def gain(self) -> int:
        return (self.decimation * self.diff_delay) ** self.order

    @property
    def full_bits(self) -> int:
        """Hogenauer's B_max + 1 (register width before pruning)."""
        import math
        return int(math.ceil(self.order * math.log2(self.decimation * self.diff_delay) + self.in_fmt.bits - 1 - 1e-12)) + 1

    @property
    def widths(self) -> tuple[int, ...]:
        # one guard bit above B_max+1: truncation errors (floor) can push the
        # most negative output just below -2**B_max, which must not wrap
        return tuple(self.full_bits + 1 - d for d in self.drop)

    @property
    def work_frac(self) -> int:
        """Fractional bits of the last comb's output."""
        return self.in_fmt.frac - self.drop[-1]

    def as_dict(self) -> dict:
        return {"kind": "cic", "order": self.order, "decimation": self.decimation,
                "diff_delay": self.diff_delay, "phase": self.phase, "drop": list(self.drop),
                "register_bits": list(self.widths), "output": self.out.as_dict()}


@dataclass(frozen=True)
class Section:
    """One second-order section with integer coefficients.

    ``y[n] = sat_state( round( (b0 x[n] + b1 x[n-1] + b2 x[n-2]) - (a1 y[n-1] + a2 y[n-2]) ) )``
    with the sum exact (aligned to the finer of the input and state fractions
    plus ``coeff_frac``), one rounding to ``state`` with the design's rounding
    mode, and saturation to ``state.bits``. ``a[0] == 2**coeff_frac``.
    """

    b: tuple[int, int, int]
    a: tuple[int, int, int]
    coeff_frac: int
    state: Fmt

    def as_dict(self) -> dict:
        return {"b": [int(v) for v in self.b], "a": [int(v) for v in self.a], "coeff_frac": self.coeff_frac,
                "state_bits": self.state.bits, "state_frac": self.state.frac}


@dataclass(frozen=True)
class SosStage:
    sections: tuple[Section, ...]
    out: Fmt
    form: str = "df1"
    noise_bound_lsb: float = 0.0
    kind: str = field(default="sos", init=False)

    def as_dict(self) -> dict:
        return {"kind": "sos", "form": self.form, "sections": [s.as_dict() for s in self.sections],
                "output": self.out.as_dict(), "noise_bound_lsb": float(self.noise_bound_lsb)}


Stage = FirStage | CicStage | SosStage


@dataclass(frozen=True)
class FixedDesign:
    """A chain of quantized stages from ``in_fmt`` to the last stage's output."""

    stages: tuple[Stage, ...]
    in_fmt: Fmt
    rounding: str
    overflow: str

    @property
    def out_fmt(self) -> Fmt:
        return self.stages[-1].out

    @property
    def decimation(self) -> int:
        d = 1
        for s in self.stages:
            d *= getattr(s, "decimation", 1)
        return d

    @property
    def decimation_phase(self) -> int:
        p, d = 0, 1
        for s in self.stages:
            p += d * getattr(s, "phase", 0)
            d *= getattr(s, "decimation", 1)
        return p

    def stage_inputs(self) -> list[Fmt]:
        fmts, f = [], self.in_fmt
        for s in self.stages:
            fmts.append(f)
            f = s.out
        return fmts
