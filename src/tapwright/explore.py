"""Structure explorer: every applicable structure x pipelining x time-sharing, ranked.

For a quantized design the explorer builds each candidate's signal-flow graph
(:func:`tapwright.sfg.recipe.realize`), estimates it on the target device
(:func:`tapwright.cost.estimate.estimate`) and checks it against the spec:

- throughput: the structure's ``input_interval`` must not exceed the clock
  cycles available per input sample, floor(clock / sample_rate);
- clock: the estimated reachable clock must reach the spec's clock;
- budget: dsp, lut, ff and latency within ``[target.budget]``;
- size: within the biggest part the device profile lists for the family (DSP
  blocks, LUTs, flip-flops; a design no listed part holds is never recommended,
  whatever the budget says).

Ranking. Among feasible candidates the recommendation is the cheapest by one
documented weighting: each resource as a fraction of the capacity of the
family's smallest listed part (the same yardstick for DSP blocks, LUTs and
flip-flops; the budget decides feasibility only), summed: ``dsp/DSP + (lut + carry)/LUT + ff/FF``, with latency as a tie
break. On ``generic`` (no device) the weighting is a gate-area proxy:
sum of a*b over multipliers + adder bits + register bits. The Pareto front
over (dsp, lut + carry, ff, latency) is marked.

Lower bound on hard multipliers: a filter needs at least
ceil(T / (M * C)) multipliers, where T is the number of products per output
left after symmetry, zero and power-of-two savings and after sharing equal
coefficients that multiply the same input (a transposed form; synthesis merges
identical constant products), M the decimation in front
of them and C = floor(clock / sample_rate) the cycles per input sample: each
multiplier does at most one product per cycle. The time-shared polyphase
candidates reach it.
"""
from __future__ import annotations

import functools
import gc
import math
from dataclasses import dataclass, field

from .cost.devices import get_profile, part_use
from .cost.estimate import Estimate, estimate
from .cost.timing import delay_function, target_period
from .fixed.stages import FixedDesign
from .sfg.metrics import is_free_coeff
from .sfg.graph import edge_list, fingerprint
from .sfg.recipe import Recipe, realize, structure_graph, unpipelined_critical_ns


@dataclass
class Candidate:
    recipe: Recipe
    estimate: Estimate
    feasible: bool = False
    why: str = ""
    cost: float = 0.0
    pareto: bool = False
    excess: dict = field(default_factory=dict)
    fixed: FixedDesign | None = None
    chain: object = None      # the ChainDesign of a multistage candidate
    #: labels of other recipes that give this very graph (not listed again)
    same_as: list = field(default_factory=list)

    @property
    def structure(self) -> str:
        return self.recipe.structure

    @property
    def label(self) -> str:
        return self.recipe.label

    def as_json(self) -> dict:
        d = self._json()
        if self.recipe.stage_transforms is not None:
            d["stages"] = self.recipe.stage_structures
            if self.chain is not None:
                d["chain"] = self.chain.name
                d["mults_per_input"] = self.chain.mults_per_input
        return d

    def _json(self) -> dict:
        return {"structure": self.structure, "id": self.label, "feasible": self.feasible,
                "estimate": self.estimate.as_dict(), "why": self.why,
                "transforms": list(self.recipe.transforms), "fold": self.recipe.fold,
                "pipeline_period": self.recipe.period, "cost": round(self.cost, 6), "pareto": self.pareto,
                "recipe": self.recipe.as_dict(), "same_as": list(self.same_as)}


@dataclass
class Exploration:
    candidates: list
    recommended: Candidate | None
    closest: Candidate | None
    lower_bound: int
    cycles_per_sample: int
    notes: list = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.recommended is not None

    def by_label(self) -> dict:
        """Candidates by label, each also under the labels of recipes that give the same
        graph (``same_as``: listed once)."""
        d = {}
        for c in self.candidates:
            for lab in (c.label, *c.same_as):
                d.setdefault(lab, c)
        return d


def _fir_stages(fixed):
    return [s for s in fixed.stages if s.kind == "fir"]


