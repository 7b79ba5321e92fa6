"""Run results inside scene files: one slot per (solver kind, sun geometry).

In a scene file the results of all shortwave runs (:mod:`surrogate3d.core.run_result`)
are stacked along two extra dimensions, ``solver`` and ``sun``, so that a result is found
by label; see ``docs/archive-format.md``.  Longwave results have a stack of their own
(:mod:`.longwave_results`), left unchanged here.
"""

import numpy as np
import xarray as xr

from ..core.data_model import COLUMN_FLUXES, OPTIONAL_COLUMN_FLUXES, SOLVERS
from ..core.run_result import (CELL_FIELDS, OPTIONAL_RUN_METADATA, RUN_METADATA, domain_stderr_name, per_band_name,
                               run_key, stderr_name)
from ..errors import FormatError, ValidationError
from .longwave_results import strip_longwave_results

STACK_DIMS = ("solver", "sun")
SUN_TOLERANCE_DEG = 1e-6


def _result_variables(scene):
    fluxes = set(COLUMN_FLUXES) | set(OPTIONAL_COLUMN_FLUXES)
    names = fluxes | {stderr_name(f) for f in fluxes} | {domain_stderr_name(f) for f in fluxes} | set(CELL_FIELDS)
    names |= {per_band_name(f) for f in fluxes} | set(RUN_METADATA) | set(OPTIONAL_RUN_METADATA)
    names |= {"result_complete", "incident_flux"}
    return [n for n in scene.data_vars if n in names]


def strip_results(scene):
    """The scene without any stored results, shortwave or longwave."""
    return strip_longwave_results(_strip_shortwave_results(scene))


def _strip_shortwave_results(scene):
    out = scene.drop_vars(_result_variables(scene))
    return out.drop_vars([c for c in ("solver", "sun", "solar_zenith_angle", "solar_beam_azimuth")
                          if c in out.variables])


def completed(scene):
    """List of ``(solver, solar_zenith_angle, solar_beam_azimuth)`` stored in ``scene``."""
    if "result_complete" not in scene:
        return []
    flags = scene["result_complete"].values
    out = []
    for i, solver in enumerate(scene["solver"].values):
        for j in range(scene.sizes["sun"]):
            if flags[i, j]:
                out.append((str(solver), float(scene["solar_zenith_angle"].values[j]),
                            float(scene["solar_beam_azimuth"].values[j])))
    return out


def _sun_index(scene, zenith, azimuth):
    if "sun" not in scene.dims:
        return None
    zen = scene["solar_zenith_angle"].values
    az = scene["solar_beam_azimuth"].values
    daz = np.abs((az - azimuth + 180.0) % 360.0 - 180.0)
    hit = np.flatnonzero((np.abs(zen - zenith) < SUN_TOLERANCE_DEG) & (daz < SUN_TOLERANCE_DEG))
    return int(hit[0]) if hit.size else None


def has_result(scene, solver, zenith, azimuth):
    """True if the result of ``solver`` at this sun geometry is stored."""
    j = _sun_index(scene, zenith, azimuth % 360.0)
    if j is None or "result_complete" not in scene or solver not in list(scene["solver"].values):
        return False
    i = list(scene["solver"].values).index(solver)
    return bool(scene["result_complete"].values[i, j])


def select_result(scene, solver, zenith, azimuth):
    """Extract one stored run result (the layout of :func:`make_run_result`).

    Raises
    ------
    surrogate3d.errors.FormatError
        The result is not stored.
    """
    if not has_result(scene, solver, zenith, azimuth):
        raise FormatError(f"no {solver} result at solar zenith {zenith} deg, beam azimuth {azimuth} deg "
                          f"in scene {scene.attrs.get('title', '')!r}; stored: {completed(scene)}")
    j = _sun_index(scene, zenith, azimuth % 360.0)
    sub = scene[_result_variables(scene)].sel(solver=solver).isel(sun=j)
    out = xr.Dataset()
    for name in sub.data_vars:
        if name in ("result_complete", "incident_flux"):
            continue
        key = name
        value = sub[name]
        if value.dims and np.all(np.isnan(value.values)) and (name in CELL_FIELDS or name.endswith("_per_band")):
            continue
        out[key] = value.drop_vars([c for c in value.coords if c in ("solver", "sun", "solar_zenith_angle",
                                                                     "solar_beam_azimuth")])
    out.attrs.update(solver=solver, solar_zenith_angle=float(scene["solar_zenith_angle"].values[j]),
                     solar_beam_azimuth=float(scene["solar_beam_azimuth"].values[j]))
    return out


