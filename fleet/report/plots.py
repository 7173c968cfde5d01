"""Figure builders for the deployment report.

Each function takes arrays the caller computed and returns a new
:class:`matplotlib.figure.Figure` drawn with the Agg renderer.  No pyplot
state is touched, so figures never leak between calls or threads; the
caller (or :mod:`fleet.report.html`) saves or embeds them.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.patches import Patch
from matplotlib.ticker import FuncFormatter, MaxNLocator, PercentFormatter

__all__ = ["site_map", "reliability_histogram", "soc_trace", "cost_by_kit_type", "cost_curves",
           "monthly_energy_balance"]

_WIDTH_IN, _HEIGHT_IN = 8.0, 4.5
_MAX_LEGEND_ENTRIES = 20


def _new_figure(width: float = _WIDTH_IN, height: float = _HEIGHT_IN) -> Figure:
    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _thousands(value, _pos=None) -> str:
    return f"{value:,.0f}"


def site_map(longitude, latitude, labels, title: str = "Sites by kit type") -> Figure:
    """Sites as points coloured by kit label.

    Parameters
    ----------
    longitude, latitude : array-like of float
        WGS84 coordinates (degrees east, degrees north).  Sites with a missing
        coordinate are left out.
    labels : array-like
        Kit label per site; missing labels are shown as "no kit".
    title : str

    Notes
    -----
    No base map is drawn (nothing is downloaded).  The axes use a plate
    carrée view with the aspect set to 1 / cos(mean latitude), so that a
    degree of longitude and a degree of latitude cover the same distance on
    the page near the middle of the map.
    """
    lon = np.asarray(longitude, dtype=float)
    lat = np.asarray(latitude, dtype=float)
    names = np.asarray(["no kit" if pd.isna(v) else str(v) for v in labels], dtype=object)
    if not (lon.shape == lat.shape == names.shape):
        raise ValueError("longitude, latitude and labels must have the same length")
    ok = np.isfinite(lon) & np.isfinite(lat)
    lon, lat, names = lon[ok], lat[ok], names[ok]

    # Most frequent kit first so that its colour and legend entry come first.
    kinds, counts = np.unique(names, return_counts=True) if len(names) else ([], [])
    order = [k for _, k in sorted(zip(-np.asarray(counts), kinds))]
    colours = _colours(len(order))
    groups = site_clusters(lon, lat)
    fig = _new_figure(3.2 + 3.6 * max(len(groups), 1), 5.0)
    axes = fig.subplots(1, max(len(groups), 1), squeeze=False)[0]
    for ax, members in zip(axes, groups or [np.array([], dtype=int)]):
        for i, kind in enumerate(order):
            sel = members[names[members] == kind]
            ax.scatter(lon[sel], lat[sel], s=18, color=colours[i], edgecolors="white",
                       linewidths=0.4, label=f"{kind} ({int((names == kind).sum()):,})", zorder=2)
        ax.set_xlabel("longitude (° east)")
        ax.grid(True, linewidth=0.4, alpha=0.5, zorder=0)
        if len(members):
            mean_lat = float(np.clip(np.mean(lat[members]), -80.0, 80.0))
            ax.set_aspect(1.0 / math.cos(math.radians(mean_lat)), adjustable="datalim")
        else:
            ax.text(0.5, 0.5, "no sites with coordinates", ha="center", va="center",
                    transform=ax.transAxes)
    axes[0].set_ylabel("latitude (° north)")
    fig.suptitle(title)
    if order:
        seen = {}
        for ax in axes:
            for h, t in zip(*ax.get_legend_handles_labels()):
                seen.setdefault(t, h)
        texts, handles = list(seen), list(seen.values())
        if len(handles) > _MAX_LEGEND_ENTRIES:
            handles, texts = handles[:_MAX_LEGEND_ENTRIES], texts[:_MAX_LEGEND_ENTRIES]
            texts[-1] = texts[-1] + " …"
        axes[-1].legend(handles, texts, title="kit type (sites)", loc="upper left",
                        bbox_to_anchor=(1.01, 1.0), fontsize="small", frameon=False)
    return fig


def site_clusters(longitude, latitude, gap_deg: float = 5.0) -> list[np.ndarray]:
    """Split sites into groups separated by more than ``gap_deg`` in longitude
    or latitude, so that distant regions get a map panel each (indices into the inputs)."""
    lon = np.asarray(longitude, dtype=float)
    lat = np.asarray(latitude, dtype=float)
    groups = [np.arange(len(lon))] if len(lon) else []
    for coord in (lon, lat):
        split = []
        for g in groups:
            order = g[np.argsort(coord[g])]
            cuts = np.flatnonzero(np.diff(coord[order]) > gap_deg) + 1
            split += [part for part in np.split(order, cuts) if len(part)]
        groups = split
    return sorted(groups, key=lambda g: float(lon[g].mean()))


def _colours(n: int):
    from matplotlib import colormaps

    if n <= 10:
        cmap = colormaps["tab10"]
        return [cmap(i) for i in range(max(n, 1))]
    cmap = colormaps["tab20"]
    return [cmap(i % 20) for i in range(n)]


def reliability_histogram(unmet_fraction, target: float,
                          title: str = "Unmet energy per site in the design weather year", what: str = "sites") -> Figure:
    """Distribution of per-site unmet energy fraction with the target marked.

    Parameters
    ----------
    unmet_fraction : array-like of float
        Unmet energy fraction per site (0 to 1) in the design weather year.
    target : float
        The program's largest allowed unmet energy fraction (0 to 1).
    """
    values = np.asarray(unmet_fraction, dtype=float)
    values = values[np.isfinite(values)]
    target = float(target)
    fig = _new_figure()
    ax = fig.add_subplot()
    upper = max(float(values.max()) if len(values) else 0.0, target) * 1.25
    upper = upper if upper > 0 else 0.01
    bins = np.linspace(0.0, upper, 31)
    if len(values):
        ax.hist(np.clip(values, 0.0, upper), bins=bins, color="#4C72B0", edgecolor="white")
    above = int((values > target).sum())
    ax.axvline(target, color="#C44E52", linewidth=2,
               label=f"target {target:.1%} ({above:,} of {len(values):,} {what} above)")
    ax.xaxis.set_major_formatter(PercentFormatter(xmax=1.0, decimals=1))
    ax.set_xlim(0.0, upper)
    ax.set_xlabel("unmet energy fraction (% of demand)")
    ax.set_ylabel(f"{what} (count)")
    ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    ax.yaxis.set_major_formatter(FuncFormatter(_thousands))
    ax.set_title(title)
    ax.legend(loc="upper right", frameon=False)
    return fig


def soc_trace(hours, soc, disconnected, title: str = "Battery state of charge") -> Figure:
    """A year of battery state of charge with load-disconnect hours shaded.

    Parameters
    ----------
    hours : array-like
        Hour of the year (h, numbers) or timestamps.
    soc : array-like of float
        State of charge as a fraction of capacity (0 to 1).
    disconnected : array-like of bool
        True in hours when the loads were disconnected.
    """
    soc = np.asarray(soc, dtype=float)
    off = np.asarray(disconnected, dtype=bool)
    stamps = pd.Index(hours)
    if not (len(stamps) == len(soc) == len(off)):
        raise ValueError("hours, soc and disconnected must have the same length")
    if pd.api.types.is_datetime64_any_dtype(stamps):
        x = stamps
        xlabel = "date"
    else:
        x = np.asarray(stamps, dtype=float) / 24.0
        xlabel = "day of year (d)"

    fig = _new_figure(10.0, 4.0)
    ax = fig.add_subplot()
    if off.any():
        ax.fill_between(x, 0, 1, where=off, step="mid", color="#C44E52", alpha=0.25,
                        linewidth=0, transform=ax.get_xaxis_transform(), zorder=1)
    ax.plot(x, soc, color="#4C72B0", linewidth=0.6, zorder=2)
    ax.set_ylim(0.0, 1.0)
    ax.yaxis.set_major_formatter(PercentFormatter(xmax=1.0, decimals=0))
    ax.set_ylabel("state of charge (% of capacity)")
    ax.set_xlabel(xlabel)
    if len(x):
        ax.set_xlim(x[0], x[-1])
    ax.set_title(title)
    handles = [ax.lines[0], Patch(color="#C44E52", alpha=0.25)]
    ax.legend(handles, ["state of charge", f"loads disconnected ({int(off.sum()):,} h)"],
              loc="lower left", frameon=False, fontsize="small")
    return fig


def cost_by_kit_type(labels, capex, lifecycle,
                     title: str = "Capex and lifecycle cost by kit type") -> Figure:
    """Side-by-side bars of capex and lifecycle cost per kit type.

    Parameters
    ----------
    labels : array-like of str
        Kit type labels.
    capex, lifecycle : array-like of float
        Costs in USD (per kit or program totals, as the caller states in the
        title).
    """
    names = [str(v) for v in labels]
    capex = np.asarray(capex, dtype=float)
    lifecycle = np.asarray(lifecycle, dtype=float)
    if not (len(names) == len(capex) == len(lifecycle)):
        raise ValueError("labels, capex and lifecycle must have the same length")
    fig = _new_figure(max(6.0, 1.0 + 0.9 * len(names)), 4.5)
    ax = fig.add_subplot()
    x = np.arange(len(names))
    width = 0.38
    ax.bar(x - width / 2, np.nan_to_num(capex), width, label="capex", color="#4C72B0")
    ax.bar(x + width / 2, np.nan_to_num(lifecycle), width, label="lifecycle cost (NPV)",
           color="#DD8452")
    ax.set_xticks(x, names, rotation=30 if len(names) > 4 else 0,
                  ha="right" if len(names) > 4 else "center")
    ax.set_ylabel("cost (USD)")
    ax.yaxis.set_major_formatter(FuncFormatter(_thousands))
    ax.set_title(title)
    ax.legend(frameon=False)
    ax.grid(True, axis="y", linewidth=0.4, alpha=0.5)
    ax.set_axisbelow(True)
    return fig


def cost_curves(curves: pd.DataFrame, title: str = "Lifecycle cost of the catalogue") -> Figure:
    """Lifecycle cost of the best catalogue against the number of kit types allowed and
    against the energy target, one line per scheme (two panels).

    Parameters
    ----------
    curves : DataFrame
        As :func:`fleet.plan.cost_curves` returns: ``scheme``, ``varied`` ("kit types" or
        "energy target (unmet fraction)"), ``value``, ``lifecycle cost with type costs (USD)``,
        ``units served``, ``units in scheme``. Points that leave units without a kit are drawn
        hollow (their cost is not comparable: fewer units are paid for).
    """
    fig = _new_figure(10.0, 4.2)
    axes = fig.subplots(1, 2)
    panels = (("kit types", axes[0], "kit types allowed in the catalogue (count)"),
              ("energy target (unmet fraction)", axes[1], "energy target: largest unmet fraction (% of demand)"))
    cost_col = "lifecycle cost with type costs (USD)"
    colours = {"shs": "#4C72B0", "minigrid": "#DD8452"}
    names = {"shs": "solar home systems", "minigrid": "minigrids"}
    for varied, ax, xlabel in panels:
        part = curves[curves.varied == varied] if len(curves) else curves
        for scheme, g in part.groupby("scheme", sort=False) if len(part) else []:
            g = g.sort_values("value")
            full = (g["units served"] >= g["units in scheme"]).to_numpy()
            colour = colours.get(scheme, "#55A868")
            x = g["value"].to_numpy(dtype=float)
            y = g[cost_col].to_numpy(dtype=float)
            ax.plot(x, y, color=colour, linewidth=1.5, label=names.get(scheme, str(scheme)))
            ax.scatter(x[full], y[full], color=colour, zorder=3, s=22)
            ax.scatter(x[~full], y[~full], facecolors="white", edgecolors=colour, zorder=3, s=22,
                       label=f"{names.get(scheme, scheme)}: some units without a kit" if (~full).any() else None)
        ax.set_xlabel(xlabel)
        ax.set_ylabel("lifecycle cost incl. type costs (USD)")
        ax.yaxis.set_major_formatter(FuncFormatter(_thousands))
        if varied == "kit types":
            ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        else:
            ax.xaxis.set_major_formatter(PercentFormatter(xmax=1.0, decimals=0))
        ax.grid(True, linewidth=0.4, alpha=0.5)
        if ax.lines:
            ax.legend(frameon=False, fontsize="small")
    fig.suptitle(title)
    return fig


_MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")


def monthly_energy_balance(monthly: pd.DataFrame, title: str = "Monthly energy balance") -> Figure:
    """Where a month's energy came from and went: array energy used and spilled (left bars),
    demand served and unmet (right bars), in kWh.

    Parameters
    ----------
    monthly : DataFrame indexed by month (1..12) with ``pv_used_kwh``, ``pv_spilled_kwh``,
        ``served_kwh`` and ``unmet_kwh`` (see :func:`fleet.outputs.monthly_balance`).
    """
    m = monthly.reindex(range(1, 13)).fillna(0.0)
    fig = _new_figure(9.0, 4.2)
    ax = fig.add_subplot()
    x = np.arange(12)
    w = 0.38
    ax.bar(x - w / 2, m.pv_used_kwh, w, color="#E1B12C", label="array energy used")
    ax.bar(x - w / 2, m.pv_spilled_kwh, w, bottom=m.pv_used_kwh, color="#F5DE9A", label="array energy spilled (battery full)")
    ax.bar(x + w / 2, m.served_kwh, w, color="#4C72B0", label="demand served")
    ax.bar(x + w / 2, m.unmet_kwh, w, bottom=m.served_kwh, color="#C44E52", label="demand unmet")
    ax.set_xticks(x, _MONTHS)
    ax.set_ylabel("energy (kWh per month)")
    ax.yaxis.set_major_formatter(FuncFormatter(_thousands))
    ax.grid(True, axis="y", linewidth=0.4, alpha=0.5)
    ax.set_axisbelow(True)
    ax.legend(frameon=False, fontsize="small", ncols=2, loc="upper center", bbox_to_anchor=(0.5, -0.1))
    ax.set_title(title)
    return fig
