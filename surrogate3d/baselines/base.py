"""The common interface of the published simple corrections.

A baseline predicts the 3D-minus-independent-column correction of the targets of
:data:`surrogate3d.pairs.targets.TARGETS`.  Corrections that need the benchmark scene
(the tilted and non-local approximations) are computed on the benchmark grid while the
pair table is built (:meth:`Baseline.corrections`), coarse-grained to host columns and
stored in the table; :meth:`Baseline.predict_pairs` then reads them back, so that
baselines and learned models are compared through the same method.  Each subclass
offers ``corrections(scene, solar_zenith_angle, solar_beam_azimuth, independent_column)``
returning one (ny, nx) array per target on the benchmark grid.
"""

import numpy as np

from ..errors import FormatError
from ..pairs.targets import TARGETS


class Baseline:
    """A published simple correction.

    Attributes
    ----------
    name : str
        Short name, used in reports.
    variable : str or None
        Pair-table variable holding its stored predictions (None if computed on the fly).
    """

    name = "baseline"
    variable = None

    def predict_pairs(self, pairs):
        """Predicted corrections for every sample of a pair table.

        Parameters
        ----------
        pairs : xarray.Dataset
            A pair table (:func:`surrogate3d.pairs.read_pairs`).

        Returns
        -------
        ndarray, shape (n_sample, n_target)
            Corrections in the table's target order, fractions of the incident flux on
            the horizontal.

        Raises
        ------
        surrogate3d.errors.FormatError
            The table does not hold this baseline's predictions.
        """
        if self.variable not in pairs:
            raise FormatError(f"pair table has no variable {self.variable!r} with the {self.name} baseline; "
                              f"rebuild it with `surrogate3d pairs`")
        order = [str(t) for t in pairs["target"].values]
        missing = [t for t in TARGETS if t not in order]
        if missing:
            raise FormatError(f"pair table lacks target(s) {missing}; expected {list(TARGETS)}")
        values = pairs[self.variable].transpose("sample", "target").values
        return np.asarray(values[:, [order.index(t) for t in TARGETS]], dtype=np.float64)

    def __repr__(self):
        return f"{type(self).__name__}()"


class NoCorrection(Baseline):
    """The independent-column flux taken as it is: a correction of zero everywhere.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> pairs = xr.Dataset({"target_value": (("sample", "target"), np.ones((3, 5)))})
    >>> NoCorrection().predict_pairs(pairs).shape
    (3, 5)
    """

    name = "no_correction"

    def predict_pairs(self, pairs):
        n = pairs.sizes["sample"]
        return np.zeros((n, len(TARGETS)))

    def corrections(self, scene, solar_zenith_angle, solar_beam_azimuth, independent_column=None):
        """Zero corrections on the benchmark grid."""
        shape = (scene.sizes["y"], scene.sizes["x"])
        return {t: np.zeros(shape) for t in TARGETS}
