"""The pressure branch of :func:`mainspan.hydraulics.design_network`.

Sizes a tree of pressure mains -- by rule (smallest adequate pipe against a
velocity cap and a head-loss budget) or at least cost to the head available
(:mod:`mainspan.hydraulics.sizing`) -- then computes the grade line, the
pressures along every link's ground profile and the checks.

Choices written down
--------------------
* Admissible pipes per link: velocity between ``velocity_min_mps`` and
  ``velocity_max_mps``; pressure class: static head (source head minus the
  lowest ground along the link) plus surge within the pipe's rating.  Where
  no pipe meets the velocity limits the smallest pipe under the cap is used
  (``low_velocity``), or the largest pipe (``no_pipe``); where no pipe
  holds the pressure the highest-rated one is used (``over_rating``).
* Surge: Joukowsky ``a·V/g`` with the Korteweg wave speed of each pipe,
  stopping the link's full design velocity; with ``valve_closing_time_s``
  a closure slower than ``2L/a`` is scaled by ``(2L/a)/t_c`` (Michaud), ``L``
  the length of main from the source to the link's far end.
* High ground between nodes: at a fraction ``t`` along a link the grade
  line stands at least ``(1 − t)·h_min`` above the downstream node's
  (``h_min``: the link's loss in its largest admissible pipe), so the
  least-cost sizing requires ``H_to >= ground + min_pressure_m −
  (1 − t)·h_min`` at every profile point: this guarantees the pressure all
  along the link -- exactly for one pipe, with a small premium otherwise.
* Split links: the larger bore is laid at the upstream end.
* A free source head is chosen with the pumping energy's present value
  (``energy_pv_per_kw`` per kW of shaft power, ``pump_efficiency``).  When
  pressure classes bind, each source's admissible classes are fixed at the
  head it reached and its tree sized again (at most 10 rounds; only the
  sources whose classes changed), from two starts, the cheaper kept per
  source.  What is proved is written to ``summary["sizing_proof"]`` (and so
  to ``run_info``): *optimal* when no class binds; otherwise each source's
  sizing is optimal for the classes fixed at its head, and the optimum lies
  between ``sizing_lower_bound`` -- the sizing without class limits, a
  relaxation, hence a proven lower bound -- and the design's objective
  (``sizing_gap_pct``).  It is not a proof of global optimality: a head
  between two class limits that no round visits is not examined.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..graph.network import FLOW_FROM_TO, cost_to_root
from .catalog import default_catalog, pipe_wall_mm
from .friction import water_kinematic_viscosity_m2ps
from .pressure import hydraulic_grade, pipe_headloss_m, size_pressure
from .pump import RHO_WATER
from .sizing import (
    korteweg_wave_speed_mps,
    least_cost_highs,
    least_cost_tree,
    material_modulus_pa,
    merge_trees,
    surge_head_m,
    tree_objectives,
)

__all__ = ["design_pressure", "energy_weight_per_m"]

_RHO = RHO_WATER  # the pump duty's density, so the energy priced here is the energy billed
_G = 9.80665


def energy_weight_per_m(flow_lps, energy_pv_per_kw, pump_efficiency):
    """Present value of pumping energy per metre of head at a flow (ρ g Q / η × PV per kW).

    Examples
    --------
    89.75 L/s, 1 m of head, η 0.75: 1.174 kW of shaft power per m.

    >>> round(float(energy_weight_per_m(89.75, 1.0, 0.75)), 3)
    1.174
    """
    return np.asarray(flow_lps, float) / 1000.0 * _RHO * _G / 1000.0 / pump_efficiency * energy_pv_per_kw


def _velocity_admissible(v, vmin, vmax):
    """Pipes meeting the velocity limits, with the fallbacks named in the module notes."""
    ok = (v <= vmax) & ((v >= vmin) | (v == 0))
    under = v <= vmax
    low_v = ~ok.any(axis=1) & under.any(axis=1)
    no_pipe = ~under.any(axis=1)
    if low_v.any():
        # smallest bore under the cap: the largest velocity still <= vmax
        vv = np.where(under, v, -np.inf)
        ok[low_v, np.argmax(vv[low_v], axis=1)] = True
    if no_pipe.any():
        ok[no_pipe, np.argmin(v[no_pipe], axis=1)] = True
    return ok, low_v, no_pipe


def design_pressure(s, net, ids, elev, plan, surf, off, st, gr, q_lps, node_pmin, links, nodes, flags_l, flags_n,
                    details, summary, trench_cost_fn, source_flow_lps=None):
    """Size and check pressure mains; fill the field dicts; return the catalog and the pipe pieces.

    Returns
    -------
    cat : PipeCatalog
    pieces : dict of ndarray
        ``link``, ``pipe``, ``length_m``, ``trench_depth_m`` -- one row per
        length of one pipe (two rows for a split link).
    main_pipe : ndarray of int64, shape (L,)
        The pipe at each link's upstream end.
    """
    cat = s.pressure_catalog if s.pressure_catalog is not None else default_catalog()
    need = "hw_c" if s.headloss_method == "hazen_williams" else "roughness_mm"
    for attr in (need, "rating_m"):
        bad = np.flatnonzero(np.isnan(getattr(cat, attr)))
        if bad.size:
            raise InputError(
                f"pipe catalog pipe '{cat.name[bad[0]]}' has no {attr}; pressure design with '{s.headloss_method}' needs it for every pipe"
            )
    n, L = net.n_nodes, net.n_links
    P = len(cat)
    nu = float(water_kinematic_viscosity_m2ps(s.water_temperature_c))
    d = cat.inner_mm / 1000.0
    eps = cat.roughness_mm / 1000.0
    area = np.pi * d * d / 4.0
    q = q_lps / 1000.0
    vel = q[:, None] / area[None, :]
    loss = pipe_headloss_m(q[:, None], surf[:, None], d[None, :], eps[None, :], cat.hw_c[None, :],
                           method=s.headloss_method, nu_m2ps=nu, minor_loss_factor=s.minor_loss_factor)
    loss = np.where(q[:, None] > 0, loss, 0.0)
    depth = s.pressure_cover_m + cat.nominal_mm / 1000.0 + s.bedding_m
    width = cat.nominal_mm / 1000.0 + 2.0 * s.trench_side_clearance_m
    cost = (cat.cost_per_m[None, :] * surf[:, None]
            + trench_cost_fn(np.broadcast_to(depth, (L, P)), np.broadcast_to(width, (L, P)), surf[:, None] * np.ones(P)))
    # surge per link and pipe
    if s.surge_check:
        wave = korteweg_wave_speed_mps(cat.inner_mm, pipe_wall_mm(cat), _catalog_modulus(cat), density_kgpm3=_RHO)
        to_root = cost_to_root(net, plan)[net.to_node]
        surge = surge_head_m(wave[None, :], vel, to_root[:, None], s.valve_closing_time_s, _G)
    else:
        wave = np.full(P, np.nan)
        surge = np.zeros((L, P))
    plink = np.repeat(np.arange(L), np.diff(off))
    g_low = np.minimum.reduceat(gr, off[:-1]) if L else np.zeros(0)
    ok_v, low_v, no_pipe = _velocity_admissible(vel, s.velocity_min_mps, s.velocity_max_mps)
    # class limit: the highest root head at which pipe p may serve link k
    top_head = cat.rating_m[None, :] + g_low[:, None] - surge
    pos = np.empty(n, np.int64)
    pos[net.roots] = np.arange(net.roots.size)
    R = net.roots.size
    src = None
    if s.source_head_m is not None:
        src = np.atleast_1d(np.asarray(s.source_head_m, dtype=np.float64))
        if src.size not in (1, R):
            raise InputError(f"design option 'source_head_m' has {src.size} values for {R} sources; give one, or one per source")
        src = np.broadcast_to(src, (R,)).astype(np.float64)
    link_root = pos[net.root_of[net.from_node]]
    # required head at every node: own minimum pressure; high ground inside the incoming link
    req = elev + node_pmin
    if L:
        # at station fraction t the grade line is at least H_to + (1 − t)·(least loss of the link)
        inner = st > 0  # every station but the upstream end
        t_s = np.where(plan[plink] > 0, st / plan[plink], 1.0)
        least = np.min(np.where(ok_v, loss, np.inf), axis=1)
        need_s = gr + s.min_pressure_m - (1.0 - t_s) * least[plink]
        hi = np.full(L, -np.inf)
        np.maximum.at(hi, plink[inner], need_s[inner])
        np.maximum.at(req, net.to_node, hi)
    method = s.sizing
    notes = summary.setdefault("sizing_notes", [])
    if method == "rule":
        pipe1, pipe2, f2, root_h = _rule(s, cat, q_lps, surf, vel, loss, top_head, ok_v, net, elev, elev + node_pmin, src,
                                          link_root, nu)
        no_pipe_flag = _rule_no_pipe(s, cat, q_lps, surf, nu)
        lc_info = None
    else:
        weight = np.zeros(R)
        if src is None:
            if source_flow_lps is None:  # the design flows leaving each source
                source_flow_lps = np.zeros(n)
                np.add.at(source_flow_lps, net.from_node, np.where(net.parent[net.from_node] < 0, q_lps, 0.0))
                source_flow_lps = source_flow_lps[net.roots]
            weight = energy_weight_per_m(source_flow_lps, s.energy_pv_per_kw_value(), s.pump_efficiency)
        pipe1, pipe2, f2, root_h, lc_info = _least_cost(s, net, loss, cost, ok_v, top_head, req, src, weight,
                                                         link_root, cat, notes)
        no_pipe_flag = no_pipe
    k = np.arange(L)
    has2 = pipe2 >= 0
    q2 = np.where(has2, pipe2, pipe1)
    f1 = 1.0 - f2
    loss1, loss2 = loss[k, pipe1], loss[k, q2]
    link_loss = f1 * loss1 + f2 * loss2
    hgl, root_hgl = hydraulic_grade(net, link_loss, elev, source_head_m=root_h, min_pressure_m=0.0)
    # pressure along each link's profile: the larger bore first, the grade line piecewise linear
    frac = np.where(plan[plink] > 0, st / plan[plink], 0.0)
    cut = f1[plink]
    fall = np.where(frac <= cut, loss1[plink] * frac, loss1[plink] * cut + loss2[plink] * (frac - cut))
    hgl_s = hgl[net.from_node][plink] - fall
    p_min = np.minimum.reduceat(hgl_s - gr, off[:-1]) if L else np.zeros(0)
    if src is None and L and method == "rule":
        # a solved source head must also serve high ground between nodes: lift each
        # tree's grade line by its largest shortfall along the profiles
        short = np.zeros(n)
        np.maximum.at(short, net.root_of[net.from_node], s.min_pressure_m - p_min)
        lift = short[net.root_of]
        hgl = hgl + lift
        root_hgl = root_hgl + short[net.roots]
        p_min = p_min + lift[net.from_node]
    head = hgl - elev
    static = root_hgl[pos[net.root_of]] - elev
    static_max = root_hgl[link_root] - g_low if L else np.zeros(0)
    surge1, surge2 = surge[k, pipe1], np.where(has2, surge[k, q2], 0.0)
    rating1, rating2 = cat.rating_m[pipe1], np.where(has2, cat.rating_m[q2], np.inf)
    rating = np.minimum(rating1, rating2)
    over = (static_max + surge1 > rating1 + 1e-9) | (static_max + surge2 > rating2 + 1e-9)
    node_rating = np.full(n, np.inf)
    np.minimum.at(node_rating, net.from_node, rating1)
    np.minimum.at(node_rating, net.to_node, rating)
    v1, v2 = vel[k, pipe1], np.where(has2, vel[k, q2], vel[k, pipe1])
    tol = 1e-9
    flags_l["no_pipe"] = no_pipe_flag
    flags_l["low_pressure"] = p_min < s.min_pressure_m - 1e-6
    flags_l["over_rating"] = over
    if s.velocity_min_mps > 0:
        flags_l["low_velocity"] = (q_lps > 0) & (np.minimum(v1, v2) < s.velocity_min_mps - tol)
    flags_n["low_pressure"] = head < node_pmin - 1e-6
    flags_n["over_rating"] = static > node_rating + tol
    links.update(
        flow_direction=np.full(L, FLOW_FROM_TO, dtype=object),
        velocity_mps=v1,
        headloss_m=link_loss,
        friction_loss_m=link_loss / (1.0 + s.minor_loss_factor),
        minor_loss_m=link_loss - link_loss / (1.0 + s.minor_loss_factor),
        hgl_from_m=hgl[net.from_node],
        hgl_to_m=hgl[net.to_node],
        pressure_min_m=p_min,
        rating_m=rating,
        surge_head_m=np.maximum(surge1, surge2),
        pipe_2=np.where(has2, cat.name[q2], "").astype(object),
        diameter_2_mm=np.where(has2, cat.inner_mm[q2], np.nan),
        velocity_2_mps=np.where(has2, v2, np.nan),
        length_2_m=f2 * surf,
    )
    nodes.update(hgl_m=hgl, pressure_head_m=head, static_head_m=static, min_pressure_m=node_pmin.copy())
    for kk in np.flatnonzero(no_pipe_flag):
        details.append(("link", kk, "no_pipe", f"{q_lps[kk]:.3g} L/s exceeds the velocity or head-loss limit of the largest pipe; add a larger pipe to the catalog or relax the limits"))
    for kk in np.flatnonzero(flags_l["low_pressure"]):
        details.append(("link", kk, "low_pressure", f"pressure falls to {p_min[kk]:.1f} m along the link (< {s.min_pressure_m:g} m); raise the source head or enlarge the pipes"))
    for kk in np.flatnonzero(over):
        details.append(("link", kk, "over_rating", f"static head {static_max[kk]:.1f} m + surge {max(surge1[kk], surge2[kk]):.1f} m exceeds the pipe rating {rating[kk]:.1f} m; use a higher pressure class, a slower valve closure or a lower source head"))
    if "low_velocity" in flags_l:
        for kk in np.flatnonzero(flags_l["low_velocity"]):
            details.append(("link", kk, "low_velocity", f"{min(v1[kk], v2[kk]):.2f} m/s < {s.velocity_min_mps:g} m/s even in the smallest pipe; plan flushing"))
    for v in np.flatnonzero(flags_n["low_pressure"]):
        details.append(("node", v, "low_pressure", f"pressure head {head[v]:.1f} m < {node_pmin[v]:g} m"))
    for v in np.flatnonzero(flags_n["over_rating"]):
        details.append(("node", v, "over_rating", f"static head {static[v]:.1f} m exceeds the rating {node_rating[v]:.1f} m of a pipe at the node"))
    worst = int(np.argmin(head - node_pmin))
    summary.update(
        sizing=method,
        source_hgl_m=root_hgl.tolist(),
        source_pressure_head_m=(root_hgl - elev[net.roots]).tolist(),
        source_head_solved=s.source_head_m is None,
        min_pressure_head_m=float(head[worst]),
        min_pressure_node=str(ids[worst]),
        max_static_head_m=float(static.max()),
        max_surge_head_m=float(np.max(np.maximum(surge1, surge2))) if L else 0.0,
        headloss_method=s.headloss_method,
        kinematic_viscosity_m2ps=nu,
    )
    if lc_info is not None:
        summary.update(lc_info)
    if not notes:
        summary.pop("sizing_notes")
    # pieces: the upstream (larger) pipe first
    len1 = f1 * surf
    keep2 = np.flatnonzero(has2)
    pieces = {
        "link": np.concatenate([k, keep2]),
        "pipe": np.concatenate([pipe1, pipe2[keep2]]),
        "length_m": np.concatenate([np.where(has2, len1, surf), f2[keep2] * surf[keep2]]),
    }
    pieces["trench_depth_m"] = depth[pieces["pipe"]]
    return cat, pieces, pipe1


def _catalog_modulus(cat):
    """Wall modulus per pipe, Pa: the catalog's ``modulus_gpa`` where given, else by material name."""
    mod = np.asarray(getattr(cat, "modulus_gpa", np.full(len(cat), np.nan)), float)
    if np.all(np.isfinite(mod)):
        return mod * 1e9
    return np.where(np.isfinite(mod), mod * 1e9, material_modulus_pa(cat.material))


