"""Host fields of one scene at one sun geometry and host resolution: scene, sun and host fluxes."""

from .coarsen import HOST_FLUXES, coarsen_result, host_factors, scene_host_fields


def assemble_host_fields(scene, independent_column, host_resolution):
    """Everything the feature library reads, for one scene, sun geometry and host resolution.

    Parameters
    ----------
    scene : xarray.Dataset
        A scene.
    independent_column : xarray.Dataset
        Its independent-column run result at the sun geometry of interest
        (:func:`surrogate3d.archive.select_result`); the sun angles come from its
        attributes.
    host_resolution : float
        Host column size [m].

    Returns
    -------
    dict
        The host fields of :mod:`surrogate3d.pairs.features`, including the sun angles
        [degree] and ``independent_column_<flux>`` for every flux of
        :data:`surrogate3d.pairs.coarsen.HOST_FLUXES` (host-column means).
    """
    fy, fx = host_factors(scene, host_resolution)
    fields = scene_host_fields(scene, host_resolution)
    fields["solar_zenith_angle"] = float(independent_column.attrs["solar_zenith_angle"])
    fields["solar_beam_azimuth"] = float(independent_column.attrs["solar_beam_azimuth"])
    fluxes = coarsen_result(independent_column, fy, fx)
    for flux in HOST_FLUXES:
        fields[f"independent_column_{flux}"] = fluxes[flux]
    return fields
