"""The training-pair table: one row per scene, sun geometry, host resolution and host column.

See ``docs/pairs-format.md`` for every variable.  :func:`build_pairs` reads an archive
directory of scene files, coarse-grains every scene and sun geometry holding both a
3D and an independent-column result to each host resolution, computes the features,
the 3D-minus-independent-column targets and the baseline predictions; :func:`surrogate3d.core.pairs_table.read_pairs`
reads a written table back.
"""

import hashlib
import json
import math
import sys

import numpy as np
import xarray as xr
from tqdm import tqdm

from .. import __version__
from ..archive.netcdf import read_scene, scene_files
from ..archive.results import completed, select_result
from ..core.data_model import COLUMN_FLUXES
from ..core.run_result import stderr_name
from ..core.validation import check_number, check_option
from ..baselines import NonlocalIndependentPixel, TiltedIndependentColumn
from ..baselines.nonlocal_pixel import radiative_smoothing_scale
from ..errors import FormatError, ParameterError
from .coarsen import block_mean, coarsen_result, host_factors
from .features import compute_features
from .host_fields import assemble_host_fields
from .profiles import PROFILE_VARIABLES, host_profiles
from .recipe import DEFAULT_PARAMETERS, HOST_FLUX_KINDS, FeatureRecipe, default_recipe
from ..core.data_model import PAIRS_FORMAT_VERSION as FORMAT_VERSION
from ..core.data_model import TARGETS


_SAMPLE_META = {
    "scene": ("-", "scene identifier (scene file stem)"),
    "regime": ("-", "cloud regime of the scene"),
    "seed": ("1", "random seed of the scene"),
    "solar_zenith_angle": ("degree", "solar zenith angle"),
    "solar_beam_azimuth": ("degree", "horizontal direction of travel of the direct beam, counterclockwise from +x"),
    "host_resolution": ("m", "host column size (dx = dy)"),
    "host_ix": ("1", "host column index along x"),
    "host_iy": ("1", "host column index along y"),
    "host_nx": ("1", "host grid size along x of this scene at this resolution"),
    "host_ny": ("1", "host grid size along y of this scene at this resolution"),
    "cloud_fraction": ("1", "total (vertically projected) cloud fraction of the host column"),
    "surface_albedo": ("1", "broadband (solar-weighted) surface albedo of the host column"),
    "incident_flux": ("W m-2", "incident solar flux on the horizontal, S0 cos(theta0)"),
    "nonlocal_smoothing_scale": ("m", "kernel width of the non-local independent pixel baseline for the scene"),
}
_TARGET_VARS = {
    "target_value": "3D minus independent-column flux, host-column mean, / incident flux",
    "target_standard_error": "Monte Carlo standard error of target_value",
    "independent_column_flux": "independent-column flux, host-column mean, / incident flux",
    "independent_column_flux_standard_error": "Monte Carlo standard error of independent_column_flux",
    "full_3d_flux": "3D flux, host-column mean, / incident flux",
    "full_3d_flux_standard_error": "Monte Carlo standard error of full_3d_flux",
    "baseline_tilted_independent_column": "correction predicted by the tilted independent column approximation",
    "baseline_nonlocal_independent_pixel": "correction predicted by the non-local independent pixel approximation",
}


def _check_resolutions(host_resolutions):
    values = [host_resolutions] if np.isscalar(host_resolutions) else list(host_resolutions)
    out = [check_number("host_resolutions", value, 0.0, None, low_open=True) for value in values]
    if not out:
        raise ParameterError("host_resolutions is empty; give at least one host column size in m, e.g. 1000")
    if len(set(out)) != len(out):
        raise ParameterError(f"host_resolutions lists a value more than once: {out}")
    return out


def _check_recipe(recipe):
    if recipe is None:
        return default_recipe()
    if isinstance(recipe, FeatureRecipe):
        return recipe
    if isinstance(recipe, dict):
        return FeatureRecipe.from_dict(recipe)
    raise ParameterError(f"recipe must be a FeatureRecipe, a recipe dict or None; got {type(recipe).__name__}")


