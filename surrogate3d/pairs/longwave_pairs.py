"""The longwave pair table: one row per scene, host resolution and host column (no sun).

See ``docs/pairs-format.md``, "Longwave pairs".  :func:`build_longwave_pairs` reads an
archive directory, and for every scene holding both a ``longwave_full_3d`` and a
``longwave_independent_column`` result coarse-grains the two to host columns; the
targets are 3D minus independent column of the longwave column fields in W m-2, and
:func:`longwave_host_features` computes what a host can know about its column.  The
per-layer variables of the heating-rate correction come from
:mod:`surrogate3d.pairs.longwave_profiles`.

The longwave features need host fields the shortwave feature library
(:mod:`surrogate3d.pairs.features`) does not have (air temperature per layer, surface
temperature and emissivity, the host's longwave fluxes), so they live here instead of
its registry; the cloud geometry and the neighbourhood windows are the library's own
functions.
"""

import hashlib
import json
import sys

import numpy as np
import xarray as xr
from tqdm import tqdm

from .. import __version__
from ..archive.longwave_results import completed_longwave, select_longwave_result
from ..archive.netcdf import read_scene, scene_files
from ..baselines.effective_cloud_fraction import effective_cloud_fraction_corrections
from ..core.data_model import LONGWAVE_BASELINES, LONGWAVE_PAIRS_FORMAT_VERSION
from ..core.longwave_result import longwave_stderr_name
from ..core.validation import check_option
from ..errors import FormatError, ParameterError
from ..scenes.model import cloud_mask, layer_thickness
from ..scenes.planck import STEFAN_BOLTZMANN
from .coarsen import block_mean, block_standard_error, host_factors, scene_host_fields
from .longwave_features import LONGWAVE_FEATURES, LONGWAVE_TARGETS, LongwaveFeatureRecipe, longwave_host_features
from .longwave_profiles import LONGWAVE_PROFILE_VARIABLES, longwave_host_profiles

#: Spectra ``surrogate3d pairs --spectrum`` accepts.
SPECTRA = ("shortwave", "longwave")

_TARGET_VARS = {
    "target_value": "3D minus independent-column longwave field, host-column mean",
    "target_standard_error": "Monte Carlo standard error of target_value",
    "independent_column_flux": "independent-column longwave field, host-column mean",
    "independent_column_flux_standard_error": "Monte Carlo standard error of independent_column_flux",
    "full_3d_flux": "3D longwave field, host-column mean",
    "full_3d_flux_standard_error": "Monte Carlo standard error of full_3d_flux",
    **{b.variable: f"correction of the published simple longwave correction '{b.label}' "
                   "(surrogate3d.baselines.effective_cloud_fraction)" for b in LONGWAVE_BASELINES.values()},
}
_SAMPLE_META = {
    "scene": ("-", "scene identifier (scene file stem)"),
    "regime": ("-", "cloud regime of the scene"),
    "seed": ("1", "random seed of the scene"),
    "host_resolution": ("m", "host column size (dx = dy)"),
    "host_ix": ("1", "host column index along x"),
    "host_iy": ("1", "host column index along y"),
    "host_nx": ("1", "host grid size along x of this scene at this resolution"),
    "host_ny": ("1", "host grid size along y of this scene at this resolution"),
    "cloud_fraction": ("1", "total (vertically projected) cloud fraction of the host column"),
    "surface_temperature": ("K", "surface temperature of the host column (host-column mean)"),
    "reference_flux": ("W m-2", "sigma T_s^4 of the host column's surface temperature, for normalising"),
}


def check_spectrum(spectrum):
    """``spectrum`` if it is ``"shortwave"`` or ``"longwave"``; ParameterError otherwise."""
    return check_option("spectrum", spectrum, SPECTRA)


def longwave_host_fields(scene, host_resolution):
    """Host fields of a scene for the longwave features.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene with the longwave fields (``docs/scene-generator.md``).
    host_resolution : float
        Host column size [m].

    Returns
    -------
    dict
        The keys of :func:`surrogate3d.pairs.coarsen.scene_host_fields` plus, host-column
        means, ``layer_air_temperature`` (nz, Ny, Nx) [K], ``surface_temperature`` [K],
        ``surface_longwave_emissivity`` [1] and ``liquid_water_path`` [g m-2] (Ny, Nx).
    """
    fy, fx = host_factors(scene, host_resolution)
    fields = scene_host_fields(scene, host_resolution)
    dz = layer_thickness(scene)
    lwp = np.einsum("zyx,z->yx", scene["liquid_water_content"].values, dz) * 1000.0  # kg m-2 -> g m-2
    fields.update({
        "layer_air_temperature": block_mean(scene["air_temperature"].values, fy, fx),
        "surface_temperature": block_mean(scene["surface_temperature"].values, fy, fx),
        "surface_longwave_emissivity": block_mean(scene["surface_longwave_emissivity"].values, fy, fx),
        "liquid_water_path": block_mean(lwp, fy, fx),
    })
    return fields


