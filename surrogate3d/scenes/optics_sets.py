"""Named optics sets: bands plus gas absorber, so that a scene set can span dry and moist atmospheres.

A set fixes the ``bands`` and ``gas_absorption`` arguments of
:func:`surrogate3d.scenes.generator.generate_scene`.  The three sets span the
absorption a correction may meet: a moist atmosphere with a strong near-infrared
absorber, a dry one where the near-infrared absorber is negligible (the cloud droplets
still absorb a little there), and a single visible band, where nothing absorbs.
"""

from dataclasses import dataclass

from ..core.validation import check_option


@dataclass(frozen=True)
class OpticsSet:
    """Bands and gas absorber of a named optics set.

    Attributes
    ----------
    name : str
        Set name (stored in the scene attribute ``optics_set``).
    description : str
        One line for listings.
    bands : tuple of str
        Bands of :data:`surrogate3d.scenes.optics.BANDS`.
    gas_absorption : dict
        Band -> ``{"column_optical_depth": tau [1], "scale_height": H [m]}``.
    """

    name: str
    description: str
    bands: tuple
    gas_absorption: dict

    def generator_options(self):
        """Keyword arguments of :func:`surrogate3d.scenes.generator.generate_scene`."""
        return {"bands": self.bands, "gas_absorption": {b: dict(v) for b, v in self.gas_absorption.items()}}


#: Scale height of the water-vapour-like absorber [m] (common practice, about 2 km).
_VAPOUR_SCALE_HEIGHT = 2000.0

#: The named optics sets.  ``two_band_moist``: a near-infrared absorber of column optical
#: depth 0.3 within the domain, so that an overhead sun loses 1 - exp(-0.3) = 26 % of its
#: near-infrared direct beam to it, the order of clear-sky solar absorption by water
#: vapour (about a fifth of all sunlight is absorbed in the atmosphere, most of it by
#: water vapour in the near infrared: Kiehl and Trenberth 1997, from memory; 54 % of
#: sunlight is in the near-infrared band).  ``two_band_dry``: column optical depth 0.01,
#: under 1 % of the near-infrared direct beam (negligible).  ``visible_only``: the
#: visible band alone (solar weight 1), conservative cloud droplets, no gas.
#:
#: Kiehl, J. T. and K. E. Trenberth (1997), Earth's annual global mean energy budget,
#: Bull. Amer. Meteor. Soc. 78, 197-208.
OPTICS_SETS = {
    "two_band_moist": OpticsSet(
        "two_band_moist", "visible and near infrared, strong near-infrared vapour absorber",
        ("visible", "near_infrared"),
        {"near_infrared": {"column_optical_depth": 0.3, "scale_height": _VAPOUR_SCALE_HEIGHT}}),
    "two_band_dry": OpticsSet(
        "two_band_dry", "visible and near infrared, negligible near-infrared vapour absorber",
        ("visible", "near_infrared"),
        {"near_infrared": {"column_optical_depth": 0.01, "scale_height": _VAPOUR_SCALE_HEIGHT}}),
    "visible_only": OpticsSet(
        "visible_only", "the visible band alone: no absorption by gas or droplets", ("visible",), {}),
}


def get_optics_set(name):
    """The :class:`OpticsSet` of a name of :data:`OPTICS_SETS`.

    Raises
    ------
    surrogate3d.errors.ParameterError
        Unknown name.

    Examples
    --------
    >>> get_optics_set("visible_only").bands
    ('visible',)
    """
    return OPTICS_SETS[check_option("optics_set", name, OPTICS_SETS)]
