"""Radiative-transfer results inside scene files: one slot per (solver kind, sun geometry).

A *run result* is what one solver run returns for one scene and one sun geometry: an
xarray Dataset with the column fluxes on ``(y, x)``, their standard errors, the
absorption per cell on ``(z, y, x)``, optional per-band column fluxes on
``(band, y, x)``, and scalar run metadata.  In a scene file the results of all runs are
stacked along two extra dimensions, ``solver`` and ``sun``, so that a result is found
by label.  Fluxes are fractions of the incident solar flux on the horizontal
(``S0 cos(theta0)``); see ``docs/archive-format.md``.
"""

import numpy as np
import xarray as xr

from ..errors import FormatError, ValidationError

#: The solver kinds, in the order they are stored.
SOLVERS = ("full_3d", "independent_column", "two_stream")

#: Column fluxes, positive magnitudes, as fractions of the incident flux on the horizontal.
COLUMN_FLUXES = {
    "toa_upward_flux": "upward shortwave flux at the top of the domain",
    "surface_downward_direct_flux": "downward direct (unscattered) shortwave flux at the surface",
    "surface_downward_diffuse_flux": "downward diffuse (scattered) shortwave flux at the surface",
    "surface_upward_flux": "upward shortwave flux at the surface (reflected)",
    "atmosphere_absorption": "shortwave flux absorbed in the atmospheric column",
}
#: Column fluxes a run result may carry besides :data:`COLUMN_FLUXES`.
OPTIONAL_COLUMN_FLUXES = {
    "surface_absorption": "shortwave flux absorbed by the surface",
}
CELL_FIELDS = {
    "absorption": ("1", "shortwave flux absorbed in the cell per unit column area, as a fraction of the "
                        "incident flux on the horizontal"),
    "heating_rate": ("K day-1", "shortwave heating rate"),
}
#: Scalar metadata of each run, under the same names in a run result and a scene file:
#: name -> (dtype, units, long_name)
RUN_METADATA = {
    "run_photons": (np.int64, "1", "number of photons traced (0 for the two-stream solver)"),
    "run_seed": (np.int64, "1", "random seed of the run"),
    "run_scattering_events": (np.int64, "1", "number of scattering events traced"),
    "run_wall_time": (np.float64, "s", "wall-clock time of the run"),
    "run_solar_constant": (np.float64, "W m-2", "solar constant used for the W m-2 fields"),
    "run_package_version": (object, "", "surrogate3d version that computed the result"),
}
STACK_DIMS = ("solver", "sun")
SUN_TOLERANCE_DEG = 1e-6


def stderr_name(flux):
    """Name of the standard-error variable of a column flux."""
    return f"{flux}_standard_error"


def domain_stderr_name(flux):
    """Name of the standard error of a column flux's domain mean (a scalar per run)."""
    return f"{flux}_domain_mean_standard_error"


def per_band_name(flux):
    """Name of the per-band variable of a column flux."""
    return f"{flux}_per_band"


