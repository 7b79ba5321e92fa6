"""Published simple corrections of the independent-column fluxes, with a common interface.

* :class:`NoCorrection` - the independent-column flux as it is;
* :class:`TiltedIndependentColumn` - columns tilted toward the sun (Varnai and Davies
  1999; Wapler and Mayer 2008);
* :class:`NonlocalIndependentPixel` - independent-column fluxes smoothed over the
  radiative smoothing scale (Marshak et al. 1995; Davis et al. 1997).

Each has ``name`` and ``predict_pairs(pairs) -> ndarray (n_sample, n_target)``, like the
learned models.
"""

from .base import Baseline, NoCorrection
from .nonlocal_pixel import NonlocalIndependentPixel, radiative_smoothing_scale
from .tilted_column import TiltedIndependentColumn, two_stream_fluxes

#: The baselines, by name.
BASELINES = {b.name: b for b in (NoCorrection(), TiltedIndependentColumn(), NonlocalIndependentPixel())}

__all__ = ["BASELINES", "Baseline", "NoCorrection", "NonlocalIndependentPixel", "TiltedIndependentColumn",
           "radiative_smoothing_scale", "two_stream_fluxes"]
