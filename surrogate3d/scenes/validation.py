"""The one validation function for scenes, used by every reader and solver entry point."""

import numpy as np

from ..core.validation import first_true, message
from ..errors import ValidationError
from .variables import LEGACY_DIMS, REQUIRED_VARIABLES, VARIABLE_SPEC

#: Tolerance on the sum of band solar weights.
WEIGHT_SUM_TOLERANCE = 1e-6
_MAX_REPORTED = 8


def _where(da_dims, coords, index):
    parts = []
    for dim, i in zip(da_dims, index):
        if dim == "band" and "band" in coords:
            parts.append(f"band={str(coords['band'].values[i])!r}")
        else:
            parts.append(f"{dim}={int(i)}")
    return ", ".join(parts)


def _show(value):
    """repr of a value with numpy scalars shown as plain Python numbers (``1.5``, not ``np.float64(1.5)``)."""
    return repr(value.item() if isinstance(value, np.generic) else value)


class _Problems:
    def __init__(self, label, ds):
        self.label, self.ds, self.items = label, ds, []

    def add(self, text):
        self.items.append(text)

    def check(self, name, bad, rule):
        found = first_true(bad)
        if found is not None:
            index, count = found
            values = np.asarray(self.ds[name].values, dtype=np.float64)
            where = _where(self.ds[name].dims, self.ds.coords, index)
            self.add(message(name, rule, float(values[index]), where, count))

    def raise_if_any(self):
        if self.items:
            shown = self.items[:_MAX_REPORTED]
            extra = len(self.items) - len(shown)
            tail = f"; and {extra} more problems" if extra > 0 else ""
            raise ValidationError(f"{self.label} is invalid: " + "; ".join(shown) + tail)


