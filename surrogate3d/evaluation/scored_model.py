"""A learned correction as the report scores it, whether an estimator or an exported file.

The report predicts, gates, checks the training envelope and permutes features through
:class:`ScoredModel`, so the same code scores the estimators of a model directory
(``surrogate3d evaluate``, ``surrogate3d score MODEL_DIR``) and the numpy runtime of an
exported coefficient file (``surrogate3d score FILE``).
"""

from dataclasses import dataclass

import numpy as np

from ..learn.pairs_table import feature_matrix


@dataclass
class ScoredModel:
    """One learned correction and what the report asks of it.

    Attributes
    ----------
    name : str
        Predictor name in the tables.
    kind : str
        ``"ridge"`` or ``"boosted"``.
    feature_names, target_names : list of str
        Input columns and predicted targets, in order.
    model : object
        A fitted :class:`~surrogate3d.learn.models.RidgeCorrection` /
        :class:`~surrogate3d.learn.models.BoostedCorrection`, or a
        :class:`~surrogate3d.runtime.CorrectionModel`.
    from_file : bool
        True for a coefficient file (the numpy runtime).
    """

    name: str
    kind: str
    feature_names: list
    target_names: list
    model: object
    from_file: bool = False

    @classmethod
    def from_estimator(cls, name, kind, estimator):
        """An estimator fitted with ``fit_pairs`` (feature and target names known)."""
        return cls(name, kind, list(estimator.feature_names_), list(estimator.target_names_), estimator)

    @classmethod
    def from_runtime(cls, model):
        """A :class:`~surrogate3d.runtime.CorrectionModel` loaded from a coefficient file."""
        return cls(model.name, model.kind, list(model.feature_names), list(model.target_names), model, True)

    def features(self, pairs):
        """The model's feature matrix of a pairs table (ValidationError naming a missing feature)."""
        return feature_matrix(pairs, self.feature_names, needed_by=f"model {self.name!r}")

    def predict(self, X):
        """Corrections (n_sample, n_target) [1], exactly 0 where the clear-sky gate holds."""
        if self.from_file:             # the report checks the envelope itself, with envelope_check
            return self.model.predict(X, check_envelope=False)
        return np.asarray(self.model.predict(X)).reshape(X.shape[0], -1)

    def clear_sky_mask(self, X):
        """Samples whose correction the clear-sky gate sets to zero."""
        return self.model.clear_sky_mask(X)

    def envelope_check(self, X):
        """:class:`~surrogate3d.runtime.envelope.EnvelopeCheck` of the samples."""
        return self.model.envelope_check(X)


def profile_column_model(run):
    """The column model of a training run whose correction a heating-rate model's layers are
    matched to (the boosted one, else the first), as a :class:`ScoredModel`."""
    kinds = {name: model.kind for name, model in run.models.items()}
    name = next((n for n, k in kinds.items() if k == "boosted"), next(iter(kinds)))
    return ScoredModel.from_estimator(name, kinds[name], run.models[name].estimator)
