"""Scattered look-ahead pipelining of biquads (an optional transform).

The method is Parhi's scattered look-ahead (K. K. Parhi and D. G.
Messerschmitt, "Pipeline interleaving and parallelism in recursive digital
filters, Part I", IEEE Trans. ASSP 37(7), 1989; K. K. Parhi, VLSI Digital Signal
Processing Systems, Wiley 1999, ch. 10; both from memory). A second-order
section ``H(z) = B(z)/D(z)`` with ``D(z) = 1 + c1 z^-1 + c2 z^-2 =
(1 - p1 z^-1)(1 - p2 z^-1)`` is rewritten, for a look-ahead factor ``M >= 2``,
as

    H(z) = B(z) N(z) / (D(z) N(z)) = B'(z) / D'(z),
    N(z) = prod_{k=1..M-1} D(z e^{-j 2 pi k / M})      (D with its poles rotated by 2 pi k / M)
    D'(z) = prod_{k=0..M-1} (1 - p1 w^k z^-1)(1 - p2 w^k z^-1)
          = (1 - p1^M z^-M)(1 - p2^M z^-M)
          = 1 - (p1^M + p2^M) z^-M + (p1 p2)^M z^-2M,     w = e^{j 2 pi / M},

so the denominator has nonzero terms only at powers of ``z^-M``: the feedback
loop holds ``M`` (and ``2M``) delays instead of 1 (and 2), and the numerator
``B'(z) = B(z) N(z)`` (``2M + 1`` taps) is a non-recursive FIR part that
pipelines freely.

What it does to the pole set
    ``D'`` has ``2M`` poles: every original pole ``p = r e^{j theta}`` and its
    ``M - 1`` rotated copies ``p e^{j 2 pi k / M}`` on the same radius ``r``
    (``z^M = r^M e^{j M theta}``). The rotated copies are the zeros of ``N`` and
    so are cancelled exactly by zeros of ``B'``; the stability margin is
    unchanged (every pole keeps radius ``r``).

Exact integer arithmetic
    With the section's integers ``a = (2^F, a1, a2)`` the power sums
    ``S_k = 2^{kF} (p1^k + p2^k)`` are integers (``S_0 = 2``, ``S_1 = -a1``,
    ``S_k = -a1 S_{k-1} - a2 2^F S_{k-2}``), so ``D'`` is exactly
    ``(2^{MF}, 0.., -S_M, 0.., a2^M)`` at ``M F`` fractional bits. ``N`` is
    ``D' / D`` at ``(M - 1) F`` bits: its coefficients are integer polynomials
    in ``a1, a2`` and the long division is exact (checked: every quotient digit
    divides by ``2^F`` and the remainder is zero). ``B' = B N`` is then exact at
    ``M F`` bits. Common trailing zero bits are removed, so the exact result is
    at most ``M F`` fractional bits wide. :func:`requantize` rounds ``B'`` and
    ``D'`` (nearest, ties to even) to a chosen coefficient width or fraction;
    the two are rounded independently, so the rotated poles and their
    cancelling zeros no longer coincide: :func:`analyze` reports the pole set,
    the pole-zero mismatch, the response deviation and the coefficient and
    accumulator growth.

Numerics
    The graph (:func:`lookahead_sos`) keeps the df1 section's rounding: the
    exact sum ``B'(z) x - (D'(z) - 1) y`` is rounded once to the section's state
    format with the design's rounding mode and saturated
    (:class:`~tapwright.fixed.stages.Section`). With exact coefficients the
    ideal transfer function is identical to the section's; the bits differ
    from the un-transformed section because the loop rounds a different sum
    (the rounding error is shaped by ``1/D'(z)`` instead of ``1/D(z)``), so a
    look-ahead graph is checked against :func:`reference_run` below, not
    against :mod:`tapwright.fixed.reference`. The price is width: ``2M + 1``
    FIR products instead of 3, exact coefficients of up to ``M F`` fractional
    bits, and a larger FIR L1 norm, so wider FIR and loop adders
    (:func:`analyze` reports the growth; :func:`requantize` trades it for a
    pole-zero mismatch).

Timing
    Every loop ``y -> multiply -> add -> round -> y`` keeps its operators but
    holds ``M`` (or ``2M``) delays instead of 1 (or 2), so the iteration bound
    (:func:`~tapwright.sfg.transforms.pipeline.iteration_bound`) drops by
    ``M`` (by about ``M`` when a loop coefficient is free, zero or a power of
    two). The loop's delays are the room that retiming
    (:func:`~tapwright.sfg.transforms.pipeline.retime`) moves into the
    multiply and add; :func:`~tapwright.sfg.transforms.pipeline.pipeline`
    pipelines the FIR part.

Entry points: :func:`lookahead_section` (one section, exact), :func:`requantize`,
:func:`analyze`, :func:`lookahead_sos` (builder), :func:`lookahead` (graph ->
graph, every SOS stage of a direct-form graph), :func:`lookahead_design`
(FixedDesign -> graph), :func:`design_sections` (the sections those use) and
the bit-true reference :func:`reference_run`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ...fixed.formats import Fmt
from ...fixed.stages import FixedDesign, Section, SosStage
from ..build import adder_tree, stage_nodes
from ..graph import add_node, connect, copy_graph, propagate

__all__ = ["LookaheadSection", "LookaheadReport", "lookahead_polys", "lookahead_section", "requantize",
           "analyze", "lookahead_sos", "lookahead", "lookahead_design", "design_sections",
           "reference_sections", "reference_run"]


# ------------------------------------------------------------------------------------------------
# exact integer polynomials


def _tz(v: int) -> int:
    """Trailing zero bits of a nonzero integer."""
    v = abs(int(v))
    return (v & -v).bit_length() - 1


def power_sums(a1: int, a2: int, F: int, n: int) -> list[int]:
    """``S_k = 2^{kF} (p1^k + p2^k)`` for k = 0..n (exact integers) of ``D = 1 + a1/2^F z^-1 + a2/2^F z^-2``."""
    S = [2, -int(a1)]
    for _ in range(2, n + 1):
        S.append(-int(a1) * S[-1] - int(a2) * (1 << F) * S[-2])
    return S[: n + 1]


def lookahead_polys(a1: int, a2: int, F: int, M: int) -> tuple[list[int], list[int]]:
    """Exact ``(N, D')`` for ``D = (2^F, a1, a2)``: N at ``(M-1)F`` fractional bits, D' at ``MF``.

    ``D'`` has ``2M + 1`` coefficients (nonzero only at 0, M, 2M), ``N`` has
    ``2M - 1``; ``D' = N * D`` holds exactly (checked here by the division).
    """
    if M < 1:
        raise ValueError(f"look-ahead factor must be >= 1, got {M}")
    a1, a2 = int(a1), int(a2)
    dp = [0] * (2 * M + 1)
    dp[0] = 1 << (M * F)
    dp[M] += -power_sums(a1, a2, F, M)[M]
    dp[2 * M] += a2 ** M
    # long division D' / D in powers of z^-1 (both at integer scale):
    # n_k = (d'_k - a1 n_{k-1} - a2 n_{k-2}) / 2^F, exact
    n = []
    for k in range(2 * M - 1):
        r = dp[k] - (a1 * n[k - 1] if k >= 1 else 0) - (a2 * n[k - 2] if k >= 2 else 0)
        q, rem = divmod(r, 1 << F)
        if rem:
            raise ArithmeticError(f"look-ahead division not exact at z^-{k}")
        n.append(q)
    # the remainder (terms z^-(2M-1) and z^-2M) must vanish: D' = N * D exactly
    k = 2 * M - 1
    r1 = dp[k] - a1 * n[k - 1] - (a2 * n[k - 2] if k >= 2 else 0)
    r2 = dp[k + 1] - a2 * n[k - 1]
    if r1 or r2:
        raise ArithmeticError("look-ahead: D' is not a multiple of D")
    return n, dp


def _conv(p, q) -> list[int]:
    out = [0] * (len(p) + len(q) - 1)
    for i, a in enumerate(p):
        if a:
            for j, b in enumerate(q):
                out[i + j] += int(a) * int(b)
    return out


# ------------------------------------------------------------------------------------------------
# the look-ahead section


@dataclass(frozen=True)
class LookaheadSection:
    """One look-ahead section with integer coefficients at ``coeff_frac``.

    ``y[n] = sat_state( round( sum_k b[k] x[n-k] - a[1] y[n-M] - a[2] y[n-2M] ) )``
    with the sum exact (as :class:`~tapwright.fixed.stages.Section`), one
    rounding to ``state`` and saturation; ``a[0] == 2**coeff_frac``, ``len(b)
    == 2M + 1``. ``exact``: the coefficients are the exact B', D' (not
    requantized). ``source``: the section it was made from.
    """

    b: tuple[int, ...]
    a: tuple[int, int, int]
    M: int
    coeff_frac: int
    state: Fmt
    exact: bool
    source: Section = field(compare=False, repr=False)

    @property
    def den(self) -> tuple[int, ...]:
        """D'(z) as a full coefficient list (2M + 1 entries, zero off the multiples of M)."""
        d = [0] * (2 * self.M + 1)
        d[0], d[self.M], d[2 * self.M] = self.a
        return tuple(d)

    def float_ba(self) -> tuple[np.ndarray, np.ndarray]:
        """(B', D') as float arrays of real coefficients (for freqz and roots)."""
        s = 2.0 ** -self.coeff_frac
        return (np.array([float(v) * s for v in self.b]), np.array([float(v) * s for v in self.den]))

    def as_dict(self) -> dict:
        return {"M": self.M, "b": [int(v) for v in self.b], "a": [int(v) for v in self.a],
                "coeff_frac": self.coeff_frac, "exact": self.exact,
                "state_bits": self.state.bits, "state_frac": self.state.frac}


def lookahead_section(sec: Section, M: int) -> LookaheadSection:
    """Exact scattered look-ahead of ``sec`` by factor ``M`` (see the module docstring)."""
    if M < 2:
        raise ValueError(f"look-ahead factor must be >= 2, got {M}")
    F = int(sec.coeff_frac)
    if int(sec.a[0]) != 1 << F:
        raise ValueError("section's a[0] must be 2**coeff_frac")
    n, dp = lookahead_polys(int(sec.a[1]), int(sec.a[2]), F, M)
    bp = _conv([int(v) for v in sec.b], n)  # at (M-1)F + F = MF
    frac = M * F
    # drop the trailing zero bits every coefficient shares (exact)
    k = min([frac] + [_tz(v) for v in bp + [dp[M], dp[2 * M]] if v])
    frac -= k
    bp = [v >> k for v in bp]
    a = (1 << frac, dp[M] >> k, dp[2 * M] >> k)
    return LookaheadSection(b=tuple(bp), a=a, M=M, coeff_frac=frac, state=sec.state, exact=True, source=sec)


def _fits(vals, bits: int) -> bool:
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    return all(lo <= v <= hi for v in vals)


def requantize(la: LookaheadSection, *, coeff_bits: int | None = None, coeff_frac: int | None = None) -> LookaheadSection:
    """B' and D' rounded (nearest, ties to even) to ``coeff_frac`` bits, or to the largest
    fraction whose multiplier coefficients fit ``coeff_bits`` signed bits.

    The two polynomials are rounded independently (the zero pattern of D' is
    kept); a fraction at or above the exact one returns ``la`` unchanged.
    """
    if (coeff_bits is None) == (coeff_frac is None):
        raise ValueError("give exactly one of coeff_bits, coeff_frac")
    fe = la.coeff_frac
    mults = list(la.b) + [la.a[1], la.a[2]]

    def at(f):
        return [_round(int(v), fe - f, "half_even") for v in mults]
    if coeff_frac is None:
        if coeff_bits < 2:
            raise ValueError("coeff_bits must be >= 2")
        if _fits(mults, coeff_bits):
            return la  # the exact coefficients already fit
        m = max(abs(int(v)) for v in mults)
        f = fe - (m.bit_length() - (coeff_bits - 1))
        while not _fits(at(f), coeff_bits):
            f -= 1
        while f + 1 < fe and _fits(at(f + 1), coeff_bits):
            f += 1
        coeff_frac = f
    if coeff_frac >= fe:
        return la
    if coeff_frac < 0:
        raise ValueError(f"coefficient fraction {coeff_frac} < 0: the coefficients do not fit")
    q = at(coeff_frac)
    nb = len(la.b)
    return LookaheadSection(b=tuple(q[:nb]), a=(1 << coeff_frac, q[nb], q[nb + 1]), M=la.M,
                            coeff_frac=coeff_frac, state=la.state, exact=False, source=la.source)


# ------------------------------------------------------------------------------------------------
# what it does


@dataclass
class LookaheadReport:
    """Pole set, cancellation and growth of a look-ahead section against its source section."""

    M: int
    exact: bool
    coeff_frac: int
    source_coeff_frac: int
    poles_source: np.ndarray          # roots of D (2)
    poles: np.ndarray                 # roots of D' (2M)
    zeros: np.ndarray                 # roots of B' (2M)
    rotated: np.ndarray               # the ideal rotated poles p e^{j 2 pi k/M}, k = 1..M-1
    max_pole_radius: float
    pole_zero_mismatch: float         # max over rotated poles |nearest pole of D' - nearest zero of B'|
    response_deviation: float         # max |H'(w) - H(w)| / max |H(w)| on the grid
    response_deviation_db: float      # 20 log10 of the above (-inf when 0)
    coeff_bits: int                   # widest multiplier coefficient of B', D' (signed)
    source_coeff_bits: int            # widest multiplier coefficient of B, D
    l1_b: float                       # sum |b'| (real values)
    source_l1_b: float                # sum |b|
    fir_acc_growth_bits: int          # ceil(log2 sum|b'_int|) - ceil(log2 sum|b_int|): FIR accumulator
                                      # width growth for the same input (fraction and gain together)
    noise_gain: float                 # sum h^2 of 1/D' (the loop rounding error's gain to y)
    source_noise_gain: float          # sum h^2 of 1/D

    @property
    def stable(self) -> bool:
        return self.max_pole_radius < 1.0

    def as_dict(self) -> dict:
        return {"M": self.M, "exact": self.exact, "coeff_frac": self.coeff_frac,
                "source_coeff_frac": self.source_coeff_frac, "max_pole_radius": self.max_pole_radius,
                "pole_zero_mismatch": self.pole_zero_mismatch, "response_deviation": self.response_deviation,
                "response_deviation_db": self.response_deviation_db, "coeff_bits": self.coeff_bits,
                "source_coeff_bits": self.source_coeff_bits, "l1_b": self.l1_b, "source_l1_b": self.source_l1_b,
                "fir_acc_growth_bits": self.fir_acc_growth_bits, "noise_gain": self.noise_gain,
                "source_noise_gain": self.source_noise_gain}


def _bits(vals) -> int:
    from ...fixed.formats import bits_for_range
    vals = [int(v) for v in vals]
    return bits_for_range(min(vals + [0]), max(vals + [0]))


def _clog2(v: int) -> int:
    return max(0, (int(v) - 1).bit_length()) if v > 0 else 0


def _nearest(pts, p):
    return pts[int(np.argmin(np.abs(pts - p)))] if len(pts) else np.nan


def _noise_gain(den, n=1 << 14) -> float:
    from scipy import signal
    imp = np.zeros(n)
    imp[0] = 1.0
    h = signal.lfilter([1.0], den, imp)
    return float(np.sum(h * h))


def analyze(la: LookaheadSection, *, worN: int = 2048) -> LookaheadReport:
    """Pole set, pole-zero mismatch, response deviation and growth of ``la`` against ``la.source``."""
    from scipy import signal
    src = la.source
    F = src.coeff_frac
    b0 = np.array([float(v) for v in src.b]) / 2.0 ** F
    d0 = np.array([float(v) for v in src.a]) / 2.0 ** F
    b1, d1 = la.float_ba()
    p_src = np.roots(d0)
    poles = np.roots(d1)
    zeros = np.roots(b1) if np.any(b1) else np.zeros(0, complex)
    w = np.exp(2j * np.pi / la.M)
    rotated = np.array([p * w ** k for p in p_src for k in range(1, la.M)])
    mism = 0.0
    for p in rotated:
        mism = max(mism, float(abs(_nearest(poles, p) - _nearest(zeros, p))))
    _, H0 = signal.freqz(b0, d0, worN=worN)
    _, H1 = signal.freqz(b1, d1, worN=worN)
    peak = float(np.max(np.abs(H0))) or 1.0
    dev = float(np.max(np.abs(H1 - H0))) / peak
    l1_int = sum(abs(int(v)) for v in la.b)
    l1_src = sum(abs(int(v)) for v in src.b)
    return LookaheadReport(
        M=la.M, exact=la.exact, coeff_frac=la.coeff_frac, source_coeff_frac=F,
        poles_source=p_src, poles=poles, zeros=zeros, rotated=rotated,
        max_pole_radius=float(np.max(np.abs(poles))) if len(poles) else 0.0,
        pole_zero_mismatch=mism, response_deviation=dev,
        response_deviation_db=20 * math.log10(dev) if dev > 0 else -math.inf,
        coeff_bits=_bits(list(la.b) + [la.a[1], la.a[2]]),
        source_coeff_bits=_bits(list(src.b) + [src.a[1], src.a[2]]),
        l1_b=float(np.sum(np.abs(b1))), source_l1_b=float(np.sum(np.abs(b0))),
        fir_acc_growth_bits=_clog2(l1_int) - _clog2(l1_src),
        noise_gain=_noise_gain(d1), source_noise_gain=_noise_gain(d0))


# ------------------------------------------------------------------------------------------------
# graphs


def lookahead_sos(g, src, sections, *, stage: int, rounding: str):
    """Append a cascade of look-ahead sections to ``g`` from node ``src``; returns the last state node.

    Per section: the FIR part ``B'`` (products of the input read with
    ``z = k``, an adder tree: feed-forward), then the loop adder (FIR sum minus
    ``a[1] y[n-M]`` minus ``a[2] y[n-2M]``, feedback edges with ``z = M`` and
    ``z = 2M``) and the state quantizer with the design's rounding and
    saturation, as the df1 builder (:func:`tapwright.sfg.build.sos`) does.
    """
    cur = src
    for i, s in enumerate(sections):
        M = s.M
        tag = f"s{stage}_b{i}"
        before = set(g.nodes)
        y = add_node(g, "quant", name=f"{tag}_y", fmt=s.state, rounding=rounding, overflow="saturate",
                     stage=stage, role="sos_y", section=i, lookahead=M)
        prods = []
        for k, c in enumerate(s.b):
            m = add_node(g, "mul", name=f"{tag}_b{k}", coeff=int(c), coeff_frac=s.coeff_frac, role="mul",
                         stage=stage, section=i)
            connect(g, cur, m, z=k)
            prods.append((m, 1))
        ff = adder_tree(g, prods, stage=stage, role="tree")
        fb = []
        for j, zk in ((1, M), (2, 2 * M)):
            m = add_node(g, "mul", name=f"{tag}_a{zk}", coeff=int(s.a[j]), coeff_frac=s.coeff_frac, role="mul",
                         stage=stage, section=i)
            connect(g, y, m, z=zk)
            fb.append(m)
        acc = add_node(g, "add", name=f"{tag}_acc", role="tree", stage=stage, section=i)
        connect(g, ff, acc)
        for m in fb:
            connect(g, m, acc, sign=-1)
        connect(g, acc, y)
        for v in set(g.nodes) - before:
            g._node[v]["section"] = i
        cur = y
    return cur


def _stage_sections(st: SosStage, M: int, coeff_bits, coeff_frac) -> tuple:
    secs = []
    for sec in st.sections:
        la = lookahead_section(sec, M)
        if coeff_bits is not None or coeff_frac is not None:
            la = requantize(la, coeff_bits=coeff_bits, coeff_frac=coeff_frac)
        secs.append(la)
    return tuple(secs)


def _sos_stage_ids(g, stages=None):
    return [i for i, st in enumerate(g.graph.get("stages", ())) if st.kind == "sos"
            and (stages is None or i in stages)]


def lookahead(g, M: int, *, coeff_bits: int | None = None, coeff_frac: int | None = None, stages=None):
    """Every SOS stage of ``g`` (restricted to ``stages``) as look-ahead sections; returns a new graph.

    ``g`` is a propagated graph from :func:`tapwright.sfg.build.build` (df1 or
    df2t sections, before pipelining). Each section becomes
    :func:`lookahead_section` by ``M``, requantized when ``coeff_bits`` or
    ``coeff_frac`` is given. The sections used are recorded in
    ``graph["lookahead"]`` (stage index -> tuple of LookaheadSection).
    """
    if any(e["pipe"] for _, _, e in g.edges(data=True)):
        raise ValueError("apply look-ahead before pipelining")
    h = copy_graph(g)
    done = dict(h.graph.get("lookahead") or {})
    ids = _sos_stage_ids(h, stages)
    if not ids:
        raise ValueError("no SOS stage to look ahead")
    for s in ids:
        secs = _stage_sections(h.graph["stages"][s], M, coeff_bits, coeff_frac)
        nodes = stage_nodes(h, s)
        entry = next(v for v in nodes if h.nodes[v].get("role") == "entry")
        rnd = next(v for v in nodes if h.nodes[v].get("role") == "round")
        old = [v for v in nodes if h.nodes[v].get("section") is not None]
        if not old:
            raise ValueError(f"stage {s}: no biquad sections found")
        h.remove_nodes_from(old)
        last = lookahead_sos(h, entry, secs, stage=s, rounding=h.graph["rounding"])
        h.nodes[last]["exit"] = True
        connect(h, last, rnd, port=0)
        done[s] = secs
    h.graph["lookahead"] = done
    h.graph["transforms"] = tuple(h.graph.get("transforms", ())) + ("lookahead",)
    return propagate(h)


def lookahead_design(design: FixedDesign, M: int, *, coeff_bits: int | None = None,
                     coeff_frac: int | None = None, name: str = "filter"):
    """The direct-form graph of ``design`` with every SOS stage looked ahead by ``M``."""
    from ..build import build
    return lookahead(build(design, name=name, sos_form="df1"), M, coeff_bits=coeff_bits, coeff_frac=coeff_frac)


def design_sections(design: FixedDesign, M: int, *, coeff_bits: int | None = None,
                    coeff_frac: int | None = None) -> dict:
    """Stage index -> tuple of LookaheadSection, as :func:`lookahead` makes them."""
    return {i: _stage_sections(st, M, coeff_bits, coeff_frac) for i, st in enumerate(design.stages)
            if st.kind == "sos"}


# ------------------------------------------------------------------------------------------------
# bit-true reference: the difference equation, written from the integers (never reads a graph)


def _round(v: int, shift: int, rounding: str) -> int:
    if shift <= 0:
        return v << (-shift)
    if rounding == "truncate":
        return v >> shift
    half = 1 << (shift - 1)
    if rounding == "half_up":
        return (v + half) >> shift
    if rounding == "half_even":
        q = v >> shift
        r = v - (q << shift)
        return q + (1 if r > half or (r == half and q & 1) else 0)
    raise ValueError(f"unknown rounding {rounding!r}")


def reference_sections(sections, x, in_frac: int, rounding: str) -> list[int]:
    """Last section's state samples of a cascade of look-ahead sections, sample by sample."""
    cur = [int(v) for v in np.asarray(x).ravel()]
    f_in = in_frac
    for s in sections:
        cf, fy, M = s.coeff_frac, s.state.frac, s.M
        Fs = max(f_in, fy) + cf            # the exact sum's fraction
        sx, sy = Fs - f_in - cf, Fs - fy - cf
        shift = Fs - fy
        lo, hi = s.state.lo, s.state.hi
        b = [int(v) for v in s.b]
        aM, a2M = int(s.a[1]), int(s.a[2])
        n = len(cur)
        y = [0] * n
        for i in range(n):
            ff = 0
            for k, c in enumerate(b):
                if i - k >= 0:
                    ff += c * cur[i - k]
            fbk = (aM * y[i - M] if i - M >= 0 else 0) + (a2M * y[i - 2 * M] if i - 2 * M >= 0 else 0)
            v = _round((ff << sx) - (fbk << sy), shift, rounding)
            y[i] = lo if v < lo else hi if v > hi else v
        cur = y
        f_in = fy
    return cur


def reference_run(design: FixedDesign, x, sections: dict) -> np.ndarray:
    """Exact output of ``design`` with its SOS stages replaced by ``sections`` (stage -> sections).

    FIR and CIC stages run in :mod:`tapwright.fixed.reference`; a look-ahead
    stage runs :func:`reference_sections` and converts the last state to the
    stage output with the design's rounding and overflow (written out here
    too, sharing no rounding code with the interpreter).
    """
    from ...fixed import reference as ref
    v = np.asarray(x)
    f = design.in_fmt
    for i, st in enumerate(design.stages):
        if i in sections:
            y = reference_sections(sections[i], v, f.frac, design.rounding)
            sh = sections[i][-1].state.frac - st.out.frac
            lo, hi, span = st.out.lo, st.out.hi, 1 << st.out.bits
            out = []
            for a in y:
                a = _round(a, sh, design.rounding)
                if design.overflow == "saturate":
                    a = lo if a < lo else hi if a > hi else a
                elif design.overflow == "wrap":
                    a = (a - lo) % span + lo
                else:
                    raise ValueError(f"unknown overflow {design.overflow!r}")
                out.append(a)
            v = np.array(out, dtype=object)
        else:
            v = ref.run_stage(st, v, f, design.rounding, design.overflow)
        f = st.out
    v = np.asarray(v)
    if design.out_fmt.bits <= 63:
        return np.array([int(a) for a in v.ravel()], dtype=np.int64)
    return v