def validate_scene(ds, label="scene"):
    """Check a scene Dataset against the data model and raise on the first set of problems.

    Checks, each reported with the variable name, the offending index and value:
    missing variables or coordinates; dimensions and shapes that do not match the grid;
    NaN or infinite values; negative extinction; single-scattering albedo outside
    [0, 1]; asymmetry parameter outside (-1, 1); surface albedo outside [0, 1];
    layer edges not strictly increasing or not starting at the surface (0 m); band
    solar weights that are negative or do not sum to 1; non-positive horizontal
    spacing; non-physical optional fields (negative water content, non-positive
    radius, temperature or pressure, pressure not decreasing with height, specific
    humidity outside [0, 1), surface temperature <= 0, surface longwave emissivity
    outside [0, 1]).

    Parameters
    ----------
    ds : xarray.Dataset
        The scene.
    label : str
        How the scene is called in messages (for example its file name).

    Returns
    -------
    xarray.Dataset
        ``ds`` itself, so that the call can be chained.

    Raises
    ------
    surrogate3d.errors.ValidationError
        Naming every problem found (up to eight).
    """
    p = _Problems(label, ds)
    missing = [v for v in REQUIRED_VARIABLES if v not in ds.variables]
    missing += [c for c in ("band", "z_edge") if c not in ds.variables]
    if missing:
        p.add("missing variables: " + ", ".join(missing))
        p.raise_if_any()
    for attr in ("dx_m", "dy_m"):
        value = ds.attrs.get(attr)
        try:
            ok = value is not None and np.isfinite(float(value)) and float(value) > 0
        except (TypeError, ValueError):
            ok = False
        if not ok:
            p.add(f"attribute {attr} (horizontal spacing in m) must be a positive number; got {_show(value)}")

    expected = {"band": None, "z": None, "y": None, "x": None}
    for dim in expected:
        expected[dim] = ds.sizes.get(dim)
    for name, (dims, *_rest) in VARIABLE_SPEC.items():
        if name not in ds.variables:
            continue
        da = ds[name]
        if da.dims != dims and da.dims not in LEGACY_DIMS.get(name, ()):
            p.add(f"{name} has dimensions {da.dims}; expected {dims}")
            continue
        if not np.issubdtype(da.dtype, np.number):
            p.add(f"{name} must be numeric; got dtype {da.dtype}")
            continue
        p.check(name, ~np.isfinite(da.values), "finite")
    if any(" has dimensions " in item or " must be numeric" in item for item in p.items):
        p.raise_if_any()

    nz = ds.sizes["z"]
    if ds.sizes.get("z_edge") != nz + 1:
        p.add(f"z_edge has {ds.sizes.get('z_edge')} values; expected {nz + 1} for {nz} layers")
        p.raise_if_any()
    if min(ds.sizes["x"], ds.sizes["y"], nz) < 1:
        p.add(f"grid must have at least one cell in x, y and z; got {dict(ds.sizes)}")
    edges = np.asarray(ds["z_edge"].values, dtype=float)
    if not np.all(np.isfinite(edges)):
        p.check("z_edge", ~np.isfinite(edges), "finite")
    else:
        step = np.diff(edges)
        if np.any(step <= 0):
            i = int(np.argmax(step <= 0)) + 1
            p.add(f"z_edge is not strictly increasing at z_edge={i}: "
                  f"{_show(edges[i])} after {_show(edges[i - 1])}")
        if edges[0] != 0.0:
            p.add(f"z_edge must start at the surface (0 m); z_edge=0 is {_show(edges[0])}")

    p.check("extinction", ds["extinction"].values < 0, ">= 0")
    ssa = ds["single_scattering_albedo"].values
    p.check("single_scattering_albedo", (ssa < 0) | (ssa > 1), "in [0, 1]")
    g = ds["asymmetry_parameter"].values
    p.check("asymmetry_parameter", (g <= -1) | (g >= 1), "in (-1, 1)")
    alb = ds["surface_albedo"].values
    p.check("surface_albedo", (alb < 0) | (alb > 1), "in [0, 1]")
    w = np.asarray(ds["solar_weight"].values, dtype=float)
    p.check("solar_weight", w < 0, ">= 0")
    if abs(w.sum() - 1.0) > WEIGHT_SUM_TOLERANCE:
        p.add(f"solar_weight sums to {_show(w.sum())}; band solar weights must sum to 1")

    if "liquid_water_content" in ds:
        p.check("liquid_water_content", ds["liquid_water_content"].values < 0, ">= 0")
    if "effective_radius" in ds:
        lwc = ds["liquid_water_content"].values if "liquid_water_content" in ds else None
        r = ds["effective_radius"].values
        bad = r <= 0 if lwc is None else (r <= 0) & (lwc > 0)
        p.check("effective_radius", bad, "> 0 in a cloudy cell")
    if "air_temperature" in ds:
        p.check("air_temperature", ds["air_temperature"].values <= 0, "> 0")
    if "surface_temperature" in ds:
        p.check("surface_temperature", ds["surface_temperature"].values <= 0, "> 0")
    if "surface_longwave_emissivity" in ds:
        eps = ds["surface_longwave_emissivity"].values
        p.check("surface_longwave_emissivity", (eps < 0) | (eps > 1), "in [0, 1]")
    if "specific_humidity" in ds:
        q = ds["specific_humidity"].values
        p.check("specific_humidity", (q < 0) | (q >= 1), "in [0, 1)")
    if "air_pressure" in ds:
        pres = ds["air_pressure"].values
        p.check("air_pressure", pres <= 0, "> 0")
        if np.any(np.diff(pres) >= 0):
            i = int(np.argmax(np.diff(pres) >= 0)) + 1
            p.add(f"air_pressure does not decrease with height at z_edge={i}: "
                  f"{_show(pres[i])} after {_show(pres[i - 1])}")

    dx = float(ds.attrs["dx_m"]) if not p.items else None
    if dx is not None:
        for axis, attr in (("x", "dx_m"), ("y", "dy_m")):
            if axis in ds.coords and ds.sizes[axis] > 0:
                step = float(ds.attrs[attr])
                centres = (np.arange(ds.sizes[axis]) + 0.5) * step
                coord = np.asarray(ds[axis].values, dtype=float)
                if not np.allclose(coord, centres, rtol=1e-9, atol=1e-6 * step):
                    i = int(np.argmax(~np.isclose(coord, centres, rtol=1e-9, atol=1e-6 * step)))
                    p.add(f"{axis} is not a regular grid of cell centres for {attr}={step}: "
                          f"{axis}={i} is {_show(coord[i])}, expected {_show(centres[i])}")
    p.raise_if_any()
    return ds

