"""Plan stage: extend existing mains, keep forced links, avoid forbidden ones, respect limits.

:func:`network_stage` reads the settings of the ``[network]`` section once, before the
candidates are built, and returns a :class:`NetworkStage` whose methods the pipeline calls at
the matching points of :func:`mainspan.plan_layout`:

1. ``stage.sites`` -- the sites with the junctions of the existing mains appended
   (:mod:`mainspan.graph.existing`);
2. :meth:`NetworkStage.candidates` -- adds the existing links and any forced link that was
   not a candidate;
3. :meth:`NetworkStage.costs` -- existing links cost nothing (they are built), a new link
   ending on an existing main pays the tap fee (column ``tap_fee``);
4. :meth:`NetworkStage.grow` -- Prim's tree with forced and forbidden links
   (:mod:`mainspan.graph.constraints`, certificate relative to the forced links), or, with
   limits, the Esau–Williams tree improved by link exchange
   (:mod:`mainspan.graph.capacitated`);
5. :meth:`NetworkStage.finish` -- the ``links`` columns ``existing``, ``forced``,
   ``existing_diameter_mm``, ``existing_material`` and, once designed,
   ``existing_undersized`` / ``needed_diameter_mm``; the ``run_info`` entries; one line per
   limit for the summary.

With none of these settings the stage is inactive and the plan is exactly as before.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from ..errors import InputError

__all__ = ["NETWORK_KEYS", "NetworkStage", "network_stage"]

#: The plan_layout keywords of this stage (declared in the settings schema, section network).
NETWORK_KEYS = ("existing", "existing_layer", "existing_diameter_field",
                "existing_material_field", "tap_spacing_m", "tap_fee", "snap_m",
                "forced_links", "forbidden_links", "forced_links_layer",
                "forbidden_links_layer", "max_branch_sites", "max_branch_flow_lps",
                "max_links_per_node", "source_capacity_lps")


@dataclass
class NetworkStage:
    """What the network settings add to one plan (see the module docstring)."""

    sites: object
    n_sites: int
    mains: object = None
    forced_pairs: np.ndarray = field(default_factory=lambda: np.zeros((0, 2), np.int64))
    forbidden_pairs: np.ndarray = field(default_factory=lambda: np.zeros((0, 2), np.int64))
    limits: object = None
    tap_fee: float = 0.0
    settings: dict = field(default_factory=dict)
    record: dict = field(default_factory=dict)

    @property
    def active(self) -> bool:
        return bool(self.mains is not None or len(self.forced_pairs) or len(self.forbidden_pairs)
                    or (self.limits is not None and self.limits.active))

    # -------------------------------------------------------------- candidates
    def _existing_pairs(self):
        if self.mains is None:
            return np.zeros((0, 2), np.int64)
        return self.mains.links

    def candidates(self, cands):
        """Candidates with the existing links and the forced links added (bit ``forced``)."""
        from ..graph.constraints import add_links

        pairs = np.concatenate([self._existing_pairs(), self.forced_pairs])
        if not len(pairs):
            return cands
        edges, _, added = add_links(cands.edges, pairs)
        names = tuple(cands.origin_names)
        bit = len(names)
        if bit >= 8:
            raise InputError("too many candidate builders to mark the forced links; use fewer")
        # carry the old origin bits over to the merged rows
        old = {(int(a), int(b)): o for (a, b), o in zip(cands.edges.tolist(), cands.origin)}
        origin = np.array([old.get((int(a), int(b)), 0) for a, b in edges.tolist()], np.uint8)
        origin[added] |= np.uint8(1 << bit)
        return replace(cands, edges=edges, origin=origin, origin_names=names + ("forced",))

    def _index(self, edges, pairs):
        lookup = {(int(a), int(b)): k for k, (a, b) in enumerate(np.asarray(edges).tolist())}
        return np.array([lookup[(int(a), int(b))] for a, b in np.asarray(pairs).tolist()
                         if (int(a), int(b)) in lookup], np.int64)

    # -------------------------------------------------------------- costs
    def costs(self, costs, cands):
        """Existing links at no cost (and passable); the tap fee on new links to a main."""
        if self.mains is None:
            return costs
        e = cands.edges
        ex = self._index(e, self.mains.links)
        total = np.array(costs.total, float, copy=True)
        passable = np.array(costs.passable, bool, copy=True)
        code = np.array(costs.reason_code, copy=True)
        total[ex] = 0.0
        passable[ex] = True
        code[ex] = -1
        is_ex = np.zeros(len(e), bool)
        is_ex[ex] = True
        on = self.mains.on_main
        junction = np.zeros(len(on), bool)
        junction[self.n_sites:] = True
        tap = ~is_ex & (junction[e[:, 0]] | junction[e[:, 1]])
        fee = np.where(tap, self.tap_fee, 0.0)
        total = np.where(np.isfinite(total), total + fee, total)
        comps = dict(costs.components)
        comps["tap_fee"] = fee
        comps["existing"] = is_ex.astype(np.float64)     # 1.0: an existing pipe (design reads it)
        reasons = {k: v for k, v in costs.reasons.items()}
        n_imp = int((~passable).sum())
        return replace(costs, components=comps, total=total, passable=passable,
                       n_impassable=n_imp, reasons=reasons, reason_code=code)

    # -------------------------------------------------------------- tree
    def grow(self, sites, edges, costs, root_idx, *, allow_forest=False):
        """The tree (over candidate indices) and its certificate (None for limited trees)."""
        from ..errors import DisconnectedError
        from ..graph.capacitated import limited_tree
        from ..graph.constraints import constrained_tree

        w = np.where(np.asarray(costs.passable, bool), np.asarray(costs.total, float), np.inf)
        forced = np.concatenate([self._index(edges, self._existing_pairs()),
                                 self._index(edges, self.forced_pairs)])
        forbidden = self._index(edges, self.forbidden_pairs)
        ids = [str(v) for v in sites.node_id]
        for k in forced.tolist():
            if not np.isfinite(w[k]):
                why = costs.reason(k) or "impassable"
                raise InputError(f"forced link {ids[edges[k, 0]]}:{ids[edges[k, 1]]} cannot be "
                                 f"built ({why}); route it elsewhere or drop it from "
                                 "--forced-links")
        self.record.update(n_forced=int(len(self.forced_pairs)),
                           n_forbidden=int(len(forbidden)),
                           n_existing_links=int(len(self._existing_pairs())))
        if self.limits is not None and self.limits.active:
            site_weight = (np.asarray(sites.role) != "junction").astype(float)
            try:
                tree, rec = limited_tree(sites.n, edges, w, roots=root_idx,
                                         demand_lps=sites.demand, limits=self.limits,
                                         site_weight=site_weight, forced=forced,
                                         forbidden=forbidden, node_id=ids)
            except DisconnectedError as exc:
                raise InputError(str(exc)) from None
            self.record.update(limits=rec)
            return tree, None
        try:
            tree, cert = constrained_tree(sites.n, edges, w, forced=forced, forbidden=forbidden,
                                          roots=root_idx, allow_forest=allow_forest,
                                          node_id=ids)
        except DisconnectedError as exc:
            if "forbidden" in str(exc):
                raise
            lab = np.asarray(exc.components)
            sizes = np.bincount(lab)
            first = [", ".join(ids[v] for v in np.flatnonzero(lab == c)[:3]) for c in
                     range(len(sizes))]
            parts = [f"{sizes[c]} site(s) [{first[c]}]"
                     for c in np.argsort(-sizes, kind="stable")[:4]]
            raise DisconnectedError(
                f"the candidate links split the sites into {len(sizes)} unconnected parts: "
                f"{'; '.join(parts)}; use a larger --k or --max-link-m, --candidates "
                "delaunay+knn, or --allow-forest for one tree per part", components=lab) from None
        if cert is not None and not cert.ok:
            from ..errors import CertificateError
            raise CertificateError(f"optimality certificate failed at candidate link "
                                   f"{cert.violating_edge} (relative to the forced links); "
                                   "this is a bug, please report it")
        return tree, cert

    # -------------------------------------------------------------- layout
    def finish(self, lay):
        """Links columns, run_info entries and existing-pipe checks of a built layout."""
        from ..graph.existing import existing_checks

        if not self.active:         # nothing asked: the layout's columns stay as before
            lay.run_info.update(self.run_info())
            return lay
        e = lay.candidates.edges
        eidx = np.asarray(lay.links["candidate_index"], np.int64)
        L = len(eidx)
        pair = np.sort(e[eidx], axis=1) if L else np.zeros((0, 2), np.int64)
        ex_map = {}
        if self.mains is not None:
            for k, (a, b) in enumerate(self.mains.links.tolist()):
                ex_map[(a, b)] = k
        fset = {(int(a), int(b)) for a, b in self.forced_pairs.tolist()}
        row = np.array([ex_map.get((int(a), int(b)), -1) for a, b in pair.tolist()], np.int64)
        is_ex = row >= 0
        lay.links["existing"] = is_ex
        lay.links["forced"] = np.array([(int(a), int(b)) in fset for a, b in pair.tolist()],
                                       bool)
        if self.mains is not None:
            m = self.mains
            lay.links["existing_diameter_mm"] = np.where(is_ex, m.diameter_mm[np.maximum(row, 0)],
                                                         np.nan)
            lay.links["existing_material"] = np.where(
                is_ex, m.material[np.maximum(row, 0)], "").astype(object)
            lay.links["existing_feature"] = np.where(is_ex, m.feature[np.maximum(row, 0)], -1)
            need_col = lay.links.get("nominal_mm", lay.links.get("diameter_mm"))
            if need_col is not None:
                under, need = existing_checks(need_col, lay.links["existing_diameter_mm"], is_ex)
                lay.links["existing_undersized"] = under
                lay.links["needed_diameter_mm"] = need
                self.record["n_existing_undersized"] = int(under.sum())
            used = np.zeros(lay.n_nodes, bool)
            used[lay.link_ends[~is_ex].ravel()] = True
            junction = np.arange(lay.n_nodes) >= self.n_sites
            self.record["n_taps_used"] = int((used & junction).sum())
            self.record["existing_length_m"] = float(np.sum(lay.links["length_m"][is_ex]))
        lay.run_info.update(self.run_info())
        return lay

    def run_info(self) -> dict:
        """The ``run_info`` entries of this stage (``network`` and ``network_result``)."""
        from ..settings.schema import setting

        s = self.settings
        parts = []
        for k in NETWORK_KEYS:
            v = s.get(k)
            if v is None or (isinstance(v, (list, tuple, dict)) and not v) or \
                    v == setting("network", k).default:      # defaults: not recorded
                continue
            if isinstance(v, dict):
                v = ", ".join(f"{a}={b:g}" if isinstance(b, (int, float)) else f"{a}={b}"
                              for a, b in v.items())
            elif isinstance(v, (list, tuple)):
                v = ", ".join(x if isinstance(x, str) else ":".join(map(str, x)) for x in v)
            parts.append(f"{k}={v}")
        out = {"network": "; ".join(parts)}
        r = self.record
        res = []
        if self.mains is not None:
            res.append(f"existing mains: {r.get('n_existing_links', 0)} existing links "
                       f"({r.get('existing_length_m', 0.0):.1f} m) kept at no build cost, "
                       f"{r.get('n_taps_used', 0)} taps used (fee {self.tap_fee:g} each), "
                       f"{r.get('n_existing_undersized', 0)} existing links too small for their "
                       "new flow")
        if len(self.forced_pairs) or len(self.forbidden_pairs):
            res.append(f"{len(self.forced_pairs)} forced and {len(self.forbidden_pairs)} "
                       "forbidden links")
        lim = r.get("limits")
        if lim is not None:
            txt = self.limits.text([str(v) for v in self.sites.node_id])
            if lim.get("prim_within_limits"):
                res.append(f"limits {txt}: Prim's tree already keeps them (minimum)")
            else:
                pc = lim["prim_cost"]
                extra = 100.0 * (lim["cost"] - pc) / pc if pc and np.isfinite(pc) else float("nan")
                res.append(f"limits {txt}: Esau-Williams tree {lim['esau_williams_cost']:.2f}, "
                           f"after {lim['n_exchanges']} link exchanges {lim['cost']:.2f}, "
                           f"{extra:.2f} % above Prim's tree without limits ({pc:.2f}; a lower "
                           "bound); feasible, not proven minimum")
        out["network_result"] = "; ".join(res)
        if lim is not None and not lim.get("prim_within_limits"):
            out["certificate"] = ("not applicable: tree within limits by Esau-Williams and link "
                                  "exchange (a heuristic); see network_result")
            out["certificate_ok"] = ""
        return out


def network_stage(sites, plan, root_idx) -> NetworkStage:
    """Read the network settings of *plan* (plan_layout keywords) for *sites*."""
    from ..graph.capacitated import Limits
    from ..graph.constraints import link_pairs, read_link_layer

    s = {k: plan.get(k) for k in NETWORK_KEYS}
    n = sites.n
    stage = NetworkStage(sites=sites, n_sites=n, settings=s,
                         tap_fee=float(s.get("tap_fee") or 0.0))
    snap = float(s.get("snap_m") or 1.0)
    if s.get("existing") is not None:
        from ..graph.existing import extend_sites, read_existing
        stage.mains = read_existing(s["existing"], working_crs=sites.crs, site_xy=sites.xy,
                                    site_id=sites.node_id, layer=s.get("existing_layer"),
                                    diameter_field=s.get("existing_diameter_field"),
                                    material_field=s.get("existing_material_field"),
                                    tap_spacing_m=s.get("tap_spacing_m"), snap_m=snap)
        stage.sites = extend_sites(sites, stage.mains)
    else:
        for k in ("existing_layer", "existing_diameter_field", "existing_material_field",
                  "tap_spacing_m"):
            if s.get(k) is not None:
                raise InputError(f"option --{k.replace('_', '-')} needs --existing LAYER; give "
                                 "the layer of existing mains or leave the option out")
    ids = sites.node_id
    forced = [link_pairs(ids, s.get("forced_links") or (), option="--forced-links")]
    forbidden = [link_pairs(ids, s.get("forbidden_links") or (), option="--forbidden-links")]
    if s.get("forced_links_layer"):
        forced.append(read_link_layer(s["forced_links_layer"], ids, sites.xy, sites.crs,
                                      snap_m=snap, option="--forced-links-layer"))
    if s.get("forbidden_links_layer"):
        forbidden.append(read_link_layer(s["forbidden_links_layer"], ids, sites.xy, sites.crs,
                                         snap_m=snap, option="--forbidden-links-layer"))
    stage.forced_pairs = np.unique(np.concatenate(forced).reshape(-1, 2), axis=0)
    stage.forbidden_pairs = np.unique(np.concatenate(forbidden).reshape(-1, 2), axis=0)
    caps = {}
    for sid, c in (s.get("source_capacity_lps") or {}).items():
        i = int(sites.index_of([sid], option="--source-capacity-lps")[0])
        if i not in set(np.asarray(root_idx).tolist()):
            raise InputError(f"option --source-capacity-lps: site {sid!r} is not a source (the "
                             f"sources are {', '.join(str(ids[r]) for r in root_idx)}); give "
                             "each source's capacity as ID=LPS")
        c = float(c)
        if not c > 0:
            raise InputError(f"option --source-capacity-lps: {sid}={c:g} must be > 0 L/s; give "
                             "the flow the source can supply")
        caps[i] = c
    stage.limits = Limits(max_branch_sites=s.get("max_branch_sites"),
                          max_branch_flow_lps=s.get("max_branch_flow_lps"),
                          max_links_per_node=s.get("max_links_per_node"),
                          source_capacity_lps=caps)
    if stage.active and plan.get("layout", "tree") != "tree":
        raise InputError(f"--layout {plan.get('layout')} does not take existing mains, forced or "
                         "forbidden links or limits yet; use --layout tree with them")
    return stage