def coarsen_longwave_result(result, fy, fx):
    """Host-column means of a longwave result's column fields and their standard errors [W m-2].

    The standard error of a block mean is ``sqrt(sum se^2) / n``, as if the columns'
    Monte Carlo errors were independent (the results hold no batch values to do better).
    """
    out = {}
    for flux in LONGWAVE_TARGETS:
        out[flux] = block_mean(result[flux].values, fy, fx)
        out[longwave_stderr_name(flux)] = block_standard_error(result[longwave_stderr_name(flux)].values, fy, fx)
    return out


def _two_stream(scene, full):
    """The scene's longwave_two_stream result, computed (at the 3D run's spectral resolution) when not stored."""
    if "longwave_two_stream" in completed_longwave(scene):
        return select_longwave_result(scene, "longwave_two_stream")
    from ..solvers.longwave_scene import solve_longwave_scene

    return solve_longwave_scene(scene, "longwave_two_stream",
                                resolution=float(full["longwave_run_spectral_resolution"]))


def host_clear_sky_fluxes(scene, host_resolution, spectral_resolution):
    """The host's clear-sky surface downward and top-of-domain upward longwave fluxes [W m-2] on its own columns.

    The scene is averaged to host columns (as a host sees it), its cloud water removed, and
    the longwave two-stream solver run on it: what a host's radiation scheme reports as its
    clear-sky diagnostic.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene with the longwave fields.
    host_resolution : float
        Host column size [m].
    spectral_resolution : float
        Widest spectral interval of the gas absorption [m-1].

    Returns
    -------
    dict of str -> ndarray (Ny, Nx)
        ``longwave_clear_sky_surface_downward_flux`` and ``longwave_clear_sky_toa_upward_flux``.
    """
    from ..solvers.longwave_scene import solve_longwave_scene

    fy, fx = host_factors(scene, host_resolution)
    coarse = scene.coarsen(x=fx, y=fy).mean(keep_attrs=True)
    coarse.attrs.update(dx_m=float(scene.attrs["dx_m"]) * fx, dy_m=float(scene.attrs["dy_m"]) * fy)
    coarse = coarse.assign(liquid_water_content=coarse["liquid_water_content"] * 0.0)
    result = solve_longwave_scene(coarse, "longwave_two_stream", resolution=spectral_resolution)
    return {f"longwave_clear_sky_{flux}": np.asarray(result[f"longwave_{flux}"].values, dtype=np.float64)
            for flux in ("surface_downward_flux", "toa_upward_flux")}


def _block(scene, name, resolution, full, ica, two_stream, host_layer_edges=None):
    fy, fx = host_factors(scene, resolution)
    fields = longwave_host_fields(scene, resolution)
    fields.update(host_clear_sky_fluxes(scene, resolution, float(full["longwave_run_spectral_resolution"])))
    c3d, cica, host = (coarsen_longwave_result(r, fy, fx) for r in (full, ica, two_stream))
    ny, nx = fields["total_cloud_fraction"].shape
    n = ny * nx
    features = longwave_host_features(fields, host)

    def stack(get):
        return np.stack([np.asarray(get(t)).reshape(n) for t in LONGWAVE_TARGETS], axis=1)

    se = longwave_stderr_name
    baseline = _effective_cloud_fraction(scene, ica, fields, features, fy, fx)
    return {
        **longwave_host_profiles(scene, full, ica, two_stream, fy, fx, host_layer_edges),
        LONGWAVE_BASELINES["effective_cloud_fraction"].variable: stack(lambda t: baseline[t]),
        "features": np.stack([features[f].reshape(n) for f in LONGWAVE_FEATURES], axis=1),
        "target_value": stack(lambda t: c3d[t] - cica[t]),
        "target_standard_error": stack(lambda t: np.hypot(c3d[se(t)], cica[se(t)])),
        "independent_column_flux": stack(lambda t: cica[t]),
        "independent_column_flux_standard_error": stack(lambda t: cica[se(t)]),
        "full_3d_flux": stack(lambda t: c3d[t]),
        "full_3d_flux_standard_error": stack(lambda t: c3d[se(t)]),
        "scene": np.full(n, name, dtype=object),
        "regime": np.full(n, str(scene.attrs.get("regime", "")), dtype=object),
        "seed": np.full(n, int(scene.attrs.get("seed", -1)), dtype=np.int64),
        "host_resolution": np.full(n, float(resolution)),
        "host_ix": np.tile(np.arange(nx, dtype=np.int32), ny),
        "host_iy": np.repeat(np.arange(ny, dtype=np.int32), nx),
        "host_nx": np.full(n, nx, dtype=np.int32),
        "host_ny": np.full(n, ny, dtype=np.int32),
        "cloud_fraction": features["cloud_fraction"].reshape(n),
        "surface_temperature": features["surface_temperature"].reshape(n),
        "reference_flux": STEFAN_BOLTZMANN * features["surface_temperature"].reshape(n) ** 4,
    }