def _rule_no_pipe(s, cat, q_lps, surf, nu):
    return size_pressure(q_lps, surf, cat, velocity_max_mps=s.velocity_max_mps,
                         headloss_max_m_per_km=s.headloss_max_m_per_km, method=s.headloss_method, nu_m2ps=nu,
                         minor_loss_factor=s.minor_loss_factor).no_pipe


def _rule(s, cat, q_lps, surf, vel, loss, top_head, ok_v, net, elev, req, src, link_root, nu):
    """Cheapest pipe meeting the velocity cap, the loss budget and the class at the source head.

    The class check needs the source head, which (when solved) depends on the
    sizes: size without classes, solve the head, re-pick with classes, and
    repeat until the pipes stop changing (at most 10 rounds).
    """
    L, P = vel.shape
    ok = (vel <= s.velocity_max_mps)
    if s.headloss_max_m_per_km is not None:
        ok &= loss <= s.headloss_max_m_per_km * surf[:, None] / 1000.0 + 1e-12
    ok &= (vel >= s.velocity_min_mps) | (vel == 0)
    k = np.arange(L)
    price = cat.cost_per_m[None, :] + 0.0 * vel
    # ties on price: the smaller bore (the catalog is sorted by bore)
    order_key = np.where(ok, price, np.inf)
    pipe = np.where(ok.any(axis=1), np.argmin(order_key, axis=1), P - 1)
    root_h = src
    for _ in range(10):
        if src is None:
            lt = cost_to_root(net, loss[k, pipe])
            need = np.full(net.n_nodes, -np.inf)
            np.maximum.at(need, net.root_of, req + lt)
            root_h = need[net.roots]
        cls = top_head >= root_h[link_root][:, None] - 1e-9
        both = ok & cls
        new = np.where(both.any(axis=1), np.argmin(np.where(both, price, np.inf), axis=1),
                       np.where(ok.any(axis=1), np.argmin(order_key, axis=1), P - 1))
        if np.array_equal(new, pipe):
            break
        pipe = new
    if src is None:
        lt = cost_to_root(net, loss[k, pipe])
        need = np.full(net.n_nodes, -np.inf)
        np.maximum.at(need, net.root_of, req + lt)
        root_h = need[net.roots]
    return pipe, np.full(L, -1, np.int64), np.zeros(L), root_h


