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
from decimal import Decimal
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
NAME_RE = re.compile(r"^[a-z][a-z0-9_]*\Z")
VERILOG_KEYWORDS = frozenset(
    "always and assign begin buf case casex casez cmos deassign default defparam disable edge else end "
    "endcase endfunction endmodule endprimitive endspecify endtable endtask event for force forever fork "
    "function highz0 highz1 if initial inout input integer join large macromodule medium module nand "
    "negedge nmos nor not notif0 notif1 or output parameter pmos posedge primitive pull0 pull1 pulldown "
    "pullup rcmos real realtime reg release repeat rnmos rpmos rtran rtranif0 rtranif1 scalared small "
    "specify specparam strong0 strong1 supply0 supply1 table task time tran tranif0 tranif1 tri tri0 tri1 "
    "triand trior trireg vectored wait wand weak0 weak1 while wire wor xnor xor generate endgenerate "
    "genvar localparam signed unsigned automatic"
    # SystemVerilog keywords that commonly trip mixed-language tool flows
    " logic bit byte int shortint longint interface endinterface package endpackage class endclass"
    " typedef enum struct union always_ff always_comb always_latch".split()
)

_UNIT = {"": 1, "hz": 1, "khz": 10**3, "mhz": 10**6, "ghz": 10**9}
_FREQ_RE = re.compile(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([kKmMgG]?[hH][zZ])?\s*")
_BARE_KEY_RE = re.compile(r"[A-Za-z0-9_-]+")

#: largest frequency (sample rate, clock, band edge) the parser accepts, Hz
MAX_FREQ = 1e11
#: largest |gain| a band may ask for
MAX_GAIN = 1e6
#: most [[band]] tables in one spec
MAX_BANDS = 64
#: largest decimation factor
MAX_DECIMATION = 4096


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


def _show(value: Any, limit: int = 60) -> str:
    """A short, printable rendering of a user value for error messages."""
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) >= 10**40:
        return f"an integer of about {value.bit_length() * 0.30103:.0f} digits"
    try:
        s = repr(value)
    except Exception:  # noqa: BLE001 - a message helper must never fail
        s = f"<{type(value).__name__}>"
    if len(s) > limit:
        s = s[: limit - 3] + "..."
    return s


def _type_name(value: Any) -> str:
    names = {bool: "boolean", int: "integer", float: "float", str: "string", list: "array", dict: "table"}
    for t, n in names.items():
        if type(value) is t:
            return n
    return type(value).__name__  # datetime, date, time


def _key_name(k: str) -> str:
    """A TOML key as the user would write it (quoted when it is not a bare key)."""
    if _BARE_KEY_RE.fullmatch(k):
        return k
    return '"' + k.encode("unicode_escape").decode("ascii").replace('"', '\\"') + '"'


def _fmt_hz(v: float) -> str:
    """A frequency for messages: ``49.152 MHz``, ``750 kHz``, ``0 Hz``."""
    a = abs(v)
    for scale, unit in ((1e9, "GHz"), (1e6, "MHz"), (1e3, "kHz")):
        if a >= scale:
            return f"{v / scale:.9g} {unit}"
    return f"{v:.9g} Hz"


