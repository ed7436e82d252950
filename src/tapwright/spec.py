"""Spec files: TOML -> frozen :class:`Spec`, with precise errors.

Every user mistake raises :class:`SpecError`, which names the file, the key and
what is allowed. The command line turns it into exit status 2 with no
traceback. Warnings (legal but suspicious specs) are collected in
``Spec.warnings``.
"""
from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .fixed.formats import OVERFLOW_MODES, ROUNDING_MODES

FAMILIES = ("fir", "iir", "auto")
IIR_RESPONSES = ("butterworth", "chebyshev1", "chebyshev2", "elliptic")
FIR_METHODS = ("equiripple", "least_squares", "kaiser")
DEVICES = ("generic", "xc7", "ecp5", "ice40")
PHASES = ("linear", "any")
BUDGET_KEYS = ("dsp", "lut", "ff", "latency")
NAME_RE = re.compile(r"^[a-z][a-z0-9_]*$")
VERILOG_KEYWORDS = frozenset(
    "always and assign begin buf case casex casez cmos deassign default defparam disable edge else end "
    "endcase endfunction endmodule endprimitive endspecify endtable endtask event for force forever fork "
    "function highz0 highz1 if initial inout input integer join large macromodule medium module nand "
    "negedge nmos nor not notif0 notif1 or output parameter pmos posedge primitive pull0 pull1 pulldown "
    "pullup rcmos real realtime reg release repeat rnmos rpmos rtran rtranif0 rtranif1 scalared small "
    "specify specparam strong0 strong1 supply0 supply1 table task time tran tranif0 tranif1 tri tri0 tri1 "
    "triand trior trireg vectored wait wand weak0 weak1 while wire wor xnor xor generate endgenerate "
    "genvar localparam signed unsigned automatic".split()
)

_UNIT = {"": 1.0, "hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_FREQ_RE = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([kKmMgG]?[hH][zZ])?\s*$")


class SpecError(Exception):
    """A spec the tool cannot accept.

    Parameters
    ----------
    file : str
        The spec file's path.
    key : str
        Dotted key path (``band[2].edges``, ``target.device``) or ``""`` for the file.
    problem : str
        What is wrong.
    allowed : str
        What would be accepted.
    """

    def __init__(self, file: str, key: str, problem: str, allowed: str = ""):
        self.file, self.key, self.problem, self.allowed = str(file), key, problem, allowed
        super().__init__(str(self))

    def __str__(self) -> str:
        where = f"{self.file}: " + (f"key '{self.key}': " if self.key else "")
        msg = where + self.problem
        if self.allowed:
            msg += f" (allowed: {self.allowed})"
        return msg


@dataclass(frozen=True)
class Band:
    """One band of the magnitude requirement.

    ``kind`` is ``"pass"`` (constant non-zero gain, ``ripple_db`` peak to peak),
    ``"stop"`` (gain 0, ``atten_db`` below the pass-band gain) or ``"shaped"``
    (gain linear from ``gain[0]`` to ``gain[1]`` across the band, ``tolerance``
    absolute).
    """

    lo: float
    hi: float
    gain: tuple[float, float]
    kind: str
    ripple_db: float | None = None
    atten_db: float | None = None
    tolerance: float | None = None

    def desired(self, f):
        """Desired gain at frequencies ``f`` (Hz) inside the band."""
        g0, g1 = self.gain
        if self.hi == self.lo:
            return g0 + 0.0 * f
        return g0 + (g1 - g0) * (f - self.lo) / (self.hi - self.lo)

    def deviation(self, ref_gain: float = 1.0) -> float:
        """Allowed absolute deviation from the desired gain.

        Pass band: ripple_db is peak to peak around the gain g, so the band is
        g*[(1-d), (1+d)] with 20*log10((1+d)/(1-d)) = ripple_db. Stop band:
        d = ref_gain * 10**(-atten_db/20).
        """
        if self.kind == "pass":
            r = 10 ** (self.ripple_db / 20.0)
            return abs(self.gain[0]) * (r - 1) / (r + 1)
        if self.kind == "stop":
            return ref_gain * 10 ** (-self.atten_db / 20.0)
        return float(self.tolerance)