def make_run_result(fluxes, standard_errors, absorption, *, solver, solar_zenith_angle,
                    solar_beam_azimuth, metadata, per_band=None, heating_rate=None, band=None,
                    domain_standard_errors=None):
    """Assemble a run-result Dataset.

    Parameters
    ----------
    fluxes, standard_errors : dict of str -> ndarray (ny, nx)
        Column fluxes (every key of :data:`COLUMN_FLUXES`, optionally those of
        :data:`OPTIONAL_COLUMN_FLUXES`) and their standard errors [1].
    absorption : ndarray (nz, ny, nx)
        Absorbed fraction per cell [1].
    solver : str
        One of :data:`SOLVERS`.
    solar_zenith_angle : float
        [degree], in [0, 90).
    solar_beam_azimuth : float
        Horizontal direction of travel of the direct beam [degree], counterclockwise from +x.
    metadata : dict
        Keys of :data:`RUN_METADATA`.
    per_band : dict of str -> ndarray (nband, ny, nx), optional
    heating_rate : ndarray (nz, ny, nx), optional
        [K day-1].
    band : sequence of str, optional
        Band names for ``per_band``.
    domain_standard_errors : dict of str -> float, optional
        Standard error of the domain mean of each column flux [1] (the standard error of
        a mean of correlated columns is not the columns' errors combined).

    Returns
    -------
    xarray.Dataset
    """
    if solver not in SOLVERS:
        raise ValidationError(f"solver must be one of {SOLVERS}; got {solver!r}")
    ds = xr.Dataset()
    present = {**COLUMN_FLUXES, **{k: v for k, v in OPTIONAL_COLUMN_FLUXES.items() if k in fluxes}}
    for name, long_name in present.items():
        ds[name] = (("y", "x"), np.asarray(fluxes[name], dtype=np.float64),
                    {"units": "1", "long_name": long_name + " / incident flux"})
        ds[stderr_name(name)] = (("y", "x"), np.asarray(standard_errors[name], dtype=np.float64),
                                 {"units": "1", "long_name": "Monte Carlo standard error of " + name})
        if domain_standard_errors and name in domain_standard_errors:
            ds[domain_stderr_name(name)] = ((), float(domain_standard_errors[name]),
                                            {"units": "1", "long_name": "Monte Carlo standard error of the domain "
                                             "mean of " + name})
    ds["absorption"] = (("z", "y", "x"), np.asarray(absorption, dtype=np.float64),
                        {"units": CELL_FIELDS["absorption"][0], "long_name": CELL_FIELDS["absorption"][1]})
    if heating_rate is not None:
        ds["heating_rate"] = (("z", "y", "x"), np.asarray(heating_rate, dtype=np.float64),
                              {"units": "K day-1", "long_name": "shortwave heating rate"})
    if per_band:
        for name, value in per_band.items():
            ds[per_band_name(name)] = (("band", "y", "x"), np.asarray(value, dtype=np.float64),
                                       {"units": "1", "long_name": present[name] + " in the band / "
                                        "incident flux in the band"})
        if band is not None:
            ds = ds.assign_coords(band=list(band))
    for key, (dtype, units, long_name) in RUN_METADATA.items():
        value = metadata[key]
        ds[key] = ((), np.array(value, dtype=dtype), {"units": units, "long_name": long_name} if units
                   else {"long_name": long_name})
    ds.attrs.update(solver=solver, solar_zenith_angle=float(solar_zenith_angle),
                    solar_beam_azimuth=float(solar_beam_azimuth) % 360.0)
    return ds


def _result_variables(scene):
    fluxes = set(COLUMN_FLUXES) | set(OPTIONAL_COLUMN_FLUXES)
    names = fluxes | {stderr_name(f) for f in fluxes} | {domain_stderr_name(f) for f in fluxes} | set(CELL_FIELDS)
    names |= {per_band_name(f) for f in fluxes} | set(RUN_METADATA)
    names |= {"result_complete", "incident_flux"}
    return [n for n in scene.data_vars if n in names]


def strip_results(scene):
    """The scene without any stored results."""
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


def run_key(result):
    """``(solver, solar_zenith_angle, solar_beam_azimuth)`` of a run result."""
    return (str(result.attrs["solver"]), float(result.attrs["solar_zenith_angle"]),
            float(result.attrs["solar_beam_azimuth"]) % 360.0)


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
    return _stack(strip_results(scene), runs)


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


def in_watts(result, name):
    """A flux of a run result in W m-2 (fraction times ``S0 cos(theta0)``)."""
    mu0 = np.cos(np.radians(result.attrs["solar_zenith_angle"]))
    out = result[name] * float(result["run_solar_constant"]) * mu0
    out.attrs.update(units="W m-2", long_name=result[name].attrs.get("long_name", name).replace(" / incident flux", ""))
    return out
