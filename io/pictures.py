"""Pictures of a solution with matplotlib: maps over node coordinates and histograms.

matplotlib is imported inside the drawing functions only (with the non-interactive ``Agg``
back end), so commands that draw nothing start as fast as before.

Maps are binned, not scattered: the points (nodes) are gathered into at most :data:`MAX_BINS`
x :data:`MAX_BINS` cells per layer (fewer when a layer has fewer distinct coordinates), each
cell shows the largest value that falls in it (the worst drop, current or power; the mean for
voltage), and the grid is drawn as one image. A million nodes draw in a few seconds and the
picture stays readable; cells without a point are left blank. One panel per layer.
"""

from __future__ import annotations

import io as _io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ohmgraph.io.atomic import atomic_output
from ohmgraph.io.errors import InputError

MAX_BINS = 400
PICTURE_SUFFIXES = (".png", ".svg")
CMAPS = {"drop": "inferno", "voltage": "viridis", "current": "magma", "power": "magma",
         "change": "coolwarm", "utilisation": "magma"}


@dataclass(frozen=True)
class Points:
    """Values at positions, with a layer each."""

    x: np.ndarray
    y: np.ndarray
    layer: np.ndarray
    value: np.ndarray


def unit_scale(largest: float, unit: str) -> tuple[float, str]:
    """Factor and prefixed unit so that ``largest * factor`` reads well (V → mV, A → mA, ...)."""
    largest = abs(float(largest)) if np.isfinite(largest) else 0.0
    if unit in ("V", "A", "W") and 0 < largest < 1:
        if largest >= 1e-3:
            return 1e3, "m" + unit
        return 1e6, "µ" + unit
    return 1.0, unit


def check_picture_path(path) -> None:
    """Raise :class:`InputError` unless ``path`` ends in ``.png`` or ``.svg``."""
    if Path(path).suffix.lower() not in PICTURE_SUFFIXES:
        raise InputError(f"{path}: unknown picture type (use .png or .svg)")


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def bin_points(x, y, value, extent, bins, reduce: str = "max") -> np.ndarray:
    """Grid of shape ``(bins[1], bins[0])`` with the largest (``"max"``) or mean (``"mean"``)
    value per cell; NaN where no point falls."""
    x0, x1, y0, y1 = extent
    nx, ny = bins
    ix = np.clip(((x - x0) / max(x1 - x0, 1e-300) * nx).astype(np.int64), 0, nx - 1)
    iy = np.clip(((y - y0) / max(y1 - y0, 1e-300) * ny).astype(np.int64), 0, ny - 1)
    cell = iy * nx + ix
    grid = np.full(nx * ny, np.nan)
    if reduce == "mean":
        total = np.bincount(cell, value, minlength=nx * ny)
        count = np.bincount(cell, minlength=nx * ny)
        filled = count > 0
        grid[filled] = total[filled] / count[filled]
    else:
        order = np.argsort(value, kind="stable")
        grid[cell[order]] = value[order]              # the last write, the largest, stays
    return grid.reshape(ny, nx)


def _extent(x, y) -> tuple:
    """Bounds of the points, widened by half a unit where they are all equal."""
    bounds = []
    for values in (x, y):
        low, high = float(values.min()), float(values.max())
        bounds += [low - 0.5, high + 0.5] if low == high else [low, high]
    return tuple(bounds)


def _bins(x, y) -> tuple[int, int]:
    def count(values):
        distinct = np.unique(values[: 2_000_000]).size
        return int(max(1, min(MAX_BINS, distinct)))

    return count(x), count(y)


