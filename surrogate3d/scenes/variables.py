"""The variables and coordinates of a scene: dimensions, units, long names and CF standard
names (``docs/archive-format.md``), shared by the data model and its validator.

Examples
--------
>>> VARIABLE_SPEC["extinction"][:2]
(('band', 'z', 'y', 'x'), 'm-1')
"""

OPTICAL_VARIABLES = ("extinction", "single_scattering_albedo", "asymmetry_parameter")
REQUIRED_VARIABLES = OPTICAL_VARIABLES + ("surface_albedo", "solar_weight")

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
    "air_temperature": (("z",), "K", "air temperature of the layer", "air_temperature"),
    "air_pressure": (("z_edge",), "Pa", "air pressure at layer edges", "air_pressure"),
}

COORDINATE_SPEC = {
    "x": ("m", "x of cell centre (periodic)", "projection_x_coordinate"),
    "y": ("m", "y of cell centre (periodic)", "projection_y_coordinate"),
    "z": ("m", "height of layer centre above the surface", "height"),
    "z_edge": ("m", "height of layer edge above the surface", "height"),
}