def _runs(scene):
    return [select_result(scene, s, z, a) for s, z, a in completed(scene)]


def _same_slot(a, b):
    return a[0] == b[0] and abs(a[1] - b[1]) < SUN_TOLERANCE_DEG and abs(a[2] - b[2]) < SUN_TOLERANCE_DEG


def insert_results(scene, results):
    """Return a copy of ``scene`` that also holds ``results`` (replacing any at the same slots).

    Parameters
    ----------
    scene : xarray.Dataset
        A scene, with or without stored results.
    results : sequence of xarray.Dataset
        Run results from :func:`make_run_result` computed for this scene.

    Returns
    -------
    xarray.Dataset
    """
    ny, nx, nz = scene.sizes["y"], scene.sizes["x"], scene.sizes["z"]
    runs = _runs(scene)
    for result in results:
        if result.sizes.get("y") != ny or result.sizes.get("x") != nx or result.sizes.get("z") != nz:
            raise ValidationError(f"result grid {dict(result.sizes)} does not match the scene grid "
                                  f"(z={nz}, y={ny}, x={nx})")
        key = run_key(result)
        runs = [r for r in runs if not _same_slot(run_key(r), key)] + [result]
    return _stack(_strip_shortwave_results(scene), runs)


def insert_result(scene, result):
    """Return a copy of ``scene`` that also holds ``result`` (see :func:`insert_results`)."""
    return insert_results(scene, [result])


def _stack(scene, runs):
    solvers = [s for s in SOLVERS if any(r.attrs["solver"] == s for r in runs)]
    suns = sorted({(float(r.attrs["solar_zenith_angle"]), float(r.attrs["solar_beam_azimuth"])) for r in runs})
    ns, nsun = len(solvers), len(suns)
    out = scene.copy()
    out = out.assign_coords(
        solver=("solver", np.array(solvers, dtype=object), {"long_name": "radiative transfer solver kind"}),
        solar_zenith_angle=("sun", np.array([s[0] for s in suns]),
                            {"units": "degree", "standard_name": "solar_zenith_angle",
                             "long_name": "solar zenith angle"}),
        solar_beam_azimuth=("sun", np.array([s[1] for s in suns]),
                            {"units": "degree", "long_name": "horizontal direction of travel of the direct "
                             "solar beam, counterclockwise from +x"}),
    )
    names = {}
    for r in runs:
        for name in r.data_vars:
            names.setdefault(name, r[name])
    flags = np.zeros((ns, nsun), dtype=np.int8)
    incident = np.full((ns, nsun), np.nan)
    arrays = {}
    for name, template in names.items():
        shape = (ns, nsun) + template.shape
        dtype = template.dtype
        fill = np.nan if np.issubdtype(dtype, np.floating) else (0 if np.issubdtype(dtype, np.integer) else "")
        arrays[name] = np.full(shape, fill, dtype=dtype if dtype != object else object)
    for r in runs:
        i = solvers.index(r.attrs["solver"])
        j = suns.index((float(r.attrs["solar_zenith_angle"]), float(r.attrs["solar_beam_azimuth"])))
        flags[i, j] = 1
        incident[i, j] = float(r["run_solar_constant"]) * np.cos(np.radians(r.attrs["solar_zenith_angle"]))
        for name in r.data_vars:
            value = r[name].values
            arrays[name][i, j] = str(value.item()) if value.dtype == object else value
    for name, template in names.items():
        out[name] = (STACK_DIMS + template.dims, arrays[name], dict(template.attrs))
    out["result_complete"] = (STACK_DIMS, flags, {"long_name": "1 where the (solver, sun) result is stored"})
    out["incident_flux"] = (STACK_DIMS, incident, {"units": "W m-2", "long_name": "incident solar flux on the "
                                                   "horizontal at the top of the domain, S0 cos(theta0)"})
    return out
