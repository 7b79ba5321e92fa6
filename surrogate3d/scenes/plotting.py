"""Pictures of scenes: a map of column optical depth and a vertical cross-section."""

from pathlib import Path

import numpy as np

from .._atomic import atomic_path
from ..core.validation import check_integer
from ..errors import ParameterError
from .model import column_optical_depth, layer_thickness, spacing


def _band_index(scene, band):
    names = [str(b) for b in scene["band"].values]
    if band is None:
        return 0
    if isinstance(band, (int, np.integer)) and not isinstance(band, bool):
        return check_integer("band index", band, 0, len(names) - 1)
    if str(band) not in names:
        raise ParameterError(f"band {band!r} is not in the scene; it has {', '.join(names)}")
    return names.index(str(band))


def _default_row(scene):
    """The row (y index) crossing the most cloud: the largest row sum of column optical depth."""
    tau = column_optical_depth(scene, band=0).values
    return int(np.argmax(tau.sum(axis=1)))


def _log_limits(values, floor):
    """Colour limits for a log scale that stay valid for constant or tiny fields."""
    positive = values[values > 0]
    low = max(float(positive.min()) if positive.size else floor, floor)
    high = max(float(values.max()), low * 10.0)
    return low, high


def plot_scene(scene, path, row=None, band=None):
    """Write a PNG with a map of column optical depth and a cross-section of extinction.

    Left: vertical column optical depth of ``band`` on a log colour scale, with the
    cross-section row marked.  Right: extinction along that row, x [km] against height
    [km], on a log colour scale (in km-1), with the layer edges as drawn (non-uniform
    grids keep their spacing).

    Parameters
    ----------
    scene : xarray.Dataset
        A scene.
    path : str or Path
        Output PNG file, written atomically.
    row : int, optional
        y index of the cross-section; default the row crossing the most cloud.
    band : str or int, optional
        Band name or index; default the first band.

    Returns
    -------
    Path
    """
    from matplotlib.colors import LogNorm
    from matplotlib.figure import Figure

    ib = _band_index(scene, band)
    band_name = str(scene["band"].values[ib])
    ny, nx = scene.sizes["y"], scene.sizes["x"]
    if row is None:
        row = _default_row(scene)
    row = check_integer("row", row, 0, ny - 1)
    dx, dy = spacing(scene)
    x_edges = np.arange(nx + 1) * dx / 1000.0
    y_edges = np.arange(ny + 1) * dy / 1000.0
    z_edges = scene["z_edge"].values / 1000.0

    tau = column_optical_depth(scene, band=ib).values
    ext_km = scene["extinction"].values[ib, :, row, :] * 1000.0

    # A bare Figure (no pyplot) leaves the caller's backend and open figures alone.
    # Fixed axes positions rather than a layout engine, which costs seconds per figure;
    # colourbars are insets so that they follow the map's equal-aspect box.
    fig = Figure(figsize=(13.0, 5.4))
    ax_map = fig.add_axes((0.055, 0.12, 0.30, 0.74))
    ax_sec = fig.add_axes((0.50, 0.12, 0.40, 0.74))
    low, high = _log_limits(tau, 1e-3)
    mesh = ax_map.pcolormesh(x_edges, y_edges, tau, norm=LogNorm(low, high), cmap="Blues_r", shading="flat")
    ax_map.axhline((row + 0.5) * dy / 1000.0, color="tab:orange", lw=1.2, ls="--")
    ax_map.set_aspect("equal", anchor="W")
    ax_map.set_xlabel("x [km]")
    ax_map.set_ylabel("y [km]")
    ax_map.set_title(f"column optical depth, {band_name} band\n(dashed: cross-section row {row})", fontsize=11)
    fig.colorbar(mesh, cax=ax_map.inset_axes((1.03, 0.0, 0.045, 1.0)), label="column optical depth [1]")

    low, high = _log_limits(ext_km, 1e-4)
    mesh = ax_sec.pcolormesh(x_edges, z_edges, ext_km, norm=LogNorm(low, high), cmap="viridis", shading="flat")
    ax_sec.set_xlabel("x [km]")
    ax_sec.set_ylabel("height [km]")
    ax_sec.set_title(f"extinction along y = {(row + 0.5) * dy / 1000.0:.2f} km (row {row}), {band_name} band",
                     fontsize=11)
    fig.colorbar(mesh, cax=ax_sec.inset_axes((1.02, 0.0, 0.03, 1.0)), label="extinction [km$^{-1}$]")

    regime = scene.attrs.get("regime", "scene")
    seed = scene.attrs.get("seed", "?")
    dz = layer_thickness(scene)
    grid = f"{nx} x {ny} x {scene.sizes['z']} cells, dx = {dx:g} m, dz = {dz.min():g}-{dz.max():g} m"
    if np.allclose(dz, dz[0]):
        grid = f"{nx} x {ny} x {scene.sizes['z']} cells, dx = {dx:g} m, dz = {dz[0]:g} m"
    fig.suptitle(f"{regime}, seed {seed}  ({grid})", fontsize=12)
    path = Path(path)
    with atomic_path(path, suffix=".tmp.png") as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    return path