def _is_halfband(st) -> bool:
    c = st.coeffs
    L = len(c)
    if L < 7 or L % 2 == 0 or st.symmetry() != 1:
        return False
    mid = (L - 1) // 2
    return all(c[k] == 0 for k in range(L) if (k - mid) % 2 == 0 and k != mid) and c[mid] != 0


def products_lower_bound(fixed: FixedDesign, cycles_per_sample: int) -> int:
    """ceil(sum over FIR stages of T_s / (rate_s * M_s * C)) (see module docstring)."""
    total = 0.0
    rate = 1
    for st in fixed.stages:
        if st.kind == "fir":
            c = st.coeffs
            L = len(c)
            sym = st.symmetry()
            if sym:
                idx = range((L + 1) // 2)
            else:
                idx = range(L)
            T = sum(1 for k in idx if not is_free_coeff(c[k]))
            if st.decimation == 1:
                # a transposed form multiplies one input by every coefficient: equal
                # coefficients are one product after synthesis (shared constant products)
                T = min(T, len({int(v) for v in c if not is_free_coeff(v)}))
            total += T / (rate * st.decimation * cycles_per_sample)
        elif st.kind == "sos":
            # per section: the numerator products of one input (df2t shares equal b's),
            # the feedback products of one output (equal a's shared)
            T = sum(len({int(v) for v in s.b if not is_free_coeff(v)})
                    + len({int(v) for v in s.a[1:] if not is_free_coeff(v)}) for s in st.sections)
            total += T / (rate * cycles_per_sample)
        rate *= getattr(st, "decimation", 1)
    return math.ceil(total - 1e-12)


def base_transform_sets(fixed: FixedDesign):
    """(structure id, transforms) pairs of the unfolded structures that apply."""
    kinds = {s.kind for s in fixed.stages}
    out = []
    if kinds == {"sos"} or (kinds == {"sos", "fir"} and all(
            s.kind == "sos" or len(s.coeffs) == 1 for s in fixed.stages)):
        return [("sos_df1", (), "df1"), ("sos_df2t", (), "df2t")]
    firs = _fir_stages(fixed)
    if not firs:
        return [("cic", (), "df1")]
    sym = all(s.symmetry() != 0 for s in firs)
    hb = all(_is_halfband(s) for s in firs)
    dec = any(s.decimation > 1 for s in firs)
    big = max(len(s.coeffs) for s in firs) > LARGE_TAPS
    if not big:
        out.append(("direct", (), "df1"))
        out.append(("transposed", ("transposed",), "df1"))
    if sym:
        out.append(("symmetric", ("symmetric",), "df1"))
        if not big:
            out.append(("transposed", ("transposed", "symmetric"), "df1"))
    if not big and max(len(s.coeffs) for s in firs) <= SHIFTADD_TAPS:
        # multiplierless: the transposed multiplier block as one shift-add graph
        out.append(("shiftadd", ("transposed", "symmetric", "shiftadd") if sym else ("transposed", "shiftadd"), "df1"))
    if hb:
        out.append(("halfband", ("halfband", "symmetric"), "df1"))
    if dec:
        out.append(("polyphase", ("polyphase",), "df1"))
        if sym:
            out.append(("polyphase", ("polyphase", "symmetric"), "df1"))
        if hb:
            out.append(("halfband", ("polyphase", "halfband", "symmetric"), "df1"))
    return out


#: above this length only the reduced structures (symmetric, polyphase, time-shared) are explored
LARGE_TAPS = 1023
#: shift-add candidates for filters up to this length
SHIFTADD_TAPS = 255


def fold_factors(T: int, K_max: int) -> list[int]:
    """Folding factors worth trying: the smallest K for each multiplier count P."""
    if K_max < 2 or T < 2:
        return []
    Ks = set()
    P_min = math.ceil(T / K_max)
    for P in sorted({P_min, P_min + 1, 2 * P_min, 4 * P_min, math.ceil(T / 2), math.ceil(T / 4)}):
        if P < 1 or P >= T:
            continue
        K = math.ceil(T / P)
        if 2 <= K <= K_max:
            Ks.add(K)
    Ks.add(K_max if K_max <= T else T)
    return sorted(k for k in Ks if 2 <= k <= min(K_max, T))


def recipes(fixed: FixedDesign, spec, *, name: str | None = None) -> list[Recipe]:
    """Every candidate recipe for the spec's device and clock (``name``: the graphs' name,
    by default the spec's, as in :func:`explore`, which then reuses the structures)."""
    dev = spec.device
    C = spec.cycles_per_sample
    period_target = target_period(dev, spec.clock)
    out = []
    bases = base_transform_sets(fixed)
    firs = _fir_stages(fixed)
    big = bool(firs) and max(len(s.coeffs) for s in firs) > LARGE_TAPS
    for sid, tr, form in (bases[-1:] if big else bases):
        for per in ((period_target,) if big else (None, period_target)):
            out.append(Recipe(sid, tr, period=per, sos_form=form, delay_model=dev))
    # time-sharing over the most reduced non-transposed bases
    if firs and not {s.kind for s in fixed.stages} & {"sos"}:
        reduced = [b for b in bases if "transposed" not in b[1] and "shiftadd" not in b[1]]
        if big:  # long filters: only the most reduced base, folded as far as the clock allows
            reduced = reduced[-1:]
        seen = set()
        for sid, tr, form in reduced:
            M = max(s.decimation for s in firs) if "polyphase" in tr else 1
            K_max = C * M
            g = structure_graph(fixed, Recipe(sid, tr, delay_model=dev), name=name or spec.name)
            T = sum(1 for n in g._node.values() if n["kind"] == "mul" and not is_free_coeff(n["coeff"]))
            Ks = fold_factors(T, K_max)
            if big:
                Ks = Ks[-1:]
            for K in Ks:
                key = (tr, K)
                if key in seen:
                    continue
                seen.add(key)
                for per in ((period_target,) if big else (None, period_target)):
                    out.append(Recipe("timeshared", tr, fold=K, period=per, delay_model=dev))
    return out


def _normalizers(spec):
    prof = get_profile(spec.device)
    part = prof.parts[0] if prof.parts else None
    b = spec.budget
    # one yardstick for every resource: the family's smallest listed part (the budget only
    # decides feasibility); without a part, the budget
    return {
        "dsp": part.dsp if part else (b.dsp or 1),
        "lut": part.lut if part else (b.lut or 1),
        "ff": part.ff if part else (b.ff or 1),
    }


def _cost(est: Estimate, spec) -> float:
    if spec.device == "generic":
        return float(sum(a * b for a, b in est.mults) + sum(est.adds) + est.ff_bits) + 1e-6 * est.latency
    n = _normalizers(spec)
    return (est.dsp / max(1, n["dsp"]) + (est.lut + est.carry) / max(1, n["lut"])
            + est.ff / max(1, n["ff"]) + 1e-6 * est.latency)


def _check(c: Candidate, spec):
    e = c.estimate
    reasons, excess = [], {}
    C = spec.cycles_per_sample
    if e.input_interval > C:
        reasons.append(f"needs {e.input_interval} cycles per sample, the clock gives {C}")
        excess["input_interval"] = e.input_interval - C
    clock_mhz = spec.clock / 1e6
    if e.fmax_mhz is not None and e.fmax_mhz < clock_mhz * (1 - 1e-9):
        # one decimal where the rounded figure would equal the clock ("about 80, below 80")
        got = f"{e.fmax_mhz:.0f}" if round(e.fmax_mhz) < clock_mhz else f"{e.fmax_mhz:.1f}"
        reasons.append(f"reaches about {got} MHz, below the {clock_mhz:g} MHz clock")
        excess["clock_mhz"] = round(clock_mhz - e.fmax_mhz, 1)
    b = spec.budget
    used = {"dsp": e.dsp, "lut": e.lut, "ff": e.ff, "latency": e.latency}
    if spec.device == "generic":
        used["lut"] = 0
    for k in ("dsp", "lut", "ff", "latency"):
        lim = getattr(b, k)
        if lim is not None and used[k] > lim:
            reasons.append(f"{k} {used[k]} > budget {lim}")
            excess[k] = used[k] - lim
    prof = get_profile(spec.device)
    if prof.parts:
        # the family's largest listed part bounds every design, budget or not
        big = prof.parts[-1]
        use = part_use(prof, big, e)
        over = [k for k in ("dsp", "lut", "ff") if use[k] > 1.0]
        if over:
            reasons.append(f"larger than {big.name}, the biggest listed {spec.device} part "
                           f"({', '.join(f'{k} {use[k]:.0%}' for k in over)})")
            excess["part"] = round(max(use.values()) - 1.0, 3)
    c.feasible = not reasons
    c.why = "; ".join(reasons)
    c.excess = excess


def _pareto(cands):
    pts = [(c.estimate.dsp, c.estimate.lut + c.estimate.carry, c.estimate.ff, c.estimate.latency) for c in cands]
    for i, c in enumerate(cands):
        p = pts[i]
        c.pareto = not any(all(q[j] <= p[j] for j in range(4)) and q != p for q in pts)


def _gc_paused(fn):
    """Run ``fn`` with Python's cyclic garbage collector paused. Building and estimating
    candidates allocates hundreds of thousands of small dicts; each allocation burst
    would start a collection that walks every live graph (the objects made here are
    freed by reference counting; the collector runs again afterwards). audio_dec64 on
    ECP5: about 1.6 s with collections, 1.05 s without."""
    @functools.wraps(fn)
    def run(*args, **kw):
        was = gc.isenabled()
        gc.disable()
        try:
            return fn(*args, **kw)
        finally:
            if was:
                gc.enable()
    return run


@_gc_paused
def explore(fixed: FixedDesign, spec, *, name: str | None = None) -> Exploration:
    """Estimate every candidate of one design; rank; pick the recommendation (or the closest miss)."""
    return _rank(spec, [(fixed, r, None) for r in recipes(fixed, spec, name=name)], fixed, name=name)


def _rank(spec, sources, lb_fixed, *, name=None) -> Exploration:
    C = spec.cycles_per_sample
    cands = []
    seen = {}
    shapes = set()
    unpiped = set()
    by_figures = {}   # estimate figures -> [[candidate, graph, fingerprint or None]]
    delays = delay_function(spec.device)
    for fixed, r, chain in sources:
        if r.label in seen:
            continue
        skey = (id(fixed), r.structure, r.transforms, r.stage_transforms, r.fold, r.stage_folds, r.sos_form)
        if r.period is None and r.register_output:
            unpiped.add(skey)
        elif r.register_output and skey in unpiped and \
                unpipelined_critical_ns(fixed, r, name=name or spec.name, delays=delays) <= r.period:
            continue   # the target inserts no register: the same candidate as the unpipelined one
        g = realize(fixed, r, name=name or spec.name, delays=delays)
        # the same structure with the same pipeline registers is the same candidate: skip
        # its estimate (the signature check below would drop it anyway)
        shape = skey + (tuple(e["pipe"] for _, _, e in edge_list(g)),)
        if shape in shapes:
            continue
        shapes.add(shape)
        est = estimate(g, spec.device)
        # a pipelining target that changes nothing is not a candidate of its own
        sig = (id(fixed), r.structure, r.transforms, r.stage_transforms, r.fold, r.stage_folds,
               est.dsp, est.lut, est.carry, est.ff, est.latency, est.fmax_mhz)
        if sig in seen.values():
            continue
        seen[r.label] = sig
        # transforms that end in the same graph (a halfband's zero taps dropped by the
        # halfband transform or by time-sharing) are one candidate under two names
        figures = (id(fixed), est.dsp, est.lut, est.carry, est.ff, est.latency, est.fmax_mhz,
                   est.input_interval)
        twins = by_figures.setdefault(figures, [])
        if twins:
            fp = fingerprint(g)
            for t in twins:   # a graph's fingerprint is taken once, when first compared
                if t[2] is None:
                    t[2] = fingerprint(t[1])
            twin = next((c0 for c0, _, f0 in twins if f0 == fp), None)
            if twin is not None:
                # listed under the name that says more (a halfband's name keeps "halfband")
                if len(r.transforms) > len(twin.recipe.transforms):
                    twin.same_as.append(twin.recipe.label)
                    twin.recipe = r
                else:
                    twin.same_as.append(r.label)
                continue
        c = Candidate(r, est, fixed=fixed, chain=chain)
        twins.append([c, g, None])
        _check(c, spec)
        c.cost = _cost(est, spec)
        cands.append(c)
    _pareto(cands)
    cands.sort(key=lambda c: (not c.feasible, c.cost, c.label))
    feas = [c for c in cands if c.feasible]
    rec = feas[0] if feas else None
    closest = None
    if rec is None and cands:
        def badness(c):
            tot = 0.0
            n = _normalizers(spec)
            for k, v in c.excess.items():
                scale = {"dsp": n["dsp"], "lut": n["lut"], "ff": n["ff"],
                         "latency": spec.budget.latency or 1, "input_interval": 1,
                         "clock_mhz": spec.clock / 1e6}.get(k, 1)
                tot += v / max(1, scale)
            return (tot, c.cost)
        closest = min(cands, key=badness)
    lb = products_lower_bound(lb_fixed, C) if lb_fixed is not None else 0
    return Exploration(cands, rec, closest, lb, C)


def _chain_stage_transforms(fixed: FixedDesign, stages_desc=None):
    out = []
    for i, st in enumerate(fixed.stages):
        if st.kind == "cic":
            out.append(("cic",))
            continue
        if st.kind != "fir":
            out.append(())
            continue
        tr = []
        if st.decimation > 1:
            tr.append("polyphase")
        if _is_halfband(st):
            tr += ["halfband", "symmetric"]
        elif st.symmetry() != 0:
            tr.append("symmetric")
        out.append(tuple(tr))
    return tuple(out)


def chain_recipes(fixed: FixedDesign, spec, tag: str, *, name: str | None = None) -> list[Recipe]:
    """Unfolded, folded-to-the-clock, pipelined variants of one chain."""
    dev = spec.device
    C = spec.cycles_per_sample
    st_tr = _chain_stage_transforms(fixed)
    base = Recipe("chain", stage_transforms=st_tr, delay_model=dev, tag=tag)
    g = structure_graph(fixed, Recipe("chain", stage_transforms=st_tr, delay_model=dev, tag=tag),
                        name=name or spec.name)
    folds = []
    rate = 1
    any_fold = False
    for i, st in enumerate(fixed.stages):
        if st.kind == "fir":
            T = sum(1 for _, n in g.nodes(data=True)
                    if n["kind"] == "mul" and n.get("stage") == i and not is_free_coeff(n["coeff"]))
            k_max = C * rate * (st.decimation if "polyphase" in st_tr[i] else 1)
            K = min(T, k_max)
            folds.append(K if K >= 2 else 1)
            any_fold |= K >= 2
        else:
            folds.append(1)
        rate *= getattr(st, "decimation", 1)
    per = target_period(dev, spec.clock)
    out = [base, Recipe("chain", stage_transforms=st_tr, period=per, delay_model=dev, tag=tag)]
    if any_fold:
        out.append(Recipe("chain", stage_transforms=st_tr, stage_folds=tuple(folds), delay_model=dev, tag=tag))
        out.append(Recipe("chain", stage_transforms=st_tr, stage_folds=tuple(folds), period=per,
                          delay_model=dev, tag=tag))
    return out


@_gc_paused
def explore_all(spec, single_fixed: FixedDesign | None, chains=(), *, name: str | None = None) -> Exploration:
    """Single-stage candidates and every chain's candidates, ranked together."""
    sources = []
    if single_fixed is not None:
        sources += [(single_fixed, r, None) for r in recipes(single_fixed, spec, name=name)]
    for ch in chains:
        if not ch.ok:
            continue
        sources += [(ch.fixed, r, ch) for r in chain_recipes(ch.fixed, spec, ch.name, name=name)]
    return _rank(spec, sources, single_fixed if single_fixed is not None else
                 (chains[0].fixed if chains else None), name=name)
