"""Loading a coefficient file and predicting the 3D correction (numpy only).

:func:`load_coefficients` reads the JSON twin of a coefficient file and checks it;
:class:`CorrectionModel` predicts from a feature matrix or straight from host-model
fields, computing the features with the recipe stored in the file through
:mod:`surrogate3d.pairs.features`.
"""

import json
import warnings
from pathlib import Path

import numpy as np

from ..errors import FormatError, ParameterError, ValidationError
from ..pairs.features import FEATURES, column_name, compute_features
from ..pairs.longwave_features import LONGWAVE_TARGETS, LongwaveFeatureRecipe, feature_recipe_from_dict, \
    longwave_halo_width, longwave_host_features, recipe_spectrum
from ..pairs.recipe import FeatureRecipe
from ..core.coefficient_format import (PROFILE_FIELD, check_document, clear_sky_gate, document_from_json,
                                       ridge_clips_features, target_transforms)
from ..core.data_model import TARGETS
from ..core.validation import fail, first_nonfinite
from .envelope import EnvelopeCheck, EnvelopeWarning, training_envelope
from .halo import subdomain_features
from .longwave_profile import longwave_density_to_layers, longwave_layer_rows, match_longwave_column
from .profile import density_to_layers, layer_rows, match_column_integral
from .ridge import RidgeModel
from .trees import TreeEnsemble