def with_host_fluxes(recipe, host_fluxes):
    """``recipe`` with its ``host_fluxes`` parameter set (unchanged for None).

    Raises
    ------
    surrogate3d.errors.ParameterError
        ``host_fluxes`` is not a known kind, or the recipe explicitly names another kind.
    """
    if host_fluxes is None or host_fluxes == recipe.parameters["host_fluxes"]:
        return recipe
    check_option("host_fluxes", host_fluxes, HOST_FLUX_KINDS)
    if recipe.parameters["host_fluxes"] != DEFAULT_PARAMETERS["host_fluxes"]:
        raise ParameterError(f"host_fluxes {host_fluxes!r} contradicts the feature recipe {recipe.name!r}, whose "
                             f"host_fluxes is {recipe.parameters['host_fluxes']!r}")
    return FeatureRecipe(recipe.features, {**recipe.parameters, "host_fluxes": host_fluxes}, name=recipe.name,
                         version=recipe.version)


def _fingerprint_scene(digest, name, scene):
    """Feed a scene file's name and stored results (flux fields, their errors, slots) to ``digest``."""
    digest.update(name.encode())
    if "result_complete" not in scene:
        return
    for coord in ("solver", "solar_zenith_angle", "solar_beam_azimuth"):
        digest.update(repr([str(v) if coord == "solver" else float(v) for v in scene[coord].values]).encode())
    digest.update(np.ascontiguousarray(scene["result_complete"].values, dtype=np.int8).tobytes())
    for flux in COLUMN_FLUXES:
        for var in (flux, stderr_name(flux)):
            digest.update(np.ascontiguousarray(scene[var].values, dtype=np.float64).tobytes())


def archive_fingerprint(archive_dir):
    """SHA-256 (hex) of the sorted scene files' names and stored results of an archive directory.

    Parameters
    ----------
    archive_dir : str or Path

    Returns
    -------
    str
    """
    digest = hashlib.sha256()
    for path in scene_files(archive_dir):
        _fingerprint_scene(digest, path.name, read_scene(path, validate=False))
    return digest.hexdigest()


def _usable_suns(scene, label, skipped):
    by_sun = {}
    for solver, zenith, azimuth in completed(scene):
        by_sun.setdefault((zenith, azimuth), set()).add(solver)
    if not by_sun:
        skipped.append(f"{label}: holds no results")
    usable = []
    for (zenith, azimuth), solvers in sorted(by_sun.items()):
        missing = [s for s in ("full_3d", "independent_column") if s not in solvers]
        if missing:
            skipped.append(f"{label}: solar zenith {zenith:g} deg, beam azimuth {azimuth:g} deg lacks "
                           f"{' and '.join(missing)} result(s)")
        else:
            usable.append((zenith, azimuth))
    return usable


def _factors(scene, name, resolution):
    try:
        return host_factors(scene, resolution)
    except ParameterError as exc:
        raise ParameterError(f"scene {name!r}: {exc}") from None


def _has_absorption(result):
    return "absorption" in result and bool(np.all(np.isfinite(result["absorption"].values)))


def _block(scene, name, zenith, azimuth, resolution, recipe, results, fine_baselines, smoothing_scale,
           host_layer_edges):
    """Columns of the pair table for one scene, sun geometry and host resolution; with the
    per-layer variables (on ``host_layer_edges``, default the scene's own layers) when both
    results have per-cell absorption."""
    full, ica = results
    fy, fx = _factors(scene, name, resolution)
    fields = assemble_host_fields(scene, ica, resolution, recipe.parameters["host_fluxes"])
    x = compute_features(fields, recipe)
    c3d, cica = coarsen_result(full, fy, fx), coarsen_result(ica, fy, fx)
    ny, nx = fields["total_cloud_fraction"].shape
    n = ny * nx

    def stack(get):
        return np.stack([np.asarray(get(t)).reshape(n) for t in TARGETS], axis=1)

    block = {
        "features": x,
        "target_value": stack(lambda t: c3d[t] - cica[t]),
        "target_standard_error": stack(lambda t: np.hypot(c3d[stderr_name(t)], cica[stderr_name(t)])),
        "independent_column_flux": stack(lambda t: cica[t]),
        "independent_column_flux_standard_error": stack(lambda t: cica[stderr_name(t)]),
        "full_3d_flux": stack(lambda t: c3d[t]),
        "full_3d_flux_standard_error": stack(lambda t: c3d[stderr_name(t)]),
    }
    for var, corrections in fine_baselines.items():
        block[var] = stack(lambda t: block_mean(corrections[t], fy, fx))
    incident = float(full["run_solar_constant"]) * math.cos(math.radians(zenith))
    block.update({
        "scene": np.full(n, name, dtype=object),
        "regime": np.full(n, str(scene.attrs.get("regime", "")), dtype=object),
        "seed": np.full(n, int(scene.attrs.get("seed", -1)), dtype=np.int64),
        "solar_zenith_angle": np.full(n, zenith),
        "solar_beam_azimuth": np.full(n, azimuth),
        "host_resolution": np.full(n, resolution),
        "host_ix": np.tile(np.arange(nx, dtype=np.int32), ny),
        "host_iy": np.repeat(np.arange(ny, dtype=np.int32), nx),
        "host_nx": np.full(n, nx, dtype=np.int32),
        "host_ny": np.full(n, ny, dtype=np.int32),
        "cloud_fraction": fields["total_cloud_fraction"].reshape(n),
        "surface_albedo": fields["surface_albedo"].reshape(n),
        "incident_flux": np.full(n, incident),
        "nonlocal_smoothing_scale": np.full(n, smoothing_scale),
    })
    if _has_absorption(full) and _has_absorption(ica):
        block.update(host_profiles(scene, full, ica, fy, fx, host_layer_edges))
    elif host_layer_edges is not None:
        raise FormatError(f"scene {name!r}, solar zenith {zenith:g} deg: a result has no per-cell absorption, which "
                          f"the per-layer variables (host_layer_edges) need")
    return block


