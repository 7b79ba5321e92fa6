"""The host field file: one host sub-domain's fields, with its halo, as plain text a Fortran program reads.

A host model hands the exported Fortran correction its own fields; to show and test that
without a NetCDF library, ``surrogate3d host-fields`` writes the fields of a scene split
into sub-domains, each with the halo the model needs, in this simple format.  Every
number is written in its shortest round-trip decimal form, so the doubles read back
exactly; arrays are in Fortran order (x fastest, then y, then layer or flux), which is
the memory order of numpy's ``(nz, ny, nx)`` arrays.

Layout (one item per line unless said)::

    surrogate3d host fields 2
    grid NX NY NZ HX HY          own columns along x and y, layers, halo along x and y
    origin IX0 IY0               0-based index of the first own column in the whole domain
    domain NX_ALL NY_ALL         size of the whole (periodic) domain
    dx DX                        column size along x [m]
    dy DY                        column size along y [m]
    solar_zenith_angle VALUE     [degree]
    solar_beam_azimuth VALUE     [degree], the direction the beam travels, counterclockwise from +x
    slant_path_reach VALUE       [m], the host's cap on the slant paths' reach, or inf (none)
    NAME COUNT                   then COUNT numbers, six per line, for each array of ARRAYS in order

The arrays (:data:`ARRAYS`) are those of :mod:`surrogate3d.pairs.features` plus the
host's independent-column fluxes stacked in the order of
:data:`surrogate3d.core.data_model.TARGETS` and its independent-column absorption of every
layer (for the heating-rate model), all on the sub-domain *with* its halo.

The longwave host field file (first line ``surrogate3d longwave host fields 1``, for the
longwave host interface of :mod:`surrogate3d.export.fortran_longwave`) has the same layout
with the scalars ``dx`` and ``dy`` only and the arrays of :data:`LONGWAVE_ARRAYS`: those of
:func:`surrogate3d.pairs.longwave_features.longwave_host_features`, the host's clear-sky
surface downward and top-of-domain upward fluxes stacked as ``clear_sky_fluxes`` and its
own independent-column longwave fields stacked as ``longwave_fluxes`` (the order of
:data:`surrogate3d.pairs.longwave_features.LONGWAVE_TARGETS`) [W m-2].
"""

import numpy as np

from .._atomic import write_text_atomic
from ..core.data_model import TARGETS
from ..errors import FormatError, ValidationError

FORMAT_NAME = "surrogate3d host fields"
FORMAT_VERSION = 2
LONGWAVE_FORMAT_NAME = "surrogate3d longwave host fields"
LONGWAVE_FORMAT_VERSION = 1

#: The arrays of a host field file, in order: name -> kind ("edges", "layers", "plane", "fluxes").
ARRAYS = {
    "z_edge": "edges",
    "layer_cloud_fraction": "layers",
    "layer_optical_depth": "layers",
    "layer_clear_sky_optical_depth": "layers",
    "surface_albedo": "plane",
    "total_cloud_fraction": "plane",
    "column_optical_depth_mean": "plane",
    "column_optical_depth_std": "plane",
    "cloud_edge_length": "plane",
    "independent_column_fluxes": "fluxes",
    "independent_column_layer_absorption": "layers",
}

#: The arrays of a longwave host field file, in order: name -> kind.
LONGWAVE_ARRAYS = {
    "z_edge": "edges",
    "layer_cloud_fraction": "layers",
    "layer_air_temperature": "layers",
    "total_cloud_fraction": "plane",
    "cloud_edge_length": "plane",
    "liquid_water_path": "plane",
    "surface_temperature": "plane",
    "surface_longwave_emissivity": "plane",
    "clear_sky_fluxes": "clear_sky",
    "longwave_fluxes": "fluxes",
}

#: The clear-sky fields of ``clear_sky_fluxes``, in order.
CLEAR_SKY_FIELDS = ("longwave_clear_sky_surface_downward_flux", "longwave_clear_sky_toa_upward_flux")

_SCALARS = ("dx", "dy", "solar_zenith_angle", "solar_beam_azimuth", "slant_path_reach")
_LONGWAVE_SCALARS = ("dx", "dy")
_PER_LINE = 6


def _shape(kind, nz, ny, nx):
    return {"edges": (nz + 1,), "layers": (nz, ny, nx), "plane": (ny, nx), "fluxes": (len(TARGETS), ny, nx),
            "clear_sky": (len(CLEAR_SKY_FIELDS), ny, nx)}[kind]


def _layout(longwave):
    """(first line, scalars, arrays) of either kind of file."""
    if longwave:
        return f"{LONGWAVE_FORMAT_NAME} {LONGWAVE_FORMAT_VERSION}", _LONGWAVE_SCALARS, LONGWAVE_ARRAYS
    return f"{FORMAT_NAME} {FORMAT_VERSION}", _SCALARS, ARRAYS


def _grid_shape(fields):
    return np.shape(fields["total_cloud_fraction"])