class CorrectionModel:
    """A trained 3D correction loaded from a coefficient file.

    Build it with :func:`load_coefficients` (or :meth:`from_document`).

    Attributes
    ----------
    name : str
        Model name given at training.
    kind : str
        ``"ridge"`` or ``"boosted"``.
    feature_names, feature_units : list of str
        The model's input columns, in order, and their units.
    target_names : list of str
        The predicted corrections, in order: 3D minus independent-column flux as a
        fraction of the incident flux on the horizontal [1]; for a longwave model 3D
        minus independent column of the longwave fields [W m-2].
    recipe : surrogate3d.pairs.recipe.FeatureRecipe or surrogate3d.pairs.longwave_features.LongwaveFeatureRecipe
        The feature recipe of the training pairs (names, parameters).
    spectrum : str
        ``"shortwave"`` or ``"longwave"`` (the recipe's).
    clear_sky_features : list of str
        The clear-sky gate: where every one of these features has
        ``|x| <= clear_sky_tolerance``, the correction is exactly 0 (empty: no gate).
    clear_sky_tolerance : float
    envelope : surrogate3d.runtime.envelope.TrainingEnvelope or None
        Ranges and distance threshold of the training columns; None for a file written
        before format 1.2 (then no column is flagged).
    target_transforms : list of dict or None
        Per target, how the model's output becomes the correction (None: it is the
        correction; :func:`surrogate3d.core.coefficient_format.target_transforms`).
    layer_feature_names : list of str
        A heating-rate (profile) model's features of one host layer, the last of
        :attr:`feature_names` (empty for a column model); :meth:`predict_profile` makes
        them from the host's layer fields.
    column_feature_names : list of str
        The features of the host column (all of :attr:`feature_names` for a column model).
    document : dict
        Everything the file holds (provenance, skill table, hyperparameters ...).

    Examples
    --------
    >>> model = load_coefficients("models/default/boosted.coefficients.json")
    >>> model.kind, model.n_features, model.target_names[0]
    ('boosted', 44, 'surface_downward_flux')
    """

    def __init__(self, document, source="<document>"):
        check_document(document, source)
        self.document = document
        self.source = source
        self.name = document["model"]["name"]
        self.kind = document["model"]["kind"]
        self.feature_names = list(document["features"]["names"])
        self.feature_units = list(document["features"]["units"])
        self.target_names = list(document["targets"]["names"])
        self.layer_feature_names = list((document.get(PROFILE_FIELD) or {}).get("layer_features", []))
        n_column = len(self.feature_names) - len(self.layer_feature_names)
        self.column_feature_names = self.feature_names[:n_column]
        self.recipe = _recipe(document, self.column_feature_names, self.feature_units[:n_column], source)
        self.spectrum = recipe_spectrum(self.recipe)
        known = LONGWAVE_TARGETS if self.spectrum == "longwave" else TARGETS
        unknown = [t for t in self.target_names if t not in known]
        if unknown and not self.layer_feature_names:
            raise FormatError(f"coefficient file {source!r}: targets.names has unknown targets {unknown}; "
                              f"known: {list(known)}")
        if self.spectrum == "longwave":
            self._needed = list(self.column_feature_names)
        else:
            producer = _column_producers(self.recipe)
            self._needed = [f for f in self.recipe.features
                            if any(producer[c] == f for c in self.column_feature_names)]
        self._gate, self.clear_sky_tolerance = clear_sky_gate(document)
        self.clear_sky_features = [self.feature_names[k] for k in self._gate]
        self.envelope = training_envelope(document)
        self.target_transforms = target_transforms(document)
        arrays = document[self.kind]
        if self.kind == "ridge":
            clip = ({"clip_min": self.envelope.feature_min, "clip_max": self.envelope.feature_max}
                    if ridge_clips_features(document) else {})
            self._evaluator = RidgeModel(**arrays, **clip)
        else:
            self._evaluator = TreeEnsemble(len(self.feature_names), **arrays)

    @classmethod
    def from_document(cls, document, source="<document>"):
        """Model from a coefficient document (arrays as numpy arrays); checks it first."""
        return cls(document, source)

    def __repr__(self):
        return (f"CorrectionModel(name={self.name!r}, kind={self.kind!r}, features={len(self.feature_names)}, "
                f"targets={len(self.target_names)})")

    @property
    def n_features(self):
        return len(self.feature_names)

    @property
    def n_targets(self):
        return len(self.target_names)

    def predict(self, features, check_envelope=True):
        """Predicted corrections of many columns.

        Parameters
        ----------
        features : array_like (n_column, n_feature)
            Feature values in the order and units of :attr:`feature_names` /
            :attr:`feature_units`; finite.
        check_envelope : bool
            Warn (:class:`~surrogate3d.runtime.envelope.EnvelopeWarning`, with the count)
            when columns lie outside the training envelope; :meth:`envelope_check` says
            which.  False skips the warning (a host that calls :meth:`envelope_check`
            itself); the test still runs for a model whose targets fall back to their
            offset outside the envelope.

        Returns
        -------
        ndarray (n_column, n_target)
            Corrections [1] (fractions of the incident flux on the horizontal), columns
            in the order of :attr:`target_names`; exactly 0 in the columns the
            clear-sky gate selects (:meth:`clear_sky_mask`); for a target whose transform
            says ``outside_envelope = "offset"``, the offset alone (the physical prior) in
            the columns outside the training envelope.

        Raises
        ------
        surrogate3d.errors.ValidationError
            Wrong shape, or a value that is not finite (sample and feature named).
        """
        X = self._checked(features)
        gated = self._gated_rows(X)
        fallback = self.envelope is not None and any(
            spec is not None and spec.get("outside_envelope") == "offset" for spec in self.target_transforms)
        check = self._envelope_check(X, gated) if fallback or (check_envelope and self.envelope is not None) else None
        corrections = self._transformed(X, self._evaluator.predict(X), check.outside if fallback else None)
        corrections[gated] = 0.0
        if check_envelope and check is not None:
            if check.n_outside:
                warnings.warn(EnvelopeWarning(
                    f"{check.n_outside} of {X.shape[0]} columns lie outside the training envelope of model "
                    f"{self.name!r}: " + ("targets with a physical prior fall back to it there, the others "
                                          "extrapolate" if fallback else "their corrections extrapolate")
                    + " (see envelope_check)"), stacklevel=2)
        return corrections

    def _transformed(self, X, output, outside=None):
        """Corrections from the model's output: ``offset + scale * output`` per target with a
        transform (:func:`surrogate3d.core.coefficient_format.target_transforms`); the offset
        alone in the ``outside`` columns (bool) for targets whose transform says so."""
        for m, spec in enumerate(self.target_transforms):
            if spec is None:
                continue
            if outside is not None and spec.get("outside_envelope") == "offset":
                output[outside, m] = 0.0
            if spec["scale_feature"] >= 0:
                output[:, m] *= np.maximum(X[:, spec["scale_feature"]], spec["scale_floor"])
            # Term by term, in the file's order: the Fortran module adds them the same way.
            for k, c in zip(spec["offset_features"], spec["offset_coefficients"]):
                output[:, m] += c * X[:, k]
        return output

    def envelope_check(self, features):
        """Which columns lie outside the training envelope: a flag per column and their count.

        A column is outside when a feature leaves its training range or its Mahalanobis
        distance from the training columns exceeds the stored threshold
        (:mod:`surrogate3d.runtime.envelope`); a column the clear-sky gate selects never is.

        Parameters
        ----------
        features : array_like (n_column, n_feature)
            As for :meth:`predict`.

        Returns
        -------
        surrogate3d.runtime.envelope.EnvelopeCheck
            ``outside`` (the flag), ``n_outside``, ``outside_range``, ``beyond_distance``,
            ``distance``, ``first_feature_outside``; for a file without an envelope
            ``available`` is False, nothing is flagged and ``note`` says why.
        """
        X = self._checked(features)
        return self._envelope_check(X, self._gated_rows(X))

    def _envelope_check(self, X, gated_rows):
        if self.envelope is None:
            return EnvelopeCheck.unavailable(X.shape[0], f"coefficient file {self.source!r} (format "
                                                         f"{self.document['format_version']}) has no training "
                                                         "envelope: no column is checked")
        gated = np.zeros(X.shape[0], dtype=bool)
        gated[gated_rows] = True
        return self.envelope.check(X, gated)

    def clear_sky_mask(self, features):
        """Which columns the clear-sky gate selects (they get exactly zero correction).

        Parameters
        ----------
        features : array_like (n_column, n_feature)
            As for :meth:`predict`.

        Returns
        -------
        ndarray of bool (n_column,)
            All False for a model without a gate.
        """
        X = self._checked(features)
        gated = np.zeros(X.shape[0], dtype=bool)
        gated[self._gated_rows(X)] = True
        return gated

    def _gated_rows(self, X):
        """Indices of the rows the gate selects: each further gate feature is tested only where
        the earlier ones are zero (few rows), which keeps the gate a few percent of a ridge prediction."""
        if not self._gate:
            return np.zeros(0, dtype=np.intp)
        rows = np.flatnonzero(np.abs(X[:, self._gate[0]]) <= self.clear_sky_tolerance)
        for k in self._gate[1:]:
            rows = rows[np.abs(X[rows, k]) <= self.clear_sky_tolerance]
        return rows

    def _checked(self, features):
        X = np.asarray(features, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != self.n_features:
            raise ValidationError(f"features must have shape (n_column, {self.n_features}) for model "
                                  f"{self.name!r}; got {X.shape}")
        found = first_nonfinite(X)
        if found is not None:
            (i, j), count = found
            fail("features", "finite", X[i, j], f"column {i}, feature {self.feature_names[j]!r}", count,
                 ValidationError)
        return X

    def host_features(self, host_fields, halo=None):
        """The model's feature matrix computed from host-model fields with the stored recipe.

        Parameters
        ----------
        host_fields : dict of ndarray
            Host fields on a periodic ``(ny, nx)`` grid (see
            :mod:`surrogate3d.pairs.features`), or on a sub-domain with a halo; only those
            the model's features use are needed.  A longwave model reads the fields of
            :func:`surrogate3d.pairs.longwave_features.longwave_host_features` and the
            host's own independent-column longwave fields under their target names
            (``longwave_surface_downward_flux`` ... [W m-2]).
        halo : int or (int, int), optional
            The fields are those of a sub-domain with a halo this wide (columns, or
            ``(hx, hy)``), at least what the features read
            (:func:`surrogate3d.runtime.halo.halo_width`); the features are those of the
            sub-domain's own columns, equal to the whole periodic domain's
            (:func:`~surrogate3d.runtime.halo.subdomain_features`; a longwave model's
            halo must hold its widest neighbour window,
            :func:`~surrogate3d.pairs.longwave_features.longwave_halo_width`).  Default: periodic.

        Returns
        -------
        ndarray (ny * nx, n_feature)
            Rows in row-major ``(iy, ix)`` order (own columns only with a halo).

        Raises
        ------
        surrogate3d.errors.ValidationError
            Missing or malformed host fields.
        """
        if self.spectrum == "longwave":
            return self._longwave_features(host_fields, halo)
        recipe = FeatureRecipe(self._needed, self.recipe.parameters, name=self.recipe.name)
        columns = recipe.column_names()
        matrix = compute_features(host_fields, recipe) if halo is None else subdomain_features(host_fields, recipe,
                                                                                               halo)
        if columns == self.column_feature_names:
            return matrix
        return matrix[:, [columns.index(name) for name in self.column_feature_names]]

    def _longwave_features(self, host_fields, halo):
        fluxes = {flux: host_fields[flux] for flux in LONGWAVE_TARGETS if flux in host_fields}
        if halo is None:
            values = longwave_host_features(host_fields, fluxes)
            return np.stack([np.asarray(values[name], dtype=np.float64).ravel() for name in self.column_feature_names],
                            axis=1)
        hx, hy = (halo, halo) if np.isscalar(halo) else tuple(halo)
        if not all(isinstance(h, (int, np.integer)) and not isinstance(h, bool) and h >= 0 for h in (hx, hy)):
            raise ParameterError(f"halo must be an integer >= 0 or a pair (hx, hy) of them; got {halo!r}")
        for key in ("dx", "dy", "total_cloud_fraction"):
            if key not in host_fields:
                raise ValidationError(f"longwave host fields lack {key!r}")
        ny, nx = np.shape(host_fields["total_cloud_fraction"])
        if ny <= 2 * hy or nx <= 2 * hx:
            raise ParameterError(f"a halo of ({hx}, {hy}) columns leaves no own column in host fields of {nx} x {ny} "
                                 "columns (x, y)")
        rx, ry = longwave_halo_width(LongwaveFeatureRecipe(self.column_feature_names), host_fields["dx"],
                                     host_fields["dy"])
        if rx > hx or ry > hy:
            raise ValidationError(f"the longwave neighbour windows read {rx} columns along x and {ry} along y; the "
                                  f"halo has {hx} and {hy}")
        values = longwave_host_features(host_fields, fluxes)
        return np.stack([np.asarray(values[name], dtype=np.float64)[hy:ny - hy, hx:nx - hx].ravel()
                         for name in self.column_feature_names], axis=1)

    def predict_profile(self, column_features, layer_fields, column_correction=None, check_envelope=True):
        """The heating-rate model's absorption correction of every host layer.

        Parameters
        ----------
        column_features : array_like (n_column, len(column_feature_names))
            The columns' features (:meth:`host_features`).
        layer_fields : dict of array_like
            Per column and layer (n_column, n_layer), bottom first: ``bottom`` and ``top``
            [m], ``optical_depth`` [1], ``cloud_fraction`` [1],
            ``independent_column_absorption`` [1] (the host's own, fraction of the
            incident flux), ``slant_optical_depth_above`` [1]
            (:func:`surrogate3d.pairs.profiles.slant_optical_depth_above`); and
            ``cos_solar_zenith`` (n_column,).  NaN edges mark layers a column does not have.
            A longwave model reads instead ``bottom``, ``top`` [m], ``cloud_fraction`` [1],
            ``liquid_water_path`` [g m-2], ``air_temperature`` [K] and
            ``two_stream_net_absorption`` [W m-2] (the host's own independent-column net
            absorption of the layer) per layer, and ``surface_temperature`` (n_column,) [K]
            (:data:`surrogate3d.runtime.longwave_profile.LONGWAVE_LAYER_FIELDS`).
        column_correction : array_like (n_column,), optional
            The column absorption correction [1] (a column model's, after the consistency
            step) that the layers are made to sum to
            (:func:`~surrogate3d.runtime.profile.match_column_integral`); default none.
            Longwave: the column's ``longwave_atmosphere_net_absorption`` correction
            [W m-2] (:func:`~surrogate3d.runtime.longwave_profile.match_longwave_column`).
        check_envelope : bool
            As for :meth:`predict`.

        Returns
        -------
        ndarray (n_column, n_layer)
            Absorption correction of every layer [1], fractions of the incident flux on
            the horizontal (longwave: net-absorption correction [W m-2]); NaN in padding
            layers.

        Raises
        ------
        surrogate3d.errors.ValidationError
            A column model, or features of the wrong shape.
        surrogate3d.errors.ParameterError
            Missing or malformed layer fields (named).
        """
        if not self.layer_feature_names:
            raise ValidationError(f"model {self.name!r} is a column model; predict_profile needs a heating-rate "
                                  "(profile) model")
        X = np.asarray(column_features, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != len(self.column_feature_names):
            raise ValidationError(f"column_features must have shape (n_column, {len(self.column_feature_names)}) "
                                  f"for model {self.name!r}; got {X.shape}")
        longwave = self.spectrum == "longwave"
        rows, valid = (longwave_layer_rows if longwave else layer_rows)(X, layer_fields)
        density = np.full(rows.shape[0], np.nan)
        if valid.any():
            density[valid] = self.predict(rows[valid], check_envelope)[:, 0]
        if longwave:
            layers = longwave_density_to_layers(density, layer_fields)
            return layers if column_correction is None else match_longwave_column(layers, column_correction)
        layers = density_to_layers(density, layer_fields)
        if column_correction is None:
            return layers
        return match_column_integral(layers, column_correction, layer_fields["independent_column_absorption"])

    def predict_host(self, host_fields, check_envelope=True, halo=None):
        """Predicted corrections of every column of a host grid.

        Parameters
        ----------
        host_fields : dict of ndarray
            See :meth:`host_features`.
        check_envelope : bool
            As for :meth:`predict`.
        halo : int or (int, int), optional
            As for :meth:`host_features`: the corrections of a sub-domain's own columns.

        Returns
        -------
        ndarray (ny * nx, n_target)
            Corrections [1], rows in row-major ``(iy, ix)`` order, columns as
            :attr:`target_names`.
        """
        return self.predict(self.host_features(host_fields, halo), check_envelope)


def _column_producers(recipe):
    """Feature-matrix column name -> the recipe feature that computes it."""
    producer = {}
    for f in recipe.features:
        for radius in (recipe.parameters["neighbour_radii"] if FEATURES[f].per_radius else [None]):
            producer[column_name(f, radius)] = f
    return producer


def _recipe(document, names, units, source):
    try:
        recipe = feature_recipe_from_dict(document["feature_recipe"])
    except (ParameterError, FormatError, TypeError, ValueError) as exc:
        raise FormatError(f"coefficient file {source!r}: feature_recipe is not a valid feature recipe: {exc}") from None
    columns = dict(zip(recipe.column_names(), recipe.column_units()))
    missing = [n for n in names if n not in columns]
    if missing:
        raise FormatError(f"coefficient file {source!r}: features {missing} are not columns of the stored feature "
                          f"recipe, which makes {list(columns)}")
    wrong = [(n, u, columns[n]) for n, u in zip(names, units) if columns[n] != u]
    if wrong:
        name, unit, expected = wrong[0]
        raise FormatError(f"coefficient file {source!r}: feature {name!r} has units {unit!r}; the feature recipe "
                          f"gives {expected!r}")
    return recipe


def load_coefficients(path):
    """Read and check the JSON twin of a coefficient file.

    Parameters
    ----------
    path : str or Path
        ``*.coefficients.json`` written by ``surrogate3d export``.

    Returns
    -------
    CorrectionModel

    Raises
    ------
    surrogate3d.errors.FormatError
        The file is missing, not JSON, of another format version, lacks a field, has a
        corrupted or inconsistent array, or lists features that its recipe does not
        make; the message names the file and the field.

    Examples
    --------
    >>> from surrogate3d.runtime import load_coefficients
    >>> load_coefficients("models/default/boosted.coefficients.json")
    CorrectionModel(name='boosted', kind='boosted', features=44, targets=5)
    """
    path = Path(path)
    if not path.is_file():
        raise FormatError(f"coefficient file {str(path)!r} does not exist")
    if path.suffix.lower() == ".nc":
        raise FormatError(f"{str(path)!r} is the NetCDF file; the runtime reads its JSON twin "
                          f"{path.name[:-3] + '.json'!r} (or use surrogate3d.export.read_coefficients)")
    try:
        content = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise FormatError(f"coefficient file {str(path)!r} is not valid JSON ({exc})") from None
    return CorrectionModel(document_from_json(content, str(path)), str(path))
