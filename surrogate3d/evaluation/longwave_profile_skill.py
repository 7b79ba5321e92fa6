"""Skill of the longwave heating-rate (profile) correction on held-out scenes.

The longwave twin of :mod:`surrogate3d.evaluation.profile_skill`.  The profile model's
per-layer net-absorption corrections are made to sum to a column model's
``longwave_atmosphere_net_absorption`` correction
(:func:`surrogate3d.runtime.longwave_profile.match_longwave_column`), as a host would use
them, and scored in the cloudy host columns (total cloud fraction above 0), pooled over
their layers, against no correction (the independent column): RMSE of the layer net
absorption [W m-2] and of the heating rate [K day-1, where the scenes give pressures],
overall and by height relative to the column's cloud top, with the noise floor of the
per-layer Monte Carlo targets.
"""

import numpy as np
import pandas as pd

from ..learn.longwave_profile_model import LONGWAVE_LAYER_TARGET, longwave_layer_fields
from ..pairs.layer_features import layer_sum
from ..pairs.longwave_layer_features import longwave_layer_features
from ..runtime.longwave_profile import LONGWAVE_LAYER_FIELDS, match_longwave_column
from ..solvers.heating import DRY_AIR_SPECIFIC_HEAT, SECONDS_PER_DAY, STANDARD_GRAVITY
from . import figures
from .predictions import NO_CORRECTION, raw_correction
from .profile_skill import ProfileEvaluation, column_integral, height_rows, masked_rmse, rmse_reduction
from .scored_model import profile_column_model

#: The column target the layers are matched to.
COLUMN_TARGET = "longwave_atmosphere_net_absorption"


def heating_rate_per_flux(pressure_thickness):
    """Heating rate [K day-1] of 1 W m-2 absorbed in a layer of pressure thickness ``dp`` [Pa].

    ``g / c_p * 86400 / dp``, the hydrostatic layer mass per unit area being ``dp / g``
    (Liou 2002).

    Parameters
    ----------
    pressure_thickness : array_like
        [Pa]; NaN gives NaN.

    Returns
    -------
    ndarray [K day-1 per W m-2]

    References
    ----------
    Liou, K. N., 2002: An Introduction to Atmospheric Radiation, 2nd ed. Academic Press.

    Examples
    --------
    >>> round(float(heating_rate_per_flux(10000.0)), 4)  # 100 hPa
    0.0843
    """
    return STANDARD_GRAVITY / DRY_AIR_SPECIFIC_HEAT * SECONDS_PER_DAY / np.asarray(pressure_thickness, dtype=float)


def score_longwave_profiles(name, estimator, pairs, column_correction=None, column_model=None, sample_scenes=3,
                            layers=None):
    """Score a longwave profile model on a longwave pair table (normally the held-out scenes).

    Parameters
    ----------
    name : str
    estimator : surrogate3d.learn.longwave_profile_model.LongwaveProfileCorrection
    pairs : xarray.Dataset
        A longwave pair table with per-layer variables.
    column_correction : array_like (n_sample,), optional
        The column ``longwave_atmosphere_net_absorption`` correction to match [W m-2];
        default the profile's own sum.
    column_model : str, optional
        Name of the column model that gave ``column_correction``.
    sample_scenes : int
        Scenes (those of the largest domain-mean 3D change) whose domain-mean profiles are
        kept for the figure.
    layers : ndarray (n_sample, n_layer), optional
        The profile model's layer corrections of ``pairs`` [W m-2], if already predicted.

    Returns
    -------
    surrogate3d.evaluation.profile_skill.ProfileEvaluation
        ``table`` has the columns ``quantity, units, predictor, rmse, rmse_reduction,
        noise_floor, n``: the model matched to the column correction (``name``), its own
        column sum (``name (own column sum)``) and no correction; ``noise_floor`` is
        ``1 - sqrt(mean(s^2)) / RMSE(no correction)`` with ``s`` the targets' Monte Carlo
        standard errors, the share a perfect model could show.
    """
    fields = longwave_layer_fields(pairs)
    raw = estimator.predict_pairs(pairs) if layers is None else layers
    own_sum = layer_sum(raw)
    column = own_sum if column_correction is None else np.asarray(column_correction, dtype=np.float64)
    predicted = match_longwave_column(raw, column)
    target = pairs[LONGWAVE_LAYER_TARGET].values
    noise = pairs[f"{LONGWAVE_LAYER_TARGET}_standard_error"].values
    cloudy = (pairs["cloud_fraction"].values > 0.0)[:, None] & np.isfinite(target)
    heating = pairs["layer_heating_rate_target"].values
    per_flux = heating_rate_per_flux(pairs["host_layer_pressure_thickness"].values)
    quantities = [("layer net absorption", "W m-2", target, noise, 1.0, cloudy),
                  ("heating rate", "K day-1", heating, noise * per_flux, per_flux, cloudy & np.isfinite(heating))]
    rows, by_height = [], []
    local = longwave_layer_features(*(fields[key] for key in LONGWAVE_LAYER_FIELDS), fields["surface_temperature"])
    height = local[..., 0]
    for quantity, units, truth, error, factor, mask in quantities:
        if not mask.any():
            continue
        guess = predicted * factor
        # The noise floor is the share a perfect model would remove, its error the targets' noise.
        floor = rmse_reduction(error, truth, mask)
        for predictor, values in ((NO_CORRECTION, np.zeros_like(truth)), (name, guess),
                                  (f"{name} (own column sum)", raw * factor)):
            rows.append({"quantity": quantity, "units": units, "predictor": predictor,
                         "rmse": masked_rmse(values - truth, mask),
                         "rmse_reduction": rmse_reduction(values - truth, truth, mask), "noise_floor": floor,
                         "n": int(mask.sum())})
        by_height += height_rows(quantity, units, truth, guess, mask, height)
    column_target = pairs["target_value"].sel(target=COLUMN_TARGET).values
    integral = column_integral(own_sum, column, column_target, cloudy.any(axis=1), predicted)
    return ProfileEvaluation(model=name, column_model=column_model, table=pd.DataFrame(rows),
                             by_height=pd.DataFrame(by_height), column_integral=integral,
                             mean_profiles=_mean_profiles(pairs, predicted, sample_scenes))


