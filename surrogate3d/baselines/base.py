"""The common interface of the published simple corrections.

A baseline predicts the 3D-minus-independent-column correction of the targets of
:data:`surrogate3d.core.data_model.TARGETS`.  The corrections need the benchmark scene,
so they are computed on the benchmark grid while the pair table is built
(:meth:`Baseline.corrections`), coarse-grained to host columns and stored in the table
under the variable :data:`surrogate3d.core.data_model.BASELINES` names; evaluation reads
them from there like any other prediction.
"""

from ..core.data_model import BASELINES


class Baseline:
    """A published simple correction.

    Subclasses set ``name`` (a key of :data:`surrogate3d.core.data_model.BASELINES`) and
    offer ``corrections(scene, solar_zenith_angle, solar_beam_azimuth, independent_column)``
    returning one (ny, nx) array per target on the benchmark grid.
    """

    name = None

    @property
    def label(self):
        """Its name in reports."""
        return BASELINES[self.name].label

    @property
    def variable(self):
        """The pair-table variable holding its predictions."""
        return BASELINES[self.name].variable

    def __repr__(self):
        return f"{type(self).__name__}()"