def map_figure(points: Points, *, title: str, label: str, unit: str, kind: str,
               reduce: str = "max", mark_largest: bool = True):
    """A figure with one binned map per layer and a colour bar labelled with the unit.

    Parameters
    ----------
    points : Points
        Finite positions only are drawn.
    title : str
    label, unit : str
        Colour-bar text, as ``label (unit)``; the unit is scaled (V → mV ...).
    kind : str
        Key of :data:`CMAPS`; ``"change"`` draws a colour scale symmetric about 0.
    reduce : str
        ``"max"`` or ``"mean"`` per cell.
    mark_largest : bool
        Mark the point of largest value on each layer.
    """
    plt = _pyplot()
    finite = np.isfinite(points.x) & np.isfinite(points.y) & np.isfinite(points.value)
    x, y, value = points.x[finite], points.y[finite], points.value[finite]
    layer = points.layer[finite]
    layers = sorted(set(np.unique(layer).tolist()))
    extent = _extent(x, y)
    factor, shown_unit = unit_scale(np.max(np.abs(value)), unit)
    grids = [bin_points(x[layer == name], y[layer == name], value[layer == name] * factor,
                        extent, _bins(x[layer == name], y[layer == name]), reduce)
             for name in layers]
    if kind == "change":
        largest = max(float(np.nanmax(np.abs(g))) for g in grids) or 1.0
        limits = (-largest, largest)
    else:
        limits = (min(float(np.nanmin(g)) for g in grids), max(float(np.nanmax(g)) for g in grids))
    columns = min(len(layers), 3)
    rows = -(-len(layers) // columns)
    figure, axes = plt.subplots(rows, columns, figsize=(5.2 * columns + 1.2, 4.8 * rows),
                                squeeze=False, layout="constrained")
    cmap = plt.get_cmap(CMAPS[kind]).with_extremes(bad="#e8e8e8")
    image = None
    for axis, name, grid in zip(axes.flat, layers, grids):
        image = axis.imshow(grid, origin="lower", extent=extent, aspect="equal", cmap=cmap,
                            vmin=limits[0], vmax=limits[1], interpolation="nearest")
        axis.set_title(f"layer {name}" if name else "all nodes", fontsize=10)
        axis.set_xlabel("x")
        axis.set_ylabel("y")
        if mark_largest:
            on_layer = np.flatnonzero(layer == name)
            worst = on_layer[np.argmax(np.abs(value[on_layer]))]
            axis.plot(x[worst], y[worst], marker="x", color="#00c8ff", markersize=9, mew=2,
                      clip_on=False)
    for axis in axes.flat[len(layers):]:
        axis.set_visible(False)
    colorbar = figure.colorbar(image, ax=axes, shrink=0.9)
    colorbar.set_label(f"{label} ({shown_unit})")
    figure.suptitle(title, fontsize=11)
    return figure


def histograms_figure(drop_values, nominal_note: str, utilisation, *, title: str):
    """Histograms of the node drops and of the branch utilisation (or a note when no branch
    has a limit)."""
    plt = _pyplot()
    figure, (left, right) = plt.subplots(1, 2, figsize=(11, 4.2), layout="constrained")
    drop_values = np.asarray(drop_values, np.float64)
    drop_values = drop_values[np.isfinite(drop_values)]
    if drop_values.size:
        factor, unit = unit_scale(np.max(np.abs(drop_values)), "V")
        left.hist(drop_values * factor, bins=60, color="#c0392b")
        left.set_xlabel(f"supply drop ({unit})")
        left.set_ylabel("nodes")
        left.set_yscale("log")
    else:
        left.text(0.5, 0.5, "no node with a supply drop", ha="center", va="center")
    left.set_title(f"supply drop {nominal_note}".strip(), fontsize=10)
    utilisation = np.asarray(utilisation, np.float64)
    utilisation = utilisation[np.isfinite(utilisation)]
    if utilisation.size:
        right.hist(utilisation * 100, bins=60, color="#2c6fbb")
        right.axvline(100, color="black", linestyle="--", linewidth=1)
        right.set_xlabel("utilisation (% of limit)")
        right.set_ylabel("branches")
        right.set_yscale("log")
    else:
        right.text(0.5, 0.5, "no branch has a current or power limit\n(max_current/max_power "
                   "columns, --max-current, --max-power)", ha="center", va="center", fontsize=9)
        right.set_axis_off()
    right.set_title("branch utilisation", fontsize=10)
    figure.suptitle(title, fontsize=11)
    return figure


def figure_bytes(figure, fmt: str = "png") -> bytes:
    """The figure encoded as PNG or SVG; the figure is closed."""
    plt = _pyplot()
    buffer = _io.BytesIO()
    figure.savefig(buffer, format=fmt, dpi=100)
    plt.close(figure)
    return buffer.getvalue()


def save_figure(figure, path, force: bool = False) -> None:
    """Write the figure as PNG or SVG (by extension) through an atomic output."""
    check_picture_path(path)
    data = figure_bytes(figure, Path(path).suffix.lower().lstrip("."))
    with atomic_output(path, force) as temporary:
        Path(temporary).write_bytes(data)
