"""Published simple corrections of the independent-column fluxes.

* :class:`TiltedIndependentColumn` - columns tilted toward the sun (Varnai and Davies
  1999; Wapler and Mayer 2008);
* :class:`NonlocalIndependentPixel` - independent-column fluxes smoothed over the
  radiative smoothing scale (Marshak et al. 1995; Davis et al. 1997).

Each computes its corrections on the benchmark grid while the pair table is built; the
registry of their names and pair-table variables is :data:`surrogate3d.core.data_model.BASELINES`.
"""

from .base import Baseline
from .nonlocal_pixel import NonlocalIndependentPixel, radiative_smoothing_scale
from .tilted_column import TiltedIndependentColumn, two_stream_fluxes

__all__ = ["Baseline", "NonlocalIndependentPixel", "TiltedIndependentColumn", "radiative_smoothing_scale",
           "two_stream_fluxes"]