class _Reader:
    def __init__(self, path: str):
        self.path = path
        self.warnings: list[str] = []

    def err(self, key, problem, allowed=""):
        return SpecError(self.path, key, problem, allowed)

    def check_keys(self, table: dict, allowed: tuple[str, ...], prefix: str):
        for k in table:
            if k not in allowed:
                name = _key_name(k)
                raise self.err(f"{prefix}{name}", f"unknown key '{name}'", ", ".join(allowed))

    def require(self, table: dict, key: str, prefix: str, allowed: str):
        if key not in table:
            raise self.err(prefix + key, "missing required key", allowed)
        return table[key]

    def number(self, value, key, *, allow_unit=False, allowed=None):
        if allowed is None:
            allowed = 'a number in Hz or a string like "4 MHz"' if allow_unit else "a number"
        if isinstance(value, bool):
            raise self.err(key, f"expected a number, got the boolean {_show(value)}", allowed)
        if isinstance(value, int):
            if abs(value) > 10**300:
                raise self.err(key, f"{_show(value)} is too large", allowed)
            v = float(value)
        elif isinstance(value, float):
            v = value
        elif allow_unit and isinstance(value, str):
            m = _FREQ_RE.fullmatch(value)
            if not m:
                raise self.err(key, f"cannot read {_show(value)} as a frequency", allowed)
            try:
                v = float(Decimal(m.group(1)) * _UNIT[(m.group(2) or "").lower()])
            except (ArithmeticError, ValueError):
                raise self.err(key, f"{_show(value)} is out of range", allowed) from None
        else:
            raise self.err(key, f"expected a number, got {_type_name(value)} {_show(value)}", allowed)
        if not math.isfinite(v):
            raise self.err(key, f"{_show(value)} is not a finite number", allowed)
        return v

    def integer(self, value, key, lo=None, hi=None, extra=""):
        allowed = "an integer" + (f" from {lo}" if lo is not None else "") + (f" to {hi}" if hi is not None else "")
        allowed += extra
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and math.isfinite(value) and value.is_integer():
                value = int(value)
            else:
                raise self.err(key, f"expected an integer, got {_type_name(value)} {_show(value)}", allowed)
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise self.err(key, f"{_show(value)} is out of range", allowed)
        return int(value)

    def choice(self, value, key, options):
        allowed = " | ".join(f'"{o}"' for o in options)
        if not isinstance(value, str):
            raise self.err(key, f"expected a string, got {_type_name(value)} {_show(value)}", allowed)
        if value not in options:
            raise self.err(key, f"{_show(value)} is not a known value", allowed)
        return value

    def table(self, value, key, allowed):
        if not isinstance(value, dict):
            raise self.err(key, f"expected a table, got {_type_name(value)} {_show(value)}", allowed)
        return value


TOP_KEYS = ("name", "sample_rate", "decimation", "family", "iir_response", "fir_method", "phase",
            "coeff_bits", "band", "input", "output", "target")
BAND_KEYS = ("edges", "gain", "ripple_db", "atten_db", "tolerance")
INPUT_KEYS = ("bits", "frac")
OUTPUT_KEYS = ("bits", "frac", "rounding", "overflow")
TARGET_KEYS = ("device", "clock", "budget")

_EMPTY_HINT = "a TOML spec with name, sample_rate, [[band]], [input] and [target]"


def parse_spec_text(text: str, path: str = "<memory>") -> Spec:
    """Parse spec TOML text; raise :class:`SpecError` on any problem.

    No other exception escapes, whatever the text.
    """
    r = _Reader(str(path))
    if isinstance(text, (bytes, bytearray)):
        try:
            text = bytes(text).decode("utf-8")
        except UnicodeDecodeError:
            raise r.err("", "not UTF-8 text", "a UTF-8 TOML file") from None
    if not isinstance(text, str):
        raise r.err("", f"expected text, got {type(text).__name__}", "TOML text")
    if not text.strip():
        raise r.err("", "the file is empty", _EMPTY_HINT)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise r.err("", f"not valid TOML: {e}", "TOML syntax (https://toml.io)") from None
    except (ValueError, RecursionError, OverflowError, MemoryError) as e:
        # tomllib lets a few of these through: integers beyond Python's digit limit, very deep nesting
        reason = "nested too deeply" if isinstance(e, RecursionError) else str(e).split(";")[0][:120]
        raise r.err("", f"not readable as TOML: {reason}", "TOML syntax (https://toml.io)") from None
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
    except PermissionError:
        raise SpecError(str(path), "", "permission denied", "a readable TOML spec file") from None
    except (OSError, ValueError) as e:
        reason = getattr(e, "strerror", None) or str(e)
        raise SpecError(str(path), "", f"cannot read: {reason}", "a readable TOML spec file") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise SpecError(str(path), "", "not UTF-8 text", "a UTF-8 TOML file") from None
    return parse_spec_text(text, str(path))


