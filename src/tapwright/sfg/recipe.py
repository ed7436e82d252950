"""Recipes: how a candidate structure is made from a quantized design.

A :class:`Recipe` names the structure id and the parameters that, applied to
the direct-form graph of a :class:`~tapwright.fixed.stages.FixedDesign`, give
the candidate's graph: the structure transforms in order, the time-sharing
factor and the pipelining target. ``design.json`` records it, so ``check``
rebuilds exactly the graph that ``build`` lowered.

Structure ids (used everywhere: CLI, design.json, report):
``direct``, ``transposed``, ``symmetric``, ``halfband``, ``polyphase``,
``timeshared``, ``sos_df1``, ``sos_df2t``, ``cic``, ``chain``.
"""
from __future__ import annotations

from dataclasses import dataclass

from ..fixed.stages import FixedDesign
from . import build as _build
from .graph import copy_graph, seal
from .metrics import zero_lsbs
from .transforms import pipeline as _pipe
from .transforms import shiftadd as _sa
from .transforms import structure as _st
from .transforms.timeshare import timeshare

STRUCTURES = ("direct", "transposed", "symmetric", "halfband", "polyphase", "timeshared",
              "sos_df1", "sos_df2t", "cic", "chain", "shiftadd")

# canonical order for per-stage application (a chain)
_TRANSFORM = {
    "polyphase": _st.polyphase,
    "halfband": _st.drop_zeros,
    "symmetric": _st.symmetric,
    "transposed": _st.transpose,
    "shiftadd": _sa.shiftadd,
    "shiftadd_mindepth": _sa.shiftadd_mindepth,
}


@dataclass(frozen=True)
class Recipe:
    """``transforms``: applied in order to the direct form (ids from ``_TRANSFORM``).

    ``fold``: time-sharing factor (1 = none). ``period``: pipelining target in
    the delay model's units (ns of ``delay_model``'s delay table; unit
    delays for ``generic``; None = no pipeline registers). ``register_output``:
    a register in front of ``out_data``.
    """

    structure: str
    transforms: tuple[str, ...] = ()
    fold: int = 1
    period: float | None = None
    register_output: bool = True
    sos_form: str = "df1"
    delay_model: str = "generic"
    stage_transforms: tuple | None = None
    stage_folds: tuple | None = None
    tag: str = ""

    @property
    def stage_structures(self) -> list[str]:
        """Structure id of each stage of a chain (contract: plan --json ``stages``)."""
        if self.stage_transforms is None:
            return []
        out = []
        for i, tr in enumerate(self.stage_transforms):
            fold = self.stage_folds[i] if self.stage_folds else 1
            if "cic" in tr:
                out.append("cic")
            elif fold > 1:
                out.append("timeshared")
            elif "halfband" in tr:
                out.append("halfband")
            elif "polyphase" in tr:
                out.append("polyphase")
            elif "symmetric" in tr:
                out.append("symmetric")
            else:
                out.append("direct")
        return out

    @property
    def label(self) -> str:
        if self.stage_transforms is not None:
            lab = "chain:" + (self.tag or "+".join(self.stage_structures))
            if self.stage_folds and any(k > 1 for k in self.stage_folds):
                lab += "/k" + ".".join(str(k) for k in self.stage_folds)
            if self.period is not None:
                lab += f"/p{self.period:.3g}"
            return lab
        parts = [self.structure]
        extra = [t for t in self.transforms if t != self.structure]
        if self.structure == "halfband":
            extra = [t for t in extra if t != "symmetric"]
        if extra:
            parts.append("+" + "+".join(extra))
        if self.fold > 1:
            parts.append(f"/k{self.fold}")
        if self.period is not None:
            parts.append(f"/p{self.period:.3g}")
        return "".join(parts)

    def as_dict(self) -> dict:
        return {"structure": self.structure, "transforms": list(self.transforms), "fold": self.fold,
                "period": self.period, "register_output": self.register_output, "sos_form": self.sos_form,
                "delay_model": self.delay_model,
                "stage_transforms": None if self.stage_transforms is None else [list(t) for t in self.stage_transforms],
                "stage_folds": None if self.stage_folds is None else list(self.stage_folds),
                "tag": self.tag}

    @staticmethod
    def from_dict(d: dict) -> "Recipe":
        return Recipe(structure=d["structure"], transforms=tuple(d.get("transforms", ())),
                      fold=int(d.get("fold", 1)), period=d.get("period"),
                      register_output=bool(d.get("register_output", True)),
                      sos_form=d.get("sos_form", "df1"), delay_model=d.get("delay_model", "generic"),
                      stage_transforms=None if d.get("stage_transforms") is None
                      else tuple(tuple(t) for t in d["stage_transforms"]),
                      stage_folds=None if d.get("stage_folds") is None else tuple(d["stage_folds"]),
                      tag=d.get("tag", ""))