def build_pairs(archive_dir, host_resolutions, recipe=None, quiet=False, host_fluxes=None, host_layer_edges=None):
    """Build the training-pair table of an archive directory.

    Parameters
    ----------
    archive_dir : str or Path
        Directory of scene files with stored results.
    host_resolutions : float or sequence of float
        Host column sizes [m], whole multiples of each scene's cell size that divide its
        domain.
    recipe : FeatureRecipe or dict, optional
        Feature recipe; default :func:`~surrogate3d.pairs.recipe.default_recipe`.
    quiet : bool
        No progress bar and no notices of skipped results on stderr.
    host_fluxes : {"monte_carlo", "two_stream_host"}, optional
        Where the features' independent-column fluxes come from
        (:func:`~surrogate3d.pairs.host_fields.assemble_host_fields`); sets the recipe
        parameter of that name.  Default: the recipe's (``"monte_carlo"`` unless it
        says otherwise).  The targets and the table's ``independent_column_flux`` are
        always the Monte Carlo independent-column result.
    host_layer_edges : array_like, optional
        The host model's layer edges [m] for the per-layer (heating-rate) variables
        (:func:`surrogate3d.pairs.profiles.check_host_layer_edges`); default every scene's
        own layers.  The table holds the per-layer variables when every 3D and
        independent-column result has per-cell absorption; given edges then require it.

    Returns
    -------
    xarray.Dataset
        The table of ``docs/pairs-format.md``; ``attrs["skipped"]`` lists (JSON) the scene
        and sun geometries left out for lack of a 3D or independent-column result.  The
        per-layer variables have dims (sample, host_layer), NaN beyond a scene's host
        layers where scenes differ in their count.

    Raises
    ------
    surrogate3d.errors.FormatError
        The directory is missing or holds no scene files, a file is unreadable, or no
        scene and sun geometry has both results.
    surrogate3d.errors.ParameterError
        Bad host resolutions (the message lists the allowed values) or recipe.

    Examples
    --------
    An archive of one scene (a block of cloud) with both results at one sun, paired at
    400 m host columns:

    >>> import tempfile
    >>> from pathlib import Path
    >>> from surrogate3d.archive import insert_result, write_scene
    >>> from surrogate3d.scenes import make_scene
    >>> from surrogate3d.solvers import solve_monte_carlo
    >>> extinction = np.zeros((1, 4, 8, 8))
    >>> extinction[0, 1:3, 2:5, 2:5] = 0.02
    >>> scene = make_scene(extinction, 1.0, 0.85, [0, 250, 500, 750, 1000], 100, 100)
    >>> for independent_columns in (False, True):
    ...     run = solve_monte_carlo(scene, 30.0, photons=4000, independent_columns=independent_columns)
    ...     scene = insert_result(scene, run)
    >>> archive = Path(tempfile.mkdtemp())
    >>> _ = write_scene(scene, archive / "block.nc")
    >>> pairs = build_pairs(archive, [400.0], quiet=True)
    >>> pairs.sizes["sample"], pairs.sizes["target"], pairs.sizes["host_layer"]
    (4, 5, 4)
    """
    resolutions = _check_resolutions(host_resolutions)
    recipe = with_host_fluxes(_check_recipe(recipe), host_fluxes)
    files = scene_files(archive_dir)
    if not files:
        raise FormatError(f"archive directory {str(archive_dir)!r} holds no scene files (*.nc)")
    digest = hashlib.sha256()
    blocks, skipped = [], []
    tilted = TiltedIndependentColumn()
    bar = tqdm(files, desc="pairs", unit="scene", disable=quiet, file=sys.stderr)
    for path in bar:
        scene = read_scene(path)
        name = path.stem
        _fingerprint_scene(digest, path.name, scene)
        before = len(skipped)
        suns = _usable_suns(scene, path.name, skipped)
        if not quiet:
            for line in skipped[before:]:
                tqdm.write(f"skipped {line}", file=sys.stderr)
        if not suns:
            continue
        for resolution in resolutions:
            _factors(scene, name, resolution)
        smoothing = radiative_smoothing_scale(scene)
        nonlocal_ = NonlocalIndependentPixel(smoothing_scale=smoothing)
        for zenith, azimuth in suns:
            full = select_result(scene, "full_3d", zenith, azimuth)
            ica = select_result(scene, "independent_column", zenith, azimuth)
            fine = {tilted.variable: tilted.corrections(scene, zenith, azimuth),
                    nonlocal_.variable: nonlocal_.corrections(scene, zenith, azimuth, ica)}
            for resolution in resolutions:
                blocks.append(_block(scene, name, zenith, azimuth, resolution, recipe, (full, ica), fine, smoothing,
                                     host_layer_edges))
    bar.close()
    if not blocks:
        raise FormatError(f"archive directory {str(archive_dir)!r} has no scene and sun geometry with both full_3d "
                          f"and independent_column results; " + "; ".join(skipped))
    # Per-layer variables only where every result has per-cell absorption (old archives and
    # results from elsewhere may lack it).
    lacking = [b["scene"][0] for b in blocks if "layer_absorption_target" not in b]
    if lacking:
        for block in blocks:
            for var in PROFILE_VARIABLES:
                block.pop(var, None)
        if not quiet and len(lacking) < len(blocks):
            print(f"no per-layer variables: scene {lacking[0]!r} lacks per-cell absorption", file=sys.stderr)
    return _assemble(blocks, recipe, digest.hexdigest(), skipped, resolutions)


