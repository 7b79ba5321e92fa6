"""The correction targets of the pair table, in table order (see docs/pairs-format.md)."""

#: Target fluxes, fractions of the incident flux on the horizontal.
TARGETS = ("surface_downward_flux", "surface_downward_direct_flux", "surface_downward_diffuse_flux",
           "toa_upward_flux", "atmosphere_absorption")