@dataclass(frozen=True)
class Budget:
    dsp: int | None = None
    lut: int | None = None
    ff: int | None = None
    latency: int | None = None

    def as_dict(self) -> dict:
        return {k: getattr(self, k) for k in BUDGET_KEYS if getattr(self, k) is not None}


@dataclass(frozen=True)
class Spec:
    name: str
    sample_rate: float
    bands: tuple[Band, ...]
    in_bits: int
    in_frac: int
    decimation: int = 1
    family: str = "auto"
    iir_response: str = "elliptic"
    fir_method: str = "equiripple"
    phase: str = "any"
    coeff_bits: int | None = None
    out_bits: int | None = None
    out_frac: int | None = None
    rounding: str = "half_up"
    overflow: str = "saturate"
    device: str = "generic"
    clock: float = 0.0
    budget: Budget = field(default_factory=Budget)
    path: str = "<memory>"
    warnings: tuple[str, ...] = ()

    @property
    def nyquist(self) -> float:
        return self.sample_rate / 2.0

    @property
    def output_rate(self) -> float:
        return self.sample_rate / self.decimation

    @property
    def cycles_per_sample(self) -> int:
        """Whole clock cycles available per input sample (at least 1)."""
        return max(1, int(math.floor(self.clock / self.sample_rate + 1e-9)))

    def pass_bands(self):
        return [b for b in self.bands if b.kind == "pass"]

    def stop_bands(self):
        return [b for b in self.bands if b.kind == "stop"]

    def as_dict(self) -> dict:
        d = {
            "name": self.name,
            "sample_rate": self.sample_rate,
            "decimation": self.decimation,
            "family": self.family,
            "bands": [
                {k: v for k, v in {
                    "edges": [b.lo, b.hi],
                    "gain": list(b.gain) if b.kind == "shaped" else b.gain[0],
                    "kind": b.kind,
                    "ripple_db": b.ripple_db,
                    "atten_db": b.atten_db,
                    "tolerance": b.tolerance,
                }.items() if v is not None}
                for b in self.bands
            ],
            "input": {"bits": self.in_bits, "frac": self.in_frac},
            "output": {"bits": self.out_bits if self.out_bits is not None else "auto",
                       "rounding": self.rounding, "overflow": self.overflow},
            "target": {"device": self.device, "clock": self.clock, "budget": self.budget.as_dict()},
        }
        if self.family != "fir":
            d["iir_response"] = self.iir_response
        if self.family != "iir":
            d["fir_method"] = self.fir_method
        d["phase"] = self.phase
        return d


# --------------------------------------------------------------------------------------------
# parsing helpers


class _Reader:
    def __init__(self, path: str):
        self.path = path
        self.warnings: list[str] = []

    def err(self, key, problem, allowed=""):
        return SpecError(self.path, key, problem, allowed)

    def check_keys(self, table: dict, allowed: tuple[str, ...], prefix: str):
        for k in table:
            if k not in allowed:
                raise self.err(f"{prefix}{k}", f"unknown key '{k}'", ", ".join(allowed))

    def number(self, value, key, *, allow_unit=False, allowed="a number"):
        if isinstance(value, bool):
            raise self.err(key, f"expected a number, got {value!r}", allowed)
        if isinstance(value, (int, float)):
            v = float(value)
        elif allow_unit and isinstance(value, str):
            m = _FREQ_RE.match(value)
            if not m:
                raise self.err(key, f"cannot read {value!r} as a frequency", 'a number in Hz or a string like "4 MHz"')
            v = float(m.group(1)) * _UNIT[(m.group(2) or "").lower()]
        else:
            raise self.err(key, f"expected a number, got {type(value).__name__} {value!r}", allowed)
        if not math.isfinite(v):
            raise self.err(key, f"{value!r} is not finite", allowed)
        return v

    def integer(self, value, key, lo=None, hi=None):
        allowed = "an integer" + (f" from {lo}" if lo is not None else "") + (f" to {hi}" if hi is not None else "")
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and value.is_integer():
                value = int(value)
            else:
                raise self.err(key, f"expected an integer, got {value!r}", allowed)
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise self.err(key, f"{value} is out of range", allowed)
        return int(value)

    def choice(self, value, key, options):
        if not isinstance(value, str) or value not in options:
            raise self.err(key, f"{value!r} is not a known value", " | ".join(f'"{o}"' for o in options))
        return value

    def table(self, value, key):
        if not isinstance(value, dict):
            raise self.err(key, f"expected a table, got {type(value).__name__}", f"[{key}] with keys")
        return value


