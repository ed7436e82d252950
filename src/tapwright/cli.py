"""Command line: a thin shell over the Python API.

Exit status: 0 success, 1 the job could not be met, 2 bad input.
"""
from __future__ import annotations

import argparse
import json
import sys

from .spec import SpecError, load_spec


class JobFailed(Exception):
    """The job could not be met (exit 1)."""


class UserError(Exception):
    """Bad input that is not a spec file problem (exit 2)."""


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="tapwright", description="Filter requirement -> sized, verified RTL.")
    sub = p.add_subparsers(dest="cmd", required=True)
    pl = sub.add_parser("plan", help="design the filter and rank hardware structures")
    pl.add_argument("spec")
    pl.add_argument("--json", action="store_true", help="print one JSON object")
    b = sub.add_parser("build", help="write the design folder (Verilog, design.json, vectors, testbench, report)")
    b.add_argument("spec")
    b.add_argument("--structure", default=None)
    b.add_argument("--out", default=None)
    b.add_argument("--force", action="store_true", help="replace an existing folder")
    c = sub.add_parser("check", help="simulate a design folder against the bit-true model")
    c.add_argument("dir")
    c.add_argument("--sim", choices=("amaranth", "verilator"), default="amaranth")
    c.add_argument("--samples", type=int, default=None)
    s = sub.add_parser("synth", help="run open synthesis and compare with the estimate")
    s.add_argument("dir")
    s.add_argument("--device", default=None)
    s.add_argument("--pnr", action="store_true")
    s.add_argument("--gate-check", action="store_true",
                   help="also simulate the synthesized netlist against the bit-true model")
    return p


def cmd_plan(args) -> int:
    spec = load_spec(args.spec)
    for w in spec.warnings:
        print(f"warning: {w}", file=sys.stderr)
    from .plan import plan, render_plan

    result = plan(spec)
    if args.json:
        print(json.dumps(result.as_json(), indent=2, sort_keys=False))
    else:
        print(render_plan(result))
    return 0 if result.ok else 1


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    try:
        if args.cmd == "plan":
            return cmd_plan(args)
        if args.cmd == "build":
            from .build import cmd_build
            return cmd_build(args)
        if args.cmd == "check":
            from .verify.check import cmd_check
            return cmd_check(args)
        if args.cmd == "synth":
            from .synth.run import cmd_synth
            return cmd_synth(args)
    except SpecError as e:
        print(f"error: {e}", file=sys.stderr)
        return 2
    except UserError as e:
        print(f"error: {e}", file=sys.stderr)
        return 2
    except JobFailed as e:
        print(f"failed: {e}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 130
    return 2
