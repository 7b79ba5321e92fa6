"""The numpy-only runtime: apply an exported 3D correction inside a host model.

Imports only numpy, the standard library and the numpy-only parts of surrogate3d
(:mod:`surrogate3d.errors`, :mod:`surrogate3d.pairs.features`,
:mod:`surrogate3d.pairs.recipe`), so a host model can use it without scikit-learn,
xarray or numba.

The shipped default correction and its sample columns (paths in a checkout):

>>> import numpy as np
>>> from surrogate3d.runtime import load_coefficients
>>> model = load_coefficients("models/default/ridge.coefficients.json")
>>> features = np.loadtxt("models/default/fortran/ridge_sample_features.txt", skiprows=1)
>>> model.predict(features, check_envelope=False).shape   # (n_column, n_feature) -> (n_column, n_target)
(64, 5)
>>> int(model.envelope_check(features).n_outside)   # columns unlike the training data (flagged, not refused)
1

``model.predict_host(host_fields)`` computes the features from host-model fields first.
``docs/host-model-guide.md`` shows both, and the Fortran module; ``docs/export-format.md``
documents the file.
"""

from ..core.coefficient_format import FORMAT_NAME, FORMAT_VERSION
from .model import CorrectionModel, load_coefficients

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "CorrectionModel", "load_coefficients"]
