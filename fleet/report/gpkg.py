"""Sites (and depots) as a GeoPackage for GIS users."""

from __future__ import annotations

import re
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd

from ._common import is_missing

__all__ = ["write_sites_gpkg", "depot_layer_names", "OUTPUT_CRS"]

#: Coordinate reference system of the written layers (WGS84 degrees).
OUTPUT_CRS = "EPSG:4326"

# GeoPackage keeps its own feature id in this column name.
_RESERVED = {"fid"}


def _to_text(value):
    if is_missing(value):
        return None
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    return str(value)


def _safe_layer(frame: gpd.GeoDataFrame, what: str) -> gpd.GeoDataFrame:
    """A copy whose columns a GeoPackage driver accepts.

    Numbers, booleans and dates stay as they are; text stays text; object
    columns holding anything else (mixed numbers and text, lists, dicts) and
    categoricals are written as text, with missing values left empty.
    """
    if not isinstance(frame, gpd.GeoDataFrame):
        raise TypeError(f"{what} must be a GeoDataFrame, got {type(frame).__name__}")
    if frame.crs is None:
        raise ValueError(f"{what} has no CRS; set it (sites are in {OUTPUT_CRS}) before writing")
    layer = frame.copy()
    if any(name is not None for name in layer.index.names):
        layer = layer.reset_index()
    else:
        layer = layer.reset_index(drop=True)
    if layer.crs.to_epsg() != 4326:
        layer = layer.to_crs(OUTPUT_CRS)
    geometry_name = layer.geometry.name
    renames = {}
    for name in layer.columns:
        if name == geometry_name:
            continue
        text = str(name)
        if text.lower() in _RESERVED:
            text = f"{text}_value"
        if text != name:
            renames[name] = text
    if renames:
        layer = layer.rename(columns=renames)
    for name in layer.columns:
        if name == geometry_name:
            continue
        column = layer[name]
        if isinstance(column.dtype, pd.CategoricalDtype):
            layer[name] = pd.Series([_to_text(v) for v in column], index=layer.index, dtype=object)
        elif pd.api.types.is_object_dtype(column.dtype):
            present = [v for v in column if not is_missing(v)]
            if all(isinstance(v, str) for v in present):
                continue
            if present and all(isinstance(v, (bool, np.bool_)) for v in present):
                continue
            layer[name] = pd.Series([_to_text(v) for v in column], index=layer.index, dtype=object)
    return layer


def depot_layer_names(depots) -> dict[str, str]:
    """A GeoPackage layer name per depot: ``depot_`` + the name with every character other than
    ASCII letters, digits and ``_`` replaced by ``_`` (lower case), made unique with a suffix."""
    names: dict[str, str] = {}
    used: set[str] = {"sites", "depots"}
    for depot in dict.fromkeys(_to_text(d) or "(none)" for d in depots):
        base = "depot_" + (re.sub(r"[^0-9A-Za-z_]", "_", depot).strip("_").lower() or "unnamed")
        name, i = base, 2
        while name in used:
            name, i = f"{base}_{i}", i + 1
        used.add(name)
        names[depot] = name
    return names


def write_sites_gpkg(path, sites_gdf: gpd.GeoDataFrame,
                     depots_gdf: gpd.GeoDataFrame | None = None, *, depot_column: str | None = "depot") -> Path:
    """Write layer ``sites``, one layer per depot with that depot's sites (named by
    :func:`depot_layer_names`; when ``depot_column`` is a column of the sites) and ``depots``
    (if given) to a GeoPackage.

    Parameters
    ----------
    path : str or os.PathLike
        ``.gpkg`` file to write; an existing file is replaced.
    sites_gdf : geopandas.GeoDataFrame
        One row a site, any columns; must have a CRS.  Written in
        EPSG:4326 (reprojected if needed).
    depots_gdf : geopandas.GeoDataFrame, optional
        Depots, written as layer ``depots``.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    path = Path(path)
    sites = _safe_layer(sites_gdf, "sites_gdf")
    depots = None if depots_gdf is None else _safe_layer(depots_gdf, "depots_gdf")
    if path.exists():
        path.unlink()
    sites.to_file(path, layer="sites", driver="GPKG", engine="pyogrio")
    if depot_column is not None and depot_column in sites.columns:
        text = sites[depot_column].map(lambda v: _to_text(v) or "(none)")
        for depot, layer in depot_layer_names(text).items():
            sites[text == depot].to_file(path, layer=layer, driver="GPKG", engine="pyogrio", mode="a")
    if depots is not None:
        depots.to_file(path, layer="depots", driver="GPKG", engine="pyogrio", mode="a")
    return path
