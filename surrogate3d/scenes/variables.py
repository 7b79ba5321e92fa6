"""The variables and coordinates of a scene: dimensions, units, long names and CF standard
names (``docs/archive-format.md``), shared by the data model and its validator.

Examples
--------
>>> VARIABLE_SPEC["extinction"][:2]
(('band', 'z', 'y', 'x'), 'm-1')
>>> missing_longwave_variables({"extinction": None})[:2]
('air_temperature', 'air_pressure')
"""

OPTICAL_VARIABLES = ("extinction", "single_scattering_albedo", "asymmetry_parameter")
REQUIRED_VARIABLES = OPTICAL_VARIABLES + ("surface_albedo", "solar_weight")
#: What thermal emission needs besides the grid, in the order a missing one is named.
LONGWAVE_VARIABLES = ("air_temperature", "air_pressure", "specific_humidity", "surface_temperature",
                      "surface_longwave_emissivity", "liquid_water_content", "effective_radius")

#: name -> (dims, units, long_name, CF standard_name or None)
VARIABLE_SPEC = {
    "extinction": (("band", "z", "y", "x"), "m-1", "volume extinction coefficient", None),
    "single_scattering_albedo": (("band", "z", "y", "x"), "1", "single-scattering albedo", None),
    "asymmetry_parameter": (("band", "z", "y", "x"), "1", "asymmetry parameter of the phase function", None),
    "surface_albedo": (("band", "y", "x"), "1", "Lambertian surface albedo", "surface_albedo"),
    "solar_weight": (("band",), "1", "fraction of the top-of-atmosphere solar flux in the band", None),
    "liquid_water_content": (
        ("z", "y", "x"), "kg m-3", "cloud liquid water content", "mass_concentration_of_cloud_liquid_water_in_air"),
    "effective_radius": (("z", "y", "x"), "m", "cloud droplet effective radius",
                         "effective_radius_of_cloud_liquid_water_particles"),
    "air_temperature": (("z", "y", "x"), "K", "air temperature", "air_temperature"),
    "air_pressure": (("z_edge",), "Pa", "air pressure at layer edges", "air_pressure"),
    "specific_humidity": (("z", "y", "x"), "kg kg-1", "mass of water vapour per mass of moist air",
                          "specific_humidity"),
    "surface_temperature": (("y", "x"), "K", "radiative (skin) temperature of the surface", "surface_temperature"),
    "surface_longwave_emissivity": (("y", "x"), "1", "broadband longwave emissivity of the surface",
                                    "surface_longwave_emissivity"),
}

#: Dimensions that files of scene format 1.1 and older use and readers still accept:
#: their ``air_temperature`` is a profile of the layers.
LEGACY_DIMS = {"air_temperature": (("z",),)}

COORDINATE_SPEC = {
    "x": ("m", "x of cell centre (periodic)", "projection_x_coordinate"),
    "y": ("m", "y of cell centre (periodic)", "projection_y_coordinate"),
    "z": ("m", "height of layer centre above the surface", "height"),
    "z_edge": ("m", "height of layer edge above the surface", "height"),
}


def missing_longwave_variables(scene):
    """The variables of :data:`LONGWAVE_VARIABLES` that ``scene`` lacks, in that order.

    A scene with none missing can be used for longwave (thermal) radiation.

    Parameters
    ----------
    scene : xarray.Dataset or mapping
        A scene (anything supporting ``name in scene``).

    Returns
    -------
    tuple of str
    """
    return tuple(name for name in LONGWAVE_VARIABLES if name not in scene)