def _effective_cloud_fraction(scene, ica, fields, features, fy, fx):
    """The effective-cloud-fraction baseline's corrections per host column (W m-2, by target)."""
    projected = cloud_mask(scene).any(axis=0)
    down = np.asarray(ica["longwave_surface_downward_flux"].values, dtype=np.float64)
    share = block_mean(projected.astype(np.float64), fy, fx)
    cloudy = block_mean(np.where(projected, down, 0.0), fy, fx) / np.where(share > 0.0, share, 1.0)
    clear = block_mean(np.where(projected, 0.0, down), fy, fx) / np.where(share < 1.0, 1.0 - share, 1.0)
    return effective_cloud_fraction_corrections(share, cloudy, clear, fields["cloud_edge_length"],
                                                features["cloud_top_height"] - features["cloud_base_height"],
                                                features["surface_longwave_emissivity"])


def _fingerprint(digest, name, scene):
    digest.update(name.encode())
    for solver in completed_longwave(scene):
        result = select_longwave_result(scene, solver)
        digest.update(solver.encode())
        for flux in LONGWAVE_TARGETS:
            for var in (flux, longwave_stderr_name(flux)):
                digest.update(np.ascontiguousarray(result[var].values, dtype=np.float64).tobytes())


def longwave_fingerprint(archive_dir):
    """The ``archive_fingerprint`` a longwave pair table built now from ``archive_dir`` would carry.

    Parameters
    ----------
    archive_dir : str or Path

    Returns
    -------
    str
        SHA-256 (hex) of every scene file's name and stored longwave results.
    """
    digest = hashlib.sha256()
    for path in scene_files(archive_dir):
        _fingerprint(digest, path.name, read_scene(path))
    return digest.hexdigest()