_CACHE: dict = {}
_CACHE_MAX = 48


def _structural(design, recipe, name):
    """The graph before pipelining, cached per (design, structure, folding): the explorer asks
    for the same structure at several pipelining targets."""
    def make():
        g = seal(_realize_structure(design, recipe, name))
        zero_lsbs(g)   # kept in the sealed graph; pipelining hands it on to every target
        return g
    return _memo(_CACHE, _CACHE_MAX, design, (name, recipe.structure, recipe.transforms,
                 recipe.stage_transforms, recipe.fold, recipe.stage_folds, recipe.sos_form), make)


def _memo(store: dict, limit: int, design, key: tuple, make):
    """``make()``, kept in ``store`` per (design, key) (at most ``limit`` entries, oldest
    dropped first). The entry holds the design itself, so its id cannot be reused."""
    key = (id(design),) + key
    hit = store.get(key)
    if hit is not None and hit[0] is design:
        return hit[1]
    g = make()
    if len(store) >= limit:
        store.pop(next(iter(store)))
    store[key] = (design, g)
    return g


def realize(design: FixedDesign, recipe: Recipe, *, name: str = "filter", delays=None):
    """The candidate's signal-flow graph (formats propagated, pipeline applied).

    The cached structural graph is never handed out: pipelining returns a new
    graph, and without pipelining the caller gets a copy.
    """
    g0 = _structural(design, recipe, name)
    if delays is None:
        from ..cost.timing import delay_function
        delays = delay_function(recipe.delay_model)
    if recipe.period is not None:
        g = _pipe.pipeline(g0, recipe.period, delays, register_output=recipe.register_output)
    elif recipe.register_output:
        g = _pipe.pipeline(g0, float("inf"), delays, register_output=True)
    else:
        g = copy_graph(g0)
    g.graph["structure"] = recipe.structure
    g.graph["recipe"] = recipe
    return g


def structure_graph(design: FixedDesign, recipe: Recipe, *, name: str = "filter"):
    """The recipe's structure before pipelining: the cached, sealed graph itself (read only;
    :func:`realize` gives a graph of one's own)."""
    return _structural(design, recipe, name)


def unpipelined_critical_ns(design: FixedDesign, recipe: Recipe, *, name: str = "filter", delays=None) -> float:
    """Longest combinational path of the structure with no pipeline register: pipelining
    to a period at or above it inserts nothing (the explorer skips such targets)."""
    g0 = _structural(design, recipe, name)
    if delays is None:
        from ..cost.timing import delay_function
        delays = delay_function(recipe.delay_model)
    c = g0.graph.get("_crit0")
    if c is None or c[0] is not delays:
        c = (delays, max(_pipe.arrival_times(g0, delays, cut_pipes=False).values(), default=0.0))
        g0.graph["_crit0"] = c
    return c[1]


_BASE: dict = {}


def _base(design, name, fir_adder, sos_form):
    """The built (untransformed) graph, cached: every transform copies its input, so the
    cached graph is only ever read."""
    return _memo(_BASE, 8, design, (name, fir_adder, sos_form),
                 lambda: _build.build(design, name=name, fir_adder=fir_adder, sos_form=sos_form))


_PREFIX: dict = {}


def _transformed(design, name, fir_adder, sos_form, transforms):
    """The base graph after ``transforms`` (in order), cached per prefix: candidates share
    their first transforms (symmetric, then time-shared by 2, 3, 4; transposed, then
    symmetric, then shift-add), and every transform copies its input."""
    if not transforms:
        return _base(design, name, fir_adder, sos_form)
    return _memo(_PREFIX, 24, design, (name, fir_adder, sos_form, transforms),
                 lambda: _TRANSFORM[transforms[-1]](_transformed(design, name, fir_adder, sos_form,
                                                                 transforms[:-1])))


def _realize_structure(design: FixedDesign, recipe: Recipe, name: str):
    chain = "transposed" in recipe.transforms and recipe.stage_transforms is None
    if recipe.stage_transforms is None:
        g = _transformed(design, name, "chain" if chain else "tree", recipe.sos_form, tuple(recipe.transforms))
    else:
        g = _base(design, name, "chain" if chain else "tree", recipe.sos_form)
        # per stage (a chain): each transform on the stages that list it, in canonical order
        order = [t for t in _TRANSFORM if any(t in st for st in recipe.stage_transforms)]  # "cic" is a marker
        for t in order:
            which = {i for i, st in enumerate(recipe.stage_transforms) if t in st}
            g = _TRANSFORM[t](g, stages=which)
    if recipe.stage_folds is not None and any(k > 1 for k in recipe.stage_folds):
        g = timeshare(g, {i: k for i, k in enumerate(recipe.stage_folds) if k > 1})
    elif recipe.fold > 1:
        g = timeshare(g, recipe.fold)
    return g