def _mean_profiles(pairs, predicted, count):
    """Domain-mean net-absorption profiles [W m-2 per layer] of the ``count`` scenes whose
    domain-mean 3D change is largest (finest host resolution of each)."""
    change = pairs[LONGWAVE_LAYER_TARGET].values
    scene = np.asarray(pairs["scene"].values).astype(str)
    resolution = np.asarray(pairs["host_resolution"].values)
    size = {}
    for name in sorted(set(scene)):
        pick = (scene == name) & (resolution == resolution[scene == name].min())
        size[name] = float(np.sqrt(np.nanmean(np.nanmean(change[pick], axis=0) ** 2)))
    out = []
    for name in sorted(size, key=lambda s: -size[s])[:count]:
        pick = (scene == name) & (resolution == resolution[scene == name].min())
        bottom = pairs["host_layer_bottom"].values[pick][0]
        top = pairs["host_layer_top"].values[pick][0]
        ica = np.mean(pairs["independent_column_layer_net_absorption"].values[pick], axis=0)
        out.append({"scene": name, "height": 0.5 * (bottom + top), "thickness": top - bottom,
                    "independent_column": ica,
                    "full_3d": np.mean(pairs["full_3d_layer_net_absorption"].values[pick], axis=0),
                    "corrected": ica + np.mean(predicted[pick], axis=0)})
    return out


def longwave_profile_skill(run, held, targets, notes):
    """The longwave profile model's held-out skill, or None without a profile model.

    As a host would use it: the layers are matched to the column model's (the first
    boosted model, else the first) ``longwave_atmosphere_net_absorption`` correction when
    that is a target, and are zero where its clear-sky gate holds; otherwise they keep
    their own sum.

    Parameters
    ----------
    run : surrogate3d.learn.model_directory.TrainingRun
    held : xarray.Dataset
        The held-out samples of a longwave pair table.
    targets : list of str
        The run's column targets.
    notes : list of str
        Appended to when the table has no per-layer variables.

    Returns
    -------
    surrogate3d.evaluation.profile_skill.ProfileEvaluation or None
    """
    if run.profile is None:
        return None
    if LONGWAVE_LAYER_TARGET not in held:
        notes.append("The longwave profile model is not scored: the pairs table has no per-layer variables.")
        return None
    estimator = run.profile.estimator
    layers = estimator.predict_pairs(held)
    if COLUMN_TARGET not in targets:
        return score_longwave_profiles(run.profile.name, estimator, held, layers=layers)
    model = profile_column_model(run)
    correction, gated, _ = raw_correction(model, held, targets)
    layers = np.where(gated[:, None] & np.isfinite(layers), 0.0, layers)
    return score_longwave_profiles(run.profile.name, estimator, held, correction[:, targets.index(COLUMN_TARGET)],
                                   model.name, layers=layers)


def longwave_profile_panels(mean_profiles, by_height, model_name):
    """Domain-mean longwave net-absorption profiles of sample scenes and their 3D change, and RMSE by height.

    Top row: 3D, independent-column and corrected net absorption per km of every layer;
    bottom row: 3D minus independent column, and the model's change; right: RMSE in the
    cloudy columns by height above the cloud top (heating rate, and layer net absorption).

    Parameters
    ----------
    mean_profiles : list of dict
        :attr:`~surrogate3d.evaluation.profile_skill.ProfileEvaluation.mean_profiles` of
        :func:`score_longwave_profiles`.
    by_height : pandas.DataFrame
        Its ``by_height``.
    model_name : str

    Returns
    -------
    matplotlib.figure.Figure
    """
    return figures.profile_panels(mean_profiles, by_height, model_name, longwave=True)
