"""Published simple corrections of the independent-column fluxes.

* :class:`TiltedIndependentColumn` - columns tilted toward the sun (Varnai and Davies
  1999; Wapler and Mayer 2008);
* :class:`NonlocalIndependentPixel` - independent-column fluxes smoothed over the
  radiative smoothing scale (Marshak et al. 1995; Davis et al. 1997);
* longwave: the effective cloud fraction of broken clouds (Killen and Ellingson 1994),
  :mod:`surrogate3d.baselines.effective_cloud_fraction` (numpy only: the runtime's
  longwave features use it).

Each computes its corrections on the benchmark grid while the pair table is built; the
registry of their names and pair-table variables is :data:`surrogate3d.core.data_model.BASELINES`
(:data:`~surrogate3d.core.data_model.LONGWAVE_BASELINES`).  The names below are imported
on first use, so that importing the numpy-only longwave module does not import the
shortwave ones (which need xarray).
"""

import importlib

_WHERE = {"Baseline": ".base", "NonlocalIndependentPixel": ".nonlocal_pixel",
          "radiative_smoothing_scale": ".nonlocal_pixel", "TiltedIndependentColumn": ".tilted_column",
          "two_stream_fluxes": ".tilted_column"}

__all__ = ["Baseline", "NonlocalIndependentPixel", "TiltedIndependentColumn", "radiative_smoothing_scale",
           "two_stream_fluxes"]


def __getattr__(name):
    if name in _WHERE:
        return getattr(importlib.import_module(_WHERE[name], __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(list(globals()) + list(_WHERE))
