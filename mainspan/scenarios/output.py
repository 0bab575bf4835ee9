"""Writing a scenario comparison to a GeoPackage."""

from __future__ import annotations

import os

import numpy as np

__all__ = ["layer_names", "write_scenarios"]

# ------------------------------------------------------------------------------ output
def _frames(sset):
    import geopandas as gpd
    import pandas as pd
    import shapely

    out = {}
    for name in sset.names:
        frames = sset.results[name].layout.to_frames(suffix=f"_{name}")
        out.update({k: v for k, v in frames.items() if not k.startswith("link_profiles")})
    lines = shapely.linestrings(sset.links_xy) if len(sset.links_xy) else np.array([], object)
    out["scenario_links"] = gpd.GeoDataFrame(
        pd.DataFrame({k: (v.astype(str) if np.asarray(v).dtype == object else v)
                      for k, v in sset.links.items()}),
        geometry=np.asarray(lines, dtype=object), crs=sset.crs)
    out["scenario_summary"] = pd.DataFrame(
        {k: (np.asarray(v).astype(str) if np.asarray(v).dtype == object else v)
         for k, v in sset.summary.items()})
    return out


def layer_names(names):
    """Layer names :func:`write_scenarios` writes for scenarios *names* (base included)."""
    out = []
    for n in names:
        out += [f"links_{n}", f"nodes_{n}", f"run_info_{n}"]
    return out + ["scenario_links", "scenario_summary"]


def write_scenarios(sset, path, *, overwrite=False):
    """Write every scenario's layers and the comparison into one GeoPackage.

    Layers: ``links_<scenario>``, ``nodes_<scenario>``, ``run_info_<scenario>``
    (and ``quantities_<scenario>`` when designed) for each scenario, the base
    as ``*_base``; ``scenario_links`` and ``scenario_summary`` (see the module
    notes).  Ground profiles (``link_profiles``) are left out to keep the
    file small; ``mainspan plan`` writes them for one scenario.  Other layers
    in the file are kept; existing layers of these names are refused unless
    ``overwrite=True``.

    Parameters
    ----------
    sset : ScenarioSet
    path : str or os.PathLike
        A ``.gpkg`` file.
    overwrite : bool, default=False

    Returns
    -------
    str
        The path written.
    """
    from ..writers.gpkg import write_layers

    path = os.fspath(path)
    write_layers(path, _frames(sset), overwrite=overwrite)
    return path
