"""Longwave run results inside scene files: one slot per longwave solver kind.

The results of the longwave runs (:mod:`surrogate3d.core.longwave_result`) are stacked
along the dimension ``longwave_solver``; longwave radiation does not depend on the sun,
so there is no sun dimension.  The shortwave results (:mod:`.results`, dimensions
``solver`` and ``sun``) are left as they are; see ``docs/archive-format.md``.
"""

import numpy as np
import xarray as xr

from ..core.data_model import LONGWAVE_SOLVERS
from ..core.longwave_result import LONGWAVE_CELL_FIELDS, longwave_result_variables
from ..errors import FormatError, ValidationError

LONGWAVE_DIM = "longwave_solver"
LONGWAVE_FLAG = "longwave_result_complete"


def _stored_variables(scene):
    names = set(longwave_result_variables()) | {LONGWAVE_FLAG}
    return [n for n in scene.data_vars if n in names]


def strip_longwave_results(scene):
    """The scene without any stored longwave results (shortwave results are kept)."""
    out = scene.drop_vars(_stored_variables(scene))
    return out.drop_vars([LONGWAVE_DIM] if LONGWAVE_DIM in out.variables else [])


def completed_longwave(scene):
    """Longwave solver kinds whose result is stored in ``scene``, in storage order."""
    if LONGWAVE_FLAG not in scene:
        return []
    flags = scene[LONGWAVE_FLAG].values
    return [str(s) for s, flag in zip(scene[LONGWAVE_DIM].values, flags) if flag]


def has_longwave_result(scene, solver):
    """True if the result of the longwave solver kind ``solver`` is stored."""
    return solver in completed_longwave(scene)


def select_longwave_result(scene, solver):
    """Extract one stored longwave run result (the layout of :func:`make_longwave_result`).

    Parameters
    ----------
    scene : xarray.Dataset
        A scene read with its results.
    solver : str
        A longwave solver kind, e.g. ``"longwave_full_3d"``.

    Returns
    -------
    xarray.Dataset

    Raises
    ------
    surrogate3d.errors.FormatError
        The result is not stored.
    """
    if not has_longwave_result(scene, solver):
        raise FormatError(f"no {solver} result in scene {scene.attrs.get('title', '')!r}; stored longwave "
                          f"results: {completed_longwave(scene)}")
    sub = scene[[n for n in _stored_variables(scene) if n != LONGWAVE_FLAG]].sel({LONGWAVE_DIM: solver})
    out = xr.Dataset()
    for name in sub.data_vars:
        value = sub[name]
        base = name.removesuffix("_standard_error")
        # A slot without heating rate (another run had one) holds NaN: not part of this result.
        if base in LONGWAVE_CELL_FIELDS and np.all(np.isnan(value.values)):
            continue
        out[name] = value.drop_vars([LONGWAVE_DIM])
    out.attrs.update(solver=solver)
    return out


def insert_longwave_results(scene, results):
    """Return a copy of ``scene`` that also holds the longwave ``results`` (replacing any of the same kind).

    Parameters
    ----------
    scene : xarray.Dataset
        A scene, with or without stored results (shortwave results are kept unchanged).
    results : sequence of xarray.Dataset
        Longwave run results (:func:`~surrogate3d.core.longwave_result.make_longwave_result`)
        computed for this scene.

    Returns
    -------
    xarray.Dataset

    Raises
    ------
    surrogate3d.errors.ValidationError
        A result's grid differs from the scene's.
    """
    ny, nx, nz = scene.sizes["y"], scene.sizes["x"], scene.sizes["z"]
    runs = {solver: select_longwave_result(scene, solver) for solver in completed_longwave(scene)}
    for result in results:
        if result.sizes.get("y") != ny or result.sizes.get("x") != nx or result.sizes.get("z") != nz:
            raise ValidationError(f"longwave result grid {dict(result.sizes)} does not match the scene grid "
                                  f"(z={nz}, y={ny}, x={nx})")
        runs[str(result.attrs["solver"])] = result
    return _stack(strip_longwave_results(scene), runs)


def insert_longwave_result(scene, result):
    """Return a copy of ``scene`` that also holds ``result`` (see :func:`insert_longwave_results`)."""
    return insert_longwave_results(scene, [result])


def _stack(scene, runs):
    solvers = [s for s in LONGWAVE_SOLVERS if s in runs]
    out = scene.assign_coords({LONGWAVE_DIM: (LONGWAVE_DIM, np.array(solvers, dtype=object),
                                              {"long_name": "longwave radiative transfer solver kind"})})
    templates = {}
    for result in runs.values():
        for name in result.data_vars:
            templates.setdefault(name, result[name])
    for name in (n for n in longwave_result_variables() if n in templates):
        template = templates[name]
        dtype = template.dtype
        fill = np.nan if np.issubdtype(dtype, np.floating) else (0 if np.issubdtype(dtype, np.integer) else "")
        array = np.full((len(solvers),) + template.shape, fill, dtype=dtype)
        for i, solver in enumerate(solvers):
            if name in runs[solver]:
                value = runs[solver][name].values
                array[i] = str(value.item()) if dtype == object else value
        out[name] = ((LONGWAVE_DIM,) + template.dims, array, dict(template.attrs))
    out[LONGWAVE_FLAG] = (LONGWAVE_DIM, np.ones(len(solvers), dtype=np.int8),
                          {"long_name": "1 where the longwave solver kind's result is stored"})
    return out