def stacked_fields(host_fields, layer_absorption):
    """The arrays of a host field file from host fields (:mod:`surrogate3d.pairs.features`).

    Parameters
    ----------
    host_fields : dict
        Host fields including ``independent_column_<flux>`` for every flux of
        :data:`~surrogate3d.core.data_model.TARGETS`.
    layer_absorption : array_like (nz, ny, nx)
        The host's independent-column absorption of every layer [1].

    Returns
    -------
    dict
        ``host_fields`` with ``independent_column_fluxes`` (5, ny, nx) and
        ``independent_column_layer_absorption``.
    """
    missing = [f"independent_column_{flux}" for flux in TARGETS if f"independent_column_{flux}" not in host_fields]
    if missing:
        raise ValidationError("host fields lack " + ", ".join(missing))
    out = dict(host_fields)
    out["independent_column_fluxes"] = np.stack([np.asarray(host_fields[f"independent_column_{flux}"], np.float64)
                                                 for flux in TARGETS])
    out["independent_column_layer_absorption"] = np.asarray(layer_absorption, dtype=np.float64)
    return out


def stacked_longwave_fields(fields, host_fluxes):
    """The arrays of a longwave host field file from longwave host fields.

    Parameters
    ----------
    fields : dict
        The host fields of :func:`surrogate3d.pairs.longwave_features.longwave_host_features`.
    host_fluxes : dict of str -> ndarray (ny, nx)
        The host's independent-column longwave fields [W m-2], keys
        :data:`~surrogate3d.pairs.longwave_features.LONGWAVE_TARGETS`.

    Returns
    -------
    dict
        ``fields`` with ``clear_sky_fluxes`` (2, ny, nx) and ``longwave_fluxes`` (5, ny, nx).
    """
    from ..pairs.longwave_features import LONGWAVE_TARGETS

    missing = [k for k in CLEAR_SKY_FIELDS if k not in fields] + [k for k in LONGWAVE_TARGETS if k not in host_fluxes]
    if missing:
        raise ValidationError("longwave host fields lack " + ", ".join(missing))
    out = dict(fields)
    out["clear_sky_fluxes"] = np.stack([np.asarray(fields[k], dtype=np.float64) for k in CLEAR_SKY_FIELDS])
    out["longwave_fluxes"] = np.stack([np.asarray(host_fluxes[k], dtype=np.float64) for k in LONGWAVE_TARGETS])
    return out


def host_field_text(fields, halo, origin, domain, longwave=False):
    """Text of a host field file.

    Parameters
    ----------
    fields : dict
        The arrays of :data:`ARRAYS` (numpy order: ``(nz, ny, nx)``, ``(ny, nx)``,
        ``(5, ny, nx)``) on the sub-domain with its halo, and the scalars ``dx``, ``dy``
        [m], ``solar_zenith_angle``, ``solar_beam_azimuth`` [degree] and, optionally,
        ``slant_path_reach`` [m] (written as ``inf`` when absent: no cap); for a
        longwave file those of :data:`LONGWAVE_ARRAYS` and ``dx``, ``dy``.
    halo : (int, int)
        Halo ``(hx, hy)`` in columns.
    origin : (int, int)
        0-based ``(ix0, iy0)`` of the first own column in the whole domain.
    domain : (int, int)
        ``(nx, ny)`` of the whole domain.
    longwave : bool
        Write a longwave host field file.

    Returns
    -------
    str
    """
    first, scalars, arrays = _layout(longwave)
    hx, hy = (int(h) for h in halo)
    nz = np.asarray(fields["z_edge"]).size - 1
    ny_h, nx_h = _grid_shape(fields)
    nx, ny = nx_h - 2 * hx, ny_h - 2 * hy
    if nx < 1 or ny < 1:
        raise ValidationError(f"a halo of ({hx}, {hy}) leaves no own column in fields of {nx_h} x {ny_h} columns")
    lines = [first, f"grid {nx} {ny} {nz} {hx} {hy}",
             f"origin {int(origin[0])} {int(origin[1])}", f"domain {int(domain[0])} {int(domain[1])}"]
    missing = [key for key in scalars if key != "slant_path_reach" and key not in fields]
    if missing:
        raise ValidationError(f"host fields lack the scalar(s) {', '.join(missing)}")
    lines += [f"{key} {float(fields.get(key, float('inf')))!r}" for key in scalars]
    for name, kind in arrays.items():
        value = np.asarray(fields[name], dtype=np.float64)
        expected = _shape(kind, nz, ny_h, nx_h)
        if value.shape != expected:
            raise ValidationError(f"host field {name} has shape {value.shape}; expected {expected}")
        if not np.all(np.isfinite(value)):
            raise ValidationError(f"host field {name} is not finite at index "
                                  f"{tuple(int(i) for i in np.argwhere(~np.isfinite(value))[0])}")
        flat = value.reshape(-1)
        lines.append(f"{name} {flat.size}")
        lines += [" ".join(repr(float(v)) for v in flat[i:i + _PER_LINE]) for i in range(0, flat.size, _PER_LINE)]
    return "\n".join(lines) + "\n"