def _padded(arrays):
    # Per-layer arrays of blocks with different host layer counts, NaN beyond each one's.
    width = max(a.shape[1] for a in arrays)
    return np.concatenate([np.pad(a, ((0, 0), (0, width - a.shape[1])), constant_values=np.nan) for a in arrays])


def _assemble(blocks, recipe, fingerprint, skipped, resolutions):
    data = {key: (_padded if key in PROFILE_VARIABLES else np.concatenate)([b[key] for b in blocks])
            for key in blocks[0]}
    coords = {"feature": ("feature", np.array(recipe.column_names(), dtype=object)),
              "target": ("target", np.array(TARGETS, dtype=object))}
    ds = xr.Dataset(coords=coords)
    ds["feature"].attrs["long_name"] = "feature name (docs/features.md)"
    ds["target"].attrs["long_name"] = "correction target"
    ds["features"] = (("sample", "feature"), data.pop("features"),
                      {"units": json.dumps(recipe.column_units()), "long_name": "feature matrix"})
    for name, long_name in _TARGET_VARS.items():
        ds[name] = (("sample", "target"), data.pop(name), {"units": "1", "long_name": long_name})
    for name, (units, long_name) in _SAMPLE_META.items():
        attrs = {"long_name": long_name} if units == "-" else {"units": units, "long_name": long_name}
        ds[name] = (("sample",), data.pop(name), attrs)
    for name, (units, long_name) in PROFILE_VARIABLES.items():
        if name in data:
            ds[name] = (("sample", "host_layer"), data.pop(name), {"units": units, "long_name": long_name})
    ds["solar_zenith_angle"].attrs["standard_name"] = "solar_zenith_angle"
    ds["surface_albedo"].attrs["standard_name"] = "surface_albedo"
    ds.attrs.update({
        "format_version": FORMAT_VERSION,
        "Conventions": "CF-1.10",
        "feature_recipe": recipe.to_json(),
        "archive_fingerprint": fingerprint,
        "host_resolutions": json.dumps(resolutions),
        "host_fluxes": recipe.parameters["host_fluxes"],
        "skipped": json.dumps(skipped),
        "source": f"surrogate3d {__version__} pairs",
    })
    return ds
