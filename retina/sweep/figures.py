"""Figures of a sweep: each collected output against one or two swept axes.

Rules (owned here)
------------------
- ``x`` is the first swept dimension unless given.  With a second dimension ``y`` (default: the
  second swept dimension, if any) the output is drawn as a heat map over ``x`` and ``y`` with the
  colour-blind-safe, perceptually uniform ``cividis`` map; with one swept dimension, as lines.
- The remaining dimensions (further axes and the output's own ``readout_photons``,
  ``light_level``, ``disorder_kappa``): the first with at most :data:`MAX_FACETS` values is
  *faceted* (one panel per value for heat maps, one line per value for line plots, in the
  Okabe-Ito colour-blind-safe palette), unless ``fixed`` names it; every other is *fixed* at one value, its last one
  (the brightest light, the strongest order) unless ``fixed`` says otherwise.  The caption names
  every fixed value and the figure's metadata carries it.
- Logarithmic axes (and colour scales) for positive values spanning more than a factor 20.
- Failed points are NaN and drawn as gaps.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from retina.figures._base import DOUBLE_IN, SINGLE_IN, annotate, new_figure, save_figure, style

__all__ = ["plot_output", "sweep_figures", "MAX_FACETS", "OKABE_ITO"]

MAX_FACETS = 6
OKABE_ITO = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442", "#000000")
"""Okabe and Ito's colour-blind-safe palette (blue first)."""


def _label(ds, dim: str) -> str:
    u = ds[dim].attrs.get("units", "") if dim in ds.coords else ""
    return f"{dim} ({u})" if u and u != "1" else dim


def _is_log(vals) -> bool:
    v = np.asarray(vals)
    return v.dtype.kind in "fi" and v.size > 1 and np.all(v > 0) and v.max() / v.min() > 20


def _fmt(v) -> str:
    return f"{v:.4g}" if isinstance(v, (float, np.floating)) else str(v)


def plot_output(ds, name: str, *, x: str | None = None, y: str | None = None, fixed: dict | None = None):
    """One figure of output ``name`` of a sweep dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        As written by :func:`retina.sweep.store.to_dataset`.
    name : str
        A data variable (an output).
    x, y : str, optional
        Dimensions along the horizontal and vertical axes (module docstring).  ``y=""`` forces a
        line plot.
    fixed : dict, optional
        Dimension -> coordinate value at which to fix it (default: its last value).

    Returns
    -------
    matplotlib.figure.Figure
        With ``retina_title`` and ``retina_caption`` set.
    """
    from retina.errors import InputError

    if name not in ds.data_vars:
        raise InputError(f"no output {name!r} in the dataset (has {', '.join(ds.data_vars)})", key="output")
    da = ds[name]
    sweep_dims = [d for d in da.dims if d not in ("readout_photons", "light_level", "disorder_kappa")]
    x = x or (sweep_dims[0] if sweep_dims else da.dims[0])
    if y is None:
        y = next((d for d in sweep_dims if d != x), None)
    y = y or None
    for d in (x, y):
        if d is not None and d not in da.dims:
            raise InputError(f"{name} has no dimension {d!r} (has {', '.join(da.dims)})", key="x/y")
    rest = [d for d in da.dims if d not in (x, y)]
    fixed = dict(fixed or {})
    facet = next((d for d in rest if da.sizes[d] <= MAX_FACETS and d not in fixed), None)
    sel = {}
    for d in rest:
        if d == facet:
            continue
        sel[d] = fixed.get(d, da[d].values[-1])
    da = da.sel(sel) if sel else da
    fixed_txt = ", ".join(f"{d} = {_fmt(v)}" for d, v in sel.items())
    units = da.attrs.get("units", "")
    vlabel = f"{name} ({units})" if units and units != "1" else name
    facets = list(da[facet].values) if facet else [None]
    with style():
        if y is None:
            fig = new_figure(SINGLE_IN, 2.6)
            ax = fig.add_subplot(1, 1, 1)
            for k, fv in enumerate(facets):
                line = da.sel({facet: fv}) if facet else da
                ax.plot(da[x].values, line.transpose(x).values, marker="o", ms=3,
                        color=OKABE_ITO[k % len(OKABE_ITO)], label=f"{facet} = {_fmt(fv)}" if facet else None)
            if _is_log(da[x].values):
                ax.set_xscale("log")
            vals = np.asarray(da.values, float)
            if np.all(vals[np.isfinite(vals)] > 0) and _is_log(vals[np.isfinite(vals)]):
                ax.set_yscale("log")
            ax.set_xlabel(_label(ds, x))
            ax.set_ylabel(vlabel)
            if facet:
                ax.legend(frameon=False)
        else:
            nf = len(facets)
            cols = min(nf, 3)
            rows = int(np.ceil(nf / cols))
            fig = new_figure(SINGLE_IN if nf == 1 else DOUBLE_IN, 2.6 * rows if nf > 1 else 2.8)
            vals = np.asarray(da.values, float)
            finite = vals[np.isfinite(vals)]
            vmin, vmax = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
            axes = []
            for k, fv in enumerate(facets):
                ax = fig.add_subplot(rows, cols, k + 1)
                axes.append(ax)
                sub = (da.sel({facet: fv}) if facet else da).transpose(y, x)
                xs, ys = np.arange(da.sizes[x]), np.arange(da.sizes[y])
                norm = None
                if finite.size and vmin > 0 and vmax / vmin > 20:
                    from matplotlib.colors import LogNorm

                    norm = LogNorm(vmin=vmin, vmax=vmax)
                im = ax.pcolormesh(xs, ys, np.asarray(sub.values, float), cmap="cividis", shading="nearest",
                                   **({"norm": norm} if norm else {"vmin": vmin, "vmax": vmax}))
                ax.set_xticks(xs, [_fmt(v) for v in da[x].values], rotation=45 if da.sizes[x] > 5 else 0)
                ax.set_yticks(ys, [_fmt(v) for v in da[y].values])
                ax.set_xlabel(_label(ds, x))
                ax.set_ylabel(_label(ds, y))
                if facet:
                    ax.set_title(f"{facet} = {_fmt(fv)}")
            cb = fig.colorbar(im, ax=axes, shrink=0.9)
            cb.set_label(vlabel)
    title = f"{ds.attrs.get('name', 'sweep')}: {da.attrs.get('long_name', name)}"
    caption = (f"{name} against {x}" + (f" and {y}" if y else "") + (f", one {'panel' if y else 'line'} per "
               f"{facet}" if facet else "") + (f"; fixed: {fixed_txt}" if fixed_txt else "")
               + f". Sweep seed {ds.attrs.get('seed', '')}.")
    return annotate(fig, title, caption)


def sweep_figures(ds, folder: str | Path, *, formats=("png", "svg"), dpi: int = 200) -> list[Path]:
    """One figure per output of ``ds`` into ``folder`` (created), named after the output.

    Parameters
    ----------
    ds : xarray.Dataset
    folder : str or Path
    formats : sequence of {"png", "svg", "pdf"}
    dpi : int
        PNG resolution.

    Returns
    -------
    list of Path
        Every file written.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for name in ds.data_vars:
        if name in ("failed", "seed"):
            continue
        fig = plot_output(ds, name)
        out += save_figure(fig, folder / name, tuple(formats), dpi=dpi)
    return out
