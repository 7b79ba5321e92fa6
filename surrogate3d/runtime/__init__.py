"""The numpy-only runtime: apply an exported 3D correction inside a host model.

Imports only numpy, the standard library and the numpy-only parts of surrogate3d
(:mod:`surrogate3d.errors`, :mod:`surrogate3d.pairs.features`,
:mod:`surrogate3d.pairs.recipe`), so a host model can use it without scikit-learn,
xarray or numba.

>>> from surrogate3d.runtime import load_coefficients
>>> model = load_coefficients("export/ridge.coefficients.json")    # doctest: +SKIP
>>> corrections = model.predict(features)         # (n_column, n_feature) -> (n_column, n_target)
>>> corrections = model.predict_host(host_fields)  # features computed from host fields first
>>> model.envelope_check(features).outside         # columns unlike the training data (flagged, not refused)

``docs/host-model-guide.md`` shows both, and the Fortran module; ``docs/export-format.md``
documents the file.
"""

from .document import FORMAT_NAME, FORMAT_VERSION
from .model import CorrectionModel, load_coefficients

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "CorrectionModel", "load_coefficients"]