def _least_cost(s, net, loss, cost, ok_v, top_head, req, src, weight, link_root, cat, notes):
    L, P = loss.shape
    R = net.roots.size
    solver = s.sizing_solver
    exact_tree = s.sizing_split and not s.sizing_monotone
    if solver == "auto":
        solver = "tree" if exact_tree or L > s.highs_max_links else "highs"
    key = cat.nominal_mm if s.sizing_monotone else None

    def solve(adm, head, cap, only=None, prev=None):
        if solver == "highs":
            return least_cost_highs(net, loss, cost, adm, req, root_head_m=head, root_weight=weight, root_cap_m=cap,
                                    split=s.sizing_split, monotone_key=key)
        return least_cost_tree(net, loss, cost, adm, req, root_head_m=head, root_weight=weight, root_cap_m=cap,
                               solve_roots=only, previous=prev)

    def with_class(h_root):
        cls = top_head >= h_root[link_root][:, None] - 1e-9
        adm = ok_v & cls
        none = ~adm.any(axis=1)
        if none.any():
            # no class holds the pressure: the highest-rated pipe within the velocity limits
            best = np.argmax(np.where(ok_v, top_head, -np.inf), axis=1)
            adm[none, best[none]] = True
        return adm

    def changed_roots(adm_a, adm_b):
        diff = np.zeros(R, bool)
        np.logical_or.at(diff, link_root, np.any(adm_a != adm_b, axis=1))
        return diff

    rounds = 1
    exact = True
    bound = None
    if src is not None:
        res = solve(with_class(src), src, None)
    else:
        # 1. without the class limits: a relaxation, so if its pipes hold their own static head
        #    and surge it is the optimum; otherwise its objective bounds the optimum from below
        res = solve(ok_v, None, None)
        k_all = np.arange(L)
        if L and np.all(res.feasible):
            h = res.root_head_m[link_root] - 1e-9
            q2 = np.where(res.pipe_2 >= 0, res.pipe_2, res.pipe)
            held = (top_head[k_all, res.pipe] >= h) & (top_head[k_all, q2] >= h)
        else:
            held = np.zeros(L, bool)
        if L and not held.all():
            # 2. classes bind: per source, fix the classes at a head, size with the head capped there,
            #    refix at the head reached, until that source's classes stop changing (only the sources
            #    whose classes changed are sized again); started from the relaxation's head and from the
            #    highest head every link can hold, the cheaper outcome kept per source.  Each sizing is
            #    exact for its classes; the relaxation bounds the optimum from below (see the notes).
            exact = False
            bound = float(res.objective)
            cap = np.full(R, np.inf)
            link_cap = np.max(np.where(ok_v, top_head, -np.inf), axis=1)
            np.minimum.at(cap, link_root, link_cap)
            # the sources whose relaxed pipes all hold their classes keep the relaxation: optimal there
            binding = np.zeros(R, bool)
            np.logical_or.at(binding, link_root, ~held)
            tree = solver == "tree"
            best, best_obj = None, np.full(R, np.inf)
            for start in (np.minimum(res.root_head_m, cap), cap):
                adm = with_class(start)
                cand = solve(adm, None, start, binding, res) if tree else solve(adm, None, start)
                todo = binding.copy()
                for _ in range(9):
                    todo &= cand.feasible
                    if not todo.any():
                        break
                    adm_new = with_class(cand.root_head_m)
                    todo &= changed_roots(adm, adm_new)
                    if not todo.any():
                        break
                    rounds += 1
                    adm = adm_new
                    cand = solve(adm, None, cand.root_head_m, todo, cand) if tree else \
                        solve(adm, None, cand.root_head_m)
                obj = np.where(cand.feasible, tree_objectives(net, cost, cand, weight), np.inf)
                if best is None:
                    best, best_obj = cand, obj
                else:
                    better = obj < best_obj
                    if better.any():
                        best = merge_trees(net, loss, cost, best, cand, better, weight)
                        best_obj = np.where(better, obj, best_obj)
            bad = binding & ~np.isfinite(best_obj)
            if bad.any():
                notes.append("no pressure class in the catalog holds the head this tree needs; sized without the "
                             "class limit and flagged over_rating")
            res = merge_trees(net, loss, cost, res, best, binding & ~bad, weight)
    if not np.all(res.feasible):
        notes.append("the source head given cannot meet every minimum pressure even with the largest pipes; "
                     f"the tree needs at least {np.nanmax(res.root_min_head_m):.2f} m above datum")
    p1, p2, f2 = res.pipe, res.pipe_2, res.fraction_2
    if not s.sizing_split and solver == "tree":
        # one pipe per link: the larger of the two pieces keeps every pressure (a bound, not proven optimal)
        lower = res.cost
        p2 = np.full(L, -1, np.int64)
        f2 = np.zeros(L)
        notes.append(f"one pipe per link on {L} links (> highs_max_links): split links rounded to their larger "
                     f"pipe; the split optimum {lower:,.2f} bounds the cost from below")
    if s.sizing_monotone and solver == "tree":
        p1, p2, f2 = _monotone_repair(net, loss, cost, ok_v, cat.nominal_mm, p1, p2, f2)
        notes.append("non-increasing size downstream on a large tree: the split optimum's pipes raised where a "
                     "link was smaller than a link below it (feasible, not proven optimal)")
    root_h = res.root_head_m if src is None else src
    info = {"sizing_solver": solver, "sizing_rounds": rounds, "sizing_optimum": float(res.cost),
            "sizing_objective": float(res.objective), "sizing_classes_bind": not exact,
            "sizing_min_source_hgl_m": [float(x) for x in res.root_min_head_m]}
    info["sizing_proof"] = _proof_text(s, solver, exact, src is not None)
    if bound is not None:
        # the relaxation without class limits is a proven lower bound on the optimum
        info["sizing_lower_bound"] = bound
        info["sizing_gap_pct"] = (100.0 * (res.objective - bound) / abs(bound)) if bound else 0.0
    return p1, p2, f2, np.asarray(root_h, float), info