TOP_KEYS = ("name", "sample_rate", "decimation", "family", "iir_response", "fir_method", "phase",
            "coeff_bits", "band", "input", "output", "target")
BAND_KEYS = ("edges", "gain", "ripple_db", "atten_db", "tolerance")


def parse_spec_text(text: str, path: str = "<memory>") -> Spec:
    """Parse spec TOML text; raise :class:`SpecError` on any problem."""
    r = _Reader(path)
    if not text.strip():
        raise r.err("", "the file is empty", "a TOML spec with name, sample_rate, [[band]], [input], [target]")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise r.err("", f"not valid TOML: {e}", "TOML syntax (https://toml.io)") from None
    return _from_dict(doc, r)


def load_spec(path) -> Spec:
    """Read and validate a spec file."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise SpecError(str(path), "", "file not found", "a readable TOML spec file") from None
    except IsADirectoryError:
        raise SpecError(str(path), "", "is a directory", "a TOML spec file") from None
    except OSError as e:
        raise SpecError(str(path), "", f"cannot read: {e.strerror}", "a readable TOML spec file") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise SpecError(str(path), "", "not UTF-8 text", "a UTF-8 TOML file") from None
    return parse_spec_text(text, str(path))


def _from_dict(doc: dict, r: _Reader) -> Spec:
    r.check_keys(doc, TOP_KEYS, "")
    for k in ("name", "sample_rate", "band", "input", "target"):
        if k not in doc:
            raise r.err(k, "missing required key", "see the spec format in the README")

    name = doc["name"]
    if not isinstance(name, str) or not NAME_RE.match(name) or len(name) > 64:
        raise r.err("name", f"{name!r} is not a valid module name", "[a-z][a-z0-9_]*, at most 64 characters")
    if name in VERILOG_KEYWORDS:
        raise r.err("name", f"{name!r} is a Verilog keyword", "any other [a-z][a-z0-9_]* name")

    fs = r.number(doc["sample_rate"], "sample_rate", allow_unit=True)
    if fs <= 0:
        raise r.err("sample_rate", f"{fs} must be positive", "a sample rate > 0 Hz")
    nyq = fs / 2

    dec = r.integer(doc.get("decimation", 1), "decimation", lo=1, hi=4096)
    family = r.choice(doc.get("family", "auto"), "family", FAMILIES)
    iir_resp = r.choice(doc.get("iir_response", "elliptic"), "iir_response", IIR_RESPONSES)
    fir_method = r.choice(doc.get("fir_method", "equiripple"), "fir_method", FIR_METHODS)
    phase = r.choice(doc.get("phase", "any"), "phase", PHASES)
    cb = doc.get("coeff_bits", "auto")
    coeff_bits = None if cb == "auto" else r.integer(cb, "coeff_bits", lo=4, hi=32)

    # ---- bands
    bands_raw = doc["band"]
    if not isinstance(bands_raw, list) or not bands_raw:
        raise r.err("band", "expected one or more [[band]] tables", "[[band]] with edges, gain and ripple_db/atten_db/tolerance")
    bands: list[Band] = []
    for i, b in enumerate(bands_raw):
        key = f"band[{i + 1}]"
        b = r.table(b, key)
        r.check_keys(b, BAND_KEYS, key + ".")
        if "edges" not in b:
            raise r.err(key + ".edges", "missing", "edges = [lo, hi] in Hz")
        e = b["edges"]
        if not isinstance(e, list) or len(e) != 2:
            raise r.err(key + ".edges", f"expected two edges, got {e!r}", "edges = [lo, hi] in Hz")
        lo = r.number(e[0], key + ".edges", allow_unit=True)
        hi = r.number(e[1], key + ".edges", allow_unit=True)
        if not (0 <= lo <= nyq and 0 <= hi <= nyq):
            raise r.err(key + ".edges", f"[{lo:g}, {hi:g}] Hz leaves [0, sample_rate/2] = [0, {nyq:g}]",
                        f"edges between 0 and {nyq:g} Hz")
        if not lo < hi:
            raise r.err(key + ".edges", f"lower edge {lo:g} is not below upper edge {hi:g}", "lo < hi")
        if "gain" not in b:
            raise r.err(key + ".gain", "missing", "gain = 1.0 (pass), 0.0 (stop) or [g_lo, g_hi] (shaped)")
        g = b["gain"]
        if isinstance(g, list):
            if len(g) != 2:
                raise r.err(key + ".gain", f"a shaped band needs two gains, got {g!r}", "gain = [g_lo, g_hi]")
            g0 = r.number(g[0], key + ".gain")
            g1 = r.number(g[1], key + ".gain")
            if "tolerance" not in b:
                raise r.err(key + ".tolerance", "a shaped band (gain list) needs an absolute tolerance", "tolerance > 0")
            for k in ("ripple_db", "atten_db"):
                if k in b:
                    raise r.err(f"{key}.{k}", "not used by a shaped band", "tolerance")
            tol = r.number(b["tolerance"], key + ".tolerance")
            if tol <= 0:
                raise r.err(key + ".tolerance", f"{tol} must be positive", "tolerance > 0")
            bands.append(Band(lo, hi, (g0, g1), "shaped", tolerance=tol))
            continue
        g0 = r.number(g, key + ".gain", allowed="a number or [g_lo, g_hi]")
        if "tolerance" in b:
            raise r.err(key + ".tolerance", "only shaped bands (gain = [g_lo, g_hi]) take a tolerance",
                        "ripple_db for a pass band, atten_db for a stop band")
        if g0 == 0:
            if "atten_db" not in b:
                raise r.err(key + ".atten_db", "a stop band (gain 0) needs atten_db", "atten_db > 0")
            if "ripple_db" in b:
                raise r.err(key + ".ripple_db", "a stop band takes atten_db, not ripple_db", "atten_db")
            a = r.number(b["atten_db"], key + ".atten_db")
            if not 0 < a <= 200:
                raise r.err(key + ".atten_db", f"{a} is out of range", "0 < atten_db <= 200")
            bands.append(Band(lo, hi, (0.0, 0.0), "stop", atten_db=a))
        else:
            if "ripple_db" not in b:
                raise r.err(key + ".ripple_db", "a pass band (gain != 0) needs ripple_db", "ripple_db > 0")
            if "atten_db" in b:
                raise r.err(key + ".atten_db", "a pass band takes ripple_db, not atten_db", "ripple_db")
            rp = r.number(b["ripple_db"], key + ".ripple_db")
            if not 0 < rp <= 20:
                raise r.err(key + ".ripple_db", f"{rp} is out of range", "0 < ripple_db <= 20")
            bands.append(Band(lo, hi, (g0, g0), "pass", ripple_db=rp))
    order = sorted(range(len(bands)), key=lambda i: bands[i].lo)
    if order != list(range(len(bands))):
        raise r.err("band", "bands are not in ascending order of frequency", "[[band]] tables listed from low to high frequency")
    for i in range(1, len(bands)):
        if bands[i].lo < bands[i - 1].hi:
            raise r.err(f"band[{i + 1}].edges",
                        f"overlaps band[{i}] ([{bands[i - 1].lo:g}, {bands[i - 1].hi:g}] Hz)",
                        "non-overlapping bands")
    if not any(b.kind == "pass" or (b.kind == "shaped" and max(map(abs, b.gain)) > 0) for b in bands):
        raise r.err("band", "no band with non-zero gain", "at least one pass or shaped band")

    # ---- input
    inp = r.table(doc["input"], "input")
    r.check_keys(inp, ("bits", "frac"), "input.")
    if "bits" not in inp:
        raise r.err("input.bits", "missing", "an integer from 2 to 32")
    in_bits = r.integer(inp["bits"], "input.bits", 2, 32)
    in_frac = r.integer(inp.get("frac", in_bits - 1), "input.frac", 0, in_bits)

    # ---- output
    out = r.table(doc.get("output", {}), "output")
    r.check_keys(out, ("bits", "frac", "rounding", "overflow"), "output.")
    ob = out.get("bits", "auto")
    out_bits = None if ob == "auto" else r.integer(ob, "output.bits", 2, 64)
    of = out.get("frac", "auto")
    out_frac = None if of == "auto" else r.integer(of, "output.frac", 0, 64)
    if out_frac is not None and out_bits is None:
        raise r.err("output.frac", "output.frac needs output.bits", "set output.bits too, or leave both auto")
    rounding = r.choice(out.get("rounding", "half_up"), "output.rounding", ROUNDING_MODES)
    ovf = r.choice(out.get("overflow", "saturate"), "output.overflow", OVERFLOW_MODES)

    # ---- target
    tgt = r.table(doc["target"], "target")
    r.check_keys(tgt, ("device", "clock", "budget"), "target.")
    device = r.choice(tgt.get("device", "generic"), "target.device", DEVICES)
    if "clock" not in tgt:
        raise r.err("target.clock", "missing", "the fabric clock in Hz, >= sample_rate")
    clock = r.number(tgt["clock"], "target.clock", allow_unit=True)
    if clock < fs * (1 - 1e-12):
        raise r.err("target.clock", f"{clock:g} Hz is below the sample rate {fs:g} Hz",
                    "clock >= sample_rate (one sample per cycle at most)")
    bud = r.table(tgt.get("budget", {}), "target.budget")
    r.check_keys(bud, BUDGET_KEYS, "target.budget.")
    budget = Budget(**{k: r.integer(bud[k], f"target.budget.{k}", 0, 10**8) for k in bud})

    if dec > 1:
        _check_aliasing(bands, fs, dec, r)

    return Spec(
        name=name, sample_rate=fs, bands=tuple(bands), in_bits=in_bits, in_frac=in_frac,
        decimation=dec, family=family, iir_response=iir_resp, fir_method=fir_method, phase=phase,
        coeff_bits=coeff_bits, out_bits=out_bits, out_frac=out_frac, rounding=rounding, overflow=ovf,
        device=device, clock=clock, budget=budget, path=r.path, warnings=tuple(r.warnings),
    )


def _check_aliasing(bands, fs, dec, r: _Reader):
    """Warn when a region that aliases into the output pass band is not a stop band."""
    fo = fs / dec
    passes = [b for b in bands if b.kind != "stop"]
    stops = [(b.lo, b.hi) for b in bands if b.kind == "stop"]
    if passes and max(b.hi for b in passes) > fo / 2:
        r.warnings.append(
            f"{r.path}: a pass band reaches {max(b.hi for b in passes):g} Hz, above the output Nyquist "
            f"frequency {fo / 2:g} Hz of decimation by {dec}: it will alias")
    fp = max((b.hi for b in passes), default=0.0)
    # every image k*fo +- [0, fp] inside [0, fs/2] must be covered by stop bands
    for k in range(1, dec // 2 + 1):
        for lo, hi in ((k * fo - fp, k * fo), (k * fo, k * fo + fp)):
            lo, hi = max(lo, 0.0), min(hi, fs / 2)
            if hi <= lo:
                continue
            uncovered = _uncovered(lo, hi, stops)
            if uncovered > 1e-9 * fs:
                r.warnings.append(
                    f"{r.path}: [{lo:g}, {hi:g}] Hz aliases into the output pass band [0, {fp:g}] Hz "
                    f"after decimation by {dec} but is not fully inside a stop band "
                    f"({uncovered:g} Hz uncovered)")
                return


def _uncovered(lo, hi, stops) -> float:
    covered = 0.0
    for s0, s1 in stops:
        a, b = max(lo, s0), min(hi, s1)
        if b > a:
            covered += b - a
    return (hi - lo) - covered