def _from_dict(doc: dict, r: _Reader) -> Spec:
    r.check_keys(doc, TOP_KEYS, "")
    name = r.require(doc, "name", "", "a module name [a-z][a-z0-9_]*")
    if not isinstance(name, str):
        raise r.err("name", f"expected a string, got {_type_name(name)} {_show(name)}",
                    "a string [a-z][a-z0-9_]*, at most 64 characters")
    if not NAME_RE.match(name) or len(name) > 64:
        raise r.err("name", f"{_show(name)} is not a valid Verilog module name",
                    "[a-z][a-z0-9_]*, at most 64 characters")
    if name in VERILOG_KEYWORDS:
        raise r.err("name", f"{_show(name)} is a Verilog keyword", "any other [a-z][a-z0-9_]* name")

    fs = r.number(r.require(doc, "sample_rate", "", 'the input sample rate in Hz, e.g. 98.304e6 or "98.304 MHz"'),
                  "sample_rate", allow_unit=True)
    if not 0 < fs <= MAX_FREQ:
        raise r.err("sample_rate", f"{_fmt_hz(fs)} is out of range", f"a sample rate > 0 and <= {_fmt_hz(MAX_FREQ)}")

    dec = r.integer(doc.get("decimation", 1), "decimation", lo=1, hi=MAX_DECIMATION)
    family = r.choice(doc.get("family", "auto"), "family", FAMILIES)
    iir_resp = r.choice(doc.get("iir_response", "elliptic"), "iir_response", IIR_RESPONSES)
    fir_method = r.choice(doc.get("fir_method", "equiripple"), "fir_method", FIR_METHODS)
    phase = r.choice(doc.get("phase", "any"), "phase", PHASES)
    cb = doc.get("coeff_bits", "auto")
    coeff_bits = None if cb == "auto" else r.integer(cb, "coeff_bits", lo=4, hi=32, extra=', or "auto"')

    bands = _bands(r.require(doc, "band", "", "one or more [[band]] tables"), fs, r)
    in_bits, in_frac = _input(r.require(doc, "input", "", "[input] with bits (2..32) and frac"), r)
    out_bits, out_frac, rounding, ovf = _output(doc.get("output", {}), r)
    device, clock, budget = _target(r.require(doc, "target", "", "[target] with device and clock"), fs, r)

    if dec > 1:
        _check_aliasing(bands, fs, dec, r)

    return Spec(
        name=name, sample_rate=fs, bands=tuple(bands), in_bits=in_bits, in_frac=in_frac,
        decimation=dec, family=family, iir_response=iir_resp, fir_method=fir_method, phase=phase,
        coeff_bits=coeff_bits, out_bits=out_bits, out_frac=out_frac, rounding=rounding, overflow=ovf,
        device=device, clock=clock, budget=budget, path=r.path, warnings=tuple(r.warnings),
    )


_BAND_HINT = "[[band]] tables with edges, gain and ripple_db (pass) / atten_db (stop) / tolerance (shaped)"


