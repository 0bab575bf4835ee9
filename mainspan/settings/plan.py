"""The settings object shared by the front ends, and the ``run_info`` entries of a plan."""

from __future__ import annotations

import dataclasses
import os

from .checks import check_settings
from .schema import GROUPS, WHOLE_COST_PREFIX, _all, unknown_key

__all__ = ["PlanSettings", "run_info_params"]


# ------------------------------------------------------------------ run_info
def _fmt_dataclass(obj):
    if obj is None:
        return ""
    if dataclasses.is_dataclass(obj):
        return ", ".join(f"{k}={v}" for k, v in dataclasses.asdict(obj).items())
    return str(obj)


def run_info_params(kw: dict, *, candidates_label=None) -> dict:
    """The ``run_info`` entries recording the plan settings of *kw* (plan_layout keywords).

    The order and the spelling of each entry are part of the file format:
    layouts written before the schema existed read the same.
    """
    from ..ground.costs import CostWeights

    terrain = kw.get("terrain")
    land = kw.get("land_cost")
    land = land if isinstance(land, dict) else ({"land_cost": land} if land is not None else {})
    weights = kw.get("weights")
    if not isinstance(weights, CostWeights):
        weights = CostWeights(**(weights or {}))
    mlm = kw.get("max_link_m")
    return {
        "candidates": str(candidates_label if candidates_label is not None
                          else kw.get("candidates", "delaunay")),
        "k": str(kw.get("k", 8)),
        "max_link_m": "" if mlm is None else f"{mlm:g}",
        "terrain": "" if terrain is None else os.fspath(getattr(terrain, "path", terrain)),
        "land_cost": "; ".join(f"{k}={os.fspath(v)}" for k, v in land.items()),
        "cost_expression": kw.get("cost_expression") or "",
        "on_nodata": kw.get("on_nodata", "barrier"),
        "weights": _fmt_dataclass(weights),
        "layout": kw.get("layout", "tree"),
        **({"whole_cost_settings": ", ".join(  # under the [tree] keys that set them
            f"{WHOLE_COST_PREFIX}{k}={v}"
            for k, v in dataclasses.asdict(_whole_cost(kw.get("whole_cost"))).items())}
           if kw.get("layout") == "whole-cost" else {}),
    }


def _whole_cost(v):
    from ..graph.tradeoff import WholeCostSettings

    if isinstance(v, WholeCostSettings):
        return v
    return WholeCostSettings(**(v or {}))


# ------------------------------------------------------------------ settings object
class PlanSettings:
    """Checked plan settings: the one object the CLI, project files, scenarios and
    :func:`mainspan.plan_layout` share.

    Build it from sections (:meth:`from_sections`, as a project file or the
    command line gives them) or from :func:`mainspan.plan_layout` keywords
    (:meth:`from_kwargs`); both check every value before any work.

    Examples
    --------
    >>> ps = PlanSettings.from_sections({"sites": {"path": "s.gpkg"},
    ...                                  "candidates": {"method": "knn", "k": 6}})
    >>> ps.plan_kwargs()["k"], ps.sites_path
    (6, 's.gpkg')
    """

    def __init__(self, sections: dict, objects=None):
        self.sections = sections
        self.objects = dict(objects or {})

    @classmethod
    def from_sections(cls, sections: dict, origin=None) -> "PlanSettings":
        """Check *sections* (see :func:`check_settings`) and wrap them."""
        return cls(check_settings(sections, origin))

    @classmethod
    def from_kwargs(cls, **kw) -> "PlanSettings":
        """From :func:`mainspan.plan_layout` keywords, checked with the schema.

        Objects the API accepts beside plain values (a CostWeights, a
        DesignSettings, a WholeCostSettings, an opened Surface) are kept as given.
        """
        api = {s.api: s for s in _all() if s.api and s.api not in GROUPS}
        sections, objects = {}, {}
        for name, v in kw.items():
            if name in GROUPS:
                sec, prefix = GROUPS[name]
                if isinstance(v, dict):
                    sections.setdefault(sec, {}).update({prefix + k: x for k, x in v.items()})
                elif v is not None:
                    objects[name] = v       # a CostWeights / DesignSettings: checked already
            elif name in api:
                if v is not None:
                    sections.setdefault(api[name].section, {})[api[name].key] = v
            else:
                raise unknown_key("plan_layout()", name, sorted([*api, *GROUPS]),
                                  what="keyword")
        return cls(check_settings(sections, lambda sec, key: f"plan_layout({_api_name(sec, key)})"),
                   objects)

    @property
    def sites_path(self):
        return self.sections.get("sites", {}).get("path")

    @property
    def output(self) -> dict:
        return dict(self.sections.get("output", {}))

    def read_kwargs(self) -> dict:
        """Keywords of :func:`mainspan.read_sites`."""
        read = {k: v for k, v in self.sections.get("sites", {}).items() if k != "path"}
        crs = self.sections.get("crs", {}).get("working")
        if crs:
            read["crs"] = crs
        return read

    def plan_kwargs(self) -> dict:
        """Keywords of :func:`mainspan.plan_layout` (only those set)."""
        sec = self.sections
        plan = {}
        for s in _all():
            if not s.api or s.api in GROUPS:
                continue
            v = sec.get(s.section, {}).get(s.key)
            if v is not None:
                plan[s.api] = v
        if "class_costs" in plan:
            plan["class_costs"] = {int(k): float(v) for k, v in plan["class_costs"].items()}
        if sec.get("costs"):
            plan["weights"] = dict(sec["costs"])
        d = {k: v for k, v in sec.get("design", {}).items() if k != "system"}
        if sec.get("prices") and "prices" not in d:
            d["prices"] = dict(sec["prices"])
        if d:
            plan["design"] = d
        whole = {s.key[len(WHOLE_COST_PREFIX):]: sec["tree"][s.key] for s in _all()
                 if s.api == "whole_cost" and sec.get("tree", {}).get(s.key) is not None}
        if whole:
            plan["whole_cost"] = whole
        plan.update(self.objects)
        return plan

    def resolved(self) -> dict:
        """Every :func:`mainspan.plan_layout` keyword, as set or at its schema default.

        What the stage functions of :mod:`mainspan.pipeline.stages` read.
        """
        plan = {s.api: s.default for s in _all() if s.api and s.api not in GROUPS}
        plan.update(dict.fromkeys(GROUPS))
        plan.update(self.plan_kwargs())
        return plan


def _api_name(section, key):
    for s in _all():
        if s.section == section and s.key == key:
            if s.api in GROUPS:
                return f"{s.api}[{key[len(GROUPS[s.api][1]):]!r}]"
            return s.api or key
    return key
