"""design.json -> :class:`~tapwright.fixed.stages.FixedDesign` (the inverse of the stages' ``as_dict``).

``check`` recomputes the expected outputs from the sheet alone, so a design
folder can be verified without the spec that produced it.
"""
from __future__ import annotations

from ..fixed.formats import OVERFLOW_MODES, ROUNDING_MODES, Fmt
from ..fixed.stages import CicStage, FirStage, FixedDesign, Section, SosStage


class SheetError(ValueError):
    """design.json is missing a field or holds an impossible value."""


def _fmt(d, where) -> Fmt:
    try:
        return Fmt(int(d["bits"]), int(d["frac"]))
    except (KeyError, TypeError, ValueError) as e:
        raise SheetError(f"{where}: expected {{'bits': int, 'frac': int}}, got {d!r}") from e


def _get(d, key, where):
    if key not in d:
        raise SheetError(f"{where}: missing key {key!r}")
    return d[key]


def stage_from_json(s: dict, in_fmt: Fmt, where: str):
    kind = _get(s, "kind", where)
    out = _fmt(_get(s, "output", where), f"{where}.output")
    if kind == "fir":
        return FirStage(coeffs=tuple(int(c) for c in _get(s, "coeffs", where)),
                        coeff_frac=int(_get(s, "coeff_frac", where)), out=out,
                        decimation=int(s.get("decimation", 1)), phase=int(s.get("phase", 0)))
    if kind == "cic":
        order = int(_get(s, "order", where))
        drop = tuple(int(v) for v in _get(s, "drop", where))
        if len(drop) != 2 * order:
            raise SheetError(f"{where}.drop: expected {2 * order} entries, got {len(drop)}")
        return CicStage(order=order, decimation=int(_get(s, "decimation", where)),
                        diff_delay=int(_get(s, "diff_delay", where)), drop=drop, out=out, in_fmt=in_fmt,
                        phase=int(s.get("phase", 0)))
    if kind == "sos":
        secs = []
        for i, sec in enumerate(_get(s, "sections", where)):
            w = f"{where}.sections[{i}]"
            b = tuple(int(v) for v in _get(sec, "b", w))
            a = tuple(int(v) for v in _get(sec, "a", w))
            cf = int(_get(sec, "coeff_frac", w))
            if len(b) != 3 or len(a) != 3 or a[0] != 1 << cf:
                raise SheetError(f"{w}: b and a need 3 integers and a[0] == 2**coeff_frac")
            state = Fmt(int(_get(sec, "state_bits", w)), int(sec.get("state_frac", _get(s, "output", where)["frac"])))
            secs.append(Section(b=b, a=a, coeff_frac=cf, state=state))
        return SosStage(sections=tuple(secs), out=out, form=s.get("form", "df1"),
                        noise_bound_lsb=float(s.get("noise_bound_lsb", 0.0)))
    raise SheetError(f"{where}.kind: {kind!r} (allowed: fir, cic, sos)")


def design_from_json(d: dict) -> FixedDesign:
    """Rebuild the quantized design from a design.json dictionary."""
    in_fmt = _fmt(_get(d, "input", "design.json"), "design.json: input")
    rounding = _get(d, "rounding", "design.json")
    ovf = _get(d, "overflow", "design.json")
    if rounding not in ROUNDING_MODES:
        raise SheetError(f"design.json: rounding {rounding!r} (allowed: {', '.join(ROUNDING_MODES)})")
    if ovf not in OVERFLOW_MODES:
        raise SheetError(f"design.json: overflow {ovf!r} (allowed: {', '.join(OVERFLOW_MODES)})")
    stages, f = [], in_fmt
    raw = _get(d, "stages", "design.json")
    if not isinstance(raw, list) or not raw:
        raise SheetError("design.json: stages must be a non-empty list")
    for i, s in enumerate(raw):
        st = stage_from_json(s, f, f"design.json: stages[{i}]")
        stages.append(st)
        f = st.out
    return FixedDesign(stages=tuple(stages), in_fmt=in_fmt, rounding=rounding, overflow=ovf)