def _proof_text(s, solver, exact, given_head):
    """What the least-cost sizing proves, for the summary and ``run_info`` (see the module notes)."""
    if not s.sizing_split and solver == "tree":
        return "bound: one pipe per link rounded up from the split optimum (which bounds the cost from below)"
    if s.sizing_monotone and solver == "tree":
        return "feasible: split optimum repaired to non-increasing sizes downstream (not proven optimal)"
    if exact:
        return ("optimal: " + ("least pipe + trench cost at the source head given" if given_head else
                               "least pipe + trench + energy present value with the source head chosen") +
                (", split links, every class held" if s.sizing_split else ", one pipe per link (HiGHS)"))
    return ("classes bind: each source's sizing is optimal for the pressure classes fixed at the head it "
            "reached (a fixed point of class fixing, the better of two starts per source); the optimum lies "
            "between sizing_lower_bound (the sizing without class limits) and this design, see sizing_gap_pct")


def _monotone_repair(net, loss, cost, ok_v, key, p1, p2, f2):
    """Raise links smaller than a link below them (bottom-up); lower losses keep every pressure."""
    L = loss.shape[0]
    p1, p2, f2 = p1.copy(), p2.copy(), f2.copy()
    k_all = np.arange(L)
    for u in net.order[::-1]:
        kk = net.parent_link[u]
        if kk < 0:
            continue
        c0, c1 = net.children_offsets[u], net.children_offsets[u + 1]
        below = net.parent_link[net.children[c0:c1]]
        if below.size == 0:
            continue
        big_below = np.max(np.maximum(key[p1[below]], np.where(p2[below] >= 0, key[np.maximum(p2[below], 0)], -np.inf)))
        small_here = key[p1[kk]] if p2[kk] < 0 else min(key[p1[kk]], key[p2[kk]])
        if small_here >= big_below:
            continue
        cur_loss = (1 - f2[kk]) * loss[kk, p1[kk]] + f2[kk] * loss[kk, p2[kk] if p2[kk] >= 0 else p1[kk]]
        cand = ok_v[kk] & (key >= big_below)
        if not cand.any():
            cand = key >= big_below
        fine = cand & (loss[kk] <= cur_loss + 1e-12)
        pick = np.argmin(np.where(fine, cost[kk], np.inf)) if fine.any() else np.argmin(np.where(cand, loss[kk], np.inf))
        p1[kk], p2[kk], f2[kk] = pick, -1, 0.0
    del k_all
    return p1, p2, f2