def build_longwave_pairs(archive_dir, host_resolutions, quiet=False, host_layer_edges=None):
    """Build the longwave pair table of an archive directory.

    Parameters
    ----------
    archive_dir : str or Path
        Directory of scene files with stored longwave results.
    host_resolutions : float or sequence of float
        Host column sizes [m], whole multiples of each scene's cell size that divide its
        domain.
    quiet : bool
        No progress bar and no notices of skipped scenes on stderr.
    host_layer_edges : array_like, optional
        The host grid's layer edges [m] of the per-layer variables
        (:func:`surrogate3d.pairs.profiles.check_host_layer_edges`); default every scene's
        own layers.

    Returns
    -------
    xarray.Dataset
        The table of ``docs/pairs-format.md``, "Longwave pairs", with the per-layer variables
        of :data:`~surrogate3d.pairs.longwave_profiles.LONGWAVE_PROFILE_VARIABLES` on
        ``(sample, host_layer)`` (NaN beyond a scene's host layers); ``attrs["skipped"]``
        lists (JSON) the scene files left out for lack of a ``longwave_full_3d`` or
        ``longwave_independent_column`` result.

    Raises
    ------
    surrogate3d.errors.FormatError
        The directory is missing or holds no scene files, or no scene has both results.
    surrogate3d.errors.ParameterError
        Bad host resolutions (the message lists the allowed values).

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> from surrogate3d.archive import insert_longwave_results, write_scene
    >>> from surrogate3d.scenes.generator import generate_scene
    >>> from surrogate3d.solvers.longwave_scene import solve_longwave_scene
    >>> scene = generate_scene("scattered_cumulus", 1, nx=4, ny=4, nz=3)
    >>> runs = [solve_longwave_scene(scene, kind, photons=200, resolution=50000.0)
    ...         for kind in ("longwave_full_3d", "longwave_independent_column")]
    >>> archive = Path(tempfile.mkdtemp())
    >>> _ = write_scene(insert_longwave_results(scene, runs), archive / "s.nc")
    >>> pairs = build_longwave_pairs(archive, [2.0 * scene.attrs["dx_m"]], quiet=True)
    >>> pairs.sizes["sample"], pairs.sizes["target"], pairs.sizes["host_layer"]
    (4, 5, 3)
    >>> str(pairs["target_value"].attrs["units"])
    'W m-2'
    """
    from .build import _check_resolutions

    resolutions = _check_resolutions(host_resolutions)
    files = scene_files(archive_dir)
    if not files:
        raise FormatError(f"archive directory {str(archive_dir)!r} holds no scene files (*.nc)")
    digest = hashlib.sha256()
    blocks, skipped = [], []
    for path in tqdm(files, desc="longwave pairs", unit="scene", disable=quiet, file=sys.stderr):
        scene = read_scene(path)
        _fingerprint(digest, path.name, scene)
        missing = [s for s in ("longwave_full_3d", "longwave_independent_column")
                   if s not in completed_longwave(scene)]
        if missing:
            skipped.append(f"{path.name}: lacks {' and '.join(missing)} result(s)")
            if not quiet:
                tqdm.write(f"skipped {skipped[-1]}", file=sys.stderr)
            continue
        for resolution in resolutions:
            try:
                host_factors(scene, resolution)
            except ParameterError as exc:
                raise ParameterError(f"scene {path.stem!r}: {exc}") from None
        full = select_longwave_result(scene, "longwave_full_3d")
        ica = select_longwave_result(scene, "longwave_independent_column")
        two_stream = _two_stream(scene, full)
        for resolution in resolutions:
            try:
                blocks.append(_block(scene, path.stem, resolution, full, ica, two_stream, host_layer_edges))
            except ParameterError as exc:
                raise ParameterError(f"scene {path.stem!r}: {exc}") from None
    if not blocks:
        raise FormatError(f"archive directory {str(archive_dir)!r} has no scene with both longwave_full_3d and "
                          f"longwave_independent_column results; " + "; ".join(skipped))
    return _assemble(blocks, digest.hexdigest(), skipped, resolutions)


def _padded(arrays):
    # Per-layer arrays of blocks with different host layer counts, NaN beyond each one's.
    width = max(a.shape[1] for a in arrays)
    return np.concatenate([np.pad(a, ((0, 0), (0, width - a.shape[1])), constant_values=np.nan) for a in arrays])


def _assemble(blocks, fingerprint, skipped, resolutions):
    data = {key: (_padded if key in LONGWAVE_PROFILE_VARIABLES else np.concatenate)([b[key] for b in blocks])
            for key in blocks[0]}
    ds = xr.Dataset(coords={"feature": ("feature", np.array(list(LONGWAVE_FEATURES), dtype=object),
                                        {"long_name": "longwave feature name (docs/pairs-format.md)"}),
                            "target": ("target", np.array(LONGWAVE_TARGETS, dtype=object),
                                       {"long_name": "longwave correction target"})})
    ds["features"] = (("sample", "feature"), data.pop("features"),
                      {"units": json.dumps([u for u, _ in LONGWAVE_FEATURES.values()]),
                       "long_name": "longwave feature matrix"})
    for name, long_name in _TARGET_VARS.items():
        ds[name] = (("sample", "target"), data.pop(name), {"units": "W m-2", "long_name": long_name})
    for name, (units, long_name) in _SAMPLE_META.items():
        attrs = {"long_name": long_name} if units == "-" else {"units": units, "long_name": long_name}
        ds[name] = (("sample",), data.pop(name), attrs)
    for name, (units, long_name) in LONGWAVE_PROFILE_VARIABLES.items():
        ds[name] = (("sample", "host_layer"), data.pop(name), {"units": units, "long_name": long_name})
    ds.attrs.update({
        "format_version": LONGWAVE_PAIRS_FORMAT_VERSION,
        "Conventions": "CF-1.10",
        "spectrum": "longwave",
        "archive_fingerprint": fingerprint,
        "host_resolutions": json.dumps(resolutions),
        "host_fluxes": "longwave_two_stream",
        "feature_recipe": LongwaveFeatureRecipe().to_json(),
        "skipped": json.dumps(skipped),
        "source": f"surrogate3d {__version__} pairs --spectrum longwave",
    })
    return ds