def _bands(bands_raw, fs: float, r: _Reader) -> list[Band]:
    nyq = fs / 2
    if isinstance(bands_raw, dict):
        raise r.err("band", "is a single table [band]; bands are an array of tables", "[[band]] (double brackets)")
    if not isinstance(bands_raw, list):
        raise r.err("band", f"expected an array of tables, got {_type_name(bands_raw)} {_show(bands_raw)}", _BAND_HINT)
    if not bands_raw:
        raise r.err("band", "no bands given", _BAND_HINT)
    if len(bands_raw) > MAX_BANDS:
        raise r.err("band", f"{len(bands_raw)} bands is too many", f"at most {MAX_BANDS} [[band]] tables")
    bands: list[Band] = []
    for i, b in enumerate(bands_raw):
        bands.append(_band(b, f"band[{i + 1}]", nyq, r))

    for i in range(1, len(bands)):
        prev, cur = bands[i - 1], bands[i]
        key = f"band[{i + 1}].edges"
        if cur.lo < prev.lo:
            raise r.err(key, f"[{_fmt_hz(cur.lo)}, {_fmt_hz(cur.hi)}] starts below band[{i}] "
                        f"([{_fmt_hz(prev.lo)}, {_fmt_hz(prev.hi)}]): bands are not in ascending order",
                        "[[band]] tables listed from low to high frequency")
        if cur.lo < prev.hi:
            raise r.err(key, f"[{_fmt_hz(cur.lo)}, {_fmt_hz(cur.hi)}] overlaps band[{i}] "
                        f"([{_fmt_hz(prev.lo)}, {_fmt_hz(prev.hi)}])",
                        f"a lower edge >= {_fmt_hz(prev.hi)} (non-overlapping bands)")

    if not any(b.kind == "pass" or (b.kind == "shaped" and max(map(abs, b.gain)) > 0) for b in bands):
        raise r.err("band", "no band with non-zero gain", "at least one pass band (gain != 0) or shaped band")

    # touching bands whose gains jump: no continuous response can do that
    ref = max((max(abs(g) for g in b.gain) for b in bands if b.kind != "stop"), default=1.0)
    for i in range(1, len(bands)):
        prev, cur = bands[i - 1], bands[i]
        if cur.lo != prev.hi:
            continue
        ga, gb = float(prev.desired(prev.hi)), float(cur.desired(cur.lo))
        if abs(ga - gb) > prev.deviation(ref) + cur.deviation(ref):
            raise r.err(f"band[{i + 1}].edges",
                        f"touches band[{i}] at {_fmt_hz(cur.lo)} with no transition band, "
                        f"but the gain jumps from {ga:g} to {gb:g} there",
                        f"a lower edge > {_fmt_hz(prev.hi)} (leave a transition band between bands)")
    return bands


