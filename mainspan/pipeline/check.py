"""``mainspan check``: validate every input of a run without computing a layout.

Reports the sites (count, roles, extent, working CRS), each raster (CRS,
size, cell size, extent, nodata), which sites each raster covers, and a
memory estimate for the plan; then runs the plan itself in memory (a dry
run, nothing written) so that ``check`` refuses exactly what ``plan``
refuses.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from ..errors import DataFileError, InputError

__all__ = ["check_inputs", "CheckReport"]


@dataclass
class CheckReport:
    lines: list = field(default_factory=list)
    problems: list = field(default_factory=list)

    @property
    def ok(self):
        return not self.problems

    def text(self):
        out = list(self.lines)
        if self.problems:
            out.append(f"problems ({len(self.problems)}):")
            out += [f"  - {p}" for p in self.problems]
        else:
            out.append("inputs OK")
        return "\n".join(out)


def _raster_info(path, working_crs, xy, raster_crs=None):
    import rasterio
    from pyproj import CRS, Transformer

    if not os.path.exists(path):
        raise DataFileError(f"raster {path!r} does not exist; check the path")
    try:
        ds = rasterio.open(path)
    except Exception as exc:
        raise DataFileError(f"raster {path!r} cannot be opened by GDAL: {exc}") from None
    with ds:
        crs = ds.crs
        if crs is None:
            if raster_crs is None:
                raise InputError(f"raster {path!r} has no CRS; pass --raster-crs EPSG:xxxx "
                                 "(the CRS of its grid)")
            rcrs = CRS.from_user_input(raster_crs)
        else:
            rcrs = CRS.from_user_input(crs.to_wkt())
        t = Transformer.from_crs(working_crs, rcrs, always_xy=True)
        x, y = t.transform(xy[:, 0], xy[:, 1])
        b = ds.bounds
        inside = (x >= b.left) & (x <= b.right) & (y >= b.bottom) & (y <= b.top)
        info = {
            "crs": rcrs.name, "size": f"{ds.width} x {ds.height}",
            "cell": f"{abs(ds.res[0]):g} x {abs(ds.res[1]):g}",
            "extent": f"{b.left:.1f}, {b.bottom:.1f} – {b.right:.1f}, {b.top:.1f}",
            "nodata": ds.nodata, "dtype": ds.dtypes[0],
            "bytes": ds.width * ds.height * np.dtype(ds.dtypes[0]).itemsize,
        }
    return info, inside


def _window_bytes(path, sites, raster_crs, name):
    """Raster cells a run keeps for this raster: the window its sites touch, as read."""
    from ..ground.surfaces import open_surface

    with open_surface(path, working_crs=sites.crs, raster_crs=raster_crs, name=name) as s:
        s.focus(sites.xy)
        return s.resident_bytes()


def check_inputs(settings, *, dry_run=True) -> CheckReport:
    """Validate the inputs named by merged settings (see :mod:`mainspan.settings.project`).

    Parameters
    ----------
    settings : dict
        Merged settings, as ``mainspan plan`` uses them.
    dry_run : bool, default True
        When the quick checks pass, also run the whole plan in memory (nothing
        is written), so that every refusal of ``plan`` is reported here too.

    Returns
    -------
    CheckReport
    """
    from ..graph.candidates import CANDIDATE_BUILDERS
    from ..settings.project import plan_kwargs
    from ..sites.read import read_sites

    rep = CheckReport()
    path, read_kw, plan_kw, _ = plan_kwargs(settings)
    sites = read_sites(path, **read_kw)
    roles, counts = np.unique(sites.role.astype(str), return_counts=True)
    lo, hi = sites.xy.min(axis=0), sites.xy.max(axis=0)
    rep.lines += [
        f"sites           {path}" + (f" (layer {sites.layer})" if sites.layer else ""),
        f"  count         {sites.n} ({', '.join(f'{c} {r}' for r, c in zip(roles, counts))})",
        f"  total demand  {sites.demand.sum():.2f} L/s",
        f"  working CRS   {sites.crs.name} — {sites.crs_reason}",
        f"  extent        {lo[0]:.1f}, {lo[1]:.1f} – {hi[0]:.1f}, {hi[1]:.1f} "
        f"({hi[0] - lo[0]:.0f} m x {hi[1] - lo[1]:.0f} m)",
    ]
    if sites.merged:
        rep.lines.append(f"  merged        {len(sites.merged)} coincident site(s)")
    method = plan_kw.get("candidates", "delaunay")
    for part in str(method).split("+"):
        CANDIDATE_BUILDERS.get(part.strip())
    roots = plan_kw.get("roots")
    if roots:
        sites.index_of(roots)
    rasters = []
    if plan_kw.get("terrain"):
        rasters.append(("terrain", plan_kw["terrain"]))
    lc = plan_kw.get("land_cost")
    if isinstance(lc, dict):
        rasters += list(lc.items())
    elif lc:
        rasters.append(("land_cost", lc))
    raster_bytes = 0
    for name, p in rasters:
        info, inside = _raster_info(p, sites.crs, sites.xy, plan_kw.get("raster_crs"))
        raster_bytes += _window_bytes(p, sites, plan_kw.get("raster_crs"), name)
        rep.lines += [f"raster {name:<9}{p}",
                      f"  CRS {info['crs']}, {info['size']} cells of {info['cell']}, "
                      f"{info['dtype']}, nodata {info['nodata']}",
                      f"  extent        {info['extent']}",
                      f"  covers        {int(inside.sum())} of {sites.n} sites"]
        if not inside.all():
            ids = sites.node_id[~inside].astype(str)
            rep.problems.append(f"{(~inside).sum()} site(s) outside raster {name!r} ({p}): "
                                f"{', '.join(ids[:8])}{' …' if len(ids) > 8 else ''}")
    if plan_kw.get("cost_expression"):
        from ..ground.expression import parse_expression
        names = list(lc.keys()) if isinstance(lc, dict) else ["land_cost"]
        parse_expression(plan_kw["cost_expression"], names=names)
    m_est = 3 * sites.n if "delaunay" in str(method) else plan_kw.get("k", 8) * sites.n
    est = m_est * 8 * 24 + sites.n * 8 * 20 + raster_bytes
    rep.lines.append(f"memory estimate ~{est / 2**20:.0f} MiB for about {m_est:,} candidate links")
    if dry_run and not rep.problems:
        # The same validation as 'plan', by running it (nothing is written): check never
        # says OK where plan would refuse (an all-nodata DEM, a negative land cost, ...).
        from .layout import plan_layout
        try:
            lay = plan_layout(sites, **plan_kw)
        except (InputError, DataFileError) as exc:
            rep.problems.append(" ".join(str(exc).split()))
        else:
            rep.lines.append(f"dry run         planned {lay.n_links} links, total cost "
                             f"{lay.total('cost'):,.1f} (nothing written)")
    return rep