def write_host_field_file(path, fields, halo, origin, domain, longwave=False):
    """Write a host field file atomically.

    Parameters
    ----------
    path : str or Path
    fields, halo, origin, domain, longwave
        As for :func:`host_field_text`.
    """
    write_text_atomic(path, host_field_text(fields, halo, origin, domain, longwave))


def read_host_field_file(path):
    """Read a host field file.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    fields : dict
        Arrays in numpy order and the scalars, as :func:`host_field_text` takes them.
    layout : dict
        ``halo`` (hx, hy), ``origin`` (ix0, iy0), ``domain`` (nx, ny), ``own`` (nx, ny),
        ``longwave`` (whether it is a longwave host field file).

    Raises
    ------
    surrogate3d.errors.FormatError
        Not a host field file, or a truncated or malformed one (the line named).
    """
    lines = open(path).read().splitlines()
    where = f"host field file {str(path)!r}"
    longwave = bool(lines) and lines[0] == _layout(True)[0]
    first, scalars, arrays = _layout(longwave)
    if not lines or lines[0] != first:
        raise FormatError(f"{where} does not start with {FORMAT_NAME!r} {FORMAT_VERSION} or "
                          f"{LONGWAVE_FORMAT_NAME!r} {LONGWAVE_FORMAT_VERSION}")

    def header(index, key, count, kind):
        parts = lines[index].split() if index < len(lines) else []
        if len(parts) != count + 1 or parts[0] != key:
            raise FormatError(f"{where}, line {index + 1}: expected '{key}' and {count} value(s)")
        return [kind(p) for p in parts[1:]]

    nx, ny, nz, hx, hy = header(1, "grid", 5, int)
    origin, domain = header(2, "origin", 2, int), header(3, "domain", 2, int)
    fields = {key: header(4 + i, key, 1, float)[0] for i, key in enumerate(scalars)}
    if fields.get("slant_path_reach") == float("inf"):
        del fields["slant_path_reach"]
    index = 4 + len(scalars)
    for name, kind in arrays.items():
        expected = _shape(kind, nz, ny + 2 * hy, nx + 2 * hx)
        (count,) = header(index, name, 1, int)
        if count != int(np.prod(expected)):
            raise FormatError(f"{where}, line {index + 1}: {name} has {count} values; expected {np.prod(expected)}")
        n_lines = -(-count // _PER_LINE)
        values = np.array(" ".join(lines[index + 1:index + 1 + n_lines]).split(), dtype=np.float64)
        if values.size != count:
            raise FormatError(f"{where}: {name} is truncated ({values.size} of {count} values)")
        fields[name] = values.reshape(expected)
        index += 1 + n_lines
    return fields, {"halo": (hx, hy), "origin": tuple(origin), "domain": tuple(domain), "own": (nx, ny),
                    "longwave": longwave}


def split_periodic(fields, parts, halo):
    """Split a periodic host domain into sub-domains, each with a halo filled from its neighbours.

    Parameters
    ----------
    fields : dict
        Arrays on the whole periodic domain (no halo; the last two axes y and x), layer
        edges and scalars.
    parts : (int, int)
        Sub-domains along x and y; each must divide the domain size.
    halo : (int, int)
        Halo ``(hx, hy)`` in columns.

    Returns
    -------
    list of (dict, (int, int))
        Each sub-domain's fields with its halo and the 0-based origin ``(ix0, iy0)`` of its
        first own column, sub-domains in row-major order of ``(part_y, part_x)``.

    Examples
    --------
    >>> f = {"total_cloud_fraction": np.arange(16.0).reshape(4, 4)}
    >>> [(origin, sub["total_cloud_fraction"].shape) for sub, origin in split_periodic(f, (2, 1), (1, 0))]
    [((0, 0), (4, 4)), ((2, 0), (4, 4))]
    """
    px, py = (int(p) for p in parts)
    hx, hy = (int(h) for h in halo)
    ny, nx = _grid_shape(fields)
    if px < 1 or py < 1 or nx % px or ny % py:
        raise ValidationError(f"parts {parts} must divide the {nx} x {ny} host domain into equal sub-domains")
    sx, sy = nx // px, ny // py
    out = []
    for jy in range(py):
        for jx in range(px):
            rows = np.arange(jy * sy - hy, (jy + 1) * sy + hy) % ny
            cols = np.arange(jx * sx - hx, (jx + 1) * sx + hx) % nx
            sub = {}
            for key, value in fields.items():
                # Every field on the grid (last two axes y, x) is cut; edges and scalars are shared.
                if np.ndim(value) >= 2:
                    sub[key] = np.asarray(value)[..., rows[:, None], cols[None, :]]
                else:
                    sub[key] = value
            out.append((sub, (jx * sx, jy * sy)))
    return out