def _band(b, key: str, nyq: float, r: _Reader) -> Band:
    b = r.table(b, key, _BAND_HINT)
    r.check_keys(b, BAND_KEYS, key + ".")
    ek = key + ".edges"
    e = r.require(b, "edges", key + ".", "edges = [lo, hi] in Hz")
    if not isinstance(e, list) or len(e) != 2:
        raise r.err(ek, f"expected two edges, got {_type_name(e)} {_show(e)}", "edges = [lo, hi] in Hz")
    lo = r.number(e[0], ek, allow_unit=True)
    hi = r.number(e[1], ek, allow_unit=True)
    # forgive rounding in "49.152 MHz"-style edges at 0 and Nyquist
    slack = 1e-12 * nyq
    if -slack <= lo < 0:
        lo = 0.0
    if nyq < hi <= nyq + slack:
        hi = nyq
    if nyq < lo <= nyq + slack:
        lo = nyq
    if not (0 <= lo <= nyq and 0 <= hi <= nyq):
        raise r.err(ek, f"[{_fmt_hz(lo)}, {_fmt_hz(hi)}] leaves [0, sample_rate/2] = [0, {_fmt_hz(nyq)}]",
                    f"edges between 0 and {_fmt_hz(nyq)}")
    if not lo < hi:
        raise r.err(ek, f"lower edge {_fmt_hz(lo)} is not below upper edge {_fmt_hz(hi)}", "lo < hi")

    gk = key + ".gain"
    g = r.require(b, "gain", key + ".", "gain = 1.0 (pass), 0.0 (stop) or [g_lo, g_hi] (shaped)")
    gain_allowed = f"a number or [g_lo, g_hi] with |gain| <= {MAX_GAIN:g}"
    if isinstance(g, list):
        if len(g) != 2:
            raise r.err(gk, f"a shaped band needs two gains, got {_show(g)}", "gain = [g_lo, g_hi]")
        g0 = r.number(g[0], gk, allowed=gain_allowed)
        g1 = r.number(g[1], gk, allowed=gain_allowed)
        if max(abs(g0), abs(g1)) > MAX_GAIN:
            raise r.err(gk, f"{_show(g)} is out of range", gain_allowed)
        for k in ("ripple_db", "atten_db"):
            if k in b:
                raise r.err(f"{key}.{k}", "not used by a shaped band (gain = [g_lo, g_hi])", "tolerance")
        tol = r.number(r.require(b, "tolerance", key + ".", "tolerance > 0 (absolute gain error)"),
                       key + ".tolerance", allowed="a number > 0")
        if not tol > 0:
            raise r.err(key + ".tolerance", f"{tol:g} must be positive", "tolerance > 0")
        return Band(lo, hi, (g0, g1), "shaped", tolerance=tol)

    g0 = r.number(g, gk, allowed=gain_allowed)
    if abs(g0) > MAX_GAIN:
        raise r.err(gk, f"{_show(g)} is out of range", gain_allowed)
    if "tolerance" in b:
        raise r.err(key + ".tolerance", "only shaped bands (gain = [g_lo, g_hi]) take a tolerance",
                    "ripple_db for a pass band, atten_db for a stop band")
    if g0 == 0:
        if "ripple_db" in b:
            raise r.err(key + ".ripple_db", "a stop band (gain 0) takes atten_db, not ripple_db", "atten_db")
        a = r.number(r.require(b, "atten_db", key + ".", "atten_db > 0 (dB below the pass-band gain)"),
                     key + ".atten_db", allowed="a number, 0 < atten_db <= 200")
        if not 0 < a <= 200:
            raise r.err(key + ".atten_db", f"{a:g} is out of range", "0 < atten_db <= 200")
        return Band(lo, hi, (0.0, 0.0), "stop", atten_db=a)
    if "atten_db" in b:
        raise r.err(key + ".atten_db", "a pass band (gain != 0) takes ripple_db, not atten_db", "ripple_db")
    rp = r.number(r.require(b, "ripple_db", key + ".", "ripple_db > 0 (peak to peak, dB)"),
                  key + ".ripple_db", allowed="a number, 0 < ripple_db <= 20")
    if not 0 < rp <= 20:
        raise r.err(key + ".ripple_db", f"{rp:g} is out of range", "0 < ripple_db <= 20")
    return Band(lo, hi, (g0, g0), "pass", ripple_db=rp)


def _input(inp, r: _Reader) -> tuple[int, int]:
    inp = r.table(inp, "input", "[input] with bits (2..32) and frac")
    r.check_keys(inp, INPUT_KEYS, "input.")
    in_bits = r.integer(r.require(inp, "bits", "input.", "an integer from 2 to 32"), "input.bits", 2, 32)
    in_frac = r.integer(inp.get("frac", in_bits - 1), "input.frac", 0, in_bits, extra=" (at most input.bits)")
    return in_bits, in_frac


def _output(out, r: _Reader):
    out = r.table(out, "output", "[output] with bits, frac, rounding, overflow (all optional)")
    r.check_keys(out, OUTPUT_KEYS, "output.")
    ob = out.get("bits", "auto")
    out_bits = None if ob == "auto" else r.integer(ob, "output.bits", 2, 64, extra=', or "auto"')
    of = out.get("frac", "auto")
    out_frac = None if of == "auto" else r.integer(of, "output.frac", 0, 64, extra=', or "auto"')
    if out_frac is not None and out_bits is None:
        raise r.err("output.frac", "output.frac needs output.bits", "set output.bits too, or leave both auto")
    rounding = r.choice(out.get("rounding", "half_up"), "output.rounding", ROUNDING_MODES)
    ovf = r.choice(out.get("overflow", "saturate"), "output.overflow", OVERFLOW_MODES)
    return out_bits, out_frac, rounding, ovf


def _target(tgt, fs: float, r: _Reader):
    tgt = r.table(tgt, "target", "[target] with device and clock")
    r.check_keys(tgt, TARGET_KEYS, "target.")
    device = r.choice(tgt.get("device", "generic"), "target.device", DEVICES)
    clock = r.number(r.require(tgt, "clock", "target.", 'the fabric clock in Hz (>= sample_rate), e.g. "200 MHz"'),
                     "target.clock", allow_unit=True)
    if clock < fs * (1 - 1e-12):
        raise r.err("target.clock", f"{_fmt_hz(clock)} is below the sample rate {_fmt_hz(fs)}",
                    f"clock >= sample_rate = {_fmt_hz(fs)} (at most one sample per cycle)")
    if clock > MAX_FREQ:
        raise r.err("target.clock", f"{_fmt_hz(clock)} is out of range", f"clock <= {_fmt_hz(MAX_FREQ)}")
    bud = r.table(tgt.get("budget", {}), "target.budget", "[target.budget] with dsp, lut, ff, latency (all optional)")
    r.check_keys(bud, BUDGET_KEYS, "target.budget.")
    budget = Budget(**{k: r.integer(bud[k], f"target.budget.{k}", 0, 10**8) for k in bud})
    return device, clock, budget


def _check_aliasing(bands, fs, dec, r: _Reader):
    """Warn when a region that aliases into an output pass band is not inside a stop band.

    After decimation by ``dec`` an input frequency f lands on |f - k*fo| for the
    nearest multiple k*fo of the output rate fo. So each band with a gain to keep
    (pass or shaped, [a, b]) has images k*fo - [b, a] and k*fo + [a, b], k >= 1;
    whatever of them lies in [0, fs/2] must be attenuated, i.e. inside a stop band.
    """
    fo = fs / dec
    keep = [b for b in bands if b.kind != "stop"]
    stops = [(b.lo, b.hi) for b in bands if b.kind == "stop"]
    top = max((b.hi for b in keep), default=0.0)
    if top > fo / 2 * (1 + 1e-12):
        r.warnings.append(
            f"{r.path}: a pass band reaches {_fmt_hz(top)}, above the output Nyquist "
            f"frequency {_fmt_hz(fo / 2)} of decimation by {dec}: it will alias onto itself")
    if not stops:
        r.warnings.append(
            f"{r.path}: decimation by {dec} with no stop band: everything above {_fmt_hz(fo / 2)} "
            f"aliases into the output")
        return
    worst = None  # (uncovered width, lo, hi, band)
    n_bad = 0
    kmax = int(math.ceil((fs / 2 + top) / fo)) + 1
    for b in keep:
        for k in range(1, kmax + 1):
            for lo, hi in ((k * fo - b.hi, k * fo - b.lo), (k * fo + b.lo, k * fo + b.hi)):
                lo, hi = max(lo, 0.0), min(hi, fs / 2)
                if hi <= lo:
                    continue
                gap = _uncovered(lo, hi, stops)
                if gap > 1e-9 * fs:
                    n_bad += 1
                    if worst is None or gap > worst[0]:
                        worst = (gap, lo, hi, b)
    if worst is not None:
        gap, lo, hi, b = worst
        r.warnings.append(
            f"{r.path}: [{_fmt_hz(lo)}, {_fmt_hz(hi)}] aliases into the output pass band "
            f"[{_fmt_hz(b.lo)}, {_fmt_hz(b.hi)}] after decimation by {dec} but is not fully inside "
            f"a stop band ({_fmt_hz(gap)} uncovered"
            + (f"; {n_bad - 1} more such region(s)" if n_bad > 1 else "")
            + "); extend the stop band(s) to cover it")


def _uncovered(lo, hi, stops) -> float:
    covered = 0.0
    for s0, s1 in stops:
        a, b = max(lo, s0), min(hi, s1)
        if b > a:
            covered += b - a
    return (hi - lo) - covered
